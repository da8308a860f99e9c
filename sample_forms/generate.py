"""Rebuild the bundled sample scans of filled-in Larkhollow weigh-in cards.

Run ``python sample_forms/generate.py`` from the repository root (or from
anywhere: paths are relative to this file).  The output is fully determined
by the seed below: the scans in ``scans/``, ``truth.csv`` (ground truth by
field name) and ``truth_fnames.csv`` (the same by reading-order name f01..).
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from recognizer.synth.forms import (RenderedForm, fnames, orchard_card, random_values, render_form,
                                save_scan, scan_distort)
from recognizer.synth.handwriting import Writer

SEED = 2026
HERE = Path(__file__).resolve().parent
SCANS = HERE / "scans"


@dataclass(frozen=True)
class Scan:
    """One sample file: its name, resolution and how roughly it was scanned."""

    file: str
    dpi: int
    pages: int = 1
    skew: float = 1.0       # largest |skew| in degrees
    noise: float = 0.3
    blur: float = 0.6
    lighting: float = 0.1
    faint: float = 0.0
    broken: float = 0.0


# Lossless files come from a flatbed scanner (even light, little noise); the
# JPEGs and the PDF from rougher scanning (uneven light, more noise).
SCAN_PLAN = (
    Scan("card_01.png", 200, skew=0.5, noise=0.05, lighting=0.0),
    Scan("card_02.jpg", 200, skew=1.5, noise=0.4),
    Scan("card_03.jpg", 300, skew=3.0, noise=0.3, lighting=0.3),
    Scan("card_04.png", 200, skew=2.0, noise=0.05, blur=1.2, lighting=0.0),
    Scan("card_05.tif", 200, skew=1.0, noise=0.05, lighting=0.0, faint=0.45),
    Scan("card_06.jpg", 200, skew=2.5, noise=0.5, lighting=0.35),
    Scan("card_07.png", 200, skew=1.0, noise=0.05, lighting=0.0, broken=0.08),
    Scan("card_08.jpg", 300, skew=1.5, noise=0.35, blur=1.0, lighting=0.2, faint=0.3),
    Scan("card_09.jpg", 200, skew=3.0, noise=0.3, lighting=0.25, broken=0.05),
    Scan("cards_10-12.pdf", 200, pages=3, skew=2.0, noise=0.3, lighting=0.2),
)


def _scan_card(plan: Scan, writer: Writer, rng: np.random.Generator) -> RenderedForm:
    """Fill in one card with ``writer`` and scan it as ``plan`` says."""
    layout = orchard_card()
    form = render_form(layout, random_values(layout, rng=rng), dpi=plan.dpi, writer=writer,
                       rng=rng, stray_marks=0.03)
    return scan_distort(
        form, rng=rng,
        skew_deg=float(rng.uniform(-plan.skew, plan.skew)),
        shift_mm=(float(rng.uniform(-3, 3)), float(rng.uniform(-3, 3))),
        scale=float(rng.uniform(0.985, 1.015)),
        noise=plan.noise, blur=plan.blur, lighting=plan.lighting,
        faint_lines=plan.faint, broken_lines=plan.broken)


def _white_point(image: np.ndarray) -> np.ndarray:
    """Map the brightest paper to pure white, as a scanner's auto-levels would."""
    paper = float(np.percentile(image, 90))
    scaled = image.astype(np.float32) * (255.0 / max(paper - 6.0, 1.0))
    return np.clip(scaled, 0, 255).astype(np.uint8)


def main() -> None:
    """Write the sample scans and both truth files."""
    rng = np.random.default_rng(SEED)
    writers = [Writer.random(rng) for _ in range(5)] + [Writer.distinctive(seed=SEED)]
    layout = orchard_card()
    names = [spec.name for spec in layout.fields]
    reading = fnames(layout)
    SCANS.mkdir(exist_ok=True)
    for old in SCANS.iterdir():
        old.unlink()
    rows = []
    for index, plan in enumerate(SCAN_PLAN):
        pages = []
        for page in range(1, plan.pages + 1):
            card = _scan_card(plan, writers[(index + page) % len(writers)], rng)
            pages.append(_white_point(card.image))
            rows.append((plan.file, page, card.values))
        save_scan(pages, SCANS / plan.file, dpi=plan.dpi, quality=85)
    _write_truth(HERE / "truth.csv", ["file", "page", *names], rows, names)
    _write_truth(HERE / "truth_fnames.csv", ["file", "page", *(reading[n] for n in names)],
                 rows, names)
    total = sum(p.stat().st_size for p in SCANS.iterdir())
    print(f"{len(rows)} cards in {len(SCAN_PLAN)} files, {total / 1e6:.2f} MB in {SCANS.name}/")


def _write_truth(path: Path, header: list[str], rows: list[tuple[str, int, dict[str, str]]],
                 names: list[str]) -> None:
    """Write one truth CSV (RFC 4180: CRLF line ends, quoting where needed)."""
    with path.open("w", newline="", encoding="utf-8") as out:
        writer = csv.writer(out, lineterminator="\r\n")
        writer.writerow(header)
        for file, page, values in rows:
            writer.writerow([file, page, *(values[n] for n in names)])


if __name__ == "__main__":
    main()
