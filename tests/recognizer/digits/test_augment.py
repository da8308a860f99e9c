"""Tests of recognizer.digits.augment (small seeded runs only)."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose, assert_array_equal

from recognizer.digits.augment import augment, distortion_maps, fresh_copies, low_resolution, stroke_width


def test_augment_is_seeded_and_keeps_layout(digits) -> None:
    images, _ = digits
    a = augment(images[:20], np.random.default_rng(1))
    b = augment(images[:20], np.random.default_rng(1))
    assert_array_equal(a, b)
    assert a.shape == (20, 28, 28) and a.min() >= 0 and a.max() <= 1
    assert not np.allclose(a, images[:20])
    rows = np.nonzero(a.max(axis=2) > 0.05)
    cols = np.nonzero(a.max(axis=1) > 0.05)
    for i in range(20):  # MNIST layout: longer side of the ink box about 20 px
        height = np.ptp(rows[1][rows[0] == i]) + 1
        width = np.ptp(cols[1][cols[0] == i]) + 1
        assert 18 <= max(height, width) <= 22


def _ink_box_side(cells: np.ndarray) -> list[int]:
    sides = []
    for cell in cells:
        rows = np.nonzero(cell.max(axis=1) > 0.05)[0]
        cols = np.nonzero(cell.max(axis=0) > 0.05)[0]
        sides.append(max(np.ptp(rows), np.ptp(cols)) + 1)
    return sides


def test_fresh_copies_are_seeded_new_and_in_the_mnist_layout(digits) -> None:
    images, _ = digits
    a = fresh_copies(images[:30], np.random.default_rng(1), low_res=0.3)
    assert_array_equal(a, fresh_copies(images[:30], np.random.default_rng(1), low_res=0.3))
    assert a.shape == (30, 28, 28) and a.dtype == np.float32 and a.min() >= 0 and a.max() <= 1
    assert not np.allclose(a, fresh_copies(images[:30], np.random.default_rng(2), low_res=0.3))
    assert all(18 <= s <= 22 for s in _ink_box_side(a))
    assert_array_equal(fresh_copies(images[:5], np.random.default_rng(1), keep=1.0), images[:5])


def test_distortion_maps_without_distortion_are_the_identity() -> None:
    map_x, map_y = distortion_maps(3, np.random.default_rng(0), strength=0.0, elastic=0.0)
    ys, xs = np.mgrid[0:28, 0:28]
    assert_allclose(map_x, np.broadcast_to(xs, (3, 28, 28)), atol=1e-5)
    assert_allclose(map_y, np.broadcast_to(ys, (3, 28, 28)), atol=1e-5)
    bent_x, _ = distortion_maps(3, np.random.default_rng(0), strength=1.0, elastic=1.0)
    assert np.abs(bent_x - xs).max() > 1.0


def test_low_resolution_capture_is_coarse_but_keeps_the_layout(digits) -> None:
    images, _ = digits
    rng = np.random.default_rng(3)
    coarse = np.stack([low_resolution(cell, rng) for cell in images[:20]])
    assert all(18 <= s <= 22 for s in _ink_box_side(coarse))
    # fewer sharp edges: the mean absolute step between neighbouring pixels drops
    step = lambda c: np.abs(np.diff(c, axis=-1)).mean()  # noqa: E731
    assert step(coarse) < step(images[:20])
    assert_array_equal(low_resolution(np.zeros((28, 28), np.float32), rng), 0.0)


def test_stroke_width_thickens_or_thins(digits) -> None:
    images, _ = digits
    rng = np.random.default_rng(0)
    ink = [stroke_width(cell, rng).sum() / cell.sum() for cell in images[:40]]
    assert min(ink) < 0.9 and max(ink) > 1.2
