"""Creating a batch file (issue 12): atomic under ``kill -9``, one winner of two creators at
once, and empty or half-created files of older Inkcounts made afresh, never a file with data.

Creating a batch takes 0.1-0.2 s here (most of it syncing to disk); the children are killed at
eight moments spread over it, from the first file operations to after the rename.
"""

from __future__ import annotations

import signal
import sqlite3
import time
from pathlib import Path

import pytest

from recognizer.batch import schema
from recognizer.batch.store import APPLICATION_ID, Batch, BatchFileError
from tests.support.batches import add_page
from tests.support.cli import run
from tests.support.processes import child_process

_CREATE = """
    import sys
    from recognizer.batch.store import Batch
    print("ready", flush=True)
    Batch.open(sys.argv[1], create=True).close()
    print("created", flush=True)
    """
DELAYS_MS = (0, 10, 25, 50, 75, 100, 150, 300)


def _temporary_files(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if ".creating" in p.name)


def test_a_kill_while_creating_leaves_no_batch_or_a_whole_one(tmp_path: Path, capsys) -> None:
    outcomes = []
    for delay in DELAYS_MS:
        folder = tmp_path / f"after-{delay}ms"
        folder.mkdir()
        path = folder / "new.inkcount"
        child = child_process(_CREATE, str(path))
        try:
            assert child.stdout.readline().strip() == "ready"
            time.sleep(delay / 1000)
        finally:
            child.send_signal(signal.SIGKILL)
            child.wait()
        capsys.readouterr()
        status = run("status", str(path))  # says something clear either way
        err = capsys.readouterr().err
        if path.exists():
            assert status == 0, err  # never a half-made file under the batch's name
            outcomes.append("whole")
        else:
            assert status == 2 and "no such file" in err and "new.inkcount" in err
            outcomes.append("none" if not _temporary_files(folder) else "none, temporary file left")
        with Batch.open(path, create=True) as batch:  # creating again just works
            add_page(batch, "a.png")
            assert batch.integrity_check() == []
        assert _temporary_files(folder) == []  # a dead creator's temporary files are gone
        assert not Path(f"{path}.lock").exists()
    print("kill moments (ms):", dict(zip(DELAYS_MS, outcomes)))
    assert len(outcomes) == len(DELAYS_MS)


def test_a_creator_killed_after_linking_leaves_a_whole_batch_whose_next_opening_clears_its_temporary_name(
        tmp_path: Path) -> None:
    # the moment between linking the new batch into place and removing its temporary name, made at will
    path = tmp_path / "new.inkcount"
    Batch.open(path, create=True).close()
    dead = tmp_path / ".new.inkcount.0123456789ab.creating"
    dead.write_bytes(path.read_bytes())
    with Batch.open(path, read_only=True):
        assert _temporary_files(tmp_path) == [dead.name]  # a reader changes nothing
    with Batch.open(path) as batch:
        add_page(batch, "a.png")
    assert _temporary_files(tmp_path) == []


def test_two_creators_at_once_one_wins_and_the_other_is_told_it_is_in_use(tmp_path: Path) -> None:
    path = tmp_path / "new.inkcount"
    go = tmp_path / "go"
    code = """
        import os, sys, time
        from recognizer.batch.store import Batch, BatchFileError
        print("ready", flush=True)
        while not os.path.exists(sys.argv[2]):
            time.sleep(0.001)
        try:
            batch = Batch.open(sys.argv[1], create=True)
        except BatchFileError as exc:
            print("refused:", exc, flush=True)
        else:
            print("open", flush=True)
            time.sleep(1.5)
            batch.close()
        """
    children = [child_process(code, str(path), str(go)) for _ in range(2)]
    try:
        for child in children:
            assert child.stdout.readline().strip() == "ready"
        go.touch()
        answers = sorted(child.stdout.readline().strip() for child in children)
    finally:
        for child in children:
            child.wait(timeout=30)
    assert answers[0] == "open", answers
    assert answers[1].startswith("refused:") and "is in use by another Inkcount window or command" in answers[1]
    assert "new.inkcount" in answers[1]
    with Batch.open(path) as batch:
        assert batch.integrity_check() == []
    assert _temporary_files(tmp_path) == []


def _unmarked(path: Path, *, rows: bool = False) -> None:
    """What an older Inkcount killed while creating could leave: our tables, no marker."""
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA journal_mode = WAL")
    conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    schema.migrate(conn)
    if rows:
        conn.execute("INSERT INTO files (path, added) VALUES ('kept.png', 'today')")
    conn.close()


def test_an_empty_or_half_created_file_is_made_afresh(tmp_path: Path, capsys) -> None:
    empty, unmarked = tmp_path / "empty.inkcount", tmp_path / "unmarked.inkcount"
    empty.write_bytes(b"")
    _unmarked(unmarked)
    for path, words in ((empty, "empty: its creation was interrupted"), (unmarked, "an unfinished batch file")):
        with pytest.raises(BatchFileError, match=words):  # reading only: told what to do
            Batch.open(path, read_only=True)
        capsys.readouterr()
        assert run("status", str(path)) == 2 and words in capsys.readouterr().err
    with Batch.open(empty, create=True) as batch:
        add_page(batch, "a.png")
    with Batch.open(unmarked) as batch:  # opening for writing finishes it too
        add_page(batch, "a.png")
    Batch.create(tmp_path / "third.inkcount").close()
    (tmp_path / "fourth.inkcount").write_bytes(b"")
    Batch.create(tmp_path / "fourth.inkcount").close()
    for name in ("empty", "unmarked", "third", "fourth"):
        assert run("status", str(tmp_path / f"{name}.inkcount")) == 0


def _foreign(path: Path) -> None:
    conn = sqlite3.connect(path)
    conn.execute("CREATE TABLE t (x)")
    conn.commit()
    conn.close()


@pytest.mark.parametrize(("make", "message"), [
    (lambda p: p.write_text("grower,crates\n00412,12\n"), "not an SQLite database"),
    (_foreign, "not an Inkcount batch file"),
    (lambda p: _unmarked(p, rows=True), "not an Inkcount batch file"),
], ids=["text", "foreign-sqlite", "unmarked-with-data"])
def test_a_file_holding_data_is_never_replaced(tmp_path: Path, make, message: str) -> None:
    path = tmp_path / "kept.inkcount"
    make(path)
    before = path.read_bytes()
    with pytest.raises(BatchFileError, match=message):
        Batch.open(path, create=True)
    with pytest.raises(BatchFileError, match="already exists|" + message):
        Batch.create(path)
    assert path.read_bytes() == before
    assert _temporary_files(tmp_path) == []


def test_a_stray_write_ahead_log_is_not_thrown_away(tmp_path: Path) -> None:
    path = tmp_path / "new.inkcount"
    Path(f"{path}-wal").write_bytes(b"frames of an earlier batch")
    with pytest.raises(BatchFileError, match="new.inkcount-wal', left by an earlier batch"):
        Batch.open(path, create=True)
    assert Path(f"{path}-wal").read_bytes() == b"frames of an earlier batch"
    assert not path.exists()
