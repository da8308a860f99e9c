"""Labelled samples: the boxes people corrected or confirmed, cut again as the reader cuts them."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from numpy.testing import assert_array_equal

from recognizer.batch.samples import labelled_samples
from recognizer.digits.model import NOT_A_DIGIT
from recognizer.page.cells import cut_cell
from recognizer.review import CONFIRMED, CORRECTED, set_digit, set_field
from tests.support.batches import CARD, DPI, add_page, digit_ids, field_id, make_page, new_batch


def test_labelled_samples_are_the_boxes_people_handled(tmp_path):
    with new_batch(tmp_path / "b.inkcount") as batch:
        add_page(batch, "a.png")
        f01, f02, f03 = (field_id(batch, "a.png", 1, n) for n in ("f01", "f02", "f03"))
        set_field(batch, f02, "47", reviewer="ada")           # box 1 corrected to 4, box 2 confirmed 7
        set_digit(batch, digit_ids(batch, f01)[0], "", reviewer="ben")  # the "0" is a stray mark
        set_field(batch, f03, "123", reviewer="ada")           # three digits into two boxes: no labels
        crops, cells, labels, refs = labelled_samples(batch)
        assert list(labels) == [NOT_A_DIGIT, 4, 7]
        assert [(r.field, r.box, r.state, r.reviewer) for r in refs] == [
            ("f01", 0, CORRECTED, "ben"), ("f02", 1, CORRECTED, "ada"), ("f02", 2, CONFIRMED, "ada")]
        for crop, ref in zip(crops, refs):
            assert_array_equal(crop, batch.digit_crop(ref.digit_id))
        # hand-made crops are the inner box only, not the reader's crop with its margin: no cell
        assert cells == [None, None, None]


def test_labelled_samples_cut_the_cells_again_as_the_reader_does(tmp_path):
    page = make_page("a.png", 1, CARD)
    f02 = page.fields[1]  # boxes: empty, "1", "7"
    stored = [replace(d, crop=cut_cell(page.image, box, dpi=DPI).crop) if d.box != 2 else d
              for d, box in zip(f02.digits, f02.boxes)]
    page.fields[1] = replace(f02, digits=stored)
    with new_batch(tmp_path / "b.inkcount") as batch:
        batch.add_result(batch.add_file("a.png", "sha-a", 1), page, model_version="fake-1")
        set_field(batch, field_id(batch, "a.png", 1, "f02"), "17", reviewer="ada")
        _crops, cells, labels, refs = labelled_samples(batch)
    assert list(labels) == [1, 7] and [r.box for r in refs] == [1, 2]
    expected = cut_cell(page.image, f02.boxes[1], dpi=DPI).mnist
    assert cells[0].shape == (28, 28) and cells[0].dtype == np.float32
    assert_array_equal(cells[0], expected)
    assert cells[1] is None  # its stored crop is not the reader's: the box and the page disagree
