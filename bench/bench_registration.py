"""Registration error and rule checks with the sample orchard template on generated pages.

Run ``python bench/bench_registration.py``. Prints:

* registration error on 50 generated weigh-in cards (rotation +-10 degrees,
  scale 0.9-1.1, shifts up to 10 mm, 150-600 dpi, one in five upside down,
  noise, blur, uneven light, some faint or broken lines): the distance
  between where the registration puts each box centre and where the
  generator put it, in pixels at 300 dpi (median and worst), and the time
  per page;
* registration scores of those pages against pages of other designs;
* the share of planted rule violations caught when 30 cards, each with one
  value that breaks one rule, are read with the shipped digit model;
* black-and-white pages of a dropout form: 30 weighbridge tickets (boxes in
  dropout red) scanned in 1 bit at 150-300 dpi with scanner thresholds that
  drop the red print or keep specks of it (rotation +-6 degrees, scale
  0.95-1.05, one in five upside down), registered to the ticket's template
  drafted from its blank form in colour: error as above, scores, and the
  scores of black-and-white pages of the other designs (the orchard card
  with red boxes and black text among them) against that template.

Seeded; the figures do not change between runs on the same library versions.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from recognizer.synth import forms as fg
from recognizer.digits.model import load_model
from recognizer.reading.page import PageReader
from recognizer.forms.registration import Registrar
from recognizer.scans.files import Page
from recognizer.forms.template_file import load_template

TEMPLATE = Path(__file__).resolve().parents[1] / "sample_forms" / "orchard_card.json"
DPIS = (150, 200, 240, 300, 400, 600)
# (layout field, planted value, rule expected, template field flagged)
PLANTED = (
    ("picking_date", "31022026", "date", "picking_date"),
    ("picking_date", "31062026", "date", "picking_date"),
    ("picking_date", "15122026", "max", "picking_date"),
    ("block_number", "31", "max", "block_number"),
    ("row_number", "0", "min", "row_number"),
    ("grower_number", "4127", "length", "grower_number"),
    ("total_crates", "", "required", "total_crates"),
    ("net_weight_tenths", "", "decimals", "net_weight"),
    ("total_crates", "+1", "sum", "total_crates"),
    ("total_crates", "+10", "sum", "total_crates"),
)


def _centres(boxes) -> np.ndarray:
    return np.array([((b[0] + b[2]) / 2, (b[1] + b[3]) / 2) for b in boxes])


def _measure(registrar: Registrar, blank, scan, *, dpi: float, flipped: bool, label: str):
    """Register the scan (turned upside down if ``flipped``): the registration, its time, and the
    box-centre errors (none, and a line printed, when it did not register)."""
    image = scan.image[::-1, ::-1].copy() if flipped else scan.image
    start = time.perf_counter()
    reg = registrar.register(image, dpi=dpi)
    seconds = time.perf_counter() - start
    if not reg:
        print(f"  {label}: not registered: {reg.problem}")
        return reg, seconds, []
    return reg, seconds, _box_errors(reg, blank, scan, image.shape, flipped=flipped, dpi=dpi)


def _box_errors(reg, blank, scan, shape: tuple[int, int], *, flipped: bool, dpi: float) -> list[float]:
    """Distances, in px at 300 dpi, from each template box centre mapped onto the page to its true place."""
    h, w = shape
    errors: list[float] = []
    for name, boxes in blank.boxes.items():
        ref, truth = _centres(boxes), _centres(scan.boxes[name])
        if flipped:
            truth = np.array([w, h]) - truth
        x, y = reg.to_page(ref[:, 0], ref[:, 1])
        errors += list(np.hypot(x - truth[:, 0], y - truth[:, 1]) * 300 / dpi)
    return errors


def registration_figures(registrar: Registrar, rng: np.random.Generator) -> list[float]:
    layout = fg.orchard_card()
    blank = fg.render_form(layout, {}, dpi=300, rng=np.random.default_rng(0))  # the template's reference
    errors, scores, times = [], [], []
    for i in range(50):
        dpi = DPIS[i % len(DPIS)]
        form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=dpi, rng=rng)
        scan = fg.scan_distort(
            form, rng=rng, skew_deg=float(rng.uniform(-10, 10)), scale=float(rng.uniform(0.9, 1.1)),
            shift_mm=(float(rng.uniform(-10, 10)), float(rng.uniform(-10, 10))),
            noise=float(rng.uniform(0, 0.5)), blur=float(rng.uniform(0, 1.2)), lighting=float(rng.uniform(0, 0.3)),
            faint_lines=0.5 if i % 7 == 3 else 0.0, broken_lines=0.08 if i % 7 == 5 else 0.0)
        flipped = i % 5 == 4
        reg, seconds, found = _measure(registrar, blank, scan, dpi=dpi, flipped=flipped, label=f"page {i}")
        times.append(seconds)
        scores.append(reg.score)
        errors += found
    e = np.array(errors)
    print(f"registration error over 50 pages ({len(e)} box centres), px at 300 dpi: "
          f"median {np.median(e):.2f}, 95th percentile {np.percentile(e, 95):.2f}, worst {e.max():.2f}")
    print(f"registered {sum(s >= registrar.min_score for s in scores)}/50; time per page "
          f"median {1000 * np.median(times):.0f} ms, worst {1000 * max(times):.0f} ms")
    return scores


def other_design_scores(registrar: Registrar, rng: np.random.Generator) -> list[float]:
    import dataclasses
    card = fg.orchard_card()
    moved = dataclasses.replace(card, name="moved", fields=tuple(
        dataclasses.replace(f, x_mm=f.x_mm + 4, y_mm=f.y_mm + 6) for f in card.fields))
    scores = []
    for layout in (fg.bench_page(), moved):
        for dpi in (200, 300):
            form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=dpi, rng=rng)
            scores.append(registrar.register(form.image, dpi=dpi).score)
    return scores


def planted_figures(rng: np.random.Generator) -> None:
    reader = PageReader(load_model(None), templates=[load_template(TEMPLATE)])
    layout = fg.orchard_card()
    caught = 0
    n = 30
    for i in range(n):
        field, planted, rule, flagged = PLANTED[i % len(PLANTED)]
        values = fg.random_values(layout, rng=rng)
        if planted.startswith("+"):
            planted = str(int(values[field]) + int(planted[1:]))
        values[field] = planted
        form = fg.render_form(layout, values, dpi=200, rng=rng)
        scan = fg.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-5, 5)), noise=0.3, blur=0.6)
        read = reader.read(Page(Path(f"planted_{i}.png"), 1, scan.image, 200.0, "file"))
        got = {f.name: f for f in read.fields}
        ok = flagged in got and any(p.startswith(rule + ":") for p in got[flagged].rule_problems)
        caught += ok
        if not ok:
            seen = got[flagged].rule_problems if flagged in got else read.problem
            print(f"  missed: {field}={planted!r} ({rule}); read {got.get(flagged) and got[flagged].typed!r}, {seen}")
    print(f"planted rule violations caught (right rule on the right field): {caught}/{n} = {caught / n:.0%}")


def dropout_figures(rng: np.random.Generator) -> None:
    from recognizer.forms.drafting import draft_template
    from recognizer.page.boxes import find_fields

    layout = fg.weigh_ticket()
    blank = fg.render_form(layout, {}, dpi=300, rng=np.random.default_rng(0), colour=True)
    registrar = Registrar(draft_template(find_fields(blank.image, dpi=300), name="weigh_ticket"))
    errors, scores, times, layers = [], [], [], set()
    for i in range(30):
        dpi = (150, 200, 200, 240, 300)[i % 5]
        form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=300, rng=rng)
        scan = fg.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-6, 6)), scale=float(rng.uniform(0.95, 1.05)),
                               shift_mm=(float(rng.uniform(-5, 5)), float(rng.uniform(-5, 5))), noise=0.3,
                               blur=0.5, lighting=float(rng.uniform(0, 0.3)))
        scan = fg.bitonal_scan(scan, rng=rng, dpi=dpi, threshold=int(rng.integers(120, 171)))
        flipped = i % 5 == 4
        reg, seconds, found = _measure(registrar, blank, scan, dpi=dpi, flipped=flipped, label=f"ticket {i}")
        times.append(seconds)
        scores.append(reg.score)
        layers.add(reg.layer)
        errors += found
    e = np.array(errors)
    print(f"black-and-white dropout tickets: registered {sum(s >= registrar.min_score for s in scores)}/30 "
          f"(scored on: {', '.join(sorted(layers))}); error px at 300 dpi: median {np.median(e):.2f}, "
          f"95th percentile {np.percentile(e, 95):.2f}, worst {e.max():.2f}; time per page median "
          f"{1000 * np.median(times):.0f} ms")
    others = []
    designs = [fg.orchard_card(), fg.tally_sheet(), fg.crate_return_slip(), fg.bin_register(),
               fg.recolour(fg.orchard_card(), "red", furniture=False)]
    for layout in designs:
        for _ in range(2):
            form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=200, rng=rng)
            page = fg.bitonal_scan(fg.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-3, 3)), noise=0.3),
                                   rng=rng, dpi=200)
            others.append(registrar.register(page.image, dpi=200).score)
    print(f"registration scores: tickets {min(scores):.2f}..{max(scores):.2f}, black-and-white pages of "
          f"other designs {min(others):.2f}..{max(others):.2f} (threshold {registrar.min_score})")


def main() -> None:
    rng = np.random.default_rng(2026)
    registrar = Registrar(load_template(TEMPLATE))
    scores = registration_figures(registrar, rng)
    others = other_design_scores(registrar, rng)
    print(f"registration scores: cards {min(scores):.2f}..{max(scores):.2f}, "
          f"other designs {min(others):.2f}..{max(others):.2f} (threshold {registrar.min_score})")
    planted_figures(rng)
    dropout_figures(rng)


if __name__ == "__main__":
    main()
