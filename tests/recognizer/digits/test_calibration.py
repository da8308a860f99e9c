"""Tests of recognizer.digits.calibration: temperature, not-a-digit offset, residual-error curves."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from recognizer.digits.calibration import (
    fit_offset_and_temperature,
    fit_temperature,
    residual_curve,
    smoothed_residual_curve,
)
from recognizer.digits.marks import not_digit_marks
from recognizer.digits.training import quick_model


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


def test_offset_fit_follows_the_not_a_digit_prior(digits) -> None:
    images, labels = digits
    model = quick_model(images, labels, seed=1)
    marks = not_digit_marks(100, rng=np.random.default_rng(8))
    offsets = [fit_offset_and_temperature(model.members, images, labels, marks, prior=p)[0] for p in (0.3, 0.01)]
    assert offsets[0] < offsets[1]  # rarer marks: a larger penalty on the not-a-digit class
