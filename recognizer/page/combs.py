"""Open combs: a baseline with short upright ticks between the digit positions, no top line.

:func:`recognizer.page.boxes.find_fields` runs this after the closed boxes
were found (:mod:`recognizer.page.box_rows`), on the same working-resolution
ink and line masks; the open combs' boxes are named and ordered with the
others.  Everything here is in pixels at that working resolution.

Rules
-----
* *Baselines*: the straight horizontal lines of the page
  (:func:`recognizer.page.ruling.line_segments`).
* *Ticks*: a column run standing on a baseline: ink covers over 80 % of the
  rows from 0.35 mm to 1.35 mm above the line's top edge and every row from
  there down to the line (a digit that ends just above the line is no tick);
  at most a wall thick (1.2 mm); within the line's length (0.5 mm leeway).
* *Pitch*: every distance between two ticks of a baseline within the box
  width limits is a candidate; the five that other pairs of ticks repeat
  most, once or twice over (within 10 %), are tried, and the one whose
  longest chain holds the most ticks seen less ticks placed wins.
* *Chains*: from each tick, the next tick one pitch on (within 10 % of the
  pitch, at least 2 px) is linked; when none stands there, one two pitches on
  (a tick hidden under a digit), with a tick placed between.  Ticks off the
  pitch (strokes reaching the line) are skipped.  Longer chains are taken
  first.  A chain is cut where the line does not run under 95 % of the way
  from one tick to the next (the gap before a printed separator, a text
  line's joined letter bottoms).
* *Boxes*: the cells between the ticks of a chain, from the line's top edge
  up to the inner height a closed box of that pitch would have:
  ``OPEN_ASPECT * pitch - tick width`` (``OPEN_ASPECT`` 1.2, the usual height
  / width of a digit box; common practice, no source).  Every cell's width
  lies in the box limits; an open comb has at least two boxes.
* *Ticks alike*: the inner ticks (three quarters of them) agree in height
  within 25 % of their median, the end ticks are no shorter, and no tick
  reaches 85 % of the box height (text stems and ring sides are not so even).
* *Not an open comb*: a chain any of whose cells has a row of ink over 90 %
  of its width that runs on over both its sides, in the cell's upper 40 % or
  up to 0.6 mm above it (a top wall: a box, a checkbox, a table row); or one
  that overlaps a field of three or more closed boxes found already (closed
  boxes are found first: their walls stand on their bottom line like ticks).
  A closed field of one or two boxes that overlaps an open comb is dropped (a
  stroke and a tick can close a "box" inside an open cell).
* *Ends*: where the line runs on under a box's width (60 % of it) beyond
  the outermost tick, up to two boxes are added at that end (an end tick
  hidden by a digit or broken), and the field carries a doubt.
* *Small fields*: when a page has open combs, the small-field rule of
  :mod:`recognizer.page.box_rows` is applied again to all its fields, closed
  and open: a field of one or two boxes is kept only when its boxes' width
  and height are within 25 % of the median box of the page's fields of three
  or more boxes (:func:`drop_odd_small`).
"""

from __future__ import annotations

import numpy as np

from recognizer.page.ruling import Rect, line_segments, max_wall_px, runs, thin_runs

__all__ = ["OPEN_ASPECT", "add_open_combs", "drop_odd_small", "open_combs"]

OPEN_ASPECT = 1.2        # inner height / pitch of the box an open comb's cell stands for
_PROBE_FROM_MM = 0.35    # tick probe band: from this far above the baseline's top edge ...
_PROBE_MM = 1.0          # ... this high
_TICK_COVER = 0.8        # ink share of the probe band's rows that makes a tick column
_PITCH_TOL = 0.1         # a tick lies within this part of the pitch of where the chain puts it
_TOP_LINE = 0.9          # a row of ink over this part of a cell's width closes it at the top
_TOP_PART = 0.4          # ... when it runs in this upper part of the cell (or just above it)
_RUN_ON = 0.6            # line beyond the outermost tick (box widths) that marks a lost box
_MAX_EXTEND = 2          # boxes added at most at each end
_MIN_BOXES = 2           # an open comb has at least this many boxes
_UNDER = 0.95            # share of the way between two ticks that the line must run under
_TICK_MAX = 0.85         # a tick is shorter than this part of the box height
_TICK_SPREAD = 0.25      # the inner ticks' heights agree within this part of their median
_SMALL_FIELD = 2         # fields of at most this many boxes must have the page's box size
_SMALL_TOLERANCE = 0.25  # ... within this part

Field = tuple[list[Rect], tuple[str, ...]]
"""A field's boxes, left to right, and its doubts."""


def open_combs(ink: np.ndarray, lines: np.ndarray, px_per_mm: float, min_box_mm: float,
               max_box_mm: float, found: list[list[Rect]], *,
               segments: list[Rect] | None = None) -> list[Field]:
    """The open-comb fields of a page, each as its boxes left to right and its doubts.

    ``ink`` and ``lines`` are the working-resolution masks of
    :mod:`recognizer.page.ruling`; ``found`` the boxes of the fields found
    already (an open comb may not overlap those of three boxes or more);
    ``segments`` the :func:`~recognizer.page.ruling.line_segments` of ``lines``
    when worked out already.  :func:`add_open_combs` puts the two together.
    """
    lo, hi = 0.9 * min_box_mm * px_per_mm, max_box_mm * px_per_mm
    taken = np.zeros(ink.shape, bool)
    for boxes in found:
        if len(boxes) > _SMALL_FIELD:  # small ones give way (see add_open_combs)
            for b in boxes:
                taken[b.y0:b.y1, b.x0:b.x1] = True
    fields = []
    for seg in segments if segments is not None else line_segments(lines, px_per_mm, min_box_mm):
        ticks = _ticks(ink, seg, px_per_mm)
        pitch = _pitch(ticks, lo, hi)
        if pitch is None:
            continue
        for chain in sorted(_chains(ticks, pitch), key=len, reverse=True):
            for part in _on_line(_placed(chain, pitch), seg, ink):
                field = _cells(part, seg, pitch, lo, hi)
                if (len(field) < _MIN_BOXES or not _even_ticks(part, seg, ink, field[0].h)
                        or _closed(field, ink, px_per_mm)
                        or any(taken[b.y0:b.y1, b.x0:b.x1].any() for b in field)):
                    continue
                field, added = _extend(field, part, seg, pitch, ink, taken)
                for b in field:
                    taken[b.y0:b.y1, b.x0:b.x1] = True
                doubts = (f"{added} box{'es' if added > 1 else ''} at the end of the open comb "
                          "added where its end tick was not seen",) if added else ()
                fields.append((field, doubts))
    return fields


def _ticks(ink: np.ndarray, seg: Rect, px_per_mm: float) -> list[tuple[int, int]]:
    """Column ranges ``[a, b)`` of the ticks standing on baseline ``seg``."""
    r1 = seg.y0 - max(2, int(round(_PROBE_FROM_MM * px_per_mm)))
    r0 = r1 - max(3, int(round(_PROBE_MM * px_per_mm)))
    if r0 < 0:
        return []
    reach = max(2, int(round(0.5 * px_per_mm)))
    xa, xb = max(0, seg.x0 - reach), min(ink.shape[1], seg.x1 + reach)
    cover = (ink[r0:r1, xa:xb] > 0).mean(axis=0)
    # standing on the line: unbroken ink from the line's top edge up to the probe band
    foot = (ink[r1:seg.y0, xa:xb] > 0).all(axis=0)
    foot = foot | np.roll(foot, 1) | np.roll(foot, -1)
    starts, stops = runs(thin_runs((cover >= _TICK_COVER) & foot, max_wall_px(px_per_mm)))
    return [(int(xa + a), int(xa + b)) for a, b in zip(starts, stops)]


def _pitch(ticks: list[tuple[int, int]], lo: float, hi: float) -> float | None:
    """The box pitch of a baseline's ticks; None if no two ticks are a box apart.

    The distances between any two ticks that could be a box pitch are
    candidates; the five that most other pairs of ticks repeat, once or
    twice over (within ``_PITCH_TOL``), are tried, and the one whose longest
    chain of ticks holds the most ticks seen less ticks placed wins.
    """
    centres = np.array([(a + b) / 2.0 for a, b in ticks])
    every = (centres[None, :] - centres[:, None]).ravel()
    every = every[every > 0]
    steps = every[(every >= lo) & (every <= hi + 2)]
    if not steps.size:
        return None
    tol = np.maximum(2.0, _PITCH_TOL * steps[:, None])
    near = np.abs(steps[:, None] - steps[None, :]) <= tol
    twice = np.abs(every[None, :] - 2 * steps[:, None]) <= tol  # a tick hidden between
    votes = near.sum(axis=1) + twice.sum(axis=1)
    best, best_score = None, -np.inf
    tried: list[float] = []
    medians: dict[bytes, float] = {}  # candidates with the same near steps have the same median
    for i in np.argsort(-votes - 1e-3 * steps, kind="stable"):
        key = np.packbits(near[i]).tobytes()
        if key not in medians:
            medians[key] = float(np.median(steps[near[i]]))
        pitch = medians[key]
        if any(abs(pitch - t) <= _PITCH_TOL * t for t in tried):
            continue
        tried.append(pitch)
        score = max((sum(t is not None for t in c) - sum(t is None for t in c)
                     for c in _chains(ticks, pitch)), default=0)
        if score > best_score:
            best, best_score = pitch, score
        if len(tried) == 5:
            break
    return best


def _chains(ticks: list[tuple[int, int]], pitch: float) -> list[list[tuple[int, int] | None]]:
    """Runs of ticks one pitch apart (``None`` for a tick placed between two pitches apart)."""
    centres = [(a + b) / 2.0 for a, b in ticks]
    tol = max(2.0, _PITCH_TOL * pitch)
    used: set[int] = set()
    chains = []
    for i in range(len(ticks)):
        if i in used:
            continue
        chain: list[tuple[int, int] | None] = [ticks[i]]
        used.add(i)
        k = i
        while True:
            nxt = None
            for steps in (1, 2):
                near = [j for j in range(k + 1, len(ticks))
                        if abs(centres[j] - centres[k] - steps * pitch) <= tol]
                if near:
                    nxt = (min(near, key=lambda j: abs(centres[j] - centres[k] - steps * pitch)), steps)
                    break
            if nxt is None:
                break
            k, steps = nxt
            chain += [None] * (steps - 1) + [ticks[k]]
            used.add(k)
        if len(chain) >= 2:
            chains.append(chain)
    return chains


def _placed(chain: list[tuple[int, int] | None], pitch: float) -> list[tuple[int, int, bool]]:
    """The chain's ticks as ``(a, b, seen)``, the hidden ones placed at the chain's pitch."""
    seen = [(i, t) for i, t in enumerate(chain) if t is not None]
    width = float(np.median([b - a for _, (a, b) in seen]))
    origin = float(np.median([(a + b) / 2.0 - i * pitch for i, (a, b) in seen]))
    return [(t[0], t[1], True) if t is not None else
            (int(round(origin + i * pitch - width / 2)), int(round(origin + i * pitch + width / 2)),
             False) for i, t in enumerate(chain)]


def _cells(ticks: list[tuple[int, int, bool]], seg: Rect, pitch: float, lo: float,
           hi: float) -> list[Rect]:
    """The boxes between ticks; [] when one of them is not of box size."""
    width = float(np.median([b - a for a, b, _ in ticks]))
    y1 = seg.y0
    y0 = int(round(y1 - (OPEN_ASPECT * pitch - width)))
    if y0 < 0:
        return []
    boxes = [Rect(left[1], y0, right[0], y1) for left, right in zip(ticks, ticks[1:])]
    if not all(lo <= b.w <= hi for b in boxes):
        return []
    return boxes


def _on_line(ticks: list[tuple[int, int, bool]], seg: Rect,
             ink: np.ndarray) -> list[list[tuple[int, int, bool]]]:
    """The parts of a chain under which a printed line runs, from tick to tick.

    Ink must cover the line's rows over ``_UNDER`` of the way from one tick to
    the next (the bottoms of a line of text, which the line mask joins, leave
    gaps, and so does the gap between two groups of a date).
    """
    under = (ink[seg.y0:seg.y1] > 0).any(axis=0)
    parts, part = [], [ticks[0]]
    for left, right in zip(ticks, ticks[1:]):
        span = under[left[0]:right[1]]
        if span.size and float(span.mean()) >= _UNDER:
            part.append(right)
        else:
            parts.append(part)
            part = [right]
    parts.append(part)
    return [p for p in parts if len(p) >= 2]


def _even_ticks(ticks: list[tuple[int, int, bool]], seg: Rect, ink: np.ndarray, height: int) -> bool:
    """Whether the chain's ticks look like a comb's: the inner ones of one height, the ends
    no shorter, and all shorter than the boxes (a wall reaching a top line is no tick)."""
    tall = []
    for a, b, seen in ticks:
        if not seen:
            continue
        column = (ink[max(0, seg.y0 - height):seg.y0, a:b] > 0).any(axis=1)[::-1]
        gaps = np.flatnonzero(~column)
        tall.append(int(gaps[0]) if gaps.size else column.size)
    tall_a = np.array(tall, float)
    if tall_a.max() > _TICK_MAX * height:
        return False
    inner = tall_a[1:-1]
    if inner.size == 0:
        return True
    mid = float(np.median(inner))
    return (np.count_nonzero(np.abs(inner - mid) <= _TICK_SPREAD * mid + 2) >= 0.75 * inner.size
            and min(tall_a[0], tall_a[-1]) >= (1 - _TICK_SPREAD) * mid)


def _closed(boxes: list[Rect], ink: np.ndarray, px_per_mm: float) -> bool:
    """Whether a horizontal line runs across one of ``boxes`` and its ticks in the box's upper
    part (a top wall: a closed box, a checkbox, a table row), not an open cell.

    Rows of ink, not of the line mask: the mask joins the tops of neighbouring
    digits across the ticks."""
    band = max(2, int(round(0.6 * px_per_mm)))
    reach = max(2, int(round(0.3 * px_per_mm)))
    for b in boxes:
        r0, r1 = max(0, b.y0 - band), b.y0 + int(round(_TOP_PART * b.h))
        inside = (ink[r0:r1, b.x0:b.x1] > 0).mean(axis=1) >= _TOP_LINE
        left = (ink[r0:r1, max(0, b.x0 - reach):b.x0] > 0).any(axis=1)
        right = (ink[r0:r1, b.x1:b.x1 + reach] > 0).any(axis=1)
        if (inside & left & right).any():  # across the box and on over both its sides
            return True
    return False


def _extend(boxes: list[Rect], ticks: list[tuple[int, int, bool]], seg: Rect, pitch: float,
            ink: np.ndarray, taken: np.ndarray) -> tuple[list[Rect], int]:
    """Boxes added where the baseline runs on beyond the outermost ticks (see the module notes)."""
    under = (ink[seg.y0:seg.y1] > 0).any(axis=0)
    w = int(round(float(np.median([b.w for b in boxes]))))
    y0, y1 = boxes[0].y0, boxes[0].y1
    added = 0
    for step in (-1, 1):
        for _ in range(_MAX_EXTEND):
            end = boxes[0] if step < 0 else boxes[-1]
            x0 = int(round(end.x0 + step * pitch))
            x1 = x0 + w
            # the line runs on under the new box, at least _RUN_ON of a pitch past its last tick
            a, b = (x0 + int(round((1 - _RUN_ON) * w)), end.x0) if step < 0 else \
                (end.x1, x1 - int(round((1 - _RUN_ON) * w)))
            if (x0 < 0 or x1 > ink.shape[1] or taken[y0:y1, x0:x1].any()
                    or not (seg.x0 <= a and b <= seg.x1) or b <= a
                    or float(under[a:b].mean()) < _UNDER):
                break
            boxes = [Rect(x0, y0, x1, y1)] + boxes if step < 0 else boxes + [Rect(x0, y0, x1, y1)]
            added += 1
    return boxes, added


def add_open_combs(fields: list[Field], ink: np.ndarray, lines: np.ndarray, px_per_mm: float,
                   min_box_mm: float, max_box_mm: float, *,
                   segments: list[Rect] | None = None) -> list[Field]:
    """The page's fields of closed boxes ``fields`` and its open combs.

    When the page has open combs, a closed field of one or two boxes that
    overlaps one of them is dropped (a stroke and a tick can close a "box" in
    an open cell), and the small-field rule is applied to all fields again
    (:func:`drop_odd_small`).  A page without open combs keeps ``fields``.
    """
    opened = open_combs(ink, lines, px_per_mm, min_box_mm, max_box_mm,
                        [boxes for boxes, _ in fields], segments=segments)
    if not opened:
        return fields
    covered = np.zeros(ink.shape, bool)
    for boxes, _ in opened:
        for b in boxes:
            covered[b.y0:b.y1, b.x0:b.x1] = True
    kept = [(boxes, doubts) for boxes, doubts in fields if len(boxes) > _SMALL_FIELD
            or not any(covered[b.y0:b.y1, b.x0:b.x1].any() for b in boxes)]
    return drop_odd_small(kept + opened)


def drop_odd_small(fields: list[Field]) -> list[Field]:
    """Keep a field of one or two boxes only when its boxes have the page's usual size.

    The usual size is the median box of the fields of more boxes (of all
    fields when there are none): the rule of :mod:`recognizer.page.box_rows`,
    applied again to all the page's fields once open combs are among them.
    """
    big = [r for boxes, _ in fields if len(boxes) > _SMALL_FIELD for r in boxes]
    ref = big or [r for boxes, _ in fields for r in boxes]
    if not ref:
        return []
    w = float(np.median([r.w for r in ref]))
    h = float(np.median([r.h for r in ref]))
    return [(boxes, doubts) for boxes, doubts in fields if len(boxes) > _SMALL_FIELD or all(
        abs(r.w - w) <= _SMALL_TOLERANCE * w and abs(r.h - h) <= _SMALL_TOLERANCE * h
        for r in boxes)]
