"""sweeper: stepped-sine frequency-response sweeps on bench instruments, judged and archived."""

__version__ = "0.1.0"
