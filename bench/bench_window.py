"""How fast the window opens a 500-page batch and moves from one field to the next.

Builds the batch quickly: one sample card is read once, and its result is
stored 500 times under invented file names through the batch library
(``Batch.add_file`` / ``Batch.add_result``), so the batch has real images,
crops and review states without reading 500 scans. Then it times, offscreen:

* opening the window on the batch (until the first field to check is shown);
* Enter on a field (confirm, committed to the file) until the next field is shown;
* PgDn (skip) until the next field is shown;
* building the sort wall (every digit to check): until it is shown, then until
  every group is ordered by its worker, with the longest the window went
  without answering meanwhile;
* start-up and quit of the real command, ``inkcount window BATCH`` in a child
  process (offscreen, its own settings file): from the launch to the window
  shown with the batch open, and from the close (as Ctrl+Q) to the process
  gone. The child prints its moments through the hidden ``INKCOUNT_TIMING``
  switch of :mod:`app.cli`; the clocks are the wall clocks of one machine.

Targets: window shown under 3 s from launch, quit under 1 s, open under 2 s,
next field under 50 ms.

Run: ``python bench/bench_window.py [--pages 500] [--steps 60] [--launches 3] [--launch-only]``
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from PySide6.QtCore import Qt  # noqa: E402
from PySide6.QtTest import QTest  # noqa: E402
from PySide6.QtWidgets import QApplication  # noqa: E402

from recognizer.batch import Batch  # noqa: E402
from recognizer.digits.model import load_model  # noqa: E402
from recognizer.reading.page import PageReader  # noqa: E402
from recognizer.batch.queries import count_fields  # noqa: E402
from recognizer.review import TO_CHECK, set_target_error, set_threshold  # noqa: E402
from recognizer.scans.files import load_page  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
CARD = ROOT / "sample_forms" / "scans" / "card_01.png"


def build_batch(path: Path, pages: int) -> float:
    """Store ``pages`` copies of one read card; return the seconds it took.

    When the model is sure of every digit of the card at the default target
    (nothing to check, nothing to time), the threshold is raised until a fifth
    of the card's digits are to check.
    """
    t0 = time.perf_counter()
    model = load_model()
    result = PageReader(model, keep_image=True).read(load_page(CARD, 1))
    with Batch.create(path) as batch:
        for i in range(pages):
            file_id = batch.add_file(f"synthetic/card_{i + 1:04d}.png", f"{i:064x}", 0)
            batch.add_result(file_id, result, model_version=model.version)
            batch.mark_complete([file_id])
        set_target_error(batch, 0.001, model=model)
        if not count_fields(batch, TO_CHECK):
            sure = sorted(d.confidence for f in result.fields for d in f.digits if not d.blank)
            threshold = min(1.0, float(sure[len(sure) // 5]) + 1e-9)
            set_threshold(batch, threshold)
            print(f"(nothing to check at the 0.1 % target: threshold raised to {threshold:.5f})")
    return time.perf_counter() - t0


def _ms(values: list[float]) -> str:
    return (f"median {1000 * statistics.median(values):.1f} ms, 90th pct "
            f"{1000 * sorted(values)[int(0.9 * (len(values) - 1))]:.1f} ms, max {1000 * max(values):.1f} ms")


def _inkcount() -> list[str]:
    """The ``inkcount`` command of this Python (its script, or the module when there is none)."""
    script = Path(sys.executable).with_name("inkcount")
    return [str(script)] if script.exists() else [sys.executable, "-c", "from recognizer.cli import run; run()"]


def launch_times(batch: Path, settings: Path) -> tuple[float, float, float]:
    """One ``inkcount window BATCH``: seconds to the window shown, to the event loop ended, to the process gone."""
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen", INKCOUNT_TIMING="quit",
               INKCOUNT_WINDOW_SETTINGS=str(settings))
    t0 = time.time()
    done = subprocess.run([*_inkcount(), "window", str(batch)], env=env, capture_output=True, text=True,
                          timeout=300, check=False)
    gone = time.time()
    stamps = {}
    for line in done.stdout.splitlines():
        if line.startswith("inkcount-timing "):
            _, what, when = line.split()
            stamps[what] = float(when)
    if done.returncode != 0 or not {"shown", "closing", "closed"} <= stamps.keys():
        raise RuntimeError(f"inkcount window failed ({done.returncode}):\n{done.stdout}\n{done.stderr}")
    return stamps["shown"] - t0, stamps["closed"] - stamps["closing"], gone - stamps["closing"]


def report_launches(batch: Path, settings: Path, runs: int) -> None:
    shown, loop, quit_ = zip(*(launch_times(batch, settings) for _ in range(runs)))
    print(f"inkcount window BATCH, {runs} launches: window shown {', '.join(f'{t:.2f}' for t in shown)} s "
          f"(median {statistics.median(shown):.2f} s, target < 3 s)")
    print(f"quit (close to process gone): {', '.join(f'{t:.2f}' for t in quit_)} s "
          f"(median {statistics.median(quit_):.2f} s, target < 1 s; "
          f"of which closing the window {statistics.median(loop):.2f} s)")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pages", type=int, default=500)
    parser.add_argument("--steps", type=int, default=60)
    parser.add_argument("--launches", type=int, default=3, help="runs of the real command for start-up and quit")
    parser.add_argument("--launch-only", action="store_true", help="only start-up and quit of the real command")
    args = parser.parse_args(argv)
    app = QApplication.instance() or QApplication(sys.argv[:1])
    from app.main_window import MainWindow
    from app.settings import WindowSettings

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.inkcount"
        built = build_batch(path, args.pages)
        size = path.stat().st_size / 1e6
        print(f"batch: {args.pages} pages, {size:.0f} MB, built in {built:.1f} s")
        if args.launches:
            report_launches(path, Path(tmp) / "launch.json", args.launches)
        if args.launch_only:
            return 0
        window = MainWindow(WindowSettings(Path(tmp) / "window.json"))
        window.resize(1400, 860)
        window.show()
        app.processEvents()
        t0 = time.perf_counter()
        window.open_batch(path)
        app.processEvents()
        opened = time.perf_counter() - t0
        panel = window.review
        print(f"open window on the batch: {opened:.2f} s (target < 2 s); "
              f"{panel.remaining} fields to check, {window.pages.topLevelItemCount()} pages listed")
        panel.setFocus()
        for key, words in ((Qt.Key.Key_PageDown, "skip (PgDn)"), (Qt.Key.Key_Return, "confirm and next (Enter)")):
            times = []
            for _ in range(args.steps):
                app.processEvents()  # the prefetch of the next fields runs here, as while a clerk looks
                before = panel.view.field_id
                t = time.perf_counter()
                QTest.keyClick(panel, key)
                times.append(time.perf_counter() - t)
                assert panel.view.field_id != before
            print(f"next field after {words}: {_ms(times)} over {args.steps} (target < 50 ms)")
        t = time.perf_counter()
        window.show_tab(1)
        app.processEvents()
        digits = sum(window.wall.count(g) for g in window.wall.groups)
        print(f"sort wall built: {time.perf_counter() - t:.2f} s for {digits} digits to check")
        longest, last = 0.0, time.perf_counter()
        while window.wall.ordering:  # the groups take their order from a worker; the window answers meanwhile
            app.processEvents()
            now = time.perf_counter()
            longest, last = max(longest, now - last), now
            time.sleep(0.002)
        print(f"sort wall ordered (odd crops first): {time.perf_counter() - t:.2f} s; longest wait of the "
              f"window for events meanwhile {1000 * longest:.0f} ms")
        window.close()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
