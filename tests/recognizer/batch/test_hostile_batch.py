"""Hostile batch files (issue 12): each is refused with a BatchFileError naming the file when
it is opened (or, for an image, before the image is decoded), and the commands say so.

The attacks are the ones seen when the batch was tried as an attacker: the Inkcount marker
with tables missing, settings that are bad JSON or of the wrong kind, stored box JSON of the
wrong shape, a page image that is a decompression bomb; and scan names that are not UTF-8.
"""

from __future__ import annotations

import json
import os
import sqlite3
import tracemalloc
from dataclasses import replace
from pathlib import Path

import pytest

import recognizer.ingest as ingest_module
from recognizer.batch import checks
from recognizer.batch.queries import stored_files
from recognizer.batch.samples import StoredPages, labelled_samples
from recognizer.batch.store import Batch, BatchFileError, BatchSettings
from recognizer.ingest import ingest_scans
from recognizer.review import confirm, set_field
from recognizer.page.cells import cut_cell
from tests.support.batches import BOX_H, BOX_W, CARD, DPI, FakeModel, add_page, fake_reader, make_page, new_batch
from tests.support.cli import run
from tests.support.hostile import png_bomb


@pytest.fixture
def path(tmp_path: Path) -> Path:
    """A sound batch with one page and one review action."""
    path = tmp_path / "hostile.inkcount"
    with new_batch(path) as batch:
        add_page(batch, "a.png")
        first = batch.rows("SELECT id FROM fields ORDER BY id")[0][0]
        set_field(batch, first, "123", reviewer="test")
        confirm(batch, field=first, reviewer="test")
    return path


def _alter(path: Path, *statements: str, params=()) -> None:
    conn = sqlite3.connect(path)
    for sql in statements:
        conn.execute(sql, params if "?" in sql else ())
    conn.commit()
    conn.close()


def _refused(path: Path, message: str, capsys=None) -> None:
    for read_only in (False, True):
        with pytest.raises(BatchFileError, match=message) as info:
            Batch.open(path, read_only=read_only)
        assert "hostile.inkcount" in str(info.value) and len(str(info.value)) < 400
    assert not Path(f"{path}.lock").exists()
    if capsys is not None:  # the command names the file and the reason
        capsys.readouterr()
        assert run("status", str(path)) == 2
        err = capsys.readouterr().err
        assert "hostile.inkcount" in err and message.split(".*")[0].replace("\\", "") in err


def test_marker_with_missing_tables(path: Path, capsys) -> None:
    _alter(path, "DROP TABLE actions", "DROP TABLE digits", "DROP TABLE fields")
    _refused(path, "the table 'actions' is missing", capsys)


def test_a_missing_column(path: Path) -> None:
    _alter(path, "ALTER TABLE templates RENAME COLUMN json TO other")
    _refused(path, "the table 'templates' lacks the column\\(s\\) json")


@pytest.mark.parametrize(("key", "text", "message"), [
    ("flag_rule", "{not json", "the setting 'flag_rule' is not valid JSON"),
    ("threshold", '"high"', "the setting 'threshold' is 'high'; it must be a number from 0 to 1"),
    ("threshold", "NaN", "the setting 'threshold' is not valid JSON"),
    ("threshold", "7", "it must be a number from 0 to 1"),
    ("learning_every", "true", "it must be a whole number from 1"),
    ("threshold_source", '"sometimes"', "it must be 'target' or 'manual'"),
    ("learning_last", "[" * 5000 + "]" * 5000, "nests deeper than"),
    ("model_path", '"' + "x" * 200_000 + '"', "characters long"),
], ids=["bad-json", "threshold-text", "nan", "threshold-7", "bool-for-int", "source", "deep", "long"])
def test_bad_settings(path: Path, key: str, text: str, message: str, capsys) -> None:
    _alter(path, "INSERT INTO settings (key, value) VALUES (?, ?) "
           "ON CONFLICT(key) DO UPDATE SET value = excluded.value", params=(key, text))
    _refused(path, message, capsys)


def test_settings_checked_are_the_batch_settings() -> None:
    assert checks.SETTING_NAMES == {f for f in BatchSettings.__dataclass_fields__}


@pytest.mark.parametrize(("sql", "message"), [
    ("UPDATE fields SET boxes = '[[1, 2, 3]]' WHERE id = 1", "the boxes of field 1 is not what Inkcount stores"),
    ("UPDATE fields SET boxes = '[{\"x0\": 1}]' WHERE id = 1", "the boxes of field 1 is not what Inkcount stores"),
    ("UPDATE fields SET boxes = '[[1, 2, 3, 4]]' WHERE id = 1", "names a box the field does not have"),
    ("UPDATE fields SET doubts = '[1]' WHERE id = 2", "the box doubts of field 2"),
    ("UPDATE pages SET layout = '[[\"f01\"]]'", "the layout of page 1"),
    ("UPDATE pages SET warnings = 'x'", "the warnings of page 1 is not valid JSON"),
    ("UPDATE actions SET before = '{\"field\": [\"1\", 0, null]}'", "the undo snapshot of action"),
    ("UPDATE digits SET state = 'lost' WHERE id = 3", "digit 3 has an unknown state 'lost'"),
    ("UPDATE digits SET confidence = 'sure' WHERE id = 3", "digit 3 holds a confidence"),
    ("UPDATE digits SET probs = x'00' WHERE id = 3", "digit 3 holds a confidence, box number, probabilities"),
], ids=["box-of-three", "box-missing-keys", "box-count", "doubts", "layout", "warnings", "snapshot", "state",
        "confidence", "probs"])
def test_stored_values_of_the_wrong_shape(path: Path, sql: str, message: str) -> None:
    _alter(path, sql)
    _refused(path, message)


def test_a_page_image_and_a_crop_that_are_decompression_bombs(path: Path) -> None:
    bomb = png_bomb(12_000, 12_000)  # 144 million pixels in a fraction of a megabyte
    assert len(bomb) < 1_000_000
    _alter(path, "UPDATE page_images SET png = ?",
           "UPDATE digits SET crop_png = ? WHERE state IN ('corrected', 'confirmed')", params=(bomb,))
    tracemalloc.start()
    try:
        with Batch.open(path) as batch:
            with pytest.raises(BatchFileError, match="declares 12000 x 12000 pixels") as info:
                batch.page_image(1)
            assert "hostile.inkcount" in str(info.value)
            digit = batch.rows("SELECT id FROM digits WHERE state IN ('corrected', 'confirmed')")[0][0]
            with pytest.raises(BatchFileError, match="declares 12000 x 12000 pixels"):
                batch.digit_crop(digit)
            with pytest.raises(BatchFileError, match="declares 12000 x 12000 pixels"):
                labelled_samples(batch)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 50_000_000


def test_a_stored_template_nested_deep(path: Path) -> None:
    _alter(path, "INSERT INTO templates (name, version, json, added) VALUES ('t', 1, ?, 'now')",
           params=("[" * 100_000 + "]" * 100_000,))
    with Batch.open(path, read_only=True) as batch:
        with pytest.raises(BatchFileError, match="a stored template is damaged .*nests deeper"):
            batch.templates()


def test_a_scan_name_that_is_not_utf8_is_stored_and_shown(tmp_path: Path, monkeypatch, capsys) -> None:
    folder = tmp_path / "scans"
    folder.mkdir()
    names = [os.fsdecode(b"caf\xe9.png"), os.fsdecode(b"caf\xe8.png")]  # two Latin-1 names
    scans = []
    for i, name in enumerate(names):
        try:
            (folder / name).write_bytes(f"scan {i}".encode())
        except (OSError, UnicodeEncodeError):
            pytest.skip("this file system refuses file names that are not UTF-8")
        scans.append(folder / name)
    monkeypatch.setattr(ingest_module, "read_scans", fake_reader(1))
    path = tmp_path / "hostile.inkcount"
    with Batch.create(path) as batch:
        ingest_scans(batch, scans, model=FakeModel())
        shown = [Path(f.path).name for f in stored_files(batch)]
        assert shown == ["caf\\xe9.png", "caf\\xe8.png"]  # visible, and the two stay apart
        again = ingest_scans(batch, scans, model=FakeModel())  # known by content: not read twice
        assert again.files_added == 0 and again.pages_read == 0
    assert run("status", str(path)) == 0
    assert "2 file(s)" in capsys.readouterr().out
    with Batch.open(path, read_only=True) as batch:
        assert batch.integrity_check() == []


# --------------------------------------------------------------------------- crop sheets (format 6)


@pytest.fixture
def sheeted(tmp_path: Path) -> Path:
    """A sound batch whose crops are the reader's cut (the box with its margin), so they are kept on
    one sheet a field."""
    path = tmp_path / "hostile.inkcount"
    page = make_page("a.png", 1, CARD)
    page.fields = [replace(f, digits=[replace(d, crop=cut_cell(page.image, box, dpi=DPI).crop)
                                      for d, box in zip(f.digits, f.boxes)]) for f in page.fields]
    with new_batch(path) as batch:
        batch.add_result(batch.add_file("a.png", "sha-a", 1), page, model_version="fake-1")
        assert batch.rows("SELECT COUNT(*) FROM crop_sheets")[0][0] == len(CARD)
        assert batch.rows("SELECT COUNT(*) FROM digits WHERE length(crop_png) > 0")[0][0] == 0
        for digit_id, field, box in batch.rows("SELECT d.id, f.position, d.box FROM digits d JOIN fields f "
                                               "ON f.id = d.field_id"):
            crop = page.fields[field].digits[box].crop
            assert batch.digit_crop(digit_id).shape == crop.shape
    return path


@pytest.mark.parametrize(("sql", "message"), [
    ("DELETE FROM crop_sheets WHERE field_id = 2", "digit 4 has no crop: neither its own nor its field's"),
    ("UPDATE crop_sheets SET margin = 0 WHERE field_id = 2", "the crops of field 2 are not what Inkcount stores"),
    ("UPDATE crop_sheets SET margin = 'wide' WHERE field_id = 2", "the crops of field 2 are not what"),
    ("UPDATE crop_sheets SET image = 'text' WHERE field_id = 2", "the crops of field 2 are not what"),
    ("INSERT INTO crop_sheets (field_id, margin, image) VALUES (99, 4, x'00')", "the crops of field 99 are not"),
], ids=["no-sheet", "margin-0", "margin-text", "image-text", "no-such-field"])
def test_crop_sheets_of_the_wrong_kind(sheeted: Path, sql: str, message: str) -> None:
    _alter(sheeted, sql)
    _refused(sheeted, message)


def test_a_crop_sheet_not_the_size_of_its_boxes_or_a_bomb_is_refused_before_decoding(sheeted: Path) -> None:
    with Batch.open(sheeted, read_only=True) as batch:
        digit = batch.rows("SELECT id FROM digits WHERE field_id = 2 ORDER BY box")[0][0]
        good = batch.digit_crop(digit)
    _alter(sheeted, "UPDATE crop_sheets SET image = ? WHERE field_id = 2", params=(png_bomb(12_000, 12_000),))
    tracemalloc.start()
    try:
        with Batch.open(sheeted) as batch:
            with pytest.raises(BatchFileError, match="declares 12000 x 12000 pixels") as info:
                batch.digit_crop(digit)
            assert "hostile.inkcount" in str(info.value)
            with pytest.raises(BatchFileError, match="declares 12000 x 12000 pixels"):
                StoredPages(batch).cell(1, json.loads(batch.rows("SELECT boxes FROM fields WHERE id = 2")[0][0])[0])
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 50_000_000
    _alter(sheeted, "UPDATE crop_sheets SET image = ? WHERE field_id = 2", params=(png_bomb(40, 30),))
    with Batch.open(sheeted, read_only=True) as batch:
        with pytest.raises(BatchFileError, match="the crops of a field are 40 x 30 pixels where its boxes make"):
            batch.digit_crop(digit)
        assert good.shape == (BOX_H + 2 * round(0.8 * DPI / 25.4), BOX_W - 3 + 2 * round(0.8 * DPI / 25.4))
    _alter(sheeted, "UPDATE fields SET boxes = '[[50, 10, 50, 90], [1, 2, 3, 4], [5, 6, 7, 8]]' WHERE id = 2")
    with Batch.open(sheeted, read_only=True) as batch:
        with pytest.raises(BatchFileError, match="the boxes of field 2 are not what Inkcount stores"):
            batch.digit_crop(digit)
