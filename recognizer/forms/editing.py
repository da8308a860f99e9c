"""Editing steps for form templates: rename, retype, delete, move, draw, split, join, sums.

Small pure steps for a template editor: each returns a new, validated
:class:`~recognizer.forms.template.Template` (a
:class:`~recognizer.forms.template.TemplateError`, with a message for the
user, when the result would not hold together) and leaves the one given as it
was.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

from recognizer.page.boxes import Box
from recognizer.forms.template import Reference, SumRule, Template, TemplateError, TemplateField

__all__ = [
    "add_field",
    "delete_field",
    "join_fields",
    "move_field",
    "parse_sum",
    "rename_field",
    "run_boxes",
    "set_sums",
    "split_field",
    "sum_text",
    "update_field",
]

#: Width of the printed wall between two boxes of a run drawn by hand, in mm
#: (common practice for comb fields, no source).
_DRAWN_WALL_MM = 0.7


def _with_fields(template: Template, fields: Sequence[TemplateField],
                 sums: Sequence[SumRule] | None = None) -> Template:
    return Template(template.name, template.version, template.reference, tuple(fields),
                    template.sums if sums is None else tuple(sums), template.description)


def _index(template: Template, name: str) -> int:
    for i, f in enumerate(template.fields):
        if f.name == name:
            return i
    raise TemplateError(f"there is no field {name!r}")


def update_field(template: Template, name: str, /, **changes: Any) -> Template:
    """Change attributes of field ``name`` (those of :class:`TemplateField`).

    A new ``name`` is followed in the sum rules. Setting the ``type`` clears
    what belongs to the other types (decimals, date order, check digit, min
    and max) unless given in the same call.
    """
    i = _index(template, name)
    old = template.fields[i]
    if "type" in changes and changes["type"] != old.type:
        cleared = {"decimals": 0, "date_order": None, "check_digit": None, "minimum": None, "maximum": None}
        changes = {**cleared, **changes}
    try:
        new = dataclasses.replace(old, **changes)
    except TypeError as exc:
        raise TemplateError(f"field {name!r}: {exc}") from None
    renamed = new.name != name
    sums = [SumRule(_renamed(r.total, name, new.name), tuple(_renamed(p, name, new.name) for p in r.parts))
            for r in template.sums] if renamed else template.sums
    return _with_fields(template, [*template.fields[:i], new, *template.fields[i + 1 :]], sums)


def _renamed(n: str, old: str, new: str) -> str:
    return new if n == old else n


def rename_field(template: Template, name: str, new_name: str) -> Template:
    """Give field ``name`` the name ``new_name`` (sum rules follow)."""
    return update_field(template, name, name=new_name.strip())


def delete_field(template: Template, name: str) -> Template:
    """Remove a field (a shape that is not a digit field) and the sum rules it was part of."""
    i = _index(template, name)
    if len(template.fields) == 1:
        raise TemplateError("a template needs at least one field; this is the last one")
    sums = [r for r in template.sums if name not in (r.total, *r.parts)]
    return _with_fields(template, [*template.fields[:i], *template.fields[i + 1 :]], sums)


def move_field(template: Template, name: str, dx: int, dy: int) -> Template:
    """Shift every box of field ``name`` by ``(dx, dy)`` reference pixels (it must stay on the page)."""
    i = _index(template, name)
    f = template.fields[i]
    boxes = tuple(Box(b.x0 + dx, b.y0 + dy, b.x1 + dx, b.y1 + dy) for b in f.boxes)
    if not _inside(boxes, template.reference):
        raise TemplateError(f"field {name!r} would leave the page")
    return _with_fields(template, [*template.fields[:i], dataclasses.replace(f, boxes=boxes),
                                   *template.fields[i + 1 :]])


def _inside(boxes: Sequence[Box], ref: Reference) -> bool:
    return all(b.x0 >= 0 and b.y0 >= 0 and b.x1 <= ref.width_px and b.y1 <= ref.height_px for b in boxes)


def run_boxes(x0: int, y0: int, x1: int, y1: int, count: int, *, dpi: float) -> tuple[Box, ...]:
    """``count`` boxes side by side filling the rectangle ``[x0, x1) x [y0, y1)``.

    The rectangle is cut into equal parts; each box keeps a printed wall of
    0.7 mm (half on each side) out of its part.
    """
    if count < 1:
        raise TemplateError("a run needs at least one box")
    x0, x1, y0, y1 = min(x0, x1), max(x0, x1), min(y0, y1), max(y0, y1)
    pitch = (x1 - x0) / count
    wall = _DRAWN_WALL_MM * dpi / 25.4
    if pitch < 2 * wall + 2 or y1 - y0 < 2 * wall + 2:
        raise TemplateError(f"the rectangle is too small for {count} box(es)")
    half = wall / 2
    return tuple(
        Box(round(x0 + i * pitch + half), round(y0 + half), round(x0 + (i + 1) * pitch - half), round(y1 - half))
        for i in range(count)
    )


def add_field(template: Template, name: str, boxes: Sequence[Box], **attributes: Any) -> Template:
    """Add a field with ``boxes`` (e.g. from :func:`run_boxes`) after the others."""
    if not _inside(boxes, template.reference):
        raise TemplateError("the new field lies outside the page")
    return _with_fields(template, [*template.fields, TemplateField(name.strip(), tuple(boxes), **attributes)])


def _free_name(template: Template, base: str) -> str:
    taken = {f.name for f in template.fields}
    k = 2
    while f"{base}_{k}" in taken:
        k += 1
    return f"{base}_{k}"


def _refit(f: TemplateField, boxes: tuple[Box, ...]) -> TemplateField:
    """``f`` on other boxes; a plain ``digits`` field of the same name if its type no longer fits them."""
    try:
        return dataclasses.replace(f, boxes=boxes)
    except TemplateError:
        return TemplateField(f.name, boxes, required=f.required)


def _valid_sums(fields: Sequence[TemplateField], sums: Sequence[SumRule]) -> list[SumRule]:
    kinds = {f.name: f.type for f in fields}
    return [r for r in sums if all(kinds.get(n) in ("integer", "decimal") for n in (r.total, *r.parts))]


def split_field(template: Template, name: str, at: int, *, new_name: str | None = None) -> Template:
    """Cut field ``name`` in two before its box ``at`` (0-based, 1 <= at < number of boxes).

    The left part keeps the name (and its type and rules where they still fit
    its boxes; otherwise it becomes a plain ``digits`` field); the right part
    is a new ``digits`` field called ``new_name`` (default ``<name>_2``),
    placed just after it. Sum rules that no longer fit are dropped.
    """
    i = _index(template, name)
    f = template.fields[i]
    if not 1 <= at < len(f.boxes):
        raise TemplateError(f"field {name!r} has {len(f.boxes)} boxes: split after box 1 to {len(f.boxes) - 1}")
    left = _refit(f, f.boxes[:at])
    right = TemplateField((new_name or _free_name(template, name)).strip(), f.boxes[at:])
    fields = [*template.fields[:i], left, right, *template.fields[i + 1 :]]
    return _with_fields(template, fields, _valid_sums(fields, template.sums))


def join_fields(template: Template, first: str, second: str) -> Template:
    """Join two neighbouring runs of boxes on one line into one field.

    The joined field takes the name, type and rules of the left one (where
    they fit the joined boxes); the other one and its sum rules go. Refused
    when the runs are not side by side: on one line (vertical centres within
    half a box height) with at most three box widths between them.
    """
    ia, ib = _index(template, first), _index(template, second)
    if ia == ib:
        raise TemplateError("choose two different fields to join")
    a, b = template.fields[ia], template.fields[ib]
    if a.boxes[0].x0 > b.boxes[0].x0:
        (ia, a), (ib, b) = (ib, b), (ia, a)
    height = max(bx.height for bx in (*a.boxes, *b.boxes))
    width = max(bx.width for bx in (*a.boxes, *b.boxes))
    same_line = abs(a.boxes[-1].centre[1] - b.boxes[0].centre[1]) <= height / 2
    near = b.boxes[0].x0 - a.boxes[-1].x1 <= 3 * width and b.boxes[0].x0 >= a.boxes[-1].x1 - width / 2
    if not (same_line and near):
        raise TemplateError(f"{a.name!r} and {b.name!r} are not side by side on one line; only neighbours join")
    joined = _refit(a, (*a.boxes, *b.boxes))
    fields = [joined if k == ia else f for k, f in enumerate(template.fields) if k != ib]
    sums = [r for r in template.sums if b.name not in (r.total, *r.parts)]
    return _with_fields(template, fields, _valid_sums(fields, sums))


def parse_sum(text: str) -> SumRule:
    """A sum rule from ``"total = part + part + ..."`` (field names)."""
    left, eq, right = text.partition("=")
    parts = [p.strip() for p in right.split("+")]
    if not eq or not left.strip() or not all(parts):
        raise TemplateError(f"write a sum as 'total = part + part', not {text.strip()!r}")
    return SumRule(left.strip(), tuple(parts))


def sum_text(rule: SumRule) -> str:
    """``"total = part + part"``, as :func:`parse_sum` reads it."""
    return f"{rule.total} = {' + '.join(rule.parts)}"


def set_sums(template: Template, sums: Sequence[SumRule]) -> Template:
    """The template with these sum rules (checked against its fields)."""
    return _with_fields(template, template.fields, sums)
