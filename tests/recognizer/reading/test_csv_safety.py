"""Spreadsheet-safe CSV (recognizer.reading.values_csv.safe_cell and csv_writer, which every CSV the
program writes goes through): formula-starting cells and file names that are not valid UTF-8.

The characters that start a formula (``=``, ``+``, ``-``, ``@``, tab, carriage return) and the
leading apostrophe are the common practice for CSV injection (no source named: a rule of thumb of
the trade, from memory)."""

from __future__ import annotations

import csv
import io
import os
import shutil
import sys

import pytest

from recognizer.cli.main import main
from recognizer.reading.values_csv import csv_writer, safe_cell
from tests.support import SAMPLES


@pytest.mark.parametrize("cell", ["=HYPERLINK(\"x\")", "+1+2", "-2+3", "@SUM(A1)", "\tx", "\rx", "=1"])
def test_a_cell_a_spreadsheet_would_run_gets_an_apostrophe(cell):
    assert safe_cell(cell) == "'" + cell


@pytest.mark.parametrize("cell", ["-12", "+3.5", "0412", "18.7", "2026-09-13", "", "card 1.png", "f01 f02"])
def test_numbers_and_plain_text_are_never_altered(cell):
    assert safe_cell(cell) == cell


def test_non_text_cells_pass_through_and_rows_are_written_safely():
    fh = io.StringIO(newline="")
    w = csv_writer(fh)
    w.writerow(["=cmd", 7, 0.5, None, "-4"])
    w.writerows([["@x", "caf\udce9.png"]])
    rows = list(csv.reader(io.StringIO(fh.getvalue(), newline="")))
    assert rows == [["'=cmd", "7", "0.5", "", "-4"], ["'@x", "caf\\xe9.png"]]
    assert fh.getvalue().encode("utf-8")  # writable as UTF-8


def test_a_name_that_is_not_utf8_is_shown_with_its_bytes_and_tells_files_apart():
    assert safe_cell("caf\udce9.png") == "caf\\xe9.png"
    assert safe_cell("caf\udce8.png") != safe_cell("caf\udce9.png")


@pytest.mark.skipif(sys.platform == "win32", reason="file names there are always Unicode")
def test_read_writes_formula_and_non_utf8_file_names_safely(tmp_path, monkeypatch, capsys):
    scans = tmp_path / "scans"
    scans.mkdir()
    shutil.copy(SAMPLES / "scans" / "card_01.png", scans / "=HYPERLINK(1).png")
    shutil.copy(SAMPLES / "scans" / "card_02.jpg", os.fsdecode(os.fsencode(scans) + b"/caf\xe9.jpg"))
    monkeypatch.chdir(scans)  # read "." so that the file cells start with the names themselves
    assert main(["read", ".", "--out", str(tmp_path / "v.csv"), "--digits", str(tmp_path / "d.csv")]) == 0
    capsys.readouterr()
    for name in ("v.csv", "d.csv"):
        with open(tmp_path / name, newline="", encoding="utf-8") as fh:
            files = {row["file"] for row in csv.DictReader(fh)}
        assert files == {"'=HYPERLINK(1).png", "caf\\xe9.jpg"}, name
    with open(tmp_path / "v.csv", newline="", encoding="utf-8") as fh:
        values = [row["f01"] for row in csv.DictReader(fh)]
    assert all(v.isdigit() for v in values)  # the values themselves are left as read


@pytest.mark.skipif(sys.platform == "win32", reason="file names there are always Unicode")
def test_a_batch_and_scan_whose_names_are_not_utf8_read_and_export(tmp_path, monkeypatch, capsys):
    from tests.support.cli import run

    scans = tmp_path / "scans"
    scans.mkdir()
    shutil.copy(SAMPLES / "scans" / "card_01.png", os.fsdecode(os.fsencode(scans) + b"/caf\xe9.png"))
    batch = os.fsdecode(os.fsencode(tmp_path) + b"/b\xe9.inkcount")
    assert main(["read", str(scans), "--batch", batch]) == 0
    assert run("export", batch, "--out", str(tmp_path / "x.csv"), "--allow-unchecked") == 0
    capsys.readouterr()
    with open(tmp_path / "x.csv", newline="", encoding="utf-8") as fh:
        assert [row["file"] for row in csv.DictReader(fh)] == [str(scans / "caf\\xe9.png")]
    statement = (tmp_path / "x.residual.txt").read_text(encoding="utf-8")
    assert "b\\xe9.inkcount" in statement
