"""Inkcount's desktop window (PySide6, Qt 6 widgets).

The window only shows and drives what :mod:`recognizer` does: reading scans
into a batch file, checking the digits, setting how strict the check is, and
exporting the checked CSV. It holds no recognition logic of its own.

Map:

* :mod:`app.main_window`: lays out the views, builds the menus, routes.
* :mod:`app.controller`: the open batch, its model, its change notices and
  its workers (open, create, close; read scans; remember the last batch).
* :mod:`app.workers`: long library calls in worker threads, one shape.
* :mod:`app.views`: what the window shows (pages, page, check panel, sort
  wall, model, start page, status bar, template editor).
* :mod:`app.dialogs`: strictness, export, retrain, file choosers, the form
  template chosen when scans are opened.
* :mod:`app.batch_access` (Qt images and change relay), :mod:`app.look`
  (colours, marks, words), :mod:`app.settings` (the window's own settings),
  :mod:`app.cli` (``inkcount window``), :mod:`app.screenshots` (the
  documentation's pictures).

Start it with ``inkcount window [BATCH_OR_SCANS...]`` (see :mod:`app.cli`).
"""
