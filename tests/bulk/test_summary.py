"""``summary/``: the count tables add up to the results, and the page stands alone."""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Callable
from html.parser import HTMLParser
from pathlib import Path

from service.bulk.job import JobReport
from service.bulk.report import PATTERNS
from service.bulk.rows import GRADE_COLUMNS
from tests.bulk.conftest import read_table


class _Page(HTMLParser):
    """Tags, attributes and text of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: Counter[str] = Counter()
        self.attributes: list[tuple[str, str, str]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags[tag] += 1
        self.attributes += [(tag, k, v or "") for k, v in attrs]

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def test_the_tables_count_every_result_row(
    synthetic_export: Path, local_run: Callable[[Path, int], tuple[Path, JobReport]]
) -> None:
    out, report = local_run(synthetic_export, 1)
    results = read_table(out / "results")
    patterns = read_table(out / "summary" / "patterns.parquet")
    assert Counter(r["pattern"] for r in results) == Counter(
        dict(_sum(patterns, "pattern").items())
    )
    exchange = read_table(out / "summary" / "gas_exchange.parquet")
    assert Counter(r["gas_exchange"] for r in results) == Counter(
        dict(_sum(exchange, "gas_exchange").items())
    )
    grades = read_table(out / "summary" / "grades.parquet")
    for mechanism, column in GRADE_COLUMNS.items():
        shown = {g: n for (m, g), n in _sum2(grades).items() if m == mechanism}
        assert Counter(r[column] for r in results) == Counter(shown), mechanism
    findings = read_table(out / "summary" / "findings.parquet")
    assert Counter(f for r in results for f in r["findings"]) == Counter(_sum(findings, "finding"))
    months = {r["time"].strftime("%Y-%m") for r in results}
    assert {p["month"] for p in patterns} == months and len(months) >= 3
    names = {p["location_name"] for p in patterns}
    assert "Highland clinic (invented)" in names and len(names) >= 4
    assert report.gases == len(results)


def _sum(rows: list[dict[str, object]], column: str) -> dict[str, int]:
    out: Counter[str] = Counter()
    for r in rows:
        out[str(r[column])] += int(r["gases"])  # type: ignore[call-overload]
    return dict(out)


def _sum2(rows: list[dict[str, object]]) -> dict[tuple[str, str], int]:
    out: Counter[tuple[str, str]] = Counter()
    for r in rows:
        out[str(r["mechanism"]), str(r["grade"])] += int(r["gases"])  # type: ignore[call-overload]
    return dict(out)


def test_the_page_is_offline_and_readable_without_colour(
    synthetic_export: Path, local_run: Callable[[Path, int], tuple[Path, JobReport]]
) -> None:
    out, report = local_run(synthetic_export, 1)
    html = (out / "summary" / "index.html").read_text(encoding="utf-8")
    page = _Page()
    page.feed(html)
    # Nothing to fetch: no script, image, frame, link or stylesheet import; the only URL is
    # the SVG namespace (a name, never fetched).
    assert not {"script", "img", "iframe", "link", "object", "embed"} & set(page.tags)
    assert {v for _, k, v in page.attributes if k in ("src", "href")} == set()
    urls = set(re.findall(r"https?://[^\s\"')]+", html))
    assert urls == {"http://www.w3.org/2000/svg"}
    assert "@import" not in html and "url(http" not in html
    assert page.tags["svg"] == 3
    # Patterns are told apart by texture, each named in the legend, not by colour alone.
    fills = re.findall(r'fill="url\(#(tx-[a-z]+)\)"', html)
    assert len(set(fills)) >= len(PATTERNS)
    text = " ".join(page.text)
    for pattern in PATTERNS:
        assert pattern in text
    assert "not a diagnosis" in text
    assert f"{report.gases:,}" in text
    assert "syn-0" not in html  # no patient reference on the page
