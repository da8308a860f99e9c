"""The ``inkcount window`` sub-command (added to ``inkcount`` through an entry point).

Qt is imported only when the command runs, so ``inkcount --help`` and the
other sub-commands never load it.
"""

from __future__ import annotations

import argparse
from pathlib import Path

__all__ = ["add_window_command", "run_window"]


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


def run_window(args: argparse.Namespace) -> int:
    """Show the window until it is closed; return the exit status."""
    import sys

    from PySide6.QtWidgets import QApplication

    from .main_window import MainWindow

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("Inkcount")
    app.setOrganizationName("Inkcount")
    window = MainWindow()
    window.show()
    window.start(list(args.paths), batch_path=args.batch)
    return int(app.exec())
