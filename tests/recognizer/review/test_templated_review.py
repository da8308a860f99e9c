"""Review of pages read with a template: rules checked again, typed checked export, schema v3."""

from __future__ import annotations

import csv
import json
import shutil
import sqlite3
from pathlib import Path

import pytest

from recognizer.batch import schema as batch_schema
from recognizer.batch import store as batch_module
from recognizer.batch.store import Batch
from recognizer.ingest import ingest_scans
from recognizer.review.checked_export import export_checked
from recognizer.cli.main import main
from recognizer.reading.stream import ReadSettings
from recognizer.review import (
    CONFIRMED,
    CORRECTED,
    TO_CHECK,
    confirm,
    find_field,
    ReviewQueue,
    set_field,
    undo,
)
from recognizer.scans.files import list_scans
from recognizer.forms.template_file import load_template
from tests.support import REPO

SAMPLES = REPO / "sample_forms"
TEMPLATE = SAMPLES / "orchard_card.json"
SUM = ("total_crates", "crates_1", "crates_2", "crates_3")


def _truth() -> dict[tuple[str, int], dict[str, str]]:
    """Digits written on each sample card, by template field (source: sample_forms/truth.csv,
    written by sample_forms/generate.py with the cards)."""
    with open(SAMPLES / "truth.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    out = {}
    for r in rows:
        key = (r.pop("file"), int(r.pop("page")))
        r["net_weight"] = r.pop("net_weight_kg") + r.pop("net_weight_tenths")
        out[key] = r
    return out


def _typed(digits: dict[str, str]) -> dict[str, str]:
    """The truth as the template types it: weight kg.tenths, ISO dates, whole numbers."""
    d = digits["picking_date"]
    out = {"grower_number": digits["grower_number"], "picking_date": f"{d[4:]}-{d[2:4]}-{d[:2]}",
           "net_weight": f"{int(digits['net_weight'][:-1])}.{digits['net_weight'][-1]}"}
    for name in ("block_number", "row_number", *SUM):
        out[name] = str(int(digits[name])) if digits[name] else ""
    return out


@pytest.fixture(scope="module")
def read_batch(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("templated") / "cards.inkcount"
    files, problems = list_scans([SAMPLES / "scans"])
    with Batch.create(path) as batch:
        ingest_scans(batch, files, problems=problems, settings=ReadSettings(template_paths=(str(TEMPLATE),)))
    return path


@pytest.fixture
def batch(read_batch, tmp_path):
    path = tmp_path / "cards.inkcount"
    shutil.copy(read_batch, path)
    with Batch.open(path) as b:
        yield b


def _field(batch: Batch, name: str, file: str = "card_01.png") -> dict:
    fid = find_field(batch, file, 1, name)
    row = batch.rows("SELECT id, value, typed, state, rule_problems, resolution FROM fields WHERE id = ?", (fid,))[0]
    return {**dict(row), "rule_problems": json.loads(row["rule_problems"])}


def test_batch_keeps_the_template(batch):
    kept = batch.templates()
    assert list(kept) == ["orchard_card v1"]
    assert kept["orchard_card v1"].fields == load_template(TEMPLATE).fields


def test_a_changed_template_under_the_same_version_is_refused(batch):
    from recognizer.forms.editing import rename_field

    changed = rename_field(load_template(TEMPLATE), "row_number", "tree_row")
    with pytest.raises(batch_module.BatchFileError, match="new version"):
        batch.add_templates([changed])


def test_a_wrong_total_flags_the_sum_and_the_right_one_clears_it(batch):
    truth = _truth()[("card_01.png", 1)]
    total = _field(batch, "total_crates")
    wrong = str(int(truth["total_crates"]) + 1)
    set_field(batch, total["id"], wrong)
    after = {n: _field(batch, n) for n in SUM}
    for name in SUM:
        assert any(p.startswith("sum:") for p in after[name]["rule_problems"]), name
    assert after["crates_1"]["state"] == TO_CHECK
    assert after["total_crates"]["state"] == TO_CHECK  # the person's own correction broke the rule
    assert after["total_crates"]["typed"] == wrong
    for name in SUM[1:]:
        set_field(batch, _field(batch, name)["id"], truth[name])
    set_field(batch, total["id"], truth["total_crates"])
    for name in SUM:
        f = _field(batch, name)
        assert not any(p.startswith("sum:") for p in f["rule_problems"]), name
        assert f["state"] in (CORRECTED, CONFIRMED)


def test_a_broken_rule_confirmed_stays_confirmed_and_undo_puts_the_rule_back(batch):
    row = _field(batch, "row_number")
    set_field(batch, row["id"], "999")  # above the maximum of 120
    f = _field(batch, "row_number")
    assert f["state"] == TO_CHECK and f["typed"] == "999"
    assert any(p.startswith("max:") for p in f["rule_problems"])
    confirm(batch, field=row["id"])
    assert _field(batch, "row_number")["state"] in (CORRECTED, CONFIRMED)
    undo(batch)
    undo(batch)
    assert _field(batch, "row_number")["typed"] == row["typed"]
    assert _field(batch, "row_number")["rule_problems"] == row["rule_problems"]


def test_a_value_set_as_a_whole_is_typed_right_aligned(batch):
    weight = _field(batch, "net_weight")
    set_field(batch, weight["id"], "187")  # 3 digits in 5 boxes
    f = _field(batch, "net_weight")
    assert f["typed"] == "18.7" and f["rule_problems"] == []
    set_field(batch, weight["id"], "123456")
    f = _field(batch, "net_weight")
    assert f["state"] == TO_CHECK and f["rule_problems"] == ["length: 6 digits given, the field has 5 boxes"]


def test_correct_every_flag_to_the_truth_then_export_typed(batch, tmp_path):
    truth = _truth()
    for _ in range(4):  # corrections can flag other fields of a sum again
        items = ReviewQueue(batch).items()
        if not items:
            break
        for item in items:
            set_field(batch, item.field_id, truth[(Path(item.file).name, item.page)][item.field])
    assert not ReviewQueue(batch).items()
    out = tmp_path / "checked.csv"
    assert export_checked(batch, out)
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    names = [f.name for f in load_template(TEMPLATE).fields]
    assert list(rows[0])[:3 + len(names)] == ["file", "page", "template", *names]
    assert len(rows) == len(truth) == 12
    for row in rows:
        assert row["template"] == "orchard_card v1"
        want = _typed(truth[(Path(row["file"]).name, int(row["page"]))])
        assert {n: row[n] for n in names} == want, row["file"]


def test_export_command_writes_typed_values_with_audit(batch, tmp_path):
    path = batch.path
    batch.close()
    out = tmp_path / "audit.csv"
    assert main(["export", str(path), "--out", str(out), "--allow-unchecked", "--audit"]) == 0
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert {"net_weight", "net_weight_state", "net_weight_lowest_confidence", "unchecked_fields"} <= set(rows[0])
    assert all("." in r["net_weight"] for r in rows if r["net_weight"])
    assert all(r["picking_date"][4] == "-" for r in rows if r["picking_date"])


def test_version_2_file_is_upgraded_to_3(read_batch, tmp_path):
    path = tmp_path / "old.inkcount"
    shutil.copy(read_batch, path)
    conn = sqlite3.connect(path)  # make it a version 2 file, as an older Inkcount wrote it
    conn.executescript("DROP TABLE templates; ALTER TABLE fields DROP COLUMN typed; "
                       "DROP TABLE audit_fields; DROP TABLE audits; PRAGMA user_version = 2;")
    conn.close()
    with Batch.open(path) as b:
        assert b.rows("PRAGMA user_version")[0][0] == batch_schema.SCHEMA_VERSION >= 3
        assert b.templates() == {}
        assert {r[0] for r in b.rows("SELECT typed FROM fields")} == {None}
        # without the template kept, the export gives the digits and review still works
        out = tmp_path / "old.csv"
        assert export_checked(b, out, allow_unchecked=True)
        item = ReviewQueue(b).next()
        set_field(b, item.field_id, item.value.replace("?", "") or "1")
