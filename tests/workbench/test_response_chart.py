"""The response-to-oxygen charts of the report: well-formed SVG, lines where the model puts
them, told apart by stroke and named in words, points by shape; the iso-shunt lines checked
against the independent model (``tests.titration_reference``; Benatar, Hewlett & Nunn 1973)."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from pathlib import Path

import orjson
import pytest

from service.assess.result import Assessment
from service.fhir.extract import read_bundle
from service.physiology.oxygen_prediction import CAUTION
from service.runtime import Runtime
from service.workbench.response_chart import (
    LEFT,
    RIGHT,
    WIDTH,
    chart_data,
    response_svg,
)
from tests.titration_reference import arterial, p50_at_ph, ph2o_37_mmhg

SVG = "{http://www.w3.org/2000/svg}"
FIXTURES = Path(__file__).resolve().parents[2] / "fixtures" / "cases" / "titration"


def _assessment(name: str) -> Assessment:
    runtime = Runtime.load()
    data = orjson.loads((FIXTURES / f"{name}.bundle.json").read_bytes())
    return runtime.assess_intake(read_bundle(data))


@pytest.fixture(scope="module")
def icu() -> Assessment:
    return _assessment("icu-fio2-steps")


def _path_points(d: str) -> list[tuple[float, float]]:
    return [(float(x), float(y)) for x, y in re.findall(r"[ML]([-0-9.]+),([-0-9.]+)", d)]


def test_charts_are_well_formed_with_a_title_and_a_description_in_words(icu: Assessment) -> None:
    assert icu.titration is not None
    for quantity in ("saturation", "pao2"):
        data = chart_data(icu.titration, age_years=51.0, quantity=quantity)
        svg = response_svg(data, title="t", chart_id=f"c-{quantity}")
        root = ET.fromstring(svg)
        assert root.find(f"{SVG}title") is not None
        desc = root.find(f"{SVG}desc")
        assert desc is not None and desc.text is not None
        assert "iso-shunt" in desc.text and CAUTION in desc.text


def test_lines_differ_in_stroke_and_every_iso_shunt_line_is_named(icu: Assessment) -> None:
    assert icu.titration is not None
    svg = response_svg(
        chart_data(icu.titration, age_years=51.0, quantity="pao2"), title="t", chart_id="c"
    )
    root = ET.fromstring(svg)
    paths = {p.get("class"): p for p in root.iter(f"{SVG}path") if p.get("class")}
    assert paths["fitted"].get("stroke-dasharray") is None
    assert paths["healthy"].get("stroke-dasharray") == "8 4"
    iso = [p for p in root.iter(f"{SVG}path") if p.get("class") == "iso-shunt"]
    assert len(iso) == 4 and all(p.get("stroke-dasharray") == "1.5 3.5" for p in iso)
    texts = [t.text or "" for t in root.iter(f"{SVG}text")]
    for name in ("10% shunt", "20% shunt", "30% shunt", "40% shunt"):
        assert name in texts
    assert any("fitted (effective shunt)" in t for t in texts)  # the ICU fit was refused
    assert any(t.startswith("healthy 51-year-old") for t in texts)
    # Five gases (filled squares), no oximetry.
    squares = [r for r in root.iter(f"{SVG}rect") if r.get("width") == "9"]
    assert len(squares) == 5 + 1  # and the key's


def test_the_thirty_percent_iso_shunt_line_sits_where_the_shunt_equation_puts_it(
    icu: Assessment,
) -> None:
    assert icu.titration is not None
    data = chart_data(icu.titration, age_years=51.0, quantity="pao2")
    (line,) = [i for i in data.iso_shunt if i.name == "30% shunt"]
    conditions = icu.titration.response.conditions
    # The chart's line at FiO2 1.0 against the independent model at the same Hb and PaCO2.
    truth = arterial(
        shunt=0.30,
        drop=0.0,
        fio2=1.0,
        paco2=icu.titration.response.prediction_paco2_mmhg,
        pb=conditions.barometric_mmhg,
        ph2o=conditions.water_vapour_mmhg,
        hb=conditions.haemoglobin_g_dl,
        p50=p50_at_ph(7.36),  # the index gas's pH moves the curve (Severinghaus 1979 eq. 4)
    )
    fio2, pao2 = line.points[-1]
    assert fio2 == 1.0
    assert pao2 == pytest.approx(truth.pao2, abs=0.1)
    assert conditions.water_vapour_mmhg == pytest.approx(ph2o_37_mmhg(), abs=0.01)


def test_the_fitted_line_is_drawn_at_the_predicted_values() -> None:
    a = _assessment("mixed-shunt-and-vq")
    assert a.titration is not None and a.titration.prediction is not None
    data = chart_data(a.titration, age_years=66.0, quantity="saturation")
    svg = response_svg(data, title="t", chart_id="c")
    root = ET.fromstring(svg)
    (fitted,) = [p for p in root.iter(f"{SVG}path") if p.get("class") == "fitted"]
    points = _path_points(fitted.get("d", ""))
    plot_w = WIDTH - LEFT - RIGHT
    # The first point is FiO2 0.21 at the left edge, at the predicted saturation on air.
    x0, y0 = points[0]
    assert x0 == pytest.approx(LEFT, abs=0.1)
    on_air = a.titration.prediction.curve[0]
    # The y axis: its tick labels (anchored at their end, left of the plot) and positions.
    ticks = [
        (float(t.text or 0), float(t.get("y", 0)) - 4.0)
        for t in root.iter(f"{SVG}text")
        if t.get("text-anchor") == "end"
    ]
    (v1, y1), (v2, y2) = ticks[0], ticks[-1]
    expected = y1 + (100.0 * on_air.saturation - v1) * (y2 - y1) / (v2 - v1)
    assert y0 == pytest.approx(expected, abs=0.2)
    assert plot_w > 0
