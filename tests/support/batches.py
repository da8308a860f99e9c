"""Hand-made pages and batches for the batch and review tests.

A stand-in digit model (:class:`FakeModel`), pages built by hand with known
readings (:func:`make_page`), a small card (:data:`CARD`), batches with a fixed
threshold, a stand-in for ``read_scans`` and small files standing in for scans.
"""

from __future__ import annotations

import time
from pathlib import Path

import cv2
import numpy as np

from recognizer.batch.store import Batch
from recognizer.digits.model import CLASSES, NOT_A_DIGIT
from recognizer.page.boxes import Box
from recognizer.reading.page import UNREADABLE_MARK, DigitRead, FieldRead, PageRead, field_value
from recognizer.scans.files import ScanProblem

BOX_W, BOX_H = 60, 72  # a 6 x 7.2 mm box at 254 dpi (10 px/mm)
DPI = 254.0


class FakeModel:
    """Stand-in digit model with the attributes the batch uses.

    The class read is the cell's mean ink scaled to 0..10 (10 = not a digit),
    with probability 0.9; ``threshold_for(t)`` is ``1 - 100 t`` (0.9 for 0.1 %).
    """

    def __init__(self, version: str = "fake-1"):
        self.version = version

    def predict_proba(self, cells: np.ndarray) -> np.ndarray:
        ink = np.asarray(cells, np.float64).reshape(len(cells), -1).mean(axis=1)
        best = np.clip((ink * 40).astype(int), 0, NOT_A_DIGIT)
        probs = np.full((len(cells), len(CLASSES)), 0.01)
        probs[np.arange(len(cells)), best] = 0.9
        return probs

    def threshold_for(self, target_residual_error: float) -> float:
        return float(np.clip(1.0 - 100.0 * target_residual_error, 0.0, 1.0))


def one_hot(text: str, confidence: float) -> np.ndarray:
    """Probabilities with ``confidence`` on the class of ``text``, the rest spread evenly."""
    k = NOT_A_DIGIT if text == UNREADABLE_MARK else int(text)
    probs = np.full(len(CLASSES), (1.0 - confidence) / (len(CLASSES) - 1))
    probs[k] = confidence
    return probs


def make_page(source, number: int, spec: dict[str, list[tuple[str, float]]], *,
              warnings=(), problem: str | None = None, doubts: dict[str, tuple[str, ...]] | None = None,
              template: str | None = None) -> PageRead:
    """A page read, built by hand: ``spec`` maps field name -> per box (text, confidence).

    Text ``""`` is an empty box. The page image has one row of ruled boxes per
    field with a thick ring of ink in each written box. ``doubts`` gives
    fields doubts about their boxes; ``template`` names the template that
    read the page (its rules are not checked).
    """
    if problem:
        return PageRead(Path(source), number, DPI, 0.0, [], problem=problem, warnings=list(warnings),
                        image=np.full((100, 100), 255, np.uint8))
    width = 40 + BOX_W * max((len(b) for b in spec.values()), default=1)
    image = np.full((40 + 110 * len(spec), width), 255, np.uint8)
    fields = []
    for row, (name, boxes_spec) in enumerate(spec.items()):
        y0 = 30 + 110 * row
        boxes, digits = [], []
        for i, (text, conf) in enumerate(boxes_spec):
            box = Box(20 + BOX_W * i + 2, y0, 20 + BOX_W * (i + 1) - 1, y0 + BOX_H)
            cv2.rectangle(image, (box.x0 - 2, box.y0 - 2), (box.x1, box.y1), 0, 2)
            if text:
                cv2.ellipse(image, ((box.x0 + box.x1) // 2, (box.y0 + box.y1) // 2),
                            (12 + 2 * i % 7, 22), 0, 0, 360, 0, 5)
            crop = image[box.y0:box.y1, box.x0:box.x1].copy()
            digits.append(DigitRead(i, not text, text, conf if text else 0.0,
                                    one_hot(text, conf) if text else None, crop))
            boxes.append(box)
        value, gap = field_value([d.text for d in digits])
        fields.append(FieldRead(name, tuple(boxes), digits, value, gap, tuple((doubts or {}).get(name, ()))))
    return PageRead(Path(source), number, DPI, 0.4, fields, warnings=list(warnings), image=image,
                    template=template)


#: A small card: grower number, a 3-box count and a 2-box block.
CARD = {
    "f01": [("0", 0.99), ("4", 0.97), ("1", 0.98)],
    "f02": [("", 0.0), ("1", 0.5), ("7", 0.95)],
    "f03": [("2", 0.99), ("3", 0.99)],
}


def new_batch(path: Path, *, threshold: float = 0.9) -> Batch:
    """An empty batch with a fixed threshold (as the first ingest would set it)."""
    batch = Batch.create(path)
    with batch.transaction() as conn:
        batch.update_settings(conn, threshold=threshold, model_version="fake-1")
    return batch


def add_page(batch: Batch, name: str, number: int = 1, spec=CARD, **kw) -> int:
    """Store a hand-made page of file ``name``; return the page id."""
    rows = batch.rows("SELECT id FROM files WHERE path = ?", (name,))
    file_id = rows[0][0] if rows else batch.add_file(name, f"sha-{name}", 1)
    return batch.add_result(file_id, make_page(name, number, spec, **kw), model_version="fake-1")


def field_id(batch: Batch, file: str, page: int, name: str) -> int:
    return batch.rows(
        "SELECT f.id FROM fields f JOIN pages p ON p.id = f.page_id JOIN files fl ON fl.id = p.file_id "
        "WHERE fl.path = ? AND p.page = ? AND f.name = ?", (file, page, name))[0][0]


def field_row(batch: Batch, fid: int):
    return batch.rows("SELECT * FROM fields WHERE id = ?", (fid,))[0]


def digit_ids(batch: Batch, fid: int) -> list[int]:
    return [r[0] for r in batch.rows("SELECT id FROM digits WHERE field_id = ? ORDER BY box", (fid,))]


def fake_reader(pages_per_file: int, *, delay: float = 0.0, spec=CARD):
    """A stand-in for ``read_scans``: ``pages_per_file`` hand-made pages per file, honouring ``skip``."""

    def read_scans(files, *, settings, workers, model, skip):
        for path in files:
            path = Path(path)
            if path.suffix == ".bad":
                yield ScanProblem(path, None, "not a scan")
                continue
            for number in range(1, pages_per_file + 1):
                if skip(path, number):
                    continue
                time.sleep(delay)
                yield make_page(path, number, spec)

    return read_scans


def scan_files(folder: Path, names: list[str]) -> list[Path]:
    """Small files with distinct contents standing in for scans."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in names:
        path = folder / name
        path.write_bytes(f"scan {name}".encode())
        paths.append(path)
    return paths
