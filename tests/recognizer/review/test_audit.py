"""Spot checks: drawing, answering, the statement beside the export, the command, and end to end."""

from __future__ import annotations

import csv
import re
import shutil
import sqlite3
from collections import Counter
from pathlib import Path

import pytest

from recognizer.batch import Batch, BatchFileError
from recognizer.review import (
    CORRECTED,
    audit_status,
    confirm,
    draw_audit,
    export_checked,
    set_field,
    undo,
)
from recognizer.review.audit import systematic_sample
from recognizer.review.errors import ReviewError
from recognizer.review.residual import clopper_pearson_upper
from tests.support.batches import CARD, add_page, field_id, new_batch
from tests.support.cli import run

PAGES = 12  # CARD has f01 and f03 read, f02 to check: 24 fields accepted without a person


@pytest.fixture
def batch(tmp_path):
    b = new_batch(tmp_path / "b.inkcount")
    for i in range(PAGES):
        add_page(b, f"card{i:02d}.png")
    yield b
    b.close()


def _pages(status) -> Counter:
    return Counter((f.file, f.page) for f in status.fields)


def test_draw_is_reproducible_and_spread_over_pages(batch, tmp_path):
    first = draw_audit(batch, 8, seed=42, reviewer="ana")
    again = draw_audit(batch, 8, seed=42, reviewer="ana")
    assert [f.field_id for f in first.fields] == [f.field_id for f in again.fields]
    assert first.record.seed == 42 and first.record.population == 24 and first.record.reviewer == "ana"
    # spread evenly: after each page, the fields drawn so far are within one of their share (8 / 24 per field)
    counts = _pages(first)
    drawn_so_far = 0
    for k in range(PAGES):
        drawn_so_far += counts.get((f"card{k:02d}.png", 1), 0)
        assert abs(drawn_so_far - 8 * 2 * (k + 1) / 24) < 1 + 1e-9
    # not always the same field of every form when the step matches the fields per page
    names = {f.name for seed in range(6) for f in draw_audit(batch, 6, seed=seed).fields}
    assert names == {"f01", "f03"}
    assert {f.field_id for f in draw_audit(batch, 100, seed=1).fields} == {
        field_id(batch, f"card{i:02d}.png", 1, n) for i in range(PAGES) for n in ("f01", "f03")}


def test_each_field_has_the_same_chance():
    strata = [k // 3 for k in range(30)] + [10 + k for k in range(10)]  # pages of 3 fields, then of 1
    hits = Counter(i for seed in range(3000) for i in systematic_sample(strata, 8, seed))
    share = [hits[i] / 3000 for i in range(40)]
    assert min(share) > 0.2 - 0.035 and max(share) < 0.2 + 0.035  # 8 / 40 each


def test_never_draws_a_field_a_person_handled(batch):
    handled = {field_id(batch, "card00.png", 1, "f01"), field_id(batch, "card01.png", 1, "f03")}
    confirm(batch, field=field_id(batch, "card00.png", 1, "f01"), reviewer="ana")
    set_field(batch, field_id(batch, "card01.png", 1, "f03"), "99", reviewer="ana")
    undo(batch, reviewer="ana")  # back to "read", but a person handled it
    status = draw_audit(batch, 100, seed=3)
    drawn = {f.field_id for f in status.fields}
    assert status.record.population == 22 and len(drawn) == 22
    assert not drawn & handled
    assert all(f.name != "f02" for f in status.fields)  # to check: not accepted


def test_answers_count_errors_and_fix_the_export(batch, tmp_path):
    status = draw_audit(batch, 6, seed=7, reviewer="ana")
    assert status.bound() is None and status.audited == 0
    a, b, c, *_ = status.fields
    confirm(batch, field=a.field_id, reviewer="bo")
    wrong = "9" * len(b.drawn)
    set_field(batch, b.field_id, wrong, reviewer="bo")  # a correction in the audit: an error found
    set_field(batch, c.field_id, c.drawn, reviewer="bo")  # typing the same value is a confirmation
    now = audit_status(batch)
    assert (now.audited, now.errors, now.drawn) == (3, 1, 6)
    assert now.bound() == pytest.approx(clopper_pearson_upper(1, 3))
    assert set(now.open_ids) == {f.field_id for f in status.fields[3:]}

    out = tmp_path / "checked.csv"
    result = export_checked(batch, out, allow_unchecked=True)
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    row = next(r for r in rows if r["file"] == b.file)
    assert row[b.name] == wrong  # the audit's correction is the exported value
    text = (tmp_path / "checked.residual.txt").read_text(encoding="utf-8")
    assert result.residual == tmp_path / "checked.residual.txt"
    assert "Fields: 36." in text and "Accepted without a person (read automatically, never checked): 21" in text
    assert "6 fields drawn at random among the 24" in text and "seed 7" in text and "1 wrong value found" in text
    assert "3 drawn fields not checked yet" in text and "at most" in text

    undo(batch, reviewer="bo")  # the confirmation typed is taken back: no longer audited
    assert (audit_status(batch).audited, audit_status(batch).errors) == (2, 1)
    assert batch.rows("SELECT state FROM fields WHERE id = ?", (b.field_id,))[0][0] == CORRECTED


def test_without_a_spot_check_the_statement_says_not_measured(batch, tmp_path):
    result = export_checked(batch, tmp_path / "c.csv", allow_unchecked=True)
    text = (tmp_path / "c.residual.txt").read_text(encoding="utf-8")
    assert "residual error was not measured" in text
    assert "not measured" in result.residual_line
    refused = export_checked(batch, tmp_path / "d.csv")  # fields still to check: nothing written
    assert not refused and not (tmp_path / "d.residual.txt").exists()


def test_refusals(batch, tmp_path):
    with pytest.raises(ReviewError):
        draw_audit(batch, 0)
    empty = new_batch(tmp_path / "empty.inkcount")
    with pytest.raises(ReviewError, match="nothing to spot check"):
        draw_audit(empty, 5)
    empty.close()


def test_a_version_3_file_is_upgraded(batch, tmp_path):
    draw_audit(batch, 2, seed=1)
    batch.close()
    path = tmp_path / "old.inkcount"
    shutil.copy(tmp_path / "b.inkcount", path)
    conn = sqlite3.connect(path)
    conn.executescript("DROP TABLE audit_fields; DROP TABLE audits; PRAGMA user_version = 3;")
    conn.close()
    with pytest.raises(BatchFileError, match="needs upgrading"):
        Batch.open(path, read_only=True)
    with Batch.open(path) as old:
        assert audit_status(old) is None
        assert draw_audit(old, 3, seed=1).drawn == 3


def test_a_spot_check_naming_a_missing_field_is_refused(batch, tmp_path):
    draw_audit(batch, 2, seed=1)
    batch.close()
    conn = sqlite3.connect(tmp_path / "b.inkcount")
    conn.execute("UPDATE audit_fields SET field_id = 99999 WHERE position = 0")
    conn.commit()
    conn.close()
    with pytest.raises(BatchFileError, match="spot check"):
        Batch.open(tmp_path / "b.inkcount", read_only=True)


def test_the_audit_command(batch, tmp_path, capsys):
    path = str(tmp_path / "b.inkcount")
    batch.close()
    assert run("audit", path, "--report") == 0
    assert "No spot check was drawn" in capsys.readouterr().out
    assert run("audit", path, "--draw", "4", "--seed", "5", "--reviewer", "cy") == 0
    assert "Drew 4 of the 24" in capsys.readouterr().out
    assert run("audit", path, "--list") == 0
    listed = capsys.readouterr().out
    refs = re.findall(r"(card\d\d\.png:1:f0[13])", listed)
    assert listed.startswith("4 of 4 drawn field(s) to answer") and len(refs) == 4
    assert run("audit", path, "--confirm", refs[0], "--set", f"{refs[1]}=5555") == 0
    capsys.readouterr()
    assert run("review", path, "--confirm", refs[2]) == 0  # answered with inkcount review: counts the same
    capsys.readouterr()
    assert run("audit", path, "--report") == 0
    report = capsys.readouterr().out
    assert "Fields audited: 3 of 4 drawn." in report and "Errors found: 1." in report
    assert f"{100 * clopper_pearson_upper(1, 3):.1f}" in report
    assert run("audit", path, "--plan", "0.1%") == 0
    plan = capsys.readouterr().out
    assert "2,995" in plan and "4,742" in plan and "fewer than the 2,995" in plan
    assert run("audit", path, "--plan", "0.001") == 0
    assert "2,995" in capsys.readouterr().out
    assert run("audit", path, "--plan", "20%") == 0
    assert "can show it" in capsys.readouterr().out  # 14 fields suffice with no error, 21 are left
    assert run("audit", path, "--plan", "lots") == 2
    assert run("audit", path, "--confirm", "nope.png:1:f01") == 2
    assert run("export", path, "-o", str(tmp_path / "x.csv"), "--allow-unchecked") == 0
    assert "1 wrong value in 3 fields" in capsys.readouterr().out


def test_end_to_end_on_generated_forms(tmp_path, capsys):
    """20 generated cards read by the shipped model; the flagged fields reviewed to the truth by script,
    then a spot check of 200 fields (all those accepted if fewer), answered from the truth, and the export:
    the stated bound lies above the true share of wrong values among the accepted fields."""
    from recognizer.ingest import ingest_scans
    from recognizer.synth.batches import writer_cards

    files, truth = writer_cards(tmp_path / "cards", 20, seed=7)
    path = tmp_path / "office.inkcount"
    with Batch.create(path) as b:
        ingest_scans(b, files)
        rows = b.rows("SELECT f.id, f.name, f.state, f.value, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
                      "JOIN files fl ON fl.id = p.file_id")
        for r in rows:
            if r["state"] == "to check":
                set_field(b, r["id"], truth[(r["path"], r["name"])], reviewer="clerk")
        accepted = [r for r in rows if r["state"] == "read"]
        wrong = sum(r["value"] != truth[(r["path"], r["name"])] for r in accepted)
    residual = wrong / len(accepted)  # the true share of wrong values among the accepted fields
    assert run("audit", str(path), "--draw", "200", "--seed", "11", "--reviewer", "auditor") == 0
    with Batch.open(path) as b:
        status = audit_status(b)
        assert status.drawn == min(200, len(accepted))
        for f in status.fields:
            want = truth[(f.file, f.name)]
            if want == f.value:
                confirm(b, field=f.field_id, reviewer="auditor")
            else:
                set_field(b, f.field_id, want, reviewer="auditor")
    capsys.readouterr()
    assert run("audit", str(path), "--report") == 0
    report = capsys.readouterr().out
    print(report)
    bound = float(re.search(r"accepted without a person: ([\d.]+) %", report).group(1)) / 100
    assert bound >= residual
    assert run("export", str(path), "-o", str(tmp_path / "checked.csv")) == 0
    statement = (tmp_path / "checked.residual.txt").read_text(encoding="utf-8")
    print(statement)
    assert f"{wrong} wrong value" in statement and "at most" in statement
    with open(tmp_path / "checked.csv", newline="", encoding="utf-8") as fh:
        exported = list(csv.DictReader(fh))
    left = sum(row[name] != value for row in exported for (file, name), value in truth.items()
               if file == row["file"])
    assert left == 0 if status.drawn == len(accepted) else left <= wrong
