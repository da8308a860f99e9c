"""Flags of the stored fields: the one rule of :mod:`recognizer.states` applied to the batch.

SQL here only fetches the inputs of the rule (confidences, gaps, doubts, rule
problems, page warnings, layouts) and writes back what the rule decides:

* :func:`refresh_states` re-flags digits against the batch threshold,
  re-derives field values, checks template rules again and re-derives field
  states;
* :func:`recheck_rules` types the fields of templated pages and tests their
  rules on the reviewed values;
* :func:`refresh_layout` flags the pages whose layout differs from the batch's.

Each is called inside a write transaction of :class:`recognizer.batch.store.Batch`.
"""

from __future__ import annotations

import functools
import json
import sqlite3
from collections import defaultdict
from collections.abc import Sequence
from typing import Any

from recognizer.forms.template import Template
from recognizer.forms.template_file import template_from_json
from recognizer.forms.values import check_page
from recognizer.reading.page import UNREADABLE_MARK, field_value
from recognizer.states import (
    State,
    common_layout,
    counted_box,
    digit_to_check,
    field_reasons,
    field_state,
)

__all__ = ["refresh_states", "recheck_rules", "refresh_layout", "threshold"]

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
    states = []
    for f in conn.execute(
        f"SELECT f.id, f.gap, f.doubts, f.rule_problems, f.resolution, f.state, p.warnings, p.odd_layout "
        f"FROM fields f JOIN pages p ON p.id = f.page_id WHERE {where}",
        params,
    ):
        flagged = bool(field_reasons(
            gap=bool(f["gap"]), box_doubts=json.loads(f["doubts"]), rule_problems=json.loads(f["rule_problems"]),
            page_warnings=json.loads(f["warnings"]), odd_layout=bool(f["odd_layout"]),
        ))
        state = field_state(
            (d["state"] for d in boxes[f["id"]] if counted_box(d["blank"], d["state"])),
            flagged=flagged, resolution=f["resolution"],
        )
        if state != f["state"]:
            states.append((state.value, f["id"]))
    conn.executemany("UPDATE fields SET state = ? WHERE id = ?", states)
    return sorted({r[1] for r in values} | set(ruled) | {r[1] for r in states})


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
    """Flag the pages whose layout differs from the batch's most common one.

    Call inside a write transaction. Returns the ids of the pages whose flag changed.
    """
    common = common_layout(
        (r[0], r[1], r[2]) for r in conn.execute(
            "SELECT layout, COUNT(*), MIN(id) FROM pages WHERE layout IS NOT NULL GROUP BY layout")
    )
    if common is None:
        return []
    changed = [r[0] for r in conn.execute(
        "SELECT id FROM pages WHERE layout IS NOT NULL AND odd_layout != (layout != ?)", (common,))]
    if changed:
        conn.executemany(
            "UPDATE pages SET odd_layout = (layout != ?) WHERE id = ?", [(common, i) for i in changed]
        )
        refresh_states(conn, page_ids=changed)
    return changed
