"""The lean batch file (formats 5 and 6): page images kept small, boxes still on their boxes, box crops
lean and kept a field to an image, cells cut again exactly as the reader cut them (from the crops or
the original scan), re-reading without the scan (and a moved scan's new place recorded), and format-4
and format-5 files upgraded.

Pages are generated (our stroke-model writers on the benchmark's A4 page, :mod:`recognizer.synth`):
geometry and exactness checks only.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from pathlib import Path

import cv2
import numpy as np
import pytest
from numpy.testing import assert_array_equal

from recognizer.batch import checks
from recognizer.batch import images
from recognizer.batch.images import (
    crop_margin, encode_crop, encode_page, encode_png, lean_crop, make_sheet, same_cell, sheet_crops, sheet_size,
)
from recognizer.batch.samples import StoredPages, labelled_samples
from recognizer.batch.schema import SCHEMA_VERSION
from recognizer.batch.store import Batch, BatchFileError
from recognizer.digits.model import load_model
from recognizer.ingest import ingest_scans
from recognizer.page.boxes import Box
from recognizer.page.cells import Cell, cut_cell, cut_cells
from recognizer.reading.page import PageReader
from recognizer.review import reread_unchecked, set_field
from recognizer.scans.files import load_page
from recognizer.synth import forms as formgen
from recognizer.synth.handwriting import Writer
from tests.support.batches import FakeModel

DPI = 300


@pytest.fixture(scope="module")
def model():
    return load_model(None)


@pytest.fixture(scope="module")
def read_batch(tmp_path_factory, model) -> tuple[Path, Path]:
    """One generated A4 page at 300 dpi, skewed and noisy as the reading benchmark's, read into a batch."""
    folder = tmp_path_factory.mktemp("lean")
    rng = np.random.default_rng(14)
    layout = formgen.bench_page()
    form = formgen.render_form(layout, formgen.random_values(layout, rng=rng), dpi=DPI,
                               writer=Writer.random(rng), rng=rng)
    form = formgen.scan_distort(form, rng=rng, skew_deg=1.3, noise=0.02, blur=0.6, lighting=0.2)
    scan = folder / "scans" / "page.png"
    scan.parent.mkdir()
    formgen.save_scan(form.image, scan, dpi=DPI, optimize=False)
    path = folder / "lean.inkcount"
    with Batch.create(path) as batch:
        summary = ingest_scans(batch, [scan], model=model)
    assert summary.pages_read == 1
    return path, scan


def _copy(read_batch, tmp_path: Path, *, move_scan: bool = False) -> tuple[Path, Path]:
    path, scan = read_batch
    folder = tmp_path / "copy"
    (folder / "scans").mkdir(parents=True)
    new_scan = folder / "scans" / scan.name
    shutil.copy(scan, new_scan)
    new_path = folder / path.name
    shutil.copy(path, new_path)
    conn = sqlite3.connect(new_path)
    with conn:
        conn.execute("UPDATE files SET path = ?, location = ?", (str(new_scan), str(new_scan)))
    conn.close()
    if move_scan:
        new_scan.rename(folder / "elsewhere.png")
    return new_path, new_scan


def _unusable_crops(path: Path) -> None:
    """Crops of another cut than today's (as if the cutter's margin had changed): only the original
    scan (or an exact page) can give the cells now."""
    conn = sqlite3.connect(path)
    with conn:
        conn.execute("UPDATE digits SET crop_png = ?", (encode_png(np.full((5, 5), 255, np.uint8)),))
    conn.close()


def _page_id(batch: Batch) -> int:
    return batch.rows("SELECT id FROM pages WHERE dpi IS NOT NULL")[0][0]


def _boxes(batch: Batch, page_id: int):
    return [(r[0], json.loads(r[1])[r[2]]) for r in batch.rows(
        "SELECT d.id, f.boxes, d.box FROM digits d JOIN fields f ON f.id = d.field_id WHERE f.page_id = ? "
        "ORDER BY d.id", (page_id,))]


def _reader_cuts(model, scan: Path, batch: Batch, page_id: int) -> dict[int, Cell]:
    """The cell the reader makes of every box of the page: the page read again by the reader, its
    boxes cut as it cuts them."""
    read = PageReader(model, keep_image=True).read(load_page(scan, 1))
    boxes = _boxes(batch, page_id)
    cells = cut_cells(read.image, [Box(*edges) for _, edges in boxes], dpi=read.dpi)
    return {digit_id: cell for (digit_id, _), cell in zip(boxes, cells)}


def _reader_cells(model, scan: Path, batch: Batch, page_id: int) -> dict[int, np.ndarray | None]:
    """The model input the reader makes of every box of the page."""
    return {digit_id: cell.mnist for digit_id, cell in _reader_cuts(model, scan, batch, page_id).items()}


def test_the_page_image_is_kept_small_and_its_boxes_land_on_the_boxes(read_batch):
    path, _scan = read_batch
    with Batch.open(path, read_only=True) as batch:
        page_id = _page_id(batch)
        stored = batch.stored_page(page_id)
        size = batch.rows("SELECT length(png) FROM page_images WHERE page_id = ?", (page_id,))[0][0]
        full = batch.page_image(page_id)
        assert stored.scale == pytest.approx(150 / DPI)
        assert stored.image.shape == (round(stored.height * stored.scale), round(stored.width * stored.scale))
        assert full.shape == (stored.height, stored.width) == (3508, 2480)  # A4 at 300 dpi, as read
        assert size < 60_000, size  # the full page was 1.8 MB as PNG
        margin = round(0.8 * DPI / 25.4)  # the crop's margin (recognizer.page.cells)
        for digit_id, (x0, y0, x1, y1) in _boxes(batch, page_id):
            crop = batch.digit_crop(digit_id).astype(np.float32)  # the full page there (lean)
            # the page as the window draws it (scaled back): the box, its walls and ink where they were
            shown = full[y0 - margin:y1 + margin, x0 - margin:x1 + margin].astype(np.float32)
            assert np.corrcoef(shown.ravel(), crop.ravel())[0, 1] > 0.9
            assert np.mean(np.abs(shown - crop)) < 15
            # the kept image itself at the box's coordinates times the scale
            s = stored.scale
            small = stored.image[round((y0 - margin) * s):round((y1 + margin) * s),
                                 round((x0 - margin) * s):round((x1 + margin) * s)].astype(np.float32)
            shrunk = cv2.resize(crop, (small.shape[1], small.shape[0]), interpolation=cv2.INTER_AREA)
            assert np.corrcoef(small.ravel(), shrunk.ravel())[0, 1] > 0.85
            # a box half a box off would not match
            off = full[y0 - margin:y1 + margin, x0 - margin + (x1 - x0) // 2:x1 + margin + (x1 - x0) // 2]
            assert np.corrcoef(off.astype(np.float32).ravel(), crop.ravel())[0, 1] < 0.9


def test_a_bitonal_page_is_kept_whole_and_exact():
    page = np.full((400, 300), 255, np.uint8)
    cv2.rectangle(page, (50, 50), (120, 130), 0, 3)
    data, scale = encode_page(page, 300)
    assert scale == 1.0 and data[:4] == b"\x89PNG"
    assert_array_equal(cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_UNCHANGED), page)


def test_crops_are_kept_exactly_and_their_size_read_from_the_header():
    rng = np.random.default_rng(3)
    crop = rng.integers(0, 256, (97, 83)).astype(np.uint8)
    data = encode_crop(crop)
    assert checks.image_size(data) == (83, 97)
    assert_array_equal(cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_GRAYSCALE), crop)
    page, _ = encode_page(rng.integers(0, 256, (600, 500)).astype(np.uint8), 300)
    assert page[:4] == b"RIFF" and checks.image_size(page) == (250, 300)


def _cells_are_the_readers(batch, page_id: int, expected: dict) -> StoredPages:
    """Every box of the page cut again from the batch gives the reader's model input; the pages used."""
    stored = StoredPages(batch)
    for digit_id, edges in _boxes(batch, page_id):
        cell = stored.cell(page_id, edges)
        assert (cell.mnist is None) == (expected[digit_id] is None)
        if cell.mnist is not None:
            assert_array_equal(cell.mnist, expected[digit_id])
    return stored


def test_cells_cut_again_are_the_readers_model_input_from_the_crops_and_from_the_original(
        read_batch, model, tmp_path):
    path, scan = _copy(read_batch, tmp_path)
    with Batch.open(path, read_only=True) as batch:
        page_id = _page_id(batch)
        expected = _reader_cells(model, scan, batch, page_id)
        stored = _cells_are_the_readers(batch, page_id, expected)
        assert stored.sources == {"crop": len(expected), "original": 0, "page": 0}
    _unusable_crops(path)
    with Batch.open(path) as batch:
        stored = StoredPages(batch)
        for digit_id, edges in _boxes(batch, page_id):
            cell = stored.cell(page_id, edges)
            if expected[digit_id] is not None:
                assert_array_equal(cell.mnist, expected[digit_id])
        assert stored.sources["original"] == 1 and stored.missing == {}


def test_learning_samples_are_cut_from_the_crops(read_batch, model, tmp_path):
    path, scan = _copy(read_batch, tmp_path, move_scan=True)  # the scan is not needed
    with Batch.open(path) as batch:
        page_id = _page_id(batch)
        field = batch.rows("SELECT id, value FROM fields WHERE page_id = ? AND value != '' "
                           "AND gap = 0 ORDER BY id", (page_id,))[0]
        set_field(batch, field[0], field[1], reviewer="ada")
        _crops, cells, _labels, refs = labelled_samples(batch)
        assert len(refs) == len(field[1]) and all(c is not None for c in cells)
    with Batch.open(path, read_only=True) as batch:
        shutil.copy(read_batch[1], scan)
        expected = _reader_cells(model, scan, batch, page_id)
    for cell, ref in zip(cells, refs):
        assert_array_equal(cell, expected[ref.digit_id])


def test_a_reread_after_the_scan_was_moved_names_it_and_keeps_the_stored_values(read_batch, tmp_path):
    path, scan = _copy(read_batch, tmp_path, move_scan=True)
    _unusable_crops(path)
    with Batch.open(path) as batch:
        before = batch.rows("SELECT id, prediction, confidence, model_version, value FROM digits ORDER BY id")
        summary = reread_unchecked(batch, FakeModel("fake-2"))
        assert summary.missing == {str(scan): "not found"}
        assert summary.kept == sum(1 for r in before if r["model_version"] is not None) > 0
        assert summary.digits == 0
        assert str(scan) in summary.missing_lines()[0]
        after = batch.rows("SELECT id, prediction, confidence, model_version, value FROM digits ORDER BY id")
        assert [tuple(r) for r in after] == [tuple(r) for r in before]
    # put back, but changed: not used either
    scan.write_bytes(b"not the scan any more")
    with Batch.open(path) as batch:
        assert reread_unchecked(batch, FakeModel("fake-2")).missing == {str(scan): "changed since it was read"}


def test_a_reread_with_the_crops_needs_no_scan(read_batch, tmp_path):
    path, scan = _copy(read_batch, tmp_path, move_scan=True)
    with Batch.open(path) as batch:
        summary = reread_unchecked(batch, FakeModel("fake-2"))
        assert summary.missing == {} and summary.kept == 0 and summary.digits > 0
        versions = {r[0] for r in batch.rows("SELECT model_version FROM digits WHERE NOT blank")}
        assert versions == {"fake-2"}


def test_a_format_4_batch_is_upgraded_and_opens(read_batch, tmp_path):
    path, scan = _copy(read_batch, tmp_path)
    with Batch.open(path, read_only=True) as batch:
        page_id = _page_id(batch)
        full = batch.page_image(page_id)
    conn = sqlite3.connect(path)  # as Inkcount wrote format 4: the page image whole, as PNG
    with conn:
        conn.execute("UPDATE page_images SET png = ?", (encode_png(full),))
        conn.execute("UPDATE digits SET crop_png = ?", (encode_png(np.full((5, 5), 255, np.uint8)),))
    for sql in ("DROP TABLE crop_sheets",
                "ALTER TABLE page_images DROP COLUMN scale", "ALTER TABLE page_images DROP COLUMN width",
                "ALTER TABLE page_images DROP COLUMN height", "ALTER TABLE files DROP COLUMN location",
                "PRAGMA user_version = 4"):
        conn.execute(sql)
    tables = {name: frozenset(r[1] for r in conn.execute(f"PRAGMA table_info({name})"))
              for (name,) in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    conn.close()
    assert tables == checks.expected_tables(4)
    with Batch.open(path) as batch:
        assert batch.rows("PRAGMA user_version")[0][0] == SCHEMA_VERSION
        stored = batch.stored_page(page_id)
        assert stored.scale == 1.0 and stored.exact
        assert_array_equal(batch.page_image(page_id), full)
        assert batch.rows("SELECT location FROM files WHERE sha256 IS NOT NULL")[0][0] is None
        scan.rename(scan.with_name("gone.png"))  # the path as given is gone too: cut from the exact page
        pages = StoredPages(batch)
        edges = _boxes(batch, page_id)[0][1]
        assert pages.cell(page_id, edges) is not None
        assert pages.sources["page"] == 1 and pages.missing


# --------------------------------------------------------------------------- lean crops on sheets


def test_crops_are_lean_one_sheet_a_field_and_give_the_readers_cells(read_batch, model):
    path, scan = read_batch
    with Batch.open(path, read_only=True) as batch:
        page_id = _page_id(batch)
        cuts = _reader_cuts(model, scan, batch, page_id)
        fields = batch.rows("SELECT id FROM fields WHERE page_id = ?", (page_id,))
        sheets = batch.rows("SELECT field_id, margin, length(image) FROM crop_sheets")
        assert sorted(r[0] for r in sheets) == sorted(r[0] for r in fields)
        assert batch.rows("SELECT COUNT(*) FROM digits WHERE length(crop_png) > 0")[0][0] == 0
        dpi = batch.rows("SELECT dpi FROM pages WHERE id = ?", (page_id,))[0][0]
        exact_bytes = 0
        for digit_id, edges in _boxes(batch, page_id):
            reader = cuts[digit_id]
            stored = batch.digit_crop(digit_id)
            box = Box(*edges)
            # the crop the window shows is the lean crop of the reader's, pixel for pixel ...
            assert_array_equal(stored, lean_crop(reader.crop, box, dpi))
            # ... which looks as the scan did: a few grey levels at most away from the ink, none near it
            assert stored.shape == reader.crop.shape
            diff = np.abs(stored.astype(np.int16) - reader.crop)
            assert diff.mean() < 4 and diff.max() <= 32
            ink = reader.ink > 0
            m = crop_margin(stored.shape, box)
            assert not diff[m:m + box.height, m:m + box.width][ink].any()
            # ... and gives the reader's cell to the bit
            assert same_cell(cut_cell(stored, Box(m, m, m + box.width, m + box.height), dpi=dpi), reader)
            exact_bytes += len(encode_crop(reader.crop))
        assert sum(r[2] for r in sheets) < 0.7 * exact_bytes  # the point of it (bench: about half)


def _noisy_crop(rng, *, written: bool, paper: float = 205.0, noise: float = 7.0) -> tuple[np.ndarray, Box]:
    """A crop of a box on grey, noisy paper (not white: nothing is plain already), with dark noisy walls
    in the margin and, if ``written``, a stroke; margin 9 (0.8 mm at 300 dpi)."""
    h, w, m = 77, 63, 9
    crop = np.full((h + 2 * m, w + 2 * m), paper, np.float32)
    cv2.rectangle(crop, (m - 6, m - 6), (m + w + 5, m + h + 5), 40.0, 4)
    if written:
        cv2.ellipse(crop, (m + w // 2, m + h // 2), (14, 26), 10, 0, 300, 50.0, 5)
    crop = cv2.GaussianBlur(crop, (0, 0), 0.8) + rng.normal(0, noise, crop.shape)
    return np.clip(np.round(crop), 0, 255).astype(np.uint8), Box(m, m, m + w, m + h)


@pytest.mark.parametrize("written", [True, False])
def test_a_lean_crop_of_noisy_paper_keeps_the_cell_to_the_bit(written):
    rng = np.random.default_rng(7)
    for _ in range(5):
        crop, box = _noisy_crop(rng, written=written)
        lean = lean_crop(crop, box, 300.0)
        assert lean.shape == crop.shape and lean.dtype == np.uint8
        assert same_cell(cut_cell(lean, box, dpi=300.0), cut_cell(crop, box, dpi=300.0))
        assert len(encode_crop(lean)) < len(encode_crop(crop))


def test_a_crop_whose_cell_would_change_is_kept_as_it_is(monkeypatch):
    crop, box = _noisy_crop(np.random.default_rng(8), written=True)
    monkeypatch.setattr(images, "same_cell", lambda a, b: False)
    assert_array_equal(lean_crop(crop, box, 300.0), crop)
    # a crop without the cutter's margin (another cut) is kept as it is too
    assert_array_equal(lean_crop(crop[3:, :], box, 300.0), crop[3:, :])


def test_a_sheet_gives_back_each_crop_exactly_and_only_for_crops_of_one_margin():
    rng = np.random.default_rng(9)
    boxes = [Box(10, 20, 40, 60), Box(45, 18, 80, 61), Box(85, 22, 110, 58)]
    crops = [rng.integers(0, 256, (b.height + 8, b.width + 8)).astype(np.uint8) for b in boxes]
    sheet, margin = make_sheet(crops, boxes)
    assert margin == 4 and sheet.shape[::-1] == sheet_size(boxes, 4) == (30 + 35 + 25 + 24, 43 + 8)
    for got, crop in zip(sheet_crops(sheet, boxes, margin), crops):
        assert_array_equal(got, crop)
    assert make_sheet(crops[:2] + [crops[2][1:-1, 1:-1]], boxes) is None  # margins differ
    assert make_sheet(crops[:2] + [crops[2][1:, :]], boxes) is None  # not the box with one margin
    assert make_sheet([], []) is None


def test_a_format_5_batch_is_upgraded_and_its_crops_read_as_before(read_batch, model, tmp_path):
    path, scan = _copy(read_batch, tmp_path)
    with Batch.open(path, read_only=True) as batch:
        page_id = _page_id(batch)
        crops = {digit_id: batch.digit_crop(digit_id) for digit_id, _ in _boxes(batch, page_id)}
    conn = sqlite3.connect(path)  # as Inkcount wrote format 5: every crop its own image, no sheets
    with conn:
        conn.executemany("UPDATE digits SET crop_png = ? WHERE id = ?",
                         [(encode_crop(crop), digit_id) for digit_id, crop in crops.items()])
        conn.execute("DROP TABLE crop_sheets")
        conn.execute("PRAGMA user_version = 5")
    tables = {name: frozenset(r[1] for r in conn.execute(f"PRAGMA table_info({name})"))
              for (name,) in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    conn.close()
    assert tables == checks.expected_tables(5)
    with pytest.raises(BatchFileError, match="format 5 needs upgrading"):
        Batch.open(path, read_only=True)
    with Batch.open(path) as batch:
        assert batch.rows("PRAGMA user_version")[0][0] == SCHEMA_VERSION == 6
        assert batch.rows("SELECT COUNT(*) FROM crop_sheets")[0][0] == 0
        for digit_id, crop in crops.items():
            assert_array_equal(batch.digit_crop(digit_id), crop)
        expected = _reader_cells(model, scan, batch, page_id)
        stored = _cells_are_the_readers(batch, page_id, expected)
        assert stored.sources["crop"] == len(crops)


# --------------------------------------------------------------------------- a moved scan's new place


def _place(path: Path, *, given: str, location: str | None) -> None:
    conn = sqlite3.connect(path)
    with conn:
        conn.execute("UPDATE files SET path = ?, location = ?", (given, location))
    conn.close()


def test_a_reread_records_where_a_moved_scan_was_found(read_batch, tmp_path):
    path, scan = _copy(read_batch, tmp_path)
    _unusable_crops(path)  # the original scan is needed
    _place(path, given=str(scan), location=str(tmp_path / "old place" / scan.name))
    with Batch.open(path) as batch:
        summary = reread_unchecked(batch, FakeModel("fake-2"))
        assert summary.missing == {} and summary.digits > 0
        assert summary.moved == {str(scan): str(scan.absolute())}
        assert batch.rows("SELECT path, location FROM files WHERE sha256 IS NOT NULL")[0][:] == (
            str(scan), str(scan.absolute()))
        # found where it is recorded now: nothing more to record
        assert reread_unchecked(batch, FakeModel("fake-3")).moved == {}


def test_a_reread_records_a_scan_found_beside_the_batch(read_batch, tmp_path):
    path, scan = _copy(read_batch, tmp_path)
    _unusable_crops(path)
    _place(path, given="scans/" + scan.name, location=None)  # as a format-4 batch kept it, given relative
    with Batch.open(path) as batch:
        summary = reread_unchecked(batch, FakeModel("fake-2"))
        assert summary.missing == {} and summary.moved == {"scans/" + scan.name: str(scan.absolute())}
        assert tuple(batch.rows("SELECT path, location FROM files WHERE sha256 IS NOT NULL")[0]) == (
            "scans/" + scan.name, str(scan.absolute()))
