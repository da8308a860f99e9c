"""Running ``inkcount`` batch commands in this process."""

from __future__ import annotations

import argparse

from recognizer.cli.batch import add_batch_commands


def run(*argv: str) -> int:
    parser = argparse.ArgumentParser(prog="inkcount")
    add_batch_commands(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(argv)
    return args.func(args)
