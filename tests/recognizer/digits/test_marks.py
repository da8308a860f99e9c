"""Tests of recognizer.digits.marks: the generated not-a-digit marks (the model's eleventh class)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from recognizer.digits.marks import KINDS, not_digit_marks


@pytest.mark.parametrize("kind", KINDS)
def test_not_digit_marks_each_kind(kind: str) -> None:
    marks = not_digit_marks(8, rng=np.random.default_rng(2), kinds=(kind,))
    assert marks.shape == (8, 28, 28) and marks.dtype == np.float32
    assert marks.min() >= 0 and marks.max() <= 1
    assert (marks.reshape(8, -1).max(axis=1) > 0.5).all()  # every mark has ink


def test_not_digit_marks_differ_by_seed() -> None:
    a = not_digit_marks(5, rng=np.random.default_rng(1))
    assert_array_equal(a, not_digit_marks(5, rng=np.random.default_rng(1)))
    assert not np.allclose(a, not_digit_marks(5, rng=np.random.default_rng(2)))
