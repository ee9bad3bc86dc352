"""The simulator's version, reported in its *IDN? reply."""

__version__ = "0.1.0"
