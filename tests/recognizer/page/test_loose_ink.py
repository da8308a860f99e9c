"""Handwritten numbers outside the boxes found (recognizer.page.loose_ink) and the reader's use of
them: a dropout-red form scanned in black and white keeps only fragments of its boxes, and its page
must say so instead of losing fields without a word (generated forms; our own stroke handwriting)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from recognizer.digits.model import NOT_A_DIGIT, load_model
from recognizer.digits.preprocess import to_model_input
from recognizer.page.boxes import find_fields
from recognizer.page.loose_ink import loose_numbers
from recognizer.reading.page import BOXES_NOT_VISIBLE, SOME_BOXES_NOT_VISIBLE, PageReader
from recognizer.scans.files import Page
from recognizer.synth import forms as fg


@pytest.fixture(scope="module")
def reader() -> PageReader:
    return PageReader(load_model())


def _bitonal_page(layout, seed: int) -> tuple[Page, dict]:
    rng = np.random.default_rng(seed)
    values = fg.random_values(layout, rng=rng)
    form = fg.render_form(layout, values, dpi=300, rng=rng)
    scan = fg.scan_distort(form, rng=rng, skew_deg=1.0, noise=0.3, blur=0.5)
    scan = fg.bitonal_scan(scan, rng=rng, dpi=200)
    return Page(source=Path(f"page_{seed}.tif"), page=1, image=scan.image, dpi=200.0, dpi_origin="file"), values


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_red_dropout_form_in_black_and_white_says_its_boxes_are_not_visible(reader, seed):
    page, values = _bitonal_page(fg.DESIGNS["weigh_ticket"](), seed)
    read = reader.read(page)
    assert not read and read.problem in (BOXES_NOT_VISIBLE, SOME_BOXES_NOT_VISIBLE)
    assert "read it with its form template" in read.problem


@pytest.mark.parametrize("design", ["orchard_card", "tally_sheet", "crate_return_slip", "bin_register"])
def test_black_forms_in_black_and_white_have_no_numbers_outside_their_boxes(reader, design):
    page, values = _bitonal_page(fg.DESIGNS[design](), 7)
    read = reader.read(page)
    assert read and read.problem is None
    assert len(read.fields) >= len(values) - 1


def test_runs_are_found_only_outside_the_boxes_and_only_when_they_read_as_digits():
    layout = fg.orchard_card()
    rng = np.random.default_rng(5)
    form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=200, rng=rng)
    finding = find_fields(form.image, dpi=200)
    assert finding
    model = load_model()

    def digits(crops):  # as the reader asks: a digit read with at least 0.9 confidence
        probs = model.predict_proba(np.stack([to_model_input(c / 255.0) for c in crops]))
        return (probs.argmax(axis=1) != NOT_A_DIGIT) & (probs.max(axis=1) >= 0.9)

    nothing = lambda crops: np.zeros(len(crops), bool)  # noqa: E731
    # the printed words outside the boxes do not read as digits; the handwriting is inside the boxes
    assert loose_numbers(finding.image, dpi=200, fields=finding.fields, classify=digits) == []
    # the same page with its boxes not known: the written values are loose numbers now
    runs = loose_numbers(finding.image, dpi=200, fields=[], classify=digits)
    assert len(runs) >= 3 and all(len(r.marks) >= 3 for r in runs)
    assert loose_numbers(finding.image, dpi=200, fields=[], classify=nothing) == []
