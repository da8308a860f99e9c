"""Scale benchmark: a Dask cluster against the process pool, and the driver's memory over many pages.

Generates a few A4 pages at 300 dpi (``--distinct``, default 10; the pages of
``bench/bench_read.py``), then in one run

1. *speed*: the same 200 pages (the distinct files listed again and again)
   read by ``inkcount read --out`` in one process, with ``--workers 2`` and
   with ``--cluster local:2`` (a local Dask cluster of two worker processes,
   one thread each; its start is timed with it, and shown apart); pages per
   second of each, and whether the values CSVs of the pool and of the
   cluster equal the one-process CSV byte for byte;
2. *memory*: ``--pages`` pages (default 10,000) streamed through
   ``inkcount read --batch`` with ``--workers 2`` (or ``--memory-with
   cluster``): the driver's resident memory sampled from ``/proc`` every
   half second, its peak (``VmHWM``, the driver alone, not its workers) and
   the resident memory at each tenth of the run, to see that it stays flat.
   A batch reads a file's content once, so the pages come in PDFs of
   ``--per-file`` pages (default 100), each page showing one of the distinct
   pages (JPEG, embedded once per file and drawn on every page; each file
   has its own id, so no two files are the same).

Target (issue 14): the driver under 600 MB for 10,000 pages with any number
of workers. On two shared cores 10,000 pages take the better part of an
hour and the batch file grows by the page images kept (about 1 GB for
10,000 pages at 300 dpi): ``--pages 1000`` gives the shape quickly.

Machines here are shared and noisy: compare figures from one run.

Usage: ``python bench/bench_scale.py [--pages 10000] [--speed-pages 200] [--keep DIR]``
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import cv2

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_read import make_pages  # noqa: E402

A4_PT = (595.28, 841.89)


def _pdf(images: list[bytes], shape: tuple[int, int], pages: int, ident: str) -> bytes:
    """A PDF of ``pages`` A4 pages, page ``i`` drawing JPEG ``images[i % len(images)]`` over the whole page."""
    objects: list[bytes] = []
    n_img = len(images)
    first_page = 3 + n_img
    kids = " ".join(f"{first_page + 2 * i} 0 R" for i in range(pages))
    objects.append(b"<< /Type /Catalog /Pages 2 0 R >>")
    objects.append(f"<< /Type /Pages /Kids [{kids}] /Count {pages} >>".encode())
    height, width = shape
    for data in images:
        objects.append(f"<< /Type /XObject /Subtype /Image /Width {width} /Height {height} /ColorSpace "
                       f"/DeviceGray /BitsPerComponent 8 /Filter /DCTDecode /Length {len(data)} >>\nstream\n"
                       .encode() + data + b"\nendstream")
    draw = f"q {A4_PT[0]} 0 0 {A4_PT[1]} 0 0 cm /Im0 Do Q".encode()
    for i in range(pages):
        image = 3 + i % n_img
        objects.append(f"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 {A4_PT[0]} {A4_PT[1]}] "
                       f"/Resources << /XObject << /Im0 {image} 0 R >> >> /Contents {first_page + 2 * i + 1} 0 R >>"
                       .encode())
        objects.append(f"<< /Length {len(draw)} >>\nstream\n".encode() + draw + b"\nendstream")
    out = bytearray(f"%PDF-1.4\n% inkcount bench file {ident}\n".encode())
    offsets = []
    for number, body in enumerate(objects, start=1):
        offsets.append(len(out))
        out += f"{number} 0 obj\n".encode() + body + b"\nendobj\n"
    xref = len(out)
    out += f"xref\n0 {len(objects) + 1}\n0000000000 65535 f \n".encode()
    out += b"".join(f"{o:010d} 00000 n \n".encode() for o in offsets)
    out += f"trailer\n<< /Size {len(objects) + 1} /Root 1 0 R >>\nstartxref\n{xref}\n%%EOF\n".encode()
    return bytes(out)


def make_pdfs(pages_dir: Path, folder: Path, total: int, per_file: int) -> list[Path]:
    images, shape = [], None
    for path in sorted(pages_dir.glob("page*.png")):
        gray = cv2.imread(str(path), cv2.IMREAD_GRAYSCALE)
        shape = gray.shape
        images.append(cv2.imencode(".jpg", gray, [cv2.IMWRITE_JPEG_QUALITY, 92])[1].tobytes())
    assert shape is not None
    files = []
    for k in range(0, total, per_file):
        path = folder / f"bundle{k // per_file:05d}.pdf"
        path.write_bytes(_pdf(images, shape, min(per_file, total - k), ident=f"{k // per_file}"))
        files.append(path)
    return files


def _inkcount(args: list[str]) -> list[str]:
    return [sys.executable, "-m", "recognizer.cli", "read", *args, "--quiet"]


def _timed(args: list[str]) -> float:
    start = time.perf_counter()
    subprocess.run(_inkcount(args), check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - start


def _cluster_start_seconds() -> float:
    code = ("import time, distributed; t = time.perf_counter(); "
            "c = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None); "
            "cl = distributed.Client(c); cl.wait_for_workers(2); print(time.perf_counter() - t); cl.close(); c.close()")
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True).stdout
    return float(out.strip().splitlines()[-1])


def _names(files: list[Path], n: int, folder: Path) -> list[str]:
    """``n`` file names for the distinct ``files`` listed again and again: the same path twice is
    read once (``list_scans``), so each is another name of its file (a hard link, else a copy)."""
    folder.mkdir(parents=True, exist_ok=True)
    names = []
    for i in range(n):
        source, name = files[i % len(files)], folder / f"page{i + 1:05d}{files[i % len(files)].suffix}"
        if not name.exists():
            try:
                os.link(source, name)
            except OSError:
                shutil.copyfile(source, name)
        names.append(str(name))
    return names


def speed(files: list[Path], n: int, folder: Path) -> None:
    listed = _names(files, n, folder / "listed")
    one, pool, dask = folder / "one.csv", folder / "pool.csv", folder / "dask.csv"
    t1 = _timed([*listed, "--out", str(one)])
    t_pool = _timed([*listed, "--out", str(pool), "--workers", "2"])
    t_dask = _timed([*listed, "--out", str(dask), "--cluster", "local:2"])
    start = _cluster_start_seconds()
    print(f"speed, the same {n} A4 pages at 300 dpi:")
    print(f"  one process            : {t1:6.1f} s  {n / t1:5.2f} pages/s")
    print(f"  process pool, 2 workers: {t_pool:6.1f} s  {n / t_pool:5.2f} pages/s")
    print(f"  Dask local:2           : {t_dask:6.1f} s  {n / t_dask:5.2f} pages/s "
          f"({n / max(t_dask - start, 1e-9):5.2f} pages/s without the cluster's start, {start:.1f} s)")
    print(f"  values CSV, pool == one process: {pool.read_bytes() == one.read_bytes()}; "
          f"Dask == one process: {dask.read_bytes() == one.read_bytes()}")


def _status(pid: int) -> dict[str, int]:
    out = {}
    try:
        with open(f"/proc/{pid}/status") as fh:
            for line in fh:
                if line.startswith(("VmRSS:", "VmHWM:")):
                    key, value = line.split(":", 1)
                    out[key] = int(value.split()[0]) // 1024
    except OSError:
        pass
    return out


def memory(files: list[Path], n: int, folder: Path, how: list[str]) -> None:
    batch = folder / "scale.inkcount"
    cmd = _inkcount([*map(str, files), "--batch", str(batch), *how])
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL)
    samples: list[tuple[float, int]] = []
    peak = 0
    stop = threading.Event()

    def watch() -> None:
        nonlocal peak
        while not stop.wait(0.5):
            status = _status(proc.pid)
            if status:
                samples.append((time.perf_counter() - start, status["VmRSS"]))
                peak = max(peak, status["VmHWM"])

    thread = threading.Thread(target=watch, daemon=True)
    thread.start()
    code = proc.wait()
    stop.set()
    thread.join()
    seconds = time.perf_counter() - start
    if code != 0:
        raise SystemExit(f"inkcount read --batch failed with exit code {code}")
    print(f"memory, {n} pages through read --batch {' '.join(how)}: {seconds:.0f} s, {n / seconds:.2f} pages/s, "
          f"batch file {batch.stat().st_size / 1e6:.0f} MB")
    print(f"  driver peak resident memory (VmHWM, driver alone): {peak} MB  (target < 600 MB)")
    if samples:
        tenths = [samples[min(len(samples) - 1, int(len(samples) * k / 10))] for k in range(1, 11)]
        print("  driver resident memory at each tenth of the run (MB): "
              + " ".join(f"{rss}" for _, rss in tenths))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pages", type=int, default=10_000, help="pages streamed into a batch for the memory figure")
    ap.add_argument("--speed-pages", type=int, default=200)
    ap.add_argument("--distinct", type=int, default=10, help="distinct generated pages")
    ap.add_argument("--per-file", type=int, default=100, help="pages per PDF of the memory run")
    ap.add_argument("--memory-with", choices=["pool", "cluster", "one"], default="pool")
    ap.add_argument("--skip-speed", action="store_true")
    ap.add_argument("--keep", type=Path, help="keep the generated files in this folder")
    args = ap.parse_args()

    folder = args.keep or Path(tempfile.mkdtemp(prefix="inkcount-scale-"))
    folder.mkdir(parents=True, exist_ok=True)
    pages = folder / "pages"
    try:
        if not pages.is_dir() or len(list(pages.glob("page*.png"))) < args.distinct:
            pages.mkdir(exist_ok=True)
            make_pages(pages, args.distinct, 300)
        pngs = sorted(pages.glob("page*.png"))[:args.distinct]
        if not args.skip_speed:
            speed(pngs, args.speed_pages, folder)
        bundles = folder / "bundles"
        shutil.rmtree(bundles, ignore_errors=True)
        bundles.mkdir()
        (folder / "scale.inkcount").unlink(missing_ok=True)
        pdfs = make_pdfs(pages, bundles, args.pages, args.per_file)
        how = {"pool": ["--workers", "2"], "cluster": ["--cluster", "local:2"], "one": []}[args.memory_with]
        memory(pdfs, args.pages, folder, how)
    finally:
        if args.keep is None:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    os.environ.setdefault("PYTHONWARNINGS", "ignore")
    main()
