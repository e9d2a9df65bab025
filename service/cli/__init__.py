"""The ``certimatch`` command: one module per command, wired in :mod:`service.cli.main`."""

from service.cli.main import main

__all__ = ["main"]
