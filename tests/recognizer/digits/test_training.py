"""Tests of recognizer.digits.training and recognizer.digits.marks (small seeded runs only)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.neural_network import MLPClassifier

from recognizer.digits.marks import KINDS, junk_marks, printed_digits
from recognizer.digits.model import NOT_A_DIGIT, DigitModel, deskew
from recognizer.digits.training import (
    augment,
    export_member,
    fit_offset_and_temperature,
    fit_temperature,
    quick_model,
    residual_curve,
    smoothed_residual_curve,
)


@pytest.fixture(scope="module")
def digits() -> tuple[np.ndarray, np.ndarray]:
    """Self-made printed digits (Hershey fonts): no external data in tests."""
    return printed_digits(300, rng=np.random.default_rng(5))


def test_augment_is_seeded_and_keeps_layout(digits) -> None:
    images, _ = digits
    a = augment(images[:20], np.random.default_rng(1))
    b = augment(images[:20], np.random.default_rng(1))
    assert_array_equal(a, b)
    assert a.shape == (20, 28, 28) and a.min() >= 0 and a.max() <= 1
    assert not np.allclose(a, images[:20])
    rows = np.nonzero(a.max(axis=2) > 0.05)
    cols = np.nonzero(a.max(axis=1) > 0.05)
    for i in range(20):  # MNIST layout: longer side of the ink box about 20 px
        height = np.ptp(rows[1][rows[0] == i]) + 1
        width = np.ptp(cols[1][cols[0] == i]) + 1
        assert 18 <= max(height, width) <= 22


@pytest.mark.parametrize("kind", KINDS)
def test_junk_marks_each_kind(kind: str) -> None:
    marks = junk_marks(8, rng=np.random.default_rng(2), kinds=(kind,))
    assert marks.shape == (8, 28, 28) and marks.dtype == np.float32
    assert marks.min() >= 0 and marks.max() <= 1
    assert (marks.reshape(8, -1).max(axis=1) > 0.5).all()  # every mark has ink


def test_junk_generators_differ_by_seed() -> None:
    a = junk_marks(5, rng=np.random.default_rng(1))
    assert_array_equal(a, junk_marks(5, rng=np.random.default_rng(1)))
    assert not np.allclose(a, junk_marks(5, rng=np.random.default_rng(2)))


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_numpy_inference_equals_sklearn(digits) -> None:
    images, labels = digits
    junk = junk_marks(40, rng=np.random.default_rng(3))
    cells = np.concatenate([images, junk])
    y = np.concatenate([labels, np.full(40, NOT_A_DIGIT)])
    x = deskew(cells).reshape(-1, 784)
    clf = MLPClassifier(hidden_layer_sizes=(16, 8), max_iter=30, random_state=0).fit(x, y)
    model = DigitModel(members=[export_member(clf)], temperature=1.0)
    assert_allclose(model.predict_proba(cells[:50]), clf.predict_proba(x[:50]), atol=1e-5)


def test_quick_training_is_reproducible_and_calibrated(digits) -> None:
    images, labels = digits
    a = quick_model(images, labels, seed=3)
    b = quick_model(images, labels, seed=3)
    for la, lb in zip(a.members[0], b.members[0]):
        assert_array_equal(la[0], lb[0])
        assert_array_equal(la[1], lb[1])
    assert a.temperature == b.temperature > 0
    thresholds = [a.threshold_for(t) for t in (0.0, 0.001, 0.01, 0.05, 0.2, 1.0)]
    assert all(p >= q for p, q in zip(thresholds, thresholds[1:]))
    assert a.metadata["training_settings"]["seed"] == 3
    c = quick_model(images, labels, seed=4)
    assert not np.array_equal(a.members[0][0][0], c.members[0][0][0])


def test_fit_temperature_recovers_known_temperature() -> None:
    rng = np.random.default_rng(0)
    logits = rng.normal(0, 3, size=(4000, 5))
    true_p = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
    labels = np.array([rng.choice(5, p=p) for p in true_p])
    sharp = np.exp(2 * logits) / np.exp(2 * logits).sum(axis=1, keepdims=True)  # overconfident: T = 2
    assert fit_temperature(sharp, labels) == pytest.approx(2.0, rel=0.1)


def test_residual_curve_literal() -> None:
    conf = np.array([0.9, 0.5, 0.7, 0.5, 0.99])
    correct = np.array([True, False, True, True, True])
    thr, res = residual_curve(conf, correct)
    assert_allclose(thr, [0.5, 0.7, 0.9, 0.99])
    assert_allclose(res, [1 / 5, 0, 0, 0])


def test_smoothed_residual_curve_follows_a_known_error_rate() -> None:
    rng = np.random.default_rng(4)
    conf = 1 - 10 ** rng.uniform(-4, -0.5, 20000)
    p_wrong = 1 / (1 + np.exp(0.3 - 0.9 * np.log(1 - conf)))  # known error model, a = -0.3, b = 0.9
    correct = rng.random(conf.size) >= p_wrong
    thr, res, fit = smoothed_residual_curve(conf, correct)
    assert np.all(np.diff(thr) > 0) and np.all(np.diff(res) <= 1e-15)
    assert (fit["intercept"], fit["slope"]) == pytest.approx((-0.3, 0.9), abs=0.1)
    for t in (0.9, 0.99, 0.999):
        assert np.interp(t, thr, res) == pytest.approx(np.mean(p_wrong[conf >= t]), rel=0.25)
    thr, res, _ = smoothed_residual_curve(conf, np.ones(conf.size, bool))
    assert_allclose(res, 0.0)  # no error seen: nothing to fit


def test_offset_fit_follows_the_junk_prior(digits) -> None:
    images, labels = digits
    model = quick_model(images, labels, seed=1)
    junk = junk_marks(100, rng=np.random.default_rng(8))
    offsets = [fit_offset_and_temperature(model.members, images, labels, junk, prior=p)[0] for p in (0.3, 0.01)]
    assert offsets[0] < offsets[1]  # rarer junk: a larger penalty on the not-a-digit class
