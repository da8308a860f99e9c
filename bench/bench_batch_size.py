"""Batch file size: bytes per page, and whether the page images kept stay legible.

Generates A4 pages at 300 dpi (the reading benchmark's page: 60 digit boxes in
12 fields, scan noise 0.02, blur 0.6, uneven light, skew up to 2 degrees;
seeded), and a few bitonal (fax-like, 1-bit) ones, saves them as PNG files,
and reads them into a batch with :func:`recognizer.ingest.ingest_scans`:

- as batch files are written now (:mod:`recognizer.batch.images`: page images
  at 150 dpi WebP, bitonal pages as 1-bit PNG, box crops exact as the smaller
  of PNG and lossless WebP), and
- as they were written before format 5 (``--before``, on by default: page
  images full-resolution PNG, crops PNG, 4 KB SQLite pages), by swapping the
  encoders and the page size back.

Prints, for each, the bytes per page of the batch file split into page
images, box crops and the rest (tables, probabilities, indexes, free space).
Target (issue 14): at most 150 KB per A4 page on average.

Legibility of the kept page image: every written box is cut again from the
stored page scaled back to full resolution and read by the shipped model; the
bench prints how many boxes read differently than from the full page, and the
mean grey-level difference inside the boxes.

Usage: ``python bench/bench_batch_size.py [--pages 20] [--bitonal 4] [--no-before] [--keep DIR]``
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import shutil
import sqlite3
import tempfile
import time
from pathlib import Path
from unittest import mock

import numpy as np

from recognizer.batch import opening
from recognizer.batch import store as store_module
from recognizer.batch.images import encode_png
from recognizer.batch.store import Batch
from recognizer.digits.model import load_model
from recognizer.ingest import ingest_scans
from recognizer.page.boxes import Box
from recognizer.page.cells import cut_cell
from recognizer.reading.page import reading_of
from recognizer.synth import forms as formgen
from recognizer.synth.capture import bitonal_scan
from recognizer.synth.handwriting import Writer


def make_pages(folder: Path, n: int, bitonal: int, dpi: int = 300) -> None:
    rng = np.random.default_rng(2026)
    layout = formgen.bench_page()
    for i in range(n + bitonal):
        form = formgen.render_form(layout, formgen.random_values(layout, rng=rng), dpi=dpi,
                                   writer=Writer.random(rng), rng=rng)
        form = formgen.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-2, 2)),
                                    noise=0.02, blur=0.6, lighting=0.2)
        if i < n:
            formgen.save_scan(form.image, folder / f"page{i + 1:03d}.png", dpi=dpi, optimize=False)
        else:
            fax = bitonal_scan(form, rng=rng, dpi=dpi)
            formgen.save_scan(fax.image > 127, folder / f"fax{i + 1 - n:03d}.png", dpi=dpi)


def _old_page(image: np.ndarray, dpi: float) -> tuple[bytes, float]:
    return encode_png(image), 1.0


def read_into(batch_path: Path, files: list[Path], *, before: bool) -> float:
    start = time.perf_counter()
    with contextlib.ExitStack() as stack:
        if before:
            stack.enter_context(mock.patch.multiple(store_module, encode_page=_old_page, encode_crop=encode_png))
            stack.enter_context(mock.patch.object(opening, "PAGE_SIZE", 4096))  # SQLite's default, as before
        with Batch.create(batch_path) as batch:
            ingest_scans(batch, files)
    return time.perf_counter() - start


def sizes(batch_path: Path, pattern: str) -> dict[str, float]:
    """Bytes per page of the batch file, split, over the pages whose file name matches ``pattern``."""
    conn = sqlite3.connect(batch_path)
    try:
        pages = conn.execute("SELECT p.id FROM pages p JOIN files f ON f.id = p.file_id "
                             "WHERE f.path LIKE ?", (pattern,)).fetchall()
        if not pages:
            return {"pages": 0}
        ids = ",".join(str(r[0]) for r in pages)
        total_pages = conn.execute("SELECT COUNT(*) FROM pages").fetchone()[0]
        image = conn.execute(f"SELECT SUM(LENGTH(png)) FROM page_images WHERE page_id IN ({ids})").fetchone()[0]
        crops = conn.execute("SELECT SUM(LENGTH(d.crop_png)) FROM digits d JOIN fields f ON f.id = d.field_id "
                             f"WHERE f.page_id IN ({ids})").fetchone()[0]
        all_blobs = conn.execute("SELECT (SELECT SUM(LENGTH(png)) FROM page_images) + "
                                 "(SELECT SUM(LENGTH(crop_png)) FROM digits)").fetchone()[0]
    finally:
        conn.close()
    rest = (os.path.getsize(batch_path) - all_blobs) / total_pages  # the rest shared out evenly
    n = len(pages)
    return {"pages": n, "image": image / n, "crops": crops / n, "rest": rest,
            "total": image / n + crops / n + rest}


def legibility(batch_path: Path) -> tuple[int, int, float]:
    """Written boxes read differently from the stored page scaled back than when read, of all written
    boxes; mean grey-level difference inside the boxes between the two pages (where the full page is
    known: the crops are the full page there)."""
    model = load_model(None)
    differ = total = 0
    diffs = []
    with Batch.open(batch_path, read_only=True) as batch:
        for (page_id, dpi) in batch.rows("SELECT id, dpi FROM pages WHERE dpi IS NOT NULL"):
            shown = batch.page_image(page_id)
            rows = batch.rows("SELECT d.id, d.box, d.prediction, f.boxes FROM digits d JOIN fields f "
                              "ON f.id = d.field_id WHERE f.page_id = ? AND NOT d.blank", (page_id,))
            cells = []
            for digit_id, box, prediction, boxes in rows:
                b = Box(*json.loads(boxes)[box])
                cell = cut_cell(shown, b, dpi=dpi)
                crop = batch.digit_crop(digit_id)
                if cell.crop.shape == crop.shape:
                    diffs.append(float(np.mean(np.abs(cell.crop.astype(np.int16) - crop))))
                cells.append((prediction, cell))
            written = [c.mnist for _, c in cells if not c.blank]
            probs = iter(model.predict_proba(np.stack(written)) if written else [])
            for prediction, cell in cells:
                total += 1
                differ += cell.blank or reading_of(next(probs))[0] != prediction
    return differ, total, float(np.mean(diffs)) if diffs else float("nan")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pages", type=int, default=20)
    parser.add_argument("--bitonal", type=int, default=4)
    parser.add_argument("--no-before", dest="before", action="store_false")
    parser.add_argument("--keep", type=Path, help="keep the scans and batches in this folder")
    args = parser.parse_args()
    folder = args.keep or Path(tempfile.mkdtemp(prefix="inkcount-size-"))
    folder.mkdir(parents=True, exist_ok=True)
    try:
        make_pages(folder, args.pages, args.bitonal)
        files = sorted(folder.glob("*.png"))
        print(f"{args.pages} grey + {args.bitonal} bitonal A4 pages at 300 dpi, "
              f"scans {sum(f.stat().st_size for f in files) / len(files) / 1e3:.0f} KB a page")
        runs = [("before (format 4)", True)] if args.before else []
        runs.append(("now (format 5)", False))
        for name, before in runs:
            path = folder / ("before.inkcount" if before else "now.inkcount")
            seconds = read_into(path, files, before=before)
            print(f"\n{name}: {os.path.getsize(path) / 1e6:.1f} MB, read in {seconds:.0f} s")
            for label, pattern in (("grey pages", "%page%"), ("bitonal pages", "%fax%")):
                s = sizes(path, pattern)
                if s["pages"]:
                    print(f"  {label:14s} {s['total'] / 1e3:7.1f} KB a page = page image {s['image'] / 1e3:6.1f} KB"
                          f" + crops {s['crops'] / 1e3:6.1f} KB + rest {s['rest'] / 1e3:5.1f} KB")
            s = sizes(path, "%")
            print(f"  {'all pages':14s} {s['total'] / 1e3:7.1f} KB a page (target: at most 150 KB)")
            if not before:
                differ, total, diff = legibility(path)
                print(f"  legibility: {differ} of {total} written boxes read differently from the kept page "
                      f"scaled back; mean grey difference in the boxes {diff:.1f} levels")
    finally:
        if args.keep is None:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
