"""Tests of recognizer.digits.evaluation metric functions on small literal arrays (hand-computed)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from recognizer.digits.evaluation import (
    accuracy_reject_table,
    confusion_matrix,
    expected_calibration_error,
    threshold_for_residual_error,
    write_report,
)

CONF = np.arange(1, 11) / 10  # 0.1 .. 1.0
CORRECT = np.array([False, False] + [True] * 8)  # the two least confident are wrong


def test_ece_literal() -> None:
    conf = np.array([0.95, 0.95, 0.65, 0.65])
    correct = np.array([True, False, True, True])
    # bin 0.9-1.0: accuracy 0.5, confidence 0.95; bin 0.6-0.7: accuracy 1, confidence 0.65
    assert expected_calibration_error(conf, correct, n_bins=10) == pytest.approx(0.5 * 0.45 + 0.5 * 0.35)
    assert expected_calibration_error(np.array([]), np.array([], bool)) == 0.0


def test_accuracy_reject_table_literal() -> None:
    rows = accuracy_reject_table(CONF, CORRECT, fractions=(0.0, 0.1, 0.2, 0.5))
    assert [r["kept"] for r in rows] == [10, 9, 8, 5]
    assert [r["residual_error"] for r in rows] == pytest.approx([0.2, 1 / 9, 0.0, 0.0])


@pytest.mark.parametrize(
    ("target", "threshold", "review"),
    [(0.25, 0.0, 0.0), (0.15, 0.2, 0.1), (0.0, 0.3, 0.2)],
)
def test_threshold_for_residual_error_literal(target: float, threshold: float, review: float) -> None:
    assert threshold_for_residual_error(CONF, CORRECT, target) == pytest.approx((threshold, review))


def test_threshold_unreachable_sends_all_to_review() -> None:
    assert threshold_for_residual_error(np.array([0.9, 0.8]), np.array([False, True]), 0.0) == (1.0, 1.0)


def test_confusion_matrix_literal() -> None:
    m = confusion_matrix(np.array([0, 0, 1, 10]), np.array([0, 1, 1, 10]))
    assert m.shape == (11, 11) and m.sum() == 4
    assert (m[0, 0], m[0, 1], m[1, 1], m[10, 10]) == (1, 1, 1, 1)


def test_confusion_matrix_counts_like_the_former_hand_count() -> None:
    """scikit-learn's matrix equals the former ``np.add.at`` count: every class kept, empty input zeros."""
    true = np.array([0, 0, 1, 10, 3, 3, 9, 7, 7, 7])
    pred = np.array([0, 1, 1, 10, 10, 3, 2, 7, 1, 10])
    expected = np.zeros((11, 11), np.int64)
    np.add.at(expected, (true, pred), 1)
    m = confusion_matrix(true, pred)
    assert m.dtype == np.int64
    assert_array_equal(m, expected)
    ten = np.zeros((10, 10), np.int64)
    np.add.at(ten, (true % 10, pred % 10), 1)
    assert_array_equal(confusion_matrix(true % 10, pred % 10, n_classes=10), ten)
    assert_array_equal(confusion_matrix(np.zeros(0, np.int64), np.zeros(0, np.int64)), np.zeros((11, 11)))


def test_write_report(tmp_path) -> None:
    fig = {"ece_15": 0.01, "accuracy": 0.8, "confidence": CONF.tolist(), "correct": CORRECT.tolist()}
    written = write_report(fig, tmp_path / "rep")
    assert [p.name for p in written] == ["figures.json", "accuracy_reject.png", "reliability.png"]
    assert json.loads(written[0].read_text()) == {"ece_15": 0.01, "accuracy": 0.8}
    assert_array_equal([p.stat().st_size > 1000 for p in written[1:]], [True, True])
