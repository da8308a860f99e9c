"""Reading with a form template: sample cards end to end, planted rule errors, commands, batch."""

import csv
from pathlib import Path

import numpy as np
import pytest

from recognizer.synth import forms as fg
from recognizer.batch.store import Batch
from recognizer.cli.main import main
from recognizer.synth.handwriting import Writer
from recognizer.digits.model import load_model
from recognizer.reading.stream import ReadSettings, read_scans
from recognizer.reading.page import PageReader
from recognizer.review import TO_CHECK
from recognizer.scans.files import Page
from recognizer.forms.template_file import load_template
from tests.support import REPO

SAMPLES = REPO / "sample_forms"
TEMPLATE = SAMPLES / "orchard_card.json"


@pytest.fixture(scope="module")
def model():
    return load_model(None)


@pytest.fixture(scope="module")
def reader(model):
    return PageReader(model, templates=[load_template(TEMPLATE)])


def _expected(truth: dict[str, str]) -> dict[str, str]:
    """The sample truth (sample_forms/truth.csv) as the template types it."""
    d = truth["picking_date"]
    out = {"grower_number": truth["grower_number"], "picking_date": f"{d[4:]}-{d[2:4]}-{d[:2]}"}
    for name in ("block_number", "row_number", "crates_1", "crates_2", "crates_3", "total_crates"):
        out[name] = str(int(truth[name])) if truth[name] else ""
    out["net_weight"] = f"{int(truth['net_weight_kg'])}.{truth['net_weight_tenths']}"
    return out


def test_sample_cards_end_to_end(tmp_path):
    # ground truth: sample_forms/truth.csv, written by sample_forms/generate.py
    with open(SAMPLES / "truth.csv", newline="", encoding="utf-8") as fh:
        truth = {(r["file"], r["page"]): _expected(r) for r in csv.DictReader(fh)}
    out = tmp_path / "values.csv"
    assert main(["read", str(SAMPLES / "scans"), "--template", str(TEMPLATE), "-o", str(out), "-q"]) == 0
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == len(truth) == 12
    names = list(_expected(next(iter(csv.DictReader(open(SAMPLES / "truth.csv"))))))
    assert list(rows[0])[:3 + len(names)] == ["file", "page", "template", *names]
    right = total = 0
    for row in rows:
        assert row["template"] == "orchard_card v1" and not row["problem"]
        want = truth[(Path(row["file"]).name, row["page"])]
        for name in names:
            total += 1
            if row[name] == want[name]:
                right += 1
            else:  # every wrong value must be sent to a person
                assert name in row["to_check"].split(), (row["file"], name, row[name], want[name])
    assert right / total >= 0.9


def _card(values: dict[str, str], seed: int) -> Page:
    rng = np.random.default_rng(seed)
    layout = fg.orchard_card()
    form = fg.render_form(layout, values, dpi=200, rng=rng, writer=Writer.random(rng))
    scan = fg.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-4, 4)), noise=0.2)
    return Page(Path(f"planted_{seed}.png"), 1, scan.image, 200.0, "file")


# Each planted error breaks exactly one rule of the sample template; the card is
# otherwise consistent (formgen's orchard values).
PLANTED = [
    ("picking_date", "31022026", "date", {"picking_date"}),
    ("picking_date", "15122026", "max", {"picking_date"}),
    ("block_number", "31", "max", {"block_number"}),
    ("row_number", "0", "min", {"row_number"}),
    ("grower_number", "4127", "length", {"grower_number"}),
    ("total_crates", "", "required", {"total_crates"}),
    ("net_weight_tenths", "", "decimals", {"net_weight"}),
]


@pytest.mark.parametrize("field, planted, rule, flagged", PLANTED)
def test_planted_rule_errors_are_flagged(reader, field, planted, rule, flagged):
    rng = np.random.default_rng(len(field) * 7 + len(planted))
    values = fg.random_values(fg.orchard_card(), rng=rng)
    values[field] = planted
    read = reader.read(_card(values, seed=len(field) + 3 * len(planted)))
    assert read and read.template == "orchard_card v1"
    got = {f.name: f for f in read.fields}
    for name in flagged:
        assert any(p.startswith(rule + ":") for p in got[name].rule_problems), (name, got[name].rule_problems)
        assert got[name].to_check(0.0)


def test_crates_sum_is_flagged(reader):
    values = {"grower_number": "00412", "picking_date": "13092026", "block_number": "7", "row_number": "42",
              "crates_1": "12", "crates_2": "", "crates_3": "30", "total_crates": "24",
              "net_weight_kg": "756", "net_weight_tenths": "3"}
    read = reader.read(_card(values, seed=21))
    flagged = {f.name for f in read.fields if any(p.startswith("sum:") for p in f.rule_problems)}
    assert flagged == {"crates_1", "crates_2", "crates_3", "total_crates"}


def test_other_design_is_a_page_problem(reader):
    rng = np.random.default_rng(4)
    bench = fg.bench_page()
    image = fg.render_form(bench, fg.random_values(bench, rng=rng), dpi=200, rng=rng).image
    read = reader.read(Page(Path("tally.png"), 1, image, 200.0, "file"))
    assert not read and "does not match" in read.problem and read.fields == []


def test_template_commands(tmp_path, capsys):
    out = tmp_path / "draft.json"
    names = "a,b,c,d,e,f,g,h,i,j"
    assert main(["template", "new", str(SAMPLES / "blank_card.png"), "-o", str(out), "--names", names]) == 0
    draft = load_template(out)
    assert [f.name for f in draft.fields] == names.split(",") and draft.name == "blank_card"
    assert main(["template", "check", str(TEMPLATE), str(SAMPLES / "scans" / "card_01.png")]) == 0
    assert "matches" in capsys.readouterr().out
    bad = tmp_path / "bad.json"
    bad.write_text("{", encoding="utf-8")
    assert main(["read", str(SAMPLES / "scans" / "card_01.png"), "-t", str(bad), "-o", str(tmp_path / "v.csv")]) == 2
    assert str(bad) in capsys.readouterr().err


def test_batch_records_template_and_rules(tmp_path, model):
    values = {"grower_number": "00412", "picking_date": "31022026", "block_number": "7", "row_number": "42",
              "crates_1": "12", "crates_2": "", "crates_3": "30", "total_crates": "42",
              "net_weight_kg": "756", "net_weight_tenths": "3"}
    scan = tmp_path / "card.png"
    fg.save_scan(_card(values, seed=8).image, scan, dpi=200)
    batch_path = tmp_path / "b.inkcount"
    assert main(["read", str(scan), "-t", str(TEMPLATE), "-b", str(batch_path), "-q"]) == 0
    with Batch.open(batch_path, read_only=True) as batch:
        page = batch.rows("SELECT template, registration_score FROM pages")[0]
        assert page["template"] == "orchard_card v1" and page["registration_score"] > 0.5
        date = batch.rows("SELECT rule_problems, state FROM fields WHERE name = 'picking_date'")[0]
        assert "date:" in date["rule_problems"] and date["state"] == TO_CHECK


def test_workers_load_templates(tmp_path):
    settings = ReadSettings(template_paths=(str(TEMPLATE),))
    files = [SAMPLES / "scans" / "card_01.png", SAMPLES / "scans" / "card_04.png"]
    results = list(read_scans(files, settings=settings, workers=2))
    assert [r.template for r in results] == ["orchard_card v1"] * 2
