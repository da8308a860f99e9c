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
import os
import re
from pathlib import Path
from typing import Any

import cv2
import numpy as np

from recognizer.page.boxes import Box
from recognizer.forms.template import Reference, SumRule, Template, TemplateError, TemplateField

__all__ = [
    "FORMAT",
    "FORMAT_VERSION",
    "TemplateFileError",
    "load_template",
    "save_template",
    "template_from_json",
    "template_to_json",
]

FORMAT = "inkcount-template"
FORMAT_VERSION = 1


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
    return Template(
        name=_typed(obj, "name", str),
        version=_typed(obj, "version", int),
        reference=_reference_from_json(obj.get("reference")),
        fields=tuple(_field_from_json(f, i) for i, f in enumerate(fields)),
        sums=tuple(_sum_from_json(r, i) for i, r in enumerate(rules)),
        description=_typed(obj, "description", str, ""),
    )


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
    try:
        png = base64.b64decode(_typed(obj, "image_png", str), validate=True)
    except ValueError as exc:
        raise TemplateError(f"'reference': image_png is not base64 ({exc})") from None
    image = cv2.imdecode(np.frombuffer(png, np.uint8), cv2.IMREAD_GRAYSCALE)
    if image is None:
        raise TemplateError("'reference': image_png is not a PNG image")
    return Reference(
        dpi=float(_typed(obj, "dpi", (int, float))),
        width_px=_typed(obj, "width_px", int),
        height_px=_typed(obj, "height_px", int),
        features_dpi=float(_typed(obj, "features_dpi", (int, float))),
        image=image,
    )


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
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise TemplateFileError(path, f"cannot read the template: {reason}") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise TemplateFileError(path, f"not a template: damaged JSON at line {exc.lineno} ({exc.msg})") from None
    try:
        return template_from_json(data)
    except TemplateError as exc:
        raise TemplateFileError(path, str(exc)) from None
