"""The page image with every field outlined: colour and mark by review state.

The page is fitted to the width of its view (:meth:`PageView.zoom_to_fit`,
Ctrl+0), so its digits are as large as the view allows; the field being
checked is scrolled into view whenever it changes. The wheel scrolls, as in
any document viewer; Ctrl+wheel zooms around the pointer, Ctrl++ and Ctrl+-
zoom on the field being checked (the window's View menu). Dragging pans, a
click on a field selects it (:attr:`PageView.field_clicked`). A zoom the clerk
chose is kept from page to page (the same form, the same place) until Ctrl+0.
"""

from __future__ import annotations

from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QPainter, QPen, QPixmap, QTransform
from PySide6.QtWidgets import (
    QGraphicsItem,
    QGraphicsPixmapItem,
    QGraphicsRectItem,
    QGraphicsScene,
    QGraphicsSimpleTextItem,
    QGraphicsView,
)

from ..look import STATE_LINES, STATE_MARKS, STATE_WORDS, colour

__all__ = ["PageView", "ZOOM_HELP"]

#: The page image's keys, for the tooltip and the F1 help.
ZOOM_HELP = ("Ctrl++ zoom in · Ctrl+- zoom out · Ctrl+0 page to the width of the view · Ctrl+wheel zoom · "
             "wheel scroll · drag to move · click a field to check it")
_MIN_SCALE, _MAX_SCALE = 0.05, 8.0


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
        self.setToolTip("Page image: " + ZOOM_HELP)
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
        if image is None:  # drawn at its own size, whatever the zoom of the page before
            text = scene.addText("No image for this page: it could not be read (see the line under the page list)."
                                 if page_id is not None else "")
            font = QFont()
            font.setPointSize(12)
            text.setFont(font)
            text.setTextWidth(max(200, self.viewport().width() - 40))
            text.setDefaultTextColor(QColor("white"))
            self.resetTransform()
            scene.setSceneRect(text.boundingRect().adjusted(-20, -20, 20, 20))
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
        else:
            self._show_selected()

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
        if centre:
            self._show_selected()

    def _show_selected(self) -> None:
        """Scroll the field being checked into view (with a margin round it)."""
        outline = self._outlines.get(self._selected) if self._selected is not None else None
        if outline is not None:
            view = self.viewport().rect()
            self.ensureVisible(outline.rect(), min(80, view.width() // 4), min(120, view.height() // 4))

    def field_ids(self) -> list[int]:
        return list(self._outlines)

    def outline_rect(self, field_id: int) -> QRectF:
        return self._outlines[field_id].rect()

    # ---- zoom and pan

    @property
    def fitted(self) -> bool:
        """Whether the page is kept fitted to the width of the view."""
        return self._fit

    def zoom(self) -> float:
        """Screen pixels per page pixel."""
        return self.transform().m11()

    def zoom_to_fit(self) -> None:
        """Fit the page to the width of the view (Ctrl+0); the field being checked stays in view."""
        self._fit = True
        if self._pixmap is not None:
            width = self.scene().sceneRect().width()
            scale = (self.viewport().width() - 2) / width if width > 0 else 1.0
            self.setTransform(QTransform.fromScale(scale, scale))
            self._show_selected()

    def zoom_by(self, factor: float, *, at_pointer: bool = False) -> None:
        """Zoom in (factor > 1) or out, on the field being checked (or under the pointer)."""
        if self._pixmap is None:
            return
        scale = max(_MIN_SCALE, min(_MAX_SCALE, self.transform().m11() * factor))
        self._fit = False
        anchor = self.transformationAnchor()
        if not at_pointer:
            self.setTransformationAnchor(QGraphicsView.ViewportAnchor.AnchorViewCenter)
        self.setTransform(QTransform.fromScale(scale, scale))
        self.setTransformationAnchor(anchor)
        if not at_pointer:
            self._show_selected()

    def wheelEvent(self, event) -> None:  # noqa: N802 (Qt name)
        if event.modifiers() & Qt.KeyboardModifier.ControlModifier:
            self.zoom_by(1.25 if event.angleDelta().y() > 0 else 0.8, at_pointer=True)
            event.accept()
        else:
            super().wheelEvent(event)

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
