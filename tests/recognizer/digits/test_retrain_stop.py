"""Retraining stops when asked (closing the window during a round of learning must not wait for it).

:func:`recognizer.digits.retrain.retrain` asks its ``should_stop`` before every
mini-batch of fine-tuning; a yes raises ``RetrainStopped`` at once, and asking
changes nothing in what is learned.
"""

from __future__ import annotations

import numpy as np
import pytest

import recognizer.digits.retrain as rt
from recognizer.digits.model import load_model
from recognizer.digits.retrain import RetrainSettings, RetrainStopped, retrain

SMALL = RetrainSettings(epochs=2, new_copies=1, batch_size=32)


def _layers(rng: np.random.Generator) -> list[tuple[np.ndarray, np.ndarray]]:
    return [(rng.normal(0, 0.05, (784, 16)), np.zeros(16)), (rng.normal(0, 0.05, (16, 11)), np.zeros(11))]


def _data(digits, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    images, labels = digits
    x = np.concatenate([images.reshape(len(images), -1), rng.random((20, 784), dtype=np.float32) * 0.2])
    y = np.concatenate([labels, np.full(20, 10)]).astype(np.int64)
    return x, y


def test_fine_tuning_stops_at_the_next_mini_batch(digits) -> None:
    x, y = _data(digits, np.random.default_rng(0))
    asked = []

    def stop() -> bool:
        asked.append(True)
        return len(asked) >= 3

    with pytest.raises(RetrainStopped):
        rt._fine_tune(_layers(np.random.default_rng(1)), x, y, SMALL, seed=3, should_stop=stop)
    assert len(asked) == 3  # asked once per mini-batch, stopped at the first yes


def test_asking_changes_nothing_learned(digits, monkeypatch) -> None:
    x, y = _data(digits, np.random.default_rng(0))
    asked = []
    stoppable = rt._fine_tune(_layers(np.random.default_rng(1)), x, y, SMALL, seed=3,
                              should_stop=lambda: bool(asked.append(True)))
    assert len(asked) > 2 * (len(y) // SMALL.batch_size)  # asked during both epochs
    from sklearn.neural_network import MLPClassifier

    monkeypatch.setattr(rt, "_stoppable_classifier", lambda: MLPClassifier)
    plain = rt._fine_tune(_layers(np.random.default_rng(1)), x, y, SMALL, seed=3)
    for a, b in zip(stoppable.coefs_ + stoppable.intercepts_, plain.coefs_ + plain.intercepts_):
        np.testing.assert_array_equal(a, b)


def test_retrain_stops_when_asked(digits) -> None:
    base = load_model()
    images, labels = digits
    samples = rt.LabelledCells(cells=images[:40].astype(np.float32), labels=labels[:40].astype(np.int64),
                               refs=[None] * 40, sources=["test"] * 40)
    with pytest.raises(RetrainStopped):
        retrain(base, samples, heldout=(images[:10], labels[:10]), settings=SMALL, should_stop=lambda: True)
