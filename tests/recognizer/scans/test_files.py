"""Scan loading: formats, page streaming, dpi, and bad input."""

from __future__ import annotations

import struct
import zlib
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from PIL import Image

from recognizer.scans.files import (
    Page,
    ScanProblem,
    count_pages,
    estimate_dpi,
    iter_pages,
    list_scans,
    load_page,
)
from tests.support import DATA



def _page(h=220, w=160, value=0):
    """A white page with a black square, so orientation and content are checkable."""
    img = np.full((h, w), 255, np.uint8)
    img[20:60, 30:90] = value
    return img


def _save(img: np.ndarray, path: Path, **kw) -> Path:
    Image.fromarray(img).save(path, **kw)
    return path


@pytest.mark.parametrize("suffix", [".png", ".bmp", ".tif"])
def test_lossless_formats_round_trip(tmp_path, suffix):
    img = _page()
    path = _save(img, tmp_path / f"card{suffix}", dpi=(200, 200))
    (page,) = list(iter_pages([path]))
    assert isinstance(page, Page)
    assert_array_equal(page.image, img)
    assert page.page == 1
    assert page.image.dtype == np.uint8


def test_jpeg_and_dpi_from_file(tmp_path):
    path = _save(_page(), tmp_path / "card.jpg", dpi=(300, 300), quality=90)
    (page,) = list(iter_pages([path]))
    assert page.dpi == pytest.approx(300)
    assert page.dpi_origin == "file"
    assert abs(int(page.image[40, 60]) - 0) < 40 and abs(int(page.image[150, 120]) - 255) < 40


def test_colour_and_bitonal_become_gray(tmp_path):
    rgb = np.stack([_page()] * 3, axis=-1)
    rgb[100:120, 100:120] = (255, 0, 0)  # a red mark, darker than paper in gray
    p1 = _save(rgb, tmp_path / "colour.png")
    bitonal = Image.fromarray(_page()).convert("1")
    p2 = tmp_path / "bitonal.tif"
    bitonal.save(p2, compression="group4", dpi=(200, 200))
    rgba = Image.fromarray(np.dstack([_page(), _page(), _page(), np.zeros_like(_page())]), "RGBA")
    p3 = tmp_path / "transparent.png"
    rgba.save(p3)
    a, b, c = list(iter_pages([p1, p2, p3]))
    assert a.image.ndim == 2 and a.image[110, 110] < 128 and a.image[40, 60] == 0
    assert b.image.ndim == 2 and b.image[40, 60] == 0 and b.image[150, 120] == 255
    # fully transparent pixels are paper, not ink
    assert c.image.min() == 255


def test_sixteen_bit_gray(tmp_path):
    img16 = (_page().astype(np.uint16) * 257)
    path = tmp_path / "deep.png"
    Image.fromarray(img16).save(path)
    (page,) = list(iter_pages([path]))
    assert_array_equal(page.image, _page())


def test_multipage_tiff_is_streamed_page_by_page(tmp_path):
    pages = [Image.fromarray(_page(value=v)) for v in (0, 60, 120)]
    path = tmp_path / "stack.tif"
    pages[0].save(path, save_all=True, append_images=pages[1:], dpi=(300, 300))
    assert count_pages(path) == 3
    stream = iter_pages([path])
    first = next(stream)
    assert first.page == 1 and first.image[40, 60] == 0
    rest = list(stream)
    assert [p.page for p in rest] == [2, 3]
    assert [p.image[40, 60] for p in rest] == [60, 120]
    assert load_page(path, 2).image[40, 60] == 60


def test_pdf_pages_rendered_at_chosen_dpi(tmp_path):
    pages = [Image.fromarray(_page(h=297, w=210)) for _ in range(3)]
    path = tmp_path / "cards.pdf"
    # 210 x 297 pixels saved at 25.4 dpi = a 210 x 297 mm (A4) page
    pages[0].save(path, save_all=True, append_images=pages[1:], resolution=25.4)
    assert count_pages(path) == 3
    got = list(iter_pages([path], pdf_dpi=150))
    assert [p.page for p in got] == [1, 2, 3]
    h, w = got[0].image.shape
    assert abs(h - round(297 / 25.4 * 150)) <= 2 and abs(w - round(210 / 25.4 * 150)) <= 2
    assert got[0].dpi == 150 and got[0].dpi_origin == "render"
    assert got[0].image[round(40 / 297 * h), round(60 / 210 * w)] < 64


def test_dpi_guessed_from_page_size_when_missing():
    assert estimate_dpi((3508, 2480)) == 300  # A4 at 300 dpi
    assert estimate_dpi((2339, 1654)) == 200  # A4 at 200 dpi
    assert estimate_dpi((1754, 1240)) == 150  # A4 at 150 dpi
    assert estimate_dpi((7016, 4961)) == 600  # A4 at 600 dpi


def test_png_without_dpi_uses_page_size(tmp_path):
    path = _save(np.full((1754, 1240), 255, np.uint8), tmp_path / "nodpi.png")
    (page,) = list(iter_pages([path]))
    assert page.dpi_origin == "page size" and page.dpi == 150


def test_folders_sorted_naturally_and_recursive(tmp_path):
    for name in ["card10.png", "card2.png", "card1.jpg", "notes.txt"]:
        if name.endswith(".txt"):
            (tmp_path / name).write_text("not a scan")
        else:
            _save(_page(), tmp_path / name)
    sub = tmp_path / "later"
    sub.mkdir()
    _save(_page(), sub / "card3.png")
    files, problems = list_scans([tmp_path])
    assert [f.name for f in files] == ["card1.jpg", "card2.png", "card10.png"]
    assert problems == []
    files, _ = list_scans([tmp_path], recursive=True)
    assert [f.name for f in files] == ["card1.jpg", "card2.png", "card10.png", "card3.png"]
    _, problems = list_scans([tmp_path / "missing"])
    assert "no such file" in problems[0].reason


def _tiny_png_header(width: int, height: int) -> bytes:
    """A PNG that claims to be width x height pixels but carries almost no data."""

    def chunk(kind: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    return b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(b"\0" * 10)) + chunk(b"IEND", b"")


def _bad_files(tmp_path: Path) -> dict[str, tuple[Path, str]]:
    good = _save(_page(), tmp_path / "good.png")
    data = good.read_bytes()
    jpg = _save(_page(800, 600), tmp_path / "whole.jpg", quality=90).read_bytes()
    cases = {
        "empty": (b"", "empty"),
        "truncated_png": (data[: len(data) // 2], "truncated"),
        "truncated_jpg": (jpg[: len(jpg) // 2], "truncated"),
        "not_image": (b"grower,crates\n00412,17\n", "not an image"),
        "bomb": (_tiny_png_header(40000, 40000), "too large"),
        "pdf_cut": (b"%PDF-1.4\n1 0 obj\n<< /Type /Catalog", "PDF"),
    }
    out = {}
    for name, (content, reason) in cases.items():
        suffix = ".pdf" if name.startswith("pdf") else (".jpg" if "jpg" in name else ".png")
        path = tmp_path / f"{name}{suffix}"
        path.write_bytes(content)
        out[name] = (path, reason)
    out["encrypted"] = (DATA / "password_protected.pdf", "password")
    return out


def test_each_bad_file_gives_one_clear_problem_and_the_batch_goes_on(tmp_path):
    bad = _bad_files(tmp_path)
    good = tmp_path / "good.png"
    order = [good]
    for path, _ in bad.values():
        order += [path, good]
    results = list(iter_pages(order))
    problems = [r for r in results if isinstance(r, ScanProblem)]
    pages = [r for r in results if isinstance(r, Page)]
    assert len(pages) == len(bad) + 1  # every good copy still read
    assert len(problems) == len(bad)  # one line per bad file
    for (path, reason), problem in zip(bad.values(), problems):
        assert problem.source == path
        assert reason.lower() in problem.reason.lower(), (path.name, problem.reason)
        assert str(path) in str(problem)


def test_pixel_limit_is_checked_before_decoding(tmp_path):
    path = _save(_page(), tmp_path / "card.png")
    (problem,) = list(iter_pages([path], max_pixels=1000))
    assert isinstance(problem, ScanProblem) and "too large" in problem.reason
    assert problem.page == 1


def test_misnamed_file_is_read_by_content(tmp_path):
    path = tmp_path / "scan.pdf"
    _save(_page(), tmp_path / "x.png")
    path.write_bytes((tmp_path / "x.png").read_bytes())  # a PNG with a .pdf name
    (page,) = list(iter_pages([path]))
    assert isinstance(page, Page)
