"""The ``inkcount model`` commands that act on batches: retrain (refusing a worse model) and use."""

from __future__ import annotations

import argparse
from dataclasses import replace
from functools import partial

import pytest

import recognizer.digits.evaluation as evaluation_module
import recognizer.digits.retrain as retrain_module
from recognizer.batch.store import Batch
from recognizer.cli.model import add_model_commands
from recognizer.digits.model import load_model
from recognizer.digits.retrain import RetrainSettings
from recognizer.ingest import ingest_scans
from recognizer.review import CONFIRMED, CORRECTED, set_field
from recognizer.synth.batches import reviewed_batch, writer_cards


def _model_cli(*argv: str) -> int:
    parser = argparse.ArgumentParser()
    add_model_commands(parser.add_subparsers(dest="command"))
    args = parser.parse_args(["model", *argv])
    return args.func(args)


def test_retrain_refuses_a_worse_model_unless_forced(tmp_path, base, heldout, capsys, monkeypatch) -> None:
    # The command's settings made tiny (with its --epochs 2): one augmented copy of each
    # new sample, none of the replay digits, ten times the default learning rate; the
    # wrongly labelled model loses well over the 0.3 held-out points accepted.  The
    # held-out set is the one already loaded (same digits).
    monkeypatch.setattr(retrain_module, "RetrainSettings",
                        partial(RetrainSettings, new_copies=1, replay_copies=0, learning_rate=1e-3))
    monkeypatch.setattr(evaluation_module, "load_heldout", lambda: heldout)
    batch = reviewed_batch(tmp_path / "wrong.inkcount", 3, seed=3, model=base, wrong=True)
    batch.close()
    out = tmp_path / "new.npz"
    assert _model_cli("retrain", "--batch", str(batch.path), "-o", str(out), "--epochs", "2") == 1
    assert not out.exists()
    assert "not written" in capsys.readouterr().out
    assert _model_cli("retrain", "--batch", str(batch.path), "-o", str(out), "--epochs", "2", "--force") == 0
    assert load_model(out).metadata["retraining"]["accepted"] is False


def test_model_use_never_overwrites_corrected_values(tmp_path, base) -> None:
    files, truth = writer_cards(tmp_path / "cards", 2, seed=4)
    batch = Batch.create(tmp_path / "b.inkcount")
    ingest_scans(batch, files, model=base)
    fields = batch.rows("SELECT f.id, f.name, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
                        "JOIN files fl ON fl.id = p.file_id ORDER BY f.id")
    handled = fields[::3]
    for r in handled:  # a person's values, deliberately unlike anything a model would read
        value = truth[(r["path"], r["name"])]
        set_field(batch, r["id"], "".join(str((int(ch) + 5) % 10) for ch in value), reviewer="tester")
    people = {tuple(r) for r in batch.rows(
        "SELECT id, value, state FROM digits WHERE state IN (?, ?)", (CORRECTED, CONFIRMED))}
    assert people
    batch.close()
    other = replace(base, temperature=base.temperature * 3, metadata={**base.metadata, "name": "other"})
    other_path = tmp_path / "other.npz"
    other.save(other_path)
    assert _model_cli("use", str(other_path), "--batch", str(batch.path)) == 0
    with Batch.open(batch.path, read_only=True) as again:
        kept = {tuple(r) for r in again.rows(
            "SELECT id, value, state FROM digits WHERE state IN (?, ?)", (CORRECTED, CONFIRMED))}
        versions = {r[0] for r in again.rows(
            "SELECT model_version FROM digits WHERE NOT blank AND state NOT IN (?, ?)", (CORRECTED, CONFIRMED))}
        assert again.settings.model_version == load_model(other_path).version
    assert kept == people
    assert versions == {load_model(other_path).version}
