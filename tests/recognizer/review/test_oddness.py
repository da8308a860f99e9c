"""The sort wall's order (recognizer.review.oddness): the crops least like their group's typical shape first.

Made-up strokes (tests/support/odd_digits.py): geometry checks only. The
expectation that a 7 among 1s stands out is common sense, no source.
"""

from __future__ import annotations

import numpy as np
import pytest

from recognizer.page.boxes import Box
from recognizer.page.cells import cut_cell
from recognizer.review import ReviewQueue, rank_group
from recognizer.review.oddness import MIN_GROUP, ODD_RATIO, crop_cell, oddness
from tests.support.batches import DPI
from tests.support.odd_digits import draw_digit, model_input, odd_batch


def _group(kinds: list[str], seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.stack([model_input(draw_digit(k, rng)) for k in kinds])


@pytest.mark.parametrize("where", [0, 7, 19])
def test_a_seven_among_ones_leads_and_is_the_only_odd_one(where: int) -> None:
    kinds = ["1"] * 20
    kinds[where] = "7"
    result = oddness(_group(kinds, seed=where))
    assert result.order[0] == where
    assert result.odd[where] and result.odd.sum() == 1
    assert result.scores[where] >= ODD_RATIO > np.delete(result.scores, where).max()


def test_the_typical_shape_is_the_groups_not_the_odd_ones() -> None:
    cells = _group(["1"] * 10 + ["7"])
    typical = oddness(cells).typical
    assert typical.shape == (28, 28) and typical.dtype == np.float32
    one, seven = cells[:10].mean(axis=0), cells[10]
    assert np.abs(typical - one).sum() < 0.2 * np.abs(typical - seven).sum()  # the 7 was trimmed out


def test_small_and_uniform_groups_mark_nothing_odd() -> None:
    small = oddness(_group(["1"] * (MIN_GROUP - 2) + ["7"]))
    assert not small.odd.any() and small.order[0] == MIN_GROUP - 2  # still ordered
    same = oddness(np.repeat(_group(["1"]), 6, axis=0))
    assert not same.odd.any() and np.all(same.scores == 0)
    one = oddness(_group(["7"]))
    assert list(one.scores) == [0.0] and not one.odd.any()
    assert len(oddness(np.zeros((0, 28, 28))).order) == 0


def test_the_stored_crop_gives_the_readers_own_model_input() -> None:
    rng = np.random.default_rng(3)
    page = np.full((200, 220), 255, np.uint8)
    box = Box(60, 50, 120, 122)
    page[box.y0:box.y1, box.x0:box.x1] = draw_digit("7", rng, (box.height, box.width))
    page[box.y0 - 3:box.y0, box.x0 - 3:box.x1 + 3] = 0  # the printed box round it
    page[box.y1:box.y1 + 3, box.x0 - 3:box.x1 + 3] = 0
    page[box.y0:box.y1, box.x0 - 3:box.x0] = 0
    page[box.y0:box.y1, box.x1:box.x1 + 3] = 0
    cell = cut_cell(page, box, dpi=DPI)
    again = crop_cell(cell.crop, (box.x0, box.y0, box.x1, box.y1), DPI)
    np.testing.assert_array_equal(again, cell.mnist)
    assert crop_cell(cell.crop, (0, 0, 10, 10), DPI) is None  # not a crop of that box: not guessed


def test_rank_group_in_a_batch(tmp_path) -> None:
    batch = odd_batch(tmp_path / "odd.inkcount", [["1"] * 5 + ["7"] + ["1"] * 4, ["1"] * 8])
    try:
        items = ReviewQueue(batch, order="digit").items()
        assert len(items) == 18
        ranking = rank_group(batch, [(i.digit_id, i.field_id, i.box) for i in items])
        first = ranking.crops[0]
        seven = next(i for i in items if i.file == "odd_01.png" and i.box == 5)
        assert (first.digit_id, first.field_id, first.box, first.rank) == (seven.digit_id, seven.field_id, 5, 1)
        page_id = batch.rows("SELECT page_id FROM fields WHERE id = ?", (seven.field_id,))[0][0]
        assert first.page_id == page_id and ranking.odd_count == 1
        assert sorted(c.digit_id for c in ranking.crops) == sorted(i.digit_id for i in items)
        assert ranking.typical is not None and ranking.typical.shape == (28, 28)
    finally:
        batch.close()
