"""The ``oxyrule`` command line.

Kept light on imports: each subcommand imports what it needs when it runs, so a one-off
command answers quickly (the web framework is never imported here).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from service import __version__


def _demo(_: argparse.Namespace) -> int:
    from service.demo import run_demo

    sys.stdout.write(run_demo())
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="oxyrule",
        description="Grade the likely mechanism of hypoxaemia from blood-gas data. "
        "Decision support for qualified clinicians, not a diagnosis.",
    )
    parser.add_argument("--version", action="version", version=f"oxyrule {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    demo = commands.add_parser("demo", help="assess a built-in invented scenario and explain it")
    demo.set_defaults(handler=_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``oxyrule`` console script; returns the process exit code."""
    args = build_parser().parse_args(argv)
    handler = args.handler
    result: int = handler(args)
    return result


if __name__ == "__main__":
    raise SystemExit(main())
