"""Issue 13: a form template made in the window is used from the window.

File > New template from a blank form drafts a template, the editor saves it
next to the batch and its scans (not in the program's working folder), and
File > Open scans offers it first: the pages read with it carry the
template's field names. The sample cards (sample_forms/, invented Larkhollow
Orchard Cooperative) are used for geometry only.
"""

from __future__ import annotations

import shutil
from pathlib import Path

from PySide6.QtWidgets import QFileDialog

from app.dialogs import files
from app.dialogs.template_choice import TemplateChoice
from recognizer.batch.queries import stored_pages
from recognizer.forms.template_file import load_template

ROOT = Path(__file__).resolve().parents[2]
BLANK = ROOT / "sample_forms" / "blank_card.png"
CARD = ROOT / "sample_forms" / "scans" / "card_01.png"
READ_TIMEOUT = 120_000


def test_a_template_saved_in_the_editor_is_offered_and_used_for_the_next_scans(window, qtbot, tmp_path,
                                                                                monkeypatch) -> None:
    scans = tmp_path / "scans"
    scans.mkdir()
    shutil.copy(CARD, scans / "card_01.png")
    batch_path = scans / "cards.inkcount"
    assert window.open_batch(batch_path, create=True)

    # File > New template from a blank form; Save offers the batch's folder, where the scans are
    editor = window.edit_template(scan=BLANK)
    assert editor is not None
    first = editor.template.fields[0].name
    editor.select(first)
    editor.name_edit.setText("grower")
    assert editor.apply_field()
    offered = []

    def save_as(_parent, _title, default, _filter):
        offered.append(Path(default))
        return default, _filter

    monkeypatch.setattr(QFileDialog, "getSaveFileName", save_as)
    assert editor.save()
    assert offered[0].parent == scans and editor.path.parent == scans and editor.path.exists()
    saved = load_template(editor.path)
    names = {f.name for f in saved.fields}
    assert "grower" in names
    editor.close()

    # File > Open scans: the template just saved is offered and chosen first
    monkeypatch.setattr(files, "ask_scans", lambda _parent: [scans / "card_01.png"])
    window.choose_scans()
    choice = window.template_choice
    assert isinstance(choice, TemplateChoice) and choice.isVisible()
    assert choice.offered == editor.path.absolute()
    assert choice.last_button.isChecked() and choice.template == editor.path.absolute()
    assert saved.name in choice.last_button.text()
    with qtbot.waitSignal(window.reading_done, timeout=READ_TIMEOUT) as done:
        choice.read_button.click()
    assert done.args[0] is not None and done.args[0].pages_read == 1
    read = {r[0] for r in window.batch.rows("SELECT name FROM fields")}
    assert "grower" in read and read <= names  # the template's names, not f01, f02, ...
    assert len(stored_pages(window.batch)) == 1


def test_without_a_remembered_template_no_template_is_the_choice_and_another_can_be_picked(qtbot, tmp_path) -> None:
    choice = TemplateChoice([CARD], None)
    qtbot.addWidget(choice)
    assert choice.offered is None and choice.plain_button.isChecked() and choice.template is None
    assert not choice.last_button.isVisible() and not choice.other_button.isEnabled()
    template = ROOT / "sample_forms" / "orchard_card.json"
    choice.set_other(template)
    assert choice.template == template and "orchard" in choice.other_button.text().lower()
    gone = TemplateChoice([CARD], tmp_path / "moved.json")  # a remembered file no longer there is not offered
    qtbot.addWidget(gone)
    assert gone.offered is None and gone.template is None
