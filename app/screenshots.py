"""Render the main views offscreen to PNG files (for the documentation).

``python -m app.screenshots [OUT_DIR]`` reads the sample forms into a
temporary batch, checks a few fields so that every state shows, and writes
``docs/screenshots/``: the start page, the batch with its page view (also at
1024 x 700, a small laptop screen), the
check panel, the sort wall, the window after a round of learning during the
batch, a spot check in the check panel, the model panel, the strictness
dialog, the export dialog, the step of File > Open scans that chooses the form
template, and the form template editor. The images are reduced to a 256-colour palette to stay small.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from PIL import Image  # noqa: E402
from PySide6.QtCore import QEventLoop, Qt  # noqa: E402
from PySide6.QtTest import QTest  # noqa: E402
from PySide6.QtWidgets import QApplication, QWidget  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
SCANS = ROOT / "sample_forms" / "scans"
SIZE = (1440, 900)
#: A small laptop screen: nothing may be cut there either.
SMALL = (1024, 700)
#: An invented folder shown in the pictures instead of wherever they are rendered.
_SHOWN_FOLDER = Path("/home/clerk/weigh-ins")

__all__ = ["render_all"]


def _save(widget: QWidget, path: Path) -> Path:
    QApplication.processEvents()
    widget.grab().save(str(path))
    Image.open(path).convert("RGB").quantize(256, dither=Image.Dither.NONE).save(path, optimize=True)
    return path


def render_all(out: Path) -> list[Path]:
    """Write every screenshot into ``out``; return the paths."""
    from .main_window import TAB_CHECK, TAB_MODEL, TAB_WALL, MainWindow
    from .settings import WindowSettings

    out.mkdir(parents=True, exist_ok=True)
    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setStyle("Fusion")
    written = []
    with tempfile.TemporaryDirectory() as tmp:
        batch_path = Path(tmp) / "harvest-week-37.inkcount"
        settings = WindowSettings(Path(tmp) / "window.json")
        settings.add_recent(_SHOWN_FOLDER / "harvest-week-36.inkcount")
        settings.add_recent(_SHOWN_FOLDER / "harvest-week-35.inkcount")
        window = MainWindow(settings)
        window.resize(*SIZE)
        window.show()
        written.append(_save(window, out / "start.png"))

        loop = QEventLoop()
        window.reading_done.connect(loop.quit)
        window.open_scans([SCANS], batch_path=batch_path)
        loop.exec()
        panel = window.review
        panel.setFocus()
        QTest.keyClick(panel, Qt.Key.Key_Return)          # confirmed
        QTest.keyClick(panel, Qt.Key.Key_Asterisk)        # unreadable
        view = panel.view
        QTest.keyClicks(panel, "1" if view.slots[0].read != "1" else "7")
        QTest.keyClick(panel, Qt.Key.Key_Return)          # corrected
        window.say("Saved.")
        written.append(_save(window, out / "batch_page_view.png"))
        window.resize(*SMALL)
        written.append(_save(window, out / "batch_page_view_1024.png"))
        window.resize(*SIZE)
        QTest.keyClicks(panel, "0")  # typing in progress: the first box overwritten
        written.append(_save(window.tabs, out / "check_panel.png"))
        QTest.keyClick(panel, Qt.Key.Key_Escape)

        window.show_tab(TAB_WALL)
        wall = window.wall
        while wall.ordering:  # each group takes its order (odd crops first) from a worker
            QApplication.processEvents()
            QTest.qWait(10)
        group = max(wall.groups, key=wall.count)
        lst = wall.groups[group]
        lst.setFocus()
        lst.setCurrentRow(0)
        for row in (1, 2):
            lst.item(row).setSelected(True)
        written.append(_save(window, out / "sort_wall.png"))

        window.show_tab(TAB_CHECK)
        _learn_once(window)
        written.append(_save(window, out / "learning.png"))

        window.start_spot_check(20)
        panel.setFocus()
        QTest.keyClick(panel, Qt.Key.Key_Return)  # one value said right: "19 of 20 left"
        window.say("Spot check: Enter if the value is right, type the right one if not.")
        written.append(_save(window, out / "spot_check.png"))
        panel.leave_spot_check()

        window.show_tab(TAB_MODEL)
        written.append(_save(window.tabs, out / "model_panel.png"))
        window.show_tab(TAB_CHECK)

        dialog = window.strictness_dialog()
        dialog.target.setValue(0.5)
        written.append(_save(dialog, out / "strictness_dialog.png"))
        dialog.reject()

        dialog = window.export_dialog()
        dialog.path.setText(str(_SHOWN_FOLDER / "harvest-week-37.csv"))
        written.append(_save(dialog, out / "export_dialog.png"))
        dialog.reject()

        settings.set("last_template", str(ROOT / "sample_forms" / "orchard_card.json"))
        choice = window._open_with_template([SCANS])
        QApplication.processEvents()
        written.append(_save(choice, out / "template_choice.png"))
        choice.reject()

        editor = window.edit_template(ROOT / "sample_forms" / "orchard_card.json")
        editor.resize(1300, 760)
        editor.select("total_crates")
        editor.say("Field total_crates changed.")
        QApplication.processEvents()
        editor.canvas.fitInView(editor.canvas.sceneRect(), Qt.AspectRatioMode.KeepAspectRatio)
        written.append(_save(editor, out / "template_editor.png"))
        editor.close()
        window.close()
    return written


def _learn_once(window) -> None:
    """Check fields with their true values until a round of learning during the batch is due, and wait for it."""
    import csv

    from recognizer.review import set_field

    batch = window.batch
    with batch.transaction() as conn:
        batch.update_settings(conn, learning_every=200)
    with open(ROOT / "sample_forms" / "truth_fnames.csv", newline="", encoding="utf-8") as fh:
        truth = {(r.pop("file"), int(r.pop("page"))): r for r in csv.DictReader(fh)}
    loop = QEventLoop()
    window.controller.learning_done.connect(loop.quit)
    rows = batch.rows("SELECT f.id, f.name, f.resolution, p.page, fl.path FROM fields f "
                      "JOIN pages p ON p.id = f.page_id JOIN files fl ON fl.id = p.file_id ORDER BY f.id")
    for r in rows:
        value = truth.get((Path(r["path"]).name, r["page"]), {}).get(r["name"])
        if value and r["resolution"] is None:
            set_field(batch, r["id"], value)
        if window.controller.learning:
            break
    if window.controller.learning:
        loop.exec()
    window.review.next_field()


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    out = Path(args[0]) if args else ROOT / "docs" / "screenshots"
    for path in render_all(out):
        print(f"{path}  {path.stat().st_size // 1024} KB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
