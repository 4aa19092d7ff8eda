"""The HTML report of a fixture run: well-formed, offline, complete, deterministic, and it
renders in a real browser (headless Chromium, skipped when it is not installed)."""

from __future__ import annotations

import dataclasses
import re
import struct
import subprocess
import xml.etree.ElementTree as ET
from html import escape
from html.parser import HTMLParser
from pathlib import Path

import pytest

from service.assess.partition import assessment_partitions
from service.assess.result import CAUTION
from service.runtime import Runtime
from service.workbench.cascade import signed
from service.workbench.expectations import Mismatch, find_cases
from service.workbench.report import html_report
from service.workbench.runner import CaseResult, run_cases, summary_line

FIXTURES = Path(__file__).resolve().parents[2] / "fixtures"
CHROMIUM = Path("/usr/bin/chromium")

# Elements HTML defines as void (no end tag); inside inline SVG every element is closed.
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}  # fmt: skip
# Attributes through which a browser would fetch something.
FETCHING = {"src", "href", "xlink:href", "srcset", "data", "poster", "action", "formaction"}


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


@pytest.fixture(scope="module")
def results(runtime: Runtime) -> list[CaseResult]:
    return run_cases(find_cases([FIXTURES]), runtime)


@pytest.fixture(scope="module")
def report(results: list[CaseResult], runtime: Runtime) -> str:
    return html_report(results, runtime)


class _Checker(HTMLParser):
    """Collects tags, attributes and style text; fails on a tag closed out of order."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.tags: list[str] = []
        self.attributes: list[tuple[str, str, str]] = []
        self.styles: list[str] = []
        self.ids: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        for name, value in attrs:
            self.attributes.append((tag, name, value or ""))
            if name == "id" and value:
                self.ids.append(value)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.handle_starttag(tag, attrs)
        if tag not in VOID:
            self.stack.pop()

    def handle_endtag(self, tag: str) -> None:
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else ''}>")
            return
        self.stack.pop()

    def handle_data(self, data: str) -> None:
        if self.stack and self.stack[-1] == "style":
            self.styles.append(data)
        self.text.append(data)


def _check(document: str) -> _Checker:
    checker = _Checker()
    checker.feed(document)
    checker.close()
    return checker


def test_report_is_well_formed_html(report: str) -> None:
    assert report.startswith('<!DOCTYPE html>\n<html lang="en">')
    checker = _check(report)
    assert checker.errors == []
    assert checker.stack == []
    assert len(checker.ids) == len(set(checker.ids)), "duplicate ids"


def test_every_chart_is_well_formed_svg_with_a_title(
    report: str, results: list[CaseResult], runtime: Runtime
) -> None:
    charts = [ET.fromstring(c) for c in re.findall(r"<svg\b.*?</svg>", report, flags=re.DOTALL)]
    for root in charts:
        title = root.find("{http://www.w3.org/2000/svg}title")
        assert title is not None and title.text
        assert root.get("role") == "img"
    assessed = [r.assessment for r in results if r.assessment is not None]
    cascades = [c for c in charts if c.get("class") == "cascade-chart"]
    assert len(cascades) == len(assessed)
    # One waterfall per partition of each case's index gas (two where the residence at
    # altitude was not sent).
    waterfalls = [c for c in charts if c.get("class") == "deficit-chart"]
    shown = sum(
        len(g.shown)
        for a in assessed
        for g in assessment_partitions(a, runtime.settings)
        if g.index
    )
    assert len(waterfalls) == shown > 0
    # Two response-to-oxygen charts (saturation and PaO2) per case with a titration fit.
    responses = [c for c in charts if c.get("class") == "response-chart"]
    fitted = [a for a in assessed if a.titration is not None]
    assert len(responses) == 2 * len(fitted) > 0
    assert len(cascades) + len(waterfalls) + len(responses) == len(charts)


def test_each_case_has_its_deficit_partition_or_says_why_not(
    report: str, results: list[CaseResult], runtime: Runtime
) -> None:
    sections = report.split('<section class="case')[1:]
    for result, section in zip(results, sections, strict=True):
        if result.assessment is None:
            continue
        assert "<h3>PaO2 deficit: why the PaO2 is below the expected value</h3>" in section
        exchange = result.assessment.gas_exchange
        assert f"<dt>Gas exchange for age</dt><dd>{exchange}</dd>" in section
        for what in result.assessment.uncertain_inputs:
            assert escape(what) in section
        (gas,) = [g for g in assessment_partitions(result.assessment, runtime.settings) if g.index]
        if not gas.shown:
            assert f"No partition: {escape(gas.absent or '')}" in section
            continue
        assert section.count('class="deficit-chart"') == len(gas.shown)
        for shown in gas.shown:
            for key, value in shown.parts:
                label = {"gas-exchange": "gas exchange", "inspired": "inspired PO2"}.get(key, key)
                assert f'<td>{label}</td><td class="num">{escape(signed(value))}</td>' in section
            if shown.assumption:
                assert escape(shown.assumption) in section


def test_report_names_every_case_and_the_run(report: str, results: list[CaseResult]) -> None:
    assert results, "no fixtures found"
    for r in results:
        assert escape(r.case.name) in report
        assert f'id="case-{results.index(r) + 1}"' in report
    ruleset = Runtime.load().ruleset
    assert escape(ruleset.identity) in report
    assert ruleset.content_hash in report
    assert escape(summary_line(results)) in report
    assert escape(CAUTION) in report


def test_grades_and_statuses_are_written_as_words(report: str, results: list[CaseResult]) -> None:
    text = " ".join(_check(report).text)
    for r in results:
        if r.assessment is not None:
            for m in r.assessment.mechanisms:
                assert f'class="grade grade-{m.grade}">{m.grade}<' in report
    assert "passed" in text


def test_report_fetches_nothing(report: str) -> None:
    checker = _check(report)
    assert not {"script", "link", "iframe", "object", "embed", "img", "base"} & set(checker.tags)
    for tag, name, value in checker.attributes:
        if name in FETCHING:
            # Only in-page anchors and SVG references to its own ids.
            assert value.startswith("#"), f"<{tag} {name}={value!r}>"
        if name == "style":
            assert "url(" not in value.replace("url(#", ""), f"<{tag} style={value!r}>"
    css = "".join(checker.styles)
    assert "@import" not in css and "@font-face" not in css
    assert "url(" not in css.replace("url(#", "")
    # XML namespace names (xmlns="http://www.w3.org/...") are identifiers, not fetches; links
    # in text (code systems) are fine. Nothing else carries a URL.
    for tag, name, value in checker.attributes:
        if re.match(r"(?i)(https?:)?//", value):
            assert name.startswith("xmlns"), f"<{tag} {name}={value!r}>"


def test_report_is_deterministic(runtime: Runtime, report: str) -> None:
    # A fresh run (new decision ids and clock) gives the same bytes.
    again = html_report(run_cases(find_cases([FIXTURES]), runtime), runtime)
    assert again == report


def test_report_escapes_fixture_text(results: list[CaseResult], runtime: Runtime) -> None:
    first = results[0]
    hostile = "<script>alert('x')</script> & <b>"
    outcome = first.case.outcome.model_copy(update={"description": hostile})
    case = dataclasses.replace(first.case, outcome=outcome)
    rejected = CaseResult(case, None, error="<img src=x onerror=alert(1)>")
    document = html_report([rejected], runtime)
    assert "<script>" not in document and "<img" not in document
    assert escape(hostile) in document
    assert "Input rejected" in document
    assert "<svg" not in document  # no assessment, no chart
    assert _check(document).errors == []


def _png_size(path: Path) -> tuple[int, int]:
    data = path.read_bytes()[:24]
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG"
    width, height = struct.unpack(">II", data[16:24])
    return width, height


def _chromium(profile: Path, *args: str) -> subprocess.CompletedProcess[str]:
    command = [
        str(CHROMIUM),
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        f"--user-data-dir={profile}",
        *args,
    ]
    return subprocess.run(command, capture_output=True, text=True, timeout=120, check=False)


@pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="/usr/bin/chromium is not installed (Debian: apt-get install chromium); "
    "the report is not rendered in a browser",
)
def test_report_renders_in_headless_chromium(
    report: str, results: list[CaseResult], tmp_path: Path
) -> None:
    page = tmp_path / "report.html"
    page.write_text(report, encoding="utf-8")
    shot = tmp_path / "shot.png"
    done = _chromium(
        tmp_path / "profile-shot",
        f"--screenshot={shot}",
        "--window-size=1200,2000",
        page.as_uri(),
    )
    assert shot.is_file(), f"no screenshot; chromium said:\n{done.stderr[-2000:]}"
    assert _png_size(shot) == (1200, 2000)
    assert shot.stat().st_size > 50_000  # a blank page of that size compresses to a few kB
    dom = _chromium(tmp_path / "profile-dom", "--dump-dom", page.as_uri())
    assert dom.returncode == 0, dom.stderr[-2000:]
    assert "<svg" in dom.stdout
    assert escape(results[-1].case.name) in dom.stdout
    assert escape(summary_line(results)) in dom.stdout


def test_failed_case_shows_its_mismatch_table(results: list[CaseResult], runtime: Runtime) -> None:
    assessed = next(r for r in results if r.assessment is not None)
    rows = [
        Mismatch("mechanism shunt", "likely", "possible"),
        Mismatch("pf-ratio", "100", "140", "mm[Hg]"),
    ]
    failed = dataclasses.replace(assessed, mismatches=rows)
    document = html_report([failed], runtime)
    assert "FAILED" in document
    assert "<h3>Mismatches</h3>" in document
    assert "<td>mechanism shunt</td><td>likely</td><td>possible</td>" in document
    assert "<td>pf-ratio</td><td>100</td><td>140</td><td>mmHg</td>" in document
    assert _check(document).errors == []
