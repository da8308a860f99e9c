"""Calibration of the digit model, on validation data only.

Used after training (:func:`recognizer.digits.training.train_model`) and after
retraining (:func:`recognizer.digits.retrain.retrain`); see :func:`calibrate`:

1. The not-a-digit logit offset and the temperature T (Guo et al. 2017) are
   fitted jointly by maximum likelihood (:func:`fit_offset_and_temperature`) on
   the validation digits and generated validation not-a-digit marks
   (:func:`recognizer.digits.marks.not_digit_marks`, own seed, validation digits
   crossed out), the marks weighted as 1 % of the written boxes
   (``not_a_digit_prior``, a design assumption).
2. The threshold curve behind ``DigitModel.threshold_for`` is fitted
   (:func:`smoothed_residual_curve`) on the validation digits plus 10 mildly
   augmented copies of each (:func:`recognizer.digits.augment.mild_copies`),
   a share of them (``calibration_low_res``, 10 % for the committee model, as
   in its training mix) turned into low-resolution captures
   (:func:`recognizer.digits.augment.low_resolution`), so that the threshold
   also answers for faxed and coarsely scanned boxes.

Threshold curve, chosen by measurement (same trained members, offset 3; held-out
figures: threshold from the curve, share of held-out digits below it, and
residual error among the rest; targets 0.5 / 0.2 / 0.1 / 0.05 %):

======================================  ==========================================
curve                                   review share / held-out residual error
======================================  ==========================================
raw error count, 751 validation digits  7.6/0.33  38.7/0.03  38.8/0.03  38.8/0.03
raw count, + 5 training-strength copies 10.1/0.25 29.8/0.06  59.4/0.05  59.4/0.05
raw count, + 10 copies at strength 0.25 6.1/0.45  32.9/0.06  43.2/0.04  43.5/0.04
logistic fit, 751 validation digits     8.9/0.24  18.8/0.12  29.3/0.06  40.5/0.03
logistic fit, + 10 copies at 0.25       7.0/0.37  13.6/0.16  20.2/0.10  28.3/0.08
same, 80 % cluster-bootstrap bound      9.3/0.24  19.3/0.12  29.5/0.06  39.0/0.03
shipped: same, offset fitted (4.25)     7.0/0.34  14.6/0.16  21.3/0.10  29.6/0.06
======================================  ==========================================

(best possible on the held-out set at 0.1 %: 19.6 % review.)  Raw counts
cannot go below zero errors, so small targets send whatever lies above the
last validation error to review; training-strength copies are harder than
real digits (94.9 % vs 97.7 %) and push the threshold up.  The logistic
fit of error vs ``log(1 - confidence)`` on the real digits and mild copies
(98.1 % accurate, i.e. about as hard as the real ones) is the shipped
method; the bootstrap upper bound (resampling source digits, since copies
of one digit are not independent) was measured and left out: it brought back
most of the over-caution (29.5 % review at 0.1 %).  Out-of-fold predictions
were not tried: they would multiply the training time.

Not-a-digit offset: the maximum-likelihood offset depends on the share of
not-a-digit marks assumed in use: 5.5 for 0.5 %, 4.0-4.25 for 1 %, 2.5 for
2 %, 0 for 5 % (the share of marks in training, as it should be).
"""

from __future__ import annotations

from typing import Any, Protocol

import numpy as np

from recognizer.digits.augment import low_resolution, mild_copies
from recognizer.digits.model import NOT_A_DIGIT, DigitModel


class CalibrationSettings(Protocol):
    """The settings :func:`calibrate` reads (:class:`recognizer.digits.training.TrainSettings` has them)."""

    @property
    def not_a_digit_prior(self) -> float: ...

    @property
    def calibration_copies(self) -> int: ...

    @property
    def calibration_strength(self) -> float: ...

    # optional: ``calibration_low_res`` (share of the copies made low-resolution; 0 when absent)


def fit_temperature(proba: np.ndarray, labels: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Temperature T minimising the (weighted) NLL of ``softmax(log(proba) / T)``.

    Parameters
    ----------
    proba : ndarray, shape (n, k)
        Uncalibrated probabilities.
    labels : ndarray of int, shape (n,)
    weights : ndarray, shape (n,), optional
        Sample weights (default: all equal).

    Returns
    -------
    float, T in 0.05..20 (bounded 1-D search over log T).
    """
    return _fit_temperature(proba, labels, weights)[0]


def _fit_temperature(proba: np.ndarray, labels: np.ndarray, weights: np.ndarray | None) -> tuple[float, float]:
    """(T, weighted mean NLL at T)."""
    logp = np.log(np.clip(proba, 1e-12, None))
    idx = np.arange(len(labels))
    w = np.ones(len(labels)) if weights is None else np.asarray(weights, np.float64)
    w = w / w.sum()

    def nll(log_t: float) -> float:
        z = logp / np.exp(log_t)
        z = z - z.max(axis=1, keepdims=True)
        return float(w @ (np.log(np.exp(z).sum(axis=1)) - z[idx, labels]))

    from scipy.optimize import minimize_scalar  # here, not at the top: the window starts without scipy

    res = minimize_scalar(nll, bounds=(np.log(0.05), np.log(20.0)), method="bounded")
    return float(np.exp(res.x)), float(res.fun)


OFFSET_GRID = np.round(np.arange(-2.0, 10.001, 0.25), 2)


def with_offset(members: list, offset: float) -> list:
    """Copies of ``members`` with ``offset`` subtracted from the not-a-digit output bias."""
    shifted = []
    for layers in members:
        out = [(w, b.copy()) for w, b in layers]
        out[-1][1][NOT_A_DIGIT] -= offset
        shifted.append(out)
    return shifted


def fit_offset_and_temperature(
    members: list,
    digits: np.ndarray,
    labels: np.ndarray,
    marks: np.ndarray,
    *,
    prior: float,
    preprocessing: tuple[str, ...] | None = None,
) -> tuple[float, float]:
    """Not-a-digit logit offset and temperature by maximum likelihood on validation data.

    For each offset of :data:`OFFSET_GRID` (subtracted from every member's
    not-a-digit output bias) the temperature is fitted, minimising the NLL of
    the validation digits (total weight ``1 - prior``) and validation
    not-a-digit marks (class 10, total weight ``prior``); the offset with the
    lowest NLL wins.  The offset undoes the generous share of marks in training
    (a prior shift towards the expected share of marks in use).

    Parameters
    ----------
    members : list of list of (W, b)
        Ensemble members as trained (no offset applied).
    digits : ndarray, shape (n, 28, 28), 0..1
    labels : ndarray of int, shape (n,), 0..9
    marks : ndarray, shape (m, 28, 28), 0..1
        Not-a-digit marks (:func:`recognizer.digits.marks.not_digit_marks`).
    prior : float
        Expected share of not-a-digit marks among written boxes, 0 < prior < 1.
    preprocessing : tuple of str, optional
        Per member (``DigitModel.preprocessing``); None: every member deskews.

    Returns
    -------
    (offset, temperature)
    """
    if not 0.0 < prior < 1.0:
        raise ValueError(f"prior must be a share between 0 and 1, got {prior}")
    cells = np.concatenate([digits, marks])
    y = np.concatenate([labels, np.full(len(marks), NOT_A_DIGIT)]).astype(np.int64)
    w = np.concatenate([np.full(len(digits), (1 - prior) / len(digits)), np.full(len(marks), prior / len(marks))])
    # Members' logits once; the offset only lowers the not-a-digit logit of each.
    logits = DigitModel(members=members, preprocessing=preprocessing).member_logits(cells)
    shift = np.zeros(NOT_A_DIGIT + 1)
    shift[NOT_A_DIGIT] = 1.0
    best = (np.inf, 0.0, 1.0)
    for offset in OFFSET_GRID:
        proba = np.mean([_softmax(z - float(offset) * shift) for z in logits], axis=0)
        t, nll = _fit_temperature(proba, y, w)
        best = min(best, (nll, float(offset), t))
    return best[1], best[2]


def _softmax(z: np.ndarray) -> np.ndarray:
    z = z - z.max(axis=1, keepdims=True)
    e = np.exp(z)
    return e / e.sum(axis=1, keepdims=True)


def residual_curve(conf: np.ndarray, correct: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Residual error among kept digits for each distinct confidence threshold (empirical).

    Returns
    -------
    (thresholds ascending, residual error of the digits with conf >= threshold)
    """
    conf = np.asarray(conf, np.float64)
    order = np.argsort(conf, kind="stable")
    c, wrong = conf[order], ~np.asarray(correct, bool)[order]
    thr = np.unique(c)
    start = np.searchsorted(c, thr, side="left")
    wrong_from = np.cumsum(wrong[::-1])[::-1]  # wrong_from[i]: wrong digits among c[i:]
    return thr, wrong_from[start] / (len(c) - start)


def smoothed_residual_curve(
    conf: np.ndarray, correct: np.ndarray, *, n_points: int = 1000
) -> tuple[np.ndarray, np.ndarray, dict[str, float]]:
    """Residual error vs threshold from a fitted error model (smooth, monotone).

    The probability that a digit read with confidence ``c`` is wrong is
    fitted as ``p(c) = sigmoid(a + b * log(1 - c))`` (logistic regression of
    the error indicator, maximum likelihood); the residual error at threshold
    ``t`` is the mean of ``p`` over the scored digits with ``c >= t``.  Unlike
    the raw error count this does not drop to zero above the last observed
    error, so small targets get a finite, usable threshold.

    Parameters
    ----------
    conf : ndarray, shape (n,), 0..1
    correct : ndarray of bool, shape (n,)
    n_points : int
        Thresholds kept: the distinct confidences at ``n_points`` quantiles.

    Returns
    -------
    thresholds : ndarray, ascending
    residual : ndarray, non-increasing, same shape
    fit : dict with ``intercept``, ``slope``, ``n``, ``n_wrong``
    """
    conf = np.asarray(conf, np.float64)
    wrong = ~np.asarray(correct, bool)
    thr = np.unique(np.quantile(conf, np.linspace(0.0, 1.0, n_points)))
    fit = {"intercept": 0.0, "slope": 0.0, "n": int(conf.size), "n_wrong": int(wrong.sum())}
    feature = np.log(np.clip(1.0 - conf, 1e-12, None))
    if 0 < wrong.sum() < wrong.size:
        from sklearn.linear_model import LogisticRegression  # imported only when calibrating

        lr = LogisticRegression(C=1e6, max_iter=1000).fit(feature[:, None], wrong)
        fit.update(intercept=float(lr.intercept_[0]), slope=float(lr.coef_[0, 0]))
        p = lr.predict_proba(feature[:, None])[:, 1]
    else:
        p = wrong.astype(np.float64)
    order = np.argsort(conf, kind="stable")
    tail = np.cumsum(p[order][::-1])[::-1]
    start = np.searchsorted(conf[order], thr, side="left")
    residual = tail[start] / (conf.size - start)
    return thr, np.maximum.accumulate(residual[::-1])[::-1], fit


# Stored in the model metadata (``calibration.method``) word for word, as in the
# shipped model: "junk" here means the generated not-a-digit marks.
CALIBRATION_METHOD = (
    "not-a-digit logit offset and temperature (Guo et al. 2017) fitted jointly by maximum likelihood on "
    "the validation digits and generated validation junk, weighted by the expected junk share; threshold "
    "curve: logistic fit of error vs log(1 - confidence) on the validation digits plus mildly augmented "
    "copies (a share of them low-resolution captures), residual error at a threshold = mean fitted error "
    "probability of the scored digits above it"
)


def calibrate(
    model: DigitModel,
    digits: np.ndarray,
    labels: np.ndarray,
    *,
    marks: np.ndarray,
    settings: CalibrationSettings,
    rng: np.random.Generator,
) -> dict[str, Any]:
    """Fit offset, temperature and threshold curve of ``model`` in place, on validation data only.

    Parameters
    ----------
    model : DigitModel
        Members as trained, with no not-a-digit offset applied; they are replaced
        by shifted copies.
    digits : ndarray, shape (n, 28, 28), 0..1
        Validation digits (never trained on).
    labels : ndarray of int, shape (n,), 0..9
    marks : ndarray, shape (m, 28, 28), 0..1
        Validation not-a-digit marks (a seed of their own).
    settings : CalibrationSettings
        ``not_a_digit_prior``, ``calibration_copies``, ``calibration_strength``
        (a :class:`recognizer.digits.training.TrainSettings`).
    rng : numpy.random.Generator
        For the mild copies.

    Returns
    -------
    dict for the model metadata: method, offset, temperature, validation figures, curve fit.
    """
    offset, temperature = fit_offset_and_temperature(
        model.members, digits, labels, marks, prior=settings.not_a_digit_prior, preprocessing=model.preprocessing
    )
    model.members = with_offset(model.members, offset)
    model.temperature = temperature
    copies = [mild_copies(digits, rng, strength=settings.calibration_strength)
              for _ in range(settings.calibration_copies)]
    low_res = float(getattr(settings, "calibration_low_res", 0.0))
    if low_res > 0 and copies:
        for batch in copies:
            for i in np.nonzero(rng.random(len(batch)) < low_res)[0]:
                batch[i] = low_resolution(batch[i], rng)
    scored = np.concatenate([digits, *copies])
    truth = np.tile(labels, settings.calibration_copies + 1)
    proba = model.predict_proba(scored)
    correct = proba.argmax(axis=1) == truth
    model.curve_threshold, model.curve_residual, fit = smoothed_residual_curve(proba.max(axis=1), correct)
    marks_proba = model.predict_proba(marks)
    # The keys are part of the model metadata (file format); "junk" there means
    # the not-a-digit marks.
    return {
        "method": CALIBRATION_METHOD,
        "not_a_digit_offset": offset,
        "temperature": temperature,
        "not_a_digit_prior": settings.not_a_digit_prior,
        "n_digits": int(len(labels)),
        "n_copies": int(len(scored) - len(labels)),
        "copy_strength": settings.calibration_strength,
        "copies_low_resolution": low_res,
        "n_junk": int(len(marks)),
        "accuracy": float(np.mean(correct[: len(labels)])),
        "copies_accuracy": float(np.mean(correct[len(labels):])) if len(scored) > len(labels) else None,
        "junk_as_not_a_digit": float(np.mean(marks_proba.argmax(axis=1) == NOT_A_DIGIT)),
        "error_model": fit,
    }
