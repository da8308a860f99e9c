"""Guard against a reference-counting fault of some PySide6 builds on Python 3.11.

With PySide6 6.12.0 on Python 3.11 every call of a Qt method that returns
nothing (``QPainter.setPen``, ``QWidget.update``, ``QLabel.setText`` ...)
takes one reference from ``None`` without having given one. From Python 3.12
``None`` is immortal and this is harmless; on 3.11 the interpreter aborts
("deallocating None") once enough such calls have been made, i.e. after some
minutes of use.

:func:`install` checks once whether the running Qt binding has the fault and,
only if so, keeps ``None``'s reference count topped up from a timer on the
main thread (CPython keeps the count in the first word of the object; ``None``
is never freed, so a count kept high costs nothing).
"""

from __future__ import annotations

import ctypes
import sys

from PySide6.QtCore import QPointF, QTimer

__all__ = ["has_fault", "install", "top_up"]

_LOW = 900_000
_HIGH = 1_000_000
_timer: QTimer | None = None


def has_fault() -> bool:
    """Whether a void Qt call takes a reference from None here."""
    point = QPointF()
    before = sys.getrefcount(None)
    for _ in range(100):
        point.setX(1.0)
    return sys.getrefcount(None) < before - 50


def top_up() -> None:
    """Give None back the references taken since the last top-up."""
    count = sys.getrefcount(None)
    if count < _LOW:
        ctypes.c_ssize_t.from_address(id(None)).value += _HIGH - count


def install() -> bool:
    """Start the guard if this Qt binding needs it (once per process); return whether it runs."""
    global _timer
    if _timer is not None:
        return True
    if not has_fault():
        return False
    top_up()
    _timer = QTimer()
    _timer.setInterval(100)
    _timer.timeout.connect(top_up)
    _timer.start()
    return True
