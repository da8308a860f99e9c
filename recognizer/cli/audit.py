"""``inkcount audit``: spot checks that say how many wrong values are left.

``inkcount audit BATCH --draw N [--seed S] [--reviewer NAME]``
    Draw ``N`` fields at random among those accepted without a person, spread
    evenly over the pages (:mod:`recognizer.review.audit`), into a new spot check.
``inkcount audit BATCH --list``
    The drawn fields not answered yet (id, file, page, field, value accepted),
    each with the ``FILE:PAGE:FIELD`` reference the actions take.
``inkcount audit BATCH [--confirm FILE:PAGE:FIELD] [--set FILE:PAGE:FIELD=VALUE] [--unreadable ...] [--undo]``
    Answer drawn fields: the options of ``inkcount review``, applied the same
    way (answering with ``inkcount review`` or in the window counts the same).
``inkcount audit BATCH --report``
    Fields accepted without a person, fields audited (so far / drawn), errors
    found, and the one-sided 95 % upper bound on the share of wrong values
    among the fields accepted without a person (:mod:`recognizer.review.residual`).
``inkcount audit BATCH --plan 0.1%``
    How many fields must be audited, with 0, 1, 2 or 3 errors found, to claim
    that bound at 95 %, beside the fields accepted without a person in this batch.

Several of these may be given at once; they run in the order draw, actions,
list, report, plan. Without any, ``--report``. Exit status: 0 done; 1 refused
(nothing to draw, an action refused); 2 bad arguments or a batch file that
cannot be used.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from recognizer.batch.audits import count_unattended
from recognizer.batch.store import Batch, BatchFileError
from recognizer.cli.batch import add_action_options, apply_actions, table_text
from recognizer.review.audit import audit_status, draw_audit
from recognizer.review.errors import ReviewError
from recognizer.review.residual import CONFIDENCE_WORDS, fields_needed, parse_share, percent, share_words

__all__ = ["add_audit_commands", "run_audit", "plan_text", "report_text"]

#: Errors found for which ``--plan`` gives the fields needed.
PLAN_ERRORS = (0, 1, 2, 3)


def add_audit_commands(subparsers) -> None:
    """Add ``audit`` to the ``inkcount`` sub-command parsers."""
    p = subparsers.add_parser(
        "audit",
        help="spot-check the fields accepted without a person and bound the share of wrong values left",
        description="Draw a random sample of the fields the reader accepted without a person, answer it, and "
        "state how many wrong values can be left (one-sided 95 %% exact binomial upper bound).",
    )
    p.add_argument("batch", type=Path, metavar="BATCH", help="batch file (.inkcount)")
    p.add_argument("--draw", type=int, metavar="N", help="draw N fields accepted without a person into a new spot check")
    p.add_argument("--seed", type=int, metavar="S", help="seed of the draw (default: a random one, recorded)")
    p.add_argument("--list", action="store_true", help="list the drawn fields not answered yet")
    p.add_argument("--report", action="store_true", help="fields audited, errors found and the 95 %% bound")
    p.add_argument("--plan", metavar="SHARE", help="fields to audit to claim at most SHARE wrong (0.1%% or 0.001)")
    add_action_options(p)
    p.set_defaults(func=run_audit, actions=[])


def _err(message: str) -> None:
    print(f"inkcount: {message}", file=sys.stderr)


def run_audit(args: argparse.Namespace) -> int:
    target = None
    if args.plan is not None:
        try:
            target = parse_share(args.plan)
        except ValueError as exc:
            _err(str(exc))
            return 2
    if args.draw is not None and args.draw < 1:
        _err(f"--draw takes a number of fields of 1 or more, not {args.draw}")
        return 2
    if args.seed is not None and not 0 <= args.seed < 2**63:
        _err("--seed takes a whole number from 0 to 2**63 - 1")
        return 2
    writes = args.draw is not None or bool(args.actions)
    try:
        batch = Batch.open(args.batch, read_only=not writes)
    except BatchFileError as exc:
        _err(str(exc))
        return 2
    status = 0
    with batch:
        if args.draw is not None:
            try:
                drawn = draw_audit(batch, args.draw, seed=args.seed, reviewer=args.reviewer)
            except ReviewError as exc:
                _err(str(exc))
                return 1
            r = drawn.record
            print(f"Drew {drawn.drawn:,} of the {r.population:,} field(s) accepted without a person "
                  f"(seed {r.seed}); answer them with --list and --confirm / --set, or in the window "
                  "(Check > Spot check).")
        if args.actions:
            status = apply_actions(batch, args.actions, args.reviewer)
            if status == 2:
                return 2
        if args.list:
            print(list_text(batch))
        if args.report or not (args.draw is not None or args.actions or args.list or target is not None):
            print(report_text(batch))
        if target is not None:
            print(plan_text(batch, target))
    return status


def list_text(batch: Batch) -> str:
    """The drawn fields of the latest spot check not answered yet."""
    found = audit_status(batch)
    if found is None:
        return "No spot check was drawn in this batch (--draw N)."
    open_fields = [f for f in found.fields if not f.done]
    head = f"{len(open_fields):,} of {found.drawn:,} drawn field(s) to answer."
    if not open_fields:
        return head
    rows = [["id", "file", "page", "field", "value", "reference"]]
    rows += [[str(f.field_id), f.file, str(f.page), f.name, f.value or "(empty)", f"{f.file}:{f.page}:{f.name}"]
             for f in open_fields]
    return head + "\n" + table_text(rows)


def report_text(batch: Batch) -> str:
    """Fields accepted without a person, fields audited so far / drawn, errors found and the 95 % bound."""
    found = audit_status(batch)
    now = count_unattended(batch)
    if found is None:
        return (f"Fields accepted without a person: {now:,}.\n"
                "No spot check was drawn: the residual error was not measured (inkcount audit BATCH --draw N).")
    r = found.record
    lines = [
        f"Spot check drawn {r.drawn_at} by {r.reviewer}, seed {r.seed} ({r.method}).",
        f"Fields accepted without a person: {r.population:,} when drawn ({now:,} now).",
        f"Fields audited: {found.audited:,} of {found.drawn:,} drawn.",
        f"Errors found: {found.errors:,}.",
    ]
    bound = found.bound()
    if bound is None:
        lines.append("Upper bound on wrong values: not measured yet (no drawn field answered).")
    else:
        lines.append(f"Upper bound on wrong values among the fields accepted without a person: {percent(bound)} "
                     f"({CONFIDENCE_WORDS} one-sided, exact binomial of Clopper and Pearson; {found.errors:,} in "
                     f"{found.audited:,}).")
    return "\n".join(lines)


def plan_text(batch: Batch, target: float) -> str:
    """How many fields to audit to claim at most ``target`` wrong, against those of this batch."""
    now = count_unattended(batch)
    needs = {k: fields_needed(target, k) for k in PLAN_ERRORS}
    rows = [["errors found", "fields to audit"]] + [[str(k), f"{n:,}"] for k, n in needs.items()]
    lines = [f"To claim at most {share_words(target)} wrong values among the fields accepted without a person, with "
             f"{CONFIDENCE_WORDS} confidence (one-sided exact binomial bound), audit at least:", table_text(rows),
             f"This batch has {now:,} field(s) accepted without a person."]
    if now < needs[0]:
        lines.append(f"That is fewer than the {needs[0]:,} a spot check needs even with no error found: a spot "
                     f"check of this batch alone cannot show {share_words(target)}. Check every one of them by "
                     "hand, or state a larger bound.")
    else:
        lines.append(f"Auditing {needs[0]:,} of them ({needs[0] / now:.1%}) can show it if no error is found; "
                     f"{needs[1]:,} if one is.")
    return "\n".join(lines)
