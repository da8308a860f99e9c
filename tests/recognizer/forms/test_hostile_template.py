"""Hostile template files (issue 12): each is refused with a TemplateFileError naming the
file, before anything is built or allocated from it.

The attacks are the ones seen when the loader was tried as an attacker: deep nesting, page or
box sizes of 10^9, a number of 400 digits, NaN, a tiny and a huge dpi, 200,000 boxes, and a
reference image that is a 20,000-pixel decompression bomb.
"""

from __future__ import annotations

import base64
import json
import time
import tracemalloc
from pathlib import Path

import pytest

from recognizer.forms.template_file import TemplateFileError, load_template, save_template
from tests.recognizer.forms.small_templates import crates_template
from tests.support.hostile import png_bomb


@pytest.fixture
def good(tmp_path: Path) -> dict:
    path = tmp_path / "hostile.json"
    save_template(crates_template(), path)
    load_template(path)  # sound before each attack
    return json.loads(path.read_text(encoding="utf-8"))


def _refused(tmp_path: Path, text: str, message: str) -> None:
    path = tmp_path / "hostile.json"
    path.write_text(text, encoding="utf-8")
    started = time.perf_counter()
    with pytest.raises(TemplateFileError, match=message) as info:
        load_template(path)
    assert str(path) in str(info.value) and len(str(info.value)) < 400
    assert time.perf_counter() - started < 10


def test_deep_nesting(tmp_path: Path, good: dict) -> None:
    good["description"] = "[[[[ brackets in a string are text ]]]]"
    text = json.dumps(good)
    _refused(tmp_path, text.replace('"rules": [', '"rules": ' + "[" * 50_000 + "]" * 50_000 + ", ["),
             "nests deeper than 12 levels")


@pytest.mark.parametrize("key", ["width_px", "height_px"])
def test_a_page_of_a_billion_pixels(tmp_path: Path, good: dict, key: str) -> None:
    good["reference"][key] = 10**9
    _refused(tmp_path, json.dumps(good), "is not a page size")


def test_a_box_of_a_billion_pixels(tmp_path: Path, good: dict) -> None:
    good["fields"][0]["boxes"][0] = [10, 10, 10**9, 10**9]
    _refused(tmp_path, json.dumps(good), "outside the reference page")


def test_a_number_of_400_digits(tmp_path: Path, good: dict) -> None:
    for where in ("dpi", "width_px"):
        text = json.dumps(good).replace(f'"{where}": {good["reference"][where]}', f'"{where}": 1{"0" * 400}')
        _refused(tmp_path, text, "far too large")
    text = json.dumps(good).replace('"dpi": 300.0', '"dpi": 1' + "0" * 5000)
    _refused(tmp_path, text, "not a template")
    good["fields"][0]["max"] = 10**400
    _refused(tmp_path, json.dumps(good), "far too large")


@pytest.mark.parametrize("constant", ["NaN", "Infinity", "-Infinity", "1e400"])
def test_nan_and_infinity(tmp_path: Path, good: dict, constant: str) -> None:
    text = json.dumps(good).replace('"dpi": 300.0', f'"dpi": {constant}')
    _refused(tmp_path, text, "not a number a template can hold")


@pytest.mark.parametrize(("key", "value"), [("dpi", 0.001), ("dpi", 1e6), ("features_dpi", 1e-9),
                                            ("features_dpi", 1e5)])
def test_a_tiny_or_huge_dpi(tmp_path: Path, good: dict, key: str, value: float) -> None:
    good["reference"][key] = value
    _refused(tmp_path, json.dumps(good), "dpi .* must lie between")


def test_200000_boxes(tmp_path: Path, good: dict) -> None:
    good["fields"][0]["boxes"] = [[1, 1, 2, 2]] * 200_000
    _refused(tmp_path, json.dumps(good), "200009 boxes; a template holds at most 5000")
    good["fields"][0]["boxes"] = [[1, 1, 2, 2]]
    good["fields"] = [dict(good["fields"][0], name=f"f{i}") for i in range(2000)]
    _refused(tmp_path, json.dumps(good), "2000 fields; a template holds at most 500")


def test_a_reference_image_that_is_a_decompression_bomb(tmp_path: Path, good: dict) -> None:
    good["reference"]["image_png"] = base64.b64encode(png_bomb(20_000, 20_000)).decode("ascii")
    tracemalloc.start()
    try:
        _refused(tmp_path, json.dumps(good), "the image is 20000 x 20000 pixels, larger than the page")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 50_000_000


def test_the_sample_template_still_loads() -> None:
    from tests.support import SAMPLES
    assert load_template(SAMPLES / "orchard_card.json").reference.width_px == 2480
