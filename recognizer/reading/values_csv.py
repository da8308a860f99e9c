"""CSV export: the values table (one row per page) and the digits table (one row per digit).

Both files are RFC 4180 CSV (comma-separated, double-quote quoting, CRLF line
ends) in UTF-8. Every value is written as text, so a grower number ``00412``
keeps its leading zeros.

Values table columns: ``file, page,`` one column per field (``f01, f02, ...``
— every field seen on any page, so pages with fewer fields leave the extra
columns empty), then ``to_check`` (the fields of the row a person should look
at, separated by spaces: the same rule as in a batch, :mod:`recognizer.states`,
with the layout judged against the most common layout of the pages read with
the same template, or without one) and ``problem`` (why a file or page could not be
read; such rows have no values).

Pages read with a form template (:mod:`recognizer.forms.template`) carry the
template's field names and typed values (``18.7``, ``2026-09-13``; fields in
the template's order), and the table gains two columns: ``template`` after
``page`` (the template's name and version that read the page, ``orchard_card
v1``) and ``rule_problems`` before ``problem`` (the rules a value breaks, as
``field: rule: what``, separated by `` | ``).

Digits table columns: ``file, page, field, box`` (box numbered from 1, left to
right), ``digit`` (``?`` for a mark read as "not a digit"), ``confidence``,
``p0`` … ``p9`` (the probability of each digit) and ``p_not_digit``. Empty
boxes have no row.

Spreadsheet safety (every CSV the program writes goes through
:func:`csv_writer`): a text cell that a spreadsheet would take as a formula
(one starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return,
for example a scan named ``=HYPERLINK(...).png``) is written with a leading
apostrophe, the common practice (no source: spreadsheet programs show the
cell as text and hide the apostrophe). A cell that is a plain number
(``-12``, ``+3.5``) is never altered, so values stay as read. A file name
that is not valid UTF-8 (bytes the file system gave Python as lone
surrogates) is written with those bytes shown as ``\\xNN``, so the file can
still be told apart and found.
"""

from __future__ import annotations

import csv
import os
import re
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import TextIO

from recognizer.reading.page import PageRead
from recognizer.scans.files import ScanProblem, printable_name
from recognizer.states import common_layout, layout_reasons

__all__ = ["ValuesTable", "DigitsWriter", "field_sort_key", "open_csv", "csv_writer", "safe_cell"]

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_NUMBER = re.compile(r"[+-]?(\d+(\.\d*)?|\.\d+)")


def open_csv(path: str | os.PathLike) -> TextIO:
    """Open ``path`` for writing CSV the way RFC 4180 wants it."""
    return open(path, "w", newline="", encoding="utf-8")


def safe_cell(cell: object) -> object:
    """``cell`` as it may go into a CSV a spreadsheet will open (see the module docstring).

    >>> safe_cell("=HYPERLINK(1)"), safe_cell("-12"), safe_cell("0412"), safe_cell(7)
    ("'=HYPERLINK(1)", '-12', '0412', 7)
    >>> safe_cell("caf\\udce9.png")
    'caf\\\\xe9.png'
    """
    if not isinstance(cell, str):
        return cell
    cell = printable_name(cell)
    if cell.startswith(_FORMULA_START) and not _NUMBER.fullmatch(cell):
        return "'" + cell
    return cell


class _SafeWriter:
    """A ``csv.writer`` whose rows go through :func:`safe_cell`."""

    def __init__(self, fh: TextIO) -> None:
        self._w = csv.writer(fh, lineterminator="\r\n", quoting=csv.QUOTE_MINIMAL)

    def writerow(self, row) -> None:
        self._w.writerow([safe_cell(c) for c in row])

    def writerows(self, rows) -> None:
        for row in rows:
            self.writerow(row)


def csv_writer(fh: TextIO) -> _SafeWriter:
    """A CSV writer for ``fh`` (from :func:`open_csv`): RFC 4180, CRLF line ends, cells made
    spreadsheet-safe by :func:`safe_cell`."""
    return _SafeWriter(fh)


def field_sort_key(name: str) -> tuple[int, str]:
    """Sort ``f2`` before ``f10`` and named fields after numbered ones."""
    digits = name[1:] if name[:1] == "f" else ""
    return (int(digits), "") if digits.isdigit() else (10**9, name)


@dataclass
class _Row:
    file: str
    page: str
    values: dict[str, str] = field(default_factory=dict)
    flagged: list[str] = field(default_factory=list)   # fields with reasons of their own (no layout reason)
    layout: str | None = None
    problem: str = ""
    template: str = ""
    rules: str = ""
    why: Counter = field(default_factory=Counter)       # reasons of its own, counted over its fields


class ValuesTable:
    """Collects one row per page and writes the values CSV at the end.

    The rows are kept (they are short strings) because the header needs
    every field name of every page before the first row is written, and
    because a page's layout is judged against the most common layout of all
    pages read with the same template or without one
    (:func:`recognizer.states.common_layout`), as in a batch.
    """

    def __init__(self) -> None:
        self.rows: list[_Row] = []
        self.fields: dict[str, int] = {}  # name -> order first seen
        self.templated = False

    def add_page(self, page: PageRead, *, threshold: float | None) -> None:
        self.templated |= page.template is not None
        if not page:
            self.rows.append(_Row(str(page.source), str(page.page), problem=page.problem or ""))
            return
        values = {f.name: f.output for f in page.fields}
        for name in values:
            self.fields.setdefault(name, len(self.fields))
        reasons = page.field_reasons(threshold)
        flagged = [name for name, why in reasons.items() if why]
        rules = " | ".join(f"{f.name}: {p}" for f in page.fields for p in f.rule_problems)
        self.rows.append(_Row(str(page.source), str(page.page), values, flagged, page.layout(), "",
                              page.template or "", rules, Counter(w for why in reasons.values() for w in why)))

    def add_problem(self, problem: ScanProblem) -> None:
        page = "" if problem.page is None else str(problem.page)
        self.rows.append(_Row(str(problem.source), page, problem=problem.reason))

    def layout_reasons(self) -> list[dict[str, tuple[str, ...]]]:
        """Per row, the fields its layout puts in doubt (:func:`recognizer.states.layout_reasons`)."""
        tallies: dict[str, dict[str, list[int]]] = {}
        for i, row in enumerate(self.rows):
            if row.layout is not None:
                tallies.setdefault(row.template, {}).setdefault(row.layout, [0, i])[0] += 1
        commons = {template: common_layout((layout, n, first) for layout, (n, first) in t.items())
                   for template, t in tallies.items()}
        return [layout_reasons(row.layout, commons.get(row.template)) for row in self.rows]

    def to_check(self) -> list[list[str]]:
        """Per row, the fields a person must look at (:mod:`recognizer.states`), in the page's order."""
        out = []
        for row, layout in zip(self.rows, self.layout_reasons()):
            flagged = set(row.flagged) | set(layout)
            out.append([name for name in row.values if name in flagged])
        return out

    def reason_counts(self) -> Counter:
        """How many fields to check each reason concerns (a field counts once per reason)."""
        counts: Counter = Counter()
        for row, layout in zip(self.rows, self.layout_reasons()):
            counts.update(row.why)
            counts.update(r for reasons in layout.values() for r in reasons)
        return counts

    def _names(self) -> list[str]:
        return sorted(self.fields, key=lambda n: (field_sort_key(n)[0], self.fields[n]))

    def header(self) -> list[str]:
        if self.templated:
            return ["file", "page", "template", *self._names(), "to_check", "rule_problems", "problem"]
        return ["file", "page", *self._names(), "to_check", "problem"]

    def write(self, path: str | os.PathLike) -> None:
        names = self._names()
        with open_csv(path) as fh:
            w = csv_writer(fh)
            w.writerow(self.header())
            for row, check in zip(self.rows, self.to_check()):
                cells = [row.values.get(n, "") for n in names]
                if self.templated:
                    w.writerow([row.file, row.page, row.template, *cells, " ".join(check), row.rules, row.problem])
                else:
                    w.writerow([row.file, row.page, *cells, " ".join(check), row.problem])


DIGIT_COLUMNS = (
    ["file", "page", "field", "box", "digit", "confidence"]
    + [f"p{d}" for d in range(10)]
    + ["p_not_digit"]
)


class DigitsWriter:
    """Streams one row per written digit to a CSV file.

    Use as a context manager::

        with DigitsWriter(path) as out:
            out.add_page(page_read)
    """

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        self._fh: TextIO | None = None

    def __enter__(self) -> DigitsWriter:
        self._fh = open_csv(self.path)
        self._w = csv_writer(self._fh)
        self._w.writerow(DIGIT_COLUMNS)
        return self

    def __exit__(self, *exc) -> None:
        assert self._fh is not None
        self._fh.close()

    def add_page(self, page: PageRead) -> None:
        for f in page.fields:
            for d in f.written:
                assert d.probs is not None
                self._w.writerow(
                    [str(page.source), page.page, f.name, d.box + 1, d.text, f"{d.confidence:.4f}"]
                    + [f"{p:.4f}" for p in d.probs]
                )
