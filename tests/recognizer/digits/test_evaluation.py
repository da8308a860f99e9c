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
    optdigits_to_ink,
    optdigits_to_model_input,
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


# A hand-made optdigits "7" (UCI optdigits layout, Alpaydin & Kaynak: each value
# counts the ink pixels of a 4 x 4 block of a 32 x 32 bitmap, 0..16): a full
# top bar in row 1, a stem going down and to the left, half-covered blocks at
# the stem's edges.
SEVEN = np.array([
    [0, 0, 0, 0, 0, 0, 0, 0],
    [0, 16, 16, 16, 16, 16, 8, 0],
    [0, 0, 0, 0, 8, 16, 4, 0],
    [0, 0, 0, 0, 16, 8, 0, 0],
    [0, 0, 0, 8, 16, 0, 0, 0],
    [0, 0, 0, 16, 8, 0, 0, 0],
    [0, 0, 4, 16, 0, 0, 0, 0],
    [0, 0, 0, 0, 0, 0, 0, 0],
])


def test_optdigits_ink_is_block_coverage_enlarged_four_times() -> None:
    ink = optdigits_to_ink(SEVEN)
    assert ink.shape == (40, 40) and ink.dtype == np.float32
    assert ink.min() >= 0 and ink.max() <= 1
    # block (row r, column c) of the 8 x 8 covers pixels 4 + 4r .. 8 + 4r (one empty block of border),
    # centre 4r + 5.5; its four central pixels lie half a pixel from it, so bilinear interpolation
    # gives them 7/8 of the block and 1/8 of the neighbour on each axis
    centre = lambda r, c: float(ink[4 * r + 5: 4 * r + 7, 4 * c + 5: 4 * c + 7].mean())  # noqa: E731
    assert centre(1, 2) == pytest.approx(7 / 8)  # a full block of the bar, empty above and below
    assert centre(3, 0) == 0.0 and centre(7, 7) == 0.0  # empty blocks with empty neighbours
    assert 0.3 < centre(1, 6) < 0.7                      # a half-covered block
    assert ink[:2].max() == 0 and ink[:, :2].max() == 0  # the added border stays paper
    batch = optdigits_to_ink(np.stack([SEVEN, np.zeros((8, 8))]))
    assert batch.shape == (2, 40, 40) and batch[1].max() == 0
    with pytest.raises(ValueError):
        optdigits_to_ink(SEVEN * 2)  # counts of a 4 x 4 block cannot exceed 16


def test_optdigits_model_input_follows_the_mnist_layout() -> None:
    cell = optdigits_to_model_input(SEVEN[None])[0]
    assert cell.shape == (28, 28) and cell.dtype == np.float32
    rows = np.nonzero(cell.max(axis=1) > 0.05)[0]
    cols = np.nonzero(cell.max(axis=0) > 0.05)[0]
    assert max(np.ptp(rows), np.ptp(cols)) + 1 in (20, 21)  # longer side of the ink box about 20 px
    ys, xs = np.mgrid[0:28, 0:28]
    cy, cx = (cell * ys).sum() / cell.sum(), (cell * xs).sum() / cell.sum()
    assert abs(cy - 14) <= 1.0 and abs(cx - 14) <= 1.0  # centre of mass on (14, 14) (pixel index, +-1)
    assert cell[rows[0]: rows[0] + 3].sum() > cell[rows[-1] - 2: rows[-1] + 1].sum()  # the bar is on top
    assert optdigits_to_model_input(SEVEN.reshape(1, 64)).shape == (1, 28, 28)
