"""Expected-outcome files: what must hold when a fixture Bundle is assessed.

A fixture is ``NAME.bundle.json`` (a FHIR Bundle) with ``NAME.expected.yaml`` beside it::

    description: Invented. Sea level, room air, PaCO2 62: pure hypoventilation.
    bundle: NAME.bundle.json          # optional; default: same stem
    expect:                           # only the keys present are checked
      pattern: single
      status: data-requested          # GuidanceResponse.status
      hypoxaemia: present             # present | absent | unknown
      mechanisms: {hypoventilation: likely, shunt: unlikely}
      findings: [hypoxaemia-moderate] # finding codes that must be present, and the only ones:
      allowed_findings: [unit-converted]  # codes that may be present too (checked: no others)
      absent_findings: [pb-assumed-sea-level]  # codes that must not be present
      rules_fire: [hypoventilation-likely]    # rule ids whose condition must be true
      rules_silent: [shunt-likely]            # rule ids whose condition must not be true
      derived:                        # canonical units (mm[Hg], 1, %, mL/dL, mmol/L)
        alveolar-po2: {value: 83.8, unit: "mm[Hg]", tolerance: 0.5}
      oxygen_response:                # the titration fit (absent: none expected to be checked)
        model: shunt-and-vq           # or effective-shunt, or none (no titration at all)
        refusal: vq-range-wide        # why the two-parameter fit was refused
        points: 5                     # points the fit used
        values:                       # fit facts, hyphenated, in the catalogue unit
          fitted-shunt: {value: 22.0, unit: "%", tolerance: 2.0}
    known_gap: null                   # or a reason: the case is then a strict expected failure

``findings`` is closed-world: a finding the result raises that is neither listed there nor in
``allowed_findings`` is a mismatch, so a rule change that adds an unexpected warning fails the
case (a case that lists no findings expects none). ``allowed_findings`` is for a finding a
case tolerates without asserting it; ``absent_findings`` names codes that must not appear.

Checking compares an ``Assessment`` against the expectation and returns the mismatches as rows
(what, expected, got, unit) for a short table, never a JSON diff.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import yaml
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.result import Assessment, ResultStatus
from service.engine import Grade, HypoxaemiaStatus, Mechanism, Pattern, Truth


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class ExpectedQuantity(_Strict):
    """A derived value with its canonical unit and the tolerance allowed."""

    value: float
    unit: str
    tolerance: float = Field(ge=0)


class ExpectedResponse(_Strict):
    """The checks of the oxygen-response fit; every key is optional."""

    model: Literal["shunt-and-vq", "effective-shunt", "none"] | None = None
    refusal: str | None = None
    points: int | None = Field(None, ge=0)
    values: dict[str, ExpectedQuantity] = Field(default_factory=dict)


class Expectation(_Strict):
    """The checks of one case; every key is optional."""

    pattern: Pattern | None = None
    status: ResultStatus | Literal["failure"] | None = None
    hypoxaemia: HypoxaemiaStatus | None = None
    mechanisms: dict[Mechanism, Grade] = Field(default_factory=dict)
    findings: list[str] = Field(default_factory=list)
    """Every finding code the result must raise; with ``allowed_findings``, all it may raise."""
    allowed_findings: list[str] = Field(default_factory=list)
    absent_findings: list[str] = Field(default_factory=list)
    rules_fire: list[str] = Field(default_factory=list)
    rules_silent: list[str] = Field(default_factory=list)
    derived: dict[str, ExpectedQuantity] = Field(default_factory=dict)
    oxygen_response: ExpectedResponse | None = None


class ExpectedOutcome(_Strict):
    """One ``*.expected.yaml`` file."""

    description: str = Field(min_length=1)
    bundle: str | None = None
    expect: Expectation
    known_gap: str | None = None


@dataclass(frozen=True, slots=True)
class Case:
    """A fixture: its name (path relative to the fixture root), files and expectation."""

    name: str
    expected_path: Path
    bundle_path: Path
    outcome: ExpectedOutcome


class FixtureError(ValueError):
    """An expected-outcome file that cannot be read; the message names the file and field."""


SUFFIX = ".expected.yaml"


def load_case(path: Path, root: Path) -> Case:
    """Read one expected-outcome file."""
    try:
        raw = yaml.safe_load(path.read_text(encoding="utf-8"))
        outcome = ExpectedOutcome.model_validate(raw)
    except yaml.YAMLError as exc:
        raise FixtureError(f"{path}: not valid YAML: {exc}") from None
    except ValidationError as exc:
        details = "; ".join(_problem(e) for e in exc.errors())
        raise FixtureError(f"{path}: {details}") from None
    except OSError as exc:
        raise FixtureError(f"{path}: cannot read it ({exc.strerror})") from None
    stem = path.name[: -len(SUFFIX)]
    bundle = path.parent / (outcome.bundle or f"{stem}.bundle.json")
    if not bundle.is_file():
        raise FixtureError(f"{path}: bundle file {bundle.name} not found beside it")
    name = str(path.relative_to(root))[: -len(SUFFIX)]
    return Case(name, path, bundle, outcome)


_MODELS: dict[str, type[BaseModel]] = {
    "": ExpectedOutcome,
    "expect": Expectation,
}


def _problem(error: Any) -> str:
    """One validation error as ``where: what`` and, for an unknown key, the key it may be."""
    where = ".".join(str(p) for p in error["loc"]) or "(file)"
    if error["type"] != "extra_forbidden":
        return f"{where}: {error['msg']}"
    *parent, key = (str(p) for p in error["loc"])
    model = _MODELS.get(".".join(parent))
    known = list(model.model_fields) if model is not None else []
    close = difflib.get_close_matches(key, known, n=1)
    hint = f" (did you mean {close[0]}?)" if close else ""
    listed = f"; the keys are {', '.join(known)}" if known else ""
    return f"{where}: unknown key{hint}{listed}"


def find_cases(paths: list[Path]) -> list[Case]:
    """Every case under the given files or directories, sorted by name."""
    cases: list[Case] = []
    for path in paths:
        if path.is_dir():
            cases += [load_case(p, path) for p in sorted(path.rglob(f"*{SUFFIX}"))]
        elif path.name.endswith(SUFFIX):
            cases.append(load_case(path, path.parent))
        elif not path.exists():
            raise FixtureError(f"{path}: no such file or folder")
        else:
            raise FixtureError(f"{path}: not a folder or a *{SUFFIX} file")
    return sorted(cases, key=lambda c: c.name)


def default_fixture_dirs(rules_dir: Path, here: Path | None = None) -> list[Path]:
    """Where fixtures are when none are named: ``fixtures`` in the working folder, else the
    ``fixtures`` folder beside the rule directory (the repository's, or the one bundled with
    the shipped rule set). Empty when neither exists."""
    for candidate in ((here or Path.cwd()) / "fixtures", rules_dir.resolve().parent / "fixtures"):
        if candidate.is_dir():
            return [candidate]
    return []


@dataclass(frozen=True, slots=True)
class Mismatch:
    """One check that failed: a row of the report table."""

    what: str
    expected: str
    got: str
    unit: str = ""


def _fmt(value: float | None) -> str:
    return "absent" if value is None else f"{value:.4g}"


def check(expectation: Expectation, a: Assessment) -> list[Mismatch]:
    """Every way ``a`` differs from ``expectation`` (empty when it holds)."""
    return (
        _check_verdict(expectation, a)
        + _check_findings(expectation, a)
        + _check_rules(expectation, a)
        + _check_derived(expectation, a)
        + _check_response(expectation.oxygen_response, a)
    )


def _check_verdict(expectation: Expectation, a: Assessment) -> list[Mismatch]:
    rows: list[Mismatch] = []
    for what, want, got in (
        ("pattern", expectation.pattern, a.pattern),
        ("status", expectation.status, a.status),
        ("hypoxaemia", expectation.hypoxaemia, a.hypoxaemia),
    ):
        if want is not None and want != got:
            rows.append(Mismatch(what, want, got))
    grades: dict[Mechanism, str] = {m.code: m.grade for m in a.mechanisms}
    for code, grade in expectation.mechanisms.items():
        if grades.get(code) != grade:
            rows.append(Mismatch(f"mechanism {code}", grade, grades.get(code, "absent")))
    return rows


def _check_findings(expectation: Expectation, a: Assessment) -> list[Mismatch]:
    codes = {f.code for f in a.findings}
    unwanted = [c for c in expectation.absent_findings if c in codes]
    rows = [Mismatch(f"finding {c}", "absent", "present") for c in unwanted]
    missing = [c for c in expectation.findings if c not in codes]
    expected = set(expectation.findings) | set(expectation.allowed_findings)
    unexpected = sorted(codes - expected - set(unwanted))
    return (
        [Mismatch(f"finding {c}", "present", "absent") for c in missing]
        + rows
        + [Mismatch(f"finding {c}", "not expected", "present") for c in unexpected]
    )


def _check_rules(expectation: Expectation, a: Assessment) -> list[Mismatch]:
    states = _rule_states(a)
    rows = [
        Mismatch(f"rule {rule_id}", "fires", states.get(rule_id, "not evaluated"))
        for rule_id in expectation.rules_fire
        if states.get(rule_id) != Truth.TRUE.value
    ]
    rows += [
        Mismatch(f"rule {rule_id}", "silent", "fires")
        for rule_id in expectation.rules_silent
        if states.get(rule_id) == Truth.TRUE.value
    ]
    return rows


def _check_derived(expectation: Expectation, a: Assessment) -> list[Mismatch]:
    rows: list[Mismatch] = []
    derived = a.index.derived
    for name, want in expectation.derived.items():
        d = derived.get(name)
        if d is None:
            rows.append(Mismatch(name, _fmt(want.value), "absent", want.unit))
        elif d.unit != want.unit:
            rows.append(Mismatch(f"{name} unit", want.unit, d.unit))
        elif abs(d.value - want.value) > want.tolerance:
            expected = f"{_fmt(want.value)} ± {want.tolerance:g}"
            rows.append(Mismatch(name, expected, _fmt(d.value), d.unit))
    return rows


def _check_response(want: ExpectedResponse | None, a: Assessment) -> list[Mismatch]:
    if want is None:
        return []
    titration = a.titration
    facts = titration.facts if titration is not None else {}
    model = facts.get("titration_model", "none")
    rows: list[Mismatch] = []
    if want.model is not None and want.model != model:
        rows.append(Mismatch("oxygen-response model", want.model, str(model)))
    refusal = facts.get("titration_refusal")
    if want.refusal is not None and want.refusal != refusal:
        rows.append(Mismatch("oxygen-response refusal", want.refusal, str(refusal or "none")))
    points = facts.get("titration_points")
    if want.points is not None and (not isinstance(points, float) or want.points != int(points)):
        rows.append(Mismatch("oxygen-response points", str(want.points), str(points or 0)))
    for name, quantity in want.values.items():
        fact = name.replace("-", "_")
        value = facts.get(fact)
        spec = DEFAULT_CATALOGUE.get(fact)
        unit = spec.unit if spec is not None else None
        if not isinstance(value, float):
            rows.append(Mismatch(name, _fmt(quantity.value), "absent", quantity.unit))
        elif unit != quantity.unit:
            rows.append(Mismatch(f"{name} unit", quantity.unit, str(unit)))
        elif abs(value - quantity.value) > quantity.tolerance:
            expected = f"{_fmt(quantity.value)} ± {quantity.tolerance:g}"
            rows.append(Mismatch(name, expected, _fmt(value), quantity.unit))
    return rows


def _rule_states(a: Assessment) -> dict[str, str]:
    return {r.rule.id: r.state.value for r in a.evaluation.results}


def deciding_rules(a: Assessment) -> list[str]:
    """``id@version`` of every rule behind a grade or a finding, for failure reports."""
    refs = [rule for m in a.mechanisms for rule in m.rules]
    refs += [f.rule for f in a.findings if f.rule]
    return list(dict.fromkeys(refs))


def mismatch_table(rows: list[Mismatch]) -> str:
    """Rows as an aligned plain-text table."""
    header = Mismatch("what", "expected", "got", "unit")
    table = [header, *rows]
    widths = [max(len(getattr(r, f)) for r in table) for f in ("what", "expected", "got", "unit")]
    lines = []
    for r in table:
        cells = (r.what, r.expected, r.got, r.unit)
        lines.append("  ".join(c.ljust(w) for c, w in zip(cells, widths, strict=True)).rstrip())
    return "\n".join(lines)
