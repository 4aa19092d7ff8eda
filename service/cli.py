"""The ``oxyrule`` command line.

Kept light on imports: each subcommand imports what it needs when it runs, so a one-off
command answers quickly (the web framework is never imported here).

Exit codes of ``assess`` (contract §1): 0 every input assessed, whatever the verdict;
2 an input was rejected (its OperationOutcome is still printed); 1 an internal error.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import IO

from service import __version__

EXIT_OK, EXIT_INTERNAL, EXIT_REJECTED = 0, 1, 2


def _demo(args: argparse.Namespace) -> int:
    from service.demo import run_demo

    sys.stdout.write(run_demo(as_json=args.json))
    return EXIT_OK


def _assess(args: argparse.Namespace) -> int:
    from service.batch import Progress, answer, assess_lines, numbered_lines
    from service.config import Settings
    from service.fhir.render import PressureUnit
    from service.runtime import Runtime

    overrides: dict[str, object] = {"strict_fhir": args.strict}
    if args.rules:
        overrides["rules_dir"] = args.rules
    settings = Settings(**overrides)  # type: ignore[arg-type]
    unit: PressureUnit | None = args.units
    path: str = args.path
    ndjson = args.ndjson or path.endswith((".ndjson", ".jsonl"))
    stream: IO[bytes] = sys.stdin.buffer if path == "-" else Path(path).open("rb")  # noqa: SIM115
    out = sys.stdout.buffer
    rejected = False
    with stream:
        if ndjson:
            progress = Progress()
            lines = numbered_lines(stream)
            for text, bad in assess_lines(
                lines, settings=settings, unit=unit, workers=args.workers
            ):
                out.write(text + b"\n")
                rejected |= bad
                progress.step()
            progress.close()
        else:
            text, rejected = answer(Runtime.load(settings), stream.read(), "Bundle", unit)
            out.write(text + b"\n")
    out.flush()
    return EXIT_REJECTED if rejected else EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="oxyrule",
        description="Grade the likely mechanism of hypoxaemia from blood-gas data. "
        "Decision support for qualified clinicians, not a diagnosis.",
    )
    parser.add_argument("--version", action="version", version=f"oxyrule {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    demo = commands.add_parser("demo", help="assess a built-in invented scenario and explain it")
    demo.add_argument("--json", action="store_true", help="print the result Bundle instead")
    demo.set_defaults(handler=_demo)
    assess = commands.add_parser(
        "assess", help="assess a FHIR Bundle (JSON), or NDJSON of Bundles; '-' reads stdin"
    )
    assess.add_argument("path", help="a Bundle JSON file, an NDJSON file, or - for stdin")
    assess.add_argument("--ndjson", action="store_true", help="read stdin as NDJSON")
    assess.add_argument("--rules", type=Path, help="rule directory (default: the shipped set)")
    assess.add_argument(
        "--units", choices=("mm[Hg]", "kPa"), help="pressure unit of the result (default: setting)"
    )
    assess.add_argument(
        "--strict", action="store_true", help="validate the whole input as FHIR R4B first"
    )
    assess.add_argument(
        "--workers", type=int, default=1, metavar="N", help="processes for NDJSON input"
    )
    assess.set_defaults(handler=_assess)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``oxyrule`` console script; returns the process exit code."""
    args = build_parser().parse_args(argv)
    try:
        result: int = args.handler(args)
    except Exception as exc:  # the last line of defence: say what failed, exit 1
        from service.engine import RuleSetError

        if isinstance(exc, RuleSetError | OSError):
            sys.stderr.write(f"oxyrule: {exc}\n")
            return EXIT_INTERNAL
        raise
    return result


if __name__ == "__main__":
    raise SystemExit(main())
