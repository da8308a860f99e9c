"""A scan's resolution: from the file's own metadata when it is plausible, else guessed from the page size."""

from __future__ import annotations

from PIL import Image

__all__ = ["estimate_dpi", "file_dpi"]

# Paper sizes (long side, inches) tried when a file carries no usable dpi:
# A4, US Letter, A5 (common practice, no source: the sizes forms are printed on).
_PAPER_LONG_SIDE_IN = (297 / 25.4, 11.0, 210 / 25.4)
_COMMON_DPI = (150, 200, 240, 300, 400, 600)


def file_dpi(img: Image.Image) -> float | None:
    """The resolution stored in the file, or None when absent or implausible."""
    dpi = img.info.get("dpi")
    if dpi is None and img.info.get("jfif_unit") == 1:
        dpi = img.info.get("jfif_density")
    if dpi is None and img.info.get("jfif_unit") == 2:  # dots per cm
        dens = img.info.get("jfif_density")
        dpi = tuple(d * 2.54 for d in dens) if dens else None
    if not dpi:
        return None
    try:
        x = float(dpi[0] if isinstance(dpi, tuple) else dpi)
    except (TypeError, ValueError, IndexError):
        return None
    if not 50 <= x <= 2400:
        return None
    # 72 and 96 dpi are what many programs write when they know nothing; trust
    # them only if the page they imply is a plausible paper size.
    long_side_in = max(img.size) / x
    if x in (72.0, 96.0) and long_side_in > 14.5:
        return None
    return round(x, 2)


def estimate_dpi(shape: tuple[int, int]) -> float:
    """Guess the resolution of a page from its pixel size.

    Assumes the sheet is A4, US Letter or A5 (whichever gives a resolution
    closest to a usual scanner setting) and snaps to that setting when it is
    within 6 %.

    >>> estimate_dpi((3508, 2480))
    300.0
    """
    long_px = float(max(shape))
    best: tuple[float, float] | None = None
    for side in _PAPER_LONG_SIDE_IN:
        raw = long_px / side
        common = min(_COMMON_DPI, key=lambda d: abs(d - raw))
        miss = abs(common - raw) / common
        if best is None or miss < best[0]:
            best = (miss, common if miss <= 0.06 else raw)
    assert best is not None
    return float(round(best[1], 1))
