"""Which regions of a page are digit boxes: chains of regions fitted as rows of equal boxes.

The regions come from the page-level steps (:func:`recognizer.page.ruling.regions`:
stretches between two ruling lines a box height apart and two walls);
:func:`fit_fields` chains them into fields, fits each field as a row of equal
boxes at a regular pitch (which repairs boxes that broken lines or
handwriting hid), grows fields over boxes lost at their ends, and drops what
is not a digit field. Everything here works in pixels at the working
resolution of :func:`recognizer.page.boxes.find_fields`, which scales the
boxes back to the page and names the fields.

Rules
-----
* A *box* has an inner width and height in [``0.9 * min_box_mm``,
  ``max_box_mm``] and a height / width ratio in [0.7, 1.8].  Table cells
  and the notes frame are too wide, tick boxes too small, text and rings
  give no walls.
* *Chains*: a region is linked to its nearest right neighbour whose top and
  bottom agree within 12 % of the height, when the gap between them is at
  most 42 % of the box height (separate boxes with a small gap still form
  one field), or at most 2.5 heights with traces of the top and bottom
  lines over 30 % of the gap (boxes lost in between).  A chain is split where
  the gap between two consecutive boxes exceeds the median such gap by 17 %
  of the height and no line traces cross it (a comb next to a separate box
  is two fields).
* *Row fitting*: a field is a row of equal boxes: the width is the widest
  width shared by two of the chain's boxes, the pitch the one that lines up
  the boxes' centres best (tried from the width to the width plus the
  largest gap and 10 % of the width), and the row spans the chain.  A box edge is taken from a
  region edge within 10 % of a box width of where the row puts it.  Few boxes
  far apart may fit two pitches alike: the edges of all the chain's regions
  decide.  A chain with a single well-formed box takes the pitch of the
  page's fields of boxes of its size (the one its region edges fit best),
  else the pitch its region edges fit best.  So a box
  that a stroke from wall to wall cut in two, or two boxes run together
  through a broken wall, come out as the row says.  A chain with no box of
  box size is fitted with the size of the page's boxes of its height, when
  its span is a whole number of boxes and traces of the walls between them
  stand where they should.
* *Ends*: a field grows by up to two boxes at each end where the top and
  bottom lines run on over a box and a wall trace stands at its outer edge.
* *Checks*: lines must cover 70 % of a field's top and bottom edges; a
  field of three or more boxes must have at least half of them *seen* (half
  of the box covered by regions at most two pitches wide: a region wider
  than that is a table cell or a label's band, and a row laid over a table's
  row with one box-sized cell in it is no field); fields are kept in order
  of their count of well-formed boxes and may not overlap a field kept
  before.
* *Small fields*: a field of one or two boxes is kept only when its boxes'
  width and height are within 25 % of the median box of the page's fields of
  three or more boxes (of all boxes if there are none): a lone tick box of a
  clearly different size, or a pair of "boxes" in a printed emblem, is
  furniture, not a digit field.  A single box that is all a page holds (the
  rings of an emblem, on a page whose boxes dropped out) is no field either.
* *Doubts*: a field to which boxes were added beyond its ends (its box count
  rests on the neighbours' pitch) carries a doubt in ``FieldBoxes.doubts``;
  boxes placed inside a field at its regular pitch (a wall covered by a
  stroke) are not doubtful.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from recognizer.page.ruling import LINE_BAND_MM, Rect, ruled

__all__ = ["fit_fields"]

_ASPECT = (0.7, 1.8)       # height / width of a digit box
_ALIGN = 0.12              # tops and bottoms agree within this part of the height
_MAX_GAP = 0.42            # neighbours' gap under this part of the box height
_GAP_STEP = 0.17           # a gap this much (part of box height) over the median splits
_MISSING_GAP = 2.5         # farthest neighbour (box heights) joined by running lines
_FIELD_RULED = 0.7         # share of a whole field's top and bottom edge that lines must cover
_LINES_RUN_ON = 0.3        # share of a gap line traces must cover to join two regions
_MAX_EXTEND = 2            # boxes added at most at each end of a field
_SAME_WIDTH = 0.1          # boxes of one field agree in width within this part
_WALL_TRACE = 0.5          # ink share of a column that marks the trace of a broken wall
_SMALL_FIELD = 2           # fields of at most this many boxes must have the page's box size
_MOSTLY_PLACED = 0.5       # a longer field with more of its boxes placed than seen is no field
_SMALL_TOLERANCE = 0.25    # ... within this part
_PITCH_TIE = 0.02          # pitches whose centre resultant is this close to the best are tied
_PITCH_SLACK = 0.1         # pitches tried reach this part of the width past width + largest gap


@dataclass(frozen=True)
class _Limits:
    """Size limits of a digit box, in pixels at the working resolution."""

    lo: float
    hi: float

    def fits(self, r: Rect) -> bool:
        return (self.lo <= r.w <= self.hi and self.lo <= r.h <= self.hi
                and _ASPECT[0] <= r.h / r.w <= _ASPECT[1])


@dataclass(frozen=True)
class _Reference:
    """Size of the boxes of one field: height, width and pitch (0 when unknown)."""

    h: float
    w: float
    pitch: float


def _lines_continue(lines: np.ndarray, a: Rect, b: Rect, band: int) -> bool:
    """Whether traces of the top and the bottom line run across the gap from ``a`` to ``b``."""
    return ruled(lines, a.x1, b.x0, min(a.y0, b.y0), max(a.y1, b.y1), band, _LINES_RUN_ON)


def _chains(rects: list[Rect], lines: np.ndarray, band: int) -> list[list[Rect]]:
    """Link each region to its nearest aligned right neighbour, when close enough.

    The neighbour must be close (``_MAX_GAP`` of the height) or, up to
    ``_MISSING_GAP`` heights away, joined to it by traces of top and bottom
    lines (boxes between them were lost).
    """
    order = sorted(rects, key=lambda r: r.x0)
    nxt: dict[int, int] = {}
    x0s, y0s, y1s, hs = (np.array([getattr(r, k) for r in order], np.int64) for k in ("x0", "y0", "y1", "h"))
    for i, a in enumerate(order):
        # the regions after ``a`` that start right of it, aligned with it (top and bottom within
        # _ALIGN of the taller height), all at once
        tol = _ALIGN * np.maximum(a.h, hs[i + 1:])
        right = np.flatnonzero((x0s[i + 1:] >= a.x1 - 1) & (np.abs(a.y0 - y0s[i + 1:]) <= tol)
                               & (np.abs(a.y1 - y1s[i + 1:]) <= tol))
        if not right.size:
            continue
        j = i + 1 + int(right[np.argmin(x0s[i + 1:][right])])
        b = order[j]
        gap = b.x0 - a.x1
        if j not in nxt.values() and (gap <= _MAX_GAP * min(a.h, b.h) or (
                gap <= _MISSING_GAP * a.h and _lines_continue(lines, a, b, band))):
            nxt[i] = j
    chains = []
    for i in sorted(set(range(len(order))) - set(nxt.values())):
        chain = [order[i]]
        while i in nxt:
            i = nxt[i]
            chain.append(order[i])
        chains.append(chain)
    return chains


def _split_chain(chain: list[Rect], limits: _Limits, lines: np.ndarray,
                 band: int) -> list[list[Rect]]:
    """Split a chain where two well-formed boxes stand too far apart for one field.

    Gaps are measured between consecutive well-formed boxes (skipping parts of
    boxes between them); a chain is split where such a gap exceeds the median
    one by ``_GAP_STEP`` heights and no line traces run across it.
    """
    good = [i for i, r in enumerate(chain) if limits.fits(r)]
    gaps = [chain[j].x0 - chain[i].x1 for i, j in zip(good, good[1:])]
    if len(gaps) < 2:
        return [chain]
    limit = float(np.median(gaps)) + _GAP_STEP * float(np.median([r.h for r in chain]))
    cuts = [j for (i, j), gap in zip(zip(good, good[1:]), gaps)
            if gap > limit and not _lines_continue(lines, chain[i], chain[j], band)]
    bounds = [0] + cuts + [len(chain)]
    return [chain[a:b] for a, b in zip(bounds, bounds[1:])]


def _box_width(good: list[Rect]) -> float:
    """The widest width that two or more of a chain's boxes share (parts of split boxes are
    narrower); the widest width when no two agree."""
    widths = np.array([r.w for r in good], float)
    near = np.abs(widths[:, None] - widths[None, :]) <= _SAME_WIDTH * widths[:, None]
    counts = near.sum(axis=1)
    shared = counts >= min(2, int(counts.max()))
    best = max(np.flatnonzero(shared), key=lambda i: widths[i])  # the widest shared width
    return float(np.median(widths[near[best]]))


def _references(chains: list[list[Rect]], limits: _Limits) -> list[_Reference]:
    """Box sizes of the chains that hold well-formed boxes."""
    refs = []
    for chain in chains:
        good = [r for r in chain if limits.fits(r)]
        if not good:
            continue
        w = _box_width(good)
        h = float(np.median([r.h for r in good]))
        pitch = _pitch([r for r in good if abs(r.w - w) <= _SAME_WIDTH * w], w, h)
        refs.append(_Reference(h, w, pitch or 0.0))
    return refs


def _pitch(boxes: list[Rect], w: float, h: float, part: list[Rect] | None = None) -> float | None:
    """Pitch of a row of equal boxes from the periodicity of their centres; None for one box.

    Only pitches from ``w`` to ``w`` plus the largest gap between neighbours
    (and 10 % of ``w``: walls thickened by the scan narrow the boxes) are
    tried, a range too narrow to hold twice a pitch, so lost boxes between
    the given ones do not matter.  Few boxes far apart fit several pitches
    equally well (two boxes three separate boxes apart fit four closed ones
    too): pitches within ``_PITCH_TIE`` of the best are then told apart by the
    edges of all the chain's regions ``part`` (parts of boxes cut by strokes,
    the strips between separate boxes), as :func:`_pitch_from_edges` does.
    """
    if len(boxes) < 2:
        return None
    centres = np.array([(r.x0 + r.x1) / 2.0 for r in boxes])
    pitches = np.arange(w, w + _MAX_GAP * h + _PITCH_SLACK * w + 1.0, 0.25)
    resultant = np.abs(np.exp(2j * np.pi * centres[None, :] / pitches[:, None]).mean(axis=1))
    best = int(np.argmax(resultant))
    if part is not None:
        tied = np.flatnonzero(resultant >= resultant[best] - _PITCH_TIE)
        if np.any(np.diff(tied) > 1):  # two peaks or more, not one broad peak
            return _edge_score_best(part, boxes[0], w, pitches[tied])
    return float(pitches[best])


def _pitch_from_edges(part: list[Rect], box: Rect, w: float, h: float) -> float:
    """Pitch that puts the most region edges of ``part`` on box edges laid out from ``box``.

    For a chain with a single well-formed box: the outer walls of boxes cut in
    parts by strokes still bound regions, so their edges mark the row.
    """
    return _edge_score_best(part, box, w, np.arange(w, w + _MAX_GAP * h + _PITCH_SLACK * w + 1.0, 0.5))


def _lone_box_pitch(part: list[Rect], box: Rect, w: float, h: float,
                    refs: list[_Reference]) -> float:
    """Pitch of a chain with one well-formed box: that of the page's fields of boxes of its
    size (several such pitches told apart by the chain's region edges), else from the edges
    alone (:func:`_pitch_from_edges`)."""
    pitches = sorted({ref.pitch for ref in refs if ref.pitch and abs(ref.w - w) <= _SAME_WIDTH * w
                      and abs(ref.h - h) <= _ALIGN * h})
    if not pitches:
        return _pitch_from_edges(part, box, w, h)
    return _edge_score_best(part, box, w, np.array(pitches))


def _edge_score_best(part: list[Rect], box: Rect, w: float, pitches: np.ndarray) -> float:
    """Of ``pitches``, the one that puts the most region edges of ``part`` on box edges laid
    out from ``box``."""
    parts = [r for r in part if r.w >= 0.35 * w]  # not the strips between separate boxes
    lefts = np.array([r.x0 for r in parts], float)
    rights = np.array([r.x1 for r in parts], float)
    tol = max(2.0, 0.05 * w)
    best, best_score = w, -1.0
    for pitch in pitches:
        d_left = np.abs((lefts - box.x0 + pitch / 2) % pitch - pitch / 2)
        d_right = np.abs((rights - box.x1 + pitch / 2) % pitch - pitch / 2)
        d = np.concatenate([d_left, d_right])
        score = np.count_nonzero(d <= tol) - d[d <= tol].sum() / (tol * d.size + 1)
        if score > best_score:
            best, best_score = float(pitch), score
    return best


def _fit_field(part: list[Rect], limits: _Limits, refs: list[_Reference],
               ink: np.ndarray) -> tuple[list[Rect], int, float]:
    """Lay a row of equal boxes over a chain of regions.

    Returns the boxes, how many of them were placed rather than seen, and the
    pitch (distance from one box's left edge to the next one's).

    Box width and pitch come from the chain's well-formed boxes (else from the
    page's boxes of the same height); every box edge is taken from a region
    edge within 10 % of a box width of where the row puts it, else placed.
    "Placed" boxes are those that regions cover by less than half.
    """
    h = float(np.median([r.h for r in part]))
    good = [r for r in part if limits.fits(r)]
    if good:
        w = _box_width(good)
        true = [r for r in good if abs(r.w - w) <= _SAME_WIDTH * w]
        pitch = _pitch(true, w, h, part) or _lone_box_pitch(part, true[0], w, h, refs)
        base = true[0].x0
        origin = float(np.median([r.x0 - round((r.x0 - base) / pitch) * pitch for r in true]))
    else:
        similar = [ref for ref in refs if abs(ref.h - h) <= _ALIGN * h]
        if not similar:
            return [], 0, 0.0
        w = float(np.median([ref.w for ref in similar]))
        pitch = float(np.median([ref.pitch or ref.w for ref in similar]))
        span = part[-1].x1 - part[0].x0
        k = max(1, round((span + pitch - w) / pitch))
        if len(part) == 1 and k == 1 or abs(span - (k * pitch - pitch + w)) > 0.15 * w:
            return [], 0, 0.0  # a scrap, not boxes run together or one box cut in parts
        origin = float(part[0].x0)
    first = int(round((part[0].x0 - origin) / pitch))
    last = int(round((part[-1].x1 - w - origin) / pitch))
    if not 0 <= last - first < 100:
        return [], 0, 0.0
    tol = max(2.0, 0.1 * w)
    y0 = int(round(np.median([r.y0 for r in (good or part)])))
    y1 = int(round(np.median([r.y1 for r in (good or part)])))
    boxes, placed = [], 0
    for slot in range(first, last + 1):
        ex0 = origin + slot * pitch
        x0 = _snap(ex0, [r.x0 for r in part], tol)
        x1 = _snap(ex0 + w, [r.x1 for r in part], tol)
        # regions of up to two boxes (a wall lost between them) show boxes; a wider one (a table
        # cell, a label's band) shows none
        seen = sum(max(0, min(r.x1, x1) - max(r.x0, x0)) for r in part if r.w <= 2 * pitch + tol)
        if seen < 0.5 * w:
            placed += 1
        if not good and slot > first and not _wall_trace(ink, x0, y0, y1, tol):
            return [], 0, 0.0
        boxes.append(Rect(x0, y0, x1, y1))
    return [b for b in boxes if limits.fits(b)], placed, pitch


def _snap(expected: float, edges: list[int], tol: float) -> int:
    """The edge nearest to ``expected`` if within ``tol``, else ``expected`` rounded."""
    nearest = min(edges, key=lambda e: abs(e - expected))
    return nearest if abs(nearest - expected) <= tol else int(round(expected))


def _wall_trace(ink: np.ndarray, x: int, y0: int, y1: int, half: float) -> bool:
    """Whether some column up to ``2 * half`` px left of ``x`` is mostly ink between y0 and y1."""
    a = max(0, int(x - 2 * half))
    cover = (ink[y0:y1, a:x] > 0).mean(axis=0)
    return bool(cover.size) and float(cover.max()) >= _WALL_TRACE


def fit_fields(rects: list[Rect], lines: np.ndarray, ink: np.ndarray, px_per_mm: float,
               min_box_mm: float, max_box_mm: float) -> list[tuple[list[Rect], tuple[str, ...]]]:
    """Chain regions into fields, fit each field's row of boxes, drop what is not a digit box.

    Returns each field's boxes with its doubts: boxes added beyond the ends
    of a field change its box count, so such a field is doubtful; boxes
    placed inside a field at its regular pitch are not.
    """
    limits = _Limits(0.9 * min_box_mm * px_per_mm, max_box_mm * px_per_mm)
    band = max(2, int(round(LINE_BAND_MM * px_per_mm)))
    chains = [part for chain in _chains(rects, lines, band)
              for part in _split_chain(chain, limits, lines, band)]
    refs = _references(chains, limits)
    fitted = []
    for part in chains:
        boxes, n, pitch = _fit_field(part, limits, refs, ink)
        if len(boxes) > _SMALL_FIELD and n > _MOSTLY_PLACED * len(boxes):
            continue  # a row laid over a table's row: mostly no region of a box or two where its boxes stand
        if boxes and ruled(lines, boxes[0].x0, boxes[-1].x1, boxes[0].y0, boxes[0].y1, band,
                           _FIELD_RULED):
            fitted.append((boxes, n, pitch, sum(limits.fits(r) for r in part)))
    fitted = _drop_odd_small_fields(fitted)
    fields: list[tuple[list[Rect], tuple[str, ...]]] = []
    taken = np.zeros(lines.shape, bool)
    kept = []
    # fields seen with more well-formed boxes first; the others may not overlap them
    for boxes, _, pitch, _ in sorted(fitted, key=lambda f: -f[3]):
        if not any(taken[b.y0:b.y1, b.x0:b.x1].any() for b in boxes):
            for b in boxes:
                taken[b.y0:b.y1, b.x0:b.x1] = True
            kept.append((boxes, pitch))
    for boxes, pitch in kept:
        boxes, added = _extend(boxes, pitch, ink, band, taken)
        doubts = (f"{added} box{'es' if added > 1 else ''} at the end of the field added from the "
                  "neighbouring boxes (walls broken or covered)",) if added else ()
        fields.append((boxes, doubts))
    return fields


def _extend(boxes: list[Rect], pitch: float, ink: np.ndarray, band: int,
            taken: np.ndarray) -> tuple[list[Rect], int]:
    """Add boxes lost at a field's ends (their region leaked out through a broken line).

    A box is added one pitch beyond an end while ink covers half of its top
    and bottom edges taken together, a wall trace stands at its outer edge and
    no other box is there.
    """
    if len(boxes) < 2 or pitch <= 0:
        return boxes, 0
    w = int(round(float(np.median([b.w for b in boxes]))))
    y0 = int(round(np.median([b.y0 for b in boxes])))
    y1 = int(round(np.median([b.y1 for b in boxes])))
    tol = max(2.0, 0.1 * w)
    added = 0
    for step in (-1, 1):
        for _ in range(_MAX_EXTEND):
            end = boxes[0] if step < 0 else boxes[-1]
            x0 = int(round(end.x0 + step * pitch))
            x1 = x0 + w
            if x0 < 0 or x1 > ink.shape[1] or taken[y0:y1, x0:x1].any():
                break
            if not ruled(ink, x0, x1, y0, y1, band, either=True):
                break
            outer = x0 if step < 0 else x1 + int(round(2 * tol))
            if not _wall_trace(ink, outer, y0, y1, tol):
                break
            box = Rect(x0, y0, x1, y1)
            taken[y0:y1, x0:x1] = True
            boxes = [box] + boxes if step < 0 else boxes + [box]
            added += 1
    return boxes, added


def _drop_odd_small_fields(fitted: list[tuple]) -> list[tuple]:
    """Keep a field of one or two boxes only when its boxes have the page's usual size.

    ``fitted`` holds ``(boxes, ...)`` tuples; the usual size is the median box of
    the fields of more boxes, or of all fields when there are none.
    """
    big = [r for f in fitted if len(f[0]) > _SMALL_FIELD for r in f[0]]
    ref = big or [r for f in fitted for r in f[0]]
    if not ref or len(ref) == 1:  # a single box alone on a page: an emblem, not a form
        return []
    w = float(np.median([r.w for r in ref]))
    h = float(np.median([r.h for r in ref]))
    return [f for f in fitted if len(f[0]) > _SMALL_FIELD or all(
        abs(r.w - w) <= _SMALL_TOLERANCE * w and abs(r.h - h) <= _SMALL_TOLERANCE * h
        for r in f[0])]
