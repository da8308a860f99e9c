"""Keeping freed page-sized blocks for the next page (glibc's allocator only).

Reading a page makes and drops a dozen arrays of the page's size (the
decoded page, its working copy at 200 dpi, the ink and line masks ...).
glibc hands blocks over 128 KB (at first; the bound moves) straight back to
the system and maps them afresh for the next page, and every fresh page of
memory is a fault the kernel must zero. On the 50 pages of
``bench/bench_read.py`` read in one process (``/usr/bin/time``), the system
time went from 0.65-0.69 s to 0.42-0.48 s with this, the whole read from
6.24-6.34 s to 6.04-6.05 s, and the peak memory from 170 to 168 MB.

:func:`reuse_freed_blocks` asks glibc (``mallopt``) to serve blocks up to
32 MB (an A4 page at 300 dpi is 8.7 MB) from its heap and to give the
heap's free top back only beyond 64 MB: a block freed by one page is used
again by the next. Elsewhere (another C library, another system) it does
nothing. Every way of reading calls it once per process
(:func:`recognizer.reading.stream.read_scans`, pool and cluster workers).
"""

from __future__ import annotations

import ctypes
import ctypes.util
import sys

__all__ = ["reuse_freed_blocks"]

_M_TRIM_THRESHOLD = -1  # glibc's malloc.h
_M_MMAP_THRESHOLD = -3
_MMAP_BYTES = 32 * 1024 * 1024  # glibc's largest bound on 64-bit systems
_TRIM_BYTES = 64 * 1024 * 1024

_done: bool | None = None


def reuse_freed_blocks() -> bool:
    """Set glibc's allocator to keep page-sized blocks for reuse (once); True when it took."""
    global _done
    if _done is None:
        _done = False
        if sys.platform.startswith("linux"):
            try:
                libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
                mallopt = libc.mallopt
            except (OSError, AttributeError):  # not glibc (musl has no mallopt)
                return False
            mallopt.argtypes, mallopt.restype = [ctypes.c_int, ctypes.c_int], ctypes.c_int
            _done = bool(mallopt(_M_MMAP_THRESHOLD, _MMAP_BYTES)) and bool(mallopt(_M_TRIM_THRESHOLD, _TRIM_BYTES))
    return _done
