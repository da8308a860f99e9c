"""Reading on a Dask cluster: the same results as one process, and a worker killed mid-batch.

A local Dask cluster of two worker processes (one thread each) is started
once for this module and closed after it; ``inkcount read --cluster ADDRESS``
is pointed at its scheduler exactly as at a cluster of several machines. The
scheduler gives up on a page as soon as one worker dies holding it
(``allowed-failures`` 0; Dask's default of 3 would read it again elsewhere),
so that a killed worker stops the read and the resume can be checked.
"""

from __future__ import annotations

import csv
import importlib
import os
import signal
import sqlite3
from pathlib import Path

import numpy as np
import pytest

distributed = pytest.importorskip("distributed")
dask = pytest.importorskip("dask")

from recognizer.cli.main import main  # noqa: E402
from recognizer.reading.stream import ReadSettings, read_scans  # noqa: E402
from recognizer.synth import forms as formgen  # noqa: E402

N_CARDS = 8
cli_main = importlib.import_module("recognizer.cli.main")  # the module (the package exports main)


@pytest.fixture(scope="module")
def scans(tmp_path_factory) -> Path:
    """Eight generated orchard cards at 200 dpi, one per file, and one file that is no scan."""
    folder = tmp_path_factory.mktemp("cluster_scans")
    rng = np.random.default_rng(14)
    layout = formgen.orchard_card()
    for i in range(N_CARDS):
        form = formgen.render_form(layout, formgen.random_values(layout, rng=rng), dpi=200, rng=rng)
        form = formgen.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-1.5, 1.5)), noise=0.01)
        formgen.save_scan(form.image, folder / f"card{i:02d}.png", dpi=200)
    (folder / "card03_notes.png").write_bytes(b"not an image")
    return folder


@pytest.fixture(scope="module")
def cluster():
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        local = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                         dashboard_address=None)
    client = distributed.Client(local)
    try:
        client.wait_for_workers(2, timeout=60)
        yield local, client
    finally:
        client.close()
        local.close()


def _values(path: Path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _batch_content(path: Path) -> list[tuple]:
    """Everything read into a batch, by file name and page (not ids, times or paths)."""
    with sqlite3.connect(path) as conn:
        return conn.execute(
            """SELECT f.path, p.page, p.dpi, p.skew_deg, p.problem, p.warnings, p.layout, fl.name, fl.boxes,
                      fl.read_value, fl.value, fl.state, d.box, d.blank, d.prediction, d.confidence, d.probs,
                      d.crop_png, cs.image, d.state
               FROM files f LEFT JOIN pages p ON p.file_id = f.id LEFT JOIN fields fl ON fl.page_id = p.id
               LEFT JOIN digits d ON d.field_id = fl.id LEFT JOIN crop_sheets cs ON cs.field_id = fl.id
               ORDER BY f.path, p.page, fl.position, d.box""").fetchall()


def _stored_pages(path: Path) -> int:
    with sqlite3.connect(path) as conn:
        return conn.execute("SELECT count(*) FROM pages WHERE page IS NOT NULL").fetchone()[0]


def test_a_cluster_reads_like_one_process(scans, cluster, tmp_path):
    local, client = cluster
    one, on_cluster = tmp_path / "one.csv", tmp_path / "cluster.csv"
    assert main(["read", str(scans), "--out", str(one), "--quiet"]) == 0
    assert main(["read", str(scans), "--out", str(on_cluster), "--quiet", "--cluster", local.scheduler_address]) == 0
    assert one.read_bytes() == on_cluster.read_bytes()
    rows = _values(one)
    assert len(rows) == N_CARDS + 1 and sum(1 for r in rows if r["problem"]) == 1

    # the library path, as the window and the batch store call it: PageReads equal field by field
    files = sorted(scans.iterdir())
    here = list(read_scans(files))
    there = list(read_scans(files, settings=ReadSettings(cluster=local.scheduler_address)))
    assert [type(r) for r in here] == [type(r) for r in there]
    for a, b in zip(here, there):
        assert a.source == b.source
        if hasattr(a, "fields"):
            assert [(f.name, f.boxes, f.value, f.gap) for f in a.fields] == [
                (f.name, f.boxes, f.value, f.gap) for f in b.fields]
            assert all(np.array_equal(x.probs, y.probs) for x, y in zip(a.digits(), b.digits()))


def test_into_a_batch_on_a_cluster_as_in_one_process(scans, cluster, tmp_path, capsys):
    local, _ = cluster
    one, on_cluster = tmp_path / "one.inkcount", tmp_path / "cluster.inkcount"
    assert main(["read", str(scans), "--batch", str(one), "--quiet"]) == 0
    assert main(["read", str(scans), "--batch", str(on_cluster), "--quiet", "--cluster", local.scheduler_address]) == 0
    assert _batch_content(one) == _batch_content(on_cluster)
    assert all(row[-2] for row in _batch_content(one) if row[13] == 0)  # crops compared: every written box's sheet
    assert _stored_pages(on_cluster) == N_CARDS


def test_a_worker_killed_mid_batch_leaves_a_batch_the_next_run_finishes(scans, cluster, tmp_path, capsys,
                                                                        monkeypatch):
    local, client = cluster
    reference, batch = tmp_path / "one.inkcount", tmp_path / "cluster.inkcount"
    assert main(["read", str(scans), "--batch", str(reference), "--quiet"]) == 0
    capsys.readouterr()

    def slow_pages():  # on each worker: every page takes half a second more, so a killed worker holds one
        import time

        import recognizer.reading.cluster as on_worker

        load = on_worker.load_page

        def slow(*args, **kwargs):
            time.sleep(0.5)
            return load(*args, **kwargs)

        on_worker.load_page = slow

    client.run(slow_pages)
    pids = client.run(os.getpid)
    victim = sorted(pids.values())[0]
    add = cli_main._Tally.add
    seen = []

    def add_then_kill(self, result):
        add(self, result)
        seen.append(result)
        if len(seen) == 2:  # two pages committed; the others are on the workers
            os.kill(victim, signal.SIGKILL)

    monkeypatch.setattr(cli_main._Tally, "add", add_then_kill)
    code = main(["read", str(scans), "--batch", str(batch), "--quiet", "--cluster", local.scheduler_address])
    monkeypatch.undo()
    captured = capsys.readouterr()
    assert code == 3, captured
    assert "Dask workers reading this page stopped" in captured.err
    assert "run the same command again" in captured.out
    stored = _stored_pages(batch)
    assert 2 <= stored < N_CARDS

    # the batch is whole: every page stored is stored completely (the same rows as one process)
    done = {row[:2] for row in _batch_content(batch) if row[1] is not None}
    assert [r for r in _batch_content(batch) if r[:2] in done] == [
        r for r in _batch_content(reference) if r[:2] in done]

    client.wait_for_workers(2, timeout=60)  # the nanny starts the killed worker again
    assert main(["read", str(scans), "--batch", str(batch), "--quiet", "--cluster", local.scheduler_address]) == 0
    out = capsys.readouterr().out
    assert f"Read {N_CARDS - stored} page(s)" in out
    assert _batch_content(batch) == _batch_content(reference)


def test_an_unreachable_scheduler_is_one_clear_line(scans, tmp_path, capsys, monkeypatch):
    monkeypatch.setattr("recognizer.reading.cluster._CONNECT_TIMEOUT_S", 2)
    code = main(["read", str(scans), "--out", str(tmp_path / "v.csv"), "--quiet", "--cluster",
                 "tcp://127.0.0.1:9"])
    assert code == 3
    assert "cannot reach the Dask scheduler at tcp://127.0.0.1:9" in capsys.readouterr().err
    assert not (tmp_path / "v.csv").exists()


def test_without_a_cluster_dask_is_not_imported():
    import subprocess
    import sys

    code = ("import sys; from recognizer.cli.main import main; "
            "assert not [m for m in sys.modules if m.split('.')[0] in ('dask', 'distributed')]")
    subprocess.run([sys.executable, "-c", code], check=True, cwd=Path(__file__).resolve().parents[3])
