"""Review: a person's actions on a batch, the queue of what is left, strictness, re-reading, checked export.

What must be checked is decided by :mod:`recognizer.states`; this package
records what people do about it. Modules: :mod:`~recognizer.review.actions`
(set, confirm, unreadable, undo), :mod:`~recognizer.review.queue`,
:mod:`~recognizer.review.strictness`, :mod:`~recognizer.review.reread`,
:mod:`~recognizer.review.checked_export`, :mod:`~recognizer.review.oddness`
(the sort wall's order: the crops least like their group's typical shape first),
:mod:`~recognizer.review.audit` (spot checks of the fields accepted without a
person) and :mod:`~recognizer.review.residual` (their statistics).
"""

from recognizer.batch.queries import state_counts
from recognizer.review.actions import (
    Action,
    actions,
    confirm,
    default_reviewer,
    find_field,
    mark_unreadable,
    set_digit,
    set_field,
    undo,
)
from recognizer.review.audit import (
    AuditStatus,
    ResidualFigures,
    audit_status,
    draw_audit,
    residual_figures,
    residual_line,
    residual_statement,
)
from recognizer.review.checked_export import ExportResult, checked_table, export_checked, unchecked_message
from recognizer.review.errors import ReviewError
from recognizer.review.oddness import GroupRanking, RankedCrop, rank_group
from recognizer.review.queue import ORDERS, ReviewItem, ReviewQueue
from recognizer.review.reread import RereadSummary, reread_unchecked
from recognizer.review.residual import clopper_pearson_upper, fields_needed, zero_error_bound
from recognizer.review.strictness import set_target_error, set_threshold
from recognizer.states import DEFAULT_TARGET_ERROR, STATES, State

READ, TO_CHECK, CORRECTED, CONFIRMED, UNREADABLE = (
    State.READ, State.TO_CHECK, State.CORRECTED, State.CONFIRMED, State.UNREADABLE)

__all__ = [
    "READ", "TO_CHECK", "CORRECTED", "CONFIRMED", "UNREADABLE", "STATES", "State", "DEFAULT_TARGET_ERROR",
    "ORDERS", "Action", "GroupRanking", "RankedCrop", "ReviewError", "ReviewItem", "ReviewQueue", "RereadSummary", "ExportResult",
    "actions", "checked_table", "confirm", "default_reviewer", "export_checked", "find_field",
    "mark_unreadable", "rank_group", "reread_unchecked", "set_digit", "set_field", "set_target_error", "set_threshold",
    "state_counts", "unchecked_message", "undo",
    "AuditStatus", "ResidualFigures", "audit_status", "draw_audit", "residual_figures", "residual_line",
    "residual_statement", "clopper_pearson_upper", "fields_needed", "zero_error_bound",
]
