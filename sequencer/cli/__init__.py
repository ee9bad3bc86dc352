"""The command line: the only place that reads arguments and draws on the terminal."""
