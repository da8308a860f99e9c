"""Hostile bytes shared by the tests of damaged and crafted files."""

from __future__ import annotations

import struct
import zlib


def png_bomb(width: int, height: int) -> bytes:
    """A real grey PNG of ``width`` x ``height`` white pixels, deflated to almost nothing."""
    def chunk(kind: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
    packer = zlib.compressobj(1)
    row = b"\x00" + b"\xff" * width
    body = b"".join(packer.compress(row) for _ in range(height)) + packer.flush()
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0))
            + chunk(b"IDAT", body) + chunk(b"IEND", b""))
