"""Command-line defaults shared by the fuzzers (libFuzzer arguments, as atheris takes them)."""

from __future__ import annotations

from pathlib import Path

DEFAULT_SECONDS = 300


def fuzzer_args(argv: list[str], name: str, seeds: Path) -> list[str]:
    """``argv`` with the corpus directories and a time limit added when not given.

    New inputs go to the first corpus directory: a scratch one (``.fuzz-corpus/NAME``), so the
    committed seeds stay as they are.
    """
    args = list(argv)
    if not any(not a.startswith("-") for a in args[1:]):
        work = Path(".fuzz-corpus") / name
        work.mkdir(parents=True, exist_ok=True)
        args += [str(work), str(seeds)]
    if not any(a.startswith("-max_total_time") for a in args):
        args.append(f"-max_total_time={DEFAULT_SECONDS}")
    return args
