"""Dropout-colour forms: boxes found on the printed colour, digits cut from the pen's ink.

The pages are our invented orchard card, printed here in a colour and written
in blue or black ink; colours and thresholds are common practice, no source.
"""

from __future__ import annotations

import numpy as np
import pytest
from PIL import Image

from recognizer.digits.model import load_model
from recognizer.page.boxes import find_fields
from recognizer.page.dropout import split_dropout
from recognizer.reading.page import BOXES_NOT_VISIBLE, PageReader
from recognizer.scans.files import iter_pages
from recognizer.synth import forms as fg

PRINTS = {"red": (245, 150, 150), "green": (120, 200, 130), "blue": (150, 190, 250)}
PENS = {"blue pen": (25, 35, 120), "black pen": (20, 20, 20)}


def _card(seed: int):
    layout = fg.orchard_card()
    rng = np.random.default_rng(seed)
    return fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=200, rng=rng)


def _coloured(form, print_rgb, pen_rgb) -> np.ndarray:
    printed = form.printed.astype(np.float32)[..., None] / 255
    written = form.handwriting.astype(np.float32)[..., None] / 255
    rgb = 255 * printed + (1 - printed) * np.array(print_rgb, np.float32)
    rgb = rgb * written + (1 - written) * np.array(pen_rgb, np.float32)
    return rgb.clip(0, 255).astype(np.uint8)


def _truth(form) -> list[str]:
    names = fg.fnames(fg.orchard_card())
    return [form.values[n] for n in sorted(form.values, key=lambda n: names[n])]


@pytest.mark.parametrize("print_name", PRINTS)
@pytest.mark.parametrize("pen", PENS)
def test_layers_separate_and_the_boxes_are_found_on_the_print(print_name, pen):
    form = _card(seed=4)
    layers = split_dropout(_coloured(form, PRINTS[print_name], PENS[pen]))
    assert layers is not None and layers.colour == print_name
    finding = find_fields(layers.printed, dpi=200)
    assert finding and len(finding.fields) == 10
    written = form.handwriting < 128
    # the ink layer keeps the handwriting and none of the printed lines
    assert np.mean(layers.ink[written] < 200) > 0.6
    assert np.mean(layers.ink[(form.rules) & ~written] < 200) < 0.01


def test_a_grey_page_has_no_dropout_colour():
    form = _card(seed=4)
    assert split_dropout(np.repeat(form.image[..., None], 3, axis=2)) is None


def test_a_colour_scan_of_a_dropout_form_reads_like_the_black_one(tmp_path):
    form = _card(seed=6)
    Image.fromarray(_coloured(form, PRINTS["red"], PENS["blue pen"])).save(tmp_path / "red.png", dpi=(200, 200))
    page = next(iter_pages([tmp_path / "red.png"]))
    assert page.colour is not None
    read = PageReader(load_model()).read(page)
    assert read and not read.warnings  # no "faint lines": the boxes came from the print
    assert [f.value for f in read.fields] == _truth(form)


def test_a_black_and_white_scan_of_a_dropout_form_says_it_needs_its_template(tmp_path):
    form = _card(seed=6)
    grey = np.asarray(Image.fromarray(_coloured(form, PRINTS["red"], PENS["blue pen"])).convert("L"))
    Image.fromarray(grey).convert("1", dither=Image.Dither.NONE).save(tmp_path / "fax.tif", compression="group4",
                                                                      dpi=(200, 200))
    read = PageReader(load_model()).read(next(iter_pages([tmp_path / "fax.tif"])))
    assert read.problem == BOXES_NOT_VISIBLE
