"""``inkcount template`` commands: draft a form template from a scan, check a template.

``inkcount template new BLANK -o card.json [--name NAME] [--names a,b,...]``
    Find the digit boxes on the first page of a blank (or filled) form and
    write a draft template: one optional ``digits`` field per field found,
    named ``f01``, ``f02``, ... (or by ``--names``, in reading order). Names,
    types and rules are then set in the file (its format is described in
    :mod:`recognizer.forms.template_file`).
``inkcount template check card.json [SCANS...]``
    Load a template, list its fields and rules, and for each page of the
    scans given print how well it registers to the template.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from recognizer.forms.drafting import draft_from_scan
from recognizer.forms.registration import Registrar
from recognizer.scans.files import DEFAULT_PDF_DPI, ScanProblem, iter_pages, list_scans
from recognizer.forms.template import Template, TemplateError
from recognizer.forms.template_file import TemplateFileError, load_template, save_template

__all__ = ["add_template_commands"]


def add_template_commands(sub) -> None:
    """Add ``template new`` and ``template check`` to the ``inkcount`` sub-commands."""
    p = sub.add_parser("template", help="make and check form templates",
                       description="Form templates name and type the digit fields of one form design.")
    tsub = p.add_subparsers(dest="template_command", metavar="ACTION", required=True)
    new = tsub.add_parser("new", help="draft a template from a blank (or filled) form scan",
                          description="Find the digit boxes on the first page of a form scan and write "
                          "a draft template with one field per field found.")
    new.add_argument("blank", type=Path, metavar="BLANK", help="scan of the form (PNG, JPEG, TIFF, BMP, PDF)")
    new.add_argument("--out", "-o", type=Path, required=True, metavar="JSON", help="template file to write")
    new.add_argument("--name", help="the template's name (default: the scan's file name)")
    new.add_argument("--names", metavar="A,B,...", help="field names in reading order, comma-separated")
    new.add_argument("--pdf-dpi", type=float, default=DEFAULT_PDF_DPI, metavar="DPI",
                     help=f"resolution a PDF page is drawn at (default {DEFAULT_PDF_DPI})")
    new.set_defaults(func=run_new)
    check = tsub.add_parser("check", help="check a template file and how scans fit it",
                            description="Load a template, list its fields and rules, and print the "
                            "registration score of every page of the scans given.")
    check.add_argument("template", type=Path, metavar="JSON", help="template file")
    check.add_argument("scans", nargs="*", metavar="SCANS", help="scan files or folders to try against it")
    check.set_defaults(func=run_check)


def _err(message: str) -> int:
    print(f"inkcount: {message}", file=sys.stderr)
    return 2


def run_new(args: argparse.Namespace) -> int:
    names = [n.strip() for n in args.names.split(",")] if args.names else None
    try:
        draft = draft_from_scan(args.blank, pdf_dpi=args.pdf_dpi, name=args.name, field_names=names)
    except (ValueError, TemplateError) as exc:
        return _err(str(exc))
    if draft.scan_problem is not None:  # the page could not be read
        return _err(str(draft.scan_problem))
    if not draft:  # no digit boxes on it
        return _err(f"{args.blank}: {draft.problem}")
    template = draft.template
    try:
        save_template(template, args.out)
    except (ValueError, TemplateError) as exc:
        return _err(str(exc))
    except OSError as exc:
        return _err(f"cannot write {args.out}: {exc}")
    print(f"Wrote {args.out}: template {template.name!r}, {len(template.fields)} field(s) "
          f"from {args.blank} at {template.reference.dpi:g} dpi:")
    _list_fields(template)
    for warning in draft.warnings:
        print(f"  warning: {warning}")
    print("Every field is optional digits: set names, types and rules in the file, and remove "
          "the fields that are not digit fields.")
    return 0


def _list_fields(template: Template) -> None:
    for f in template.fields:
        details = [f.type, f"{len(f.boxes)} box(es)"]
        details += ["required"] if f.required else []
        details += [f"{f.decimals} decimal(s)"] if f.decimals else []
        details += [f.date_order] if f.date_order else []
        details += [f"check digit {f.check_digit}"] if f.check_digit else []
        details += [f"min {f.minimum}"] if f.minimum is not None else []
        details += [f"max {f.maximum}"] if f.maximum is not None else []
        details += [f"lengths {'/'.join(map(str, f.lengths))}"] if f.lengths else []
        print(f"  {f.name}: {', '.join(details)}")


def run_check(args: argparse.Namespace) -> int:
    try:
        template = load_template(args.template)
    except TemplateFileError as exc:
        return _err(str(exc))
    ref = template.reference
    print(f"{args.template}: template {template.label}, reference {ref.width_px} x {ref.height_px} px "
          f"at {ref.dpi:g} dpi, {len(template.fields)} field(s):")
    _list_fields(template)
    for rule in template.sums:
        print(f"  rule: {rule.total} = {' + '.join(rule.parts)}")
    if not args.scans:
        return 0
    files, problems = list_scans(args.scans)
    registrar = Registrar(template)
    matched = 0
    for item in [*problems, *iter_pages(files)]:
        if isinstance(item, ScanProblem):
            print(f"  {item}")
            continue
        reg = registrar.register(item.image, dpi=item.dpi)
        verdict = "matches" if reg else (reg.problem or "does not match")
        print(f"  {item.source} page {item.page}: score {reg.score:.2f}, rotation {reg.rotation_deg:.1f} "
              f"degrees, scale {reg.scale:.3f}: {verdict}")
        matched += bool(reg)
    return 0 if matched else 1
