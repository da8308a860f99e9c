"""The ``inkcount`` command line over the library."""

from recognizer.cli.main import main, run

__all__ = ["main", "run"]
