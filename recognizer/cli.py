"""The ``inkcount`` command line.

Sub-commands:

``inkcount read SCANS... --out values.csv``
    Read the digit boxes of scan files and folders into a CSV.
``inkcount model train|evaluate ...``
    Build or check the digit model (see :mod:`recognizer.cli_model`).
"""

from __future__ import annotations

import argparse
import sys
from contextlib import ExitStack
from importlib.metadata import entry_points
from pathlib import Path

from . import __version__
from .cli_model import add_model_commands
from .export import DigitsWriter, ValuesTable
from .model import ModelFileError, load_model
from .pipeline import ReadSettings, read_scans
from .scan import DEFAULT_MAX_PIXELS, DEFAULT_PDF_DPI, ScanProblem, count_pages, list_scans

__all__ = ["main", "build_parser", "COMMANDS_GROUP"]

#: Entry-point group through which other packages add sub-commands: each entry
#: is a function ``(subparsers) -> None``. The desktop window (``app``) adds
#: ``inkcount window`` this way, so this library never imports Qt.
COMMANDS_GROUP = "inkcount.commands"

CAUTION = (
    "Automatic reading makes mistakes: review every value marked to check before "
    "using the figures. Medical, legal and financial records follow their own "
    "verification rules and local regulations."
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="inkcount",
        description="Read handwritten digits in the boxes of scanned forms into a checked spreadsheet.",
        epilog=CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"inkcount {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    _add_read_command(sub)
    add_model_commands(sub)
    for entry in entry_points(group=COMMANDS_GROUP):
        entry.load()(sub)
    return parser


def _add_read_command(sub) -> None:
    p = sub.add_parser(
        "read",
        help="read the digit boxes of scans into a CSV",
        description="Find the digit boxes on every page of the scans, read each digit and "
        "write one CSV row per page. " + CAUTION,
    )
    p.add_argument("scans", nargs="+", metavar="SCANS", help="scan files (PNG, JPEG, BMP, TIFF, PDF) or folders")
    p.add_argument("--out", "-o", required=True, type=Path, metavar="CSV", help="values table to write (one row per page)")
    p.add_argument("--digits", type=Path, metavar="CSV", help="also write one row per digit with its confidence and probabilities")
    p.add_argument("--recursive", "-r", action="store_true", help="look in sub-folders too")
    p.add_argument("--workers", "-j", type=_positive_int, default=1, metavar="N", help="pages read in parallel by N processes (default 1)")
    p.add_argument("--model", type=Path, metavar="FILE", help="digit model file (default: the model shipped with Inkcount)")
    strict = p.add_mutually_exclusive_group()
    strict.add_argument(
        "--target-error", type=_percent, default=0.1, metavar="PERCENT",
        help="share of wrong digits you accept among those not sent to review, in percent (default 0.1); "
        "sets the confidence threshold from the model's calibration",
    )
    strict.add_argument("--threshold", type=_unit_float, metavar="P", help="confidence threshold (0-1) below which a digit is to check")
    p.add_argument("--pdf-dpi", type=float, default=DEFAULT_PDF_DPI, metavar="DPI", help=f"resolution PDF pages are drawn at (default {DEFAULT_PDF_DPI})")
    p.add_argument("--max-pixels", type=_positive_int, default=DEFAULT_MAX_PIXELS, metavar="N", help="largest page decoded, in pixels (guards against decompression bombs)")
    p.add_argument("--quiet", "-q", action="store_true", help="no progress bar")
    p.set_defaults(func=run_read)


def _positive_int(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError("must be 1 or more")
    return value


def _percent(text: str) -> float:
    value = float(text.rstrip("%"))
    if not 0 < value < 100:
        raise argparse.ArgumentTypeError("must be a percentage between 0 and 100")
    return value


def _unit_float(text: str) -> float:
    value = float(text)
    if not 0 <= value <= 1:
        raise argparse.ArgumentTypeError("must be between 0 and 1")
    return value


def _err(message: str) -> None:
    print(f"inkcount: {message}", file=sys.stderr)


def run_read(args: argparse.Namespace) -> int:
    from tqdm import tqdm

    try:
        model = load_model(args.model)
    except ModelFileError as exc:
        _err(str(exc))
        return 2
    threshold = args.threshold if args.threshold is not None else model.threshold_for(args.target_error / 100)

    files, problems = list_scans(args.scans, recursive=args.recursive)
    total = sum(n for n in (count_pages(f, max_pixels=args.max_pixels) for f in files) if isinstance(n, int))
    settings = ReadSettings(
        model_path=str(args.model) if args.model else None,
        pdf_dpi=args.pdf_dpi,
        max_pixels=args.max_pixels,
    )
    table = ValuesTable()
    counts = {"pages": 0, "fields": 0, "digits": 0, "doubtful": 0, "fields_to_check": 0}
    all_problems: list[ScanProblem | str] = list(problems)
    for problem in problems:
        table.add_problem(problem)
        _err(str(problem))

    bar = tqdm(total=total, unit="page", desc="reading", disable=True if args.quiet else None, file=sys.stderr)
    try:
        with ExitStack() as stack:
            stack.callback(bar.close)
            digits_out = stack.enter_context(DigitsWriter(args.digits)) if args.digits else None
            for result in read_scans(files, settings=settings, workers=args.workers, model=model):
                if isinstance(result, ScanProblem):
                    table.add_problem(result)
                    all_problems.append(result)
                    bar.write(f"inkcount: {result}", file=sys.stderr)
                    bar.update(1 if result.page is not None else 0)
                    continue
                bar.update(1)
                table.add_page(result, threshold=threshold)
                if not result:
                    message = f"{result.source}: page {result.page}: {result.problem}"
                    all_problems.append(message)
                    bar.write(f"inkcount: {message}", file=sys.stderr)
                    continue
                counts["pages"] += 1
                counts["fields"] += len(result.fields)
                digits = result.digits()
                counts["digits"] += len(digits)
                counts["doubtful"] += sum(1 for d in digits if d.not_a_digit or d.confidence < threshold)
                counts["fields_to_check"] += sum(1 for f in result.fields if result.warnings or f.to_check(threshold))
                if digits_out:
                    digits_out.add_page(result)
    except OSError as exc:
        _err(f"cannot write the digits table: {exc}")
        return 2
    try:
        table.write(args.out)
    except OSError as exc:
        _err(f"cannot write {args.out}: {exc}")
        return 2

    print(
        f"Read {counts['pages']} page(s): {counts['fields']} fields, {counts['digits']} digits. "
        f"{counts['doubtful']} digit(s) in {counts['fields_to_check']} field(s) to check "
        f"(confidence below {threshold:.3f}, or not a digit, or a gap). "
        f"{len(all_problems)} problem(s).",
    )
    for problem in all_problems:
        print(f"  problem: {problem}")
    print(f"Values written to {args.out}" + (f", digits to {args.digits}" if args.digits else "") + ".")
    print(CAUTION)
    return 0 if counts["pages"] or not all_problems else 1


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    return int(args.func(args) or 0)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
