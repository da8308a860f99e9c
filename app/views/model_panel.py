"""Which model reads the batch, how accurate it was on digits it was not trained on, its
accuracy–reject curve (drawn with QPainter), and learning during the batch
(on or off, what it is doing, what the last round gained).

The curve comes from the model file's own evaluation figures (the held-out
reject table: share of digits sent to a person against the accuracy of those
accepted automatically).
"""

from __future__ import annotations

from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QColor, QFont, QPainter, QPainterPath, QPen
from PySide6.QtWidgets import (
    QCheckBox,
    QFormLayout,
    QFrame,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QScrollArea,
    QSizePolicy,
    QVBoxLayout,
    QWidget,
)

from recognizer.batch import BatchSettings
from recognizer.digits.model import DigitModel
from recognizer.learning import LearningRound

__all__ = ["ModelPanel", "RejectCurve", "reject_points", "retraining_in_words", "learning_in_words",
           "RETRAIN_TIP", "LEARN_TIP"]

RETRAIN_TIP = ("Teach the model the handwriting of the digits corrected or confirmed in this batch, see how it does "
               "before and after, and choose whether to use it (Ctrl+Shift+R)")


LEARN_TIP = ("While you check, the model learns from the digits you corrected or confirmed, in the background, "
             "every few hundred digits; it is used only when it reads your batch's checked digits at least as "
             "well as the model in use. Values you corrected or confirmed never change.")


def learning_in_words(settings: BatchSettings | None, checked: int | None) -> str:
    """Learning during the batch, in words: off, or when the next round comes."""
    if settings is None:
        return "–"
    if not settings.learning:
        return "off"
    if checked is None:
        return f"on: every {settings.learning_every:,} digits you check"
    left = settings.learned_at + settings.learning_every - checked
    when = "at the next digit you check" if left <= 0 else f"after {left:,} more checked digit{'s' if left != 1 else ''}"
    return f"on: every {settings.learning_every:,} digits you check; next round {when}"


def retraining_in_words(model: DigitModel) -> str:
    """How a retrained model came about, in words ("no" for a model trained from scratch)."""
    r = model.metadata.get("retraining")
    if not r:
        return "no (the model as trained)"
    learning = model.metadata.get("learning")
    if learning:
        return (f"learned while checking {learning.get('batch', 'this batch')} (round {learning.get('round', '?')}), "
                f"from {r['n_samples']:,} checked digits; accuracy on checked digits kept aside "
                f"{100 * r['before']['new_samples']:.1f} % → {100 * r['after']['new_samples']:.1f} %, "
                f"on digits it never saw {100 * r['before']['heldout']:.1f} % → {100 * r['after']['heldout']:.1f} %")
    files = ", ".join(b.get("file", "?") for b in r.get("batches", [])) or "batches"
    before, after = r["before"], r["after"]
    return (f"from {model.metadata.get('parent', '?')} on {r['n_learned']:,} checked digits of {files}; "
            f"accuracy on checked digits kept aside {100 * before['new_samples']:.1f} % → "
            f"{100 * after['new_samples']:.1f} %, on digits it never saw {100 * before['heldout']:.1f} % → "
            f"{100 * after['heldout']:.1f} %")


def reject_points(model: DigitModel) -> list[tuple[float, float]]:
    """``(share sent to review, accuracy of the rest)`` from the model's held-out reject table."""
    table = (model.metadata.get("evaluation") or {}).get("reject_table") or []
    return [(float(r["rejected"]), 1.0 - float(r["residual_error"])) for r in table]


def _touches(rect: QRectF, points: list[QPointF], radius: float = 5.0) -> bool:
    """Whether the curve through ``points`` (its line and dots, ``radius`` wide) touches ``rect``."""
    grown = rect.adjusted(-radius, -radius, radius, radius)
    for a, b in zip(points, points[1:] or points):
        for k in range(21):
            if grown.contains(a + (b - a) * (k / 20)):
                return True
    return False


class RejectCurve(QWidget):
    """Accuracy of the digits accepted automatically against the share sent to a person."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.points: list[tuple[float, float]] = []
        self.target: float | None = None
        #: Where the dashed line's label was drawn last (None: no line), kept clear of the curve.
        self.target_label_rect: QRectF | None = None
        #: Where the curve's points were drawn last.
        self.dots: list[QPointF] = []
        self.setMinimumSize(300, 240)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Expanding)
        self.setAccessibleName("Accuracy against share checked by a person")

    def set_curve(self, points: list[tuple[float, float]], target: float | None) -> None:
        self.points, self.target = sorted(points), target
        self.setToolTip("\n".join(f"{100 * x:.0f} % checked → {100 * y:.2f} % right" for x, y in self.points))
        self.update()

    def paintEvent(self, event) -> None:  # noqa: N802 (Qt name)
        p = QPainter(self)
        p.setRenderHint(QPainter.RenderHint.Antialiasing)
        p.fillRect(self.rect(), QColor("white"))
        plot = QRectF(62, 14, self.width() - 80, self.height() - 58)
        small = QFont()
        small.setPixelSize(11)
        p.setFont(small)
        if not self.points:
            p.drawText(self.rect(), Qt.AlignmentFlag.AlignCenter, "This model file has no test figures (how it read digits it never saw).")
            p.end()
            return
        x_max = max(0.05, max(x for x, _ in self.points))
        y_lo = min(y for _, y in self.points)
        y_lo = max(0.0, min(y_lo, 1 - (self.target or 0)) - 0.002)

        def at(x: float, y: float) -> QPointF:
            return QPointF(plot.left() + plot.width() * x / x_max, plot.bottom() - plot.height() * (y - y_lo) / (1 - y_lo))

        p.setPen(QPen(QColor("#DDDDDD"), 1))
        for k in range(6):
            y = y_lo + (1 - y_lo) * k / 5
            p.drawLine(at(0, y), at(x_max, y))
            x = x_max * k / 5
            p.drawLine(at(x, y_lo), at(x, 1))
        p.setPen(QPen(QColor("#333333"), 1))
        p.drawRect(plot)
        for k in range(6):
            y = y_lo + (1 - y_lo) * k / 5
            pt = at(0, y)
            p.drawText(QRectF(0, pt.y() - 8, plot.left() - 6, 16), Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter,
                       f"{100 * y:.1f} %")
            x = x_max * k / 5
            pt = at(x, y_lo)
            p.drawText(QRectF(pt.x() - 30, plot.bottom() + 4, 60, 14), Qt.AlignmentFlag.AlignCenter, f"{100 * x:.0f} %")
        p.drawText(QRectF(plot.left(), plot.bottom() + 20, plot.width(), 16), Qt.AlignmentFlag.AlignCenter,
                   "share of digits checked by a person")
        p.save()
        p.translate(12, plot.center().y())
        p.rotate(-90)
        p.drawText(QRectF(-plot.height() / 2, -10, plot.height(), 16), Qt.AlignmentFlag.AlignCenter,
                   "accuracy of digits not checked")
        p.restore()
        dots = self.dots = [at(x, y) for x, y in self.points]
        path = QPainterPath(at(*self.points[0]))
        for x, y in self.points[1:]:
            path.lineTo(at(x, y))
        self.target_label_rect = None
        if self.target is not None and 1 - self.target >= y_lo:
            p.setPen(QPen(QColor("#D55E00"), 1.5, Qt.PenStyle.DashLine))
            line = at(0, 1 - self.target).y()
            p.drawLine(QPointF(plot.left(), line), QPointF(plot.right(), line))
            text = self.target_words()
            box = p.fontMetrics().boundingRect(text).adjusted(-4, -2, 4, 2)
            w, h = box.width(), box.height()
            # beside the line where the curve is not: right end below it (the curve has passed above the
            # line there), left end above it (the curve is still below), then the other two; if the curve
            # touches all four (a small plot), the nearest clear place further from the line
            left, right = plot.left() + 4, plot.right() - w - 4
            spots = [QRectF(right, line + 3, w, h), QRectF(left, line - h - 3, w, h),
                     QRectF(right, line - h - 3, w, h), QRectF(left, line + 3, w, h)]
            for step in range(4, int(plot.height()), 4):
                spots += [QRectF(right, line + 3 + step, w, h), QRectF(left, line - h - 3 - step, w, h)]
            inside = [r for r in spots if plot.contains(r)] or spots
            rect = next((r for r in inside if not _touches(r, dots)), inside[0])
            p.fillRect(rect, QColor(255, 255, 255, 230))
            p.setPen(QColor("#A04000"))
            p.drawText(rect, Qt.AlignmentFlag.AlignCenter, text)
            self.target_label_rect = rect
        p.setPen(QPen(QColor("#0072B2"), 2.5))
        p.setBrush(Qt.BrushStyle.NoBrush)
        p.drawPath(path)
        p.setBrush(QColor("#0072B2"))
        for x, y in self.points:
            p.drawEllipse(at(x, y), 3.5, 3.5)
        p.end()

    def target_words(self) -> str:
        """The dashed line's label: the batch's setting, in a clerk's words."""
        return f"your setting: {100 * (1 - self.target):.2f} % right"


class ModelPanel(QWidget):
    """The model of the batch, its figures, Retrain, and learning during the batch.

    Signals
    -------
    learning_toggled(on)
        The clerk turned learning during the batch on or off.
    stop_learning()
        The clerk asked to stop the round running now.
    """

    learning_toggled = Signal(bool)
    stop_learning = Signal()

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(0, 0, 0, 0)
        scroll = QScrollArea()  # on a small screen the panel scrolls rather than cut its words
        scroll.setWidgetResizable(True)
        scroll.setFrameShape(QFrame.Shape.NoFrame)
        inner = QWidget()
        scroll.setWidget(inner)
        outer.addWidget(scroll)
        layout = QVBoxLayout(inner)
        learn_row = QHBoxLayout()
        self.learn_box = QCheckBox("&Learn from my corrections as I check")
        self.learn_box.setToolTip(LEARN_TIP)
        self.learn_box.setAccessibleName("Learn from my corrections as I check")
        self.learn_box.setEnabled(False)
        self.learn_box.toggled.connect(self.learning_toggled)
        learn_row.addWidget(self.learn_box, 1)
        self.stop_button = QPushButton("Stop learning now")
        self.stop_button.setToolTip("Stop this round; nothing changes in the batch. The next round comes after "
                                    "as many more checked digits.")
        self.stop_button.setAccessibleName("Stop learning now")
        self.stop_button.hide()
        self.stop_button.clicked.connect(self.stop_learning)
        learn_row.addWidget(self.stop_button)
        layout.addLayout(learn_row)
        form = QFormLayout()
        form.setRowWrapPolicy(QFormLayout.RowWrapPolicy.WrapLongRows)
        self.learning = QLabel("–")
        self.learning.setWordWrap(True)
        self.learning.setAccessibleName("Learning while you check")
        self.last_round = QLabel("–")
        self.last_round.setWordWrap(True)
        self.last_round.setAccessibleName("Last learning round")
        self.name = QLabel("–")
        self.name.setWordWrap(True)
        self.name.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.heldout = QLabel("–")
        self.heldout.setWordWrap(True)
        self.strictness = QLabel("–")
        self.strictness.setWordWrap(True)
        self.samples = QLabel("–")
        self.retrained = QLabel("–")
        self.retrained.setWordWrap(True)
        self.retrained.setAccessibleName("Retrained")
        form.addRow("Model reading this batch:", self.name)
        form.addRow("Retrained:", self.retrained)
        form.addRow("Accuracy on digits it was not trained on:", self.heldout)
        form.addRow("How many values to check:", self.strictness)
        form.addRow("Checked digits to learn from:", self.samples)
        form.addRow("Learning while you check:", self.learning)
        form.addRow("Last round of learning:", self.last_round)
        layout.addLayout(form)
        heading = QLabel("<b>Accuracy of the digits not checked, against the share a person checks</b> "
                         "(digits it was not trained on)")
        heading.setWordWrap(True)
        layout.addWidget(heading)
        self.curve = RejectCurve()
        layout.addWidget(self.curve, 1)
        self.retrain_button = QPushButton("Retrain from this batch's corrections…")
        self.retrain_button.setAccessibleName("Retrain")
        self.retrain_button.setEnabled(False)
        self.retrain_button.setToolTip(RETRAIN_TIP)
        layout.addWidget(self.retrain_button)
        self.name.setAccessibleName("Model name")
        self.heldout.setAccessibleName("Accuracy on digits it was not trained on")

    def show_learning(self, settings: BatchSettings | None, checked: int | None, *, running: str | None = None) -> None:
        """Learning during the batch: the check box, when the next round comes (or the step
        ``running`` now, with the Stop button), and what the last round did."""
        self.learn_box.blockSignals(True)
        self.learn_box.setChecked(bool(settings and settings.learning))
        self.learn_box.blockSignals(False)
        self.learn_box.setEnabled(settings is not None)
        self.stop_button.setVisible(running is not None)
        self.learning.setText(f"learning now: {running}" if running is not None
                              else learning_in_words(settings, checked))
        last = settings.learning_last if settings is not None else None
        self.last_round.setText(LearningRound.from_json(last).in_full() if last else "none yet")

    def show_model(self, model: DigitModel | None, settings: BatchSettings | None, samples: int | None, *,
                   reading: bool = False) -> None:
        """Show ``model`` with the batch's ``settings`` and ``samples`` checked digits (None: not counted);
        ``reading``: pages are being read now (the strictness is set once the first page is read)."""
        if model is None:
            self.name.setText("–")
            self.heldout.setText("–")
            self.retrained.setText("–")
            self.curve.set_curve([], None)
            self.retrain_button.setEnabled(False)
            return
        version = settings.model_version if settings and settings.model_version else model.version
        self.name.setText(version + ("" if version == model.version else f" (loaded: {model.version})"))
        self.retrained.setText(retraining_in_words(model))
        ev = model.metadata.get("evaluation") or {}
        if "accuracy" in ev:
            self.heldout.setText(f"{100 * ev['accuracy']:.1f} % right, on {ev.get('n', '?'):,} handwritten test "
                                 "digits it never saw")
            self.heldout.setToolTip(f"The test digits: {ev.get('source', 'not named in the model file')}")
        else:
            self.heldout.setText("not measured (the model file has no test figures)")
        if settings is not None and settings.threshold is not None:
            how = (f"at most {100 * settings.target_error:.2f} % wrong among the digits not checked"
                   if settings.threshold_source == "target" else "a confidence limit set by hand")
            self.strictness.setText(f"{how}: every digit read less than {100 * settings.threshold:.2f} % sure "
                                    "goes to a person (Ctrl+T)")
        elif reading:
            self.strictness.setText("reading… (set when the first page has been read)")
        else:
            self.strictness.setText("not set yet: it is set when the first page is read")
        self.samples.setText("–" if samples is None else f"{samples:,}")
        self.retrain_button.setEnabled(settings is not None)
        self.curve.set_curve(reject_points(model), settings.target_error if settings else None)
