"""Tests of recognizer.digits.handwriting beyond the demo writers: office hands, digits written into boxes."""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from numpy.testing import assert_array_equal

from recognizer.cli.model import reader_cell
from recognizer.digits.handwriting import Writer, office_digits, write_in_box
from recognizer.synth import handwriting as synth_handwriting


def _holes(ink: np.ndarray) -> int:
    _, hierarchy = cv2.findContours((ink > 100).astype(np.uint8), cv2.RETR_CCOMP, cv2.CHAIN_APPROX_SIMPLE)
    return 0 if hierarchy is None else int((hierarchy[0][:, 3] >= 0).sum())


def test_synth_re_exports_the_same_writer() -> None:
    assert synth_handwriting.Writer is Writer


def test_demo_writers_are_unchanged_by_the_new_allographs() -> None:
    """The new flags default to off and use a seed stream of their own: old writers draw as before."""
    plain = Writer(seed=5)
    flagged = Writer(seed=5, continental_one=True, hooked_nine=True)
    for digit in (0, 2, 3, 4, 5, 6, 7, 8):
        assert_array_equal(plain.draw(digit, rng=np.random.default_rng(1)),
                           flagged.draw(digit, rng=np.random.default_rng(1)))
    for digit in (1, 9):
        assert not np.array_equal(plain.draw(digit, rng=np.random.default_rng(1)),
                                  flagged.draw(digit, rng=np.random.default_rng(1)))


def _ink_columns(ink: np.ndarray, rows: slice) -> float:
    """Width of the ink in a band of rows, relative to the ink's height."""
    ys = np.nonzero(ink.max(axis=1) > 127)[0]
    band = ink[ys[0]:ys[-1] + 1][rows]
    xs = np.nonzero(band.max(axis=0) > 127)[0]
    return (np.ptp(xs) + 1) / (ys[-1] - ys[0] + 1)


def test_continental_one_has_a_long_up_stroke() -> None:
    rng = np.random.default_rng(0)
    plain, continental = Writer(slant_deg=0, seed=2), Writer(slant_deg=0, seed=2, continental_one=True)
    wide = np.median([_ink_columns(continental.draw(1, rng=rng), slice(0, None)) for _ in range(10)])
    thin = np.median([_ink_columns(plain.draw(1, rng=rng), slice(0, None)) for _ in range(10)])
    assert wide > thin + 0.2


def test_hooked_nine_keeps_its_loop_and_curls_its_foot() -> None:
    rng = np.random.default_rng(0)
    writer = Writer(slant_deg=0, seed=2, hooked_nine=True, wobble=0.005)
    drawn = [writer.draw(9, rng=rng) for _ in range(10)]
    assert np.bincount([_holes(d) for d in drawn]).argmax() == 1
    foot = np.median([_ink_columns(d, slice(-6, None)) for d in drawn])  # the lowest rows reach left
    plain = np.median([_ink_columns(Writer(slant_deg=0, seed=2).draw(9, rng=rng), slice(-6, None))
                       for _ in range(10)])
    assert foot > plain + 0.1


def test_office_writers_span_the_hands_an_office_sees() -> None:
    rng = np.random.default_rng(3)
    hands = [Writer.office(rng) for _ in range(300)]
    widths = [w.stroke_width for w in hands]
    assert min(widths) < 0.06 and max(widths) > 0.17  # thin ballpoint .. thick felt-tip
    for flag in ("open_four", "crossed_seven", "continental_one", "hooked_nine"):
        share = np.mean([getattr(w, flag) for w in hands])
        assert 0.15 < share < 0.65, flag
    assert min(w.slant_deg for w in hands) < -10 and max(w.slant_deg for w in hands) > 25
    assert Writer.office(np.random.default_rng(8)) == Writer.office(np.random.default_rng(8))


def test_write_in_box_prints_the_box_and_writes_inside_it() -> None:
    rng = np.random.default_rng(1)
    for digit in range(10):
        page, (x0, y0, x1, y1), dpi = write_in_box(Writer.office(rng), digit, rng=rng, touch=0.0)
        assert page.dtype == np.uint8 and 190 <= dpi <= 310
        assert page[y0 - 1, x0:x1].mean() < 130 and page[y1, x0:x1].mean() < 130  # printed walls
        inside = page[y0:y1, x0:x1]
        assert (inside < 100).mean() > 0.02  # a written digit
        outside = page[: y0 - 1 - int(0.5 * dpi / 25.4)]
        assert (outside < 100).mean() < 0.001  # nothing written above the box


def test_office_digits_are_cut_by_the_reader_and_balanced() -> None:
    cells, labels = office_digits(30, rng=np.random.default_rng(2), cut=reader_cell, per_writer=10)
    assert cells.shape == (30, 28, 28) and cells.dtype == np.float32
    assert_array_equal(np.bincount(labels), [3] * 10)
    assert cells.min() >= 0 and cells.max() <= 1 and (cells.reshape(30, -1).max(axis=1) > 0.5).all()
    again, _ = office_digits(30, rng=np.random.default_rng(2), cut=reader_cell, per_writer=10)
    assert_array_equal(cells, again)


def test_office_digits_refuse_a_cutter_that_sees_nothing() -> None:
    with pytest.raises(RuntimeError, match="blank"):
        office_digits(1, rng=np.random.default_rng(0), cut=lambda page, box, dpi: None)
