"""The command line: one layer on top of the Python API, imported by nothing else."""

from relview.cli.app import main

__all__ = ["main"]
