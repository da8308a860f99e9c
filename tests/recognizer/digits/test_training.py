"""Tests of recognizer.digits.training (small seeded runs only)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.neural_network import MLPClassifier

from recognizer.digits.marks import not_digit_marks
from recognizer.digits.model import NOT_A_DIGIT, DigitModel, deskew
from recognizer.digits.training import export_member, quick_model


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_numpy_inference_equals_sklearn(digits) -> None:
    images, labels = digits
    marks = not_digit_marks(40, rng=np.random.default_rng(3))
    cells = np.concatenate([images, marks])
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
