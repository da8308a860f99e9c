"""Flags of the stored fields: the one rule of :mod:`recognizer.states` applied to the batch.

SQL here only fetches the inputs of the rule (confidences, gaps, doubts, rule
problems, page warnings, layouts) and writes back what the rule decides:

* :func:`refresh_states` re-flags digits against the batch threshold,
  re-derives field values, checks template rules again and re-derives field
  states;
* :func:`recheck_rules` types the fields of templated pages and tests their
  rules on the reviewed values;
* :func:`refresh_layout` marks the pages whose layout differs from the
  batch's (``pages.odd_layout``) and re-flags them;
* :func:`field_checks` gives each field's reasons as the rule decides them
  (:func:`recognizer.states.check_field`): the states stored here and the
  reasons the review queue shows come from the same call.

Which of a page's warnings and which of its layout differences concern a
field is decided per field (:func:`recognizer.states.warnings_touching`,
:func:`recognizer.states.layout_reasons`); ``pages.odd_layout`` only says that
the page's layout differs somewhere, so that pages matching the batch cost
no layout work.

Each is called inside a write transaction of :class:`recognizer.batch.store.Batch`.
"""

from __future__ import annotations

import functools
import json
import sqlite3
from collections import defaultdict
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from recognizer.forms.template import Template
from recognizer.forms.template_file import template_from_json
from recognizer.forms.values import check_page
from recognizer.reading.page import UNREADABLE_MARK, field_value
from recognizer.states import (
    State,
    check_field,
    common_layout,
    counted_box,
    digit_to_check,
    field_level,
    field_state,
    layout_reasons,
    warnings_touching,
)

__all__ = ["FieldCheck", "field_checks", "fields_to_check_at", "refresh_states", "recheck_rules", "refresh_layout",
           "threshold"]

#: A read query: ``(sql, params) -> rows`` (``Batch.rows``, or a connection's execute-and-fetch).
Query = Callable[[str, Sequence[Any]], list[sqlite3.Row]]

_OPEN = (State.READ.value, State.TO_CHECK.value)


def threshold(conn: sqlite3.Connection) -> float | None:
    """The batch threshold (None until the first page is read)."""
    row = conn.execute("SELECT value FROM settings WHERE key = 'threshold'").fetchone()
    return None if row is None else json.loads(row[0])


def _scope(page_ids: Sequence[int] | None, field_ids: Sequence[int] | None) -> tuple[str, list[int]]:
    if field_ids is not None:
        return f"f.id IN ({','.join('?' * len(field_ids))})", list(field_ids)
    if page_ids is not None:
        return f"f.page_id IN ({','.join('?' * len(page_ids))})", list(page_ids)
    return "1", []


def refresh_states(
    conn: sqlite3.Connection,
    *,
    page_ids: Sequence[int] | None = None,
    field_ids: Sequence[int] | None = None,
) -> list[int]:
    """Re-flag digits against the batch threshold, re-derive field values, check
    the template rules again and re-derive field states.

    Call inside a write transaction. Digits a person handled keep their
    state. Limited to the given pages or fields (all when both are None),
    except that the rules are checked on the whole page of each field in scope
    (a sum spans fields), see :func:`recheck_rules`.

    Returns
    -------
    list of int
        Ids of the fields whose value, typed value, rule problems or state changed.
    """
    where, params = _scope(page_ids, field_ids)
    limit = threshold(conn)
    flips = []
    for d in conn.execute(
        f"SELECT d.id, d.prediction, d.confidence, d.state FROM digits d JOIN fields f ON f.id = d.field_id "
        f"WHERE ({where}) AND NOT d.blank AND d.state IN (?, ?)",
        [*params, *_OPEN],
    ):
        state = State.TO_CHECK if digit_to_check(d["prediction"], d["confidence"], limit) else State.READ
        if state != d["state"]:
            flips.append((state.value, d["id"]))
    conn.executemany("UPDATE digits SET state = ? WHERE id = ?", flips)
    boxes = _box_rows(conn, where, params)
    values = []
    for f in conn.execute(f"SELECT f.id, f.whole, f.value FROM fields f WHERE {where}", params):
        value = f["value"] if f["whole"] else field_value([d["value"] or "" for d in boxes[f["id"]]])[0]
        if value != f["value"]:
            values.append((value, f["id"]))
    conn.executemany("UPDATE fields SET value = ? WHERE id = ?", values)
    ruled = recheck_rules(conn, [r[0] for r in conn.execute(f"SELECT DISTINCT f.page_id FROM fields f WHERE {where}",
                                                             params)])
    if ruled:
        where = f"({where}) OR f.id IN ({','.join('?' * len(ruled))})"
        params = [*params, *ruled]
        boxes = _box_rows(conn, where, params)
    checks = field_checks(_query(conn), where, params, threshold=limit)
    states = []
    for f in conn.execute(f"SELECT f.id, f.resolution, f.state FROM fields f WHERE {where}", params):
        state = field_state(
            (d["state"] for d in boxes[f["id"]] if counted_box(d["blank"], d["state"])),
            flagged=field_level(checks[f["id"]].why), resolution=f["resolution"],
        )
        if state != f["state"]:
            states.append((state.value, f["id"]))
    conn.executemany("UPDATE fields SET state = ? WHERE id = ?", states)
    return sorted({r[1] for r in values} | set(ruled) | {r[1] for r in states})


def _query(conn: sqlite3.Connection) -> Query:
    return lambda sql, params: conn.execute(sql, list(params)).fetchall()


@dataclass(frozen=True)
class FieldCheck:
    """What the rule says about one field: its reasons (empty: nothing to check), the
    warnings of its page that touch it, and its layout reasons (empty: its layout is the batch's
    where this field is concerned)."""

    why: tuple[str, ...]
    page_warnings: tuple[str, ...]
    layout: tuple[str, ...]


def field_checks(query: Query, where: str = "1", params: Sequence[Any] = (), *,
                 threshold: float | None) -> dict[int, FieldCheck]:
    """The rule of :func:`recognizer.states.check_field` for the fields matching ``where``.

    ``where`` is an SQL condition on ``fields f`` (e.g. ``"f.state = ?"``) with
    its ``params``; ``threshold`` is the batch threshold. The readings are the
    written boxes no person has handled (``read`` or ``to check``).
    """
    rows = query(
        "SELECT f.id, f.name, f.gap, f.doubts, f.rule_problems, p.id AS page_id, p.warnings, p.layout, "
        f"p.odd_layout, p.template FROM fields f JOIN pages p ON p.id = f.page_id WHERE {where}", params)
    readings: dict[int, list[tuple[str, float]]] = defaultdict(list)
    for d in query(
        "SELECT d.field_id, d.prediction, d.confidence FROM digits d JOIN fields f ON f.id = d.field_id "
        f"WHERE ({where}) AND NOT d.blank AND d.state IN (?, ?) ORDER BY d.field_id, d.box",
        [*params, *_OPEN],
    ):
        readings[d["field_id"]].append((d["prediction"], float(d["confidence"])))
    commons = common_layouts(query) if any(r["odd_layout"] for r in rows) else {}
    by_page: dict[int, dict[str, tuple[str, ...]]] = {}
    checks = {}
    for r in rows:
        layout: tuple[str, ...] = ()
        if r["odd_layout"]:
            if r["page_id"] not in by_page:
                by_page[r["page_id"]] = layout_reasons(r["layout"], commons.get(r["template"]))
            layout = by_page[r["page_id"]].get(r["name"], ())
        doubts, warnings = json.loads(r["doubts"]), json.loads(r["warnings"])
        mine = readings[r["id"]]
        why = check_field(mine, threshold, gap=bool(r["gap"]), box_doubts=doubts,
                          rule_problems=json.loads(r["rule_problems"]), page_warnings=warnings, layout=layout)
        digits = [c for p, c in mine if p != UNREADABLE_MARK]
        checks[r["id"]] = FieldCheck(
            why, warnings_touching(warnings, box_doubts=doubts, confidences=digits, threshold=threshold), layout)
    return checks


def fields_to_check_at(query: Query, threshold: float | None) -> int:
    """How many fields would be to check with ``threshold``, without applying it (a preview
    for the strictness dialog: the rule as :func:`refresh_states` applies it, reviews kept)."""
    checks = field_checks(query, threshold=threshold)
    digits: dict[int, list[str]] = defaultdict(list)
    for d in query("SELECT field_id, blank, prediction, confidence, state FROM digits", ()):
        if d["state"] in _OPEN and not d["blank"]:
            digits[d["field_id"]].append(
                State.TO_CHECK if digit_to_check(d["prediction"], d["confidence"], threshold) else State.READ)
        elif counted_box(d["blank"], d["state"]):
            digits[d["field_id"]].append(d["state"])
    return sum(
        field_state(digits[f["id"]], flagged=field_level(checks[f["id"]].why), resolution=f["resolution"])
        == State.TO_CHECK
        for f in query("SELECT id, resolution FROM fields", ())
    )


def common_layouts(query: Query) -> dict[str | None, str]:
    """The batch's layout for each template (None: pages whose boxes were found), see
    :func:`recognizer.states.common_layout`."""
    tallies: dict[str | None, list[tuple[str, int, int]]] = defaultdict(list)
    for template, layout, pages, first in query(
            "SELECT template, layout, COUNT(*), MIN(id) FROM pages WHERE layout IS NOT NULL "
            "GROUP BY template, layout", ()):
        tallies[template].append((layout, pages, first))
    return {template: common_layout(t) for template, t in tallies.items()}  # type: ignore[misc]


def _box_rows(conn: sqlite3.Connection, where: str, params: Sequence[Any]) -> dict[int, list[sqlite3.Row]]:
    boxes: dict[int, list[sqlite3.Row]] = defaultdict(list)
    for row in conn.execute(
        f"SELECT d.field_id, d.blank, d.value, d.state FROM digits d JOIN fields f ON f.id = d.field_id "
        f"WHERE {where} ORDER BY d.field_id, d.box",
        params,
    ):
        boxes[row["field_id"]].append(row)
    return boxes


@functools.lru_cache(maxsize=8)
def _template(text: str) -> Template:
    return template_from_json(json.loads(text))


def recheck_rules(conn: sqlite3.Connection, page_ids: Sequence[int]) -> list[int]:
    """Type the fields of pages read with a template and test its rules on their values now.

    Call inside a write transaction, after the field values are up to date.
    The values checked are the reviewed ones: each box's value, or for a
    field set as a whole its digits right-aligned in its boxes (the way the
    cards are filled in); an ``unreadable`` field counts as unreadable (no
    rule is tested on it, sums skip it). Updates ``fields.typed`` and
    ``fields.rule_problems``; a field a person had confirmed or corrected that
    now breaks a rule it did not break before loses that decision, so it is to
    check again. Pages whose template is not kept in the batch are left alone.

    Returns
    -------
    list of int
        Ids of the fields whose typed value or rule problems changed.
    """
    if not page_ids:
        return []
    marks = ",".join("?" * len(page_ids))
    pages = conn.execute(
        f"SELECT p.id, t.json FROM pages p JOIN templates t ON p.template = t.name || ' v' || t.version "
        f"WHERE p.id IN ({marks})",
        list(page_ids),
    ).fetchall()
    changed: list[int] = []
    for page in pages:
        template = _template(page["json"])
        where = "f.page_id = ?"
        boxes = _box_rows(conn, where, [page["id"]])
        rows = {r["name"]: r for r in conn.execute(
            "SELECT f.id, f.name, f.value, f.whole, f.resolution, f.typed, f.rule_problems "
            f"FROM fields f WHERE {where}", [page["id"]])}
        if set(rows) != {f.name for f in template.fields}:
            continue  # not the template's fields (cannot happen for a page it read)
        texts = {f.name: _review_texts(rows[f.name], boxes[rows[f.name]["id"]], len(f.boxes))
                 for f in template.fields}
        for name, typed in check_page(template, texts).items():
            row = rows[name]
            n = len(template.field(name).boxes)
            if row["whole"] and len(row["value"]) > n and row["resolution"] != State.UNREADABLE:
                typed.text = row["value"]
                typed.problems = [f"length: {len(row['value'])} digits given, the field has {n} boxes"]
            old = json.loads(row["rule_problems"])
            if (typed.text, typed.problems) == (row["typed"], old):
                continue
            keep = row["resolution"] if set(typed.problems) <= set(old) or row["resolution"] == State.UNREADABLE else None
            conn.execute("UPDATE fields SET typed = ?, rule_problems = ?, resolution = ? WHERE id = ?",
                         (typed.text, json.dumps(typed.problems), keep, row["id"]))
            changed.append(row["id"])
    return changed


def _review_texts(field_row: sqlite3.Row, digits: Sequence[sqlite3.Row], n: int) -> list[str]:
    """The per-box texts of a field as reviewed (see :func:`recheck_rules`)."""
    if field_row["resolution"] == State.UNREADABLE or (field_row["whole"] and len(field_row["value"]) > n):
        return [UNREADABLE_MARK] + [""] * (n - 1)
    if field_row["whole"]:
        value = field_row["value"]
        return [""] * (n - len(value)) + list(value)
    return [d["value"] or "" for d in digits]


def refresh_layout(conn: sqlite3.Connection) -> list[int]:
    """Mark the pages whose layout differs from the batch's (per template) and re-flag them.

    Call inside a write transaction. The pages re-flagged are those whose mark
    changed and, where the batch's layout itself changed (another layout
    became the most common), every page that differs from it: which of their
    fields differ depends on it. Returns their ids, in id order.
    """
    commons = common_layouts(_query(conn))
    if not commons:
        return []
    pages = conn.execute("SELECT id, template, layout, odd_layout FROM pages WHERE layout IS NOT NULL "
                         "ORDER BY id").fetchall()
    # before this call, the first page not marked in each template's group had the batch's layout then
    before: dict[str | None, str] = {}
    for p in pages:
        if not p["odd_layout"]:
            before.setdefault(p["template"], p["layout"])
    moved = {t for t, layout in before.items() if commons.get(t) != layout}
    marks, again = [], []
    for p in pages:
        odd = p["layout"] != commons[p["template"]]
        if odd != bool(p["odd_layout"]):
            marks.append((int(odd), p["id"]))
            again.append(p["id"])
        elif odd and p["template"] in moved:
            again.append(p["id"])
    conn.executemany("UPDATE pages SET odd_layout = ? WHERE id = ?", marks)
    if again:
        refresh_states(conn, page_ids=again)
    return again
