"""Tests for the stroke model of handwritten digits."""

import cv2
import numpy as np
import pytest
from numpy.testing import assert_array_equal

from recognizer.synth.handwriting import STRAY_MARK_KINDS, Writer, draw_stray_mark

WRITERS = {
    "default": Writer(),
    "open_four": Writer(open_four=True, crossed_seven=True, serif_one=True, seed=3),
    "distinctive": Writer.distinctive(),
    "random": Writer.random(np.random.default_rng(11)),
}


def _holes(ink: np.ndarray) -> int:
    """Number of enclosed paper regions in an ink image (ink = 255 on 0)."""
    _, hierarchy = cv2.findContours((ink > 100).astype(np.uint8), cv2.RETR_CCOMP,
                                    cv2.CHAIN_APPROX_SIMPLE)
    return 0 if hierarchy is None else int((hierarchy[0][:, 3] >= 0).sum())


def _shear(ink: np.ndarray) -> float:
    """Forward lean of the ink, tan(angle): slope of x against upward y from central moments."""
    m = cv2.moments(ink.astype(np.float32))
    return -m["mu11"] / m["mu02"]


@pytest.mark.parametrize("writer", WRITERS.values(), ids=WRITERS.keys())
@pytest.mark.parametrize("digit", range(10))
def test_each_digit_draws_ink_inside_the_image(writer, digit):
    rng = np.random.default_rng(digit)
    ink = writer.draw(digit, rng=rng, size=48)
    assert ink.shape == (48, 48) and ink.dtype == np.uint8
    assert ink.max() == 255
    covered = (ink > 127).mean()
    assert 0.03 < covered < 0.45
    border = np.concatenate([ink[0], ink[-1], ink[:, 0], ink[:, -1]])
    assert border.max() == 0
    rows = np.nonzero(ink.max(axis=1) > 127)[0]
    assert rows[-1] - rows[0] > 0.5 * 48  # a digit, not a speck


def test_antialiased_edges():
    ink = Writer().draw(8, rng=np.random.default_rng(0), size=64)
    grey = ((ink > 0) & (ink < 255)).sum()
    assert grey > 0.2 * (ink == 255).sum()


@pytest.mark.parametrize("writer", WRITERS.values(), ids=WRITERS.keys())
def test_same_seed_same_drawing(writer):
    a = [writer.draw(d, rng=np.random.default_rng(5)) for d in range(10)]
    b = [writer.draw(d, rng=np.random.default_rng(5)) for d in range(10)]
    for x, y in zip(a, b):
        assert_array_equal(x, y)


def test_random_writer_is_reproducible():
    a = Writer.random(np.random.default_rng(4))
    b = Writer.random(np.random.default_rng(4))
    assert a == b
    assert_array_equal(a.draw(3, rng=np.random.default_rng(0)),
                       b.draw(3, rng=np.random.default_rng(0)))


@pytest.mark.parametrize("digit", range(10))
def test_different_seeds_differ(digit):
    writer = Writer()
    a = writer.draw(digit, rng=np.random.default_rng(1))
    b = writer.draw(digit, rng=np.random.default_rng(2))
    assert np.abs(a.astype(int) - b.astype(int)).mean() > 2.0
    other = Writer(seed=99).draw(digit, rng=np.random.default_rng(1))
    assert np.abs(a.astype(int) - other.astype(int)).mean() > 2.0


def test_different_writers_differ():
    rng = np.random.default_rng(0)
    styles = [Writer.random(rng) for _ in range(5)]
    assert len({round(w.slant_deg, 3) for w in styles}) == 5
    assert len({w.seed for w in styles}) == 5


def test_rejects_non_digits():
    with pytest.raises(ValueError):
        Writer().draw(10, rng=np.random.default_rng(0))


def test_distinctive_slant_is_measurable():
    rng = np.random.default_rng(0)
    upright, leaning = Writer(slant_deg=0.0, seed=1), Writer.distinctive()
    up = np.mean([_shear(upright.draw(d, rng=rng)) for d in range(10) for _ in range(4)])
    lean = np.mean([_shear(leaning.draw(d, rng=rng)) for d in range(10) for _ in range(4)])
    assert abs(up) < np.tan(np.radians(6))
    assert np.degrees(np.arctan(lean)) == pytest.approx(leaning.slant_deg, abs=6)


# Loops of the printed digit shapes: 0, 6, 9 one, 8 two, a closed 4 one, an open 4 none.
EXPECTED_HOLES = {0: 1, 1: 0, 2: 0, 3: 0, 5: 0, 6: 1, 7: 0, 8: 2, 9: 1}


@pytest.mark.parametrize("open_four", [False, True])
def test_digit_topology(open_four):
    writer = Writer(open_four=open_four, seed=1, wobble=0.005)
    rng = np.random.default_rng(3)
    expected = {**EXPECTED_HOLES, 4: 0 if open_four else 1}
    for digit, holes in expected.items():
        counts = np.bincount([_holes(writer.draw(digit, rng=rng)) for _ in range(15)])
        assert counts.argmax() == holes, (digit, counts)


def _mid_height_span(ink: np.ndarray) -> float:
    """Widest ink run in the middle fifth of the ink rows, relative to the ink height."""
    rows = np.nonzero(ink.max(axis=1) > 127)[0]
    top, height = rows[0], rows[-1] - rows[0] + 1
    band = ink[top + int(0.4 * height): top + int(0.6 * height)] > 127
    spans = [np.ptp(np.nonzero(r)[0]) + 1 for r in band if r.any()]
    return max(spans) / height


def test_distinctive_writer_uses_its_allographs():
    writer = Writer.distinctive()
    rng = np.random.default_rng(0)
    assert np.bincount([_holes(writer.draw(4, rng=rng)) for _ in range(15)]).argmax() == 0
    crossed = np.median([_mid_height_span(writer.draw(7, rng=rng)) for _ in range(15)])
    plain = Writer(slant_deg=writer.slant_deg, seed=writer.seed)
    uncrossed = np.median([_mid_height_span(plain.draw(7, rng=rng)) for _ in range(15)])
    assert crossed > uncrossed + 0.1


@pytest.mark.parametrize("kind", STRAY_MARK_KINDS)
def test_stray_marks_are_small(kind):
    rng = np.random.default_rng(2)
    for _ in range(20):
        mark = draw_stray_mark(rng=rng, size=64, kind=kind)
        assert mark.shape == (64, 64) and mark.max() > 0
        assert (mark > 64).mean() < 0.02


def test_stray_mark_rejects_unknown_kind():
    with pytest.raises(ValueError):
        draw_stray_mark(rng=np.random.default_rng(0), kind="doodle")
