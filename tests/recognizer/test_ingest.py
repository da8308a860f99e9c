"""Reading scans into a batch: files read once (by content), resume, cancel, problems stored, kill -9."""

from __future__ import annotations

import shutil
import signal
from pathlib import Path

import pytest

import recognizer.ingest as ingest_module
from recognizer.batch.store import Batch
from recognizer.ingest import ingest_scans
from recognizer.scans.files import ScanProblem
from tests.support.batches import FakeModel, fake_reader, scan_files
from tests.support.processes import child_process as _child, read_lines as _read_until


def test_ingest_reads_new_files_once_even_under_another_name(tmp_path, monkeypatch):
    monkeypatch.setattr(ingest_module, "read_scans", fake_reader(2))
    scans = scan_files(tmp_path / "scans", ["a.png", "b.png"])
    copy = tmp_path / "elsewhere" / "a-copy.png"
    copy.parent.mkdir()
    shutil.copy(scans[0], copy)
    seen = []
    with Batch.create(tmp_path / "b.inkcount") as batch:
        first = ingest_scans(batch, scans, model=FakeModel(), on_result=seen.append)
        assert (first.files_added, first.pages_read, first.fields, first.digits) == (2, 4, 12, 28)
        assert first.fields_to_check == 4 and first.digits_to_check == 4
        assert [(r.source.name, r.page) for r in seen] == [("a.png", 1), ("a.png", 2), ("b.png", 1), ("b.png", 2)]
        settings = batch.settings
        assert (settings.threshold, settings.threshold_source, settings.model_version) == (0.9, "target", "fake-1")
        again = ingest_scans(batch, [copy, scans[1], copy], model=FakeModel())
        assert again.files_added == 0 and again.pages_read == 0
        assert again.known == [(str(copy), str(scans[0])), (str(scans[1]), str(scans[1])), (str(copy), str(scans[0]))]
        assert batch.rows("SELECT COUNT(*) FROM pages")[0][0] == 4


def test_ingest_stops_when_asked_and_resumes_where_it_stopped(tmp_path, monkeypatch):
    monkeypatch.setattr(ingest_module, "read_scans", fake_reader(3))
    scans = scan_files(tmp_path / "scans", ["a.tif", "b.tif"])
    seen = []
    with Batch.create(tmp_path / "b.inkcount") as batch:
        first = ingest_scans(batch, scans, model=FakeModel(), on_result=seen.append,
                             should_stop=lambda: len(seen) == 4)
        assert first.stopped and first.pages_read == 4
        assert [r["complete"] for r in batch.rows("SELECT complete FROM files ORDER BY id")] == [1, 0]
        second = ingest_scans(batch, scans, model=FakeModel(), on_result=seen.append)
        assert not second.stopped and second.files_added == 0 and second.pages_read == 2
        assert [(r.source.name, r.page) for r in seen[4:]] == [("b.tif", 2), ("b.tif", 3)]
        pages = batch.rows("SELECT fl.path, p.page FROM pages p JOIN files fl ON fl.id = p.file_id ORDER BY p.id")
        assert [(Path(r[0]).name, r[1]) for r in pages] == [("a.tif", 1), ("a.tif", 2), ("a.tif", 3),
                                                            ("b.tif", 1), ("b.tif", 2), ("b.tif", 3)]
        assert [r["complete"] for r in batch.rows("SELECT complete FROM files")] == [1, 1]


def test_ingest_stores_problems_of_listing_hashing_and_reading(tmp_path, monkeypatch):
    monkeypatch.setattr(ingest_module, "read_scans", fake_reader(1))
    good, bad = scan_files(tmp_path / "scans", ["a.png", "b.bad"])
    missing = tmp_path / "scans" / "gone.png"
    listed = ScanProblem(tmp_path / "notes.txt", None, "not a scan file type")
    with Batch.create(tmp_path / "b.inkcount") as batch:
        summary = ingest_scans(batch, [good, bad, missing], model=FakeModel(), problems=[listed])
        assert summary.pages_read == 1
        assert [(p.source.name, p.page) for p in summary.problems] == [("notes.txt", None), ("gone.png", None),
                                                                     ("b.bad", None)]
        rows = batch.rows("SELECT fl.path, p.page, p.problem FROM pages p JOIN files fl ON fl.id = p.file_id "
                          "WHERE p.problem IS NOT NULL ORDER BY p.id")
        assert [Path(r[0]).name for r in rows] == ["notes.txt", "gone.png", "b.bad"]
        assert "cannot read the file" in rows[1][2]
        # a file that could not be read is tried again, and its old problem replaced
        missing.write_bytes(b"now here")
        again = ingest_scans(batch, [good, bad, missing], model=FakeModel())
        assert again.pages_read == 1 and again.problems == []
        assert batch.rows("SELECT COUNT(*) FROM pages WHERE problem LIKE 'cannot read%'")[0][0] == 0


def test_ingest_refuses_a_loaded_model_with_worker_processes(tmp_path):
    with Batch.create(tmp_path / "b.inkcount") as batch:
        with pytest.raises(ValueError, match="workers=1"):
            ingest_scans(batch, [], model=FakeModel(), workers=2)


def test_kill_during_ingest_loses_at_most_the_page_being_read(tmp_path):
    scans = scan_files(tmp_path / "scans", [f"s{i:02d}.png" for i in range(6)])
    path = tmp_path / "b.inkcount"
    code = """
        import sys
        import recognizer.ingest as b
        from tests.support.batches import FakeModel, fake_reader
        b.read_scans = fake_reader(10, delay=0.01)
        batch = b.Batch.open(sys.argv[1], create=True)
        b.ingest_scans(batch, sys.argv[2:], model=FakeModel(),
                       on_result=lambda r: print(f"{r.source.name}:{r.page}", flush=True))
        print("finished", flush=True)
        """
    child = _child(code, str(path), *map(str, scans))
    done = _read_until(child, 17)
    child.send_signal(signal.SIGKILL)
    child.wait()
    assert child.returncode == -signal.SIGKILL and "finished" not in done
    with Batch.open(path) as batch:
        assert batch.integrity_check() == []
        stored = {f"{Path(r[0]).name}:{r[1]}" for r in
                  batch.rows("SELECT fl.path, p.page FROM pages p JOIN files fl ON fl.id = p.file_id")}
        assert set(done) <= stored and len(stored) <= len(done) + 1
        # every stored page is whole: 3 fields, 8 boxes
        counts = batch.rows("SELECT COUNT(DISTINCT f.id), COUNT(d.id) FROM pages p JOIN fields f ON f.page_id = p.id "
                            "JOIN digits d ON d.field_id = f.id GROUP BY p.id")
        assert {tuple(c) for c in counts} == {(3, 8)}
    # running it again completes the batch, reading only what is missing
    rerun = _child(code, str(path), *map(str, scans))
    out, err = rerun.communicate(timeout=60)
    assert rerun.returncode == 0, err
    assert len(out.split()) - 1 == 60 - len(stored)
    with Batch.open(path, read_only=True) as batch:
        assert batch.rows("SELECT COUNT(*) FROM pages")[0][0] == 60
