"""The form template editor: the reference page with its fields, and what each field is.

A template (:mod:`recognizer.forms.template`) names and types the digit fields of
one form design. This dialog shows the reference page with every field's
boxes drawn; the clerk selects a field (click it, or pick it in the list),
names it, sets its type and rules, removes shapes that are not digit fields,
draws a new run of boxes, moves a field, splits a run in two or joins two
neighbouring runs, and saves the file. Every change is made by the library's
editing steps (:func:`recognizer.forms.editing.update_field`, ``split_field``,
``join_fields`` ...), which refuse what would not hold together; the message
is shown under the page. What the form (name, type, rules) and the Sums box
hold is kept when the clerk moves to another field, changes a field's shape
or saves, without "Apply to field"; an edit the template refuses keeps its
field selected, with the reason, until it is fixed or the field is chosen
again (which puts it back as it was).

Keys: Ctrl+S save, Ctrl+Enter apply the field's settings, Del delete the
field, Ctrl+D draw a new run (then drag a rectangle on the page), arrows
move the field (Shift: 10 pixels), Ctrl+K split at the chosen box, Ctrl+J
join with the field to its right, Ctrl+Up / Ctrl+Down previous / next field,
Esc close.

This module is longer than 600 lines: the editor's page canvas, its form and
the editing steps it drives share the selected field and are kept together.
"""

from __future__ import annotations

import math
from pathlib import Path

from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QKeySequence, QPainter, QPen, QPixmap, QShortcut
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDialog,
    QFormLayout,
    QGraphicsPixmapItem,
    QGraphicsRectItem,
    QGraphicsScene,
    QGraphicsSimpleTextItem,
    QGraphicsView,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QListWidget,
    QPlainTextEdit,
    QPushButton,
    QSpinBox,
    QSplitter,
    QVBoxLayout,
    QWidget,
)

from recognizer.forms.checkdigits import CHECK_SYSTEMS
from recognizer.forms.drafting import draft_from_scan as draft_scan
from recognizer.forms.editing import (
    add_field,
    delete_field,
    join_fields,
    move_field,
    parse_sum,
    run_boxes,
    set_sums,
    split_field,
    sum_text,
    update_field,
)
from recognizer.forms.template import DATE_ORDERS, FIELD_TYPES, Template, TemplateError
from recognizer.forms.template_file import save_template

from ..batch_access import to_qimage

__all__ = ["TemplateEditor", "draft_from_scan", "TYPE_WORDS"]

#: The field types in words a clerk knows.
TYPE_WORDS = {
    "digits": "Digits as written (a number or code, zeros kept)",
    "integer": "Whole number",
    "decimal": "Number with decimals",
    "date": "Date",
    "code": "Code with a check digit",
}
_SELECTED = QColor("#D55E00")
_FIELD = QColor("#0072B2")


def draft_from_scan(path: str | Path, *, name: str | None = None) -> Template | str:
    """A draft template from the first page of a form scan (:func:`recognizer.forms.drafting.draft_from_scan`),
    or the reason there is none, after the scan's file name."""
    draft = draft_scan(path, name=name)
    return draft.template if draft else f"{Path(path).name}: {draft.problem}"


class _PageCanvas(QGraphicsView):
    """The reference page; click selects, drag moves the field or draws a run."""

    clicked = Signal(QPointF)
    dragged = Signal(QPointF, QPointF)   # start, end (reference pixels)
    nudged = Signal(int, int)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setScene(QGraphicsScene(self))
        self.setRenderHint(QPainter.RenderHint.SmoothPixmapTransform)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self.setAccessibleName("Form page")
        self.setToolTip("Click a field to select it; drag it to move it (or use the arrow keys, "
                        "Shift for bigger steps). After 'Draw a new run' (Ctrl+D), drag a rectangle "
                        "around the boxes.")
        self._start: QPointF | None = None
        self._band: QGraphicsRectItem | None = None

    def mousePressEvent(self, event) -> None:  # noqa: N802 (Qt name)
        if event.button() == Qt.MouseButton.LeftButton:
            self._start = self.mapToScene(event.position().toPoint())
            self.clicked.emit(self._start)
        super().mousePressEvent(event)

    def mouseMoveEvent(self, event) -> None:  # noqa: N802
        if self._start is not None:
            end = self.mapToScene(event.position().toPoint())
            if self._band is None:
                self._band = self.scene().addRect(QRectF(), QPen(_SELECTED, 3, Qt.PenStyle.DashLine))
                self._band.setZValue(10)
            self._band.setRect(QRectF(self._start, end).normalized())
        super().mouseMoveEvent(event)

    def mouseReleaseEvent(self, event) -> None:  # noqa: N802
        if self._start is not None and event.button() == Qt.MouseButton.LeftButton:
            end = self.mapToScene(event.position().toPoint())
            if (end - self._start).manhattanLength() > 4:
                self.dragged.emit(self._start, end)
        self._start = None
        if self._band is not None:
            self.scene().removeItem(self._band)
            self._band = None
        super().mouseReleaseEvent(event)

    def keyPressEvent(self, event) -> None:  # noqa: N802
        steps = {Qt.Key.Key_Left: (-1, 0), Qt.Key.Key_Right: (1, 0), Qt.Key.Key_Up: (0, -1), Qt.Key.Key_Down: (0, 1)}
        if event.key() in steps and not event.modifiers() & Qt.KeyboardModifier.ControlModifier:
            dx, dy = steps[event.key()]
            k = 10 if event.modifiers() & Qt.KeyboardModifier.ShiftModifier else 1
            self.nudged.emit(dx * k, dy * k)
            return
        super().keyPressEvent(event)

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        self.fitInView(self.sceneRect(), Qt.AspectRatioMode.KeepAspectRatio)


class TemplateEditor(QDialog):
    """Edit a form template and save it.

    Parameters
    ----------
    template : Template
        The template to edit (a draft from :func:`draft_from_scan`, or one loaded from a file).
    path : path, optional
        Where Save writes; the template loaded from there has its version raised on saving.
    loaded : bool
        Whether ``template`` was read from ``path`` (then Save raises its version).
    folder : path, optional
        Where Save offers to write a template without ``path`` (the window gives the
        folder of the batch and its scans); default: the current folder.
    """

    saved = Signal(Path)

    def __init__(self, template: Template, path: str | Path | None = None, *, loaded: bool = False,
                 folder: str | Path | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.folder = Path(folder) if folder is not None else None
        self.setWindowTitle("Form template")
        self.setAccessibleName("Form template editor")
        self.template = template
        self.path = Path(path) if path is not None else None
        self._bump = loaded
        self.selected: str | None = template.fields[0].name if template.fields else None
        self.drawing = False
        #: The form (name, type, rules) or the Sums box holds edits not yet in ``template``.
        self._form_dirty = self._sums_dirty = False
        self._filling = False
        self._build()
        self._show_page()
        self._fill_list()
        self.resize(1300, 820)

    # ------------------------------------------------------------------ building

    def _build(self) -> None:
        self.canvas = _PageCanvas()
        self.canvas.clicked.connect(self._clicked)
        self.canvas.dragged.connect(self._dragged)
        self.canvas.nudged.connect(self.move_selected)
        self.message = QLabel(" ")
        self.message.setWordWrap(True)
        self.message.setAccessibleName("Message")
        left = QWidget()
        lv = QVBoxLayout(left)
        lv.setContentsMargins(0, 0, 0, 0)
        lv.addWidget(self.canvas, 1)
        lv.addWidget(self.message)

        self.fields = QListWidget()
        self.fields.setAccessibleName("Fields")
        self.fields.setToolTip("The template's fields, in reading order of the file (Ctrl+Up / Ctrl+Down)")
        self.fields.currentTextChanged.connect(lambda name: self.select(name) if name else None)

        self.name_edit = QLineEdit()
        self.name_edit.setAccessibleName("Field name")
        self.name_edit.setToolTip("Letters, digits and _, starting with a letter; this is the CSV column")
        self.type_box = QComboBox()
        self.type_box.setAccessibleName("Field type")
        for kind in FIELD_TYPES:
            self.type_box.addItem(TYPE_WORDS[kind], kind)
        self.type_box.currentIndexChanged.connect(self._type_changed)
        self.decimals = QSpinBox()
        self.decimals.setRange(1, 9)
        self.decimals.setAccessibleName("Boxes after the decimal point")
        self.date_order = QComboBox()
        self.date_order.setEditable(True)
        self.date_order.addItems(DATE_ORDERS)
        self.date_order.setAccessibleName("Date box order")
        self.date_order.setToolTip("Order of the date's boxes: DD day, MM month, YYYY or YY year")
        self.check_digit = QComboBox()
        self.check_digit.setAccessibleName("Check digit system")
        self.check_digit.addItem("none", None)
        for key, (title, _n) in CHECK_SYSTEMS.items():
            self.check_digit.addItem(title, key)
        self.required = QCheckBox("Must be filled in")
        self.required.setAccessibleName("Required")
        self.minimum = QLineEdit()
        self.minimum.setAccessibleName("Smallest allowed value")
        self.minimum.setToolTip("A number, or a date as 2026-08-10; empty for no limit")
        self.maximum = QLineEdit()
        self.maximum.setAccessibleName("Largest allowed value")
        self.maximum.setToolTip(self.minimum.toolTip())
        self.lengths = QLineEdit()
        self.lengths.setAccessibleName("Allowed numbers of digits")
        self.lengths.setToolTip("For example 5, or 4, 5; empty for any")
        self.apply_button = self._button("Apply to field", "Ctrl+Return", self.apply_field,
                                         "Keep the name, type and rules set above for this field")
        form = QFormLayout()
        form.addRow("Name", self.name_edit)
        form.addRow("Type", self.type_box)
        form.addRow("Boxes after the point", self.decimals)
        form.addRow("Date box order", self.date_order)
        form.addRow("Check digit", self.check_digit)
        form.addRow("", self.required)
        form.addRow("Smallest value", self.minimum)
        form.addRow("Largest value", self.maximum)
        form.addRow("Number of digits", self.lengths)

        self.split_at = QSpinBox()
        self.split_at.setAccessibleName("Split after box")
        self.split_at.setToolTip("The first part keeps this many boxes")
        self.split_at.setMinimum(1)
        self.run_count = QSpinBox()
        self.run_count.setRange(1, 40)
        self.run_count.setValue(3)
        self.run_count.setAccessibleName("Boxes in a new run")
        self.sums = QPlainTextEdit()
        self.sums.setAccessibleName("Sum rules")
        self.sums.setToolTip("One per line, as total = part + part (field names)")
        self.sums.setFixedHeight(70)
        self.sums.textChanged.connect(self._sums_touched)
        for signal in (self.name_edit.textChanged, self.type_box.currentIndexChanged, self.decimals.valueChanged,
                       self.date_order.currentTextChanged, self.check_digit.currentIndexChanged,
                       self.required.toggled, self.minimum.textChanged, self.maximum.textChanged,
                       self.lengths.textChanged):
            signal.connect(self._form_touched)

        shapes = QFormLayout()
        split_row = QHBoxLayout()
        split_row.addWidget(self.split_at)
        split_row.addWidget(self._button("Split", "Ctrl+K", self.split_selected,
                                         "Cut the field in two after the chosen box"))
        shapes.addRow("Split after box", split_row)
        draw_row = QHBoxLayout()
        draw_row.addWidget(self.run_count)
        draw_row.addWidget(self._button("Draw a new run", "Ctrl+D", self.start_drawing,
                                        "Then drag a rectangle around the boxes on the page"))
        shapes.addRow("Boxes", draw_row)
        join_delete = QHBoxLayout()
        join_delete.addWidget(self._button("Join with the field to its right", "Ctrl+J", self.join_right,
                                           "Make one field of this one and its right-hand neighbour"))
        join_delete.addWidget(self._button("Delete field", "Del", self.delete_selected,
                                           "Remove a shape that is not a digit field"))

        right = QWidget()
        rv = QVBoxLayout(right)
        rv.addWidget(QLabel("<b>Fields</b>"))
        rv.addWidget(self.fields, 1)
        self.fields.setMaximumHeight(200)
        rv.addLayout(form)
        rv.addWidget(self.apply_button)
        rv.addLayout(shapes)
        rv.addLayout(join_delete)
        rv.addWidget(QLabel("<b>Sums</b> (total = part + part, one per line)"))
        rv.addWidget(self.sums)
        bottom = QHBoxLayout()
        bottom.addStretch(1)
        bottom.addWidget(self._button("Save", "Ctrl+S", self.save, "Write the template file (its version goes up)"))
        bottom.addWidget(self._button("Close", "Esc", self.reject, "Close without saving what is not saved"))
        rv.addLayout(bottom)

        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(left)
        split.addWidget(right)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 1)
        right.setMaximumWidth(480)
        split.setSizes([900, 420])
        outer = QVBoxLayout(self)
        outer.addWidget(split)
        for keys, step in (("Ctrl+Up", -1), ("Ctrl+Down", 1)):
            QShortcut(QKeySequence(keys), self, lambda s=step: self._step(s))

    def _button(self, text: str, keys: str, slot, tip: str) -> QPushButton:
        button = QPushButton(text)
        button.setAccessibleName(text)
        button.setToolTip(f"{tip} ({QKeySequence(keys).toString(QKeySequence.SequenceFormat.NativeText)})")
        QShortcut(QKeySequence(keys), self, slot)
        button.clicked.connect(slot)
        button.setAutoDefault(False)
        return button

    # ------------------------------------------------------------------ showing

    def _show_page(self) -> None:
        ref = self.template.reference
        paper = 255 - ref.image
        item = QGraphicsPixmapItem(QPixmap.fromImage(to_qimage(paper)))
        item.setTransformationMode(Qt.TransformationMode.SmoothTransformation)
        item.setScale(ref.width_px / paper.shape[1])
        item.setZValue(-1)
        self.canvas.scene().addItem(item)
        self.canvas.setSceneRect(QRectF(0, 0, ref.width_px, ref.height_px))
        self._outlines: list = []
        self._draw_fields()

    def _draw_fields(self) -> None:
        scene = self.canvas.scene()
        for item in self._outlines:
            scene.removeItem(item)
        self._outlines = []
        font = QFont()
        font.setPixelSize(max(14, int(self.template.reference.dpi / 8.5)))
        font.setBold(True)
        for f in self.template.fields:
            chosen = f.name == self.selected
            pen = QPen(_SELECTED if chosen else _FIELD, 5 if chosen else 3)
            fill = QColor(_SELECTED if chosen else _FIELD)
            fill.setAlpha(60 if chosen else 25)
            for b in f.boxes:
                rect = scene.addRect(QRectF(b.x0, b.y0, b.width, b.height), pen, QBrush(fill))
                rect.setToolTip(f"{f.name}: {TYPE_WORDS[f.type].lower()}")
                self._outlines.append(rect)
            label = QGraphicsSimpleTextItem(f.name)
            label.setFont(font)
            label.setBrush(QBrush(_SELECTED if chosen else _FIELD))
            x0, y0 = min(b.x0 for b in f.boxes), min(b.y0 for b in f.boxes)
            y1 = max(b.y1 for b in f.boxes)
            # the name goes under the boxes, so the form's own printed caption above them stays readable;
            # a name wider than the room before the next field on the same row is set smaller to fit
            right = min((min(b.x0 for b in g.boxes) for g in self.template.fields
                         if g is not f and min(b.x0 for b in g.boxes) > x0
                         and min(b.y0 for b in g.boxes) < y1 and max(b.y1 for b in g.boxes) > y0), default=None)
            gap = font.pixelSize() * 0.4
            width = label.boundingRect().width()
            if right is not None and x0 + width + gap > right:
                small = QFont(font)
                small.setPixelSize(max(int(font.pixelSize() * 0.6), int(font.pixelSize() * (right - gap - x0) / width)))
                label.setFont(small)
            label.setPos(x0, y1 + font.pixelSize() * 0.15)
            label.setZValue(2)
            backing = scene.addRect(label.sceneBoundingRect().adjusted(-3, -1, 3, 1), QPen(Qt.PenStyle.NoPen),
                                    QBrush(QColor(255, 255, 255)))
            backing.setZValue(1)
            scene.addItem(label)
            self._outlines += [backing, label]

    def _fill_list(self) -> None:
        self.fields.blockSignals(True)
        self.fields.clear()
        names = [f.name for f in self.template.fields]
        self.fields.addItems(names)
        if self.selected in names:
            self.fields.setCurrentRow(names.index(self.selected))
        self.fields.blockSignals(False)
        if not self._sums_dirty:
            self._filling = True
            self.sums.setPlainText("\n".join(sum_text(r) for r in self.template.sums))
            self._filling = False
        self._fill_form()

    def _form_touched(self, *_) -> None:
        if not self._filling:
            self._form_dirty = True

    def _sums_touched(self) -> None:
        if not self._filling:
            self._sums_dirty = True

    def _fill_form(self) -> None:
        f = self.template.field(self.selected) if self.selected else None
        if f is None:
            return
        self._filling = True
        try:
            self._fill_form_from(f)
        finally:
            self._filling = False
        self._form_dirty = False

    def _fill_form_from(self, f) -> None:
        self.name_edit.setText(f.name)
        self.type_box.setCurrentIndex(FIELD_TYPES.index(f.type))
        self.decimals.setValue(max(1, f.decimals))
        self.date_order.setCurrentText(f.date_order or "DDMMYYYY")
        self.check_digit.setCurrentIndex(max(0, self.check_digit.findData(f.check_digit)))
        self.required.setChecked(f.required)
        self.minimum.setText("" if f.minimum is None else _number_text(f.minimum))
        self.maximum.setText("" if f.maximum is None else _number_text(f.maximum))
        self.lengths.setText(", ".join(map(str, f.lengths or ())))
        self.split_at.setMaximum(max(1, len(f.boxes) - 1))
        self._type_changed()

    def _type_changed(self) -> None:
        kind = self.type_box.currentData()
        self.decimals.setEnabled(kind == "decimal")
        self.date_order.setEnabled(kind == "date")
        self.check_digit.setEnabled(kind in ("code", "digits"))
        for edit in (self.minimum, self.maximum):
            edit.setEnabled(kind in ("integer", "decimal", "date"))

    def say(self, text: str, *, problem: bool = False) -> None:
        self.message.setText(text)
        self.message.setStyleSheet("color: #B00020; font-weight: bold;" if problem else "")

    # ------------------------------------------------------------------ changing

    def _change(self, template: Template, done: str, *, selected: str | None = None) -> bool:
        self.template = template
        names = [f.name for f in template.fields]
        self.selected = selected if selected in names else (self.selected if self.selected in names else
                                                            (names[0] if names else None))
        self._draw_fields()
        self._fill_list()
        self.say(done)
        return True

    def _try(self, step, done: str, *, selected: str | None = None, keep: bool = True) -> bool:
        if keep and not self.keep_edits():
            return False
        try:
            template = step()
        except TemplateError as exc:
            again = " (choose the field again to put it back as it was)" if self._form_dirty else ""
            self.say(f"Not changed: {exc}{again}.", problem=True)
            return False
        return self._change(template, done, selected=selected)

    def keep_edits(self) -> bool:
        """Keep what the form and the Sums box hold that is not yet in the template (leaving a
        field, saving, or changing its shape does not lose it); False, with the reason shown,
        when it is refused."""
        if self._form_dirty and self.selected is not None and not self.apply_field():
            return False
        if self._sums_dirty:
            try:
                lines = [line for line in self.sums.toPlainText().splitlines() if line.strip()]
                self.template = set_sums(self.template, [parse_sum(line) for line in lines])
            except TemplateError as exc:
                self.say(f"Sums not kept: {exc}.", problem=True)
                return False
            self._sums_dirty = False
        return True

    def select(self, name: str) -> None:
        """Make ``name`` the field the form and the keys work on (the form's edits of the field
        selected before are kept first; if they are refused, that field stays selected)."""
        if name == self.selected and self._form_dirty:
            self._fill_form()  # the same field again: its form as it is in the template
            self.say(f"Field {name} as it was.")
            return
        if name != self.selected and not self.keep_edits():
            self._fill_list_selection()
            return
        self.selected = name
        self._draw_fields()
        self._fill_list()

    def _fill_list_selection(self) -> None:
        names = [f.name for f in self.template.fields]
        self.fields.blockSignals(True)
        if self.selected in names:
            self.fields.setCurrentRow(names.index(self.selected))
        self.fields.blockSignals(False)

    def _step(self, step: int) -> None:
        names = [f.name for f in self.template.fields]
        if names and self.selected in names:
            self.select(names[(names.index(self.selected) + step) % len(names)])

    def apply_field(self) -> bool:
        """Keep the form's name, type and rules for the selected field."""
        if self.selected is None:
            return False
        kind = self.type_box.currentData()
        try:
            changes = {
                "name": self.name_edit.text().strip(),
                "type": kind,
                "required": self.required.isChecked(),
                "decimals": self.decimals.value() if kind == "decimal" else 0,
                "date_order": self.date_order.currentText().strip().upper() if kind == "date" else None,
                "check_digit": self.check_digit.currentData() if kind in ("code", "digits") else None,
                "minimum": _bound(self.minimum.text(), kind, "smallest value"),
                "maximum": _bound(self.maximum.text(), kind, "largest value"),
                "lengths": _lengths(self.lengths.text()),
            }
        except TemplateError as exc:
            self.say(f"Not changed: {exc} (choose the field again to put it back as it was).", problem=True)
            return False
        name = changes["name"]
        return self._try(lambda: update_field(self.template, self.selected, **changes),
                         f"Field {name} changed.", selected=name, keep=False)

    def delete_selected(self) -> bool:
        if self.selected is None:
            return False
        name = self.selected
        self._form_dirty = False  # the field goes: its form goes with it
        return self._try(lambda: delete_field(self.template, name), f"Field {name} removed.")

    def move_selected(self, dx: int, dy: int) -> bool:
        if self.selected is None:
            return False
        name = self.selected
        return self._try(lambda: move_field(self.template, name, dx, dy), f"Field {name} moved.")

    def split_selected(self) -> bool:
        if self.selected is None:
            return False
        name, at = self.selected, self.split_at.value()
        return self._try(lambda: split_field(self.template, name, at),
                         f"Field {name} split after box {at}; name the new part.")

    def join_right(self) -> bool:
        """Join the selected field with the nearest field to its right on the same line."""
        if self.selected is None:
            return False
        me = self.template.field(self.selected)
        right = [f for f in self.template.fields if f.boxes[0].x0 > me.boxes[-1].x0
                 and abs(f.boxes[0].centre[1] - me.boxes[-1].centre[1]) <= me.boxes[-1].height / 2]
        if not right:
            self.say(f"Not changed: there is no field to the right of {me.name} on its line.", problem=True)
            return False
        other = min(right, key=lambda f: f.boxes[0].x0)
        return self._try(lambda: join_fields(self.template, me.name, other.name),
                         f"Fields {me.name} and {other.name} joined.", selected=me.name)

    def start_drawing(self) -> None:
        self.drawing = True
        self.canvas.setFocus()
        self.say(f"Drag a rectangle around the {self.run_count.value()} boxes of the new field.")

    def draw_run(self, rect: QRectF) -> bool:
        """Add a field of ``run_count`` boxes filling ``rect`` (reference pixels)."""
        self.drawing = False
        t = self.template
        k = len(t.fields) + 1
        while f"field_{k}" in {f.name for f in t.fields}:
            k += 1
        name = f"field_{k}"
        r = rect.normalized()
        return self._try(
            lambda: add_field(t, name, run_boxes(round(r.left()), round(r.top()), round(r.right()),
                                                 round(r.bottom()), self.run_count.value(), dpi=t.reference.dpi)),
            f"Field {name} added; give it a name and a type.", selected=name,
        )

    def _at(self, point: QPointF) -> str | None:
        for f in self.template.fields:
            if any(b.x0 <= point.x() < b.x1 and b.y0 <= point.y() < b.y1 for b in f.boxes):
                return f.name
        return None

    def _clicked(self, point: QPointF) -> None:
        if self.drawing:
            return
        name = self._at(point)
        if name is not None and (name != self.selected or self._form_dirty):
            self.select(name)

    def _dragged(self, start: QPointF, end: QPointF) -> None:
        if self.drawing:
            self.draw_run(QRectF(start, end))
        elif self._at(start) == self.selected:
            self.move_selected(round(end.x() - start.x()), round(end.y() - start.y()))

    # ------------------------------------------------------------------ saving

    def save(self) -> bool:
        """Keep the form's edits, apply the sum rules and write the file (version raised if it was saved before)."""
        if self._form_dirty and self.selected is not None and not self.apply_field():
            return False
        try:
            lines = [line for line in self.sums.toPlainText().splitlines() if line.strip()]
            template = set_sums(self.template, [parse_sum(line) for line in lines])
        except TemplateError as exc:
            self.say(f"Not saved: {exc}.", problem=True)
            return False
        if self.path is None:
            from PySide6.QtWidgets import QFileDialog

            default = f"{template.name}.json" if self.folder is None else str(self.folder / f"{template.name}.json")
            name, _ = QFileDialog.getSaveFileName(self, "Save the template", default, "Form templates (*.json)")
            if not name:
                return False
            self.path = Path(name)
        if self._bump:
            template = Template(template.name, template.version + 1, template.reference, template.fields,
                                template.sums, template.description)
        try:
            save_template(template, self.path)
        except OSError as exc:
            self.say(f"Not saved: {self.path}: {exc.strerror or exc}.", problem=True)
            return False
        self._bump = True
        self.template = template
        self._sums_dirty = False
        self.say(f"Saved {self.path.name} ({template.label}).")
        self.saved.emit(self.path)
        return True


def _number_text(value: float | str) -> str:
    return str(int(value)) if isinstance(value, (int, float)) and float(value).is_integer() else str(value)


def _bound(text: str, kind: str, what: str) -> float | str | None:
    text = text.strip()
    if not text or kind not in ("integer", "decimal", "date"):
        return None
    if kind == "date":
        return text
    try:
        value = float(text.replace(",", "."))
    except ValueError:
        raise TemplateError(f"the {what} must be a number, not {text!r}") from None
    if not math.isfinite(value):
        raise TemplateError(f"the {what} must be a number, not {text!r}")
    return int(value) if value.is_integer() else value


def _lengths(text: str) -> tuple[int, ...] | None:
    parts = [p.strip() for p in text.replace(";", ",").split(",") if p.strip()]
    if not parts:
        return None
    if not all(p.isdigit() for p in parts):
        raise TemplateError(f"numbers of digits are whole numbers such as 5 or 4, 5, not {text.strip()!r}")
    return tuple(int(p) for p in parts)
