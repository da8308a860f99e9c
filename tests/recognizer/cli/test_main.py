"""``inkcount read`` end to end: files and folders in, CSV out, bad files reported, batch goes on."""

from __future__ import annotations

import csv
import shutil
from pathlib import Path

import cv2
import numpy as np
import pytest

from recognizer.synth import forms as formgen
from recognizer.cli.main import main
from tests.support import REPO

ROOT = REPO
SAMPLES = ROOT / "sample_forms"
DATA = ROOT / "tests" / "data"


def _rows(path: Path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="module")
def scan_folder(tmp_path_factory) -> Path:
    """Two generated orchard cards (one PNG, one 2-page PDF) and every kind of bad file."""
    folder = tmp_path_factory.mktemp("scans")
    rng = np.random.default_rng(11)
    layout = formgen.orchard_card()
    pages = []
    for _ in range(3):
        form = formgen.render_form(layout, formgen.random_values(layout, rng=rng), dpi=200, rng=rng)
        pages.append(formgen.scan_distort(form, rng=rng, skew_deg=1.0, noise=0.01).image)
    formgen.save_scan(pages[0], folder / "a_card.png", dpi=200)
    formgen.save_scan(pages[1:], folder / "b_cards.pdf", dpi=200)
    (folder / "c_empty.png").write_bytes(b"")
    data = (folder / "a_card.png").read_bytes()
    (folder / "d_truncated.png").write_bytes(data[: len(data) // 3])
    (folder / "e_notes.jpg").write_bytes(b"grower 00412 brought 17 crates\n")
    shutil.copy(DATA / "password_protected.pdf", folder / "f_locked.pdf")
    blank = np.full((1654, 1169), 255, np.uint8)  # an A4 page at 200 dpi
    formgen.save_scan(blank, folder / "g_blank.png", dpi=200)
    letter = blank.copy()  # a page of text with no digit boxes
    for row in range(10):
        cv2.putText(letter, "Larkhollow Orchard Cooperative notes", (100, 200 + 80 * row),
                    cv2.FONT_HERSHEY_SIMPLEX, 1.2, 0, 2)
    formgen.save_scan(letter, folder / "h_letter.png", dpi=200)
    return folder


def test_read_folder_writes_values_digits_and_problems(scan_folder, tmp_path, capsys):
    out, digits = tmp_path / "values.csv", tmp_path / "digits.csv"
    code = main(["read", str(scan_folder), "--out", str(out), "--digits", str(digits), "--quiet"])
    assert code == 0
    captured = capsys.readouterr()
    rows = _rows(out)
    by_file = {}
    for row in rows:
        by_file.setdefault(Path(row["file"]).name, []).append(row)
    assert [r["page"] for r in by_file["a_card.png"]] == ["1"]
    assert [r["page"] for r in by_file["b_cards.pdf"]] == ["1", "2"]
    for row in by_file["a_card.png"] + by_file["b_cards.pdf"]:
        assert row["problem"] == ""
        assert row["f01"] != ""  # the grower number is always written
    expected = {
        "c_empty.png": "empty",
        "d_truncated.png": "truncated",
        "e_notes.jpg": "not an image",
        "f_locked.pdf": "password",
        "g_blank.png": "blank",
        "h_letter.png": "no digit boxes",
    }
    for name, reason in expected.items():
        (row,) = by_file[name]
        assert reason in row["problem"].lower(), (name, row["problem"])
        assert name in captured.err  # one clear line per problem on stderr too
    assert "6 problem(s)" in captured.out
    assert "mistakes" in captured.out  # the caution is part of every summary
    digit_rows = _rows(digits)
    assert {Path(r["file"]).name for r in digit_rows} == {"a_card.png", "b_cards.pdf"}
    assert all(0.0 <= float(r["confidence"]) <= 1.0 for r in digit_rows)


def test_two_workers_give_the_same_table(scan_folder, tmp_path):
    one, two = tmp_path / "one.csv", tmp_path / "two.csv"
    assert main(["read", str(scan_folder), "--out", str(one), "--quiet"]) == 0
    assert main(["read", str(scan_folder), "--out", str(two), "--quiet", "--workers", "2"]) == 0
    assert one.read_bytes() == two.read_bytes()


def test_nothing_readable_exits_non_zero(tmp_path):
    bad = tmp_path / "bad.png"
    bad.write_bytes(b"")
    assert main(["read", str(bad), "--out", str(tmp_path / "v.csv"), "--quiet"]) == 1
    assert "empty" in _rows(tmp_path / "v.csv")[0]["problem"]


def test_bad_model_file_is_refused(tmp_path, capsys):
    model = tmp_path / "model.npz"
    model.write_bytes(b"not a model")
    assert main(["read", str(SAMPLES / "scans"), "--out", str(tmp_path / "v.csv"), "--model", str(model)]) == 2
    assert str(model) in capsys.readouterr().err


def test_sample_forms_read_with_the_right_fields(tmp_path, capsys):
    """The bundled sample cards: every field found with the right name on every page.

    The sample handwriting is invented (our stroke model), so the digit accuracy
    on it is printed as a demo figure, not checked against a bound.
    """
    out = tmp_path / "values.csv"
    assert main(["read", str(SAMPLES / "scans"), "--out", str(out), "--quiet"]) == 0
    got = {(Path(r["file"]).name, r["page"]): r for r in _rows(out)}
    truth = _rows(SAMPLES / "truth_fnames.csv")
    fields = [k for k in truth[0] if k not in ("file", "page")]
    assert len(got) == len(truth) == 12
    right = 0
    for row in truth:
        read = got[(Path(row["file"]).name, row["page"])]
        assert read["problem"] == ""
        right += sum(read[f] == row[f] for f in fields)
    print(f"\nsample forms: {right} of {len(truth) * len(fields)} fields read exactly before review")


def test_read_into_a_batch_twice_reads_each_file_once(scan_folder, tmp_path, capsys):
    batch = tmp_path / "harvest.inkcount"
    assert main(["read", str(scan_folder), "--batch", str(batch), "--quiet"]) == 0
    first = capsys.readouterr().out
    assert "Read 3 page(s)" in first
    copy = tmp_path / "again"
    shutil.copytree(scan_folder, copy)  # the same files under other names
    assert main(["read", str(copy), "--batch", str(batch), "--quiet"]) == 0
    captured = capsys.readouterr()
    assert "Read 0 page(s)" in captured.out
    assert "already in the batch" in captured.err
    assert main(["status", str(batch)]) == 0
    assert "to check" in capsys.readouterr().out
