"""The batch file: creation, refusing foreign or damaged files, migrations, the writer
lock, storing pages, ingest (deduplication, resume, cancel) and surviving ``kill -9``.

The stand-in model, hand-made pages and stand-in reader are in
:mod:`tests.support.batches`.
"""

from __future__ import annotations

import json
import signal
import sqlite3
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

import recognizer.batch.store as batch_module
from tests.support.processes import child_process as _child, read_lines as _read_until
from recognizer.batch import schema
from recognizer.batch.schema import SCHEMA_VERSION
from tests.support.batches import (
    CARD, add_page, field_row, make_page, new_batch,
)
from recognizer.batch.store import (
    APPLICATION_ID,
    Batch,
    BatchFileError,
    BatchInUseError,
    decode_png,
)
from recognizer.page.boxes import Box
from recognizer.review import (
    READ,
    TO_CHECK,
    confirm,
    set_threshold,
)
from recognizer.scans.files import ScanProblem


# --------------------------------------------------------------------------- creating and opening


def test_create_writes_an_identified_wal_file(tmp_path):
    path = tmp_path / "harvest.inkcount"
    with Batch.create(path) as batch:
        assert not batch.read_only
        assert batch.rows("PRAGMA journal_mode")[0][0] == "wal"
    conn = sqlite3.connect(path)
    assert conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    meta = dict(conn.execute("SELECT key, value FROM inkcount_meta"))
    assert meta["format"] == "inkcount-batch"
    conn.close()
    assert not Path(f"{path}.lock").exists()
    with Batch.open(path) as batch:
        assert batch.settings.threshold is None


def test_create_refuses_an_existing_file(tmp_path):
    path = tmp_path / "b.inkcount"
    path.write_text("keep me")
    with pytest.raises(BatchFileError, match="already exists"):
        Batch.create(path)
    assert path.read_text() == "keep me"


def test_open_with_create_makes_a_new_batch_once(tmp_path):
    path = tmp_path / "b.inkcount"
    with Batch.open(path, create=True) as batch:
        add_page(batch, "a.png")
    with Batch.open(path, create=True) as batch:
        assert len(batch.rows("SELECT * FROM pages")) == 1


def _foreign_sqlite(path: Path) -> None:
    conn = sqlite3.connect(path)
    conn.execute("CREATE TABLE t (x)")
    conn.commit()
    conn.close()


def _newer(path: Path) -> None:
    Batch.create(path).close()
    conn = sqlite3.connect(path)
    conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    conn.close()


def _damaged(path: Path) -> None:
    with Batch.create(path) as batch:
        add_page(batch, "a.png")
    data = bytearray(path.read_bytes())
    data[100:] = bytes(len(data) - 100)  # keep the 100-byte header, wipe every page
    path.write_bytes(bytes(data))


@pytest.mark.parametrize(
    "make, message",
    [
        (lambda p: None, "no such file"),
        (lambda p: p.write_text("grower,crates\n00412,12\n"), "not an SQLite database"),
        (_foreign_sqlite, "not an Inkcount batch file"),
        (_newer, "newer Inkcount"),
        (_damaged, "damaged"),
    ],
    ids=["missing", "text", "foreign sqlite", "newer", "damaged"],  # an empty file: test_kill_create.py
)
def test_open_refuses_unusable_files_clearly(tmp_path, make, message):
    path = tmp_path / "b.inkcount"
    make(path)
    with pytest.raises(BatchFileError, match=message):
        Batch.open(path)
    # the refusal releases the writer lock again
    assert not Path(f"{path}.lock").exists()


def test_migrations_run_in_order_and_a_failed_step_leaves_the_file_alone(tmp_path, monkeypatch):
    path = tmp_path / "b.inkcount"
    with Batch.create(path) as batch:
        add_page(batch, "a.png")

    def broken(conn):
        conn.execute("ALTER TABLE pages ADD COLUMN note TEXT")
        raise RuntimeError("step failed")

    monkeypatch.setattr(schema, "MIGRATIONS", [*schema.MIGRATIONS, broken])
    monkeypatch.setattr(schema, "SCHEMA_VERSION", SCHEMA_VERSION + 1)
    with pytest.raises(BatchFileError, match="unchanged"):
        Batch.open(path)
    with sqlite3.connect(path) as conn:
        assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
        assert "note" not in [r[1] for r in conn.execute("PRAGMA table_info(pages)")]

    def add_note(conn):
        conn.execute("ALTER TABLE pages ADD COLUMN note TEXT DEFAULT 'migrated'")

    monkeypatch.setattr(schema, "MIGRATIONS", [*schema.MIGRATIONS[:-1], add_note])
    with pytest.raises(BatchFileError, match="needs upgrading"):
        Batch.open(path, read_only=True)
    with Batch.open(path) as batch:
        assert batch.rows("PRAGMA user_version")[0][0] == SCHEMA_VERSION + 1
        assert [r["note"] for r in batch.rows("SELECT note FROM pages")] == ["migrated"]
        assert len(batch.rows("SELECT * FROM digits")) == 8


# --------------------------------------------------------------------------- one writer at a time


def test_a_second_writer_in_the_same_process_is_refused(tmp_path):
    path = tmp_path / "b.inkcount"
    with Batch.create(path):
        with pytest.raises(BatchInUseError, match="in use by another Inkcount window or command"):
            Batch.open(path)
        with Batch.open(path, read_only=True) as reader:
            assert reader.read_only
            with pytest.raises(PermissionError):
                with reader.transaction():
                    pass
    Batch.open(path).close()


def test_two_processes_lock_and_the_lock_dies_with_its_holder(tmp_path):
    path = tmp_path / "b.inkcount"
    with new_batch(path) as batch:
        add_page(batch, "a.png")
    holder = _child(
        """
        import sys, time
        from recognizer.batch.store import Batch
        batch = Batch.open(sys.argv[1])
        print("open", flush=True)
        time.sleep(60)
        """,
        str(path),
    )
    try:
        assert holder.stdout.readline().strip() == "open"
        with pytest.raises(BatchInUseError, match=rf"in use by another Inkcount window or command \(process {holder.pid} "):
            Batch.open(path)
        with Batch.open(path, read_only=True) as reader:  # reading goes on meanwhile
            assert len(reader.rows("SELECT * FROM fields")) == 3
    finally:
        holder.send_signal(signal.SIGKILL)
        holder.wait()
    assert Path(f"{path}.lock").exists()  # left behind by the killed holder...
    with Batch.open(path) as batch:  # ...but it holds nobody off
        assert batch.integrity_check() == []


# --------------------------------------------------------------------------- storing pages


def test_a_page_is_stored_with_images_probabilities_and_states(tmp_path):
    with new_batch(tmp_path / "b.inkcount") as batch:
        page = make_page("cards/a.png", 1, CARD, warnings=())
        file_id = batch.add_file("cards/a.png", "x", 10)
        page_id = batch.add_result(file_id, page, model_version="fake-1")
        assert_array_equal(batch.page_image(page_id), page.image)
        stored = batch.rows("SELECT id, box, blank, prediction, confidence, model_version, state FROM digits "
                            "ORDER BY id")
        read = [d for f in page.fields for d in f.digits]
        assert len(stored) == len(read) == 8
        for row, d in zip(stored, read):
            assert_array_equal(batch.digit_crop(row["id"]), d.crop)
            assert (row["box"], bool(row["blank"]), row["prediction"]) == (d.box, d.blank, d.text)
            if d.blank:
                assert batch.digit_probs(row["id"]) is None and row["model_version"] is None
            else:
                assert_allclose(batch.digit_probs(row["id"]), d.probs, rtol=1e-6)
                assert row["model_version"] == "fake-1"
            expected = TO_CHECK if not d.blank and d.confidence < 0.9 else READ
            assert row["state"] == expected
        fields = batch.rows("SELECT name, boxes, read_value, value, gap, state FROM fields ORDER BY position")
        assert [(f["name"], f["value"], f["state"]) for f in fields] == [
            ("f01", "041", READ), ("f02", "17", TO_CHECK), ("f03", "23", READ)]
        boxes = [Box(*b) for b in json.loads(fields[1]["boxes"])]
        assert boxes == list(page.fields[1].boxes)


def test_problems_are_stored_as_pages_without_fields(tmp_path):
    with new_batch(tmp_path / "b.inkcount") as batch:
        file_id = batch.add_file("a.pdf", "x", 10)
        batch.add_result(file_id, ScanProblem(Path("a.pdf"), 2, "page cannot be drawn"), model_version=None)
        batch.add_result(file_id, make_page("a.pdf", 3, {}, problem="no digit boxes found"), model_version=None)
        rows = batch.rows("SELECT id, page, problem FROM pages ORDER BY page")
        assert [(r["page"], r["problem"]) for r in rows] == [(2, "page cannot be drawn"), (3, "no digit boxes found")]
        assert batch.rows("SELECT COUNT(*) FROM fields")[0][0] == 0
        assert batch.page_image(rows[0]["id"]) is None and batch.page_image(rows[1]["id"]).shape == (100, 100)


def test_png_round_trip_is_lossless():
    image = np.random.default_rng(3).integers(0, 256, (37, 53)).astype(np.uint8)
    assert_array_equal(decode_png(batch_module.encode_png(image)), image)


def test_observers_hear_of_committed_pages(tmp_path):
    heard = []
    with new_batch(tmp_path / "b.inkcount") as batch:
        batch.subscribe(heard.append)
        page_id = add_page(batch, "a.png")
        batch.unsubscribe(heard.append)
        add_page(batch, "b.png")
    assert [(c.kind, c.page_ids) for c in heard] == [("page", (page_id,))]


def test_two_threads_share_a_batch_without_seeing_half_a_transaction(tmp_path):
    with new_batch(tmp_path / "b.inkcount") as batch:
        stop = threading.Event()

        def write() -> None:
            while not stop.is_set():
                with batch.transaction() as conn:
                    conn.execute("INSERT INTO settings (key, value) VALUES ('half', '1')")
                    time.sleep(0.0005)
                    conn.execute("DELETE FROM settings WHERE key = 'half'")

        writer = threading.Thread(target=write)
        writer.start()
        try:
            seen = [batch.rows("SELECT COUNT(*) FROM settings WHERE key = 'half'")[0][0] for _ in range(400)]
        finally:
            stop.set()
            writer.join()
        assert seen == [0] * 400


# --------------------------------------------------------------------------- kill -9


def test_kill_during_review_keeps_every_action_completed(tmp_path):
    path = tmp_path / "b.inkcount"
    with new_batch(path) as batch:
        for number in range(1, 5):
            add_page(batch, "a.png", number)
    code = """
        import sys
        from recognizer.batch.store import Batch
        from recognizer.review.actions import set_field
        batch = Batch.open(sys.argv[1])
        fields = [r[0] for r in batch.rows("SELECT id FROM fields ORDER BY id")]
        for i in range(100000):
            set_field(batch, fields[i % len(fields)], str(i % 1000).zfill(3), reviewer="loop")
            print(i, flush=True)
        """
    child = _child(code, str(path))
    done = _read_until(child, 150)
    child.send_signal(signal.SIGKILL)
    child.wait()
    last = int(done[-1])
    with Batch.open(path) as batch:
        assert batch.integrity_check() == []
        logged = batch.rows("SELECT COUNT(*) FROM actions WHERE reviewer = 'loop'")[0][0]
        assert last + 1 <= logged <= last + 2
        fields = [r[0] for r in batch.rows("SELECT id FROM fields ORDER BY id")]
        # each field holds the last value set to it (only the field after the last one
        # printed may hold a newer value: it is left out)
        for i in range(last + 2 - len(fields), last + 1):
            assert field_row(batch, fields[i % len(fields)])["value"] == str(i % 1000).zfill(3)
        confirm(batch, field=fields[0], reviewer="after")  # and the batch is usable as before
        set_threshold(batch, 0.5, reviewer="after")
