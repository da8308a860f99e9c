"""Tests of recognizer.digits.augment (small seeded runs only)."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_array_equal

from recognizer.digits.augment import augment


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
