"""The page image with every field outlined: colour and mark by review state.

Wheel zooms around the pointer, dragging pans, a click on a field selects it
(:attr:`PageView.field_clicked`), :meth:`PageView.zoom_to_fit` shows the
whole page.
"""

from __future__ import annotations

from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QPainter, QPen, QPixmap
from PySide6.QtWidgets import (
    QGraphicsItem,
    QGraphicsPixmapItem,
    QGraphicsRectItem,
    QGraphicsScene,
    QGraphicsSimpleTextItem,
    QGraphicsView,
)

from ..look import STATE_LINES, STATE_MARKS, STATE_WORDS, colour

__all__ = ["PageView"]


class _FieldOutline(QGraphicsRectItem):
    def __init__(self, field_id: int, name: str, rect: QRectF) -> None:
        super().__init__(rect)
        self.field_id = field_id
        self.name = name
        self.mark = QGraphicsSimpleTextItem(self)
        font = QFont()
        font.setPixelSize(max(14, int(rect.height() * 0.45)))
        font.setBold(True)
        self.mark.setFont(font)
        self.mark.setPos(rect.right() + 6, rect.top())
        self.state = ""

    def set_state(self, state: str, selected: bool) -> None:
        self.state = state
        style, width = STATE_LINES.get(state, (Qt.PenStyle.SolidLine, 1))
        c = colour(state)
        pen = QPen(c, width + (3 if selected else 0), style)
        pen.setCosmetic(False)
        self.setPen(pen)
        fill = QColor(c)
        fill.setAlpha(70 if selected else 22)
        self.setBrush(QBrush(fill))
        self.mark.setText(STATE_MARKS.get(state, ""))
        self.mark.setBrush(QBrush(c))
        self.setToolTip(f"Field {self.name}: {STATE_WORDS.get(state, state)}")


class PageView(QGraphicsView):
    """Shows one page and its field outlines."""

    field_clicked = Signal(int)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setScene(QGraphicsScene(self))
        self.setRenderHints(QPainter.RenderHint.Antialiasing | QPainter.RenderHint.SmoothPixmapTransform)
        self.setDragMode(QGraphicsView.DragMode.ScrollHandDrag)
        self.setTransformationAnchor(QGraphicsView.ViewportAnchor.AnchorUnderMouse)
        self.setBackgroundBrush(QColor("#3a3a3a"))
        self.setAccessibleName("Page image")
        self.setToolTip("Page image: wheel to zoom, drag to move, click a field to check it (Ctrl+0 fits the page)")
        self._pixmap: QGraphicsPixmapItem | None = None
        self._outlines: dict[int, _FieldOutline] = {}
        self._selected: int | None = None
        self._press: QPointF | None = None
        self.page_id: int | None = None
        self._fit = True

    # ---- content

    def show_page(self, page_id: int | None, image, fields) -> None:
        """Show ``image`` (QImage or None) with ``fields`` = [(field id, name, state, boxes), ...]."""
        scene = self.scene()
        scene.clear()
        self._outlines.clear()
        self._pixmap = None
        self.page_id = page_id
        if image is None:
            text = scene.addText("No image for this page." if page_id is not None else "")
            text.setDefaultTextColor(QColor("white"))
            scene.setSceneRect(text.boundingRect())
            return
        self._pixmap = scene.addPixmap(QPixmap.fromImage(image))
        self._pixmap.setTransformationMode(Qt.TransformationMode.SmoothTransformation)
        for field_id, name, state, boxes in fields:
            if not boxes:
                continue
            x0 = min(b[0] for b in boxes)
            y0 = min(b[1] for b in boxes)
            x1 = max(b[2] for b in boxes)
            y1 = max(b[3] for b in boxes)
            outline = _FieldOutline(field_id, name, QRectF(x0 - 4, y0 - 4, x1 - x0 + 8, y1 - y0 + 8))
            outline.setFlag(QGraphicsItem.GraphicsItemFlag.ItemIsSelectable, False)
            scene.addItem(outline)
            self._outlines[field_id] = outline
            outline.set_state(state, field_id == self._selected)
        scene.setSceneRect(QRectF(self._pixmap.boundingRect()).adjusted(-20, -20, 60, 20))
        if self._fit:
            self.zoom_to_fit()

    def update_states(self, states: dict[int, str]) -> None:
        for field_id, state in states.items():
            outline = self._outlines.get(field_id)
            if outline is not None:
                outline.set_state(state, field_id == self._selected)

    def select_field(self, field_id: int | None, *, centre: bool = True) -> None:
        previous, self._selected = self._selected, field_id
        for fid in (previous, field_id):
            outline = self._outlines.get(fid) if fid is not None else None
            if outline is not None:
                outline.set_state(outline.state, fid == field_id)
        outline = self._outlines.get(field_id) if field_id is not None else None
        if centre and outline is not None and not self._fit:
            self.ensureVisible(outline.rect(), 40, 40)

    def field_ids(self) -> list[int]:
        return list(self._outlines)

    def outline_rect(self, field_id: int) -> QRectF:
        return self._outlines[field_id].rect()

    # ---- zoom and pan

    def zoom_to_fit(self) -> None:
        self._fit = True
        if self._pixmap is not None:
            self.fitInView(self.scene().sceneRect(), Qt.AspectRatioMode.KeepAspectRatio)

    def zoom_by(self, factor: float) -> None:
        self._fit = False
        scale = self.transform().m11() * factor
        if 0.05 <= scale <= 8:
            self.scale(factor, factor)

    def wheelEvent(self, event) -> None:  # noqa: N802 (Qt name)
        self.zoom_by(1.25 if event.angleDelta().y() > 0 else 0.8)

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        if self._fit:
            self.zoom_to_fit()

    def mousePressEvent(self, event) -> None:  # noqa: N802
        self._press = event.position()
        super().mousePressEvent(event)

    def mouseReleaseEvent(self, event) -> None:  # noqa: N802
        super().mouseReleaseEvent(event)
        if self._press is not None and (event.position() - self._press).manhattanLength() < 5:
            for item in self.items(event.position().toPoint()):
                target = item if isinstance(item, _FieldOutline) else item.parentItem()
                if isinstance(target, _FieldOutline):
                    self.field_clicked.emit(target.field_id)
                    break
        self._press = None
