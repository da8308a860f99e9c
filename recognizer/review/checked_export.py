"""Checked CSV export: one row per page with the values after review.

Columns: ``file, page``, one column per field (every field name seen in the
batch, ``f2`` before ``f10``), then, only with ``allow_unchecked``,
``unchecked_fields`` (the fields of the row still to check, separated by
spaces), then, only with ``audit``, ``<field>_state`` and
``<field>_lowest_confidence`` for every field (the lowest model confidence
among its written boxes, 4 decimals, empty if none), and last ``problem``
(why a file or page could not be read; such rows have no values).

Values are the reviewed values as text (a grower number ``00412`` keeps its
zeros); an ``unreadable`` field is empty. Pages read with a form template
give their fields' typed values after review (``18.7`` with a decimal point,
ISO 8601 dates ``2026-09-13``, integers without leading zeros; see
:mod:`recognizer.forms.values`), with the rules checked again on the reviewed
values (:func:`recognizer.batch.flags.recheck_rules`); a typed value that breaks a
rule (a date that is no day) shows its digits. When any page was read with a
template, a column ``template`` (its name and version) follows ``page`` and
the template's fields come first, in the template's order. The file is RFC 4180 CSV (commas,
double-quote quoting, CRLF line ends) in UTF-8, written to a temporary file
and renamed into place, so a refused or failed export leaves no partial file.

Export is refused while fields are still to check, unless ``allow_unchecked``.

Beside the CSV, ``<name>.residual.txt`` (``checked.csv`` -> ``checked.residual.txt``)
states the batch's residual error in plain words a data manager can paste into
a report (:func:`recognizer.review.audit.residual_statement`): fields, checked
by a person, corrected, still to check, accepted without a person, and the
latest spot check (fields audited, errors found, the 95 % upper bound on the
share of wrong values among the fields accepted without a person); without a
spot check it says that the residual error was not measured. It is written
the same way as the CSV (temporary file, then renamed), UTF-8, LF line ends.
"""

from __future__ import annotations

import os
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from recognizer.batch.queries import count_fields, stored_pages
from recognizer.batch.review_rows import CheckedField, checked_fields
from recognizer.batch.store import Batch, stored_path
from recognizer.reading.values_csv import csv_writer, field_sort_key, open_csv
from recognizer.review.audit import residual_figures, residual_line, residual_path, residual_statement
from recognizer.states import State

TO_CHECK, UNREADABLE = (State.TO_CHECK, State.UNREADABLE)

__all__ = ["ExportResult", "checked_table", "export_checked", "unchecked_message"]


@dataclass
class ExportResult:
    """What :func:`export_checked` wrote; falsy with ``problem`` set when it refused.

    ``residual`` is the statement file written beside the CSV, ``residual_line``
    the statement in one line.
    """

    path: Path
    rows: int = 0
    unchecked: int = 0
    problem: str | None = None
    residual: Path | None = None
    residual_line: str = ""

    def __bool__(self) -> bool:
        return self.problem is None


def unchecked_message(count: int) -> str:
    """``"12 fields are still to check; review them or use --allow-unchecked"``."""
    verb = "field is" if count == 1 else "fields are"
    return f"{count} {verb} still to check; review them or use --allow-unchecked"


def checked_table(batch: Batch, *, audit: bool = False, allow_unchecked: bool = False) -> tuple[list[str], list[list[str]]]:
    """Header and rows of the checked CSV (all cells are strings)."""
    fields = checked_fields(batch)
    by_page: dict[int, dict[str, CheckedField]] = defaultdict(dict)
    for f in fields:
        by_page[f.page_id][f.name] = f
    templated = any(f.template is not None for f in fields)
    names = sorted({f.name for f in fields}, key=lambda n: _column_order(n, fields))
    header = ["file", "page", *(["template"] if templated else []), *names]
    if allow_unchecked:
        header.append("unchecked_fields")
    if audit:
        header += [f"{n}_{what}" for n in names for what in ("state", "lowest_confidence")]
    header.append("problem")
    rows = []
    for page in stored_pages(batch):
        own = by_page.get(page.page_id, {})
        row = [page.file, "" if page.page is None else str(page.page)]
        if templated:
            row.append(page.template or "")
        row += [_value(own.get(n)) for n in names]
        if allow_unchecked:
            row.append(" ".join(n for n in names if n in own and own[n].state == TO_CHECK))
        if audit:
            for n in names:
                f = own.get(n)
                row += ["", ""] if f is None else [f.state, "" if f.lowest is None else f"{f.lowest:.4f}"]
        row.append(page.problem or "")
        rows.append(row)
    return header, rows


def _column_order(name: str, fields: Sequence[CheckedField]) -> tuple:
    """Template fields first, by their place in the template; then the others, ``f2`` before ``f10``."""
    places = [f.position for f in fields if f.name == name and f.template is not None]
    return (0, min(places), "") if places else (1, *field_sort_key(name))


def _value(f: CheckedField | None) -> str:
    if f is None or f.state == UNREADABLE:
        return ""
    return f.value if f.typed is None else f.typed


def export_checked(
    batch: Batch, out: str | os.PathLike, *, allow_unchecked: bool = False, audit: bool = False
) -> ExportResult:
    """Write the checked CSV to ``out``.

    Returns
    -------
    ExportResult
        Falsy, with nothing written, when fields are still to check and
        ``allow_unchecked`` is False.
    """
    out = Path(out)
    unchecked = count_fields(batch, TO_CHECK)
    if unchecked and not allow_unchecked:
        return ExportResult(out, unchecked=unchecked, problem=unchecked_message(unchecked))
    header, rows = checked_table(batch, audit=audit, allow_unchecked=allow_unchecked)
    figures = residual_figures(batch)
    tmp = out.with_name(f".{out.name}.partial")
    try:
        with open_csv(tmp) as fh:
            writer = csv_writer(fh)
            writer.writerow(header)
            writer.writerows(rows)
        os.replace(tmp, out)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    side = residual_path(out)
    _write_text(side, residual_statement(figures, batch_name=stored_path(Path(batch.path).name)))
    return ExportResult(out, rows=len(rows), unchecked=unchecked, residual=side, residual_line=residual_line(figures))


def _write_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file renamed into place."""
    tmp = path.with_name(f".{path.name}.partial")
    try:
        with open(tmp, "w", encoding="utf-8", errors="backslashreplace", newline="\n") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
