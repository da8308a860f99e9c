"""The model panel's curve (issue 13): the label of the dashed line (the batch's setting) never
lies on the curve, and it is in a clerk's words."""

from __future__ import annotations

import pytest

from app.views.model_panel import RejectCurve, _touches

# The shape of the shipped model's held-out reject table (share checked, accuracy of the rest), as in
# docs/screenshots/model_panel.png: the dashed line at 99.90 % crosses the curve near 10 %.
POINTS = [(0.0, 0.9881), (0.01, 0.9915), (0.02, 0.9944), (0.05, 0.9973), (0.10, 0.9993), (0.20, 0.9995)]


@pytest.mark.parametrize("size", [(440, 320), (300, 240), (700, 400)])
@pytest.mark.parametrize("target", [0.001, 0.005, 0.0002])
def test_the_setting_label_keeps_clear_of_the_curve(qtbot, size, target):
    curve = RejectCurve()
    qtbot.addWidget(curve)
    curve.resize(*size)
    curve.set_curve(POINTS, target)
    curve.grab()  # paints
    rect = curve.target_label_rect
    assert rect is not None
    assert curve.rect().contains(rect.toRect())
    assert len(curve.dots) == len(POINTS) and not _touches(rect, curve.dots)
    assert "your setting" in curve.target_words() and "target" not in curve.target_words()
