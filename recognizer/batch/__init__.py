"""The batch file: one SQLite file with pages, fields, digits and review actions, and its SQL.

Modules: :mod:`~recognizer.batch.store` (the :class:`Batch` file: open, create,
store a page, settings, change notices), :mod:`~recognizer.batch.schema`
(tables and migrations), :mod:`~recognizer.batch.lock` (one writer at a
time), :mod:`~recognizer.batch.flags` (the flagging rule applied to stored
fields), :mod:`~recognizer.batch.edits` (the writes review actions make),
:mod:`~recognizer.batch.queries` and :mod:`~recognizer.batch.review_rows`
(read-only views for the window, the review queue and the commands),
:mod:`~recognizer.batch.samples` (labelled boxes for retraining),
:mod:`~recognizer.batch.audits` (spot checks of the fields accepted without
a person). All SQL of
the program lives in this package.
"""

from recognizer.batch.store import SUFFIX, Batch, BatchFileError, BatchInUseError, BatchSettings, Change

__all__ = ["SUFFIX", "Batch", "BatchFileError", "BatchInUseError", "BatchSettings", "Change"]
