"""The ``smle`` command line: one module per command, shared options and readers in :mod:`smle.cli.shared`."""

from smle.cli.app import main

__all__ = ["main"]
