"""Damaged and hostile scans: each one a named problem line, limits checked before decoding, the batch goes on.

The damaged files come from :mod:`recognizer.synth.damage`, the generator
``bench/bench_fuzz.py`` runs on 1,000 files; here a seeded sample of about
100 is read in this process, and one small mixed group goes through
``inkcount read`` in a child process. Each failure seen in the issue
(damaged multi-page TIFF at count time, PNG text bomb, PDF claiming a million
pages, 16-bit page just under the pixel limit, truncated files, encrypted
PDF) has its own test.
"""

from __future__ import annotations

import csv
import re
import struct
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from PIL import Image, ImageFile

from recognizer.reading.stream import _few_problems_per_file, _read_page
from recognizer.scans.files import Page, ScanProblem, count_pages, iter_pages, load_page
from recognizer.scans.limits import DEFAULT_MAX_PIXELS, MAX_PAGE_PROBLEMS_PER_FILE, MAX_PAGES_PER_FILE
from recognizer.synth import damage
from tests.support import DATA, REPO


@pytest.fixture(scope="module")
def good() -> dict[str, bytes]:
    return damage.good_scans(seed=3)


@pytest.fixture(scope="module")
def sample(good) -> list[damage.DamagedScan]:
    return list(damage.damaged_scans(good, 100, seed=12, crafted_share=0.1))


def _write(folder: Path, name: str, data: bytes) -> Path:
    path = folder / name
    path.write_bytes(data)
    return path


def _read(path: Path) -> list[Page | ScanProblem]:
    return list(iter_pages([path]))


def _problems(results) -> list[ScanProblem]:
    return [r for r in results if isinstance(r, ScanProblem)]


# ---------------------------------------------------------------- the seeded sample


def test_every_damaged_file_of_the_sample_is_read_or_named_and_the_stream_goes_on(tmp_path, sample):
    assert len(sample) == 100 and any(item.must_name for item in sample)
    paths = [_write(tmp_path, item.name, item.data) for item in sample]
    sentinel = _write(tmp_path, "zz_last.png", np.full((300, 200), 255, np.uint8).tobytes())  # not an image
    results = list(iter_pages([*paths, sentinel]))  # one stream: nothing raised, nothing stopped
    by_file: dict[Path, list] = {}
    for result in results:
        by_file.setdefault(Path(result.source), []).append(result)
    assert set(by_file) == {*paths, sentinel}  # every file has at least one line
    for item, path in zip(sample, paths):
        got = by_file[path]
        problems = _problems(got)
        if item.must_name:
            assert problems, f"{item.name} ({item.damage}) read without a problem"
        for problem in problems:
            assert problem.reason and "\n" not in problem.reason
            assert problem.line().startswith(f"{path}: ")
        assert len(problems) <= MAX_PAGE_PROBLEMS_PER_FILE + 1, item.name


def test_the_page_count_probe_never_raises_on_the_sample(tmp_path, sample):
    for item in sample[:60]:
        n = count_pages(_write(tmp_path, item.name, item.data))
        assert isinstance(n, ScanProblem) or 1 <= n <= MAX_PAGES_PER_FILE


def test_good_scans_of_every_format_and_mode_are_read(tmp_path, good):
    for name, data in good.items():
        pages = _read(_write(tmp_path, name, data))
        assert pages and all(isinstance(p, Page) for p in pages), (name, pages)
    assert len(_read(tmp_path / "cards.tif")) == 2 and len(_read(tmp_path / "cards.pdf")) == 2


def test_inkcount_read_in_a_child_process_names_the_damaged_and_reads_the_good(tmp_path, good, sample):
    chosen = {}
    for item in sample:  # one damaged file of each kind that must be named, a few that may read
        if item.damage not in chosen and (item.must_name or len(chosen) < 3):
            chosen[item.damage] = item
    damaged = [_write(tmp_path, item.name, item.data) for item in list(chosen.values())[:10]]
    goods = [_write(tmp_path, f"good_{name}", good[name]) for name in ("card.png", "cards.pdf")]
    out = tmp_path / "values.csv"
    files = [damaged[0], goods[0], *damaged[1:], goods[1]]
    done = subprocess.run([sys.executable, "-m", "recognizer.cli", "read", *map(str, files), "--out", str(out),
                           "--quiet"], capture_output=True, text=True, timeout=300, cwd=REPO)
    assert "Traceback" not in done.stderr, done.stderr
    assert done.returncode == 0, done.stderr
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    for path in goods:
        mine = [r for r in rows if r["file"] == str(path)]
        assert mine and all(not r["problem"] and r["f01"] for r in mine), mine
    assert len([r for r in rows if r["file"] == str(goods[1])]) == 2
    for path, item in zip(damaged, chosen.values()):
        mine = [r for r in rows if r["file"] == str(path)]
        assert mine, item.name
        if item.must_name:
            assert any(r["problem"] for r in mine), item.name
            assert f"problem: {path}: " in done.stdout  # the same line on screen
    assert re.search(r"\d+ problem\(s\)", done.stdout)


# ---------------------------------------------------------------- each case of the issue


def _three_page_tiff(tmp_path: Path) -> Path:
    pages = [Image.fromarray(np.full((120, 90), v, np.uint8)) for v in (0, 60, 120)]
    path = tmp_path / "stack.tif"
    pages[0].save(path, save_all=True, append_images=pages[1:], dpi=(300, 300))
    return path


def _ifds(data: bytes) -> list[int]:
    offsets = [struct.unpack("<I", data[4:8])[0]]
    while True:
        n = struct.unpack("<H", data[offsets[-1]:offsets[-1] + 2])[0]
        nxt = struct.unpack("<I", data[offsets[-1] + 2 + 12 * n:offsets[-1] + 6 + 12 * n])[0]
        if not nxt:
            return offsets
        offsets.append(nxt)


def _set_tag(data: bytearray, ifd: int, tag: int, *, new_tag: int | None = None, value: int | None = None) -> None:
    n = struct.unpack("<H", data[ifd:ifd + 2])[0]
    for i in range(n):
        at = ifd + 2 + 12 * i
        if struct.unpack("<H", data[at:at + 2])[0] == tag:
            if new_tag is not None:
                struct.pack_into("<H", data, at, new_tag)
            if value is not None:
                struct.pack_into("<H", data, at + 8, value)
            return
    raise AssertionError(f"no tag {tag}")


@pytest.mark.parametrize("damage_done", ["no width", "unknown compression", "unknown pixel mode"])
def test_damaged_page_of_a_multipage_tiff_is_named_at_count_time_and_the_good_pages_read(tmp_path, damage_done):
    path = _three_page_tiff(tmp_path)
    data = bytearray(path.read_bytes())
    second = _ifds(bytes(data))[1]
    if damage_done == "no width":  # Pillow: TypeError "Missing dimensions"
        _set_tag(data, second, 256, new_tag=65000)
    elif damage_done == "unknown compression":  # Pillow: KeyError 99
        _set_tag(data, second, 259, value=99)
    else:  # Pillow: SyntaxError "unknown pixel mode"
        _set_tag(data, second, 258, value=13)
    path.write_bytes(bytes(data))
    assert count_pages(path) == 3  # the probe walks the chain of pages, decodes none, raises nothing
    results = _read(path)
    assert isinstance(results[0], Page) and results[0].page == 1
    problem = results[1]
    assert isinstance(problem, ScanProblem) and problem.page == 2 and "damaged" in problem.reason
    assert not any(r.page == 2 for r in results if isinstance(r, Page))
    assert isinstance(load_page(path, 2), ScanProblem)


def test_png_with_a_huge_text_block_is_named(tmp_path):
    base = Image.fromarray(np.full((100, 80), 255, np.uint8))
    base.save(tmp_path / "base.png")
    data = (tmp_path / "base.png").read_bytes()
    text = damage._zeros_compressed(64)  # 64 MB of text in 65 KB
    path = _write(tmp_path, "note.png", data[:33] + damage.png_chunk(b"zTXt", b"Comment\0\0" + text) + data[33:])
    (problem,) = _read(path)
    assert isinstance(problem, ScanProblem) and "text" in problem.reason


def test_pdf_declaring_a_million_pages_is_refused_at_once_with_one_line(tmp_path, good):
    data = re.sub(rb"/Count \d+", b"/Count 1000000", good["cards.pdf"], count=1)
    path = _write(tmp_path, "huge.pdf", data)
    started = time.perf_counter()
    counted = count_pages(path)
    results = _read(path)
    assert time.perf_counter() - started < 5
    assert isinstance(counted, ScanProblem) and "1,000,000 pages" in counted.reason
    assert results == [ScanProblem(path, None, counted.reason)]


def test_pdf_whose_pages_are_all_missing_gives_a_few_lines_not_one_per_page(tmp_path, good):
    data = re.sub(rb"/Count \d+", b"/Count 1500", good["cards.pdf"], count=1)
    results = _read(_write(tmp_path, "many.pdf", data))
    assert len(_problems(results)) <= MAX_PAGE_PROBLEMS_PER_FILE + 1
    assert "not read" in results[-1].reason


def test_sixteen_bit_png_just_under_the_old_pixel_limit_is_refused_before_decoding(tmp_path):
    side = 10_950  # 120 million pixels of 16-bit grey: 240 MB decoded, from a 230 KB file
    data = damage._png(side, side, 16, 0, lambda: (b"\0" * (1 + 2 * side) for _ in range(side)))
    path = _write(tmp_path, "deep.png", data)
    started = time.perf_counter()
    (problem,) = _read(path)
    assert time.perf_counter() - started < 2  # nothing decoded
    assert isinstance(problem, ScanProblem) and "too large" in problem.reason


def test_deep_many_channel_page_is_sized_by_its_bytes(tmp_path):
    side = 5_600  # 31 million pixels: under the pixel limit, but 16-bit RGBA is 8 bytes a pixel
    assert side * side < DEFAULT_MAX_PIXELS
    (problem,) = _read(_write(tmp_path, "deep.png", damage._png(side, side, 16, 6)))
    assert isinstance(problem, ScanProblem) and "MB once decoded" in problem.reason
    small = damage._png(300, 200, 16, 6, lambda: (b"\0" + b"\xff" * 8 * 300 for _ in range(200)))
    (page,) = _read(_write(tmp_path, "small.png", small))
    assert isinstance(page, Page)  # a small 16-bit RGBA page is read


@pytest.mark.parametrize("name", ["card.jpg", "card.png", "card.tif", "card.bmp", "card.pdf"])
def test_truncated_file_is_named(tmp_path, good, name):
    data = good[name]
    path = _write(tmp_path, name, data[: len(data) * 2 // 3])
    problems = _problems(_read(path))
    assert problems, name
    assert "damaged" in problems[0].reason and ("ends before" in problems[0].reason or "cannot" in problems[0].reason)


def test_truncated_file_is_named_even_if_pillow_was_told_to_pad(tmp_path, good, monkeypatch):
    monkeypatch.setattr(ImageFile, "LOAD_TRUNCATED_IMAGES", True)
    data = good["card.jpg"]
    (problem,) = _read(_write(tmp_path, "cut.jpg", data[: len(data) // 2]))
    assert isinstance(problem, ScanProblem) and "ends before the image does" in problem.reason


def test_encrypted_pdf_is_named_plainly(tmp_path):
    (problem,) = _read(DATA / "password_protected.pdf")
    assert problem.page is None and "password-protected" in problem.reason
    assert problem.line(name_only=True).startswith("password_protected.pdf: the PDF is password-protected")


def test_a_reader_error_on_one_page_is_that_pages_problem():
    class Failing:
        def read(self, page):
            raise IndexError("list index out of range")

    page = Page(Path("odd.png"), 2, np.zeros((20, 20), np.uint8), 200.0, "file")
    problem = _read_page(Failing(), page)
    assert isinstance(problem, ScanProblem) and problem.page == 2 and "error in the program" in problem.reason


def test_page_problems_past_the_limit_become_one_line_per_file():
    many = [ScanProblem(Path("a.pdf"), n, "damaged") for n in range(1, 31)]
    out = list(_few_problems_per_file([*many, ScanProblem(Path("b.png"), None, "empty")]))
    assert len(out) == MAX_PAGE_PROBLEMS_PER_FILE + 2
    assert out[-2].source == Path("a.pdf") and out[-2].page is None and "20 more" in out[-2].reason
    assert out[-1].source == Path("b.png")
