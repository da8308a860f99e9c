"""Hand-drawn groups for the sort wall's order: many 1s and a 7 among them, all read as 1.

Strokes drawn with OpenCV (made-up data: geometry only). ``odd_page`` stores
them as one page whose boxes are all read as the same digit with a low
confidence, so every box is to check and the sort wall shows them as one group.
"""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np

from recognizer.batch.store import Batch
from recognizer.digits.preprocess import to_model_input
from recognizer.page.boxes import Box
from recognizer.reading.page import DigitRead, FieldRead, PageRead, field_value

from .batches import BOX_H, BOX_W, DPI, one_hot


def draw_digit(kind: str, rng: np.random.Generator, size: tuple[int, int] = (BOX_H, BOX_W)) -> np.ndarray:
    """A (h, w) uint8 crop, 0 = ink: a "1" (a near-upright stroke) or a "7" (a bar and a slanted stroke)."""
    h, w = size
    crop = np.full((h, w), 255, np.uint8)
    thick = int(rng.integers(3, 6))
    top, bottom = int(h * 0.15 + rng.integers(-2, 3)), int(h * 0.85 + rng.integers(-2, 3))
    lean = int(rng.integers(-3, 4))
    if kind == "1":
        x = w // 2 + int(rng.integers(-3, 4))
        cv2.line(crop, (x + lean, top), (x - lean, bottom), 0, thick)
    elif kind == "7":
        left, right = int(w * 0.2), int(w * 0.8)
        cv2.line(crop, (left, top), (right, top), 0, thick)
        cv2.line(crop, (right, top), (int(w * 0.4) + lean, bottom), 0, thick)
    else:
        raise ValueError(kind)
    return crop


def model_input(crop: np.ndarray) -> np.ndarray:
    """The model input of a drawn crop (ink = darkness)."""
    return to_model_input((255 - crop.astype(np.float32)) / 255)


def odd_page(source: str, kinds: list[str], *, read: str = "1", confidence: float = 0.6,
             seed: int = 0) -> PageRead:
    """One page, one field ``f01`` with a box per entry of ``kinds``, every box read as ``read``."""
    rng = np.random.default_rng(seed)
    image = np.full((BOX_H + 60, 40 + BOX_W * len(kinds)), 255, np.uint8)
    boxes, digits = [], []
    for i, kind in enumerate(kinds):
        box = Box(20 + BOX_W * i + 2, 30, 20 + BOX_W * (i + 1) - 1, 30 + BOX_H)
        image[box.y0:box.y1, box.x0:box.x1] = draw_digit(kind, rng, (box.height, box.width))
        crop = image[box.y0:box.y1, box.x0:box.x1].copy()
        digits.append(DigitRead(i, False, read, confidence, one_hot(read, confidence), crop))
        boxes.append(box)
    value, gap = field_value([d.text for d in digits])
    return PageRead(Path(source), 1, DPI, 0.0, [FieldRead("f01", tuple(boxes), digits, value, gap, ())],
                    image=image)


def odd_batch(path: Path, pages: list[list[str]], *, read: str = "1") -> Batch:
    """A batch (threshold 0.9) of ``odd_page`` pages, one file each; the caller closes it."""
    batch = Batch.create(path)
    with batch.transaction() as conn:
        batch.update_settings(conn, threshold=0.9, model_version="fake-1")
    for n, kinds in enumerate(pages):
        name = f"odd_{n + 1:02d}.png"
        file_id = batch.add_file(name, f"sha-{name}", 1)
        batch.add_result(file_id, odd_page(name, kinds, read=read, seed=n), model_version="fake-1")
        batch.mark_complete([file_id])
    return batch
