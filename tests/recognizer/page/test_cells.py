"""Cutting and cleaning cells: box-line remnants, crossing strokes, blank test, MNIST layout."""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from recognizer.synth import forms as fg
from recognizer.page.boxes import Box, find_fields
from recognizer.digits.preprocess import to_model_input as normalise
from recognizer.page.cells import Cell, cut_cell, cut_cells, is_blank, remove_box_lines

MM = 25.4


def _box_page(dpi: int, *, box_mm=(6.0, 7.2), line_mm=0.3, ink=None, paper=255,
              line_grey=0) -> tuple[np.ndarray, Box]:
    """A page with one printed box; ``ink(page, box, px_per_mm)`` may write into it.

    Returns the page and the box's inner rectangle.
    """
    s = dpi / MM
    w, h, t = int(round(box_mm[0] * s)), int(round(box_mm[1] * s)), max(1, int(round(line_mm * s)))
    x, y = int(round(4 * s)), int(round(4 * s))
    page = np.full((h + 2 * y, w + 2 * x), paper, np.uint8)
    page[y - t:y, x - t:x + w + t] = line_grey
    page[y + h:y + h + t, x - t:x + w + t] = line_grey
    page[y - t:y + h + t, x - t:x] = line_grey
    page[y - t:y + h + t, x + w:x + w + t] = line_grey
    box = Box(x, y, x + w, y + h)
    if ink is not None:
        ink(page, box, s)
    return page, box


def _stroke(page, p0, p1, width_px, grey=0):
    cv2.line(page, (int(p0[0]), int(p0[1])), (int(p1[0]), int(p1[1])), grey,
             max(1, int(round(width_px))), cv2.LINE_AA)


# ---------------------------------------------------------------- box lines

def test_remnant_rows_are_removed():
    mask = np.zeros((30, 24), bool)
    mask[:2, :] = True          # top line remnant
    mask[:, -2:] = True         # right line remnant
    mask[10:20, 8:14] = True    # a blot in the middle
    out = remove_box_lines(mask, band_px=4)
    expected = np.zeros_like(mask)
    expected[10:20, 8:14] = True
    assert_array_equal(out, expected)


def test_stroke_crossing_a_line_keeps_its_connected_part():
    mask = np.zeros((30, 24), bool)
    mask[:2, :] = True          # the top line
    mask[:25, 11:13] = True     # a "1" running out through the top line
    out = remove_box_lines(mask, band_px=4)
    assert out[:25, 11:13].all()             # the whole stroke stays, up to the edge
    assert not out[:2, :9].any() and not out[:2, 15:].any()   # the line goes


def test_short_line_bits_at_the_edge_are_removed():
    mask = np.zeros((30, 24), bool)
    mask[0:2, 3:9] = True       # a bit of a broken line, less than the coverage
    mask[26:30, 20:24] = True   # a corner bit
    mask[8:22, 10:12] = True
    out = remove_box_lines(mask, band_px=4)
    assert out.sum() == 14 * 2 and out[8:22, 10:12].all()


def test_cut_cell_removes_box_lines_and_keeps_a_crossing_stroke():
    def write(page, box, s):
        x = (box.x0 + box.x1) // 2
        _stroke(page, (x, box.y0 - 0.8 * s), (x, box.y1 - 1.5 * s), 0.4 * s)
    page, box = _box_page(300, ink=write)
    # the box found a pixel too large, so the lines reach into it
    grown = Box(box.x0 - 1, box.y0 - 1, box.x1 + 1, box.y1 + 1)
    cell = cut_cell(page, grown, dpi=300)
    assert cell.ink.shape == (grown.height, grown.width)
    assert cell.ink[:, :3].max() < 0.5 and cell.ink[:, -3:].max() < 0.5   # side walls gone
    assert cell.ink[-3:].max() < 0.5                                       # bottom gone
    column = cell.ink[:, grown.width // 2 - 2:grown.width // 2 + 3].max(axis=1)
    stroke_rows = np.flatnonzero(column > 0.5)
    assert stroke_rows.min() <= 1          # the stroke still reaches the top edge
    assert not cell.blank
    m = max(1, int(round(0.8 * 300 / MM)))
    assert cell.crop.shape == (grown.height + 2 * m, grown.width + 2 * m)
    assert cell.crop.min() == 0            # the crop keeps the lines as scanned


# ---------------------------------------------------------------- blank test

@pytest.mark.parametrize("dpi", [150, 300, 600])
def test_empty_box_is_blank(dpi):
    page, box = _box_page(dpi)
    cell = cut_cell(page, box, dpi=dpi)
    assert cell.blank and cell.mnist is None
    assert cell.ink.max() < 0.5


@pytest.mark.parametrize("dpi", [150, 300, 600])
def test_dust_speck_is_blank(dpi):
    def speck(page, box, s):  # 0.25 mm across
        r = max(1, int(round(0.125 * s)))
        cx, cy = (box.x0 + box.x1) // 2, (box.y0 + box.y1) // 2
        page[cy - r:cy + r, cx - r:cx + r] = 40
    page, box = _box_page(dpi, ink=speck)
    assert cut_cell(page, box, dpi=dpi).blank


@pytest.mark.parametrize("dpi", [150, 300, 600])
def test_faint_one_is_not_blank(dpi):
    def faint_one(page, box, s):  # a thin pencil "1": 0.25 mm wide, 60 grey levels below paper
        x = (box.x0 + box.x1) / 2
        _stroke(page, (x + 0.3 * s, box.y0 + 1.5 * s), (x - 0.3 * s, box.y1 - 1.5 * s),
                0.25 * s, grey=170)
    page, box = _box_page(dpi, ink=faint_one, paper=230, line_grey=120)
    cell = cut_cell(page, box, dpi=dpi)
    assert not cell.blank
    assert cell.mnist is not None and cell.mnist.max() == pytest.approx(1.0)


def test_faint_one_survives_uneven_light():
    def faint_one(page, box, s):
        x = (box.x0 + box.x1) / 2
        _stroke(page, (x, box.y0 + 1.5 * s), (x, box.y1 - 1.5 * s), 0.3 * s, grey=150)
    page, box = _box_page(300, ink=faint_one, paper=215, line_grey=90)
    shade = np.linspace(0.75, 1.0, page.shape[1])[None, :]  # darker to the left
    page = (page * shade).astype(np.uint8)
    assert not cut_cell(page, box, dpi=300).blank


def test_is_blank_scales_with_dpi():
    # the same 0.5 mm x 0.5 mm mark: at 150 dpi 3 x 3 px, at 600 dpi 12 x 12 px
    for dpi, side in ((150, 3), (600, 12)):
        ink = np.zeros((int(7 * dpi / MM), int(6 * dpi / MM)), np.float32)
        ink[10:10 + side, 10:10 + side] = 1.0
        assert is_blank(ink, dpi=dpi)
        ink[10:10 + 8 * side, 10:10 + side] = 1.0  # now a 4 mm upright stroke
        assert not is_blank(ink, dpi=dpi)


# ---------------------------------------------------------------- MNIST layout

def _com(img: np.ndarray) -> tuple[float, float]:
    rows, cols = np.indices(img.shape)
    return float((rows * img).sum() / img.sum()), float((cols * img).sum() / img.sum())


def _bbox(img: np.ndarray, level: float = 0.05) -> tuple[int, int]:
    ys, xs = np.nonzero(img > level)
    return int(ys.max() - ys.min() + 1), int(xs.max() - xs.min() + 1)


@pytest.mark.parametrize("shape, where", [
    ((60, 50), (slice(5, 55), slice(10, 40))),     # tall blot
    ((40, 80), (slice(10, 30), slice(5, 75))),     # wide blot
    ((12, 10), (slice(2, 10), slice(3, 8))),       # small: scaled up
])
def test_normalise_fits_bbox_in_20_and_centres_mass(shape, where):
    ink = np.zeros(shape, np.float32)
    ink[where] = 1.0
    ink[where[0].start:where[0].start + 3, where[1]] = 0.5   # uneven mass
    out = normalise(ink)
    assert out.shape == (28, 28) and out.dtype == np.float32
    assert 0.0 <= out.min() and out.max() == pytest.approx(1.0)
    assert max(_bbox(out)) == 20
    cy, cx = _com(out)
    assert abs(cy - 14) <= 0.5 and abs(cx - 14) <= 0.5


def test_normalise_keeps_a_thin_one_thin():
    ink = np.zeros((80, 60), np.float32)
    ink[10:70, 28:32] = 1.0                  # 60 x 4 px upright stroke
    out = normalise(ink)
    h, w = _bbox(out)
    assert h == 20 and w <= 3                # not stretched to 20 wide
    cy, cx = _com(out)
    assert abs(cy - 14) <= 0.5 and abs(cx - 14) <= 0.5


def test_normalise_of_nothing_is_black():
    assert_array_equal(normalise(np.zeros((30, 30), np.float32)), np.zeros((28, 28)))


def test_same_digit_at_two_resolutions_normalises_alike():
    def two(page, box, s):
        pts = np.array([[1.7, 2.0], [3.0, 1.4], [4.3, 2.2], [3.6, 3.8], [1.8, 5.6], [4.5, 5.6]])
        pts = (pts * s + [box.x0, box.y0]).astype(np.int32)
        cv2.polylines(page, [pts], False, 0, max(1, int(round(0.45 * s))), cv2.LINE_AA)
    cells = [cut_cell(*_box_page(dpi, ink=two), dpi=dpi) for dpi in (150, 600)]
    a, b = (c.mnist for c in cells)
    assert np.corrcoef(a.ravel(), b.ravel())[0, 1] > 0.8


# ---------------------------------------------------------------- on demo forms

def test_cells_of_a_demo_form_blank_exactly_where_nothing_was_written():
    layout = fg.orchard_card()
    rng = np.random.default_rng(11)
    form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=200, rng=rng)
    scan = fg.scan_distort(form, rng=rng, skew_deg=2.0, noise=0.5, lighting=0.3)
    finding = find_fields(scan.image, dpi=200)
    names = fg.fnames(layout)
    found = {f.name: f for f in finding.fields}
    for spec in layout.fields:
        cells = cut_cells(finding.image, found[names[spec.name]].boxes, dpi=200)
        assert all(isinstance(c, Cell) for c in cells)
        assert [c.blank for c in cells] == [char == "" for char in scan.cells[spec.name]]
        for cell in cells:
            if not cell.blank:
                assert cell.mnist.shape == (28, 28)
                assert_allclose(_com(cell.mnist), (14, 14), atol=0.5)


def test_box_off_the_page_is_padded_with_paper():
    page = np.full((60, 60), 255, np.uint8)
    cell = cut_cell(page, Box(-10, -10, 30, 30), dpi=150)
    assert cell.blank and cell.crop.min() == 255


@pytest.mark.parametrize("args, error", [
    ((np.zeros((10, 10), np.float64), Box(1, 1, 5, 5), 150), TypeError),
    ((np.zeros((10, 10), np.uint8), Box(3, 3, 3, 8), 150), ValueError),
    ((np.zeros((10, 10), np.uint8), Box(1, 1, 5, 5), 0), ValueError),
])
def test_bad_arguments_raise(args, error):
    image, box, dpi = args
    with pytest.raises(error):
        cut_cell(image, box, dpi=dpi)


def test_a_crop_turned_alone_matches_the_crop_of_the_page_turned():
    """Reading cuts each box out of the page as scanned (``transform``) instead of turning the
    whole page first: the cells must come out as if cut from the turned page."""
    layout = fg.orchard_card()
    rng = np.random.default_rng(12)
    form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=300, rng=rng)
    scan = fg.scan_distort(form, rng=rng, skew_deg=-2.2, noise=0.3)
    finding = find_fields(scan.image, dpi=300)
    page, transform = finding.cells_source()
    assert page is scan.image or np.array_equal(page, scan.image)
    assert transform is not None and finding.deskewed
    boxes = [b for f in finding.fields for b in f.boxes]
    alone = cut_cells(page, boxes, dpi=300, transform=transform)
    turned = cut_cells(finding.image, boxes, dpi=300)  # the whole page turned, on first use
    assert finding.cells_source()[1] is None  # once made, the turned page is used
    for a, b in zip(alone, turned):
        assert a.crop.shape == b.crop.shape
        assert np.abs(a.crop.astype(int) - b.crop).max() <= 2  # fixed-point rounding of OpenCV's warp
        assert a.blank == b.blank
        if not a.blank:
            assert np.abs(a.mnist - b.mnist).max() < 0.1


def test_ink_levels_from_the_histogram_equal_numpy_percentiles():
    """The paper level and noise of a crop are taken from its histogram: the same figures as
    ``np.percentile`` (linear interpolation) and ``np.median``."""
    from recognizer.page.ruling import median_of_counts, percentile_of_counts

    def _percentile(hist, q):
        return percentile_of_counts(hist, q)

    def _median_distance(hist, centre):
        return median_of_counts(np.abs(np.arange(256) - centre), hist)

    rng = np.random.default_rng(5)
    for n in (1, 2, 3, 10, 257, 4000):
        values = np.clip(rng.normal(200, 40, n), 0, 255).astype(np.uint8)
        hist = np.bincount(values, minlength=256)
        for q in (0, 25, 40, 50, 75, 90, 100):
            assert _percentile(hist, q) == pytest.approx(np.percentile(values.astype(np.float32), q), abs=1e-4)
        centre = float(np.median(values))
        assert _median_distance(hist, centre) == pytest.approx(float(np.median(np.abs(values - centre))))
