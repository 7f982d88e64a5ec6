"""`python -m sweeper`."""

from sweeper.cli import main

main(prog_name="sweeper")
