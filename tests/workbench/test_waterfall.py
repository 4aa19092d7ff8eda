"""The waterfall chart of the PaO2 deficit: bars where the numbers put them, words on each step,
patterns not colours, well-formed SVG. Numbers from ``tests.deficit_reference`` (Cerveri 1995
and the alveolar gas equation, computed there)."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import pytest

from service.assess.partition import ShownPartition, assessment_partitions
from service.fhir.extract import read_bundle
from service.physiology.deficit import DeficitPartition
from service.runtime import Runtime
from service.workbench.waterfall import waterfall_svg
from tests.deficit_reference import PAO2_MMHG, reference, reference_bundle

SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def shown() -> ShownPartition:
    runtime = Runtime.load()
    assessment = runtime.assess_intake(read_bundle(reference_bundle()))
    (gas,) = assessment_partitions(assessment, runtime.settings)
    (partition,) = gas.shown
    return partition


def _bars(svg: str) -> dict[str, tuple[ET.Element, list[str]]]:
    root = ET.fromstring(svg)
    bars = {}
    for group in root.iter(f"{SVG}g"):
        key = group.get("class", "").removeprefix("bar bar-")
        rect = group.find(f"{SVG}rect")
        assert rect is not None
        bars[key] = (rect, [t.text or "" for t in group.iter(f"{SVG}text")])
    return bars


def _top_bottom(rect: ET.Element) -> tuple[float, float]:
    top = float(rect.get("y", "0"))
    return top, top + float(rect.get("height", "0"))


def test_bars_are_drawn_at_the_independently_computed_levels(shown: ShownPartition) -> None:
    ref = reference()
    bars = _bars(waterfall_svg(shown, title="t", chart_id="c"))
    assert list(bars) == ["expected", "inspired", "ventilation", "gas-exchange", "measured"]
    top, baseline = _top_bottom(bars["expected"][0])
    scale = (baseline - top) / ref.expected  # px per mmHg

    def y(mmhg: float) -> float:
        return baseline - mmhg * scale

    # Coordinates are written to 0.1 px; a px is well under a mmHg here.
    ventilation_top, ventilation_bottom = _top_bottom(bars["ventilation"][0])
    assert ventilation_top == pytest.approx(y(ref.expected), abs=0.2)
    assert ventilation_bottom == pytest.approx(y(ref.expected - ref.ventilation), abs=0.2)
    exchange_top, exchange_bottom = _top_bottom(bars["gas-exchange"][0])
    assert exchange_top == pytest.approx(y(ref.expected - ref.ventilation), abs=0.2)
    assert exchange_bottom == pytest.approx(y(PAO2_MMHG), abs=0.2)
    measured_top, measured_bottom = _top_bottom(bars["measured"][0])
    assert (measured_top, measured_bottom) == pytest.approx((y(PAO2_MMHG), baseline), abs=0.2)


def test_every_bar_carries_words_and_the_steps_patterns_not_colours(
    shown: ShownPartition,
) -> None:
    ref = reference()
    bars = _bars(waterfall_svg(shown, title="t", chart_id="c"))
    words = {key: texts for key, (_, texts) in bars.items()}
    assert words["expected"] == [f"{ref.expected:.1f}", "Expected for age"]
    assert words["inspired"] == ["no change", "Inspired PO2"]
    assert words["ventilation"] == [f"lowers {ref.ventilation:.1f}", "Ventilation"]
    assert words["gas-exchange"] == [f"lowers {ref.gas_exchange:.1f}", "Gas exchange"]
    assert words["measured"] == [f"{PAO2_MMHG:.1f}", "Measured PaO2"]
    assert bars["ventilation"][0].get("fill") == "url(#c-lowers)"


def test_a_credit_rises_dotted_and_the_svg_is_well_formed() -> None:
    credit = ShownPartition(
        partition=DeficitPartition(84.6, 100.0, -493.4, 1.1, 476.9, 0.0),
        residence=None,
        imputed=False,
        lower_limit_mmhg=None,
        method="m",
        inputs=(),
    )
    svg = waterfall_svg(credit, title="On <oxygen> & more", chart_id="w1")
    root = ET.fromstring(svg)
    assert root.get("role") == "img" and root.get("class") == "deficit-chart"
    title = root.find(f"{SVG}title")
    assert title is not None and title.text == "On <oxygen> & more"
    desc = root.find(f"{SVG}desc")
    assert desc is not None and "inspired PO2 raises 493.4 mmHg" in (desc.text or "")
    bars = _bars(svg)
    rect, texts = bars["inspired"]
    assert rect.get("fill") == "url(#w1-raises)" and texts[0] == "raises 493.4"
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert all(i is not None and i.startswith("w1-") for i in ids) and len(ids) == len(set(ids))
    assert len(svg) < 8000  # small: a few kB per chart
