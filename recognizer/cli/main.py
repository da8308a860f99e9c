"""The ``inkcount`` command line.

Sub-commands:

``inkcount read SCANS... --out values.csv``
    Read the digit boxes of scan files and folders into a CSV.
``inkcount review|status|export BATCH ...``
    Check a batch and export it (see :mod:`recognizer.cli.batch`).
``inkcount audit BATCH ...``
    Spot checks: how many wrong values are left (see :mod:`recognizer.cli.audit`).
``inkcount model train|evaluate ...``
    Build or check the digit model (see :mod:`recognizer.cli.model`).
``inkcount template new|check ...``
    Draft and check form templates (see :mod:`recognizer.cli.template`);
    ``inkcount read --template card.json`` reads with them.
"""

from __future__ import annotations

import argparse
import signal
import sys
from collections import Counter
from contextlib import ExitStack
from importlib.metadata import entry_points
from pathlib import Path

from recognizer import CAUTION, __version__
from recognizer.batch.store import Batch, BatchFileError
from recognizer.ingest import ingest_scans
from recognizer.cli.audit import add_audit_commands
from recognizer.cli.batch import add_batch_commands
from recognizer.cli.model import add_model_commands
from recognizer.cli.template import add_template_commands
from recognizer.reading.values_csv import DigitsWriter, ValuesTable
from recognizer.digits.model import ModelFileError, load_model
from recognizer.reading.cluster import ClusterError
from recognizer.reading.stream import ReadSettings, read_scans
from recognizer.reading.page import PageRead
from recognizer.states import DEFAULT_TARGET_ERROR, MISSING_REASON, REASON_WORDS, Reason
from recognizer.review.strictness import set_target_error, set_threshold
from recognizer.scans.files import DEFAULT_MAX_PIXELS, DEFAULT_PDF_DPI, ScanProblem, count_pages, list_scans
from recognizer.forms.template_file import TemplateFileError, load_template

__all__ = ["main", "build_parser", "COMMANDS_GROUP"]

#: Entry-point group through which other packages add sub-commands: each entry
#: is a function ``(subparsers) -> None``. The desktop window (``app``) adds
#: ``inkcount window`` this way, so this library never imports Qt.
COMMANDS_GROUP = "inkcount.commands"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="inkcount",
        description="Read handwritten digits in the boxes of scanned forms into a checked spreadsheet.",
        epilog=CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"inkcount {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    _add_read_command(sub)
    add_batch_commands(sub)
    add_audit_commands(sub)
    add_model_commands(sub)
    add_template_commands(sub)
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
    p.add_argument("--out", "-o", type=Path, metavar="CSV", help="values table to write (one row per page)")
    p.add_argument("--batch", "-b", type=Path, metavar="FILE", help="batch file (.inkcount) to create or extend, for review and export; files already in it are not read again")
    p.add_argument("--digits", type=Path, metavar="CSV", help="also write one row per digit with its confidence and probabilities")
    p.add_argument("--recursive", "-r", action="store_true", help="look in sub-folders too")
    p.add_argument("--workers", "-j", type=_positive_int, default=1, metavar="N", help="pages read in parallel by N processes (default 1)")
    p.add_argument("--cluster", metavar="ADDRESS",
                   help="read the pages on a running Dask cluster (scheduler address, e.g. tcp://host:8786; the "
                   "workers need Inkcount and the scans at the same path), or local:N for N worker processes "
                   "on this computer; needs pip install 'inkcount[cluster]'")
    p.add_argument("--model", type=Path, metavar="FILE", help="digit model file (default: the model shipped with Inkcount)")
    p.add_argument("--template", "-t", type=Path, action="append", default=[], metavar="FILE",
                   help="form template (from 'inkcount template new'); repeat for several designs: each page "
                   "is read with the template it fits best, and a page that fits none is reported")
    strict = p.add_mutually_exclusive_group()
    strict.add_argument(
        "--target-error", type=_percent, metavar="PERCENT",
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


class _Tally:
    """Takes each page result of a read: counts it, reports problems, fills the tables."""

    def __init__(self, threshold: float, bar, digits_out: DigitsWriter | None):
        self.threshold = threshold
        self.bar = bar
        self.digits_out = digits_out
        self.table = ValuesTable()
        self.problems: list[str] = []
        self.pages = self.fields = self.digits = self.doubtful = 0

    def problem(self, problem: ScanProblem) -> None:
        self.table.add_problem(problem)
        self.problems.append(problem.line())  # the same line as the window's (ScanProblem.line)
        self.bar.write(f"inkcount: {problem.line()}", file=sys.stderr)

    def add(self, result: PageRead | ScanProblem) -> None:
        if isinstance(result, ScanProblem):
            self.problem(result)
            self.bar.update(0 if result.page is None else 1)
            return
        self.bar.update(1)
        self.table.add_page(result, threshold=self.threshold)
        if not result:
            message = f"{result.source}: page {result.page}: {result.problem}"
            self.problems.append(message)
            self.bar.write(f"inkcount: {message}", file=sys.stderr)
            return
        self.pages += 1
        self.fields += len(result.fields)
        self.digits += len(result.digits())
        self.doubtful += sum(len(f.doubtful_digits(self.threshold)) for f in result.fields)
        if self.digits_out:
            self.digits_out.add_page(result)

    def summary(self) -> str:
        fields = sum(map(len, self.table.to_check()))
        share = f" ({fields / self.fields:.0%} of the fields)" if self.fields else ""
        lines = [
            f"Read {self.pages} page(s): {self.fields} fields, {self.digits} digits. "
            f"{fields} field(s) to check{share}; {self.doubtful} digit(s) to check (confidence below "
            f"{self.threshold:.3f}, or not a digit). {len(self.problems)} problem(s)."
        ]
        counts = self.table.reason_counts()
        if counts:
            lines.append("Why fields are to check (a field may have several reasons):")
            by_words: Counter = Counter()
            for reason, n in counts.items():
                by_words[_reason_words(reason)] += n
            lines += [f"  {n:5d}  {words}" for words, n in by_words.most_common()]
        return "\n".join(lines)


def _reason_words(reason: str) -> str:
    if reason in REASON_WORDS:
        return REASON_WORDS[Reason(reason)]
    if reason.startswith(MISSING_REASON):
        return "a field the other pages have was not found on the page"
    return "a template rule is broken" if reason.startswith("rule ") else "flagged"


def run_read(args: argparse.Namespace) -> int:
    from tqdm import tqdm

    if args.out is None and args.batch is None:
        _err("say where the values go: --out values.csv, --batch FILE.inkcount, or both")
        return 2
    if args.cluster is not None and args.workers > 1:
        _err("--workers and --cluster: choose one (a cluster has its own workers)")
        return 2
    try:
        model = load_model(args.model)
    except ModelFileError as exc:
        _err(str(exc))
        return 2
    try:
        for path in args.template:
            load_template(path)
    except TemplateFileError as exc:
        _err(str(exc))
        return 2
    files, listing_problems = list_scans(args.scans, recursive=args.recursive)
    settings = ReadSettings(
        model_path=str(args.model) if args.model else None,
        pdf_dpi=args.pdf_dpi,
        max_pixels=args.max_pixels,
        template_paths=tuple(str(p) for p in args.template),
        cluster=args.cluster,
    )
    with ExitStack() as stack:
        batch = None
        if args.batch is not None:
            try:
                batch = stack.enter_context(Batch.open(args.batch, create=True))
            except BatchFileError as exc:
                _err(str(exc))
                return 2
            _apply_strictness(batch, args, model)
        threshold = _threshold(args, model, batch)
        # count_pages is the guarded probe (headers only, never raises): a file it
        # refuses is counted as nothing here and named as a problem when read.
        total = sum(n for n in (count_pages(f, max_pixels=args.max_pixels) for f in files) if isinstance(n, int))
        bar = tqdm(total=total, unit="page", desc="reading", disable=True if args.quiet else None, file=sys.stderr)
        stack.callback(bar.close)
        try:
            digits_out = stack.enter_context(DigitsWriter(args.digits)) if args.digits else None
        except OSError as exc:
            _err(f"cannot write {args.digits}: {exc}")
            return 2
        tally = _Tally(threshold, bar, digits_out)
        for problem in listing_problems:
            tally.problem(problem)
        try:
            if batch is None:
                for result in read_scans(files, settings=settings, workers=args.workers, model=model):
                    tally.add(result)
            else:
                summary = ingest_scans(
                    batch, files, settings=settings, workers=args.workers,
                    model=model if args.workers == 1 else None,
                    problems=listing_problems, on_result=tally.add,
                )
                for path, known_as in summary.known:
                    bar.write(f"inkcount: {path}: already in the batch (as {known_as}), not read again",
                              file=sys.stderr)
        except ClusterError as exc:
            bar.close()
            _err(str(exc))
            print(tally.summary())
            if args.batch is not None:
                print(f"The {tally.pages} page(s) read are in batch {args.batch}; run the same command again "
                      "to read the rest.")
            elif args.out is not None:
                print(f"{args.out} is not written: run the command again.")
            return 3
    if args.out is not None:
        try:
            tally.table.write(args.out)
        except OSError as exc:
            _err(f"cannot write {args.out}: {exc}")
            return 2

    print(tally.summary())
    for problem in tally.problems:
        print(f"  problem: {problem}")
    written = [f"values to {args.out}"] if args.out else []
    written += [f"digits to {args.digits}"] if args.digits else []
    written += [f"batch {args.batch}"] if args.batch else []
    print("Written: " + ", ".join(written) + ".")
    print(CAUTION)
    return 0 if tally.pages or not tally.problems else 1


def _apply_strictness(batch: Batch, args: argparse.Namespace, model) -> None:
    """A threshold or target given on the command line becomes the batch's setting."""
    if args.threshold is not None:
        set_threshold(batch, args.threshold)
    elif args.target_error is not None and batch.settings.threshold is not None:
        set_target_error(batch, args.target_error / 100, model=model)
    elif args.target_error is not None:
        with batch.transaction() as conn:
            batch.update_settings(conn, target_error=args.target_error / 100)


def _threshold(args: argparse.Namespace, model, batch: Batch | None) -> float:
    if args.threshold is not None:
        return args.threshold
    if batch is not None and batch.settings.threshold is not None:
        return batch.settings.threshold
    target = args.target_error if args.target_error is not None else DEFAULT_TARGET_ERROR * 100
    return model.threshold_for(target / 100)


def _printable_streams() -> None:
    """A file name whose bytes are not UTF-8 prints with them escaped, instead of stopping the command."""
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.reconfigure(errors="backslashreplace")
        except (AttributeError, ValueError, OSError):
            pass


def main(argv: list[str] | None = None) -> int:
    _printable_streams()
    parser = build_parser()
    args = parser.parse_args(argv)
    return int(args.func(args) or 0)


def run() -> None:
    """The ``inkcount`` console command."""
    if hasattr(signal, "SIGPIPE"):  # `inkcount review --list | head` ends quietly
        signal.signal(signal.SIGPIPE, signal.SIG_DFL)
    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    run()
