"""The ``oxyrule`` command line.

Kept light on imports: each subcommand imports what it needs when it runs, so a one-off
command answers quickly (the web framework is never imported here).

Exit codes of ``assess`` (README, Using it): 0 every input assessed, whatever the verdict;
2 an input was rejected (its OperationOutcome is still printed); 1 an internal error.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import IO, TYPE_CHECKING

from service import __version__

if TYPE_CHECKING:
    from service.config import Settings

EXIT_OK, EXIT_INTERNAL, EXIT_REJECTED = 0, 1, 2


def _demo(args: argparse.Namespace) -> int:
    from service.demo import run_demo

    sys.stdout.write(run_demo(as_json=args.json))
    return EXIT_OK


def _settings(args: argparse.Namespace, **extra: object) -> Settings:
    """The settings of one command: the environment's, with ``--rules`` and ``--site``."""
    from service.config import Settings

    values = dict(extra)
    if getattr(args, "rules", None):
        values["rules_dir"] = args.rules
    if getattr(args, "site", None):
        values["site_file"] = args.site
    return Settings(**values)  # type: ignore[arg-type]


def _serve(args: argparse.Namespace) -> int:
    # The web framework is imported here and nowhere else on the command-line path.
    from service.api.server import serve

    return serve(
        host=args.host,
        port=args.port,
        workers=args.workers,
        rules=args.rules,
        site=args.site,
        mllp_port=args.mllp_port,
        bench=False if args.no_bench else None,
    )


def _assess(args: argparse.Namespace) -> int:
    from service.assess.presentation import PressureUnit
    from service.batch import Progress, answer, assess_lines, numbered_lines
    from service.runtime import Runtime

    settings = _settings(args, strict_fhir=args.strict)
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
            for number, text, bad in assess_lines(
                lines, settings=settings, unit=unit, workers=args.workers
            ):
                out.write(text + b"\n")
                rejected |= bad
                progress.step(number, bad)
            out.flush()
            progress.close()
        else:
            from service.hl7v2.handle import answer_v2

            raw, runtime = stream.read(), Runtime.load(settings)
            # An HL7 v2 message (MSH first, or MLLP-framed) is told from a Bundle by content.
            text, rejected = answer_v2(runtime, raw, unit) or answer(
                runtime, raw, "the input", unit
            )
            out.write(text + b"\n")
            if rejected:  # said on stderr too: stdout may be going to a file
                sys.stderr.write(
                    "oxyrule: the input was rejected; its OperationOutcome is on standard output\n"
                )
    out.flush()
    return EXIT_REJECTED if rejected else EXIT_OK


def _mllp(args: argparse.Namespace) -> int:
    import logging.config

    from service.api.logs import log_config
    from service.hl7v2.mllp import MllpLimits, run_mllp
    from service.workbench.lint import RuleSetRefused, verified_runtime

    # The same JSON lines as `oxyrule serve`, on stderr.
    logging.config.dictConfig(log_config("info"))
    try:
        runtime = verified_runtime(_settings(args))
    except RuleSetRefused as exc:
        sys.stderr.write(f"oxyrule: cannot start: {exc}\n")
        return EXIT_INTERNAL
    limits = MllpLimits(
        max_frame_bytes=args.max_frame_bytes,
        idle_timeout_s=args.idle_timeout,
        max_connections=args.max_connections,
        max_buffered_bytes=max(args.max_buffered_bytes, args.max_frame_bytes),
    )
    descriptors = _descriptors(args.max_connections + 64)  # the peers, and room for files
    if descriptors is not None:
        sys.stderr.write(f"oxyrule: cannot start: {descriptors}\n")
        return EXIT_INTERNAL
    run_mllp(runtime, args.host, args.port, limits=limits)
    return EXIT_OK


def _descriptors(needed: int) -> str | None:
    """Why the process cannot open ``needed`` files (its limit raised when it can be), or None."""
    import resource

    soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
    if soft == resource.RLIM_INFINITY or soft >= needed:
        return None
    if hard == resource.RLIM_INFINITY or hard >= needed:
        resource.setrlimit(resource.RLIMIT_NOFILE, (needed, hard))
        return None
    return f"--max-connections needs {needed} open files and the limit is {hard} (ulimit -n)"


def _rules_dir(args: argparse.Namespace) -> Path:
    from service.config import default_rules_dir

    return Path(args.rules) if getattr(args, "rules", None) else default_rules_dir()


def _fixture_paths(named: Sequence[str] | None, rules_dir: Path) -> list[Path]:
    """The fixture folders named, else the default ones (``default_fixture_dirs``)."""
    from service.workbench.expectations import FixtureError, default_fixture_dirs

    if named:
        return [Path(p) for p in named]
    found = default_fixture_dirs(rules_dir)
    if not found:
        raise FixtureError(
            f"no fixtures folder here ({Path.cwd()}) nor beside the rule set ({rules_dir}): "
            "name one, e.g. `oxyrule test path/to/fixtures`"
        )
    return found


def _test(args: argparse.Namespace) -> int:
    from service.runtime import Runtime
    from service.workbench.expectations import FixtureError, find_cases, mismatch_table
    from service.workbench.runner import run_cases, summary_line

    runtime = Runtime.load(_settings(args))
    try:
        cases = find_cases(_fixture_paths(args.fixtures, runtime.settings.rules_dir))
    except FixtureError as exc:
        sys.stderr.write(f"oxyrule test: {exc}\n")
        return EXIT_REJECTED
    results = run_cases(cases, runtime)
    out = sys.stdout
    site = f"; {runtime.site_view.summary()}" if runtime.site_view is not None else ""
    out.write(f"rule set {runtime.ruleset.identity}{site}\n")
    for r in results:
        if r.passed:
            continue
        out.write(f"\nFAILED {r.case.name}  ({r.case.expected_path})\n")
        if r.status == "gap-closed":
            out.write(f"  known gap now passes: remove `known_gap` ({r.case.outcome.known_gap})\n")
        elif r.error is not None:
            out.write(f"  input rejected: {r.error}\n")
        else:
            out.write("  " + mismatch_table(r.mismatches).replace("\n", "\n  ") + "\n")
            if r.assessment is not None:
                from service.workbench.expectations import deciding_rules

                out.write(f"  decided by: {', '.join(deciding_rules(r.assessment))}\n")
    if args.junit:
        from service.workbench.junit import junit_xml

        Path(args.junit).write_bytes(junit_xml(results))
    if args.html:
        from service.workbench.report import html_report

        Path(args.html).write_text(html_report(results, runtime), encoding="utf-8")
    out.write(summary_line(results) + "\n")
    return EXIT_OK if all(r.passed for r in results) else 1


def _lint(args: argparse.Namespace) -> int:
    from service.workbench.expectations import FixtureError, default_fixture_dirs, find_cases
    from service.workbench.lint import lint, plural

    directory = Path(args.directory) if args.directory else _rules_dir(args)
    if args.update_lock:
        from service.config import Settings
        from service.runtime import Runtime
        from service.workbench.lock import write_lock

        path = write_lock(directory, Runtime.load(Settings(rules_dir=directory)).ruleset)
        sys.stdout.write(f"wrote {path}\n")
    fixtures: list[Path] | None = None
    if not args.no_coverage:
        named = [Path(p) for p in args.fixtures or ()]
        fixtures = named or default_fixture_dirs(directory)
    messages = lint(directory, fixtures=fixtures)
    for message in messages:
        sys.stdout.write(f"{message}\n")
    errors = sum(m.severity == "error" for m in messages)
    warnings = len(messages) - errors
    if fixtures is None:
        scope = "fixture coverage not checked (--no-coverage)"
    else:
        try:
            count = len(find_cases([f for f in fixtures if f.exists()]))
            where = ", ".join(str(f) for f in fixtures) or "no folder"
            scope = f"fixture coverage checked against {plural(count, 'case')} in {where}"
        except FixtureError:
            scope = "fixture coverage: a fixture file could not be read (see above)"
    sys.stdout.write(
        f"{directory}: {plural(errors, 'error')}, {plural(warnings, 'warning')}; {scope}\n"
    )
    return 1 if errors else EXIT_OK


def _explain(args: argparse.Namespace) -> int:
    import orjson

    from service.runtime import Runtime
    from service.workbench.case_input import CaseInputError, read_case
    from service.workbench.explain import explain_json, explain_text

    runtime = Runtime.load(_settings(args))
    raw = sys.stdin.buffer.read() if args.path == "-" else Path(args.path).read_bytes()
    try:
        case = read_case(raw, runtime)
    except CaseInputError as exc:
        sys.stdout.write("input rejected:\n" + "".join(f"  {p}\n" for p in exc.problems))
        return EXIT_REJECTED
    unit = args.units or runtime.settings.pressure_unit
    assessment = runtime.assess_intake(case.intake, pressure_unit=unit)
    view = {"settings": runtime.settings, "site": runtime.site_view, "pressure_unit": unit}
    if args.format == "json":
        data = explain_json(case.intake, assessment, **view)  # type: ignore[arg-type]
        sys.stdout.buffer.write(orjson.dumps(data, option=orjson.OPT_INDENT_2) + b"\n")
    else:
        text = explain_text(case.intake, assessment, full=args.full, **view)  # type: ignore[arg-type]
        sys.stdout.write(text)
    return EXIT_OK


def _positive(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError("must be 1 or more")
    return value


def _bulk(args: argparse.Namespace) -> int:
    from pydantic import ValidationError

    from service.bulk.export import ExportError
    from service.bulk.job import JobOptions, run_job
    from service.bulk.output import OutputExistsError
    from service.bulk.pseudonym import PseudonymKeyError
    from service.bulk.settings import BulkSettings
    from service.config import Settings

    settings = Settings(rules_dir=args.rules) if args.rules else Settings()
    try:
        bulk = BulkSettings()
    except ValidationError as exc:
        sys.stderr.write(f"oxyrule bulk: a bulk setting is not valid: {_first_error(exc)}\n")
        return EXIT_REJECTED
    options = JobOptions(
        export_dir=args.export_dir,
        out_dir=args.out_dir,
        engine=args.engine,
        workers=args.workers,
        master=args.master,
        pseudonymise=args.pseudonymise,
        spill_dir=args.spill_dir,
    )
    try:
        report = run_job(options, settings, bulk)
    except (PseudonymKeyError, ExportError, OutputExistsError) as exc:
        sys.stderr.write(f"oxyrule bulk: {exc}\n")
        return EXIT_REJECTED
    except ImportError as exc:
        extra = "spark" if args.engine == "spark" else "bulk"
        sys.stderr.write(
            f"oxyrule bulk: {exc.name or exc} is not installed; "
            f"install the extra: pip install 'oxyrule[{extra}]'\n"
        )
        return EXIT_INTERNAL
    sys.stdout.write(report.line() + "\n")
    return EXIT_OK


def _first_error(exc: object) -> str:
    errors: list[dict[str, object]] = getattr(exc, "errors", list)()
    if not errors:
        return str(exc)
    first = errors[0]
    location = first.get("loc", ())
    field = "_".join(str(p) for p in location) if isinstance(location, tuple) else ""
    return f"OXYRULE_BULK_{field.upper()}: {first.get('msg')}"


def _bulk_synth(args: argparse.Namespace) -> int:
    from service.bulk.synth import write_export

    written = write_export(Path(args.out_dir), patients=args.patients, seed=args.seed)
    sys.stdout.write(
        f"oxyrule bulk synth: {written.patients:,} invented patients, "
        f"{written.observations:,} Observations ({written.gases:,} arterial gases), "
        f"{written.bad_lines:,} bad lines in {written.files} files → {args.out_dir}\n"
    )
    return EXIT_OK


def bulk_synth_parser() -> argparse.ArgumentParser:
    """``oxyrule bulk synth N OUT_DIR``: an invented Bulk Data export."""
    parser = argparse.ArgumentParser(
        prog="oxyrule bulk synth",
        description="Write an invented FHIR Bulk Data export (no real people): patients with "
        "blood-gas series across the mechanisms, several locations and months, and some bad "
        "lines. The same seed gives the same files.",
    )
    parser.add_argument("patients", type=_positive, metavar="N", help="invented patients")
    parser.add_argument("out_dir", metavar="OUT_DIR", help="folder to write (must not exist)")
    parser.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    parser.set_defaults(handler=_bulk_synth)
    return parser


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="oxyrule",
        description="Grade the likely mechanism of hypoxaemia from blood-gas data. "
        "Decision support for qualified clinicians, not a diagnosis.",
    )
    parser.add_argument("--version", action="version", version=f"oxyrule {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    demo = commands.add_parser(
        "demo", help="assess the built-in invented scenarios and summarise each"
    )
    demo.add_argument("--json", action="store_true", help="print the result Bundle instead")
    demo.set_defaults(handler=_demo)
    serve = commands.add_parser(
        "serve", help="run the HTTP service (settings from OXYRULE_* environment variables)"
    )
    serve.add_argument("--host", help="address to bind (default: OXYRULE_HOST or 127.0.0.1)")
    serve.add_argument("--port", type=int, help="port (default: OXYRULE_PORT or 8080)")
    serve.add_argument(
        "--workers", type=int, metavar="N", help="server processes (default: OXYRULE_WORKERS or 1)"
    )
    serve.add_argument("--rules", type=Path, help="rule directory (default: OXYRULE_RULES_DIR)")
    serve.add_argument(
        "--mllp-port",
        type=int,
        metavar="N",
        help="also accept HL7 v2 over MLLP on this port (default: OXYRULE_MLLP_PORT, off)",
    )
    serve.add_argument(
        "--no-bench",
        action="store_true",
        help="do not serve the rule owner's bench at /bench (setting OXYRULE_BENCH=false)",
    )
    serve.add_argument(
        "--site",
        type=Path,
        metavar="FILE",
        help="a site override file (default: OXYRULE_SITE_FILE)",
    )
    serve.set_defaults(handler=_serve)
    assess = commands.add_parser(
        "assess",
        help="assess a FHIR Bundle (JSON), NDJSON of Bundles or an HL7 v2 ORU^R01; '-' is stdin",
    )
    assess.add_argument(
        "path", help="a Bundle JSON file, an NDJSON file, an HL7 v2 message, or - for stdin"
    )
    assess.add_argument("--ndjson", action="store_true", help="read stdin as NDJSON")
    assess.add_argument("--rules", type=Path, help="rule directory (default: the shipped set)")
    assess.add_argument(
        "--site",
        type=Path,
        metavar="FILE",
        help="a site override file (default: OXYRULE_SITE_FILE)",
    )
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
    mllp = commands.add_parser(
        "mllp", help="listen for HL7 v2 ORU^R01 over MLLP (TCP) and answer each with an ACK"
    )
    mllp.add_argument("--port", type=int, required=True, help="TCP port (2575 is HL7's)")
    mllp.add_argument("--host", default="127.0.0.1", help="address to bind (default: 127.0.0.1)")
    mllp.add_argument("--rules", type=Path, help="rule directory (default: the shipped set)")
    mllp.add_argument(
        "--site",
        type=Path,
        metavar="FILE",
        help="a site override file (default: OXYRULE_SITE_FILE)",
    )
    mllp.add_argument(
        "--max-frame-bytes", type=int, default=1024 * 1024, metavar="N", help="largest message"
    )
    mllp.add_argument(
        "--idle-timeout", type=float, default=300.0, metavar="S", help="close idle connections"
    )
    mllp.add_argument(
        "--max-connections",
        type=int,
        default=100,
        metavar="N",
        help="peers at once; beyond: refused",
    )
    mllp.add_argument(
        "--max-buffered-bytes",
        type=int,
        default=16 * 1024 * 1024,
        metavar="N",
        help="unfinished frames held by all peers together; beyond: AR",
    )
    mllp.set_defaults(handler=_mllp)
    test = commands.add_parser("test", help="run expected-outcome fixtures against the rules")
    test.add_argument("fixtures", nargs="*", help="fixture directories or *.expected.yaml files")
    test.add_argument("--rules", type=Path, help="rule directory (default: the shipped set)")
    test.add_argument(
        "--site",
        type=Path,
        metavar="FILE",
        help="a site override file (default: OXYRULE_SITE_FILE)",
    )
    test.add_argument("--junit", metavar="FILE", help="also write JUnit XML for CI")
    test.add_argument("--html", metavar="FILE", help="also write a self-contained HTML report")
    test.set_defaults(handler=_test)
    lint_cmd = commands.add_parser("lint", help="check a rule directory without a patient")
    lint_cmd.add_argument("directory", nargs="?", help="rule directory (default: shipped set)")
    lint_cmd.add_argument(
        "--fixtures",
        nargs="*",
        help="fixture folders for coverage (default: fixtures/ here, else beside the rule set)",
    )
    lint_cmd.add_argument(
        "--no-coverage", action="store_true", help="leave the fixture-coverage check out"
    )
    lint_cmd.add_argument(
        "--update-lock", action="store_true", help="record versions and hashes in ruleset.lock"
    )
    lint_cmd.set_defaults(handler=_lint)
    explain = commands.add_parser(
        "explain", help="explain the assessment of one Bundle or HL7 v2 message"
    )
    explain.add_argument("path", help="a Bundle JSON file, an HL7 v2 message, or - for stdin")
    explain.add_argument("--rules", type=Path, help="rule directory (default: the shipped set)")
    explain.add_argument(
        "--site",
        type=Path,
        metavar="FILE",
        help="a site override file (default: OXYRULE_SITE_FILE)",
    )
    explain.add_argument(
        "--units", choices=("mm[Hg]", "kPa"), help="pressure unit of the text (default: setting)"
    )
    explain.add_argument(
        "--full",
        action="store_true",
        help="also show every value read, every derived value and every rule's trace",
    )
    explain.add_argument("--format", choices=("text", "json"), default="text")
    explain.set_defaults(handler=_explain)
    bulk = commands.add_parser(
        "bulk",
        help="assess a FHIR Bulk Data export (NDJSON per resource type) into Parquet; "
        "'oxyrule bulk synth N OUT_DIR' writes an invented export",
        description="Assess every arterial gas of a FHIR Bulk Data export folder. Writes "
        "OUT_DIR/results (Parquet, one row per gas), OUT_DIR/errors (every line or episode "
        "not used, with file and line) and OUT_DIR/summary (tables and an offline HTML page). "
        "Settings: OXYRULE_BULK_* (see README). 'oxyrule bulk synth N OUT_DIR [--seed S]' "
        "writes an invented export. Decision support for qualified clinicians, not a diagnosis.",
    )
    bulk.add_argument("export_dir", metavar="EXPORT_DIR", help="the export folder (or a URI)")
    bulk.add_argument("out_dir", metavar="OUT_DIR", help="output folder (or a URI); new or empty")
    bulk.add_argument(
        "--engine",
        choices=("local", "spark"),
        default="local",
        help="local: processes on this machine (default); spark: Apache Spark (extra 'spark')",
    )
    bulk.add_argument(
        "--workers",
        type=_positive,
        default=1,
        metavar="N",
        help="local: worker processes; spark: local[N] when no --master is given (default 1)",
    )
    bulk.add_argument(
        "--master", metavar="URL", help="Spark master (default: spark-submit's, else local[N])"
    )
    bulk.add_argument(
        "--pseudonymise",
        action="store_true",
        help="replace patient and resource references by a keyed hash "
        "(key: OXYRULE_BULK_PSEUDONYM_KEY; refused without one)",
    )
    bulk.add_argument("--rules", type=Path, help="rule directory (default: the shipped set)")
    bulk.add_argument(
        "--spill-dir", metavar="DIR", help="local engine: folder for the shuffle's files (TMPDIR)"
    )
    bulk.set_defaults(handler=_bulk)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``oxyrule`` console script; returns the process exit code."""
    arguments = list(sys.argv[1:] if argv is None else argv)
    if arguments[:2] == ["bulk", "synth"]:
        args = bulk_synth_parser().parse_args(arguments[2:])
    else:
        args = build_parser().parse_args(arguments)
    try:
        result: int = args.handler(args)
    except Exception as exc:  # the last line of defence: say what failed, exit 1
        from service.engine import RuleSetError
        from service.exceptions import ServiceError

        if isinstance(exc, RuleSetError | ServiceError | OSError):
            sys.stderr.write(f"oxyrule: {exc}\n")
            return EXIT_INTERNAL
        raise
    return result


if __name__ == "__main__":
    raise SystemExit(main())
