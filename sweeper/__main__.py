"""`python -m sweeper`."""

from sweeper.cli import entry

entry()
