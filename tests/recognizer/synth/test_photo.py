"""Tests for the generator's phone photos: homography truth, framing, file, bad photos."""

import cv2
import numpy as np
import pytest
from numpy.testing import assert_allclose
from PIL import Image

from recognizer.synth import forms as fg
from recognizer.synth import photo as photo_module

FRAME = (640, 480)


def _form(layout=None, dpi=100, seed=1, blank=False, **kwargs):
    layout = layout or fg.orchard_card()
    values = {} if blank else fg.random_values(layout, rng=np.random.default_rng(seed))
    return fg.render_form(layout, values, dpi=dpi, rng=np.random.default_rng(seed), **kwargs)


def _photo(form, seed=0, **kwargs):
    kwargs.setdefault("frame_px", FRAME)
    return fg.phone_photo(form, rng=np.random.default_rng(seed), **kwargs)


@pytest.mark.parametrize("seed", range(4))
def test_truth_boxes_map_back_to_the_flat_page(seed):
    form = _form()
    photo = _photo(form, seed, tilt_deg=8.0)
    assert photo.page_boxes == form.boxes and photo.page_dpi == form.dpi
    assert list(photo.quads) == list(form.boxes) and photo.values == form.values
    for name, rects in form.boxes.items():
        for (x0, y0, x1, y1), quad, bounds in zip(rects, photo.quads[name], photo.boxes[name]):
            back = photo.to_page(quad)
            assert_allclose(back, [[x0, y0], [x1, y0], [x1, y1], [x0, y1]], atol=1.0)
            assert_allclose(bounds, (*quad.min(axis=0), *quad.max(axis=0)))
    assert_allclose(photo.to_photo(photo.to_page(photo.page_corners)), photo.page_corners)


def _flat_page_shift(photo, form):
    """Shift (dx, dy) in px between the flat page and the photo warped back by the truth (ECC)."""
    flat = cv2.GaussianBlur(form.image.astype(np.float32), (0, 0), 1.5)
    back = cv2.GaussianBlur(photo.rectified().astype(np.float32), (0, 0), 1.5)
    h, w = flat.shape
    m = int(0.08 * min(h, w))  # leave out the sheet's edge
    mask = np.zeros((h, w), np.uint8)
    mask[m:-m, m:-m] = 1
    criteria = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 100, 1e-5)
    score, warp = cv2.findTransformECC(flat, back, np.eye(2, 3, dtype=np.float32),
                                       cv2.MOTION_TRANSLATION, criteria, mask, 1)
    return float(warp[0, 2]), float(warp[1, 2]), score


@pytest.mark.parametrize("seed,tilt", [(0, 0.0), (1, 5.0), (2, 8.0)])
def test_the_photo_shows_the_page_where_the_homography_says(seed, tilt):
    """Warping the photo back through the recorded homography gives the flat page, within 1 px."""
    form = _form(dpi=75)
    photo = _photo(form, seed, tilt_deg=tilt, frame_px=(1008, 756), blur=0.7)
    dx, dy, score = _flat_page_shift(photo, form)
    assert abs(dx) < 0.5 and abs(dy) < 0.5 and score > 0.7
    photo.homography = photo.homography @ np.array([[1, 0, 0], [0, 1, 1.5], [0, 0, 1]])
    dx, dy, _ = _flat_page_shift(photo, form)  # the check sees a truth 1.5 px off
    assert dy == pytest.approx(-1.5, abs=0.3)


def test_the_page_fills_the_frame_as_asked_and_stands_out():
    form = _form()
    for seed in range(6):
        photo = _photo(form, seed)
        assert 0.7 <= photo.fill <= 0.9 and 0 <= photo.tilt_deg <= 8 and abs(photo.roll_deg) <= 4
        lo, hi = photo.page_corners.min(axis=0), photo.page_corners.max(axis=0)
        span = max((hi[0] - lo[0]) / FRAME[0], (hi[1] - lo[1]) / FRAME[1])
        assert span == pytest.approx(photo.fill, abs=1e-6)
        assert (lo >= 0).all() and (hi <= FRAME).all()
        assert photo.fields_inside() == list(form.boxes)
        sheet = np.zeros(photo.image.shape, np.uint8)
        cv2.fillConvexPoly(sheet, np.round(photo.page_corners).astype(np.int32), 1)
        inner = cv2.erode(sheet, np.ones((15, 15), np.uint8)) > 0
        outer = cv2.dilate(sheet, np.ones((15, 15), np.uint8)) == 0
        assert np.median(photo.image[inner]) > np.median(photo.image[outer]) + 50


def test_tilt_bends_the_page_more_the_more_it_is_tilted():
    form = _form(blank=True)

    def keystone(tilt):
        c = _photo(form, 3, tilt_deg=tilt, roll_deg=0.0).page_corners
        sides = np.linalg.norm(np.roll(c, -1, axis=0) - c, axis=1)  # top, right, bottom, left
        return max(sides[0] / sides[2], sides[2] / sides[0], sides[1] / sides[3],
                   sides[3] / sides[1])

    flat, phone, extreme = keystone(0.0), keystone(8.0), keystone(35.0)
    assert flat == pytest.approx(1.0, abs=1e-9)
    assert 1.02 < phone < 1.25 < extreme
    square = _photo(form, 3, tilt_deg=0.0, roll_deg=0.0).page_corners
    assert_allclose(square[1, 1], square[0, 1], atol=1e-6)  # no turn: the top edge is level


def test_the_photo_file_is_a_72_dpi_jpeg_the_reader_decodes_as_the_truth(tmp_path):
    photo = _photo(_form(fg.weigh_ticket(), ink="blue"), 5, quality=85)
    path = tmp_path / "ticket.jpg"
    photo.save(path)
    assert path.read_bytes() == photo.jpeg
    with Image.open(path) as image:
        assert image.format == "JPEG" and image.mode == "RGB"
        assert_allclose([float(v) for v in image.info["dpi"]], (72, 72), atol=0.05)
        assert np.array_equal(np.asarray(image), photo.rgb)
        assert np.array_equal(np.asarray(image.convert("L")), photo.image)  # as a reader turns it grey
    photo.save(tmp_path / "ticket.png")
    with Image.open(tmp_path / "ticket.png") as image:
        assert np.array_equal(np.asarray(image), photo.rgb)


def test_a_dropout_form_stays_red_in_the_photo():
    form = _form(fg.weigh_ticket(), blank=True)
    photo = _photo(form, 2, frame_px=(756, 1008), blur=0.5)
    flat = photo.rectified(colour=True).astype(float)
    redness = flat[..., 0] - (flat[..., 1] + flat[..., 2]) / 2
    walls = form.rules & (form.printed_rgb[..., 1] < 140)
    paper = cv2.erode((form.printed == 255).astype(np.uint8), np.ones((9, 9), np.uint8)) > 0
    paper[:40], paper[-40:], paper[:, :40], paper[:, -40:] = False, False, False, False
    assert np.median(redness[walls]) > np.median(redness[paper]) + 15


def test_photos_are_reproducible_from_the_seed():
    form = _form(ink="blue")
    first, second = _photo(form, 11), _photo(form, 11)
    assert first.jpeg == second.jpeg and first.tilt_deg == second.tilt_deg
    assert _photo(form, 12).jpeg != first.jpeg
    for background in fg.BACKGROUNDS:
        photo = _photo(form, 1, background=background)
        assert photo.rgb.shape == (FRAME[1], FRAME[0], 3)


def test_frame_follows_the_page_orientation(monkeypatch):
    monkeypatch.setattr(photo_module, "PHONE_FRAME_PX", (400, 300))  # 4032 x 3024 made quick
    portrait = fg.phone_photo(_form(fg.weigh_ticket(), dpi=30, blank=True),
                              rng=np.random.default_rng(0))
    landscape = fg.phone_photo(_form(dpi=30, blank=True), rng=np.random.default_rng(0))
    assert portrait.image.shape == (400, 300) and landscape.image.shape == (300, 400)
    assert fg.PHONE_FILE_DPI == portrait.dpi == 72


def test_bad_photos():
    empty = fg.photo_without_page(rng=np.random.default_rng(0), frame_px=FRAME)
    assert empty.homography is None and empty.boxes == {} and empty.image.shape == FRAME[::-1]
    assert empty.dpi == 72 and empty.jpeg[:2] == b"\xff\xd8"
    with pytest.raises(ValueError):
        empty.to_page(np.zeros((1, 2)))
    form = _form()
    cut = _photo(form, 4, cut_off=0.55, cut_side="right")
    assert cut.page_corners[:, 0].max() > FRAME[0]
    inside = cut.fields_inside()
    assert "grower_number" in inside and "picking_date" not in inside
    steep = _photo(form, 4, tilt_deg=35.0)
    assert steep.tilt_deg == 35.0 and steep.fields_inside() == list(form.boxes)
    with pytest.raises(ValueError):
        _photo(form, 4, tilt_deg=70.0)
    with pytest.raises(ValueError):
        _photo(form, 4, background="lawn")
