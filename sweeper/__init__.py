"""sweeper: hyperparameter sweeps for recurrent networks."""

__version__ = "0.1.0"
