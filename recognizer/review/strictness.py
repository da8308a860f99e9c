"""How strict the reading is: the batch threshold, fixed by hand or from a target residual error.

Changing it re-flags the digits still in ``read`` or ``to check`` without
reading anything again (digits a person handled keep their state), and is
logged as an action (not undone by :func:`recognizer.review.actions.undo`:
set the threshold again).
"""

from __future__ import annotations

import json
import sqlite3
from typing import Any

from recognizer.batch.flags import refresh_states
from recognizer.batch.queries import count_fields
from recognizer.batch.store import Batch, Change
from recognizer.digits.model import DigitModel, load_model
from recognizer.review.actions import record_action
from recognizer.review.errors import ReviewError
from recognizer.states import State

__all__ = ["set_threshold", "set_target_error"]


def _reflag_all(batch: Batch, conn: sqlite3.Connection, *, reviewer: str | None, kind: str,
                old: Any, new: Any, **settings: Any) -> None:
    batch.update_settings(conn, **settings)
    record_action(conn, reviewer=reviewer, kind=kind, old=json.dumps(old), new=json.dumps(new))
    refresh_states(conn)


def _to_check_count(batch: Batch) -> int:
    return count_fields(batch, State.TO_CHECK)


def set_threshold(batch: Batch, threshold: float, *, reviewer: str | None = None) -> int:
    """Use a fixed confidence threshold (0..1) and re-flag; return the fields now to check."""
    if not 0.0 <= threshold <= 1.0:
        raise ReviewError(f"the threshold is between 0 and 1, not {threshold}")
    with batch.transaction() as conn:
        _reflag_all(batch, conn, reviewer=reviewer, kind="threshold", old=batch.settings.threshold,
                    new=float(threshold), threshold=float(threshold), threshold_source="manual")
    batch.notify(Change("flags"))
    return _to_check_count(batch)


def set_target_error(batch: Batch, target: float, *, model: DigitModel | None = None,
                     reviewer: str | None = None) -> float:
    """Set the threshold from the model's calibration for ``target`` (e.g. 0.001); return it.

    ``model`` defaults to the batch's model file; it must be the model that read
    the batch (its threshold curve is what the target is read from).
    """
    if not 0.0 < target < 1.0:
        raise ReviewError(f"the target residual error is a share between 0 and 1, not {target}")
    current = batch.settings
    model = model or load_model(current.model_path)
    if current.model_version is not None and model.version != current.model_version:
        raise ReviewError(
            f"model {model.version} did not read this batch ({current.model_version}); "
            "re-read the batch with it first"
        )
    threshold = float(model.threshold_for(target))
    with batch.transaction() as conn:
        _reflag_all(batch, conn, reviewer=reviewer, kind="target error", old=current.target_error,
                    new=float(target), threshold=threshold, target_error=float(target),
                    threshold_source="target")
    batch.notify(Change("flags"))
    return threshold
