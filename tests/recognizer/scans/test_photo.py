"""Phone photos flattened to a page, negatives turned positive, and the photos that cannot be read.

The photos here are made in the test: a generated card (our invented orchard
card) seen through a known homography on a darker, textured background with
vignetting. Thresholds are common practice, no source.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from PIL import Image

from recognizer.digits.model import load_model
from recognizer.reading.page import PageReader
from recognizer.scans.files import iter_pages
from recognizer.scans.photo import PhotoRefused, find_page, flatten_photo, undo_negative
from recognizer.synth import forms as fg
from tests.support import SAMPLES


def _card(seed: int = 3, dpi: int = 200) -> fg.RenderedForm:
    layout = fg.orchard_card()
    rng = np.random.default_rng(seed)
    return fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=dpi, rng=rng)


def _photo(page: np.ndarray, corners: np.ndarray, frame: tuple[int, int], *, seed: int = 0,
           vignette: float = 0.35) -> np.ndarray:
    """``page`` seen with its corners at ``corners`` (TL, TR, BR, BL) in a frame of (height, width)."""
    h, w = page.shape
    height, width = frame
    rng = np.random.default_rng(seed)
    desk = cv2.GaussianBlur(rng.normal(70, 18, frame).astype(np.float32), (0, 0), 3)
    m = cv2.getPerspectiveTransform(np.float32([[0, 0], [w, 0], [w, h], [0, h]]), np.float32(corners))
    seen = cv2.warpPerspective(page, m, (width, height)).astype(np.float32)
    inside = cv2.warpPerspective(np.full_like(page, 255), m, (width, height)) > 0
    img = np.where(inside, seen, desk)
    yy, xx = np.mgrid[0:height, 0:width]
    img *= 1 - vignette * 2 * (((xx - width / 2) / width) ** 2 + ((yy - height / 2) / height) ** 2)
    return np.clip(img + rng.normal(0, 3, frame), 0, 255).astype(np.uint8)


def _tilted(frame: tuple[int, int]) -> np.ndarray:
    height, width = frame
    return np.array([[0.12 * width, 0.10 * height], [0.86 * width, 0.14 * height],
                     [0.90 * width, 0.88 * height], [0.09 * width, 0.90 * height]])


def test_the_page_is_found_and_flattened():
    card = _card()
    frame = (int(card.image.shape[0] * 1.4), int(card.image.shape[1] * 1.35))
    corners = _tilted(frame)
    flat = flatten_photo(_photo(card.image, corners, frame))
    assert flat is not None
    assert np.abs(flat.corners - corners).max() < 0.01 * max(frame)
    h, w = flat.image.shape
    assert w > h and abs(w / h - 210 / 148) < 0.01  # landscape, the card's (ISO A) shape
    assert 120 <= flat.dpi <= 300
    assert np.percentile(flat.image, 50) == 255  # paper made white, vignetting gone
    assert flat.warnings == []


def test_a_photo_reads_the_same_values_as_the_flat_card(tmp_path):
    card = _card(seed=5)
    frame = (int(card.image.shape[0] * 1.4), int(card.image.shape[1] * 1.35))
    Image.fromarray(card.image).save(tmp_path / "flat.png", dpi=(200, 200))
    Image.fromarray(_photo(card.image, _tilted(frame), frame)).save(tmp_path / "photo.jpg", quality=90,
                                                                     dpi=(72, 72))
    reader = PageReader(load_model())
    flat, photo = (reader.read(p) for p in iter_pages([tmp_path / "flat.png", tmp_path / "photo.jpg"]))
    assert photo and flat
    assert [f.value for f in photo.fields] == [f.value for f in flat.fields]
    assert [f.value for f in flat.fields] == [card.values[n] for n in
                                              sorted(card.values, key=lambda n: fg.fnames(fg.orchard_card())[n])]


@pytest.mark.parametrize("name", ["card_01.png", "card_06.jpg"])  # card_06 is unevenly lit
def test_scans_are_not_taken_for_photos(name):
    gray = np.array(Image.open(SAMPLES / "scans" / name).convert("L"))
    assert find_page(gray) is None


def test_a_page_cut_off_at_the_edge_is_refused_in_plain_words():
    card = _card()
    frame = (int(card.image.shape[0] * 1.3), int(card.image.shape[1] * 1.3))
    corners = _tilted(frame)
    corners[1, 0] = frame[1] * 1.05  # top right corner outside the frame
    corners[2, 0] = frame[1] * 1.08
    with pytest.raises(PhotoRefused, match="cut off at the edge"):
        flatten_photo(_photo(card.image, corners, frame))


def test_an_extreme_tilt_is_refused_in_plain_words():
    card = _card()
    frame = (int(card.image.shape[0] * 1.5), int(card.image.shape[1] * 1.5))
    height, width = frame
    corners = np.array([[0.30 * width, 0.15 * height], [0.70 * width, 0.15 * height],
                        [0.95 * width, 0.85 * height], [0.05 * width, 0.85 * height]])  # 35 degrees and more
    with pytest.raises(PhotoRefused, match="at an angle"):
        flatten_photo(_photo(card.image, corners, frame))


def test_bad_photos_become_problems_naming_the_file_and_the_rest_is_read(tmp_path):
    card = _card()
    frame = (int(card.image.shape[0] * 1.3), int(card.image.shape[1] * 1.3))
    corners = _tilted(frame)
    corners[[1, 2], 0] = frame[1] * 1.06
    Image.fromarray(_photo(card.image, corners, frame)).save(tmp_path / "cut.jpg")
    desk = np.random.default_rng(1).normal(80, 20, (900, 1200)).clip(0, 255).astype(np.uint8)
    Image.fromarray(desk).save(tmp_path / "desk.jpg")  # a photo with no page in it
    Image.fromarray(card.image).save(tmp_path / "good.png", dpi=(200, 200))
    results = list(iter_pages([tmp_path / "cut.jpg", tmp_path / "desk.jpg", tmp_path / "good.png"]))
    assert not results[0] and "cut off at the edge" in str(results[0]) and "cut.jpg" in str(results[0])
    reader = PageReader(load_model())
    desk_read = reader.read(results[1])
    assert desk_read.problem and "desk.jpg" in str(desk_read.source)
    assert reader.read(results[2])


def test_a_blurred_photo_is_read_with_a_warning():
    card = _card()
    frame = (int(card.image.shape[0] * 1.4), int(card.image.shape[1] * 1.35))
    photo = cv2.GaussianBlur(_photo(card.image, _tilted(frame), frame), (0, 0), 4)
    flat = flatten_photo(photo)
    assert flat is not None and any("blurred" in w for w in flat.warnings)


def test_a_negative_page_is_turned_positive_and_read(tmp_path):
    card = _card(seed=8)
    Image.fromarray(255 - card.image).save(tmp_path / "negative.png", dpi=(200, 200))
    assert undo_negative(card.image) is None
    page = next(iter_pages([tmp_path / "negative.png"]))
    np.testing.assert_array_equal(page.image, card.image)
    read = PageReader(load_model()).read(page)
    assert read and len(read.fields) == 10
