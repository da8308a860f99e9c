"""Tests of recognizer.digits.training (small seeded runs only)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.neural_network import MLPClassifier

from recognizer.cli.model import reader_cell
from recognizer.digits.marks import not_digit_marks, printed_digits
from recognizer.digits.model import NOT_A_DIGIT, DigitModel, deskew
from recognizer.digits.training import (
    MemberSettings,
    TrainingData,
    TrainSettings,
    epoch_data,
    export_member,
    learning_rate_at,
    quick_model,
    train_model,
)


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_numpy_inference_equals_sklearn(digits) -> None:
    images, labels = digits
    marks = not_digit_marks(40, rng=np.random.default_rng(3))
    cells = np.concatenate([images, marks])
    y = np.concatenate([labels, np.full(40, NOT_A_DIGIT)])
    x = deskew(cells).reshape(-1, 784)
    clf = MLPClassifier(hidden_layer_sizes=(16, 8), max_iter=30, random_state=0).fit(x, y)
    model = DigitModel(members=[export_member(clf)], temperature=1.0)
    assert_allclose(model.predict_proba(cells[:50]), clf.predict_proba(x[:50]), atol=1e-5)


def test_quick_training_is_reproducible_and_calibrated(digits) -> None:
    images, labels = digits
    a = quick_model(images, labels, seed=3)
    b = quick_model(images, labels, seed=3)
    for la, lb in zip(a.members[0], b.members[0]):
        assert_array_equal(la[0], lb[0])
        assert_array_equal(la[1], lb[1])
    assert a.temperature == b.temperature > 0
    thresholds = [a.threshold_for(t) for t in (0.0, 0.001, 0.01, 0.05, 0.2, 1.0)]
    assert all(p >= q for p, q in zip(thresholds, thresholds[1:]))
    assert a.metadata["training_settings"]["seed"] == 3
    c = quick_model(images, labels, seed=4)
    assert not np.array_equal(a.members[0][0][0], c.members[0][0][0])


TINY = TrainSettings(
    members=(MemberSettings((16,), "deskew"), MemberSettings((12, 8), "none")),
    epochs=3, office_pool=40, office_per_epoch=20, office_validation=20, validation_junk=60,
    calibration_copies=1, replay_per_class=5, weight_dtype="float16",
)


def test_tiny_committee_with_stroke_model_digits_is_reproducible(digits) -> None:
    """Same seed, same weights: the whole recipe (stroke-model digits cut by the reader's path,
    fresh data every epoch, two members preparing cells differently) on a tiny setting."""
    images, labels = digits
    a = train_model(images, labels, seed=3, settings=TINY, cut=reader_cell)
    b = train_model(images, labels, seed=3, settings=TINY, cut=reader_cell)
    c = train_model(images, labels, seed=4, settings=TINY, cut=reader_cell)
    assert a.member_preprocessing == ("deskew", "none")
    assert [[w.shape for w, _ in m] for m in a.members] == [[(784, 16), (16, 11)], [(784, 12), (12, 8), (8, 11)]]
    for ma, mb in zip(a.members, b.members):
        for (wa, ba), (wb, bb) in zip(ma, mb):
            assert wa.dtype == np.float16
            assert_array_equal(wa, wb)
            assert_array_equal(ba, bb)
    assert a.temperature == b.temperature
    assert not np.array_equal(a.members[0][0][0], c.members[0][0][0])
    meta = a.metadata
    assert meta["training_data"]["stroke_model_digits"] == 40
    assert meta["validation"]["stroke_model"]["n"] == 20
    assert TrainSettings.from_metadata(meta["training_settings"]) == replace(TINY, seed=3)


def test_stroke_model_digits_need_the_cell_cutter(digits) -> None:
    with pytest.raises(ValueError, match="cell cutter"):
        train_model(*digits, settings=TINY)


def test_epoch_data_is_drawn_afresh(digits) -> None:
    images, labels = digits
    office = printed_digits(30, rng=np.random.default_rng(9))
    data = TrainingData(images[:50], labels[:50], *office)
    settings = replace(TINY, office_per_epoch=20, junk_share=0.1)
    rng = np.random.default_rng(0)
    x1, y1 = epoch_data(data, settings, rng)
    x2, y2 = epoch_data(data, settings, rng)
    assert x1.shape == (77, 28, 28) and np.bincount(y1, minlength=11)[NOT_A_DIGIT] == 7  # 50 + 20 digits, 10 % marks
    assert not np.allclose(np.sort(x1.reshape(77, -1), axis=0), np.sort(x2.reshape(77, -1), axis=0))
    x3, y3 = epoch_data(data, settings, np.random.default_rng(0))
    assert_array_equal(x1, x3)
    assert_array_equal(y1, y3)


def test_learning_rate_falls_geometrically() -> None:
    s = replace(TINY, epochs=5, learning_rate=1e-3, final_learning_rate=1e-5)
    rates = [learning_rate_at(e, s) for e in range(5)]
    assert rates[0] == pytest.approx(1e-3) and rates[-1] == pytest.approx(1e-5)
    assert_allclose(np.diff(np.log10(rates)), -0.5)


def test_old_training_settings_are_understood() -> None:
    """Format-2 metadata: one ``hidden`` for ``n_members`` deskewing members, fields since dropped."""
    old = {"seed": 2, "hidden": [512], "n_members": 2, "n_augment": 10, "epochs": 40, "junk_share": 0.05}
    s = TrainSettings.from_metadata(old)
    assert s.members == (MemberSettings((512,), "deskew"),) * 2 and s.epochs == 40 and s.seed == 2
