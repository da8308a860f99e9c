"""Batch file size: bytes per page, whether the page images kept stay legible, and whether the lean
crops give the reader's cells.

Generates A4 pages at 300 dpi (the reading benchmark's page: 60 digit boxes in
12 fields, scan noise 0.02, blur 0.6, uneven light, skew up to 2 degrees;
seeded), and a few bitonal (fax-like, 1-bit) ones, saves them as PNG files,
and reads them into a batch with :func:`recognizer.ingest.ingest_scans`:

- as batch files are written now (format 6, :mod:`recognizer.batch.images`:
  page images at 150 dpi WebP, bitonal pages as 1-bit PNG, box crops lean and
  a field's crops side by side in one lossless image, its crop sheet), and
- as they were written before format 5 (``--before``, on by default: page
  images full-resolution PNG, crops PNG, 4 KB SQLite pages), by swapping the
  encoders and the page size back;
- with ``--all`` also as format 5 wrote them (each crop exact, its own
  image, the smaller of PNG and lossless WebP) and with exact crops on sheets
  (format 6 without lean crops).

Prints, for each, the bytes per page of the batch file split into page
images, box crops (a digit's own image, or its field's sheet) and the rest
(tables, probabilities, indexes, free space). Target (issue 14): at most
150 KB per A4 page on average.

Legibility of the kept page image: every written box is cut again from the
stored page scaled back to full resolution and read by the shipped model; the
bench prints how many boxes read differently than from the full page, and the
mean grey-level difference inside the boxes against the stored crops.

Lean crops: with an exact run (``--before`` or ``--all``), every box's crop as
written now is set against the exact one of that run: the cell cut from each
(blank, ink, model input) must be the same to the bit, and the bench prints
how far the lean crops' grey levels are from the scan's.

Usage: ``python bench/bench_batch_size.py [--pages 20] [--bitonal 4] [--no-before] [--all] [--keep DIR]``
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
from recognizer.batch import images as images_module
from recognizer.batch.images import encode_png, same_cell
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


def _as_read(crop: np.ndarray, box: Box, dpi: float) -> np.ndarray:
    return crop


def _no_sheet(crops, boxes) -> None:
    return None


NOW = "now (format 6)"
BEFORE = "before (format 4)"
#: How each kind of batch file is written: functions of :mod:`recognizer.batch.images` swapped back, and
#: the SQLite page size.
VARIANTS: dict[str, tuple[dict, int | None]] = {
    BEFORE: ({"encode_page": _old_page, "encode_crop": encode_png, "lean_crop": _as_read,
              "make_sheet": _no_sheet}, 4096),  # SQLite's default page size, as before
    "format 5 (exact crops, one image each)": ({"lean_crop": _as_read, "make_sheet": _no_sheet}, None),
    "exact crops on sheets": ({"lean_crop": _as_read}, None),
    NOW: ({}, None),
}


def read_into(batch_path: Path, files: list[Path], variant: str) -> float:
    start = time.perf_counter()
    patches, page_size = VARIANTS[variant]
    with contextlib.ExitStack() as stack:
        if patches:
            stack.enter_context(mock.patch.multiple(images_module, **patches))
        if page_size:
            stack.enter_context(mock.patch.object(opening, "PAGE_SIZE", page_size))
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
        crops = conn.execute("SELECT TOTAL(LENGTH(d.crop_png)) FROM digits d JOIN fields f ON f.id = d.field_id "
                             f"WHERE f.page_id IN ({ids})").fetchone()[0]
        crops += conn.execute("SELECT TOTAL(LENGTH(s.image)) FROM crop_sheets s JOIN fields f ON f.id = s.field_id "
                              f"WHERE f.page_id IN ({ids})").fetchone()[0]
        all_blobs = conn.execute("SELECT (SELECT TOTAL(LENGTH(png)) FROM page_images) + "
                                 "(SELECT TOTAL(LENGTH(crop_png)) FROM digits) + "
                                 "(SELECT TOTAL(LENGTH(image)) FROM crop_sheets)").fetchone()[0]
    finally:
        conn.close()
    rest = (os.path.getsize(batch_path) - all_blobs) / total_pages  # the rest shared out evenly
    n = len(pages)
    return {"pages": n, "image": image / n, "crops": crops / n, "rest": rest,
            "total": image / n + crops / n + rest}


def legibility(batch_path: Path) -> tuple[int, int, float]:
    """Written boxes read differently from the stored page scaled back than when read, of all written
    boxes; mean grey-level difference inside the boxes between the page scaled back and the stored
    crops (the full page there; near the ink exactly)."""
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


def _crops(batch: Batch) -> dict[tuple, tuple[np.ndarray, Box, float]]:
    """Every box's stored crop, its box on the crop and the page's dpi, by file, page, field and box."""
    out = {}
    for digit_id, path, page, name, box, boxes, dpi in batch.rows(
            "SELECT d.id, fl.path, p.page, f.name, d.box, f.boxes, p.dpi FROM digits d JOIN fields f "
            "ON f.id = d.field_id JOIN pages p ON p.id = f.page_id JOIN files fl ON fl.id = p.file_id"):
        b = Box(*json.loads(boxes)[box])
        crop = batch.digit_crop(digit_id)
        m = (crop.shape[1] - b.width) // 2
        out[(path, page, name, box)] = (crop, Box(m, m, m + b.width, m + b.height), dpi)
    return out


def lean_against_exact(lean_path: Path, exact_path: Path) -> tuple[int, int, float, float]:
    """Boxes whose cell (blank, ink, model input) cut from the lean crop is the one cut from the exact
    crop, of all boxes; mean and largest mean grey-level difference of a lean crop from the exact one."""
    with Batch.open(lean_path, read_only=True) as lean_batch, Batch.open(exact_path, read_only=True) as exact_batch:
        lean, exact = _crops(lean_batch), _crops(exact_batch)
    same, diffs = 0, []
    for key, (crop, box, dpi) in exact.items():
        kept = lean[key][0]
        same += same_cell(cut_cell(kept, box, dpi=dpi), cut_cell(crop, box, dpi=dpi))
        diffs.append(float(np.mean(np.abs(kept.astype(np.int16) - crop))))
    return same, len(exact), float(np.mean(diffs)), float(np.max(diffs))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pages", type=int, default=20)
    parser.add_argument("--bitonal", type=int, default=4)
    parser.add_argument("--no-before", dest="before", action="store_false")
    parser.add_argument("--all", action="store_true", help="also format 5, and exact crops on sheets")
    parser.add_argument("--keep", type=Path, help="keep the scans and batches in this folder")
    args = parser.parse_args()
    folder = args.keep or Path(tempfile.mkdtemp(prefix="inkcount-size-"))
    folder.mkdir(parents=True, exist_ok=True)
    try:
        make_pages(folder, args.pages, args.bitonal)
        files = sorted(folder.glob("*.png"))
        print(f"{args.pages} grey + {args.bitonal} bitonal A4 pages at 300 dpi, "
              f"scans {sum(f.stat().st_size for f in files) / len(files) / 1e3:.0f} KB a page")
        names = list(VARIANTS) if args.all else [BEFORE] * args.before + [NOW]
        paths = {}
        for name in names:
            path = paths[name] = folder / f"batch{len(paths) + 1}.inkcount"
            seconds = read_into(path, files, name)
            print(f"\n{name}: {os.path.getsize(path) / 1e6:.1f} MB, read in {seconds:.0f} s")
            for label, pattern in (("grey pages", "%page%"), ("bitonal pages", "%fax%")):
                s = sizes(path, pattern)
                if s["pages"]:
                    print(f"  {label:14s} {s['total'] / 1e3:7.1f} KB a page = page image {s['image'] / 1e3:6.1f} KB"
                          f" + crops {s['crops'] / 1e3:6.1f} KB + rest {s['rest'] / 1e3:5.1f} KB")
            s = sizes(path, "%")
            print(f"  {'all pages':14s} {s['total'] / 1e3:7.1f} KB a page (target: at most 150 KB)")
        differ, total, diff = legibility(paths[NOW])
        print(f"\nlegibility: {differ} of {total} written boxes read differently from the kept page "
              f"scaled back; mean grey difference in the boxes {diff:.1f} levels")
        exact = next((p for n, p in paths.items() if n != NOW and "sheets" not in n), None)
        if exact is not None:
            same, total, mean, worst = lean_against_exact(paths[NOW], exact)
            print(f"lean crops: {same} of {total} boxes give the cell of the exact crop to the bit; "
                  f"{mean:.2f} grey levels from the exact crop on average (at most {worst:.1f} in one crop)")
    finally:
        if args.keep is None:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
