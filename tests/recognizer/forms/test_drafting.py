"""Drafting a template from a form scan: scan file -> boxes -> draft, or the reason there is none."""

import cv2
import numpy as np
import pytest

from recognizer.forms.drafting import draft_from_scan, draft_template
from recognizer.forms.template import TemplateError
from recognizer.page.boxes import find_fields
from tests.support import SAMPLES

BLANK = SAMPLES / "blank_card.png"


@pytest.fixture(scope="module")
def draft():
    return draft_from_scan(BLANK)


def test_blank_card_gives_one_optional_digits_field_per_field_found(draft):
    assert draft and draft.problem is None and draft.scan_problem is None
    t = draft.template
    assert t.name == "blank_card" and t.version == 1
    assert [f.name for f in t.fields] == [f"f{i:02d}" for i in range(1, 11)]
    assert all(f.type == "digits" and not f.required for f in t.fields)
    assert draft.source == BLANK and draft.page == 1 and draft.warnings == ()


def test_the_scan_is_the_reference(draft):
    image = cv2.imread(str(BLANK), cv2.IMREAD_GRAYSCALE)
    ref = draft.template.reference
    assert (ref.width_px, ref.height_px) == (image.shape[1], image.shape[0])
    finding = find_fields(image, dpi=ref.dpi)
    assert draft.template.fields == draft_template(finding, name="blank_card").fields


def test_names_given():
    names = [f"n{i}" for i in range(10)]
    d = draft_from_scan(BLANK, name="card", field_names=names)
    assert d.template.name == "card" and [f.name for f in d.template.fields] == names
    with pytest.raises(ValueError, match="2 field names given for 10 fields found"):
        draft_from_scan(BLANK, field_names=["a", "b"])
    with pytest.raises(TemplateError, match="CSV"):
        draft_from_scan(BLANK, field_names=["to_check", *names[1:]])


def test_unreadable_file_says_why(tmp_path):
    d = draft_from_scan(tmp_path / "missing.png")
    assert not d and d.template is None
    assert d.scan_problem is not None and d.problem == d.scan_problem.reason
    assert str(tmp_path / "missing.png") in str(d.scan_problem)


def test_page_without_boxes_says_why(tmp_path):
    path = tmp_path / "white.png"
    cv2.imwrite(str(path), np.full((800, 600), 255, np.uint8))
    d = draft_from_scan(path)
    assert not d and d.template is None and d.scan_problem is None
    assert d.problem == "the page is blank (no ink found)"


def test_draft_template_refuses_a_page_without_boxes():
    finding = find_fields(np.full((800, 600), 255, np.uint8), dpi=200)
    with pytest.raises(ValueError, match="no fields to make a template of"):
        draft_template(finding, name="x")
