"""A self-contained HTML report of a fixture run (``oxyrule test --html FILE``).

One offline file: inline CSS, charts as inline SVG, no scripts, no external fonts or links to
fetch. Every text is escaped. The same results give the same bytes: no clock, no decision ids.
Patient identifiers are never shown (no reference, no birth date); ages appear as numbers.
"""

from __future__ import annotations

from collections.abc import Iterable
from html import escape

from service import __version__
from service.assess.partition import PART_LABELS, PART_MEANINGS, assessment_partitions
from service.assess.response_view import (
    FIO2_SOURCE_WORDS,
    KIND_WORDS,
    applicable_band,
    band_words,
)
from service.assess.response_view import summary_line as response_line
from service.assess.result import CAUTION, Assessment, Finding, MechanismVerdict
from service.assess.titration import Titration
from service.physiology.constants import WATER_VAPOUR_TEXTBOOK_MMHG
from service.physiology.oxygen_prediction import CAUTION as CAUTION_MODEL
from service.physiology.titration import MeasuredKind
from service.runtime import Runtime

from .cascade import Cascade, CascadeInput, build_cascade, cascade_svg, signed
from .expectations import Mismatch
from .response_chart import chart_data, response_svg
from .runner import CaseResult, summary_line
from .waterfall import waterfall_svg

MECHANISM_NAMES = {
    "low-inspired-oxygen": "Low inspired oxygen",
    "hypoventilation": "Hypoventilation",
    "diffusion-limitation": "Diffusion limitation",
    "vq-mismatch": "V/Q mismatch",
    "shunt": "Shunt",
}
STATUS_WORDS = {
    "passed": ("✓", "passed"),
    "failed": ("✗", "FAILED"),
    "known-gap": ("◐", "known gap (expected failure)"),
    "gap-closed": ("!", "gap closed: the known gap now passes"),
}
UNIT_DISPLAY = {"mm[Hg]": "mmHg", "1": "", "Cel": "°C"}
TREND_NAMES = {
    "pf_ratio": "P/F (mmHg)",
    "arterial_alveolar_ratio": "a/A",
    "venous_admixture": "venous admixture (fraction)",
    "shunt": "fitted shunt (fraction)",
    "vq_drop": "fitted V/Q term (mmHg)",
}

CSS = """
:root { --ink: #1f2a33; --muted: #5a6670; --rule: #d5dadf; --paper: #fbfaf7;
  --pass: #2f6b3a; --fail: #9b1c2c; --gap: #7a5a12; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
  font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif; }
header, main, footer { max-width: 1080px; margin: 0 auto; padding: 0 1.2rem; }
header { padding-top: 1.2rem; }
h1 { font-size: 1.5rem; margin: 0 0 .4rem; }
h2 { font-size: 1.2rem; margin: 0 0 .4rem; }
h3 { font-size: 1rem; margin: 1.1rem 0 .35rem; }
.caution { border: 2px solid var(--ink); background: #fff; padding: .55rem .8rem;
  margin: .6rem 0 1rem; }
dl.meta { display: grid; grid-template-columns: max-content 1fr; gap: .15rem 1rem; margin: 0; }
dl.meta dt { color: var(--muted); }
dl.meta dd { margin: 0; }
code, .hash { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: .88em; }
.hash { overflow-wrap: anywhere; }
code.rule { white-space: nowrap; }
table { border-collapse: collapse; width: 100%; margin: .3rem 0 .6rem; background: #fff; }
caption { text-align: left; color: var(--muted); font-size: .9rem; padding: .2rem 0; }
th, td { border: 1px solid var(--rule); padding: .3rem .5rem; text-align: left;
  vertical-align: top; }
th { background: #eef1f3; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
section.case { background: #fff; border: 1px solid var(--rule); border-left-width: 6px;
  padding: .9rem 1rem; margin: 1.2rem 0; }
section.case.st-passed { border-left-color: var(--pass); }
section.case.st-failed { border-left-color: var(--fail); border-left-style: double;
  border-left-width: 8px; }
section.case.st-known-gap, section.case.st-gap-closed { border-left-color: var(--gap);
  border-left-style: dashed; }
.status { font-weight: 700; }
.status.st-failed { color: var(--fail); }
.status.st-passed { color: var(--pass); }
.status.st-known-gap, .status.st-gap-closed { color: var(--gap); }
.grade { font-weight: 700; white-space: nowrap; }
.grade-likely { text-decoration: underline; }
.muted { color: var(--muted); }
details summary { cursor: pointer; color: var(--muted); }
details ul { margin: .2rem 0; padding-left: 1.2rem; font-size: .9em; }
figure { margin: .4rem 0; }
figure svg { display: block; width: 100%; max-width: 820px; height: auto; }
figure svg.deficit-chart, figure svg.response-chart { max-width: 680px; }
figcaption { font-size: .9rem; color: var(--muted); max-width: 820px; }
figcaption ul { margin: .2rem 0; padding-left: 1.2rem; }
footer { color: var(--muted); font-size: .85rem; padding-bottom: 2rem; }
a { color: #1d4f78; }
"""


def _e(text: object) -> str:
    return escape(str(text))


def _unit(unit: str) -> str:
    return UNIT_DISPLAY.get(unit, unit)


def _number(value: float, unit: str) -> str:
    if unit == "1":
        return f"{value:.2f}" if abs(value) < 10 else f"{value:.0f}"
    if unit in ("mm[Hg]", "%", "mL/dL", "mmol/L", "Cel"):
        return f"{value:.1f}"
    return f"{value:.4g}"


def _mmhg(value: float | None) -> str:
    return "—" if value is None else f"{value:.1f}"


def _signed(value: float | None) -> str:
    return "—" if value is None else signed(value)


def _table(
    caption: str, headers: Iterable[str], rows: Iterable[Iterable[str]], *, numeric: set[int]
) -> str:
    """A table; cells are already-escaped HTML. ``numeric`` columns are right-aligned."""
    head = "".join(f'<th scope="col">{_e(h)}</th>' for h in headers)
    body = []
    for row in rows:
        cells = [
            f'<td class="num">{cell}</td>' if i in numeric else f"<td>{cell}</td>"
            for i, cell in enumerate(row)
        ]
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (
        f"<table><caption>{_e(caption)}</caption><thead><tr>{head}</tr></thead>"
        f"<tbody>{''.join(body)}</tbody></table>"
    )


def _status(result: CaseResult) -> str:
    mark, word = STATUS_WORDS.get(result.status, ("", result.status))
    return (
        f'<span class="status st-{_e(result.status)}">'
        f'<span aria-hidden="true">{mark} </span>{_e(word)}</span>'
    )


def _likely(a: Assessment | None) -> str:
    if a is None:
        return '<span class="muted">no assessment</span>'
    names = [MECHANISM_NAMES.get(m.code, m.code) for m in a.mechanisms if m.grade == "likely"]
    return _e(", ".join(names)) if names else '<span class="muted">none graded likely</span>'


def _summary(results: list[CaseResult]) -> str:
    rows = []
    for i, r in enumerate(results, 1):
        a = r.assessment
        rows.append(
            [
                f'<a href="#case-{i}">{_e(r.case.name)}</a>',
                _status(r),
                _e(a.pattern) if a else '<span class="muted">input rejected</span>',
                _likely(a),
                str(len(a.findings)) if a else "—",
            ]
        )
    headers = ["Case", "Status", "Pattern", "Likely mechanisms", "Findings"]
    caption = "Every case of the run, in name order."
    return _table(caption, headers, rows, numeric={4})


def _mismatches(rows: list[Mismatch]) -> str:
    body = [[_e(m.what), _e(m.expected), _e(m.got), _e(_unit(m.unit))] for m in rows]
    caption = "What the expectation file asked for and what the assessment gave."
    return "<h3>Mismatches</h3>" + _table(
        caption, ["What", "Expected", "Got", "Unit"], body, numeric=set()
    )


def _mechanism_row(m: MechanismVerdict) -> list[str]:
    rationale = _e(m.rationale)
    if m.trace:
        items = "".join(f"<li>{_e(t)}</li>" for t in m.trace)
        rationale += (
            f"<details><summary>Conditions evaluated ({len(m.trace)})</summary>"
            f"<ul>{items}</ul></details>"
        )
    return [
        _e(MECHANISM_NAMES.get(m.code, m.code)),
        f'<span class="grade grade-{_e(m.grade)}">{_e(m.grade)}</span>',
        rationale,
        "<br>".join(f'<code class="rule">{_e(rule)}</code>' for rule in m.rules) or "—",
        _e(m.discriminator) if m.discriminator else '<span class="muted">—</span>',
    ]


def _verdict(a: Assessment) -> str:
    meta = (
        '<dl class="meta">'
        f"<dt>Pattern</dt><dd>{_e(a.pattern)}</dd>"
        f"<dt>Hypoxaemia</dt><dd>{_e(a.hypoxaemia)}</dd>"
        f"<dt>Gas exchange for age</dt><dd>{_e(a.gas_exchange)}</dd>"
        f"<dt>Result status</dt><dd>{_e(a.status)}</dd>"
    )
    if a.uncertain_inputs:
        ranges = "<br>".join(_e(u) for u in a.uncertain_inputs)
        meta += f"<dt>Known only as a range (assessed at both ends)</dt><dd>{ranges}</dd>"
    if a.data_requested:
        asked = ", ".join(f"<code>{_e(f)}</code>" for f in a.data_requested)
        meta += f"<dt>Data that would help</dt><dd>{asked}</dd>"
    meta += "</dl>"
    headers = ["Mechanism", "Grade", "Rationale", "Deciding rules", "What would settle it"]
    table = _table(
        "The five mechanisms, each graded in words (likely, possible, unlikely, not-assessable).",
        headers,
        (_mechanism_row(m) for m in a.mechanisms),
        numeric=set(),
    )
    return "<h3>Verdict</h3>" + meta + table


def _findings(findings: list[Finding]) -> str:
    if not findings:
        return '<h3>Findings</h3><p class="muted">No findings.</p>'
    rows = [
        [
            _e(f.severity),
            f"<code>{_e(f.code)}</code>",
            _e(f.message),
            f'<code class="rule">{_e(f.rule)}</code>' if f.rule else "—",
        ]
        for f in findings
    ]
    caption = "Data-quality and context findings, with the rule that raised each."
    return "<h3>Findings</h3>" + _table(
        caption, ["Severity", "Code", "Message", "Rule"], rows, numeric=set()
    )


def _numbers(a: Assessment) -> str:
    derived = a.index.derived
    if not derived:
        return '<h3>Key numbers</h3><p class="muted">No derived values.</p>'
    rows = [
        [f"<code>{_e(name)}</code>", _e(_number(d.value, d.unit)), _e(_unit(d.unit)), _e(d.method)]
        for name, d in derived.items()
    ]
    caption = "Derived values of the index gas, in canonical units, with how each was computed."
    return "<h3>Key numbers</h3>" + _table(
        caption, ["Value", "Result", "Unit", "Method"], rows, numeric={1}
    )


def cascade_input(a: Assessment, runtime: Runtime) -> CascadeInput:
    """The numbers of the index gas the cascade chart needs."""
    g = a.index
    ph2o = g.derived.get("water-vapour-pressure")
    return CascadeInput(
        fio2=g.number("fio2"),
        barometric_mmhg=g.number("barometric_pressure"),
        water_vapour_mmhg=WATER_VAPOUR_TEXTBOOK_MMHG if ph2o is None else ph2o.value,
        respiratory_quotient=runtime.settings.respiratory_quotient,
        age_years=g.number("age"),
        inspired_po2=g.number("inspired_po2"),
        alveolar_po2=g.number("alveolar_po2"),
        arterial_po2=g.number("arterial_po2"),
        arterial_pco2=g.number("arterial_pco2"),
        mixed_venous_po2=g.number("mixed_venous_po2"),
        sea_level_inspired_po2=g.number("sea_level_inspired_po2"),
    )


def _cascade_table(cascade: Cascade) -> str:
    rows = []
    previous: float | None = None
    for s in cascade.stages:
        d = s.difference
        # Mixed venous is after the tissues took their share: not a gas-exchange step.
        gas_exchange = s.key != "mixed-venous"
        step = d - previous if d is not None and previous is not None and gas_exchange else None
        rows.append(
            [
                _e(f"{s.label} ({s.symbol})"),
                _mmhg(s.patient),
                _mmhg(s.normal),
                _signed(d),
                _signed(step),
            ]
        )
        previous = d if d is not None else previous
    headers = ["Stage", "Patient (mmHg)", "Normal (mmHg)", "Patient − normal", "Change at step"]
    caption = (
        "The chart's numbers. 'Change at step' is how much the gap changed (negative: oxygen "
        "lost at that step) since the previous stage with both values; mixed venous PO2 follows "
        "tissue extraction, not gas exchange, so it has none."
    )
    return _table(caption, headers, rows, numeric={1, 2, 3, 4})


def _cascade(a: Assessment, runtime: Runtime, index: int, name: str) -> str:
    cascade = build_cascade(cascade_input(a, runtime))
    notes = "".join(f"<li>{_e(n)}</li>" for n in cascade.notes)
    others = len(a.gases) - 1
    if others > 0:
        plural = "gas is" if others == 1 else "gases are"
        notes += (
            f"<li>The index (latest) gas is drawn; {others} earlier arterial {plural} not.</li>"
        )
    if not cascade.drawable:
        return f'<h3>Oxygen cascade</h3><p class="muted">No PO2 to draw.</p><ul>{notes}</ul>'
    caption = (
        f"<figcaption>Oxygen cascade of the index gas (solid line, circles) against the normal "
        f"cascade (dashed line, squares) for {_e(cascade.conditions)}. Bold signed numbers: "
        f"patient − normal PO2 at that stage, in mmHg.<ul>{notes}</ul></figcaption>"
    )
    svg = cascade_svg(cascade, title=f"Oxygen cascade: {name}", chart_id=f"cascade-{index}")
    return f"<h3>Oxygen cascade</h3><figure>{svg}{caption}</figure>" + _cascade_table(cascade)


def _deficit_table(parts: list[tuple[str, float, float | None]], fall: float) -> str:
    rows = [
        [
            _e(PART_LABELS[key]),
            _e(_signed(value)),
            _e("raises it" if value < 0 else f"{share:.0%}" if share is not None else "—"),
            _e(PART_MEANINGS[key]),
        ]
        for key, value, share in parts
    ]
    rows.append(["<strong>fall</strong>", _e(_signed(fall)), "", "expected − measured PaO2"])
    caption = (
        "The chart's numbers (mmHg): each part of the fall (positive lowers the PaO2) and its "
        "share of everything that lowers it."
    )
    return _table(caption, ["Part", "mmHg", "Share", "What it is"], rows, numeric={1, 2})


def _deficit(a: Assessment, runtime: Runtime, index: int, name: str) -> str:
    gas = next(g for g in assessment_partitions(a, runtime.settings) if g.index)
    heading = "<h3>PaO2 deficit: why the PaO2 is below the expected value</h3>"
    if not gas.shown:
        return f'{heading}<p class="muted">No partition: {_e(gas.absent)}.</p>'
    parts = [heading]
    many = len(gas.shown) > 1
    for n, shown in enumerate(gas.shown, start=1):
        chart_id = f"deficit-{index}-{n}"
        assumed = f" ({shown.assumption})" if shown.assumption else ""
        svg = waterfall_svg(shown, title=f"PaO2 deficit: {name}{assumed}", chart_id=chart_id)
        d = shown.partition
        note = (
            "<li>The residence at altitude was not sent: the PaCO2 expected there, and so the "
            "split between the inspired and ventilation parts, depends on it. Both are drawn."
            "</li>"
            if many and n == 1
            else ""
        )
        if shown.imputed:
            note += "<li>No arterial PO2: the PaO2 was imputed from SpO2 (Brown 2016).</li>"
        caption = (
            f"<figcaption>From the PaO2 expected for age at sea level on air "
            f"({_e(_mmhg(d.expected_pao2))} mmHg) to the {_e(shown.pao2_label)} "
            f"({_e(_mmhg(d.arterial_po2))} mmHg){_e(assumed)}, step by step. "
            f"<ul>{note}<li>{_e(shown.method)}.</li></ul></figcaption>"
        )
        rows = [(key, value, shown.share(value)) for key, value in shown.parts]
        parts.append(f"<figure>{svg}{caption}</figure>" + _deficit_table(rows, d.fall))
    return "".join(parts)


def _fit_rows(t: Titration) -> list[list[str]]:
    two, one = t.response.two_parameter, t.response.effective_shunt
    rows: list[list[str]] = []
    if two is not None and t.shunt is not None and t.vq_drop is not None:
        s, d = t.shunt, t.vq_drop
        rows += [
            [
                "Shunt",
                f"{s.value:.1%}",
                f"{two.shunt.low:.1%} – {two.shunt.high:.1%}",
                f"{s.least:.1%} – {s.most:.1%}",
                _e("; ".join(s.widened_by) or "—"),
            ],
            [
                "V/Q term (mmHg)",
                f"{d.value:.0f}",
                f"{two.vq_drop_mmhg.low:.0f} – {two.vq_drop_mmhg.high:.0f}",
                f"{d.least:.0f} – {d.most:.0f}",
                _e("; ".join(d.widened_by) or "—"),
            ],
        ]
    if one is not None and t.effective_shunt is not None:
        e = t.effective_shunt
        rows.append(
            [
                "Effective shunt (one parameter)",
                f"{e.value:.1%}",
                f"{one.shunt.low:.1%} – {one.shunt.high:.1%}",
                f"{e.least:.1%} – {e.most:.1%}",
                _e("; ".join(e.widened_by) or "—"),
            ]
        )
    return rows


def _response_tables(a: Assessment, t: Titration) -> str:
    fit = t.fit
    headers = ["Parameter", "Fitted", "95 % range", "With the assumptions", "Assumptions"]
    parts = [
        _table(
            "The fitted values: each with its 95 % range, and the range widened by what the "
            "fit assumed.",
            headers,
            _fit_rows(t),
            numeric={1, 2, 3},
        )
    ]
    rows = []
    for p in fit.points if fit is not None else ():
        point = p.point
        pao2 = point.kind is MeasuredKind.PAO2
        shown = f"{point.value:.0f} mmHg" if pao2 else f"{point.value:.0%}"
        model = f"{p.predicted:.0f} mmHg" if pao2 else f"{p.predicted:.0%}"
        rows.append(
            [
                _e(point.time.isoformat()),
                _e(KIND_WORDS[point.kind]),
                _e(shown),
                _e(f"{point.inspired.fio2:.2f}"),
                _e(FIO2_SOURCE_WORDS[point.inspired.source]),
                _e(model),
                _e(f"{p.standardised_residual:+.1f}"),
                _e("used" if p.used else f"not used: {p.note}"),
            ]
        )
    for d in t.dropped:
        shown = f"{d.value:.0f} mmHg" if d.kind is MeasuredKind.PAO2 else f"{d.value:.0%}"
        fio2 = "—" if d.fio2 is None else f"{d.fio2:.2f}"
        rows.append(
            [
                _e(d.time.isoformat()),
                _e(KIND_WORDS[d.kind]),
                _e(shown),
                _e(fio2),
                "—",
                "—",
                "—",
                _e(f"left out: {d.reason}"),
            ]
        )
    parts.append(
        _table(
            "The points, oldest first: the model's value at each and the residual in expected "
            "errors.",
            ["Time", "What", "Value", "FiO2", "FiO2 from", "Model", "Residual", "Use"],
            rows,
            numeric={2, 3, 5, 6},
        )
    )
    prediction = t.prediction
    if prediction is not None:
        rows = [
            [
                _e(f"{p.fio2:.2f}"),
                _e(f"{p.saturation:.0%} ({p.saturation_low:.0%}–{p.saturation_high:.0%})"),
                _e(f"{p.pao2_mmhg:.0f} ({p.pao2_low_mmhg:.0f}–{p.pao2_high_mmhg:.0f})"),
            ]
            for p in prediction.curve
        ]
        parts.append(
            _table(
                "Predicted (model estimate, 95 % range in brackets).",
                ["FiO2", "SaO2 (≈ SpO2)", "PaO2 (mmHg)"],
                rows,
                numeric={0, 1, 2},
            )
        )
        choice = applicable_band(a)
        items = "".join(
            f"<li>{_e(band_words(x))}"
            f"{' (applies)' if choice.band is x.band else ''}: {_e(x.note)}</li>"
            for x in prediction.targets
        )
        parts.append(f"<p>Target band: {_e(choice.reason)}.</p><ul>{items}</ul>")
    return "".join(parts)


def _response(a: Assessment, index: int, name: str) -> str:
    t = a.titration
    heading = "<h3>Response to oxygen: shunt and V/Q term</h3>"
    if t is None:
        return heading + '<p class="muted">No titration: no points on two or more FiO2s.</p>'
    note = f"<p>{_e(response_line(t))}.</p>"
    if t.response.refusal:
        note += f"<p>Two-parameter fit not reported: {_e(t.response.refusal)}.</p>"
    figures = []
    for quantity, words in (("saturation", "Saturation"), ("pao2", "PaO2")):
        data = chart_data(t, age_years=a.index.number("age"), quantity=quantity)
        chart_id = f"response-{index}-{quantity}"
        svg = response_svg(data, title=f"{words} against FiO2: {name}", chart_id=chart_id)
        notes = "".join(f"<li>{_e(n)}</li>" for n in data.notes)
        caption = (
            f"<figcaption>{_e(words)} against FiO2: the patient's points (circles SpO2, squares "
            "gases, crosses left out), the fitted curve (thick solid line, hatched 95 % range), "
            "a healthy lung of the same age on the same gas (dashed) and iso-shunt lines "
            f"(dotted, each named). <ul>{notes}</ul></figcaption>"
        )
        figures.append(f"<figure>{svg}{caption}</figure>")
    caution = (
        f'<p class="caution" role="note"><strong>Model estimate.</strong> {_e(CAUTION_MODEL)}</p>'
    )
    return heading + caution + note + "".join(figures) + _response_tables(a, t) + _trend(a)


def _trend(a: Assessment) -> str:
    trend = a.trend
    if trend is None:
        return ""
    rows = [
        [
            _e(TREND_NAMES.get(m.measure, m.measure)),
            _e(m.direction.value),
            _e(", ".join(f"{v:.3g}" for _, v in m.series) or "—"),
            _e(m.threshold.source),
        ]
        for m in trend.measures
    ]
    return "<h3>Trend over the gases</h3>" + _table(
        f"Course over the arterial gases: {trend.direction.value} ({trend.note}).",
        ["Measure", "Direction", "Values, oldest first", "Threshold"],
        rows,
        numeric=set(),
    )


def _case(result: CaseResult, runtime: Runtime, index: int) -> str:
    case = result.case
    parts = [
        f'<section class="case st-{_e(result.status)}" id="case-{index}" '
        f'aria-labelledby="case-{index}-h">',
        f'<h2 id="case-{index}-h">{_e(case.name)}</h2>',
        f"<p>Status: {_status(result)}</p>",
        f"<p>{_e(case.outcome.description)}</p>",
    ]
    if case.outcome.known_gap:
        parts.append(f"<p><strong>Known gap:</strong> {_e(case.outcome.known_gap)}</p>")
    if result.status == "gap-closed":
        parts.append(
            "<p><strong>The known gap now passes:</strong> remove <code>known_gap</code>.</p>"
        )
    if result.error is not None:
        parts.append(f"<p><strong>Input rejected:</strong> {_e(result.error)}</p>")
    if result.mismatches:
        parts.append(_mismatches(result.mismatches))
    a = result.assessment
    if a is not None:
        parts += [
            _verdict(a),
            _deficit(a, runtime, index, case.name),
            _findings(a.findings),
            _numbers(a),
            _cascade(a, runtime, index, case.name),
            _response(a, index, case.name),
        ]
    parts.append("</section>")
    return "\n".join(parts)


def _site(runtime: Runtime) -> str:
    """The site file in force and what it changes (nothing without one)."""
    view = runtime.site_view
    if view is None:
        return "<dt>Site file</dt><dd>none: the rule set as written</dd>"
    changes = [str(c) for c in view.parameters] + [f"{n} {v}" for n, v in view.settings]
    listed = "".join(f"<li>{_e(c)}</li>" for c in changes) or "<li>no change</li>"
    return f"<dt>Site file</dt><dd>{_e(view.label)}<ul>{listed}</ul></dd>"


def html_report(results: list[CaseResult], runtime: Runtime) -> str:
    """The report of one fixture run as one HTML document."""
    ruleset = runtime.ruleset
    title = f"oxyrule fixture run: {ruleset.identity}"
    header = (
        "<header>"
        f"<h1>{_e(title)}</h1>"
        f'<p class="caution" role="note"><strong>Caution.</strong> {_e(CAUTION)}</p>'
        '<dl class="meta">'
        f"<dt>Rule set</dt><dd>{_e(ruleset.identity)} — {_e(ruleset.title)}</dd>"
        f'<dt>Content hash</dt><dd class="hash">sha256 {_e(ruleset.content_hash)}</dd>'
        + _site(runtime)
        + f"<dt>Service</dt><dd>oxyrule {_e(__version__)}</dd>"
        f"<dt>Cases</dt><dd>{len(results)}</dd>"
        f"<dt>Run</dt><dd><strong>{_e(summary_line(results))}</strong></dd>"
        "</dl></header>"
    )
    summary = (
        '<section aria-labelledby="summary-h"><h2 id="summary-h">Summary</h2>'
        f"{_summary(results)}</section>"
    )
    cases = "\n".join(_case(r, runtime, i) for i, r in enumerate(results, 1))
    footer = f"<footer><p>{_e(CAUTION)}</p></footer>"
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{_e(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n"
        f"{header}\n<main>\n{summary}\n{cases}\n</main>\n{footer}\n</body>\n</html>\n"
    )
