"""Fixtures for the window tests: Qt offscreen, a sample batch read once and copied per test."""

from __future__ import annotations

import csv
import os
import shutil
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")  # before anything imports Qt

import pytest  # noqa: E402

from recognizer.batch import Batch  # noqa: E402
from recognizer.ingest import ingest_scans  # noqa: E402
from recognizer.scans.files import list_scans  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
SCANS = ROOT / "sample_forms" / "scans"
TRUTH = ROOT / "sample_forms" / "truth_fnames.csv"


def truth_values() -> dict[tuple[str, int], dict[str, str]]:
    """Ground truth of the sample cards: ``{(file name, page): {field name: value}}``.

    Source: sample_forms/truth_fnames.csv, written by sample_forms/generate.py with the cards.
    """
    with open(TRUTH, newline="", encoding="utf-8") as fh:
        return {(r.pop("file"), int(r.pop("page"))): r for r in csv.DictReader(fh)}


@pytest.fixture(scope="session")
def sample_batch_file(tmp_path_factory) -> Path:
    """The sample cards read once into a batch file (copied by :func:`sample_batch`)."""
    path = tmp_path_factory.mktemp("template") / "cards.inkcount"
    files, problems = list_scans([SCANS])
    with Batch.create(path) as batch:
        ingest_scans(batch, files, problems=problems)
    return path


@pytest.fixture
def sample_batch(sample_batch_file, tmp_path) -> Path:
    """A fresh copy of the sample batch for one test."""
    path = tmp_path / "cards.inkcount"
    shutil.copy(sample_batch_file, path)
    return path


@pytest.fixture
def window_settings(tmp_path):
    from app.settings import WindowSettings

    return WindowSettings(tmp_path / "window.json")


@pytest.fixture
def window(qtbot, window_settings):
    from app.main_window import MainWindow

    w = MainWindow(window_settings)
    qtbot.addWidget(w)
    w.show()
    yield w
    w.close()
    assert w.thread is None, "a reading thread was left running"


@pytest.fixture
def editor(qtbot, tmp_path):
    """The template editor on a copy of the sample orchard card's template, shown."""
    from app.views.template_editor import TemplateEditor
    from recognizer.forms.template_file import load_template

    path = tmp_path / "card.json"
    path.write_bytes((ROOT / "sample_forms" / "orchard_card.json").read_bytes())
    e = TemplateEditor(load_template(path), path, loaded=True)
    qtbot.addWidget(e)
    e.show()
    return e
