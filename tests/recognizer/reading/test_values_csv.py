"""CSV export of read values and digits (RFC 4180, values kept as text)."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest

from recognizer.page.boxes import Box
from recognizer.reading.values_csv import DIGIT_COLUMNS, DigitsWriter, ValuesTable, field_sort_key
from recognizer.reading.page import DigitRead, FieldRead, PageRead, field_value
from recognizer.scans.files import ScanProblem


def _digit(i: int, text: str, conf: float = 0.99) -> DigitRead:
    if not text:
        return DigitRead(i, True, "", 0.0, None, np.zeros((4, 4), np.uint8))
    probs = np.full(11, (1 - conf) / 10)
    probs[10 if text == "?" else int(text)] = conf
    return DigitRead(i, False, text, conf, probs, np.zeros((4, 4), np.uint8))


def _field(name: str, texts: list[str], conf: float = 0.99) -> FieldRead:
    digits = [_digit(i, t, conf) for i, t in enumerate(texts)]
    value, gap = field_value(texts)
    boxes = tuple(Box(10 * i, 0, 10 * i + 9, 12) for i in range(len(texts)))
    return FieldRead(name, boxes, digits, value, gap)


def _page(source: str, page: int, fields: list[FieldRead]) -> PageRead:
    return PageRead(Path(source), page, 300.0, 0.0, fields)


@pytest.mark.parametrize(
    "texts, value, gap",
    [
        (["", "", "", "4", "2"], "42", False),  # leading empty boxes skipped
        (["0", "0", "7", "1"], "0071", False),  # leading zeros are digits
        (["", "", ""], "", False),  # a blank field is empty
        (["1", "", "3", ""], "13", True),  # a gap between digits is flagged
        (["5", "?", "1"], "5?1", False),  # not-a-digit stands as ?
        (["8", "", ""], "8", False),  # trailing empties skipped
    ],
)
def test_field_value(texts, value, gap):
    assert field_value(texts) == (value, gap)


def _read_csv(path: Path) -> list[list[str]]:
    raw = path.read_bytes()
    assert b"\r\n" in raw  # RFC 4180 line ends
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


def test_values_table_shares_one_header_and_keeps_zeros(tmp_path):
    table = ValuesTable()
    table.add_page(_page("cards/a.png", 1, [_field("f01", ["0", "0", "4", "1", "2"]), _field("f02", ["", "7"])]), threshold=0.9)
    fields = [_field(f"f{i:02d}", ["1"]) for i in range(1, 12)]
    fields[2] = _field("f03", ["1", "", "2"])  # gap -> to check
    fields[4] = _field("f05", ["3"], conf=0.5)  # doubtful -> to check
    table.add_page(_page('cards/b, "odd".pdf', 3, fields), threshold=0.9)
    table.add_problem(ScanProblem(Path("cards/broken.jpg"), None, "the file is truncated"))
    same_boxes = [_field(f.name, ["2"] * len(f.boxes)) for f in fields]  # b's layout, other values
    table.add_page(_page("cards/c.png", 1, same_boxes), threshold=0.9)
    out = tmp_path / "values.csv"
    table.write(out)
    rows = _read_csv(out)
    assert rows[0] == ["file", "page"] + [f"f{i:02d}" for i in range(1, 12)] + ["to_check", "problem"]
    assert rows[1][:4] == ["cards/a.png", "1", "00412", "7"]
    assert rows[1][4:13] == [""] * 9  # fields this page does not have
    assert rows[2][0] == 'cards/b, "odd".pdf'  # quoting survives a round trip
    assert rows[2][-2] == "f03 f05"
    assert rows[3] == ["cards/broken.jpg", ""] + [""] * 11 + ["", "the file is truncated"]
    assert '"cards/b, ""odd"".pdf"' in out.read_text(encoding="utf-8")
    assert rows[1][-2] == "f01 f02"  # a.png differs from most pages from its first field on: all its fields
    assert rows[4][-2] == ""


def test_field_sort_key_orders_numbers_numerically():
    assert sorted(["f10", "f2", "f01", "total"], key=field_sort_key) == ["f01", "f2", "f10", "total"]


def test_digits_writer_one_row_per_written_digit(tmp_path):
    out = tmp_path / "digits.csv"
    with DigitsWriter(out) as w:
        w.add_page(_page("a.png", 2, [_field("f01", ["", "4", "?"], conf=0.8)]))
    rows = _read_csv(out)
    assert rows[0] == DIGIT_COLUMNS
    assert len(rows) == 3  # the empty box has no row
    assert rows[1][:6] == ["a.png", "2", "f01", "2", "4", "0.8000"]
    assert rows[2][4] == "?" and float(rows[2][-1]) == pytest.approx(0.8)
    assert sum(float(x) for x in rows[1][6:]) == pytest.approx(1.0, abs=1e-3)


def test_a_field_with_doubtful_boxes_is_to_check(tmp_path):
    sure = _field("f01", ["1", "2"])
    doubtful = _field("f02", ["3", "4"])
    doubtful.doubts = ("1 box at the end of the field added from the neighbouring boxes",)
    table = ValuesTable()
    table.add_page(_page("a.png", 1, [sure, doubtful]), threshold=0.5)
    table.write(tmp_path / "v.csv")
    assert _read_csv(tmp_path / "v.csv")[1][-2] == "f02"


def test_page_warnings_and_another_layout_flag_only_the_fields_they_concern(tmp_path):
    from recognizer.states import FAINT_LINES_WARNING

    def card(f01=0.999, f02=0.999, f03_boxes=3):
        return [_field("f01", ["1", "2"], f01), _field("f02", ["3"], f02), _field("f03", ["4"] * f03_boxes)]

    table = ValuesTable()
    for name in ("a.png", "b.png"):
        table.add_page(_page(name, 1, card()), threshold=0.9)
    faint = _page("faint.png", 1, card(f02=0.94))  # 94 %: accepted alone, near the limit on a faint page
    faint.warnings = [FAINT_LINES_WARNING]
    table.add_page(faint, threshold=0.9)
    table.add_page(_page("lost.png", 1, card(f03_boxes=2)), threshold=0.9)  # a box of f03 not found
    assert faint.field_reasons(0.9) == {"f01": (), "f02": ("faint lines",), "f03": ()}
    assert faint.fields[1].reasons(0.9) == ()  # its own reasons: none
    table.write(tmp_path / "v.csv")
    assert [row[-2] for row in _read_csv(tmp_path / "v.csv")[1:]] == ["", "", "f02", "f03"]
    assert table.reason_counts() == {"faint lines": 1, "layout differs": 1}
