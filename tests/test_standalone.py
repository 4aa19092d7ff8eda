"""The project stands alone: no tracked file cites private notes or machine paths.

Code, rules, docs, fixtures and tests cite published sources (author, year, journal, equation;
LOINC, UCUM, HL7, FHIR), the project's own ``docs/`` by section heading, or say "common
practice" / "from memory". They never cite a background note that is not in the repository
(by its file name or its section numbers), never reach into the shared folder beside a clone
(only ``.ci/`` may, for an optional check), and never name an absolute path of a development
machine. The examples below are spelled in pieces so that this file passes its own check.
"""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

# Names of notes that are not part of the project. ``clinical-logic`` is also the name of our
# own docs/clinical-logic.md, which may be linked, but by heading, never by section number.
NOTE_NAMES = (
    "physiology",
    "standards",
    "contract",
    "clinical-logic",
    "style",
    "performance",
    "platform",
    "platform-notes",
)
_NOTES = "|".join(re.escape(n) for n in NOTE_NAMES)
SECTION = "\u00a7"  # the section sign, spelled out so this file does not match itself

# A note file name followed by a section sign and number, or "contract" followed by one (the
# short form once used for the same note).
NOTE_SECTION = re.compile(rf"\b(?:{_NOTES})\.md\W{{0,3}}{SECTION}|\bcontract\s+{SECTION}")
# "<note>.md" naming a file the project does not have (our own docs are checked by existence).
NOTE_FILE = re.compile(rf"(?<![\w/.-])(?:[\w./-]*/)?({_NOTES})\.md\b")
SHARED = re.compile(r"\.\./" + "shared")
MACHINE_PATH = re.compile("/" + "work/" + "|/tmp/" + "bash_jobs")


def problems_in(path: str, text: str, tracked_names: frozenset[str]) -> list[str]:
    """What in one file's text breaks the stand-alone rule, as ``path:line: what`` strings."""
    found: list[str] = []
    for number, line in enumerate(text.splitlines(), start=1):
        where = f"{path}:{number}"
        if NOTE_SECTION.search(line):
            found.append(f"{where}: cites a note by section number: {line.strip()[:80]}")
        for match in NOTE_FILE.finditer(line):
            if f"{match.group(1)}.md" not in tracked_names:
                found.append(f"{where}: names a note that is not in the project: {match.group(0)}")
        if SHARED.search(line) and not path.startswith(".ci/"):
            found.append(f"{where}: reaches into the shared folder")
        if MACHINE_PATH.search(line):
            found.append(f"{where}: names an absolute machine path")
    return found


def tracked_files() -> list[str]:
    """The files git tracks (what a clean clone holds)."""
    try:
        listed = subprocess.run(
            ["git", "ls-files", "-z"], cwd=ROOT, capture_output=True, check=True, timeout=60
        ).stdout
    except (OSError, subprocess.SubprocessError):
        pytest.skip("not a git checkout: the tracked files cannot be listed")
    return [name for name in listed.decode("utf-8").split("\0") if name]


def test_no_tracked_file_cites_private_notes_or_machine_paths() -> None:
    names = tracked_files()
    basenames = frozenset(Path(name).name for name in names)
    found: list[str] = []
    for name in names:
        path = ROOT / name
        if not path.is_file():  # deleted in the work tree, not yet committed
            continue
        try:
            text = path.read_text(encoding="utf-8")
        except UnicodeDecodeError:
            continue  # binary: no citations to read
        found.extend(problems_in(name, text, basenames))
    assert found == [], "\n".join(found[:40])


OUR_DOCS = frozenset({"clinical-logic.md", "oxygen-response.md", "README.md"})


@pytest.mark.parametrize(
    "line",
    [
        "# physiology" + ".md " + SECTION + "6 check values of eq. 1",
        "# standards" + ".md " + SECTION + "1.2 (GEC, VA)",
        "Exit codes (contract " + SECTION + "1): 0 assessed",
        "see docs/clinical-logic.md " + SECTION + "4",
        "(performance" + ".md: no model validation per request)",
        "a line of style" + ".md",
        "CHECKER=../" + "shared/tools/check.py",
        "written to /" + "work/wt/notes.txt",
    ],
)
def test_the_check_catches_each_kind_of_citation(line: str) -> None:
    assert problems_in("service/x.py", line, OUR_DOCS)


@pytest.mark.parametrize(
    "line",
    [
        "Severinghaus JW, J Appl Physiol 1979;46:599 eq. 1",
        'docs/clinical-logic.md, "Trust the data first"',
        "Abramowitz & Stegun 1964, " + SECTION + "26.4",
        "HL7 v2.5.1 chapter 2, escape sequences",
        "the result contract of a FactSpec",
    ],
)
def test_the_check_lets_published_and_own_citations_through(line: str) -> None:
    assert problems_in("service/x.py", line, OUR_DOCS) == []


def test_only_ci_may_run_a_tool_from_the_shared_folder() -> None:
    line = 'CHECKER="../' + 'shared/tools/contract_check.py"'
    assert problems_in(".ci/run", line, OUR_DOCS) == []
    assert problems_in("tests/x.py", line, OUR_DOCS)
