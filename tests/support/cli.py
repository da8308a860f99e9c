"""Running ``inkcount`` batch commands in this process."""

from __future__ import annotations

import argparse

from recognizer.cli.audit import add_audit_commands
from recognizer.cli.batch import add_batch_commands


def run(*argv: str) -> int:
    parser = argparse.ArgumentParser(prog="inkcount")
    sub = parser.add_subparsers(dest="command", required=True)
    add_batch_commands(sub)
    add_audit_commands(sub)
    args = parser.parse_args(argv)
    return args.func(args)
