"""Fuzzing benchmark: damaged and hostile scans never stop ``inkcount read``.

Makes good scans of every supported format and mode from the orchard card
(:func:`recognizer.synth.damage.good_scans`), then ``--files`` damaged files
from them (:func:`recognizer.synth.damage.damaged_scans`: bytes flipped,
files cut short, headers broken, decompression bombs, huge declared sizes and
page counts, broken TIFF pages, damaged PDFs, odd modes and bit depths), and
runs ``inkcount read`` in a child process on groups of them mixed with good
files, each group with a time limit. It prints:

- files tried;
- tracebacks: groups whose ``inkcount read`` printed "Traceback (most recent
  call last)" or ended with an exit code other than 0 or 1 (the files of such
  a group are then tried one by one, and the culprits named);
- hangs: groups over the time limit (likewise tried one by one);
- files without a named message: a damaged file that cannot be read as it
  was made (cut short, too large, ...) with no problem line naming it, or any
  damaged file with no row at all in the values CSV;
- good files not read: a good file mixed in whose values are missing or
  that has a problem;
- peak memory: the largest resident set of any child (``ru_maxrss``).

Targets (issue 12, "damaged scans never stop the batch"): 0, 0, 0, 0 and
under 1 GB. Damaged files that still read with values (a flipped byte in a
JPEG's image data) are counted apart, by kind of damage: not a failure.

Usage: ``python bench/bench_fuzz.py [--files 1000] [--seed 0] [--group 50] [--timeout 300] [--keep DIR]``
"""

from __future__ import annotations

import argparse
import csv
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

import numpy as np

from recognizer.synth.damage import DamagedScan, damaged_scans, good_scans

#: Good files mixed into every group (their values must come out).
GOOD_MIX = ("card.png", "cards.pdf", "cards_g4.tif", "card_colour.jpg", "card_16bit.png", "cards.tif")


def run_read(files: list[Path], out: Path, timeout: float) -> tuple[str, str]:
    """Run ``inkcount read`` on ``files``; return (outcome, stderr) with outcome ok, traceback or hang."""
    command = [sys.executable, "-m", "recognizer.cli", "read", *map(str, files), "--out", str(out), "--quiet"]
    try:
        done = subprocess.run(command, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return "hang", ""
    if "Traceback (most recent call last)" in done.stderr or done.returncode not in (0, 1):
        return "traceback", done.stderr[-2000:]
    return "ok", done.stderr


def rows_by_file(csv_path: Path) -> dict[str, list[dict[str, str]]]:
    rows: dict[str, list[dict[str, str]]] = {}
    if not csv_path.exists():
        return rows
    with open(csv_path, newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            rows.setdefault(row["file"], []).append(row)
    return rows


def has_values(row: dict[str, str]) -> bool:
    skip = {"file", "page", "to_check", "problem", "template", "rule_problems"}
    return not row.get("problem") and any(v for k, v in row.items() if k not in skip)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--files", type=int, default=1000, help="damaged files to try (default 1000)")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--group", type=int, default=50, help="damaged files per inkcount read (default 50)")
    parser.add_argument("--timeout", type=float, default=300.0, help="seconds allowed for one group (default 300)")
    parser.add_argument("--file-timeout", type=float, default=60.0,
                        help="seconds allowed for one file tried alone after a group failed (default 60)")
    parser.add_argument("--keep", type=Path, help="keep the files and CSVs in this folder")
    args = parser.parse_args()

    folder = Path(tempfile.mkdtemp(prefix="inkcount-fuzz-")) if args.keep is None else args.keep
    folder.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    good = good_scans(seed=args.seed)
    damaged = list(damaged_scans(good, args.files, seed=args.seed))
    print(f"made {len(good)} good scans and {len(damaged)} damaged files in "
          f"{time.perf_counter() - started:.1f} s", flush=True)

    rng = np.random.default_rng(args.seed)
    tracebacks: list[str] = []
    hangs: list[str] = []
    unnamed: list[DamagedScan] = []
    good_missed: list[str] = []
    read_anyway: Counter = Counter()
    by_kind: Counter = Counter()
    slowest = 0.0
    groups = [damaged[i:i + args.group] for i in range(0, len(damaged), args.group)]
    for g, group in enumerate(groups):
        where = folder / f"group{g:03d}"
        where.mkdir(exist_ok=True)
        paths: dict[Path, DamagedScan | None] = {}
        for item in group:
            path = where / item.name
            path.write_bytes(item.data)
            paths[path] = item
        for k in range(3):
            name = GOOD_MIX[(3 * g + k) % len(GOOD_MIX)]
            path = where / f"good_{k}_{name}"
            path.write_bytes(good[name])
            paths[path] = None
        order = list(paths)
        rng.shuffle(order)
        t0 = time.perf_counter()
        outcome, stderr = run_read(order, where / "values.csv", args.timeout)
        took = time.perf_counter() - t0
        slowest = max(slowest, took)
        if outcome != "ok":
            culprits = []
            for path in order:  # one by one, to name the file
                alone, err = run_read([path], where / f"{path.name}.csv", args.file_timeout)
                if alone != "ok":
                    culprits.append(f"{path.name} ({paths[path].damage if paths[path] else 'good'}): {alone}"
                                    + (f"\n      {err.strip().splitlines()[-1]}" if err.strip() else ""))
            (hangs if outcome == "hang" else tracebacks).append(
                f"group {g}: " + ("; ".join(culprits) if culprits else "no single file fails alone"))
            print(f"group {g + 1}/{len(groups)}: {outcome} after {took:.0f} s", flush=True)
            continue
        rows = rows_by_file(where / "values.csv")
        for path, item in paths.items():
            got = rows.get(str(path), [])
            if item is None:
                if not got or any(r["problem"] for r in got) or not any(has_values(r) for r in got):
                    good_missed.append(f"{path.name}: {[r['problem'] for r in got]}")
                continue
            by_kind[item.damage] += 1
            named = any(r["problem"] for r in got)
            if not got or (item.must_name and not named):
                unnamed.append(item)
            elif not named and any(has_values(r) for r in got):
                read_anyway[item.damage] += 1
        print(f"group {g + 1}/{len(groups)}: ok in {took:.0f} s", flush=True)

    peak_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024  # kB on Linux
    print()
    print(f"files tried:                     {len(damaged)} damaged (+ {3 * len(groups)} good mixed in), "
          f"{len(groups)} groups, slowest group {slowest:.0f} s, all in {time.perf_counter() - started:.0f} s")
    print(f"tracebacks:                      {len(tracebacks)}")
    for line in tracebacks:
        print(f"  {line}")
    print(f"hangs (over {args.timeout:.0f} s a group):     {len(hangs)}")
    for line in hangs:
        print(f"  {line}")
    print(f"files without a named message:   {len(unnamed)}")
    for item in unnamed[:20]:
        print(f"  {item.name} ({item.damage}, from {item.base or 'headers alone'})")
    print(f"good files not read:             {len(good_missed)}")
    for line in good_missed[:20]:
        print(f"  {line}")
    print(f"peak memory (children):          {peak_mb:,.0f} MB")
    print(f"damaged files still read with values, no problem (allowed): {sum(read_anyway.values())}")
    for kind, n in read_anyway.most_common():
        print(f"  {n:4d} of {by_kind[kind]:4d}  {kind}")
    if args.keep is None:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
