"""The oxygen cascade chart: the stages, the missing values, and the hand-drawn SVG itself."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from service.workbench.cascade import (
    Cascade,
    CascadeInput,
    build_cascade,
    cascade_svg,
    describe,
    signed,
)

SVG = "{http://www.w3.org/2000/svg}"


def _room_air(**overrides: float | None) -> CascadeInput:
    values: dict[str, float | None] = {
        "fio2": 0.21,
        "barometric_mmhg": 760.0,
        "age_years": 40.0,
        "inspired_po2": 149.7,
        "alveolar_po2": 76.7,
        "arterial_po2": 60.0,
        "arterial_pco2": 60.0,
    }
    values.update(overrides)
    return CascadeInput(water_vapour_mmhg=47.0, **values)  # type: ignore[arg-type]


def test_gap_is_patient_minus_normal_at_each_stage() -> None:
    cascade = build_cascade(_room_air())
    inspired, alveolar, arterial = cascade.stages
    assert inspired.difference == pytest.approx(0.0, abs=0.05)  # same gas by construction
    assert alveolar.difference == pytest.approx(76.7 - 101.8, abs=0.05)
    # A healthy 40-year-old's PaO2 on air (Cerveri I et al., Am J Respir Crit Care Med
    # 1995;152:934): 143.6 - 0.39 x 40 - 0.56 x 25 - 0.57 x 40 = 91.2 mmHg.
    cerveri = 143.6 - 0.39 * 40 - 0.56 * 25 - 0.57 * 40
    assert arterial.difference == pytest.approx(60.0 - cerveri, abs=0.3)


def test_missing_paco2_leaves_no_alveolar_point_and_a_note_says_why() -> None:
    cascade = build_cascade(_room_air(alveolar_po2=None, arterial_pco2=None))
    alveolar = cascade.stages[1]
    assert alveolar.patient is None
    assert alveolar.normal is not None  # the normal line does not need the patient's PaCO2
    assert any("no PaCO2" in note for note in cascade.notes)
    svg = cascade_svg(cascade, title="t", chart_id="c")
    assert "no PaCO2" in svg


def test_mixed_venous_stage_only_when_measured() -> None:
    without = build_cascade(_room_air())
    assert [s.key for s in without.stages] == ["inspired", "alveolar", "arterial"]
    assert any("Mixed-venous PO2 not measured" in note for note in without.notes)
    with_venous = build_cascade(_room_air(mixed_venous_po2=31.0))
    venous = with_venous.stages[-1]
    assert venous.key == "mixed-venous"
    assert venous.normal == 40.0
    assert venous.difference == pytest.approx(-9.0)


def test_the_normal_gap_widens_on_oxygen_as_a_healthy_lung_s_does() -> None:
    # On oxygen the normal A-a gradient widens (healthy men on 100 % oxygen: 48 (31-60) mmHg
    # at 25 years, 93 (60-108) at 50, "Gas exchange in two male age groups...", Upsala J Med
    # Sci): the normal line follows it, so no caveat about a room-air limit is needed.
    on_air = build_cascade(_room_air())
    on_oxygen = build_cascade(_room_air(fio2=0.5, inspired_po2=356.5, alveolar_po2=300.0))
    air_gap = on_air.stages[1].normal - on_air.stages[2].normal  # type: ignore[operator]
    oxygen_gap = on_oxygen.stages[1].normal - on_oxygen.stages[2].normal  # type: ignore[operator]
    assert oxygen_gap > air_gap
    assert not any("understates" in note for note in on_oxygen.notes)


def test_sea_level_reference_only_when_the_inspired_po2_is_low() -> None:
    assert build_cascade(_room_air(sea_level_inspired_po2=149.7)).sea_level_inspired_po2 is None
    altitude = _room_air(barometric_mmhg=570.0, inspired_po2=109.8, sea_level_inspired_po2=149.7)
    assert build_cascade(altitude).sea_level_inspired_po2 == 149.7


def _parse(svg: str) -> ET.Element:
    return ET.fromstring(svg)


def test_svg_is_well_formed_and_labelled() -> None:
    svg = cascade_svg(build_cascade(_room_air()), title="Case <a> & b", chart_id="chart-1")
    assert svg.startswith("<svg")  # no XML prolog or doctype: it goes inline in HTML
    root = _parse(svg)
    assert root.tag == f"{SVG}svg"
    assert root.get("role") == "img"
    assert root.get("aria-labelledby") == "chart-1-title chart-1-desc"
    title = root.find(f"{SVG}title")
    desc = root.find(f"{SVG}desc")
    assert title is not None and title.text == "Case <a> & b"
    assert desc is not None and desc.text is not None
    assert "Arterial PO2: patient 60.0, normal 91.2" in desc.text  # Cerveri 1995 at 40


def test_svg_ids_are_prefixed_unique_and_every_reference_resolves() -> None:
    svg = cascade_svg(build_cascade(_room_air(mixed_venous_po2=31.0)), title="t", chart_id="k9")
    root = _parse(svg)
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert len(ids) == len(set(ids))
    assert all(i is not None and i.startswith("k9-") for i in ids)
    xlink = "{http://www.w3.org/1999/xlink}href"
    refs = [e.get(xlink) or e.get("href") for e in root.iter()]
    assert all(ref[1:] in ids for ref in refs if ref)


def test_svg_is_deterministic() -> None:
    cascade = build_cascade(_room_air(mixed_venous_po2=31.0))
    first = cascade_svg(cascade, title="t", chart_id="c")
    assert cascade_svg(cascade, title="t", chart_id="c") == first


def test_svg_states_the_numbers_as_text() -> None:
    svg = cascade_svg(build_cascade(_room_air()), title="t", chart_id="c")
    texts = "".join(_parse(svg).itertext())
    for number in ("149.7", "101.8", "76.7", "60.0", "91.2", "−25.1", "−31.2"):
        assert number in texts


def test_nothing_to_draw_without_any_number() -> None:
    empty = Cascade(stages=(), notes=(), conditions="")
    assert not empty.drawable
    nothing = build_cascade(
        CascadeInput(fio2=None, barometric_mmhg=None, age_years=None, arterial_po2=None)
    )
    assert not nothing.drawable
    assert "not available" in describe(nothing)


def test_signed_uses_a_true_minus_and_no_signed_zero() -> None:
    assert signed(-3.44) == "−3.4"
    assert signed(2.0) == "+2.0"
    assert signed(-0.01) == "0.0"
    assert signed(0.04) == "0.0"


def test_no_normal_line_where_paco2_40_would_leave_no_alveolar_oxygen() -> None:
    # PB 272 mmHg (about 8,400 m), room air: 0.21 × (272 − 47) − 40 × 1.2 < 0.
    cascade = build_cascade(
        _room_air(barometric_mmhg=272.0, inspired_po2=47.25, alveolar_po2=31.3, arterial_po2=24.6)
    )
    assert any("no alveolar oxygen is left" in note for note in cascade.notes)
    assert all(s.normal is None or s.normal > 0 for s in cascade.stages)


def test_the_chart_draws_each_line_at_its_values() -> None:
    # The lines' plateaus sit where the numbers say: read the path back through the axis.
    cascade = build_cascade(_room_air())
    root = _parse(cascade_svg(cascade, title="t", chart_id="c"))
    ticks = {
        float(t.text or "nan"): float(t.get("y") or "nan") - 4
        for t in root.iter(f"{SVG}text")
        if t.get("text-anchor") == "end" and (t.text or "").replace(".", "").isdigit()
    }
    (low, y_low), (high, y_high) = sorted(ticks.items())[0], sorted(ticks.items())[-1]

    def value(y: float) -> float:
        return low + (y_low - y) * (high - low) / (y_low - y_high)

    for cls, wanted in (
        ("patient-line", [s.patient for s in cascade.stages]),
        ("normal-line", [s.normal for s in cascade.stages]),
    ):
        path = next(e for e in root.iter(f"{SVG}path") if e.get("class") == cls)
        ys = [float(point.split(",")[1]) for point in (path.get("d") or "").split()[1::2]]
        drawn = [value(y) for y in ys]
        assert drawn == pytest.approx([w for w in wanted if w is not None], abs=0.15), cls


def test_the_service_needs_no_plotting_library() -> None:
    import tomllib

    from tests.test_import_direction import imported_modules

    root = Path(__file__).resolve().parents[2]
    project = tomllib.loads((root / "pyproject.toml").read_text())["project"]
    assert not any(d.lower().startswith("matplotlib") for d in project["dependencies"])
    for path in (root / "service").rglob("*.py"):
        assert not any(m.split(".")[0] == "matplotlib" for m in imported_modules(path)), path
