"""Reading benchmark: how much slower than decoding is reading, and how much memory it takes.

Generates 50 A4 pages at 300 dpi (about 60 digit boxes each, seeded), saves
them as PNG files, then in one run times

- decoding alone (every page loaded to a gray array, nothing else),
- ``inkcount read`` with 1 worker and with 2 workers (each in its own process),

and prints pages per second, the ratio read time / decode time, and the peak
memory (maximum resident set size) of each ``inkcount read`` process.
Targets: ratio at most 2 with 1 worker (issue 14; 3 at worst), peak memory
under 600 MB for the 50 pages. ``inkcount read`` includes its start (imports,
the model, about 0.5 s), which weighs less the more pages are read.

With 1 worker two threads share the work: one decodes the next page and
works out its lighting (:func:`recognizer.page.boxes.prepare_page`), the
other finds the boxes of this page, cuts its cells and reads them. To see
where the time of a page goes: ``python -m cProfile -s tottime -m
recognizer.cli read FOLDER --out values.csv -q`` on the kept pages (the
profile shows the reading thread only).

Machines here are shared and noisy: compare the ratios from one run, not
seconds across runs.

Usage: ``python bench/bench_read.py [--pages 50] [--dpi 300] [--keep DIR]``
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from recognizer.synth import forms as formgen
from recognizer.synth.handwriting import Writer
from recognizer.reading.memory import reuse_freed_blocks
from recognizer.scans.files import iter_pages, list_scans


def make_pages(folder: Path, n: int, dpi: int) -> None:
    rng = np.random.default_rng(2026)
    layout = formgen.bench_page()
    for i in range(n):
        form = formgen.render_form(layout, formgen.random_values(layout, rng=rng), dpi=dpi,
                                   writer=Writer.random(rng), rng=rng)
        form = formgen.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-2, 2)),
                                    noise=0.02, blur=0.6, lighting=0.2)
        formgen.save_scan(form.image, folder / f"page{i + 1:03d}.png", dpi=dpi, optimize=False)


def time_decode(folder: Path) -> float:
    reuse_freed_blocks()  # the allocator setting of every read (recognizer.reading.memory), for a fair ratio
    files, _ = list_scans([folder])
    start = time.perf_counter()
    for page in iter_pages(files):
        assert page
    return time.perf_counter() - start


def time_read(folder: Path, workers: int, out: Path) -> tuple[float, float]:
    """Run ``inkcount read`` in a child process; return (seconds, peak RSS in MB)."""
    cmd = [sys.executable, "-m", "recognizer.cli", "read", str(folder), "--out", str(out),
           "--workers", str(workers), "--quiet"]
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL)
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.perf_counter() - start
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"inkcount read failed with exit code {proc.returncode}")
    # ru_maxrss is in kilobytes on Linux; with workers it is the largest
    # single process (the parent or one worker), not their sum.
    return seconds, usage.ru_maxrss / 1024


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pages", type=int, default=50)
    ap.add_argument("--dpi", type=int, default=300)
    ap.add_argument("--keep", type=Path, help="keep the generated pages in this folder")
    args = ap.parse_args()

    folder = args.keep or Path(tempfile.mkdtemp(prefix="inkcount-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    try:
        t0 = time.perf_counter()
        make_pages(folder, args.pages, args.dpi)
        print(f"generated {args.pages} A4 pages at {args.dpi} dpi in {time.perf_counter() - t0:.1f} s")
        decode = time_decode(folder)
        read1, mem1 = time_read(folder, 1, folder / "values1.csv")
        read2, mem2 = time_read(folder, 2, folder / "values2.csv")
        n = args.pages
        print(f"decode only      : {decode:6.1f} s  {n / decode:6.2f} pages/s")
        print(f"read, 1 worker   : {read1:6.1f} s  {n / read1:6.2f} pages/s  ratio read/decode {read1 / decode:4.2f}"
              f"  peak memory {mem1:5.0f} MB")
        print(f"read, 2 workers  : {read2:6.1f} s  {n / read2:6.2f} pages/s  ratio read/decode {read2 / decode:4.2f}"
              f"  peak memory {mem2:5.0f} MB (largest process)")
        print("targets: ratio <= 2 with 1 worker (3 at worst); peak memory < 600 MB")
    finally:
        if args.keep is None:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
