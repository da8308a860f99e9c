"""The window's page image from a batch that keeps its pages at a display resolution: shown on the
full-resolution grid, so the boxes the page view draws (full-resolution page pixels) land on the boxes."""

from __future__ import annotations

import numpy as np
import pytest

from app.batch_access import ImageCache
from recognizer.batch.store import Batch
from tests.support.batches import CARD, make_page, new_batch


def test_a_page_kept_small_is_shown_at_the_size_its_boxes_refer_to(tmp_path):
    page = make_page("a.png", 1, CARD)
    rng = np.random.default_rng(0)  # grey paper texture: kept at 150 dpi, not whole
    page.image = np.clip(page.image.astype(np.int16) - rng.integers(0, 12, page.image.shape), 0, 255).astype(np.uint8)
    page.dpi = 300.0
    with new_batch(tmp_path / "b.inkcount") as batch:
        page_id = batch.add_result(batch.add_file("a.png", "sha-a", 1), page, model_version="fake-1")
        assert batch.stored_page(page_id).scale == pytest.approx(0.5)
        cache = ImageCache(batch)
        image = cache.page_qimage(page_id)
        assert (image.width(), image.height()) == (page.image.shape[1], page.image.shape[0])
        shown = cache.page(page_id)
        for box in page.fields[0].boxes:  # the ruled wall left of each box is dark where the view draws it
            wall = shown[box.y0 + 5:box.y1 - 5, box.x0 - 3:box.x0 + 1]
            inside = shown[box.y0 + 5:box.y1 - 5, box.x0 + 6:box.x0 + 10]
            assert wall.mean() < inside.mean() - 60
