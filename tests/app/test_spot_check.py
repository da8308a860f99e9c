"""The spot check in the window: Check > Spot check draws, the check panel walks the drawn fields by keys.

Invented data (the Larkhollow sample cards): the check here is of the window's
plumbing; the statistics are checked against published values in
tests/recognizer/review/test_residual.py.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog

from recognizer.batch import Batch
from recognizer.review import CONFIRMED, CORRECTED, READ, audit_status


def _state(batch: Batch, field_id: int) -> str:
    return batch.rows("SELECT state FROM fields WHERE id = ?", (field_id,))[0][0]


def test_spot_check_by_keys(window, qtbot, sample_batch):
    assert window.open_batch(sample_batch)
    panel = window.review
    dialog = window.spot_check()
    assert dialog is not None and dialog.intValue() == min(50, dialog.intMaximum())
    dialog.setIntValue(6)
    dialog.done(QDialog.DialogCode.Accepted)  # as OK does
    assert panel.spot
    status = audit_status(window.batch)
    assert status.drawn == 6 and status.record.population == dialog.intMaximum()
    assert panel.counter.text() == "Spot check: 6 of 6 left"
    assert "Spot check" in panel.place.text()
    first = panel.view
    assert first.field_id == status.open_ids[0] and _state(window.batch, first.field_id) == READ

    panel.setFocus()
    qtbot.keyClick(panel, Qt.Key.Key_Return)  # Enter: the value accepted is right
    assert _state(window.batch, first.field_id) == CONFIRMED
    assert panel.counter.text() == "Spot check: 5 of 6 left"

    second = panel.view
    assert second.field_id == status.open_ids[1]
    qtbot.keyClick(panel, Qt.Key.Key_Home)
    shown = (second.slots or second.digits)[0].read  # (a field read as empty takes typing in its first box)
    qtbot.keyClicks(panel, "7" if shown != "7" else "3")  # typing corrects: an error found
    qtbot.keyClick(panel, Qt.Key.Key_Return)
    assert _state(window.batch, second.field_id) == CORRECTED
    found = audit_status(window.batch)
    assert (found.audited, found.errors) == (2, 1)

    qtbot.keyClick(panel, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)  # undo works as in a check
    assert panel.view.field_id == second.field_id and _state(window.batch, second.field_id) == READ
    assert panel.counter.text() == "Spot check: 5 of 6 left"
    qtbot.keyClick(panel, Qt.Key.Key_Return)
    assert panel.counter.text() == "Spot check: 4 of 6 left"

    for _ in range(4):
        qtbot.keyClick(panel, Qt.Key.Key_Return)
    assert not panel.spot  # done: back to the fields to check
    assert "Spot check done" in window.last_message and "at most" in window.last_message
    found = audit_status(window.batch)
    assert found.finished and (found.audited, found.errors) == (6, 0)

    export = window.export_dialog()
    assert "0 wrong values in 6 fields" in export.residual.text()
    export.reject()


def test_spot_check_goes_on_where_it_was(window, sample_batch):
    assert window.open_batch(sample_batch)
    window.start_spot_check(3)
    window.review.save()
    window.review.leave_spot_check()
    assert not window.review.spot
    assert window.spot_check() is None  # an unfinished spot check goes on rather than drawing again
    assert window.review.spot and window.review.counter.text() == "Spot check: 2 of 3 left"
    assert len(window.batch.rows("SELECT id FROM audits")) == 1
