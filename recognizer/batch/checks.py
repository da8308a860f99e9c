"""What a batch file must hold before the program trusts it: tables, settings, stored JSON, images.

A batch file may come from anybody (sent by a colleague, altered by hand, half
written by a program that was killed), so :meth:`recognizer.batch.store.Batch.open`
checks it against its declared schema version before anything else reads it:

* **Tables** (:func:`check_tables`): every table and column the file's schema
  version has (built afresh from :data:`recognizer.batch.schema.MIGRATIONS` in
  memory, so the two never disagree).
* **Settings** (:func:`settings_values`): JSON of at most
  :data:`LIMITS` ``["setting_chars"]`` characters and a few levels deep, each of
  the kind and range its :class:`~recognizer.batch.store.BatchSettings` field
  takes (a threshold is a number from 0 to 1, ...).
* **Stored JSON and values** (:func:`check_rows`): the boxes, doubts, warnings,
  layouts, rule problems and undo snapshots of every row have their shape (a
  box is four whole numbers), states are known states, confidences lie in 0..1,
  probabilities are 11 float32, every box a digit row names exists, and the
  fields a spot check drew exist.
* **Images** (:func:`check_image`): a page image, a box crop or a field's
  crop sheet is a PNG or a WebP (:mod:`recognizer.batch.images`) whose header
  declares at most :data:`LIMITS` ``["image_pixels"]`` (an A3 page at 600 dpi
  is 70 million), and a crop sheet exactly the size its boxes give it
  (:func:`check_sheet`); it is checked before it is decoded. Crop sheets
  belong to fields that exist, with a whole margin, and every digit without
  a crop of its own has its field's sheet.

Each check raises :class:`ValueError` with the reason in plain words; the
batch turns it into a :class:`~recognizer.batch.store.BatchFileError` naming
the file. :func:`holds_nothing` tells a half-created file (from an Inkcount
killed while creating it) from one that holds anybody's data.
"""

from __future__ import annotations

import functools
import json
import math
import re
import sqlite3
import struct
from typing import Any

from recognizer.batch import schema
from recognizer.digits.model import json_depth
from recognizer.states import State

__all__ = [
    "LIMITS", "SETTING_NAMES", "check_image", "check_png", "check_sheet", "check_rows", "check_tables",
    "expected_tables", "holds_nothing", "image_size",
    "load_json", "settings_values",
]

#: The most a batch file's stored values may be.
LIMITS: dict[str, int] = {
    "setting_chars": 100_000,  # JSON of one setting (learning_last is the longest: about 1 kB)
    "json_chars": 1_000_000,  # JSON of one stored value (a field's boxes, an undo snapshot, ...)
    "json_depth": 8,  # the deepest stored JSON (an undo snapshot) is 3 levels
    "template_chars": 32 << 20,  # as a template file
    "template_depth": 12,
    "image_pixels": 120_000_000,  # a page (the scans' default limit is lower; --max-pixels may raise it)
    "coordinate": 10_000_000,  # a box edge, in pixels
    "crop_margin": 1_000,  # the margin round a box in a crop sheet, in pixels (0.8 mm is 32 at 1,000 dpi)
}
_PNG = b"\x89PNG\r\n\x1a\n"
_STATES = tuple(s.value for s in State)


def load_json(text: Any, what: str, *, chars: int = LIMITS["json_chars"], depth: int = LIMITS["json_depth"]) -> Any:
    """Parse stored JSON text after bounding its length and nesting; ValueError naming ``what``."""
    if not isinstance(text, str):
        raise ValueError(f"{what} is not JSON text")
    if len(text) > chars:
        raise ValueError(f"{what} is {len(text):,} characters long (at most {chars:,})")
    if text.count("[") + text.count("{") > depth and json_depth(text) > depth:  # (the count bounds the depth)
        raise ValueError(f"{what} nests deeper than {depth} levels")
    try:
        return json.loads(text, parse_constant=_no_constant)
    except (ValueError, RecursionError) as exc:
        raise ValueError(f"{what} is not valid JSON ({exc})") from None


def _no_constant(name: str) -> None:
    raise ValueError(f"{name} is not a number")


# --------------------------------------------------------------------------- tables


def expected_tables(version: int) -> dict[str, frozenset[str]]:
    """Tables and their columns of schema ``version``, from the migrations run in memory."""
    return _run_steps(tuple(schema.MIGRATIONS[:version]))


@functools.lru_cache(maxsize=8)
def _run_steps(steps: tuple) -> dict[str, frozenset[str]]:
    conn = sqlite3.connect(":memory:", isolation_level=None)
    try:
        for step in steps:
            step(conn)
        return _tables(conn)
    finally:
        conn.close()


def _tables(conn: sqlite3.Connection) -> dict[str, frozenset[str]]:
    names = [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
    return {name: frozenset(r[1] for r in conn.execute(f"PRAGMA table_info(\"{name}\")")) for name in names
            if '"' not in name}


def check_tables(conn: sqlite3.Connection, version: int) -> None:
    """Every table and column of schema ``version`` is in the file (more are allowed)."""
    have = _tables(conn)
    for table, columns in sorted(expected_tables(version).items()):
        if table not in have:
            raise ValueError(f"the table '{table}' is missing: the file is damaged or was not written by Inkcount")
        missing = sorted(columns - have[table])
        if missing:
            raise ValueError(f"the table '{table}' lacks the column(s) {', '.join(missing)}: the file is damaged "
                             "or was not written by Inkcount")


def holds_nothing(conn: sqlite3.Connection, application_id: int) -> bool:
    """True for an SQLite file an Inkcount killed while creating a batch could have left: no
    Inkcount marker, our application id or none, only tables of ours, and not one row in them."""
    if conn.execute("PRAGMA application_id").fetchone()[0] not in (0, application_id):
        return False
    have = [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
    if "inkcount_meta" in have and conn.execute("SELECT 1 FROM inkcount_meta LIMIT 1").fetchone():
        return False  # marked: a batch, checked as one when it is opened
    if not set(have) <= set(expected_tables(len(schema.MIGRATIONS))):
        return False
    return all(conn.execute(f"SELECT 1 FROM {name} LIMIT 1").fetchone() is None for name in have)


# --------------------------------------------------------------------------- settings


def _number(low: float, high: float):
    def check(v: Any) -> bool:
        return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and low <= v <= high
    return check


def _whole(low: int):
    def check(v: Any) -> bool:
        return isinstance(v, int) and not isinstance(v, bool) and low <= v < 2**53
    return check


def _text(v: Any) -> bool:
    return isinstance(v, str) and len(v) <= 10_000


def _or_none(check):
    return lambda v: v is None or check(v)


#: Each setting's check and how its kind is said.
_SETTINGS: dict[str, tuple[Any, str]] = {
    "threshold": (_or_none(_number(0.0, 1.0)), "a number from 0 to 1"),
    "target_error": (_number(0.0, 1.0), "a number from 0 to 1"),
    "threshold_source": (lambda v: v in ("target", "manual"), "'target' or 'manual'"),
    "model_path": (_or_none(_text), "a file path"),
    "model_version": (_or_none(_text), "a model name"),
    "pdf_dpi": (_or_none(_number(1.0, 10_000.0)), "a resolution from 1 to 10,000 dpi"),
    "learning": (lambda v: isinstance(v, bool), "true or false"),
    "learning_every": (_whole(1), "a whole number from 1"),
    "learned_at": (_whole(0), "a whole number from 0"),
    "learning_rounds": (_whole(0), "a whole number from 0"),
    "learning_last": (lambda v: v is None or isinstance(v, dict), "a JSON object"),
    "flag_rule": (_whole(1), "a whole number from 1"),
}


#: The settings checked here, as :class:`recognizer.batch.store.BatchSettings` names them.
SETTING_NAMES = frozenset(_SETTINGS)


def settings_values(stored: dict[str, Any], known: set[str]) -> dict[str, Any]:
    """The settings of the ``settings`` table (key -> JSON text) parsed and checked; those of
    ``known`` names only (settings of a newer Inkcount are left alone)."""
    values = {}
    for key, text in stored.items():
        if key not in known:
            continue
        value = load_json(text, f"the setting '{key}'", chars=LIMITS["setting_chars"])
        check, kind = _SETTINGS.get(key, (lambda v: True, ""))
        if not check(value):
            shown = repr(value) if len(repr(value)) <= 40 else repr(value)[:40] + "..."
            raise ValueError(f"the setting '{key}' is {shown}; it must be {kind}")
        values[key] = value
    return values


# --------------------------------------------------------------------------- rows


def _list_of_text(value: Any) -> bool:
    return isinstance(value, list) and all(isinstance(v, str) for v in value)


def _box(value: Any) -> bool:
    return (isinstance(value, list) and len(value) == 4
            and all(isinstance(v, int) and not isinstance(v, bool) and 0 <= v <= LIMITS["coordinate"]
                    for v in value))


def _layout(value: Any) -> bool:
    return isinstance(value, list) and all(
        isinstance(p, list) and len(p) == 2 and isinstance(p[0], str) and _whole(0)(p[1]) for p in value)


def _snapshot(value: Any) -> bool:
    """An undo snapshot (:meth:`recognizer.batch.edits.FieldSnapshot.to_json`)."""
    if not isinstance(value, dict) or set(value) != {"field", "digits"}:
        return False
    field, digits = value["field"], value["digits"]
    return (isinstance(field, list) and len(field) == 3 and isinstance(field[0], str) and _whole(0)(field[1])
            and (field[2] is None or isinstance(field[2], str)) and isinstance(digits, list)
            and all(isinstance(d, list) and len(d) == 3 and _whole(0)(d[0]) and (d[1] is None or isinstance(d[1], str))
                    and d[2] in _STATES for d in digits))


#: The boxes of a field as Inkcount writes them (checked without parsing: most rows look so).
_BOXES_TEXT = re.compile(r"\[ ?(?:\[\d{1,7}, ?\d{1,7}, ?\d{1,7}, ?\d{1,7}\](?:, ?(?=\[))?)*\]")


def _check_column(conn: sqlite3.Connection, table: str, column: str, what: str, check, *,
                  nullable: bool = False, plain: re.Pattern | None = None) -> dict[int, int]:
    """Check one JSON column of every row; return each row's number of items.

    Text that ``plain`` matches in full is known good without parsing it.
    """
    sizes = {}
    for row_id, text in conn.execute(f"SELECT id, {column} FROM {table}"):
        if text is None and nullable:
            continue
        if text == "[]" or (plain is not None and isinstance(text, str) and plain.fullmatch(text)):
            sizes[row_id] = text.count("[") - 1
            continue
        value = load_json(text, f"{what} of {table[:-1]} {row_id}")
        if not check(value):
            raise ValueError(f"{what} of {table[:-1]} {row_id} is not what Inkcount stores there")
        sizes[row_id] = len(value)
    return sizes


def check_rows(conn: sqlite3.Connection) -> None:
    """The stored JSON, states, confidences and probabilities of every row have their shape."""
    boxes = _check_column(conn, "fields", "boxes", "the boxes", lambda v: isinstance(v, list) and all(map(_box, v)),
                          plain=_BOXES_TEXT)
    _check_column(conn, "fields", "doubts", "the box doubts", _list_of_text)
    _check_column(conn, "fields", "rule_problems", "the rule problems", _list_of_text)
    _check_column(conn, "pages", "warnings", "the warnings", _list_of_text)
    _check_column(conn, "pages", "layout", "the layout", _layout, nullable=True)
    _check_column(conn, "actions", "before", "the undo snapshot", _snapshot, nullable=True)
    states = ",".join(f"'{s}'" for s in _STATES)
    for table in ("fields", "digits"):
        row = conn.execute(f"SELECT id, state FROM {table} WHERE state NOT IN ({states}) LIMIT 1").fetchone()
        if row is not None:
            raise ValueError(f"{table[:-1]} {row[0]} has an unknown state {str(row[1])[:20]!r}")
    row = conn.execute(
        "SELECT id FROM digits WHERE typeof(confidence) NOT IN ('real', 'integer') OR NOT confidence BETWEEN 0 AND 1 "
        "OR typeof(box) != 'integer' OR (probs IS NOT NULL AND (typeof(probs) != 'blob' OR length(probs) != 44)) "
        "OR typeof(crop_png) != 'blob' LIMIT 1").fetchone()
    if row is not None:
        raise ValueError(f"digit {row[0]} holds a confidence, box number, probabilities or crop of the wrong kind")
    for field_id, last in conn.execute("SELECT field_id, MAX(box) FROM digits GROUP BY field_id"):
        if field_id not in boxes or not 0 <= last < boxes[field_id]:
            raise ValueError(f"a digit of field {field_id} names a box the field does not have")
    if conn.execute("SELECT 1 FROM digits WHERE box < 0 LIMIT 1").fetchone():
        raise ValueError("a digit names a box the field does not have")
    if "audits" in {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}:
        _check_audits(conn)
    if "scale" in {r[1] for r in conn.execute("PRAGMA table_info(page_images)")}:
        _check_page_images(conn)
    if "crop_sheets" in {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}:
        _check_crop_sheets(conn)


def _check_crop_sheets(conn: sqlite3.Connection) -> None:
    """Crop sheets (schema version 6) belong to fields, with a whole margin and image bytes; every digit
    without a crop of its own has its field's sheet. (Each sheet's size is checked against its boxes
    from its header when it is read, :func:`check_sheet`.)"""
    row = conn.execute(
        "SELECT s.field_id FROM crop_sheets s LEFT JOIN fields f ON f.id = s.field_id WHERE f.id IS NULL "
        "OR typeof(s.margin) != 'integer' OR s.margin NOT BETWEEN 1 AND ? OR typeof(s.image) != 'blob' "
        "OR length(s.image) = 0 LIMIT 1", (LIMITS["crop_margin"],)).fetchone()
    if row is not None:
        raise ValueError(f"the crops of field {row[0]} are not what Inkcount stores there")
    row = conn.execute(
        "SELECT d.id FROM digits d LEFT JOIN crop_sheets s ON s.field_id = d.field_id "
        "WHERE length(d.crop_png) = 0 AND s.field_id IS NULL LIMIT 1").fetchone()
    if row is not None:
        raise ValueError(f"digit {row[0]} has no crop: neither its own nor its field's")


def _check_page_images(conn: sqlite3.Connection) -> None:
    """Page image records (schema version 5): a scale in (0, 1], the full size whole numbers or none."""
    row = conn.execute(
        "SELECT page_id FROM page_images WHERE typeof(scale) NOT IN ('real', 'integer') OR NOT scale > 0 "
        "OR scale > 1 OR (width IS NOT NULL AND (typeof(width) != 'integer' OR width NOT BETWEEN 1 AND ?)) "
        "OR (height IS NOT NULL AND (typeof(height) != 'integer' OR height NOT BETWEEN 1 AND ?)) "
        "OR (width IS NULL) != (height IS NULL) OR (width IS NOT NULL AND width * height > ?) LIMIT 1",
        (LIMITS["coordinate"], LIMITS["coordinate"], LIMITS["image_pixels"])).fetchone()
    if row is not None:
        raise ValueError(f"the image of page {row[0]} has a scale or a page size of the wrong kind")


def _check_audits(conn: sqlite3.Connection) -> None:
    """Spot-check records (schema version 4) hold whole numbers and name fields and spot checks that exist."""
    if conn.execute("SELECT 1 FROM audits WHERE typeof(seed) != 'integer' OR typeof(asked) != 'integer' "
                    "OR typeof(population) != 'integer' OR typeof(after_action) != 'integer' LIMIT 1").fetchone():
        raise ValueError("a spot check record holds a seed or a count of the wrong kind")
    if conn.execute("SELECT 1 FROM audit_fields a LEFT JOIN fields f ON f.id = a.field_id "
                    "LEFT JOIN audits u ON u.id = a.audit_id "
                    "WHERE f.id IS NULL OR u.id IS NULL OR typeof(a.value) != 'text' "
                    "OR typeof(a.position) != 'integer' LIMIT 1").fetchone():
        raise ValueError("a spot check names a field or a spot check that is not in the batch")


# --------------------------------------------------------------------------- images


def image_size(data: Any) -> tuple[int, int]:
    """(width, height) a stored image declares in its header: a PNG or a WebP (lossy, lossless or
    extended); ValueError for anything else or a damaged header."""
    if isinstance(data, bytes) and len(data) >= 24 and data[:8] == _PNG and data[12:16] == b"IHDR":
        return struct.unpack(">II", data[16:24])
    if isinstance(data, bytes) and len(data) >= 30 and data[:4] == b"RIFF" and data[8:12] == b"WEBP":
        kind = data[12:16]
        if kind == b"VP8 " and data[23:26] == b"\x9d\x01\x2a":
            width, height = struct.unpack("<HH", data[26:30])
            return width & 0x3FFF, height & 0x3FFF
        if kind == b"VP8L" and data[20] == 0x2F:
            bits = int.from_bytes(data[21:25], "little")
            return (bits & 0x3FFF) + 1, ((bits >> 14) & 0x3FFF) + 1
        if kind == b"VP8X":
            return int.from_bytes(data[24:27], "little") + 1, int.from_bytes(data[27:30], "little") + 1
    raise ValueError("damaged image data in the batch file")


def check_image(data: Any) -> None:
    """A stored image is a PNG or a WebP of at most :data:`LIMITS` ``["image_pixels"]``, from its header."""
    width, height = image_size(data)
    if width * height > LIMITS["image_pixels"]:
        raise ValueError(f"an image in the batch file declares {width} x {height} pixels, more than a page "
                         f"may have ({LIMITS['image_pixels']:,})")


def check_sheet(data: Any, size: tuple[int, int]) -> None:
    """A field's crop sheet is an image (:func:`check_image`) of exactly ``size`` (width, height), the
    size its boxes and margin give it (:func:`recognizer.batch.images.sheet_size`), from its header."""
    check_image(data)
    width, height = image_size(data)
    if (width, height) != tuple(size):
        raise ValueError(f"the crops of a field are {width} x {height} pixels where its boxes make "
                         f"{size[0]} x {size[1]}")


#: The name of :func:`check_image` before batch files kept WebP images.
check_png = check_image
