"""``python -m recognizer.cli``: the same as ``inkcount``."""

from recognizer.cli.main import run

run()
