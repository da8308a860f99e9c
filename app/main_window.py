"""The main window: start page, page list, page view, and the check / sort wall / model tabs.

The window lays out the views (:mod:`app.views`), builds the menus and routes:
what the clerk asks for goes to the :class:`app.controller.BatchController`
(open, read, close a batch; its workers), to a view, or to a dialog
(:mod:`app.dialogs`); what the controller and the batch announce goes back to
the views. Every review action is committed to the batch file by
:mod:`recognizer.review` the moment it is made. The window keeps only its
layout and the place in the review (:mod:`app.settings`).

A batch always opens on the check panel (F2). The page list keeps following
the field shown, so the list, the page image and the check panel show the
same page whatever changed (strictness, a new model, pages read).

This module is longer than 600 lines: it is the one place where every menu,
shortcut and route between the views, the controller and the dialogs is
written down, kept together so the window's map reads in one file.
"""

from __future__ import annotations

import base64
import sys
from pathlib import Path

from PySide6.QtCore import QByteArray, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (
    QLabel,
    QMainWindow,
    QInputDialog,
    QMessageBox,
    QSplitter,
    QStackedWidget,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from recognizer.batch import SUFFIX, Batch, Change
from recognizer.batch.queries import labelled_count, page_fields, pages_of_fields
from recognizer.digits.model import DigitModel
from recognizer.digits.retrain import RetrainSettings
from recognizer.forms.template_file import TemplateFileError, load_template
from recognizer.review import ReviewError, audit_status, draw_audit, fields_needed, residual_figures, zero_error_bound

from .controller import BatchController
from .dialogs import files
from .dialogs.export import ExportDialog
from .dialogs.retrain import RetrainDialog
from .dialogs.strictness import StrictnessDialog
from .look import CAUTION
from .settings import WindowSettings
from .views.model_panel import LEARN_TIP, RETRAIN_TIP, ModelPanel
from .views.page_list import PageList, legend_html
from .views.page_view import ZOOM_HELP, PageView
from .views.review_panel import KEY_HELP, ReviewPanel
from .views.sort_wall import SortWall
from .views.start_page import StartPage
from .views.status_bar import StatusBar

__all__ = ["MainWindow", "TAB_CHECK", "TAB_WALL", "TAB_MODEL"]

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
        stopped; ``summary`` is the :class:`recognizer.ingest.IngestSummary`,
        or None after a failure.
    """

    reading_done = Signal(object)

    def __init__(self, settings: WindowSettings | None = None) -> None:
        super().__init__()
        self.settings = settings or WindowSettings()
        self.controller = BatchController(self.settings, self)
        self.retrain_box: RetrainDialog | None = None
        #: The last "Read the scans" step shown (File > Open scans), for tests and screenshots.
        self.template_choice = None
        self._learning_step: str | None = None
        #: Fine-tuning settings of Model > Retrain (tests use fewer epochs).
        self.retrain_settings = RetrainSettings()
        self.last_message = ""
        self.setWindowTitle("Inkcount")
        self.setAcceptDrops(True)
        self._build()
        self._build_actions()
        self._connect_controller()
        self._restore_layout()
        self._save_timer = QTimer(self)
        self._save_timer.setSingleShot(True)
        self._save_timer.setInterval(1500)
        self._save_timer.timeout.connect(self.save_settings)
        if self.settings.problem:
            self.say(self.settings.problem)

    # ------------------------------------------------------------------ the controller's state, read-only

    batch = property(lambda self: self.controller.batch, doc="The open batch, or None.")
    model = property(lambda self: self.controller.model, doc="The model reading the batch, or None.")
    cache = property(lambda self: self.controller.cache, doc="The open batch's image cache.")
    reading = property(lambda self: self.controller.reading, doc="Whether scans are being read.")
    thread = property(lambda self: self.controller.thread, doc="The reading worker's thread, until it has stopped.")
    worker = property(lambda self: self.controller.worker, doc="The reading worker, until its thread has stopped.")

    # ------------------------------------------------------------------ building

    def _build(self) -> None:
        self.stack = QStackedWidget()
        self.setCentralWidget(self.stack)
        self.start_page = StartPage()
        self.start_page.scans_wanted.connect(self.choose_scans)
        self.start_page.folder_wanted.connect(self.choose_folder)
        self.start_page.batch_wanted.connect(self.choose_batch)
        self.start_page.recent_chosen.connect(self.open_batch)
        self.recent_list = self.start_page.recent_list
        self.stack.addWidget(self.start_page)

        self.pages = PageList()
        self.pages.page_chosen.connect(self._show_page)
        self.legend = QLabel(legend_html())
        self.legend.setWordWrap(True)
        self.legend.setAccessibleName("What the marks mean")
        self.legend.setToolTip("The marks and colours of pages, fields and boxes")
        self.page_detail = QLabel("")
        self.page_detail.setWordWrap(True)
        self.page_detail.setAccessibleName("Page chosen")
        self.page_detail.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.pages.current_described.connect(self.page_detail.setText)
        self.pages_box = QWidget()
        box = QVBoxLayout(self.pages_box)
        box.setContentsMargins(0, 0, 0, 0)
        box.addWidget(self.legend)
        box.addWidget(self.pages, 1)
        box.addWidget(self.page_detail)
        self.page_view = PageView()
        self.page_view.field_clicked.connect(self._field_clicked)
        self.review = ReviewPanel()
        self.review.guard = self.controller.guard
        self.review.field_shown.connect(self._field_shown)
        self.review.message.connect(self.say)
        self.wall = SortWall()
        self.wall.guard = self.controller.guard
        self.wall.start_job = self.controller.start_job  # the wall's order is found in a worker
        self.wall.message.connect(self.say)
        self.wall.crop_selected.connect(self._crop_selected)
        self.model_panel = ModelPanel()
        self.model_panel.learning_toggled.connect(self.set_learning)
        self.model_panel.stop_learning.connect(self.stop_learning)
        self.tabs = QTabWidget()
        self.tabs.addTab(self.review, "Check fields (F2)")
        self.tabs.addTab(self.wall, "Sort wall (F3)")
        self.tabs.addTab(self.model_panel, "Model (F4)")
        self.tabs.setAccessibleName("Checking views")
        self.tabs.currentChanged.connect(self._tab_changed)

        # Stable widths: what a page or a field shows never changes them (the check panel's boxes
        # scale down to fit instead of widening it); a window made wider or narrower shares the
        # difference 1 : 3 : 2, the page image taking most.
        self.splitter = QSplitter(Qt.Orientation.Horizontal)
        self.splitter.addWidget(self.pages_box)
        self.splitter.addWidget(self.page_view)
        self.splitter.addWidget(self.tabs)
        self.splitter.setChildrenCollapsible(False)
        self.pages_box.setMinimumWidth(190)
        self.page_view.setMinimumWidth(220)
        self.tabs.setMinimumWidth(340)
        self.splitter.setStretchFactor(0, 1)
        self.splitter.setStretchFactor(1, 3)
        self.splitter.setStretchFactor(2, 2)
        self.splitter.setSizes(self.default_sizes(1400))
        self.stack.addWidget(self.splitter)
        self.setTabOrder(self.pages, self.page_view)
        self.setTabOrder(self.page_view, self.tabs)
        self.setTabOrder(self.tabs, self.review)

        self.status = StatusBar()
        self.setStatusBar(self.status)
        self.progress, self.cancel_button = self.status.progress, self.status.cancel_button
        self.cancel_button.clicked.connect(self.cancel_reading)
        self.resize(1400, 860)

    @staticmethod
    def default_sizes(width: int) -> list[int]:
        """The panels' widths for a window ``width`` wide: list, page image, check panel."""
        pages = max(180, min(280, width * 17 // 100))
        panel = max(360, min(520, width * 32 // 100))
        return [pages, max(220, width - pages - panel), panel]

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
        self._action(check, "&Save and next field\tEnter", self.review.save,
                     tip="Confirm the field as shown, or save what you typed, and go on (Enter)")
        self._action(check, "Mark field &unreadable\tCtrl+U or *", self.review.mark_unreadable,
                     tip="The field cannot be read; it exports empty (Ctrl+U or *)")
        self.undo_action = self._action(check, "&Undo\tCtrl+Z", self.review.undo_last,
                                        tip="Take back your last action and go back to that field (Ctrl+Z)")
        self._action(check, "&Next field\tPgDn", self.review.next_field, tip="Skip to the next field (PgDn)")
        self._action(check, "&Previous field\tPgUp", self.review.previous_field, tip="Back to the previous field (PgUp)")
        check.addSeparator()
        self._action(check, "Page by page order", lambda: self.set_order("page"), "Ctrl+Shift+P")
        self._action(check, "Least sure first", lambda: self.set_order("confidence"), "Ctrl+Shift+L")
        check.addSeparator()
        self.strict_action = self._action(check, "How many values to chec&k…", self.strictness_dialog, "Ctrl+T",
                                          "Set the share of wrong digits you accept, and see how many digits that "
                                          "sends to you (Ctrl+T)")
        self.spot_action = self._action(check, "Sp&ot check…", self.spot_check, "Ctrl+Shift+K",
                                        "Look at a random sample of the values accepted without a person, to "
                                        "say how many wrong values are left (Ctrl+Shift+K)")
        self.leave_spot_action = self._action(check, "Back to the fields to check", self.review.leave_spot_check,
                                              tip="Leave the spot check; the fields not answered stay drawn")

        view = bar.addMenu("&View")
        self._action(view, "Check fields", lambda: self.show_tab(TAB_CHECK), "F2")
        self._action(view, "Sort wall", lambda: self.show_tab(TAB_WALL), "F3")
        self._action(view, "Model", lambda: self.show_tab(TAB_MODEL), "F4")
        self._action(view, "Page list", lambda: self.pages.setFocus(), "F6")
        view.addSeparator()
        self._action(view, "Page to the &width of its view", self.page_view.zoom_to_fit, "Ctrl+0",
                     "Fit the page to the width of its view (Ctrl+0)")
        zoom_in = self._action(view, "Zoom &in", lambda: self.page_view.zoom_by(1.25), "Ctrl++",
                               "Zoom in on the page (Ctrl++ or Ctrl+wheel)")
        zoom_in.setShortcuts([QKeySequence("Ctrl++"), QKeySequence("Ctrl+=")])
        self._action(view, "Zoom &out", lambda: self.page_view.zoom_by(0.8), "Ctrl+-",
                     "Zoom out of the page (Ctrl+- or Ctrl+wheel)")

        model = bar.addMenu("&Model")
        self.retrain_action = self._action(model, "&Retrain from this batch's corrections…", self.retrain,
                                           "Ctrl+Shift+R", RETRAIN_TIP)
        self.model_panel.retrain_button.clicked.connect(self.retrain)
        model.addSeparator()
        self.learn_action = self._action(model, "&Learn from my corrections as I check", self.set_learning,
                                         tip=LEARN_TIP)
        self.learn_action.setCheckable(True)
        self.stop_learning_action = self._action(model, "&Stop learning now", self.stop_learning,
                                                 tip="Stop the round of learning running now; nothing changes in "
                                                 "the batch")
        self.stop_learning_action.setEnabled(False)
        model.setToolTipsVisible(True)

        help_menu = bar.addMenu("&Help")
        self._action(help_menu, "&Keys", self._show_keys, "F1")
        self._action(help_menu, "What the &marks mean", lambda: QMessageBox.information(
            self, "What the marks mean", legend_html(lines=True)))
        self._action(help_menu, "About the &values", lambda: QMessageBox.information(self, "About the values", CAUTION))
        self._cancel_shortcut = QAction(self)
        self._cancel_shortcut.setShortcut(QKeySequence("Esc"))
        self._cancel_shortcut.setShortcutContext(Qt.ShortcutContext.WindowShortcut)
        self._cancel_shortcut.triggered.connect(lambda: self.cancel_reading() if self.reading else None)
        self._batch_actions = [self.export_action, self.close_action, self.strict_action, self.retrain_action,
                               self.spot_action, self.leave_spot_action, self.learn_action]
        self._update_enabled()
        self._fill_recent()

    def _connect_controller(self) -> None:
        c = self.controller
        c.message.connect(self.say)
        c.problem.connect(self.show_problem)
        c.settings_changed.connect(self._schedule_save)
        c.opened.connect(self._batch_opened)
        c.closing.connect(self._batch_closing)
        c.closed.connect(self._batch_closed)
        c.changed.connect(self._on_change)
        c.reading_started.connect(self._reading_started)
        c.reading_progress.connect(self._on_progress)
        c.reading_cancelled.connect(self.status.reading_cancelled)
        c.reading_done.connect(self._reading_ended)
        c.learning_started.connect(self._learning_started)
        c.learning_progress.connect(self._learning_progress)
        c.learning_done.connect(self._learning_done)

    def _show_keys(self) -> None:
        QMessageBox.information(self, "Keys", "Check fields (F2):\n" + KEY_HELP.replace(" · ", "\n")
                                + "\n\nPage image:\n" + ZOOM_HELP.replace(" · ", "\n")
                                + "\n\nSort wall (F3):\n" + self.wall.toolTip().replace(" · ", "\n")
                                + "\n\nF2 check fields · F3 sort wall · F4 model · F6 page list · "
                                "Ctrl+T how many values to check · Ctrl+Shift+K spot check · Ctrl+E export".replace(" · ", "\n"))

    def _update_enabled(self) -> None:
        for action in self._batch_actions:
            action.setEnabled(self.batch is not None)
        self.stack.setCurrentIndex(0 if self.batch is None else 1)

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        recent = self.settings.get("recent_batches")
        for path in recent:
            action = self.recent_menu.addAction(path)
            action.triggered.connect(lambda _=False, p=path: self.open_batch(p))
        self.start_page.show_recent(recent)
        self.recent_menu.setEnabled(bool(recent))

    # ------------------------------------------------------------------ messages

    def say(self, text: str) -> None:
        """Tell the clerk something in the status bar (kept in ``last_message``)."""
        self.last_message = text
        self.status.showMessage(text, 8000)

    def show_problem(self, title: str, text: str) -> None:
        """A problem the clerk must read: a window that does not block, and the status bar."""
        self.say(text.splitlines()[0])
        box = QMessageBox(QMessageBox.Icon.Warning, title, text, QMessageBox.StandardButton.Ok, self)
        box.setWindowModality(Qt.WindowModality.NonModal)
        box.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        box.show()
        self._problem_box = box

    # ------------------------------------------------------------------ what the clerk opens

    def start(self, paths: list[Path], *, batch_path: Path | None = None) -> None:
        """What ``inkcount window PATHS`` does: open a batch, read scans, or reopen the last batch."""
        if len(paths) == 1 and Path(paths[0]).suffix == SUFFIX:
            self.open_batch(paths[0])
        elif paths:
            self.open_scans(paths, batch_path=batch_path)
        else:
            self.controller.reopen_last()

    def choose_scans(self) -> None:
        paths = files.ask_scans(self)
        if paths:
            self._open_with_template(paths)

    def choose_folder(self) -> None:
        folder = files.ask_folder(self)
        if folder is not None:
            self._open_with_template([folder])

    def _open_with_template(self, paths: list[Path]):
        """Ask how the scans are read (with a form template, the last one offered first), then read them."""
        from .dialogs.template_choice import TemplateChoice

        last = self.settings.get("last_template")
        dialog = TemplateChoice(paths, Path(last) if last else None, self)
        dialog.chosen.connect(lambda template: self._read_chosen(paths, template))
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.open()
        self.template_choice = dialog
        return dialog

    def _read_chosen(self, paths: list[Path], template: Path | None) -> None:
        if template is not None:
            self._remember_template(template)
        self.open_scans(paths, template=template)

    def _remember_template(self, path: Path) -> None:
        """The form template used or saved last: offered first when scans are opened next."""
        self.settings.set("last_template", str(Path(path).absolute()))
        self._schedule_save()

    def choose_template(self) -> None:
        path = files.ask_template(self, self._template_folder())
        if path is not None:
            self.edit_template(path)

    def new_template(self) -> None:
        scan = files.ask_form_scan(self)
        if scan is not None:
            self.edit_template(scan=scan)

    def _template_folder(self, scan: Path | None = None) -> Path | None:
        """Where a new template is saved by default: next to the open batch (and its scans), else next to
        the form scan it is drawn from, else next to the last template."""
        if self.batch is not None:
            return Path(self.batch.path).absolute().parent
        if scan is not None:
            return Path(scan).absolute().parent
        last = self.settings.get("last_template")
        return Path(last).parent if last else None

    def edit_template(self, path: Path | None = None, *, scan: Path | None = None):
        """Open the template editor on a template file, or on a draft from a form scan.

        A template saved there is offered first the next time scans are opened.
        """
        from .views.template_editor import TemplateEditor, draft_from_scan

        if scan is not None:
            draft = draft_from_scan(scan)
            if isinstance(draft, str):
                self.show_problem("New template", f"No digit boxes found: {draft}")
                return None
            editor = TemplateEditor(draft, None, folder=self._template_folder(scan), parent=self)
        else:
            try:
                editor = TemplateEditor(load_template(path), path, loaded=True, parent=self)
            except TemplateFileError as exc:
                self.show_problem("Form template", str(exc))
                return None
        editor.saved.connect(self._template_saved)
        editor.show()
        return editor

    def _template_saved(self, path: Path) -> None:
        self._remember_template(path)
        self.say(f"Template saved: {path}. It is offered when you open scans (File > Open scans).")

    def choose_batch(self) -> None:
        path = files.ask_batch(self)
        if path is not None:
            self.open_batch(path)

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
            self._open_with_template(paths)

    # ------------------------------------------------------------------ batches (done by the controller)

    def open_batch(self, path: str | Path, *, create: bool = False) -> bool:
        """Open (or create) a batch file; a clear message when it cannot be used."""
        return self.controller.open_batch(path, create=create)

    def open_scans(self, paths: list[Path], *, batch_path: Path | None = None,
                   template: Path | None = None) -> bool:
        """Read scan files and folders into the open batch, or into a new batch file.

        ``batch_path`` names the batch (created if missing); without it and
        without an open batch, the clerk is asked (default: next to the scans).
        With a form ``template`` file every page is read with it.
        """
        return self.controller.read_scans(paths, batch_path=batch_path, template=template,
                                          ask_batch_path=lambda scans: files.ask_new_batch(self, scans))

    def close_batch(self) -> None:
        """Close the open batch (everything is already saved)."""
        self.controller.close_batch()

    def close_batch_by_hand(self) -> None:
        """File > Close batch: close it and do not reopen it at the next start."""
        self.controller.close_batch(forget=True)

    def cancel_reading(self) -> None:
        """Stop reading after the current page; what was read stays in the batch."""
        self.controller.cancel_reading()

    def _batch_opened(self, batch: Batch) -> None:
        path = Path(batch.path)
        self.setWindowTitle(f"{path.name} — Inkcount")
        self._fill_recent()
        self.pages.set_batch(batch)
        position = self.settings.review_position(path)
        self.review.set_batch(batch, self.cache, order=position.get("order", self.settings.get("order")),
                              field_id=position.get("field_id"))
        self.wall.set_batch(batch, self.cache)
        self._show_model(with_samples=True)
        self._update_enabled()
        self._restore_splitter()
        self.tabs.setCurrentIndex(TAB_CHECK)
        if self.review.view is None:
            self.pages.select_first()
        self.review.setFocus()

    def _batch_closing(self) -> None:
        if self.retrain_box is not None:  # its workers have stopped
            self.retrain_box.close()
            self.retrain_box = None
        self._remember_position()
        self.review.set_batch(None, None)
        self.wall.set_batch(None, None)

    def _batch_closed(self) -> None:
        self.status.learning_ended()
        self.model_panel.show_learning(None, None)
        self.pages.set_batch(None)
        self.page_view.show_page(None, None, [])
        self.setWindowTitle("Inkcount")
        self._update_enabled()

    # ------------------------------------------------------------------ reading

    def _reading_started(self, _files: int) -> None:
        self.status.reading_started()
        self.addAction(self._cancel_shortcut)
        self._show_model()

    def _on_progress(self, done: int, total: int, text: str) -> None:
        self.status.reading_progress(done, total)
        self.say(f"Read {text}")

    def _reading_ended(self, summary) -> None:
        self.status.reading_ended()
        self.removeAction(self._cancel_shortcut)
        self._show_model()
        self.reading_done.emit(summary)

    # ------------------------------------------------------------------ following changes

    def _on_change(self, change: Change) -> None:
        if change.kind == "page":
            self.pages.update_pages(change.page_ids)
        elif change.kind == "flags":
            self.pages.fill()
            self._refresh_page_view()
            view = self.review.view
            if view is not None:  # the list and the image follow the check panel
                self._show_page(view.page_id)
                self.page_view.select_field(view.field_id)
                self.pages.follow(view.page_id)
        else:
            pages = pages_of_fields(self.batch, change.field_ids or ())
            self.pages.update_pages(pages)
            if self.page_view.page_id in pages:
                self.page_view.update_states({fid: state for fid, _, state, _ in
                                              page_fields(self.batch, self.page_view.page_id)})
        self.review.on_change(change)
        self.wall.on_change(change)

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

    def _field_shown(self, field_id: int, page_id: int) -> None:
        self._show_page(page_id)
        self.page_view.select_field(field_id)
        self.pages.follow(page_id)
        self._remember_position()

    def _crop_selected(self, page_id: int, field_id: int, _box: int) -> None:
        """The sort wall's current crop: its page, with its field picked out."""
        self._show_page(page_id)
        self.page_view.select_field(field_id)
        self.pages.follow(page_id)

    def _field_clicked(self, field_id: int) -> None:
        self.show_tab(TAB_CHECK)
        self.review.show_field(field_id)
        self.review.setFocus()

    def set_order(self, order: str) -> None:
        self.review.set_order(order)
        self.review.order_box.setCurrentIndex(0 if order == "page" else 1)
        self.settings.set("order", order)
        self._remember_position()

    def show_tab(self, index: int) -> None:
        self.tabs.setCurrentIndex(index)
        view = self.review.view
        if index == TAB_CHECK and view is not None and self.page_view.page_id != view.page_id:
            self._field_shown(view.field_id, view.page_id)  # the page of the field being checked
        (self.review if index == TAB_CHECK else self.tabs.currentWidget()).setFocus()

    def _tab_changed(self, index: int) -> None:
        if index == TAB_MODEL:
            self._show_model(with_samples=True)
        self.settings.set("tab", index)
        self._schedule_save()

    def _show_model(self, *, with_samples: bool = True) -> None:
        samples = labelled_count(self.batch) if with_samples and self.batch is not None else None
        settings = self.batch.settings if self.batch else None
        self.model_panel.show_model(self.model, settings, samples, reading=self.reading)
        self._show_learning(settings, samples)

    def _show_learning(self, settings=None, checked: int | None = None, running: str | None = None) -> None:
        if settings is None and self.batch is not None:
            settings = self.batch.settings
        if checked is None and self.batch is not None:
            checked = labelled_count(self.batch)
        if running is None and self.controller.learning:
            running = self._learning_step
        self.model_panel.show_learning(settings, checked, running=running)
        self.learn_action.setChecked(bool(settings and settings.learning))
        self.stop_learning_action.setEnabled(self.controller.learning)

    # ------------------------------------------------------------------ learning during the batch

    def set_learning(self, on: bool) -> None:
        """Model > Learn from my corrections as I check (and the model panel's check box)."""
        if self.batch is None:
            return
        self.controller.set_learning(on)
        self.say("The model learns from your corrections as you check." if on else
                 "Learning from your corrections is off; the model in use stays.")
        self._show_learning()

    def stop_learning(self) -> None:
        """Stop the round running now (nothing changes in the batch)."""
        if self.controller.cancel_learning():
            self._learning_step = "stopping…"
            self.say(f"Stopping this round of learning; the model in use stays. The next round comes after "
                     f"{self.batch.settings.learning_every:,} more checked digits.")
            self._show_learning()

    def _learning_started(self) -> None:
        self._learning_step = "starting…"
        self.status.learning_started()
        self._show_learning()

    def _learning_progress(self, text: str) -> None:
        self._learning_step = text
        if self.tabs.currentIndex() == TAB_MODEL:
            self._show_learning()

    def _learning_done(self, done) -> None:
        self.status.learning_ended()
        self._learning_step = None
        if self.batch is None:
            return
        if done is not None:
            self.say(done.in_words())
            if done.accepted:
                self._show_model()
        self._show_learning()

    # ------------------------------------------------------------------ dialogs

    def strictness_dialog(self) -> StrictnessDialog | None:
        if self.batch is None or self.model is None:
            return None
        dialog = StrictnessDialog(self.batch, self.model, self, guard=self.controller.guard)
        dialog.open()
        dialog.accepted.connect(lambda: (self._show_model(), self.say(
            f"Changed how many values to check: {self.review.remaining:,} "
            f"field{' is' if self.review.remaining == 1 else 's are'} to check now.")))
        return dialog

    def spot_check(self) -> QInputDialog | None:
        """Check > Spot check: go on with an unfinished spot check, or ask how many fields to draw."""
        if self.batch is None:
            return None
        status = audit_status(self.batch)
        if status is not None and not status.finished:
            self.show_tab(TAB_CHECK)
            self.review.start_spot_check()
            self.say(f"Going on with the spot check drawn on {status.record.drawn_at}: "
                     f"{len(status.open_ids)} of {status.drawn} left.")
            return None
        population = residual_figures(self.batch).unattended
        if population == 0:
            self.say("No value of this batch was accepted without a person: there is nothing to spot check.")
            return None
        dialog = QInputDialog(self)
        dialog.setWindowTitle("Spot check")
        dialog.setInputMode(QInputDialog.InputMode.IntInput)
        dialog.setIntRange(1, population)
        dialog.setIntValue(min(50, population))
        dialog.setLabelText(
            f"{population:,} values were accepted without a person. How many of them do you want to look at?\n"
            "They are drawn at random, spread over the pages. If none of them is wrong, 50 show that at most "
            f"{100 * zero_error_bound(50):.1f} % of the values accepted are wrong, {fields_needed(0.01):,} show "
            "at most 1 % (95 % confidence).")
        dialog.intValueSelected.connect(self.start_spot_check)
        dialog.open()
        return dialog

    def start_spot_check(self, count: int) -> None:
        """Draw ``count`` values accepted without a person and check them in the check panel."""
        if self.batch is None:
            return
        try:
            status = draw_audit(self.batch, count)
        except ReviewError as exc:
            self.show_problem("Spot check", str(exc))
            return
        self.show_tab(TAB_CHECK)
        self.review.start_spot_check()
        self.say(f"Drew {status.drawn} of the {status.record.population:,} values accepted without a person: "
                 "Enter if a value is right, type the right one if not.")

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
        if self.controller.learning:
            self.say("The model is learning from your corrections right now (Model tab); retrain once that round "
                     "has ended, or stop it first.")
            return None
        refusal = self.controller.retrain_refusal()
        if refusal is not None:
            self.show_problem("Retrain", refusal)
            return None
        box = RetrainDialog(self.batch, self.model, settings=self.retrain_settings,
                            start_job=self.controller.start_job, parent=self)
        box.model_used.connect(self._on_model_used)
        box.finished.connect(lambda _=0: self.review.setFocus())
        self.retrain_box = box
        box.open()
        return box

    def _on_model_used(self, model: DigitModel, path: Path, summary) -> None:
        self.controller.use_model(model)
        self._show_model(with_samples=True)
        self.say(f"This batch now uses {model.version} ({Path(path).name}); {summary.digits:,} unchecked digits "
                 f"read again, {summary.changed:,} differently.")

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

    def _restore_splitter(self) -> None:
        """The splitter's sizes, once it is on screen (sizes set while hidden do not hold)."""
        if self._splitter_restored:
            return
        self._splitter_restored = True
        state = _unb64(self.settings.get("splitter"))
        if state is not None:
            self.splitter.restoreState(state)
        else:
            self.splitter.setSizes(self.default_sizes(self.splitter.width() or self.width()))

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
        self.controller.stop_reading()
        self._remember_position()
        self.controller.close_batch()
        self._save_timer.stop()
        problem = self.save_settings()
        if problem:  # the window is going: say it where it can still be read
            print(f"inkcount window: {problem}", file=sys.stderr)
        super().closeEvent(event)
