"""`python -m sequencer.cli`: the same as the `ccbench` command."""

from sequencer.cli.main import entry

entry()
