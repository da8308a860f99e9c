"""Digit model: numpy inference and the model file format.

The model reads one handwritten character per cell and answers with
probabilities for eleven classes: the digits ``"0"`` .. ``"9"`` and
``"not_a_digit"`` (scribbles, crossed-out digits, stray marks, left-over box
lines).  It is a small committee of MLPs (ReLU hidden layers, softmax
output), each reading the cell prepared its own way (moment-deskewed or as
it is, :data:`MEMBER_PREPROCESSING`), whose averaged probabilities are
calibrated by temperature scaling (Guo et al. 2017).  Only numpy is needed here; training and calibration live
in :mod:`recognizer.digits.training` and :mod:`recognizer.digits.calibration`
(scikit-learn).

File format
-----------
One ``.npz`` archive, read with ``np.load(path, allow_pickle=False)``:

* ``m{i}_W{j}``, ``m{i}_b{j}`` -- weights and biases of layer ``j`` of ensemble
  member ``i`` (float32 or float16), shapes as listed in the metadata layout;
* ``calib_threshold``, ``calib_residual`` -- the validation curve behind
  :meth:`DigitModel.threshold_for` (ascending confidence thresholds and the
  estimated residual error among the digits kept at each threshold; how it
  was estimated is in the metadata entry ``calibration``);
* ``replay_images``, ``replay_labels`` (format version 2, optional) -- a
  small stratified sample of the training digits, uint8 (n, 28, 28) white
  ink on black and uint8 (n,), mixed into fine-tuning
  (:mod:`recognizer.digits.retrain`) so that a retrained model does not forget;
* ``validation_images``, ``validation_labels`` (version 2, optional) -- the
  validation digits behind the calibration, same types, so that a
  fine-tuned model can be calibrated again on the same evidence;
* ``metadata`` -- a 0-d unicode array holding a JSON object: format name and
  version, classes, input size, preprocessing, temperature, ensemble layout,
  training data and provenance, training settings, evaluation figures,
  creation time, library versions and ``weights_sha256`` (a digest of every
  other array, checked on load so an altered file is refused).

Format version 3 adds ``member_preprocessing`` to the metadata: one entry of
:data:`MEMBER_PREPROCESSING` per ensemble member (checked on load: a list of
known names, as long as the ensemble).  Version 2 files have no such entry;
every member of theirs reads deskewed cells, and they still load.

A model file may come from anybody, so :func:`load_model` checks it against
this layout before it allocates anything from it: the zip directory's size and
entry count, every entry's name, compression and declared size, and every
``.npy`` header (dtype, shape, bytes) are read first; the metadata's length
and nesting depth are bounded before it is parsed (:func:`json_depth`). The
limits (:data:`MODEL_LIMITS`) are far above the shipped model's (19 arrays,
7.3 MB unpacked, 10 kB of metadata nested 4 deep). Every refusal is a
:class:`ModelFileError` naming the file and the reason. (The module is longer than
600 lines for these checks: they belong beside the format they check, and
:func:`load_model` is the one door to it.)
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import re
import struct
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from recognizer.digits.preprocess import deskew

CLASSES: tuple[str, ...] = tuple(str(d) for d in range(10)) + ("not_a_digit",)
NOT_A_DIGIT: int = 10

FORMAT_NAME = "inkcount-digit-model"
FORMAT_VERSION = 3
CELL_SIZE = 28
#: How an ensemble member prepares a cell before its first layer (metadata ``member_preprocessing``).
MEMBER_PREPROCESSING: dict[str, str] = {
    "deskew": "moment deskew: shear rows about the centre of mass so that mu11 = 0",
    "none": "the cell as it is",
}
PREPROCESSING = (
    "clip to 0..1 (white ink on black, MNIST layout 28x28)",
    "per member (member_preprocessing): " + "; ".join(f"{k} = {v}" for k, v in MEMBER_PREPROCESSING.items()),
    "flatten row-major to 784 values",
)
MNIST_CREDIT = (
    "MNIST database of handwritten digits, Yann LeCun, Corinna Cortes, "
    "Christopher J.C. Burges; commonly distributed under CC BY-SA 3.0"
)
_CURVE_ARRAYS = ("calib_threshold", "calib_residual")
_CHUNK = 2048  # cells per forward pass of predict_proba
_DIGIT_SETS = ("replay", "validation")
_DIGIT_ARRAYS = tuple(f"{k}_{a}" for k in _DIGIT_SETS for a in ("images", "labels"))
#: What a model file may hold at most, checked before anything is read from it.
MODEL_LIMITS: dict[str, int] = {
    "entries": 200,  # arrays in the archive (the shipped model: 19)
    "directory_bytes": 1 << 20,  # the zip's central directory (46 bytes or more per entry)
    "array_bytes": 256 << 20,  # all arrays unpacked together (the shipped model: 7.3 MB)
    "metadata_chars": 1_000_000,  # JSON text of the metadata (the shipped model: 10,314)
    "json_depth": 20,  # nesting of the metadata (the shipped model: 4)
    "members": 16,  # ensemble members
    "layers": 8,  # layers per member
}
_ARRAY_NAME = re.compile(r"(metadata|m\d{1,3}_[Wb]\d{1,3}|calib_threshold|calib_residual|"
                         r"(?:replay|validation)_(?:images|labels))\.npy")
_BRACKET_STEPS = np.zeros(256, np.int64)
_BRACKET_STEPS[[ord("["), ord("{")]] = 1
_BRACKET_STEPS[[ord("]"), ord("}")]] = -1
_JSON_STRING = re.compile(r'"(?:[^"\\]|\\.)*+(?:"|\\?\Z)', re.S)


class ModelFileError(Exception):
    """A model file that cannot be used; the message names the file and the reason."""

    def __init__(self, path: str | Path, reason: str) -> None:
        self.path = str(path)
        self.reason = reason
        super().__init__(f"cannot use model file {self.path!r}: {reason}")


def json_depth(text: str) -> int:
    """How deep the brackets of JSON text nest, strings left out: a linear scan to run before parsing.

    ``json.loads`` recurses once per level and fails with ``RecursionError`` on
    text nested a thousand deep; this tells such text apart cheaply.
    """
    if '"' in text:
        text = _JSON_STRING.sub("", text)
    steps = _BRACKET_STEPS[np.frombuffer(text.encode("ascii", "replace"), np.uint8)]
    return int(np.cumsum(steps).max(initial=0))


def timestamp() -> str:
    """The current time as stored in model and batch files: ISO 8601, UTC, whole seconds."""
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def _softmax(z: np.ndarray) -> np.ndarray:
    z = z - z.max(axis=1, keepdims=True)
    e = np.exp(z)
    return e / e.sum(axis=1, keepdims=True)


def _digest(arrays: dict[str, np.ndarray]) -> str:
    """sha256 over name, dtype, shape and bytes of every array, in name order."""
    h = hashlib.sha256()
    for name in sorted(arrays):
        arr = np.ascontiguousarray(arrays[name])
        h.update(f"{name}|{arr.dtype.str}|{arr.shape}|".encode())
        h.update(arr.tobytes())
    return h.hexdigest()


def member_features(cells: np.ndarray, kinds: set[str] | tuple[str, ...] = ("deskew",)) -> dict[str, np.ndarray]:
    """The first-layer input of the members, per kind of :data:`MEMBER_PREPROCESSING`.

    Parameters
    ----------
    cells : ndarray, shape (n, 28, 28)
        Ink in 0..1, MNIST layout.
    kinds : iterable of str
        Which preparations to make.

    Returns
    -------
    dict kind -> ndarray, float32, shape (n, 784) (row-major, values 0..1).
    """
    a = np.asarray(cells)
    if a.ndim != 3 or a.shape[1:] != (CELL_SIZE, CELL_SIZE):
        raise ValueError(f"cells must have shape (n, 28, 28), got {a.shape}")
    out = {}
    for kind in kinds:
        if kind == "deskew":
            prepared = deskew(a)
        elif kind == "none":
            prepared = np.clip(a.astype(np.float32, copy=False), 0.0, 1.0)
        else:
            raise ValueError(f"unknown member preprocessing {kind!r}; known: {sorted(MEMBER_PREPROCESSING)}")
        out[kind] = prepared.reshape(len(a), CELL_SIZE * CELL_SIZE)
    return out


def _monotone_residual(residual: np.ndarray) -> np.ndarray:
    """Residual error made non-increasing in the threshold (max over higher thresholds)."""
    return np.maximum.accumulate(residual[::-1])[::-1]


@dataclass
class DigitModel:
    """An ensemble of ReLU MLPs with temperature-scaled averaged probabilities.

    Attributes
    ----------
    members : list of list of (W, b)
        Per member, per layer: ``W`` (n_in, n_out) and ``b`` (n_out,).
    temperature : float
        Temperature T > 0 applied as ``softmax(log(p_mean) / T)``.
    curve_threshold, curve_residual : ndarray, shape (k,)
        Validation curve: ascending confidence thresholds and the residual
        error (share of wrong digits) among digits with confidence >= threshold.
    metadata : dict
        Everything stored in the file's JSON entry.
    classes : tuple of str
        Class names, index 10 is ``"not_a_digit"``.
    replay_images, replay_labels : ndarray or None
        (n, 28, 28) uint8 training digits kept for fine-tuning (white ink on
        black) and their (n,) uint8 labels 0..9.
    validation_images, validation_labels : ndarray or None
        The validation digits of the calibration, same types.
    preprocessing : tuple of str or None
        Per member, a key of :data:`MEMBER_PREPROCESSING`; None means
        ``"deskew"`` for every member (as in format-2 files).
    """

    members: list[list[tuple[np.ndarray, np.ndarray]]]
    temperature: float = 1.0
    curve_threshold: np.ndarray = field(default_factory=lambda: np.zeros(0))
    curve_residual: np.ndarray = field(default_factory=lambda: np.zeros(0))
    metadata: dict[str, Any] = field(default_factory=dict)
    classes: tuple[str, ...] = CLASSES
    replay_images: np.ndarray | None = None
    replay_labels: np.ndarray | None = None
    validation_images: np.ndarray | None = None
    validation_labels: np.ndarray | None = None
    preprocessing: tuple[str, ...] | None = None
    _f32: dict[int, tuple[np.ndarray, np.ndarray]] = field(default_factory=dict, repr=False, compare=False)

    def _float32(self, a: np.ndarray) -> np.ndarray:
        """``a`` as float32; float16 weights are converted once and kept (keyed by the array itself)."""
        if a.dtype == np.float32:
            return a
        held = self._f32.get(id(a))
        if held is None or held[0] is not a:
            held = (a, a.astype(np.float32))
            self._f32[id(a)] = held
            if len(self._f32) > 64 * max(len(self.members), 1):  # members replaced many times: start afresh
                self._f32 = {id(a): held}
        return held[1]

    @property
    def member_preprocessing(self) -> tuple[str, ...]:
        """How each member prepares a cell (keys of :data:`MEMBER_PREPROCESSING`)."""
        if self.preprocessing is None:
            return ("deskew",) * len(self.members)
        if len(self.preprocessing) != len(self.members):
            raise ValueError(f"{len(self.preprocessing)} preprocessing entries for {len(self.members)} members")
        unknown = set(self.preprocessing) - set(MEMBER_PREPROCESSING)
        if unknown:
            raise ValueError(f"unknown member preprocessing {sorted(unknown)}")
        return tuple(self.preprocessing)

    @property
    def version(self) -> str:
        """Short identification: name, creation date and a short content hash."""
        name = self.metadata.get("name", "model")
        created = str(self.metadata.get("created", ""))[:10] or "undated"
        digest = self.metadata.get("weights_sha256") or _digest(self._arrays())
        return f"{name}-{created}-{digest[:8]}"

    def predict_proba(self, cells: np.ndarray) -> np.ndarray:
        """Calibrated class probabilities.

        Parameters
        ----------
        cells : ndarray, shape (n, 28, 28)
            Ink in 0..1, MNIST layout; ``n`` may be 0.

        Returns
        -------
        ndarray, float64, shape (n, 11)
            Rows sum to 1; column ``NOT_A_DIGIT`` is "not a digit".
        """
        a = np.asarray(cells)
        if a.ndim != 3 or a.shape[1:] != (CELL_SIZE, CELL_SIZE):
            raise ValueError(f"cells must have shape (n, 28, 28), got {a.shape}")
        return self._calibrate(self._ensemble_proba(a))

    def member_logits(self, cells: np.ndarray) -> list[np.ndarray]:
        """Each member's output logits (before softmax), float64 (n, 11) per member.

        Parameters
        ----------
        cells : ndarray, shape (n, 28, 28)
            Ink in 0..1, MNIST layout.
        """
        features = member_features(cells, set(self.member_preprocessing))
        logits = []
        for layers, kind in zip(self.members, self.member_preprocessing):
            x = features[kind]
            for j, (w, b) in enumerate(layers):
                x = x @ self._float32(w) + self._float32(b)
                if j < len(layers) - 1:
                    np.maximum(x, 0.0, out=x)
            logits.append(x.astype(np.float64))
        return logits

    def _ensemble_proba(self, cells: np.ndarray) -> np.ndarray:
        """Mean of the members' softmax outputs, (n, 28, 28) -> (n, 11) float64.

        Large batches go through in chunks of :data:`_CHUNK` cells, which keeps the
        hidden activations in the processor's cache (measured: 11,000 cells/s for
        one batch of 20,000 cells on one core, 18,000 in chunks of 2,048).
        """
        total = np.zeros((len(cells), len(self.classes)))
        for start in range(0, len(cells), _CHUNK):
            for logits in self.member_logits(cells[start:start + _CHUNK]):
                total[start:start + _CHUNK] += _softmax(logits)
        return total / max(len(self.members), 1)

    def _calibrate(self, proba: np.ndarray) -> np.ndarray:
        if self.temperature == 1.0:
            return proba
        return _softmax(np.log(np.clip(proba, 1e-12, None)) / self.temperature)

    def threshold_for(self, target_residual_error: float = 0.001) -> float:
        """Confidence threshold below which digits should go to review.

        Read from the validation curve, made non-increasing in the threshold
        (each point takes the worst residual error of all higher thresholds),
        and linearly interpolated between its points.

        Parameters
        ----------
        target_residual_error : float
            Wanted share of wrong digits among those kept (e.g. 0.001 = 0.1 %).

        Returns
        -------
        float in 0..1
            0.0 if the target is met with no review at all; 1.0 (everything to
            review) if the target is below anything the validation split can
            show (e.g. a target of 0 while the best kept set still had an error).
        """
        thr = np.asarray(self.curve_threshold, dtype=np.float64)
        if thr.size == 0:
            raise ValueError("this model carries no calibration curve")
        res = _monotone_residual(np.asarray(self.curve_residual, dtype=np.float64))
        target = float(target_residual_error)
        if target >= res[0]:
            return 0.0
        ok = np.nonzero(res <= target)[0]
        if ok.size == 0:
            return 1.0
        i = int(ok[0])  # first threshold meeting the target; i >= 1
        r_hi, r_lo = res[i - 1], res[i]
        t_lo, t_hi = thr[i - 1], thr[i]
        share = (r_hi - target) / (r_hi - r_lo) if r_hi > r_lo else 1.0
        return float(t_lo + share * (t_hi - t_lo))

    def _arrays(self) -> dict[str, np.ndarray]:
        arrays: dict[str, np.ndarray] = {}
        for i, layers in enumerate(self.members):
            for j, (w, b) in enumerate(layers):
                arrays[f"m{i}_W{j}"] = np.asarray(w)
                arrays[f"m{i}_b{j}"] = np.asarray(b)
        arrays["calib_threshold"] = np.asarray(self.curve_threshold, dtype=np.float64)
        arrays["calib_residual"] = np.asarray(self.curve_residual, dtype=np.float64)
        for kind in _DIGIT_SETS:
            images, labels = getattr(self, f"{kind}_images"), getattr(self, f"{kind}_labels")
            if images is not None:
                arrays[f"{kind}_images"] = np.asarray(images, dtype=np.uint8)
                arrays[f"{kind}_labels"] = np.asarray(labels, dtype=np.uint8)
        return arrays

    def save(self, path: str | Path) -> None:
        """Write the model as one ``.npz`` (see the module docstring for the layout)."""
        arrays = self._arrays()
        meta = dict(self.metadata)
        meta.update(
            format=FORMAT_NAME,
            format_version=FORMAT_VERSION,
            classes=list(self.classes),
            input_shape=[CELL_SIZE, CELL_SIZE],
            preprocessing=list(PREPROCESSING),
            temperature=float(self.temperature),
            ensemble=[[list(np.shape(w)) for w, _ in layers] for layers in self.members],
            member_preprocessing=list(self.member_preprocessing),
            weights_sha256=_digest(arrays),
        )
        meta.setdefault("created", timestamp())
        meta.setdefault("mnist_credit", MNIST_CREDIT)
        self.metadata = meta
        with open(path, "wb") as fh:
            np.savez_compressed(fh, metadata=np.array(json.dumps(meta, indent=1)), **arrays)


def default_model_path() -> Path:
    """Path of the shipped model ``recognizer/models/base.npz``."""
    return Path(__file__).resolve().parents[1] / "models" / "base.npz"


def load_model(path: str | Path | None = None) -> DigitModel:
    """Read and check a model file.

    The archive's directory and every array header are checked against the
    format (and :data:`MODEL_LIMITS`) before any array is unpacked; nothing in
    the file can run code (no pickle).

    Parameters
    ----------
    path : str or Path, optional
        ``.npz`` model file; ``None`` loads the shipped model.

    Returns
    -------
    DigitModel

    Raises
    ------
    ModelFileError
        Missing file, not an npz archive, truncated or damaged, pickled/object
        arrays inside, missing, unexpected or too many arrays, wrong shapes or
        kinds, arrays larger than the limits, metadata too long, too deeply
        nested or not JSON, newer format version, an empty or impossible
        calibration curve, weights that are not finite numbers, or a checksum
        mismatch.
    """
    path = Path(default_model_path() if path is None else path)
    if not path.is_file():
        raise ModelFileError(path, "file not found")
    if not zipfile.is_zipfile(path):
        raise ModelFileError(path, "not an .npz archive, or truncated (no zip directory found)")
    arrays = _read_arrays(path)
    meta = _read_metadata(path, arrays.pop("metadata", None))
    members = _read_members(path, arrays, meta)
    _check_curve(path, arrays)
    for kind in _DIGIT_SETS:
        _check_digit_set(path, arrays, kind)
    if _digest(arrays) != meta.get("weights_sha256"):
        raise ModelFileError(path, "checksum mismatch: the weights were altered or damaged")
    try:
        temperature = float(meta["temperature"])
    except (KeyError, TypeError, ValueError, OverflowError):
        raise ModelFileError(path, "metadata has no valid 'temperature'") from None
    if not 0 < temperature < np.inf:
        raise ModelFileError(path, f"temperature must be a finite number > 0, got {temperature}")
    preprocessing = _read_member_preprocessing(path, meta, len(members))
    return DigitModel(
        members=members,
        temperature=temperature,
        curve_threshold=arrays["calib_threshold"],
        curve_residual=arrays["calib_residual"],
        metadata=meta,
        classes=tuple(meta["classes"]),
        preprocessing=preprocessing,
        **{name: arrays.get(name) for name in _DIGIT_ARRAYS},
    )


def _check_curve(path: Path, arrays: dict[str, np.ndarray]) -> None:
    """The calibration curve: one or more points, thresholds ascending in 0..1, residual errors in 0..1."""
    for name in _CURVE_ARRAYS:
        if name not in arrays:
            raise ModelFileError(path, f"missing array {name!r}")
        if arrays[name].ndim != 1 or arrays[name].shape != arrays[_CURVE_ARRAYS[0]].shape:
            raise ModelFileError(path, f"wrong shape {arrays[name].shape} for {name!r}")
    threshold, residual = (arrays[name].astype(np.float64) for name in _CURVE_ARRAYS)
    if threshold.size == 0:
        raise ModelFileError(path, "the calibration curve is empty: the model cannot say which digits to check")
    if not (np.isfinite(threshold).all() and np.isfinite(residual).all()):
        raise ModelFileError(path, "the calibration curve holds values that are not numbers")
    if threshold.min() < 0 or threshold.max() > 1 or np.any(np.diff(threshold) < 0):
        raise ModelFileError(path, "the calibration thresholds must rise from 0 to 1")
    if residual.min() < 0 or residual.max() > 1:
        raise ModelFileError(path, "the calibration's residual errors must lie between 0 and 1")


def _read_member_preprocessing(path: Path, meta: dict[str, Any], n_members: int) -> tuple[str, ...]:
    """``member_preprocessing`` of a format-3 file, checked; deskew for every member of a format-2 file."""
    if meta["format_version"] < 3:
        return ("deskew",) * n_members
    entry = meta.get("member_preprocessing")
    if not isinstance(entry, list) or len(entry) != n_members:
        raise ModelFileError(path, f"'member_preprocessing' must list one entry per member ({n_members}), "
                             f"got {_short(entry)}")
    for kind in entry:
        if not isinstance(kind, str) or kind not in MEMBER_PREPROCESSING:
            raise ModelFileError(path, f"unknown member preprocessing {_short(kind)}; "
                                 f"known: {sorted(MEMBER_PREPROCESSING)}")
    return tuple(entry)


def _check_digit_set(path: Path, arrays: dict[str, np.ndarray], kind: str) -> None:
    """A stored digit set comes as a pair: uint8 (n, 28, 28) images and n uint8 labels 0..9."""
    names = (f"{kind}_images", f"{kind}_labels")
    present = [name for name in names if name in arrays]
    if not present:
        return
    if len(present) == 1:
        raise ModelFileError(path, f"{present[0]!r} without its partner array")
    images, labels = arrays[names[0]], arrays[names[1]]
    if images.dtype != np.uint8 or images.ndim != 3 or images.shape[1:] != (CELL_SIZE, CELL_SIZE):
        raise ModelFileError(path, f"{names[0]!r} must be uint8 (n, 28, 28), got {images.dtype} {images.shape}")
    if labels.dtype != np.uint8 or labels.shape != (len(images),) or (labels.size and labels.max() > 9):
        raise ModelFileError(path, f"{names[1]!r} must be {len(images)} uint8 digits 0..9")


def _short(value: Any, limit: int = 60) -> str:
    """``repr(value)``, cut to ``limit`` characters for a message."""
    text = repr(value)
    return text if len(text) <= limit else text[:limit] + "..."


def _few(names: list[str], shown: int = 5) -> str:
    """Up to ``shown`` names for a message, and how many more there are."""
    out = ", ".join(repr(n) for n in names[:shown])
    return out + (f" and {len(names) - shown} more" if len(names) > shown else "")


def _check_directory(path: Path) -> None:
    """Bound the zip's central directory before :mod:`zipfile` reads it all into memory.

    The end record (the last 22 bytes, or up to 64 kB earlier behind a
    comment) gives the number of entries and the directory's size; a zip64
    archive (more than 65,535 entries or 4 GB) is never a model file.
    """
    with open(path, "rb") as fh:
        fh.seek(0, 2)
        size = fh.tell()
        fh.seek(max(0, size - 22 - 0xFFFF))
        tail = fh.read()
    at = len(tail) - 22 if tail[-22:-18] == b"PK\x05\x06" else tail.rfind(b"PK\x05\x06")
    if at < 0 or len(tail) - at < 22:
        raise ModelFileError(path, "not an .npz archive, or truncated (no zip directory found)")
    entries, directory = struct.unpack_from("<HI", tail, at + 10)
    if b"PK\x06\x07" in tail[max(0, at - 20):at] or entries == 0xFFFF or directory == 0xFFFFFFFF:
        raise ModelFileError(path, "a zip64 archive: far more or larger arrays than a model file holds")
    if entries > MODEL_LIMITS["entries"]:
        raise ModelFileError(path, f"holds {entries} arrays; a model file holds at most {MODEL_LIMITS['entries']}")
    if directory > MODEL_LIMITS["directory_bytes"]:
        raise ModelFileError(path, f"its zip directory is {directory} bytes long, far more than a model file's")


def _check_entry(path: Path, zf: zipfile.ZipFile, info: zipfile.ZipInfo) -> None:
    """One archive entry: an uncompressed or deflated ``.npy`` whose header declares an allowed
    dtype and a shape that fills exactly the entry's declared size."""
    name = info.filename[:-4]
    if info.flag_bits & 0x1:
        raise ModelFileError(path, f"array {name!r} is encrypted")
    if info.compress_type not in (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED):
        raise ModelFileError(path, f"array {name!r} is packed with an unknown method")
    try:
        with zf.open(info) as fh:
            version = np.lib.format.read_magic(fh)
            if version == (1, 0):
                shape, _, dtype = np.lib.format.read_array_header_1_0(fh)
            elif version == (2, 0):
                shape, _, dtype = np.lib.format.read_array_header_2_0(fh)
            else:
                raise ValueError(f"unknown .npy version {version}")
            offset = fh.tell()
    except (ValueError, OSError, EOFError, zipfile.BadZipFile) as exc:
        raise ModelFileError(path, f"array {name!r} has a damaged header ({exc})") from None
    if dtype.hasobject:
        raise ModelFileError(path, "contains a pickled (object) array; refused for safety")
    if name == "metadata":
        allowed = dtype.kind == "U" and shape == ()
        what = "a JSON text entry"
    elif name.endswith(("_images", "_labels")):
        allowed = dtype == np.uint8
        what = "uint8"
    else:
        allowed = dtype.kind == "f" and dtype.itemsize in (2, 4, 8)
        what = "floating-point numbers"
    if not allowed or dtype.names is not None or dtype.subdtype is not None:
        raise ModelFileError(path, f"array {name!r} is {dtype} {shape}; it must be {what}")
    if len(shape) > 3 or any(not isinstance(n, int) or n < 0 for n in shape):
        raise ModelFileError(path, f"array {name!r} declares an impossible shape {_short(shape)}")
    declared = math.prod(shape) * dtype.itemsize
    if declared != info.file_size - offset:
        raise ModelFileError(path, f"array {name!r} declares {declared} bytes of data ({shape}, {dtype}) "
                             f"but its entry holds {info.file_size - offset}")
    if name == "metadata" and dtype.itemsize // 4 > MODEL_LIMITS["metadata_chars"]:
        raise ModelFileError(path, f"its metadata is {dtype.itemsize // 4} characters long; "
                             f"at most {MODEL_LIMITS['metadata_chars']} are read")


def _read_arrays(path: Path) -> dict[str, np.ndarray]:
    """Every array of the archive, each checked (:func:`_check_entry`) before any is unpacked."""
    _check_directory(path)
    try:
        with zipfile.ZipFile(path) as zf:
            infos = zf.infolist()
            names = [info.filename for info in infos]
            if len(infos) > MODEL_LIMITS["entries"]:
                raise ModelFileError(path, f"holds {len(infos)} arrays; a model file holds at most "
                                     f"{MODEL_LIMITS['entries']}")
            if len(set(names)) != len(names):
                raise ModelFileError(path, "an array name appears twice in the archive")
            unknown = [n for n in names if not _ARRAY_NAME.fullmatch(n)]
            if unknown:
                raise ModelFileError(path, f"unexpected arrays {_few(unknown)}")
            total = sum(info.file_size for info in infos)
            if total > MODEL_LIMITS["array_bytes"]:
                raise ModelFileError(path, f"its arrays would take {total / 1e6:,.0f} MB unpacked; a model file "
                                     f"may hold at most {MODEL_LIMITS['array_bytes'] / 1e6:,.0f} MB")
            for info in infos:
                _check_entry(path, zf, info)
            arrays = {}
            for info in infos:
                with zf.open(info) as fh:
                    arrays[info.filename[:-4]] = np.lib.format.read_array(fh, allow_pickle=False)
            return arrays
    except ModelFileError:
        raise
    except (ValueError, OSError, EOFError, zipfile.BadZipFile, RuntimeError, NotImplementedError) as exc:
        raise ModelFileError(path, f"damaged or truncated archive ({exc})") from None


def _read_metadata(path: Path, entry: np.ndarray | None) -> dict[str, Any]:
    if entry is None:
        raise ModelFileError(path, "missing array 'metadata'")
    if entry.dtype.kind != "U" or entry.ndim != 0:
        raise ModelFileError(path, "'metadata' must be a JSON text entry")
    text = str(entry)
    if json_depth(text) > MODEL_LIMITS["json_depth"]:
        raise ModelFileError(path, f"its metadata nests deeper than {MODEL_LIMITS['json_depth']} levels")
    try:
        meta = json.loads(text)
    except (ValueError, RecursionError) as exc:
        raise ModelFileError(path, f"metadata is not valid JSON ({exc})") from None
    if not isinstance(meta, dict) or meta.get("format") != FORMAT_NAME:
        raise ModelFileError(path, f"not an {FORMAT_NAME} file")
    version = meta.get("format_version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise ModelFileError(path, "metadata has no integer 'format_version'")
    if version > FORMAT_VERSION:
        raise ModelFileError(
            path, f"format version {version} is newer than this program reads ({FORMAT_VERSION})"
        )
    if meta.get("classes") != list(CLASSES):
        raise ModelFileError(path, f"unexpected classes {_short(meta.get('classes'))}")
    if meta.get("input_shape") != [CELL_SIZE, CELL_SIZE]:
        raise ModelFileError(path, f"unexpected input shape {_short(meta.get('input_shape'))}")
    return meta


def _whole(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value > 0


def _read_members(
    path: Path, arrays: dict[str, np.ndarray], meta: dict[str, Any]
) -> list[list[tuple[np.ndarray, np.ndarray]]]:
    layout = meta.get("ensemble")
    if not isinstance(layout, list) or not layout:
        raise ModelFileError(path, "metadata has no ensemble layout")
    if len(layout) > MODEL_LIMITS["members"]:
        raise ModelFileError(path, f"{len(layout)} ensemble members; at most {MODEL_LIMITS['members']} are read")
    members = []
    for i, shapes in enumerate(layout):
        if not isinstance(shapes, list) or not 1 <= len(shapes) <= MODEL_LIMITS["layers"]:
            raise ModelFileError(path, f"member {i} must list 1 to {MODEL_LIMITS['layers']} layers")
        expected_in = CELL_SIZE * CELL_SIZE
        layers = []
        for j, shape in enumerate(shapes):
            if not (isinstance(shape, list) and len(shape) == 2 and all(map(_whole, shape))
                    and shape[0] == expected_in):
                raise ModelFileError(path, f"inconsistent layout for member {i} layer {j}: {_short(shape)}")
            w_name, b_name = f"m{i}_W{j}", f"m{i}_b{j}"
            for name, want in ((w_name, tuple(shape)), (b_name, (shape[1],))):
                if name not in arrays:
                    raise ModelFileError(path, f"missing array {name!r}")
                arr = arrays[name]
                if arr.shape != want:
                    raise ModelFileError(path, f"wrong shape {arr.shape} for {name!r}, expected {want}")
                if arr.dtype.kind != "f":
                    raise ModelFileError(path, f"array {name!r} has dtype {arr.dtype}, expected float")
                if not np.isfinite(arr).all():
                    raise ModelFileError(path, f"array {name!r} holds values that are not numbers")
            layers.append((arrays[w_name], arrays[b_name]))
            expected_in = shape[1]
        if expected_in != len(CLASSES):
            raise ModelFileError(path, f"member {i} ends with {expected_in} outputs, expected {len(CLASSES)}")
        members.append(layers)
    extra = set(arrays) - set(_CURVE_ARRAYS) - set(_DIGIT_ARRAYS) - {
        f"m{i}_{k}{j}" for i, s in enumerate(layout) for j in range(len(s)) for k in "Wb"
    }
    if extra:
        raise ModelFileError(path, f"unexpected arrays {_few(sorted(extra))}")
    return members
