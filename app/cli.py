"""The ``inkcount window`` sub-command (added to ``inkcount`` through an entry point).

Qt is imported only when the command runs, so ``inkcount --help`` and the
other sub-commands never load it. Nothing that only training needs
(scikit-learn, scipy) is imported on the way to the first window:
``tests/app/test_startup.py`` checks it.

A hidden switch for ``bench/bench_window.py``: with the environment variable
``INKCOUNT_TIMING=quit`` the command prints ``inkcount-timing shown <epoch
seconds>`` once the window is on screen with its batch open and the first
events handled, then closes the window as the clerk would (printing
``inkcount-timing closing <epoch>``) and ``inkcount-timing closed <epoch>``
when the event loop has ended; ``INKCOUNT_TIMING=quit:SECONDS`` closes it that
many seconds after it was shown (to time a quit while a worker runs). Any
other non-empty value only prints ``shown``.
"""

from __future__ import annotations

import argparse
import os
import time
from pathlib import Path

__all__ = ["add_window_command", "run_window", "TIMING_VAR"]

#: The hidden switch of the start-up benchmark (see the module docstring).
TIMING_VAR = "INKCOUNT_TIMING"


def add_window_command(subparsers) -> None:
    """Add ``window`` to the ``inkcount`` sub-command parsers."""
    p = subparsers.add_parser(
        "window",
        help="open the checking window",
        description="Open the Inkcount window. Give a batch file (.inkcount) to open it, or scan "
        "files and folders to read them into a new batch. Without arguments the last batch is "
        "opened again.",
    )
    p.add_argument("paths", nargs="*", type=Path, metavar="BATCH_OR_SCANS",
                   help="a batch file (.inkcount), or scan files (PNG, JPEG, BMP, TIFF, PDF) and folders")
    p.add_argument("--batch", "-b", type=Path, metavar="FILE",
                   help="batch file to read new scans into (default: asked, next to the scans)")
    p.set_defaults(func=run_window)


def _stamp(what: str) -> None:
    print(f"inkcount-timing {what} {time.time():.6f}", flush=True)


def run_window(args: argparse.Namespace) -> int:
    """Show the window until it is closed; return the exit status."""
    import sys

    from PySide6.QtCore import QTimer
    from PySide6.QtWidgets import QApplication

    from .main_window import MainWindow

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("Inkcount")
    app.setOrganizationName("Inkcount")
    window = MainWindow()
    window.show()
    window.start(list(args.paths), batch_path=args.batch)
    timing = os.environ.get(TIMING_VAR, "")
    quitting = timing.partition(":")[0] == "quit"
    if timing:
        def close() -> None:
            _stamp("closing")
            window.close()

        def shown() -> None:
            _stamp("shown")
            if quitting:
                QTimer.singleShot(int(1000 * float(timing.partition(":")[2] or 0)), close)

        QTimer.singleShot(0, shown)  # runs once the event loop has shown the window and handled what was queued
    status = int(app.exec())
    if quitting:
        _stamp("closed")
    return status
