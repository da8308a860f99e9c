"""Speed and accuracy of box finding and cell cutting on generated forms, one thread.

Prints the time of :func:`recognizer.page.boxes.find_fields` on an A4 page at 300
and 600 dpi (straight and skewed), the time to cut and clean a page's cells,
and the share of fields found with the right boxes over a grid of scan
distortions (demo orchard cards and A4 tally sheets from
:mod:`recognizer.synth.forms`).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import time  # noqa: E402

import cv2  # noqa: E402
import numpy as np  # noqa: E402

from recognizer.synth import forms as fg  # noqa: E402
from recognizer.page.boxes import BoxFinding, find_fields  # noqa: E402
from recognizer.page.cells import cut_cells  # noqa: E402

DISTORTIONS = {
    "clean": {},
    "skew 5": {"skew_deg": 5.0},
    "skew -2.5, noise": {"skew_deg": -2.5, "noise": 0.6},
    "JPEG 60, skew 2": {"jpeg": 60, "skew_deg": 2.0},
    "faint lines, uneven light": {"faint_lines": 0.7, "lighting": 0.5},
    "noise and blur": {"noise": 1.0, "blur": 1.0},
    "broken lines 0.04": {"broken_lines": 0.04},
    "broken lines 0.08": {"broken_lines": 0.08},
}


def _scan(layout: fg.FormLayout, dpi: int, seed: int, jpeg: int | None = None,
          **distortion) -> fg.RenderedForm:
    rng = np.random.default_rng(seed)
    form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=dpi, rng=rng)
    scan = fg.scan_distort(form, rng=rng, **distortion)
    if jpeg is not None:
        data = cv2.imencode(".jpg", scan.image, [cv2.IMWRITE_JPEG_QUALITY, jpeg])[1]
        scan.image = cv2.imdecode(data, cv2.IMREAD_GRAYSCALE)
    return scan


def _fields_right(finding: BoxFinding, scan: fg.RenderedForm, layout: fg.FormLayout) -> int:
    """Fields found under their reading-order name with every box centre within 20 % of a box."""
    names = fg.fnames(layout)
    found = {f.name: f for f in finding.fields}
    right = 0
    for spec in layout.fields:
        field, truth = found.get(names[spec.name]), scan.boxes[spec.name]
        if field is None or len(field.boxes) != len(truth):
            continue
        right += all(
            abs(x - (t[0] + t[2]) / 2) < 0.2 * (t[2] - t[0])
            and abs(y - (t[1] + t[3]) / 2) < 0.2 * (t[3] - t[1])
            for (x, y), t in ((finding.to_page(*b.centre), t) for b, t in zip(field.boxes, truth)))
    return right


def _timing() -> None:
    layout = fg.bench_page()
    for dpi in (300, 600):
        for skew in (0.0, 2.0):
            scan = _scan(layout, dpi, seed=1, skew_deg=skew, noise=0.3)
            times = []
            for _ in range(5 if dpi == 300 else 2):
                start = time.perf_counter()
                finding = find_fields(scan.image, dpi=dpi)
                times.append(time.perf_counter() - start)
            h, w = scan.image.shape
            print(f"find_fields  A4 {w}x{h} at {dpi} dpi, skew {skew:3.1f}: "
                  f"{min(times) * 1000:6.0f} ms (best of {len(times)}), "
                  f"{len(finding.fields)} fields")
        start = time.perf_counter()
        source, transform = finding.cells_source()  # as the page reader cuts: each crop turned alone
        cells = [c for f in finding.fields for c in cut_cells(source, f.boxes, dpi=dpi, transform=transform)]
        print(f"cut_cells    {len(cells)} cells at {dpi} dpi: "
              f"{(time.perf_counter() - start) * 1000:6.0f} ms")


def _accuracy(pages: int = 4) -> None:
    print(f"\nfields found right ({pages} pages per layout and dpi, 150/200/300 dpi):")
    for name, distortion in DISTORTIONS.items():
        right = total = pages_right = n_pages = 0
        for layout in (fg.orchard_card(), fg.bench_page()):
            for dpi in (150, 200, 300):
                for seed in range(pages):
                    scan = _scan(layout, dpi, seed, **distortion)
                    finding = find_fields(scan.image, dpi=dpi)
                    got = _fields_right(finding, scan, layout) if finding else 0
                    right += got
                    total += len(layout.fields)
                    n_pages += 1
                    pages_right += got == len(layout.fields) == len(finding.fields)
        print(f"  {name:28s} {right:4d}/{total} fields ({right / total:6.1%}), "
              f"{pages_right}/{n_pages} pages all right")


def main() -> None:
    cv2.setNumThreads(1)
    _timing()
    _accuracy()


if __name__ == "__main__":
    main()
