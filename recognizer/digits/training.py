"""Training of the digit model with scikit-learn: data, committee members, export.

Recipe (see :func:`train_model`; the figures behind it are in the module notes below):

1. Shuffle the real digits (the training file is sorted by label) and split off
   a validation share; it is never trained on and serves temperature scaling
   and the confidence/residual-error curve behind ``DigitModel.threshold_for``.
2. Write a pool of digits with our stroke-model handwriting, widened to the
   hands offices see (:meth:`recognizer.digits.handwriting.Writer.office`:
   continental 1 and 7, open and closed 4, hooked 9, thin ballpoint to thick
   felt-tip strokes), each written into a printed box -- some touching or
   crossing its walls -- and cut by the reader's own cell path (the
   ``cut`` argument: :func:`recognizer.page.cells.cut_cell` from the command
   line, since this package may not import the page stage).
3. Train each committee member (:class:`MemberSettings`: its hidden layers and
   how it prepares a cell, deskewed or as it is) with
   ``MLPClassifier.partial_fit``, one epoch at a time, on data drawn *afresh
   every epoch* (:func:`epoch_data`): a new distorted copy of every real
   training digit (:func:`recognizer.digits.augment.fresh_copies`: affine map,
   elastic distortion, pen width, low-resolution capture), a new sample of
   the stroke-model pool with milder distortions, and new not-a-digit marks
   (:func:`recognizer.digits.marks.not_digit_marks`, class 10).  The adam
   learning rate falls geometrically from ``learning_rate`` to
   ``final_learning_rate`` over the epochs.
4. Calibrate on validation data only
   (:func:`recognizer.digits.calibration.calibrate`): the not-a-digit logit
   offset and the temperature, then the threshold curve.
5. Store a stratified sample of the training digits (replay for
   fine-tuning) and the validation digits in the model file.

Choices, measured on the training file only: 70 % of its digits trained on,
the other 30 % (1,500 digits, split seed 123) scored, one member 784-800-800
at a time ("digits only": the not-a-digit column left out, since the
calibrated offset later removes most digits eaten by that class; "low-res":
the scored digits through :func:`recognizer.digits.augment.low_resolution`;
"stroke": 1,000 stroke-model digits by other writers, cut by the reader):

==========================================  =======  =======  ======  =====
member (lr 1e-3 falling to 1e-5 unless      scored   digits   low-    stroke
said; 3,676 cells per epoch)                 acc.     only     res
==========================================  =======  =======  ======  =====
deskew, 30 epochs (lr to 3e-5)              96.60 %
deskew, 150 epochs (lr to 3e-5)             97.60 %  97.87 %  94.3 %  93.9 %
deskew, 300 epochs                          97.80 %  98.20 %  94.9 %  93.7 %
  same at 100 / 200 epochs                  97.46 / 97.40 %
none (no deskew), 150 epochs                97.53 %  98.07 %  94.4 %  91.1 %
deskew, + 1,500 stroke digits/epoch, 100 e  97.06 %  97.33 %  93.7 %  98.3 %
committees of the above (2-4 members)       97.2-97.9 %  97.5-98.3 %
==========================================  =======  =======  ======  =====

More epochs keep helping slowly; the committee hardly adds accuracy over its
best member on these digits (their errors are mostly the same hard digits),
so the shipped committee is two members that differ in preparation and seed,
the most that keeps inference above 10,000 cells/s on one core (three
784-800-800 members measured about 10,000).  Stroke-model digits cost some
MNIST accuracy at 1,500 per epoch; at 400 per epoch (shipped) they are still
learned.  Distortion strength 0.7 instead of 1 and an L2 penalty of 1e-3
instead of 1e-4 made no difference measurable on 1,500 digits (25-50 epochs).
The timings were taken on a machine shared with other jobs.

Reproducibility: the same seed gives identical weights on one machine with the
same thread count (``threads``, default 2, fixed with threadpoolctl).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import platform
from importlib.metadata import version
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass, field, fields, replace
from typing import TYPE_CHECKING, Any

import cv2
import numpy as np

from recognizer.digits.augment import fresh_copies
from recognizer.digits.calibration import calibrate
from recognizer.digits.handwriting import CellCutter, office_digits
from recognizer.digits.marks import not_digit_marks
from recognizer.digits.model import MEMBER_PREPROCESSING, MNIST_CREDIT, NOT_A_DIGIT, DigitModel, member_features, timestamp

# scikit-learn, scipy and threadpoolctl are imported inside the functions that train (the window
# imports this module through retrain's settings and must start without them).
if TYPE_CHECKING:
    from sklearn.neural_network import MLPClassifier

Progress = Callable[[str], None]


@dataclass(frozen=True)
class MemberSettings:
    """One committee member.

    Attributes
    ----------
    hidden : tuple of int
        Hidden layer sizes.
    preprocessing : str
        How the member prepares a cell: a key of
        :data:`recognizer.digits.model.MEMBER_PREPROCESSING` (``"deskew"`` or ``"none"``).
    """

    hidden: tuple[int, ...] = (800, 800)
    preprocessing: str = "deskew"


DEFAULT_MEMBERS = (
    MemberSettings((800, 800), "deskew"),
    MemberSettings((800, 800), "none"),
)


@dataclass(frozen=True)
class TrainSettings:
    """Training settings, stored in the model metadata (``training_settings``).

    The field names are part of the model file format (read back by
    :mod:`recognizer.digits.retrain` through :meth:`from_metadata`), so
    ``junk_share`` and ``validation_junk`` keep their names: "junk" there
    means the generated not-a-digit marks.

    Attributes
    ----------
    seed : int
        Master seed; every random draw derives from it.
    members : tuple of MemberSettings
        The committee (probabilities are averaged).
    epochs : int
        Epochs per member, each on freshly drawn data.
    learning_rate, final_learning_rate : float
        Adam learning rate of the first and of the last epoch (geometric in between).
    alpha : float
        L2 penalty.
    batch_size : int
        Mini-batch size.
    distortion : float
        Strength of the real digits' distortions (1.0: the ranges of
        :func:`recognizer.digits.augment.distortion_maps`).
    keep_share : float
        Share of the real digits shown undistorted in an epoch.
    low_res_share : float
        Share of the digits (real and stroke-model) shown as a low-resolution
        capture (:func:`recognizer.digits.augment.low_resolution`).
    office_pool : int
        Stroke-model digits written into boxes and cut once per training (0: none).
    office_per_epoch : int
        Of those, how many an epoch shows (a fresh sample, freshly distorted).
    office_strength : float
        Distortion strength for them (1.0 = as for the real digits).
    office_touch : float
        Share of them touching or crossing a wall of their box.
    office_validation : int
        Stroke-model digits by other writers, scored after training (metadata only).
    junk_share : float
        Generated not-a-digit marks per epoch, as a share of the epoch's digits.
    val_fraction : float
        Share of the real digits kept out for calibration.
    not_a_digit_prior : float
        Expected share of not-a-digit marks among the written boxes in use
        (design assumption, no source).  The not-a-digit logit offset and the
        temperature are fitted jointly to validation digits and validation
        not-a-digit marks weighted by this share (see
        :func:`recognizer.digits.calibration.fit_offset_and_temperature`).
    validation_junk : int
        Generated not-a-digit marks for that fit (own seed stream, validation
        digits crossed out).
    calibration_copies : int
        Mildly augmented copies of each validation digit scored for the
        threshold curve (see :func:`recognizer.digits.calibration.smoothed_residual_curve`).
    calibration_strength : float
        Strength of those copies (1.0 = the training augmentation).
    calibration_low_res : float
        Share of those copies made low-resolution captures, as in training.
    replay_per_class : int
        Training digits per class stored in the model file for replay during
        fine-tuning (originals, uint8).
    weight_dtype : str
        Stored weight type, ``"float32"`` or ``"float16"``.
    threads : int
        BLAS threads during training (fixed so that runs are reproducible).
    """

    seed: int = 0
    members: tuple[MemberSettings, ...] = DEFAULT_MEMBERS
    epochs: int = 300
    learning_rate: float = 1e-3
    final_learning_rate: float = 1e-5
    alpha: float = 1e-4
    batch_size: int = 128
    distortion: float = 1.0
    keep_share: float = 0.1
    low_res_share: float = 0.1
    office_pool: int = 10000
    office_per_epoch: int = 400
    office_strength: float = 0.6
    office_touch: float = 0.08
    office_validation: int = 1000
    junk_share: float = 0.05
    val_fraction: float = 0.15
    not_a_digit_prior: float = 0.01
    validation_junk: int = 1000
    calibration_copies: int = 10
    calibration_strength: float = 0.25
    calibration_low_res: float = 0.1
    replay_per_class: int = 200
    weight_dtype: str = "float16"
    threads: int = 2

    def __post_init__(self) -> None:
        if not self.members:
            raise ValueError("a model needs at least one member")
        for m in self.members:
            if m.preprocessing not in MEMBER_PREPROCESSING:
                raise ValueError(f"unknown member preprocessing {m.preprocessing!r}")
        if self.epochs < 1:
            raise ValueError("epochs must be at least 1")
        if self.weight_dtype not in ("float32", "float16"):
            raise ValueError(f"weight_dtype must be float32 or float16, got {self.weight_dtype!r}")

    def to_metadata(self) -> dict[str, Any]:
        """The settings as JSON-ready values (tuples as lists)."""
        out = asdict(self)
        out["members"] = [{"hidden": list(m.hidden), "preprocessing": m.preprocessing} for m in self.members]
        return out

    @classmethod
    def from_metadata(cls, stored: Mapping[str, Any]) -> TrainSettings:
        """Settings from a model file's ``training_settings``, keeping the fields this version knows.

        Files of earlier versions (``hidden`` and ``n_members`` instead of
        ``members``; every member deskewed) are understood.
        """
        names = {f.name for f in fields(cls)}
        out: dict[str, Any] = {k: v for k, v in stored.items() if k in names}
        if isinstance(stored.get("members"), list):
            out["members"] = tuple(MemberSettings(tuple(m["hidden"]), m.get("preprocessing", "deskew"))
                                   for m in stored["members"])
        elif "hidden" in stored:
            out["members"] = (MemberSettings(tuple(stored["hidden"]), "deskew"),) * int(stored.get("n_members", 1))
        return cls(**out)


QUICK_SETTINGS = TrainSettings(members=(MemberSettings((48,), "deskew"),), epochs=8, learning_rate=2e-3,
                               final_learning_rate=5e-4, junk_share=0.1, office_pool=0, office_validation=0,
                               validation_junk=200, calibration_copies=2, weight_dtype="float32")


# --------------------------------------------------------------------------- training


def split_validation(
    images: np.ndarray, labels: np.ndarray, *, fraction: float, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Shuffle, then split off a stratified validation share.

    Returns
    -------
    (train_images, train_labels, val_images, val_labels)
    """
    val_idx = []
    for c in np.unique(labels):
        idx = rng.permutation(np.nonzero(labels == c)[0])
        val_idx.append(idx[: int(round(fraction * len(idx)))])
    val = np.zeros(len(labels), bool)
    val[np.concatenate(val_idx)] = True
    tr = rng.permutation(np.nonzero(~val)[0])
    va = rng.permutation(np.nonzero(val)[0])
    return images[tr], labels[tr], images[va], labels[va]


@dataclass
class TrainingData:
    """What the epochs draw from: real training digits and the stroke-model pool (0..1 cells)."""

    images: np.ndarray
    labels: np.ndarray
    office_images: np.ndarray = field(default_factory=lambda: np.zeros((0, 28, 28), np.float32))
    office_labels: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))


def epoch_data(
    data: TrainingData, settings: TrainSettings, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """One epoch's cells, drawn afresh: distorted real digits, a pool sample, not-a-digit marks.

    Returns
    -------
    cells : ndarray, float32, shape (n, 28, 28), MNIST layout, shuffled
    labels : ndarray, int64, shape (n,), 0..10
    """
    parts = [fresh_copies(data.images, rng, strength=settings.distortion, keep=settings.keep_share,
                          low_res=settings.low_res_share)]
    ys = [data.labels]
    n_office = min(settings.office_per_epoch, len(data.office_labels))
    if n_office:
        pick = rng.choice(len(data.office_labels), n_office, replace=False)
        parts.append(fresh_copies(data.office_images[pick], rng, strength=settings.office_strength,
                                  keep=settings.keep_share, low_res=settings.low_res_share))
        ys.append(data.office_labels[pick])
    n_marks = int(round(settings.junk_share * sum(len(y) for y in ys)))
    parts.append(not_digit_marks(n_marks, rng=rng, digits=data.images))
    ys.append(np.full(n_marks, NOT_A_DIGIT))
    cells = np.concatenate(parts)
    y = np.concatenate(ys).astype(np.int64)
    order = rng.permutation(len(y))
    return cells[order], y[order]


def learning_rate_at(epoch: int, settings: TrainSettings) -> float:
    """Adam learning rate of an epoch (0-based): geometric from ``learning_rate`` to ``final_learning_rate``."""
    if settings.epochs <= 1:
        return settings.learning_rate
    share = epoch / (settings.epochs - 1)
    return float(settings.learning_rate * (settings.final_learning_rate / settings.learning_rate) ** share)


def train_member(
    data: TrainingData,
    member: MemberSettings,
    settings: TrainSettings,
    rng: np.random.Generator,
    progress: Progress | None = None,
) -> MLPClassifier:
    """Train one committee member with ``partial_fit``, on fresh data every epoch.

    Parameters
    ----------
    data : TrainingData
    member : MemberSettings
    settings : TrainSettings
    rng : numpy.random.Generator
        Draws every epoch's data and the classifier's own seed.
    progress : callable(str), optional
        Receives a line every tenth epoch.

    Returns
    -------
    The fitted ``MLPClassifier`` (classes 0..10).
    """
    from sklearn.neural_network import MLPClassifier

    clf = MLPClassifier(
        hidden_layer_sizes=member.hidden,
        activation="relu",
        solver="adam",
        alpha=settings.alpha,
        batch_size=settings.batch_size,
        learning_rate_init=settings.learning_rate,
        shuffle=True,
        random_state=int(rng.integers(2**31 - 1)),
    )
    classes = np.arange(NOT_A_DIGIT + 1)
    for epoch in range(settings.epochs):
        cells, y = epoch_data(data, settings, rng)
        x = member_features(cells, (member.preprocessing,))[member.preprocessing]
        if epoch == 0:
            clf.partial_fit(x, y, classes=classes)
        else:
            # partial_fit keeps its adam optimiser between calls; its step size is set here
            # (scikit-learn has no learning-rate schedule for adam).
            clf._optimizer.learning_rate_init = learning_rate_at(epoch, settings)
            clf.partial_fit(x, y)
        if progress is not None and ((epoch + 1) % 10 == 0 or epoch + 1 == settings.epochs):
            progress(f"  epoch {epoch + 1}/{settings.epochs}: {len(y)} cells, loss {clf.loss_:.4f}")
    return clf


def export_member(clf: MLPClassifier, dtype: str = "float32") -> list[tuple[np.ndarray, np.ndarray]]:
    """Weights of a fitted 11-class ``MLPClassifier`` as ``[(W, b), ...]`` numpy arrays."""
    if list(clf.classes_) != list(range(11)):
        raise ValueError(f"the classifier must know all 11 classes, has {list(clf.classes_)}")
    return [(w.astype(dtype), b.astype(dtype)) for w, b in zip(clf.coefs_, clf.intercepts_)]


def train_model(
    images: np.ndarray,
    labels: np.ndarray,
    *,
    seed: int = 0,
    settings: TrainSettings | None = None,
    cut: CellCutter | None = None,
    progress: Progress | None = None,
    name: str = "inkcount-base",
    data_source: dict | None = None,
) -> DigitModel:
    """Train the calibrated committee digit model.

    Parameters
    ----------
    images : ndarray, shape (n, 28, 28)
        Real digits, uint8 0..255 or float 0..1, white ink on black, MNIST layout.
    labels : ndarray of int, shape (n,)
        Digits 0..9.
    seed : int
        Master seed (overrides ``settings.seed``).
    settings : TrainSettings, optional
        Defaults to the shipped model's settings.
    cut : CellCutter, optional
        The reader's cell path, for the stroke-model digits written into boxes
        (:data:`recognizer.digits.handwriting.CellCutter`); required when
        ``settings.office_pool`` or ``settings.office_validation`` is not 0.
    progress : callable(str), optional
        Receives one line per step.
    name : str
        Model name (part of ``DigitModel.version``).
    data_source : dict, optional
        Provenance of the training data, stored in the metadata.

    Returns
    -------
    DigitModel with temperature, validation curve and metadata filled in.
    """
    settings = replace(settings or TrainSettings(), seed=seed)
    say = progress or (lambda _msg: None)
    x = _as_unit(images)
    y = np.asarray(labels).astype(np.int64)
    if x.shape[1:] != (28, 28) or len(x) != len(y):
        raise ValueError(f"expected images (n, 28, 28) and n labels, got {x.shape} and {y.shape}")
    if y.min() < 0 or y.max() > 9:
        raise ValueError("labels must be digits 0..9")
    if cut is None and (settings.office_pool or settings.office_validation):
        raise ValueError("stroke-model digits need the reader's cell cutter (argument 'cut')")
    n_members = len(settings.members)
    seeds = np.random.SeedSequence(settings.seed)
    split_ss, office_ss, office_val_ss, calib_ss, *member_ss = seeds.spawn(n_members + 4)
    xt, yt, xv, yv = split_validation(x, y, fraction=settings.val_fraction, rng=np.random.default_rng(split_ss))
    start = _dt.datetime.now()
    data = TrainingData(xt, yt)
    if settings.office_pool:
        data.office_images, data.office_labels = office_digits(
            settings.office_pool, rng=np.random.default_rng(office_ss), cut=cut, touch=settings.office_touch)
    say(f"{len(xt)} training and {len(xv)} validation digits, {len(data.office_labels)} stroke-model digits "
        f"({_elapsed(start):.0f} s); {n_members} member(s)")
    from threadpoolctl import threadpool_limits

    members = []
    with threadpool_limits(limits=settings.threads):
        for k, (member, ss) in enumerate(zip(settings.members, member_ss)):
            say(f"member {k + 1}/{n_members}: hidden {'-'.join(map(str, member.hidden))}, "
                f"{member.preprocessing}")
            clf = train_member(data, member, settings, np.random.default_rng(ss), progress=say)
            members.append(export_member(clf, settings.weight_dtype))
            say(f"member {k + 1}/{n_members} done, {_elapsed(start):.0f} s")
    model = DigitModel(members=members, preprocessing=tuple(m.preprocessing for m in settings.members))
    model.replay_images, model.replay_labels = replay_sample(
        xt, yt, per_class=settings.replay_per_class, rng=np.random.default_rng(calib_ss.spawn(1)[0]))
    model.validation_images, model.validation_labels = _as_uint8(xv), yv.astype(np.uint8)
    crng = np.random.default_rng(calib_ss)
    marks = not_digit_marks(settings.validation_junk, rng=crng, digits=xv)
    calibration = calibrate(model, xv, yv, marks=marks, settings=settings, rng=crng)
    office = {}
    if settings.office_validation:
        ov, ovl = office_digits(settings.office_validation, rng=np.random.default_rng(office_val_ss), cut=cut,
                                touch=settings.office_touch)
        proba = model.predict_proba(ov)
        kept = proba.max(axis=1) >= model.threshold_for(0.001)
        correct = proba.argmax(axis=1) == ovl
        office = {"n": int(len(ovl)), "accuracy": float(correct.mean()),
                  "review_share_at_0.1%": float(1 - kept.mean()),
                  "residual_error_at_0.1%": float(np.mean(~correct[kept])) if kept.any() else 0.0}
        say(f"stroke-model validation digits (other writers): accuracy {office['accuracy']:.2%}, "
            f"review {office['review_share_at_0.1%']:.1%}")
    seconds = _elapsed(start)
    say(f"not-a-digit offset {calibration['not_a_digit_offset']:.2f}, temperature "
        f"{calibration['temperature']:.3f}; validation accuracy {calibration['accuracy']:.2%}; {seconds:.0f} s")
    model.metadata = {
        "name": name,
        "created": timestamp(),
        "training_data": {
            **(data_source or {}),
            "n_digits": int(len(x)),
            "images_sha256": hashlib.sha256(np.ascontiguousarray(images).tobytes()).hexdigest(),
            "n_train": int(len(xt)),
            "n_validation": int(len(xv)),
            "stroke_model_digits": int(len(data.office_labels)),
            "stroke_model": "recognizer.digits.handwriting: Writer.office hands written into printed boxes "
            "(write_in_box) and cut by the reader's cell path (recognizer.page.cells.cut_cell)",
            "not_a_digit": "generated marks (recognizer.digits.marks): scribbles, crossed-out training digits, "
            "stray marks, box-line fragments, letter-like shapes",
        },
        "mnist_credit": MNIST_CREDIT,
        "training_settings": settings.to_metadata(),
        "training_seconds": round(seconds, 1),
        "validation": {"accuracy": calibration["accuracy"], "n": int(len(yv)),
                       **({"stroke_model": office} if office else {})},
        "calibration": calibration,
        "library_versions": {
            "python": platform.python_version(),
            "numpy": np.__version__,
            "scikit-learn": version("scikit-learn"),
            "scipy": version("scipy"),
            "opencv": cv2.__version__,
        },
    }
    return model


def _elapsed(start: _dt.datetime) -> float:
    return (_dt.datetime.now() - start).total_seconds()


def replay_sample(
    images: np.ndarray, labels: np.ndarray, *, per_class: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """A stratified random sample of training digits to store for replay.

    Parameters
    ----------
    images : ndarray, shape (n, 28, 28), float 0..1
    labels : ndarray of int, shape (n,), 0..9
    per_class : int
        Digits per class (fewer if a class has fewer).

    Returns
    -------
    images : ndarray, uint8, shape (m, 28, 28) (0..255, white ink on black)
    labels : ndarray, uint8, shape (m,)
    """
    pick = np.concatenate([rng.permutation(np.nonzero(labels == c)[0])[:per_class] for c in range(10)])
    pick = np.sort(pick)
    return _as_uint8(images[pick]), labels[pick].astype(np.uint8)


def quick_model(images: np.ndarray, labels: np.ndarray, *, seed: int = 0) -> DigitModel:
    """A small model (one 48-unit MLP, 8 epochs, no stroke-model digits) trained in seconds, for tests and trials."""
    return train_model(images, labels, seed=seed, settings=QUICK_SETTINGS, name="inkcount-quick")


def _as_unit(images: np.ndarray) -> np.ndarray:
    a = np.asarray(images)
    if a.dtype == np.uint8:
        return a.astype(np.float32) / 255.0
    return np.clip(a.astype(np.float32), 0.0, 1.0)


def _as_uint8(images: np.ndarray) -> np.ndarray:
    """0..1 float cells -> 0..255 uint8 (rounded)."""
    return np.round(np.clip(images, 0.0, 1.0) * 255).astype(np.uint8)
