"""The Qt binding keeps Python's reference counts right.

PySide6 6.12.0 on Python 3.11 takes one reference from ``None`` on every Qt
call that returns nothing, and the interpreter aborts ("deallocating None")
after a few thousand calls, i.e. minutes into a working day. pyproject.toml
keeps such a build out; this test catches a binding with the fault.
"""

from __future__ import annotations

import sys

from PySide6.QtCore import QPointF


def test_void_qt_calls_leave_none_alone():
    point = QPointF()
    before = sys.getrefcount(None)
    for _ in range(1000):
        point.setX(1.0)
    assert sys.getrefcount(None) >= before - 10
