"""How the sort wall draws its crops: a crop tile (with the odd ones marked) and a group's typical shape.

An odd crop (:mod:`recognizer.review.oddness`) is told from the others in three
ways that do not need colour: it comes first in its group, it has a thick
dark frame, and it carries its rank ("1" the oddest) in a badge, with the word
"odd" under it. The typical shape is the group's mean model input drawn as a
crop is drawn (dark ink on paper).
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import QRectF, QSize, Qt
from PySide6.QtGui import QColor, QFont, QImage, QPainter, QPen, QPixmap

from ..batch_access import to_qimage

__all__ = ["TILE", "TYPICAL", "crop_tile", "typical_tile"]

#: A crop's tile on the wall.
TILE = QSize(44, 52)
#: The typical shape beside a group.
TYPICAL = QSize(52, 52)
_INK = QColor("#1A1A1A")
_ODD = QColor("#D55E00")  # vermillion (Okabe & Ito), with the frame width and the badge it is not colour alone


def crop_tile(image: QImage | None, *, rank: int = 0) -> QPixmap:
    """The tile of one crop; ``rank`` > 0 marks it odd (thick frame, rank badge)."""
    tile = QPixmap(TILE)
    tile.fill(QColor("white"))
    painter = QPainter(tile)
    painter.setRenderHint(QPainter.RenderHint.SmoothPixmapTransform)
    inset = 5 if rank else 2
    if image is not None and not image.isNull():
        room = QRectF(inset, inset, TILE.width() - 2 * inset, TILE.height() - 2 * inset)
        scale = min(room.width() / image.width(), room.height() / image.height())
        w, h = image.width() * scale, image.height() * scale
        painter.drawImage(QRectF(room.x() + (room.width() - w) / 2, room.y() + (room.height() - h) / 2, w, h), image)
    if rank:
        painter.setPen(QPen(_INK, 4))
        painter.drawRect(QRectF(2, 2, TILE.width() - 4, TILE.height() - 4))
        painter.setPen(QPen(_ODD, 1))
        painter.drawRect(QRectF(4.5, 4.5, TILE.width() - 9, TILE.height() - 9))
        badge = QRectF(0, 0, 17, 15)
        painter.fillRect(badge, _INK)
        font = QFont()
        font.setPixelSize(11)
        font.setBold(True)
        painter.setFont(font)
        painter.setPen(QColor("white"))
        painter.drawText(badge, Qt.AlignmentFlag.AlignCenter, str(rank) if rank < 100 else "…")
    else:
        painter.setPen(QPen(QColor("#B0B0B0"), 1))
        painter.drawRect(QRectF(0.5, 0.5, TILE.width() - 1, TILE.height() - 1))
    painter.end()
    return tile


def typical_tile(typical: np.ndarray) -> QPixmap:
    """The group's typical shape ((28, 28) model input, 0..1 white ink on black) drawn like a crop."""
    paper = (255 - np.clip(np.asarray(typical, np.float32), 0, 1) * 255).astype(np.uint8)
    image = to_qimage(paper)
    tile = QPixmap(TYPICAL)
    tile.fill(QColor("white"))
    painter = QPainter(tile)
    painter.setRenderHint(QPainter.RenderHint.SmoothPixmapTransform)
    painter.drawImage(QRectF(2, 2, TYPICAL.width() - 4, TYPICAL.height() - 4), image)
    painter.setPen(QPen(QColor("#7F7F7F"), 1, Qt.PenStyle.DashLine))
    painter.drawRect(QRectF(0.5, 0.5, TYPICAL.width() - 1, TYPICAL.height() - 1))
    painter.end()
    return tile
