"""Command-line commands on batch files: ``review``, ``status`` and ``export``.

``inkcount review BATCH [--list] [--set FILE:PAGE:FIELD=VALUE] [--confirm FILE:PAGE:FIELD]
[--unreadable FILE:PAGE:FIELD] [--undo] [--reviewer NAME]``
    List what is left to check, or apply scripted review actions (in the order
    given; each one is committed as it is done). ``FILE`` is the scan's path as
    stored in the batch, or its trailing part (``card07.png``) when unambiguous.
``inkcount status BATCH``
    Pages, fields and digits counted by state.
``inkcount export BATCH --out checked.csv [--allow-unchecked] [--audit]``
    The checked CSV (see :mod:`recognizer.review.checked_export`), and beside it
    ``checked.residual.txt``, the statement of the residual error (see
    :mod:`recognizer.review.audit`; spot checks are ``inkcount audit``,
    :mod:`recognizer.cli.audit`).

Exit status: 0 done; 1 refused (fields still to check, an undo that is not
possible); 2 bad arguments or a batch file that cannot be used.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from recognizer.batch.queries import field_place, state_counts, stored_files, stored_pages
from recognizer.batch.store import Batch, BatchFileError
from recognizer.review.actions import confirm, default_reviewer, find_field, mark_unreadable, set_field, undo
from recognizer.review.checked_export import export_checked
from recognizer.review.errors import ReviewError
from recognizer.review.queue import ReviewQueue
from recognizer.states import STATES, State

TO_CHECK = State.TO_CHECK

__all__ = ["add_action_options", "add_batch_commands", "apply_actions", "run_review", "run_status", "run_export",
           "parse_ref", "table_text"]


def add_batch_commands(subparsers) -> None:
    """Add ``review``, ``status`` and ``export`` to the ``inkcount`` sub-command parsers."""
    p = subparsers.add_parser(
        "review",
        help="list what is left to check in a batch, or apply review actions",
        description="Without actions, list the fields still to check. Actions are applied in the "
        "order given and each is saved at once.",
    )
    p.add_argument("batch", type=Path, metavar="BATCH", help="batch file (.inkcount)")
    p.add_argument("--list", action="store_true", help="list the fields still to check (after any actions)")
    add_action_options(p)
    p.set_defaults(func=run_review, actions=[])

    p = subparsers.add_parser("status", help="count pages, fields and digits of a batch by state",
                              description="Count the pages, fields and digits of a batch by review state.")
    p.add_argument("batch", type=Path, metavar="BATCH", help="batch file (.inkcount)")
    p.set_defaults(func=run_status)

    p = subparsers.add_parser(
        "export",
        help="write the checked values of a batch to a CSV",
        description="Write one CSV row per page with the values after review. Refused while fields "
        "are still to check, unless --allow-unchecked.",
    )
    p.add_argument("batch", type=Path, metavar="BATCH", help="batch file (.inkcount)")
    p.add_argument("--out", "-o", required=True, type=Path, metavar="CSV", help="CSV file to write")
    p.add_argument("--allow-unchecked", action="store_true",
                   help="export even with fields still to check (listed in a column unchecked_fields)")
    p.add_argument("--audit", action="store_true",
                   help="add <field>_state and <field>_lowest_confidence columns")
    p.set_defaults(func=run_export)


def add_action_options(p: argparse.ArgumentParser) -> None:
    """``--set``, ``--confirm``, ``--unreadable``, ``--undo`` and ``--reviewer``, collected in ``args.actions``
    in command-line order (``inkcount review`` and ``inkcount audit`` take the same)."""
    p.add_argument("--set", dest="actions", action=_Append, kind="set", metavar="FILE:PAGE:FIELD=VALUE",
                   help="give a field its value (repeatable)")
    p.add_argument("--confirm", dest="actions", action=_Append, kind="confirm", metavar="FILE:PAGE:FIELD",
                   help="the value read is right (repeatable)")
    p.add_argument("--unreadable", dest="actions", action=_Append, kind="unreadable", metavar="FILE:PAGE:FIELD",
                   help="the field cannot be read; it exports empty (repeatable)")
    p.add_argument("--undo", dest="actions", action=_Append, kind="undo", nargs=0,
                   help="take back your last action still in effect (repeatable)")
    p.add_argument("--reviewer", default=default_reviewer(), metavar="NAME",
                   help="name recorded with each action (default: your user name)")


def apply_actions(batch: Batch, actions: list[tuple[str, str | None]], reviewer: str) -> int:
    """Apply the collected review actions in order, printing each; 0 done, 1 an action refused (the ones
    before it stay), 2 a reference that names no field (nothing changed)."""
    try:
        plan = [_resolve(batch, kind, text) for kind, text in actions]
    except ReviewError as exc:
        _err(f"{exc}; nothing was changed")
        return 2
    for kind, ref, field_id, value in plan:
        try:
            print(_apply(batch, kind, ref, field_id, value, reviewer))
        except ReviewError as exc:
            _err(str(exc))
            return 1
    return 0


class _Append(argparse.Action):
    """Collect ``(kind, value)`` pairs of several options in one list, in command-line order."""

    def __init__(self, option_strings, dest, *, kind: str, **kwargs):
        self.kind = kind
        super().__init__(option_strings, dest, **kwargs)

    def __call__(self, parser, namespace, values, option_string=None):
        items = list(getattr(namespace, self.dest) or [])
        items.append((self.kind, values if isinstance(values, str) else None))
        setattr(namespace, self.dest, items)


def _err(message: str) -> None:
    print(f"inkcount: {message}", file=sys.stderr)


def parse_ref(text: str, *, with_value: bool = False) -> tuple[str, int, str, str | None]:
    """Split ``FILE:PAGE:FIELD`` (or ``FILE:PAGE:FIELD=VALUE``) into its parts.

    The file part may itself contain ``:`` (it is split from the right).
    """
    value = None
    if with_value:
        text, eq, value = text.rpartition("=")
        if not eq:
            raise ReviewError(f"expected FILE:PAGE:FIELD=VALUE, got {text!r}")
    parts = text.rsplit(":", 2)
    if len(parts) != 3 or not all(parts) or not parts[1].isdigit():
        raise ReviewError(f"expected FILE:PAGE:FIELD (page a number), got {text!r}")
    return parts[0], int(parts[1]), parts[2], value


def run_review(args: argparse.Namespace) -> int:
    try:
        batch = Batch.open(args.batch, read_only=not args.actions)
    except BatchFileError as exc:
        _err(str(exc))
        return 2
    with batch:
        status = apply_actions(batch, args.actions, args.reviewer)
        if status == 2:
            return 2
        if args.list or not args.actions:
            _print_list(batch)
    return status


def _resolve(batch: Batch, kind: str, text: str | None) -> tuple[str, str, int | None, str | None]:
    if kind == "undo":
        return kind, "", None, None
    file, page, name, value = parse_ref(text, with_value=kind == "set")
    return kind, f"{file}:{page}:{name}", find_field(batch, file, page, name), value


def _apply(batch: Batch, kind: str, ref: str, field_id: int | None, value: str | None, reviewer: str) -> str:
    if kind == "undo":
        action = undo(batch, reviewer=reviewer)
        if action is None:
            return f"nothing of {reviewer}'s to undo"
        return f"undone: {_field_ref(batch, action.field_id)} is {action.new_value!r} again (was {action.old_value!r})"
    if kind == "set":
        action = set_field(batch, field_id, value, reviewer=reviewer)
        return f"set {ref} = {action.new_value!r} (was {action.old_value!r})"
    if kind == "confirm":
        action = confirm(batch, field=field_id, reviewer=reviewer)
        return f"confirmed {ref} = {action.new_value!r}"
    mark_unreadable(batch, field=field_id, reviewer=reviewer)
    return f"marked {ref} unreadable"


def _field_ref(batch: Batch, field_id: int) -> str:
    file, page, name = field_place(batch, field_id)
    return f"{file}:{page}:{name}"


def table_text(rows: list[list[str]]) -> str:
    """Rows of cells as aligned columns."""
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return "\n".join("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip() for r in rows)


def _print_list(batch: Batch) -> None:
    items = ReviewQueue(batch, order="page").items()
    problems = [p for p in stored_pages(batch) if p.problem is not None]
    pages = len({(i.file, i.page) for i in items})
    print(f"{len(items)} field(s) to check on {pages} page(s); {len(problems)} page(s) or file(s) not read.")
    if items:
        rows = [["file", "page", "field", "value read", "lowest confidence", "why"]]
        rows += [
            [i.file, str(i.page), i.field, i.read or "(empty)",
             "" if i.confidence is None else f"{i.confidence:.3f}", i.words]
            for i in items
        ]
        print(table_text(rows))
    for p in problems:
        print(f"not read: {p.file}" + ("" if p.page is None else f" page {p.page}") + f": {p.problem}")


def run_status(args: argparse.Namespace) -> int:
    try:
        batch = Batch.open(args.batch, read_only=True)
    except BatchFileError as exc:
        _err(str(exc))
        return 2
    with batch:
        counts = state_counts(batch)
        settings = batch.settings
        files = len(stored_files(batch))
    print(f"{args.batch}: {files} file(s)")
    if settings.threshold is not None:
        how = (f"from a target residual error of {settings.target_error * 100:g} %"
               if settings.threshold_source == "target" else "set by hand")
        print(f"threshold {settings.threshold:.4f} ({how}); model {settings.model_version}")
    rows = [["", *STATES, "total"]]
    for what in ("pages", "fields", "digits"):
        c = counts[what]
        rows.append([what, *(str(c.get(s, 0)) for s in STATES), str(sum(c.values()))])
    print(table_text(rows))
    left = counts["fields"].get(TO_CHECK, 0)
    print("Nothing left to check." if not left else f"{left} field(s) still to check.")
    return 0


def run_export(args: argparse.Namespace) -> int:
    try:
        batch = Batch.open(args.batch, read_only=True)
    except BatchFileError as exc:
        _err(str(exc))
        return 2
    try:
        with batch:
            result = export_checked(batch, args.out, allow_unchecked=args.allow_unchecked, audit=args.audit)
    except OSError as exc:
        _err(f"cannot write {args.out}: {exc}")
        return 2
    if not result:
        _err(result.problem)
        return 1
    note = f" ({result.unchecked} field(s) not checked, listed in unchecked_fields)" if result.unchecked else ""
    print(f"Wrote {result.rows} row(s) to {args.out}{note}.")
    print(f"{result.residual_line} (Written to {result.residual}.)")
    return 0
