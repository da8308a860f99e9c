"""Fixtures shared by the digit-model tests."""

from __future__ import annotations

import numpy as np
import pytest

from recognizer.digits.marks import printed_digits


@pytest.fixture(scope="session")
def digits() -> tuple[np.ndarray, np.ndarray]:
    """Self-made printed digits (Hershey fonts): no external data in tests."""
    return printed_digits(300, rng=np.random.default_rng(5))
