"""Command line: ``longwave <command> ...``. Thin: every command is a library call.

Each subcommand lives in its own module exposing ``register(subparsers)``,
which adds its parser and sets ``func`` to a function taking the parsed
arguments and returning an exit code.
"""

from __future__ import annotations

import argparse
import importlib
import sys

# Modules providing subcommands, in the order `longwave --help` lists them.
COMMAND_MODULES = ["demo", "simulate", "fit", "survey", "bench", "inspect"]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="longwave",
        description="Gaussian-process regression for long, irregularly sampled time series.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        importlib.import_module(f"{__name__}.{name}").register(sub)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    # Errors of use (bad input, files, a store locked by another writer, a
    # cluster that cannot run tasks) get one clear line, not a traceback.
    except (ValueError, OSError, RuntimeError) as exc:
        print(f"longwave {args.command}: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
