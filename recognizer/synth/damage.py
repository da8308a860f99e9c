"""Damaged and hostile scan files, made from good ones, for the fuzz benchmark and the tests.

:func:`good_scans` prints a few weigh-in cards (the orchard card of
:mod:`recognizer.synth.layouts`) and saves them in every format and pixel
mode Inkcount reads: PNG (grey, 16-bit, grey with alpha, palette, 1-bit,
RGBA), JPEG (grey, colour, CMYK), BMP, TIFF (grey, CMYK, 16-bit, Group 4,
several pages) and PDF (one and several pages). :func:`damaged_scans` then
makes any number of damaged files from them, seeded, each with the kind of
damage done and whether Inkcount must name a problem for it:

* damage anywhere (bytes flipped, zeroed, inserted, removed, a block
  repeated, junk appended): the file may still read, or not; either is fine
  as long as the batch goes on (``must_name`` False);
* damage that leaves no whole image (cut short, the format's first bytes
  destroyed, the page's size made huge, a text block that expands to
  gigabytes, a PDF claiming a million pages, a TIFF page whose tags make no
  sense): the file must be named with a problem (``must_name`` True);
* files made from nothing but headers (decompression bombs of every size and
  depth, a 16-bit page just under the pixel limit, a TIFF of 5,000 pages, of
  many channels).

Generation is cheap: the good cards are drawn once at 200 dpi, every damaged
file is a few byte operations on one of them.
"""

from __future__ import annotations

import io
import re
import struct
import tempfile
import zlib
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from PIL import Image

from recognizer.scans.limits import DEFAULT_MAX_PIXELS, MAX_BYTES_PER_PIXEL, MAX_PAGES_PER_FILE
from recognizer.synth.capture import save_scan, scan_distort
from recognizer.synth.layouts import orchard_card, random_values
from recognizer.synth.render import render_form

__all__ = ["DamagedScan", "good_scans", "damaged_scans", "DAMAGES", "png_chunk", "tiff_file"]


@dataclass(frozen=True)
class DamagedScan:
    """One damaged file: its name (with the suffix of its format), its bytes, and what was done.

    ``must_name`` is True when the file cannot be read as it was made (cut
    short, too large, a broken page), so Inkcount must report a problem
    naming it; False when it may still read (a flipped byte in a JPEG's image
    data only spoils a few pixels).
    """

    name: str
    data: bytes
    damage: str
    base: str
    must_name: bool


# --------------------------------------------------------------------------
# Good scans


def good_scans(*, seed: int = 0, dpi: int = 200) -> dict[str, bytes]:
    """Good scans of filled-in orchard cards in every format and mode Inkcount reads: name -> bytes."""
    rng = np.random.default_rng(seed)
    layout = orchard_card()
    pages = []
    for _ in range(2):
        form = render_form(layout, random_values(layout, rng=rng), dpi=dpi, rng=rng)
        pages.append(scan_distort(form, rng=rng, skew_deg=0.4, noise=0.003).image)
    grey = pages[0]
    out: dict[str, bytes] = {}

    def saved(name: str, image, **kw) -> None:
        buf = io.BytesIO()
        image.save(buf, **kw)
        out[name] = buf.getvalue()

    def scan(name: str, page_or_pages, **kw) -> None:
        with tempfile.TemporaryDirectory() as tmp:  # save_scan takes the format from a path
            path = Path(tmp) / name
            save_scan(page_or_pages, path, dpi=dpi, optimize=False, **kw)
            out[name] = path.read_bytes()

    scan("card.png", grey)
    scan("card.jpg", grey, quality=85)
    scan("card.bmp", grey)
    scan("card.tif", grey)
    scan("card_g4.tif", grey, bitonal=True)
    scan("cards.tif", pages)
    scan("cards_g4.tif", pages, bitonal=True)
    scan("card.pdf", grey, quality=80)
    scan("cards.pdf", pages, quality=80)
    pil = Image.fromarray(grey, "L")
    rgb = pil.convert("RGB")
    info = {"dpi": (dpi, dpi)}
    saved("card_16bit.png", Image.fromarray(grey.astype(np.uint16) * 257), format="PNG", **info)
    saved("card_la.png", pil.convert("LA"), format="PNG", **info)
    saved("card_palette.png", rgb.convert("P"), format="PNG", **info)
    saved("card_1bit.png", pil.point(lambda v: 255 if v > 127 else 0).convert("1"), format="PNG", **info)
    saved("card_rgba.png", rgb.convert("RGBA"), format="PNG", **info)
    saved("card_colour.jpg", rgb, format="JPEG", quality=85, **info)
    saved("card_cmyk.jpg", rgb.convert("CMYK"), format="JPEG", quality=85, **info)
    saved("card_cmyk.tif", rgb.convert("CMYK"), format="TIFF", compression="tiff_adobe_deflate", **info)
    saved("card_16bit.tif", Image.fromarray(grey.astype(np.uint16) * 257), format="TIFF", **info)
    return out


# --------------------------------------------------------------------------
# Building blocks


def png_chunk(kind: bytes, data: bytes) -> bytes:
    """One PNG chunk with its length and CRC."""
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))


def _png(width: int, height: int, depth: int, colour: int, rows: Callable[[], Iterator[bytes]] | None = None,
         extra: bytes = b"") -> bytes:
    """A PNG of the declared size; ``rows`` gives the filtered rows (none: a few bytes of data only)."""
    ihdr = png_chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, depth, colour, 0, 0, 0))
    comp = zlib.compressobj(9)
    data = b"".join(comp.compress(r) for r in rows()) if rows is not None else comp.compress(b"\0" * 64)
    data += comp.flush()
    return b"\x89PNG\r\n\x1a\n" + ihdr + extra + png_chunk(b"IDAT", data) + png_chunk(b"IEND", b"")


def tiff_file(pages: list[dict[int, tuple[int, list[int]]]], data: bytes = b"") -> bytes:
    """A little-endian TIFF from raw tags: one dict per page, tag -> (type, values).

    Types are TIFF's: 3 SHORT, 4 LONG. ``data`` is placed right after the
    header (offset 8), so a strip offset of 8 points at it. Values that do
    not fit in the entry are stored after the page's tags.
    """
    out = bytearray(b"II*\0" + b"\0\0\0\0" + data)
    if len(out) % 2:
        out += b"\0"
    previous_next = 4
    for tags in pages:
        ifd_at = len(out)
        struct.pack_into("<I", out, previous_next, ifd_at)
        entries = sorted(tags.items())
        extra_at = ifd_at + 2 + 12 * len(entries) + 4
        body = bytearray(struct.pack("<H", len(entries)))
        extra = bytearray()
        for tag, (kind, values) in entries:
            size = {3: 2, 4: 4}[kind]
            packed = b"".join(struct.pack("<H" if kind == 3 else "<I", v) for v in values)
            if len(packed) <= 4:
                field = packed.ljust(4, b"\0")
            else:
                field = struct.pack("<I", extra_at + len(extra))
                extra += packed
            body += struct.pack("<HHI", tag, kind, len(packed) // size) + field
        previous_next = ifd_at + len(body)
        body += b"\0\0\0\0" + extra
        out += body
    return bytes(out)


def _tiff_tags(width: int, height: int, *, bits: list[int], photometric: int, compression: int = 1,
               strip: tuple[int, int] = (8, 0), extra_samples: int = 0) -> dict[int, tuple[int, list[int]]]:
    tags = {256: (4, [width]), 257: (4, [height]), 258: (3, bits), 259: (3, [compression]),
            262: (3, [photometric]), 273: (4, [strip[0]]), 277: (3, [len(bits)]), 278: (4, [height]),
            279: (4, [strip[1]])}
    if extra_samples:
        tags[338] = (3, [0] * extra_samples)
    return tags


# --------------------------------------------------------------------------
# Damage done to a good file: (data, rng) -> (data, must_name)

Damage = Callable[[bytes, np.random.Generator], tuple[bytes, bool]]


def _flip_bytes(data: bytes, rng) -> tuple[bytes, bool]:
    out = bytearray(data)
    for at in rng.integers(0, len(out), int(rng.integers(1, 24))):
        out[at] ^= int(rng.integers(1, 256))
    return bytes(out), False


def _flip_header(data: bytes, rng) -> tuple[bytes, bool]:
    out = bytearray(data)
    for at in rng.integers(8, min(len(out), 512), int(rng.integers(1, 6))):
        out[at] ^= int(rng.integers(1, 256))
    return bytes(out), False


def _cut_short(data: bytes, rng) -> tuple[bytes, bool]:
    return data[: int(len(data) * rng.uniform(0.02, 0.9))], True


def _destroy_magic(data: bytes, rng) -> tuple[bytes, bool]:
    junk = bytes(int(b) for b in rng.integers(0, 256, 8))
    if junk[:2] in (b"II", b"MM", b"BM", b"\xff\xd8") or junk.startswith((b"%PDF", b"\x89PNG")):
        junk = b"\0" + junk[1:]
    return junk + data[8:], True


def _zero_block(data: bytes, rng) -> tuple[bytes, bool]:
    at = int(rng.integers(0, len(data)))
    size = int(rng.integers(16, 4096))
    return data[:at] + b"\0" * min(size, len(data) - at) + data[at + size:], False


def _insert_bytes(data: bytes, rng) -> tuple[bytes, bool]:
    at = int(rng.integers(0, len(data)))
    return data[:at] + bytes(int(b) for b in rng.integers(0, 256, int(rng.integers(1, 300)))) + data[at:], False


def _remove_bytes(data: bytes, rng) -> tuple[bytes, bool]:
    at = int(rng.integers(0, len(data)))
    return data[:at] + data[at + int(rng.integers(1, 300)):], False


def _repeat_block(data: bytes, rng) -> tuple[bytes, bool]:
    at = int(rng.integers(0, len(data)))
    size = int(rng.integers(64, 8192))
    return data[:at] + data[at:at + size] * int(rng.integers(2, 5)) + data[at:], False


def _append_junk(data: bytes, rng) -> tuple[bytes, bool]:
    return data + bytes(int(b) for b in rng.integers(0, 256, int(rng.integers(1, 1500)))), False


def _png_huge_size(data: bytes, rng) -> tuple[bytes, bool]:
    side = int(rng.choice([60_000, 200_000, 2**31 - 1]))
    ihdr = struct.pack(">II", side, side) + data[24:29]
    return data[:8] + png_chunk(b"IHDR", ihdr) + data[33:], True


_ZEROS_COMPRESSED: dict[int, bytes] = {}


def _zeros_compressed(megabytes: int) -> bytes:
    """``megabytes`` MB of zero bytes, deflated (about 1 KB per MB; made once per size)."""
    if megabytes not in _ZEROS_COMPRESSED:
        comp = zlib.compressobj(9)
        block = b"\0" * 2**20
        _ZEROS_COMPRESSED[megabytes] = b"".join(comp.compress(block) for _ in range(megabytes)) + comp.flush()
    return _ZEROS_COMPRESSED[megabytes]


def _png_text_bomb(data: bytes, rng) -> tuple[bytes, bool]:
    text = _zeros_compressed(int(rng.choice([8, 64, 200])))
    kind = b"zTXt" if rng.random() < 0.5 else b"iTXt"
    body = b"Comment\0\0" + text if kind == b"zTXt" else b"Comment\0\1\0\0\0" + text
    return data[:33] + png_chunk(kind, body) + data[33:], True


def _jpeg_huge_size(data: bytes, rng) -> tuple[bytes, bool]:
    out = bytearray(data)
    at = next((i for i in range(2, len(out) - 9) if out[i] == 0xFF and out[i + 1] in (0xC0, 0xC1, 0xC2)), None)
    if at is None:
        return _cut_short(data, rng)
    struct.pack_into(">HH", out, at + 5, 65_000, 65_000)
    return bytes(out), True


def _tiff_page_tags(data: bytes, rng) -> tuple[bytes, bool]:
    """One tag of one page made nonsense: unknown compression or depth, no width, data out of the file."""
    (first,) = struct.unpack("<I", data[4:8])
    offsets = [first]
    while len(offsets) < 50:
        n = struct.unpack("<H", data[offsets[-1]:offsets[-1] + 2])[0]
        (nxt,) = struct.unpack("<I", data[offsets[-1] + 2 + 12 * n: offsets[-1] + 6 + 12 * n])
        if not nxt:
            break
        offsets.append(nxt)
    ifd = offsets[int(rng.integers(0, len(offsets)))]
    n = struct.unpack("<H", data[ifd:ifd + 2])[0]
    out = bytearray(data)
    choice = int(rng.integers(0, 5))
    for i in range(n):
        at = ifd + 2 + 12 * i
        tag, kind, count = struct.unpack("<HHI", out[at:at + 8])
        if choice == 0 and tag == 259:  # compression: an unknown code
            struct.pack_into("<H", out, at + 8, 99)
        elif choice == 1 and tag == 258 and count == 1:  # bits per sample: unknown pixel mode
            struct.pack_into("<H", out, at + 8, 13)
        elif choice == 2 and tag == 256:  # no width at all
            struct.pack_into("<H", out, at, 65_000)
        elif choice == 3 and tag == 273 and count == 1:  # image data beyond the end of the file
            struct.pack_into("<I", out, at + 8, len(data) + 10_000_000)
        elif choice == 4 and tag in (256, 257):  # a page of 4 billion pixels a side
            struct.pack_into("<HI", out, at + 2, 4, 0xFFFF_FFF0)
    if bytes(out) == data:
        return _cut_short(data, rng)
    return bytes(out), True


def _pdf_page_count(data: bytes, rng) -> tuple[bytes, bool]:
    count = int(rng.choice([1_000_000, 2**31 - 1, MAX_PAGES_PER_FILE + 1, 1_500]))
    # pdfium does not believe a count past 2**31 - 2 and counts the pages really there (then it reads)
    return re.sub(rb"/Count \d+", b"/Count %d" % count, data, count=1), count < 2**31 - 1


def _pdf_huge_page(data: bytes, rng) -> tuple[bytes, bool]:
    side = [b"200000", b"1e30", b"-5", b"0"][int(rng.integers(0, 4))]
    # pdfium gives a page without a usable size a default one, so only the huge page must be named
    return re.sub(rb"/MediaBox \[[^\]]*\]", b"/MediaBox [ 0 0 " + side + b" " + side + b" ]", data), side == b"200000"


def _pdf_no_xref(data: bytes, rng) -> tuple[bytes, bool]:
    at = data.rfind(b"xref")
    return (data[:at] + b"\0" * (len(data) - at - 6) + b"%%EOF\n") if at > 0 else data, False


#: The damages, and which files each applies to (by name suffix or prefix).
DAMAGES: dict[str, tuple[Damage, tuple[str, ...]]] = {
    "flip bytes": (_flip_bytes, ()),
    "flip header bytes": (_flip_header, ()),
    "cut short": (_cut_short, ()),
    "first bytes destroyed": (_destroy_magic, ()),
    "block zeroed": (_zero_block, ()),
    "bytes inserted": (_insert_bytes, ()),
    "bytes removed": (_remove_bytes, ()),
    "block repeated": (_repeat_block, ()),
    "junk appended": (_append_junk, ()),
    "PNG size made huge": (_png_huge_size, (".png",)),
    "PNG text bomb": (_png_text_bomb, (".png",)),
    "JPEG size made huge": (_jpeg_huge_size, (".jpg",)),
    "TIFF page tags broken": (_tiff_page_tags, (".tif",)),
    "PDF page count": (_pdf_page_count, (".pdf",)),
    "PDF page size": (_pdf_huge_page, (".pdf",)),
    "PDF cross-reference lost": (_pdf_no_xref, (".pdf",)),
}


# --------------------------------------------------------------------------
# Files made from headers alone


def _crafted(rng: np.random.Generator) -> list[tuple[str, str, bytes, bool]]:
    """(damage, suffix, data, must_name) for the files made without a good scan."""
    limit = DEFAULT_MAX_PIXELS
    side16 = int((limit * 3.0) ** 0.5)  # 16-bit grey, 3x the pixel limit (10,950 a side at 40 Mpx)
    deep = int((limit * MAX_BYTES_PER_PIXEL / 8 * 1.1) ** 0.5)  # 16-bit RGBA just over the byte limit
    many = 60_000
    pages = [_tiff_tags(64, 64, bits=[8], photometric=1, strip=(8, 64 * 64)) for _ in range(MAX_PAGES_PER_FILE * 2 + 1)]
    five = _tiff_tags(400, 300, bits=[8] * 5, photometric=2, strip=(8, 400 * 300 * 5), extra_samples=2)
    sixteen_rgba = _tiff_tags(deep, deep, bits=[16] * 4, photometric=2, strip=(8, 1_000), extra_samples=1)
    return [
        ("PNG bomb, 16-bit, 3x the pixel limit", ".png",
         _png(side16, side16, 16, 0, lambda: (b"\0" * (1 + 2 * side16) for _ in range(side16))), True),
        ("PNG bomb, 60,000 a side", ".png", _png(many, many, 8, 0), True),
        ("PNG, 16-bit RGBA over the byte limit", ".png", _png(deep, deep, 16, 6), True),
        ("PNG, 0 pixels wide", ".png", _png(0, 100, 8, 0), True),
        ("TIFF of 4,001 pages", ".tif", tiff_file(pages, b"\xff" * 64 * 64), True),
        ("TIFF of five channels", ".tif", tiff_file([five], b"\x80" * (400 * 300 * 5)), False),
        ("TIFF, 16-bit RGBA over the byte limit", ".tif", tiff_file([sixteen_rgba], b"\0" * 1_000), True),
        ("TIFF whose pages loop", ".tif", _tiff_loop(), False),
    ]


def _tiff_loop() -> bytes:
    tags = _tiff_tags(64, 64, bits=[8], photometric=1, strip=(8, 64 * 64))
    data = bytearray(tiff_file([tags, tags], b"\xff" * 64 * 64))
    first = struct.unpack("<I", data[4:8])[0]
    n = struct.unpack("<H", data[first:first + 2])[0]
    second = struct.unpack("<I", data[first + 2 + 12 * n:first + 6 + 12 * n])[0]
    struct.pack_into("<I", data, second + 2 + 12 * n, first)  # the second page points back to the first
    return bytes(data)


# --------------------------------------------------------------------------
# The stream


def damaged_scans(good: dict[str, bytes], n: int, *, seed: int = 0,
                  crafted_share: float = 0.04) -> Iterator[DamagedScan]:
    """``n`` damaged files made from ``good`` (from :func:`good_scans`), seeded.

    Every damage of :data:`DAMAGES` is used in turn on the files it applies
    to (damage anywhere on any file, format damage on its format); about
    ``crafted_share`` of the files are made from headers alone (bombs, a
    TIFF of thousands of pages). The same seed gives the same files.
    """
    rng = np.random.default_rng(seed)
    names = sorted(good)
    kinds = sorted(DAMAGES)
    weights = np.array([1.0 if DAMAGES[k][1] else 3.0 for k in kinds])  # damage anywhere is most common
    weights /= weights.sum()
    crafted_cache: list[tuple[str, str, bytes, bool]] | None = None
    for i in range(n):
        if rng.random() < crafted_share:
            if crafted_cache is None:
                crafted_cache = _crafted(rng)
            damage, suffix, data, must = crafted_cache[int(rng.integers(0, len(crafted_cache)))]
            yield DamagedScan(f"{i:04d}_crafted{suffix}", data, damage, "", must)
            continue
        kind = kinds[int(rng.choice(len(kinds), p=weights))]
        fn, applies = DAMAGES[kind]
        fits = [name for name in names if not applies or name.endswith(applies)]
        base = fits[int(rng.integers(0, len(fits)))]
        data, must = fn(good[base], rng)
        stem, suffix = base.rsplit(".", 1)
        yield DamagedScan(f"{i:04d}_{stem}.{suffix}", data, kind, base, must)
