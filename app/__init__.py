"""Inkcount's desktop window (PySide6, Qt 6 widgets).

The window only shows and drives what :mod:`recognizer` does: reading scans
into a batch file, checking the digits, setting how strict the check is, and
exporting the checked CSV. It holds no recognition logic of its own.

Start it with ``inkcount window [BATCH_OR_SCANS...]`` (see :mod:`app.cli`).
"""
