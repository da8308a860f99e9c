"""Hostile model files (issue 12): each is refused with a ModelFileError naming the file,
before anything is allocated from what the file declares, and nothing in it runs code.

The attacks are the ones seen when the loader was tried as an attacker: metadata nested very
deep, metadata or arrays of the wrong kind, a declared shape of terabytes, a zip bomb, an
empty calibration curve, and an archive of 100,000 entries.
"""

from __future__ import annotations

import io
import json
import time
import tracemalloc
import zipfile
from pathlib import Path

import numpy as np
import pytest

from recognizer.digits.model import MODEL_LIMITS, DigitModel, ModelFileError, json_depth, load_model


def _tiny() -> DigitModel:
    """One member 784 -> 2 -> 11."""
    rng = np.random.default_rng(0)
    return DigitModel(
        members=[[(rng.normal(0, 0.1, (784, 2)).astype(np.float32), np.zeros(2, np.float32)),
                  (rng.normal(0, 1, (2, 11)).astype(np.float32), np.zeros(11, np.float32))]],
        curve_threshold=np.array([0.2, 0.5, 0.9]),
        curve_residual=np.array([0.02, 0.01, 0.0]),
        metadata={"name": "tiny"},
    )


def _entries(path: Path) -> dict[str, bytes]:
    with zipfile.ZipFile(path) as zf:
        return {name: zf.read(name) for name in zf.namelist()}


def _write(path: Path, entries: dict[str, bytes]) -> None:
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, data in entries.items():
            zf.writestr(name, data)


def _npy(array: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array(buf, array, allow_pickle=False)
    return buf.getvalue()


def _npy_header(header: str) -> bytes:
    """A version 1.0 ``.npy`` header with this dictionary text, padded as numpy pads it."""
    text = header + " " * (63 - (10 + len(header)) % 64) + "\n"
    return b"\x93NUMPY\x01\x00" + len(text).to_bytes(2, "little") + text.encode("latin1")


@pytest.fixture
def good(tmp_path: Path) -> Path:
    path = tmp_path / "hostile.npz"
    _tiny().save(path)
    load_model(path)  # sound before each attack
    return path


def _refused(path: Path, message: str) -> ModelFileError:
    with pytest.raises(ModelFileError, match=message) as info:
        load_model(path)
    assert "hostile.npz" in str(info.value) and len(str(info.value)) < 400
    return info.value


def _with_metadata(path: Path, text: str) -> None:
    entries = _entries(path)
    entries["metadata.npy"] = _npy(np.array(text))
    _write(path, entries)


def test_metadata_nested_very_deep(good: Path) -> None:
    _with_metadata(good, "[" * 100_000 + "]" * 100_000)
    _refused(good, "nests deeper than")
    assert json_depth('{"a": "[[[[[", "b": [[1]]}') == 3  # brackets inside strings do not count
    assert json_depth('"unterminated \\') == 0


def test_metadata_of_the_wrong_kind(good: Path) -> None:
    entries = _entries(good)
    entries["metadata.npy"] = _npy(np.zeros(3, np.float32))
    _write(good, entries)
    _refused(good, "'metadata' is float32 .* must be a JSON text entry")


def test_metadata_not_an_object(good: Path) -> None:
    _with_metadata(good, json.dumps([1, 2, 3]))
    _refused(good, "not an inkcount-digit-model file")


def test_an_array_of_the_wrong_kind(good: Path) -> None:
    entries = _entries(good)
    entries["m0_W0.npy"] = _npy(np.array(["text"] * 4))
    _write(good, entries)
    _refused(good, "'m0_W0' is <U4 .* must be floating-point numbers")


def test_an_entry_that_is_no_array(good: Path) -> None:
    entries = _entries(good)
    entries["m0_W0.txt"] = b"hello"
    _write(good, entries)
    _refused(good, "unexpected arrays 'm0_W0.txt'")
    entries.pop("m0_W0.txt")
    entries["m0_W0.npy"] = b"hello, not an array"
    _write(good, entries)
    _refused(good, "'m0_W0' has a damaged header")


def test_a_declared_shape_of_terabytes(good: Path) -> None:
    entries = _entries(good)
    entries["m0_W0.npy"] = _npy_header("{'descr': '<f8', 'fortran_order': False, 'shape': (1000000, 1000000), }")
    _write(good, entries)
    _refused(good, "'m0_W0' declares 8000000000000 bytes of data")


def test_a_zip_bomb_is_refused_before_it_is_unpacked(good: Path) -> None:
    entries = _entries(good)
    zeros = np.zeros(300 << 20, np.uint8)  # 300 MB of nothing: about 300 kB deflated
    with zipfile.ZipFile(good, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, data in entries.items():
            zf.writestr(name, data)
        with zf.open("replay_images.npy", "w") as fh:
            fh.write(_npy_header("{'descr': '|u1', 'fortran_order': False, 'shape': (401257, 28, 28), }"))
            fh.write(zeros)
    del zeros
    assert good.stat().st_size < 2_000_000
    tracemalloc.start()
    started = time.perf_counter()
    try:
        _refused(good, "would take 315 MB unpacked; a model file may hold at most 268 MB")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 20_000_000 and time.perf_counter() - started < 5


def test_an_empty_calibration(good: Path) -> None:
    model = _tiny()
    model.curve_threshold, model.curve_residual = np.zeros(0), np.zeros(0)
    model.save(good)
    _refused(good, "calibration curve is empty")


@pytest.mark.parametrize(("threshold", "residual", "message"), [
    ([0.9, 0.5], [0.0, 0.01], "must rise from 0 to 1"),
    ([0.5, 1.5], [0.01, 0.0], "must rise from 0 to 1"),
    ([0.5, np.nan], [0.01, 0.0], "not numbers"),
    ([0.5, 0.9], [2.0, 0.0], "between 0 and 1"),
], ids=["falling", "above-one", "nan", "residual"])
def test_an_impossible_calibration(good: Path, threshold, residual, message: str) -> None:
    model = _tiny()
    model.curve_threshold, model.curve_residual = np.array(threshold), np.array(residual)
    model.save(good)
    _refused(good, message)


def test_weights_that_are_not_numbers(good: Path) -> None:
    model = _tiny()
    model.members[0][0][0][3, 1] = np.inf
    model.save(good)
    _refused(good, "'m0_W0' holds values that are not numbers")


def test_a_huge_number_in_the_metadata(good: Path) -> None:
    meta = json.loads(str(np.load(good)["metadata"]))
    for temperature in ("1" + "0" * 400, "1" + "0" * 5000):
        _with_metadata(good, json.dumps(meta).replace('"temperature": 1.0', f'"temperature": {temperature}'))
        _refused(good, "temperature|not valid JSON")


@pytest.mark.parametrize("count", [MODEL_LIMITS["entries"] + 100, 100_000])
def test_an_archive_of_too_many_entries(good: Path, count: int) -> None:
    entries = _entries(good)
    with zipfile.ZipFile(good, "w", zipfile.ZIP_STORED) as zf:
        for name, data in entries.items():
            zf.writestr(name, data)
        for i in range(count - len(entries)):
            zf.writestr(f"m{i}_W9.npy", b"")
    error = _refused(good, f"holds {count} arrays|zip64 archive")
    assert "m1_W9" not in str(error)  # the refusal does not list the names


def test_an_encrypted_or_strangely_packed_entry(good: Path) -> None:
    data = bytearray(good.read_bytes())
    directory = data.rfind(b"PK\x01\x02")  # the last entry of the central directory
    data[directory + 10:directory + 12] = (14).to_bytes(2, "little")  # method 14 (LZMA)
    good.write_bytes(bytes(data))
    _refused(good, "packed with an unknown method")
