"""The template file: a form template (:mod:`recognizer.forms.template`) as JSON.

File format
-----------
A template is a UTF-8 JSON file (suffix ``.json``) of this shape::

    {
      "format": "inkcount-template",
      "format_version": 1,
      "name": "orchard_card",            # shown in the CSV and the batch file
      "version": 3,                      # the template's own revision, >= 1
      "description": "free text",
      "reference": {
        "dpi": 300,                      # resolution of the box coordinates
        "width_px": 2480, "height_px": 1748,   # size of the reference page
        "features_dpi": 100,             # resolution of the image below
        "image_png": "iVBORw0KGgo..."    # base64 PNG, the reference page's ink
      },                                 # (0 = paper, 255 = ink) at features_dpi
      "fields": [
        {"name": "grower_number", "type": "digits",
         "boxes": [[x0, y0, x1, y1], ...],   # inner box rectangles, left to right,
                                             # pixel edges at reference dpi, x1/y1 exclusive
         "required": true, "lengths": [5]},
        {"name": "picking_date", "type": "date", "date_order": "DDMMYYYY",
         "boxes": [...], "min": "2026-08-10", "max": "2026-10-31"},
        {"name": "net_weight", "type": "decimal", "decimals": 1, "boxes": [...],
         "min": 0.1, "max": 2000},
        {"name": "member_code", "type": "code", "check_digit": "luhn", "boxes": [...]}
      ],
      "rules": [
        {"rule": "sum", "total": "total_crates", "parts": ["crates_1", "crates_2"]}
      ]
    }

Keys other than these are refused, so a misspelt rule does not go unnoticed.
A template file may come from anybody, so it is checked against this shape
before anything is built from it: the file's size, the JSON's nesting depth
(before it is parsed), whole numbers of at most 15 digits and no ``NaN`` or
``Infinity``, the numbers of fields, boxes and rules (:data:`LIMITS`), the
dpi and page size (:data:`recognizer.forms.template.DPI_RANGE`,
:data:`~recognizer.forms.template.MAX_PAGE_PIXELS`), and the reference
image's size from its PNG header before it is decoded.
Field names are letters, digits and underscores, start with a letter and may
not be one of the CSV's own columns
(:data:`~recognizer.forms.template.RESERVED_NAMES`). A file of a newer
``format_version`` than this program knows is refused with a message saying
so.

The field types, their attributes and the rules are described in
:mod:`recognizer.forms.values`.
"""

from __future__ import annotations

import base64
import json
import math
import os
import re
import struct
from pathlib import Path
from typing import Any

import cv2
import numpy as np

from recognizer.digits.model import json_depth
from recognizer.page.boxes import Box
from recognizer.forms.template import (
    Reference, SumRule, Template, TemplateError, TemplateField, check_reference_size,
)

__all__ = [
    "FORMAT",
    "FORMAT_VERSION",
    "LIMITS",
    "TemplateFileError",
    "load_template",
    "save_template",
    "template_from_json",
    "template_to_json",
]

FORMAT = "inkcount-template"
FORMAT_VERSION = 1
#: The most a template file may hold (the sample orchard card: 23 kB, nested 5 deep, 9 fields, 35 boxes).
LIMITS: dict[str, int] = {
    "file_bytes": 32 << 20,
    "json_depth": 12,
    "fields": 500,
    "boxes": 5000,  # over all fields
    "rules": 500,
    "parts": 500,  # fields named by one sum rule
    "text_chars": 10_000,  # a name or the description
    "image_pixels": 20_000_000,  # the reference image (an A4 page at 100 dpi: 1 million)
}
_LARGEST_WHOLE = 10**15


class TemplateFileError(Exception):
    """A template file that cannot be used; the message names the file and the reason."""

    def __init__(self, path: str | os.PathLike, reason: str) -> None:
        super().__init__(f"{path}: {reason}")
        self.path = Path(path)
        self.reason = reason


_TOP_KEYS = {"format", "format_version", "name", "version", "description", "reference", "fields", "rules"}
_REFERENCE_KEYS = {"dpi", "width_px", "height_px", "features_dpi", "image_png"}
_FIELD_KEYS = {"name", "type", "boxes", "required", "decimals", "date_order", "check_digit", "min", "max", "lengths"}
_SUM_KEYS = {"rule", "total", "parts"}


def template_to_json(template: Template) -> dict[str, Any]:
    """The JSON object of ``template`` (see the module notes)."""
    ref = template.reference
    ok, png = cv2.imencode(".png", ref.image, [cv2.IMWRITE_PNG_COMPRESSION, 9])
    assert ok
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "name": template.name,
        "version": template.version,
        "description": template.description,
        "reference": {
            "dpi": ref.dpi,
            "width_px": ref.width_px,
            "height_px": ref.height_px,
            "features_dpi": ref.features_dpi,
            "image_png": base64.b64encode(png.tobytes()).decode("ascii"),
        },
        "fields": [_field_to_json(f) for f in template.fields],
        "rules": [{"rule": "sum", "total": r.total, "parts": list(r.parts)} for r in template.sums],
    }


def _field_to_json(f: TemplateField) -> dict[str, Any]:
    out: dict[str, Any] = {"name": f.name, "type": f.type}
    if f.required:
        out["required"] = True
    if f.decimals:
        out["decimals"] = f.decimals
    optional = {"date_order": f.date_order, "check_digit": f.check_digit, "min": f.minimum, "max": f.maximum}
    out.update({k: v for k, v in optional.items() if v is not None})
    if f.lengths is not None:
        out["lengths"] = list(f.lengths)
    out["boxes"] = [[b.x0, b.y0, b.x1, b.y1] for b in f.boxes]
    return out


def template_from_json(data: Any) -> Template:
    """Build a :class:`Template` from its JSON object; :class:`TemplateError` if it is not one."""
    _check_numbers(data)
    obj = _object(data, "the file", _TOP_KEYS)
    if obj.get("format") != FORMAT:
        raise TemplateError(f"not an Inkcount template (format is {obj.get('format')!r}, expected {FORMAT!r})")
    version = obj.get("format_version")
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        raise TemplateError(f"format_version must be a whole number, not {version!r}")
    if version > FORMAT_VERSION:
        raise TemplateError(
            f"template format version {version} is newer than this program reads "
            f"(up to {FORMAT_VERSION}); update Inkcount"
        )
    fields = obj.get("fields")
    rules = obj.get("rules", [])
    if not isinstance(fields, list) or not isinstance(rules, list):
        raise TemplateError("'fields' and 'rules' must be lists")
    _check_counts(fields, rules)
    for key in ("name", "description"):
        if isinstance(obj.get(key), str) and len(obj[key]) > LIMITS["text_chars"]:
            raise TemplateError(f"'{key}' is longer than {LIMITS['text_chars']} characters")
    return Template(
        name=_typed(obj, "name", str),
        version=_typed(obj, "version", int),
        reference=_reference_from_json(obj.get("reference")),
        fields=tuple(_field_from_json(f, i) for i, f in enumerate(fields)),
        sums=tuple(_sum_from_json(r, i) for i, r in enumerate(rules)),
        description=_typed(obj, "description", str, ""),
    )


def _check_numbers(data: Any) -> None:
    """Every number in the JSON is finite, and a whole number has at most 15 digits (a walk of a
    tree whose depth was bounded before parsing)."""
    stack = [data]
    while stack:
        item = stack.pop()
        if isinstance(item, dict):
            stack.extend(item.values())
        elif isinstance(item, list):
            stack.extend(item)
        elif isinstance(item, bool):
            continue
        elif isinstance(item, int) and abs(item) >= _LARGEST_WHOLE:
            raise TemplateError(f"the number {str(item)[:20]}... is far too large for a template")
        elif isinstance(item, float) and not math.isfinite(item):
            raise TemplateError(f"{item} is not a number a template can hold")


def _check_counts(fields: list[Any], rules: list[Any]) -> None:
    """Bound the numbers of fields, boxes, rules and parts before anything is built from them."""
    if len(fields) > LIMITS["fields"]:
        raise TemplateError(f"{len(fields)} fields; a template holds at most {LIMITS['fields']}")
    boxes = sum(len(f["boxes"]) for f in fields if isinstance(f, dict) and isinstance(f.get("boxes"), list))
    if boxes > LIMITS["boxes"]:
        raise TemplateError(f"{boxes} boxes; a template holds at most {LIMITS['boxes']}")
    if len(rules) > LIMITS["rules"]:
        raise TemplateError(f"{len(rules)} rules; a template holds at most {LIMITS['rules']}")
    for i, r in enumerate(rules):
        if isinstance(r, dict) and isinstance(r.get("parts"), list) and len(r["parts"]) > LIMITS["parts"]:
            raise TemplateError(f"rule {i + 1}: more than {LIMITS['parts']} parts")
    for i, f in enumerate(fields):
        if isinstance(f, dict) and isinstance(f.get("lengths"), list) and len(f["lengths"]) > 100:
            raise TemplateError(f"field {i + 1}: more than 100 lengths")
        if isinstance(f, dict) and isinstance(f.get("name"), str) and len(f["name"]) > LIMITS["text_chars"]:
            raise TemplateError(f"field {i + 1}: the name is longer than {LIMITS['text_chars']} characters")


def _png_size(png: bytes) -> tuple[int, int] | None:
    """(width, height) from a PNG's header chunk, without decoding it; None if it is no PNG."""
    if len(png) < 24 or png[:8] != b"\x89PNG\r\n\x1a\n" or png[12:16] != b"IHDR":
        return None
    return struct.unpack(">II", png[16:24])


def _object(data: Any, what: str, keys: set[str]) -> dict[str, Any]:
    if not isinstance(data, dict):
        raise TemplateError(f"{what} must be a JSON object")
    unknown = set(data) - keys
    if unknown:
        raise TemplateError(f"{what}: unknown key(s) {', '.join(sorted(unknown))}")
    return data


_MISSING = object()


def _typed(obj: dict[str, Any], key: str, kind: type | tuple[type, ...], default: Any = _MISSING) -> Any:
    if key not in obj:
        if default is _MISSING:
            raise TemplateError(f"'{key}' is missing")
        return default
    value = obj[key]
    kinds = kind if isinstance(kind, tuple) else (kind,)
    if (isinstance(value, bool) and bool not in kinds) or not isinstance(value, kinds):
        raise TemplateError(f"'{key}' has the wrong kind of value: {value!r}")
    return value


def _reference_from_json(data: Any) -> Reference:
    obj = _object(data, "'reference'", _REFERENCE_KEYS)
    dpi = float(_typed(obj, "dpi", (int, float)))
    width, height = _typed(obj, "width_px", int), _typed(obj, "height_px", int)
    features_dpi = float(_typed(obj, "features_dpi", (int, float)))
    check_reference_size(dpi, width, height, features_dpi)
    try:
        png = base64.b64decode(_typed(obj, "image_png", str), validate=True)
    except ValueError as exc:
        raise TemplateError(f"'reference': image_png is not base64 ({exc})") from None
    size = _png_size(png)
    if size is None:
        raise TemplateError("'reference': image_png is not a PNG image")
    f = features_dpi / dpi
    if (size[0] > math.ceil(width * f) + 2 or size[1] > math.ceil(height * f) + 2
            or size[0] * size[1] > LIMITS["image_pixels"]):
        raise TemplateError(f"'reference': the image is {size[0]} x {size[1]} pixels, larger than the page "
                            f"({width} x {height} at {dpi:g} dpi) at {features_dpi:g} dpi")
    image = cv2.imdecode(np.frombuffer(png, np.uint8), cv2.IMREAD_GRAYSCALE)
    if image is None:
        raise TemplateError("'reference': image_png is not a PNG image")
    return Reference(dpi=dpi, width_px=width, height_px=height, features_dpi=features_dpi, image=image)


def _field_from_json(data: Any, index: int) -> TemplateField:
    obj = _object(data, f"field {index + 1}", _FIELD_KEYS)
    name = _typed(obj, "name", str)
    try:
        boxes = tuple(Box(*map(int, b)) for b in _typed(obj, "boxes", list) if _box_like(b))
        if len(boxes) != len(obj["boxes"]):
            raise TemplateError(f"field {name!r}: each box is a list of four whole numbers [x0, y0, x1, y1]")
        lengths = obj.get("lengths")
        if lengths is not None and not isinstance(lengths, list):
            raise TemplateError(f"field {name!r}: 'lengths' must be a list")
        return TemplateField(
            name=name,
            boxes=boxes,
            type=_typed(obj, "type", str, "digits"),
            required=_typed(obj, "required", bool, False),
            decimals=_typed(obj, "decimals", int, 0),
            date_order=_typed(obj, "date_order", str, None),
            check_digit=_typed(obj, "check_digit", str, None),
            minimum=obj.get("min"),
            maximum=obj.get("max"),
            lengths=tuple(lengths) if lengths is not None else None,
        )
    except TemplateError as exc:
        message = str(exc)
        raise TemplateError(message if message.startswith("field") else f"field {name!r}: {message}") from None


def _box_like(b: Any) -> bool:
    return isinstance(b, list) and len(b) == 4 and all(isinstance(v, int) and not isinstance(v, bool) for v in b)


def _sum_from_json(data: Any, index: int) -> SumRule:
    obj = _object(data, f"rule {index + 1}", _SUM_KEYS)
    if obj.get("rule") != "sum":
        raise TemplateError(f"rule {index + 1}: unknown rule {obj.get('rule')!r} (known: sum)")
    parts = _typed(obj, "parts", list)
    if not all(isinstance(p, str) for p in parts):
        raise TemplateError(f"rule {index + 1}: 'parts' must be field names")
    return SumRule(_typed(obj, "total", str), tuple(parts))


def save_template(template: Template, path: str | os.PathLike) -> None:
    """Write ``template`` to ``path`` as JSON (UTF-8, indented)."""
    text = json.dumps(template_to_json(template), indent=1, ensure_ascii=False)
    # one line per box: innermost lists of numbers on one line
    text = re.sub(r"\[\s+([-0-9.,\s]*?)\s+\]", lambda m: "[" + re.sub(r",\s+", ", ", m.group(1)) + "]", text)
    Path(path).write_text(text + "\n", encoding="utf-8")


def load_template(path: str | os.PathLike) -> Template:
    """Read a template file.

    Raises
    ------
    TemplateFileError
        The file is missing, not JSON, not a template, of a newer format, or
        inconsistent; the message names the file and says why.
    """
    path = Path(path)
    try:
        if path.stat().st_size > LIMITS["file_bytes"]:
            raise TemplateFileError(path, f"not a template: {path.stat().st_size / 1e6:,.0f} MB, while a "
                                    f"template file holds at most {LIMITS['file_bytes'] / 1e6:,.0f} MB")
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise TemplateFileError(path, f"cannot read the template: {reason}") from None
    if json_depth(text) > LIMITS["json_depth"]:
        raise TemplateFileError(path, f"not a template: its JSON nests deeper than {LIMITS['json_depth']} levels")
    try:
        data = json.loads(text, parse_constant=_no_constant)
    except json.JSONDecodeError as exc:
        raise TemplateFileError(path, f"not a template: damaged JSON at line {exc.lineno} ({exc.msg})") from None
    except (ValueError, RecursionError) as exc:
        raise TemplateFileError(path, f"not a template: {exc}") from None
    try:
        return template_from_json(data)
    except TemplateError as exc:
        raise TemplateFileError(path, str(exc)) from None


def _no_constant(name: str) -> None:
    raise ValueError(f"{name} is not a number a template can hold")
