"""Pages scanned upside down (recognizer.reading.orientation and the reader's use of it): the
thresholds are checked on their own, and a bundled sample card turned by 180 degrees must read
as the card does (our invented sample cards)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from recognizer.digits.model import load_model
from recognizer.reading.orientation import MIN_BOXES, TURNED, sureness, turned_is_better, worth_turning
from recognizer.reading.page import PageReader
from recognizer.scans.files import iter_pages
from tests.support import SAMPLES


def test_sureness_is_the_mean_log_confidence():
    assert sureness([]) is None
    assert sureness([1.0, 1.0]) == 0.0
    assert sureness([np.exp(-0.2), np.exp(-0.4)]) == pytest.approx(-0.3)


def test_only_a_doubtful_page_with_enough_boxes_is_tried_turned():
    assert not worth_turning([0.999] * 20)
    assert worth_turning([0.8] * MIN_BOXES)
    assert not worth_turning([0.8] * (MIN_BOXES - 1))
    assert turned_is_better([0.8] * 10, [0.99] * 10)
    assert not turned_is_better([0.8] * 10, [0.82] * 10)


@pytest.fixture(scope="module")
def reader() -> PageReader:
    return PageReader(load_model())


@pytest.mark.parametrize("name", ["card_01.png", "card_03.jpg", "card_07.png"])
def test_a_card_scanned_upside_down_reads_as_the_card(reader, name):
    page = next(iter(iter_pages([SAMPLES / "scans" / name])))
    upright = reader.read(page)
    turned_page = dataclasses.replace(page, image=np.ascontiguousarray(page.image[::-1, ::-1]),
                                      colour=None if page.colour is None else np.ascontiguousarray(page.colour[::-1, ::-1]))
    turned = reader.read(turned_page)
    assert [(f.name, f.value) for f in turned.fields] == [(f.name, f.value) for f in upright.fields]
    assert TURNED in turned.warnings and TURNED not in upright.warnings
