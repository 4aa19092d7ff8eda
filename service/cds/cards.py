"""Cards (CDS Hooks 2.0, "Card Attributes") from an ``AssessmentView``: our wording, plain.

One card per thing worth saying, or none:

* ``patient-view``: one card with the pattern and the deciding number in the summary, the
  graded mechanisms, rationale, findings and what would settle it in the detail, or no card
  when the assessment has nothing to add (``nothing_to_add``);
* order hooks: a card per concern a draft oxygen order raises - more oxygen while
  hypoventilation is likely or possible (SpO2 will not show a rising PaCO2), a likely shunt
  that more oxygen will barely help - and none otherwise.

The indicator follows fixed rules (``indicator``; the README lists them): ``critical`` for
severe hypoxaemia on data that can be trusted; ``warning`` for data that cannot be trusted, a
safety finding, likely hypoventilation, or more oxygen ordered with hypercapnia; ``info``
otherwise. No colours, icons or other traffic-light imagery: the words carry the meaning.

A suggestion is offered only where an action is natural and safe - a draft arterial gas on a
stated FiO2 - never recommended (``isRecommended: false``): the rule set has no rule that
recommends an order. Every card carries the clinical caution, the rule set and decision id.
"""

from __future__ import annotations

import uuid
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any, Literal

from service.assess.result import CAUTION
from service.cds.orders import OxygenOrder
from service.cds.view import (
    HIDDEN_DEFECT,
    HYPERCAPNIA,
    NOTABLE,
    SAFETY,
    SEVERE,
    AssessmentView,
    MechanismLine,
    Number,
)
from service.physiology.units import kpa_from_mmhg
from service.terminology.codes import LOINC, code_for_fact

Json = dict[str, Any]
PressureUnit = Literal["mm[Hg]", "kPa"]

SUMMARY_LIMIT = 140  # characters, exclusive: "<140-character summary" (CDS Hooks 2.0)
BASE = "https://oxyrule.org/fhir/CodeSystem/"
TOPIC_SYSTEM = BASE + "cds-topic"
OVERRIDE_SYSTEM = BASE + "cds-override-reason"
EXTENSION = "org.oxyrule.assessment"
ARTERIAL_GAS_PANEL = ("24336-0", "Gas panel - Arterial blood")  # LOINC

OVERRIDE_REASONS: tuple[tuple[str, str], ...] = (
    ("already-addressed", "Already known and being addressed"),
    ("data-not-current", "The data shown are not current"),
    ("data-wrong", "The data are wrong or from another sample"),
    ("clinical-picture-differs", "The clinical picture differs"),
    ("not-relevant-now", "Not relevant to this decision"),
)
OVERRIDE_CODES = frozenset(code for code, _ in OVERRIDE_REASONS)

MECHANISM_NAMES = {
    "low-inspired-oxygen": "low inspired oxygen",
    "hypoventilation": "hypoventilation",
    "diffusion-limitation": "diffusion limitation",
    "vq-mismatch": "V/Q mismatch",
    "shunt": "shunt",
}
# The number that decides each mechanism, shown in the summary.
DECIDING = {
    "low-inspired-oxygen": "inspired_po2",
    "hypoventilation": "paco2",
    "diffusion-limitation": "aa_gradient",
    "vq-mismatch": "aa_gradient",
    "shunt": "shunt_fraction",
}
# A shunt's size, best first: the shunt fraction on near-pure oxygen, the venous admixture
# below it (shunt plus low-V/Q units), the least shunt the dissolved oxygen proves.
SHUNT_SIZES = (
    ("shunt_fraction", "Shunt about"),
    ("venous_admixture", "Venous admixture about"),
    ("shunt_at_least", "Shunt at least"),
)
GRADE_ORDER = {"likely": 0, "possible": 1, "unlikely": 2, "not-assessable": 3}

NUMBER_LABELS = {
    "pao2": "PaO2",
    "paco2": "PaCO2",
    "ph": "pH",
    "fio2": "FiO2",
    "spo2": "SpO2",
    "sao2": "SaO2",
    "inspired_po2": "inspired PO2",
    "alveolar_po2": "alveolar PO2",
    "aa_gradient": "A-a gradient",
    "aa_limit": "age limit",
    "a_a_ratio": "a/A",
    "pf_ratio": "P/F",
    "sf_ratio": "S/F",
    "shunt_fraction": "shunt fraction",
    "venous_admixture": "venous admixture",
    "shunt_at_least": "shunt at least",
    "haemoglobin": "Hb",
    "oxygen_flow": "O2 flow",
    "barometric_pressure": "barometric pressure",
    "imputed_pao2": "PaO2 estimated from SpO2",
}
DETAIL_NUMBERS = (
    "pao2",
    "paco2",
    "ph",
    "fio2",
    "spo2",
    "sao2",
    "inspired_po2",
    "alveolar_po2",
    "aa_gradient",
    "pf_ratio",
    "sf_ratio",
    "shunt_fraction",
    "venous_admixture",
    "haemoglobin",
)
FACT_LABELS = {
    "arterial_po2": "arterial PO2",
    "arterial_pco2": "arterial PCO2",
    "fio2": "FiO2",
    "spo2": "SpO2",
    "haemoglobin": "haemoglobin",
    "mixed_venous_so2": "mixed venous SO2",
    "dlco_percent_predicted": "DLCO (% predicted)",
    "spo2_exertional_nadir": "lowest SpO2 on exertion",
    "barometric_pressure": "barometric pressure",
    "altitude": "altitude",
    "arterial_so2": "SaO2 by co-oximetry",
}


@dataclass(frozen=True, slots=True)
class CardContext:
    """What a card needs besides the assessment: who, where, which unit, what was left out."""

    patient_id: str
    encounter_id: str | None
    pressure_unit: PressureUnit = "mm[Hg]"
    bench_url: str | None = None
    notes: tuple[str, ...] = ()
    not_used: int = 0  # observations outside the recency window
    max_age_hours: float = 24.0
    lung_function_days: float = 365.0
    now: datetime | None = None


# --- numbers and words ------------------------------------------------------------------------


def _pressure(value_mmhg: float, unit: PressureUnit) -> str:
    if unit == "kPa":
        return f"{kpa_from_mmhg(value_mmhg):.1f} kPa"
    return f"{value_mmhg:.0f} mmHg"


def shown(name: str, n: Number, unit: PressureUnit) -> str:
    """One number as a clinician reads it (``PaCO2 65 mmHg``, ``FiO2 0.21``, ``SpO2 88 %``)."""
    if n.unit == "mm[Hg]":
        text = _pressure(n.value, unit)
    elif name in ("spo2", "sao2"):
        text = f"{n.value * 100:.0f} %"
    elif n.unit == "%":
        text = f"{n.value:.0f} %"
    elif name in ("fio2", "a_a_ratio", "ph", "fio2_step"):
        text = f"{n.value:.2f}"
    elif name == "haemoglobin":
        text = f"{n.value:.1f} g/dL"
    elif name == "oxygen_flow":
        text = f"{n.value:g} L/min"
    else:
        text = f"{n.value:.0f}"
    return f"{NUMBER_LABELS.get(name, name)} {text}"


def _named(v: AssessmentView, name: str, unit: PressureUnit) -> str | None:
    if name == "shunt_fraction":
        name = next((key for key, _ in SHUNT_SIZES if v.number(key) is not None), name)
    n = v.number(name)
    if n is None:
        return None
    text = shown(name, n, unit)
    if name == "aa_gradient" and (limit := v.number("aa_limit")) is not None:
        text += f" (age limit {_pressure(limit.value, unit)})"
    return text


def oxygenation(v: AssessmentView, unit: PressureUnit) -> str:
    """``PaO2 62 mmHg on FiO2 0.21`` (or SpO2 when there is no gas)."""
    first = _named(v, "pao2", unit) or _named(v, "spo2", unit) or "no PaO2 or SpO2"
    fio2 = v.number("fio2")
    return f"{first} on FiO2 {fio2.value:.2f}" if fio2 is not None else f"{first}, FiO2 unknown"


def mechanism_name(code: str) -> str:
    return MECHANISM_NAMES.get(code, code.replace("-", " "))


def _capital(text: str) -> str:
    return text[:1].upper() + text[1:]


def fit(*candidates: str) -> str:
    """The first candidate under the summary limit; the last one cut at a word if none is."""
    for text in candidates:
        if len(text) < SUMMARY_LIMIT:
            return text
    cut = candidates[-1][: SUMMARY_LIMIT - 2].rsplit(" ", 1)[0].rstrip(",;:")
    return cut + "."


_MARKDOWN = str.maketrans({c: "\\" + c for c in "\\`*_[]<>|#"})


def md(text: str) -> str:
    """Text safe inside GitHub Flavored Markdown (and a table cell): specials escaped."""
    return " ".join(text.split()).translate(_MARKDOWN)


# --- what a card says ---------------------------------------------------------------------------


def _trusted(v: AssessmentView) -> bool:
    return v.pattern != "not-classifiable" and not any(f.severity == "error" for f in v.findings)


def indicator(v: AssessmentView, *, more_oxygen_with_hypercapnia: bool = False) -> str:
    """The card's urgency, by the rules in the module docstring (and the README)."""
    if _trusted(v) and any(SEVERE in f.tags for f in v.findings):
        return "critical"
    if (
        not _trusted(v)
        or more_oxygen_with_hypercapnia
        or any(SAFETY in f.tags for f in v.findings)
        or v.grade("hypoventilation") == "likely"
    ):
        return "warning"
    return "info"


def nothing_to_add(v: AssessmentView) -> str | None:
    """Why a patient-view call gets no card, or None when there is something to say."""
    if not v.oxygenation_measured:
        return "no recent PaO2 or SpO2"
    if (
        v.hypoxaemia != "present"
        and not any(f.severity == "error" or NOTABLE in f.tags for f in v.findings)
        and not any(m.grade == "likely" for m in v.mechanisms)
    ):
        return "no hypoxaemia and nothing notable"
    return None


def _reason(v: AssessmentView) -> str:
    for severity in ("error", "warning"):
        for f in v.findings:
            if f.severity == severity:
                return f.label
    return "the data are incomplete"


def _likely(v: AssessmentView) -> list[MechanismLine]:
    return [m for m in v.mechanisms if m.grade == "likely"]


def _notable_clause(v: AssessmentView, unit: PressureUnit) -> str:
    tags = {tag for f in v.findings for tag in f.tags}
    if HIDDEN_DEFECT in tags and (aa := _named(v, "aa_gradient", unit)):
        return f"{aa} shows a gas-exchange defect hidden by oxygen"
    if HYPERCAPNIA in tags and (pc := _named(v, "paco2", unit)):
        return f"{pc} with respiratory acidosis"
    for f in v.findings:
        if NOTABLE in f.tags or f.severity == "error":
            return f.label
    likely = _likely(v)
    return f"{mechanism_name(likely[0].code)} is likely" if likely else "see the detail"


def summary(v: AssessmentView, unit: PressureUnit) -> str:
    """One sentence under 140 characters: the pattern and the deciding number."""
    where = oxygenation(v, unit)
    likely = _likely(v)
    if v.pattern == "not-classifiable":
        why = _reason(v)
        return fit(
            f"Not graded: {why}; a repeat arterial gas would settle it ({where}).",
            f"Not graded: {why}; a repeat arterial gas would settle it.",
        )
    if v.hypoxaemia != "present":
        clause = _notable_clause(v, unit)
        return fit(f"No hypoxaemia ({where}), but {clause}.", f"No hypoxaemia, but {clause}.")
    if v.pattern == "single" and len(likely) == 1:
        m = likely[0]
        number = _named(v, DECIDING.get(m.code, "pao2"), unit)
        lead = f"{_capital(mechanism_name(m.code))} is the likely cause of hypoxaemia"
        return fit(f"{lead}: {number}, with {where}.", f"{lead}: {number}.", f"{lead}.")
    if v.pattern == "mixed" and len(likely) == 1:
        # One cause that leaves the A-a gradient normal, beside a defect of open type.
        lead = f"{_capital(mechanism_name(likely[0].code))} is likely"
        return fit(
            f"{lead}, beside a gas-exchange defect of open type: {where}.",
            f"{lead}, beside a gas-exchange defect of open type.",
        )
    if v.pattern == "mixed" and likely:
        names = " and ".join(mechanism_name(m.code) for m in likely)
        return fit(
            f"Hypoxaemia with more than one likely cause ({names}): {where}.",
            f"Hypoxaemia with more than one likely cause ({names}).",
        )
    gap = _named(v, "aa_gradient", unit)
    return fit(
        f"Hypoxaemia, cause not yet settled: {gap} with {where}."
        if gap
        else f"Hypoxaemia, cause not yet settled: {where}.",
        f"Hypoxaemia, cause not yet settled: {where}.",
    )


def _sample_line(v: AssessmentView, context: CardContext) -> str:
    numbers = [t for name in DETAIL_NUMBERS if (t := _named(v, name, context.pressure_unit))]
    when = ""
    if v.sample_time is not None:
        when = f"Index sample {v.sample_time.astimezone(UTC):%Y-%m-%d %H:%M} UTC"
        if context.now is not None:
            hours = (context.now - v.sample_time).total_seconds() / 3600
            when += f" ({hours:.0f} h before this request)" if hours >= 1 else " (within the hour)"
        when += ": "
    source = f" (FiO2 source: {v.fio2_source})" if v.fio2_source else ""
    return md(when + " · ".join(numbers) + source) if numbers else ""


def _mechanism_table(v: AssessmentView) -> list[str]:
    lines = ["| Mechanism | Grade | Why |", "|---|---|---|"]
    for m in sorted(v.mechanisms, key=lambda m: GRADE_ORDER.get(m.grade, 9)):
        lines.append(
            f"| {md(_capital(mechanism_name(m.code)))} | {md(m.grade)} | {md(m.rationale)} |"
        )
    return lines


def _settle(v: AssessmentView) -> list[str]:
    lines = [
        f"- {md(_capital(mechanism_name(m.code)))}: {md(m.discriminator)}"
        for m in v.mechanisms
        if m.discriminator and m.grade == "possible"
    ]
    wanted = []
    for fact in v.data_requested:
        label = FACT_LABELS.get(fact, fact.replace("_", " "))
        code = code_for_fact(fact)
        wanted.append(f"{label} (LOINC {code[1]})" if code and code[0] == LOINC else label)
    if wanted:
        lines.append(f"- New measurements that would help: {md(', '.join(dict.fromkeys(wanted)))}")
    return lines


def _left_out(context: CardContext) -> list[str]:
    lines = []
    if context.not_used:
        lines.append(
            f"- {context.not_used} value(s) too old (over {context.max_age_hours:g} h; "
            f"lung-function tests over {context.lung_function_days:g} days) or without a time "
            "were not used."
        )
    lines += [f"- {md(note)}" for note in context.notes]
    return lines


def _footer(v: AssessmentView) -> list[str]:
    return [f"*{md(CAUTION)}*", "", f"Rule set {md(v.ruleset)}; decision {md(v.decision_id)}."]


def detail(v: AssessmentView, context: CardContext, lead: Sequence[str] = ()) -> str:
    """The card's Markdown: the lead paragraphs, the numbers, the graded mechanisms, the
    findings, what would settle it, what was left out, the caution."""
    lines = list(lead)
    sample = _sample_line(v, context)
    if sample:
        lines += [sample, ""]
    lines += [*_mechanism_table(v), ""]
    if v.findings:
        lines.append("**Findings**")
        lines += [
            f"- {md(_capital(f.label))} ({md(f.severity)}): {md(f.message)}" for f in v.findings
        ]
        lines.append("")
    settle = _settle(v)
    if settle:
        lines += ["**What would settle it**", *settle, ""]
    left_out = _left_out(context)
    if left_out:
        lines += ["**Not used or not read**", *left_out, ""]
    lines += _footer(v)
    return "\n".join(lines).strip() + "\n"


# --- the card itself ------------------------------------------------------------------------


def _gas_request(v: AssessmentView, context: CardContext, instruction: str) -> Json:
    code, display = ARTERIAL_GAS_PANEL
    request: Json = {
        "resourceType": "ServiceRequest",
        "status": "draft",
        "intent": "order",
        "code": {
            "coding": [{"system": LOINC, "code": code, "display": display}],
            "text": "Arterial blood gas",
        },
        "subject": {"reference": f"Patient/{context.patient_id}"},
        "orderDetail": [{"text": instruction}],
        "note": [
            {
                "text": f"Suggested by decision support (decision {v.decision_id}); "
                "not a diagnosis. Record FiO2, device and flow with the sample."
            }
        ],
    }
    if context.encounter_id is not None:
        request["encounter"] = {"reference": f"Encounter/{context.encounter_id}"}
    return request


def gas_suggestion(v: AssessmentView, context: CardContext, instruction: str) -> Json:
    """A draft arterial gas on a stated FiO2: offered, never recommended."""
    return {
        "label": "Draft an arterial blood gas with the FiO2 recorded",
        "uuid": str(uuid.uuid4()),
        "isRecommended": False,
        "actions": [
            {
                "type": "create",
                "description": f"Draft order: arterial blood gas. {instruction}",
                "resource": _gas_request(v, context, instruction),
            }
        ],
    }


def card(
    v: AssessmentView,
    context: CardContext,
    *,
    summary_text: str,
    urgency: str,
    detail_text: str,
    topic: tuple[str, str],
    suggestions: Iterable[Json] = (),
) -> Json:
    """A card with every field the specification requires, and ours."""
    offered = list(suggestions)
    body: Json = {
        "uuid": str(uuid.uuid4()),
        "summary": summary_text,
        "indicator": urgency,
        "detail": detail_text,
        "source": {
            "label": "oxyrule decision support: mechanism of hypoxaemia",
            "topic": {"system": TOPIC_SYSTEM, "code": topic[0], "display": topic[1]},
        },
        "overrideReasons": [
            {"system": OVERRIDE_SYSTEM, "code": code, "display": display}
            for code, display in OVERRIDE_REASONS
        ],
        "extension": {
            EXTENSION: {
                "decisionId": v.decision_id,
                "ruleset": v.ruleset,
                "pattern": v.pattern,
                "mechanisms": {m.code: m.grade for m in v.mechanisms},
            }
        },
    }
    if offered:
        body["suggestions"] = offered
        body["selectionBehavior"] = "at-most-one"
    if context.bench_url is not None:
        body["links"] = [
            {
                "label": "Open this assessment on the rule bench",
                "url": context.bench_url.format(decision_id=v.decision_id),
                "type": "absolute",
            }
        ]
    return body


def patient_view_cards(v: AssessmentView, context: CardContext) -> list[Json]:
    """The ``patient-view`` card, or none when the assessment has nothing to add."""
    if nothing_to_add(v) is not None:
        return []
    unit = context.pressure_unit
    suggestions = []
    oximetry_only = v.number("pao2") is None and v.number("spo2") is not None
    if v.pattern == "not-classifiable" or (oximetry_only and v.hypoxaemia == "present"):
        fio2 = v.number("fio2")
        on = f"on FiO2 {fio2.value:.2f} (as now)" if fio2 is not None else "on a stated FiO2"
        suggestions.append(gas_suggestion(v, context, f"Arterial sample {on}."))
    return [
        card(
            v,
            context,
            summary_text=summary(v, unit),
            urgency=indicator(v),
            detail_text=detail(v, context),
            topic=("hypoxaemia-mechanism", "Mechanism of hypoxaemia"),
            suggestions=suggestions,
        )
    ]


# --- order hooks ------------------------------------------------------------------------------


def _raises(order: OxygenOrder, current: Number | None) -> bool | None:
    """Whether the order asks for more oxygen than now: True, False, or None (unknown).
    Compared in whole percentage points, so 0.40 and 0.4000001 are the same setting."""
    if order.fio2 is None or current is None:
        return None
    return round(order.fio2 * 100) > round(current.value * 100)


def _order_lines(order: OxygenOrder) -> list[str]:
    """The detail's first paragraph on an order card: which order, at which FiO2."""
    if order.fio2 is None:
        fio2 = ", FiO2 not stated"
    else:
        estimated = " (estimated from device and flow)" if order.fio2_estimated else ""
        fio2 = f", FiO2 {order.fio2:.2f}{estimated}"
    unread = f" ({md('; '.join(order.unread))} could not be read)" if order.unread else ""
    return [f"**Order**: {md(order.reference)}{fio2}{unread}", ""]


def _masking_card(v: AssessmentView, order: OxygenOrder, known: bool, context: CardContext) -> Json:
    unit = context.pressure_unit
    current = v.number("fio2")
    grade = v.grade("hypoventilation") or "possible"
    pressure = v.number("paco2")
    while_ = (
        f"while PaCO2 is {_pressure(pressure.value, unit)}"
        if pressure is not None
        else f"while hypoventilation is {grade}"
    )
    if known and current is not None and order.fio2 is not None:
        lead = f"This order raises FiO2 from {current.value:.2f} to {order.fio2:.2f} {while_}"
    else:
        lead = f"Oxygen ordered {while_}"
    text = fit(
        f"{lead}: SpO2 will not show worsening ventilation.",
        f"{lead}: SpO2 will not show it.",
        f"{lead}.",
    )
    rationale = next((m.rationale for m in v.mechanisms if m.code == "hypoventilation"), "")
    paragraphs = [
        *_order_lines(order),
        f"**Why this card**: hypoventilation is {md(grade)}. {md(rationale)}",
        "",
        "More oxygen raises the PaO2 and the SpO2 but does nothing for the PaCO2: a normal "
        "SpO2 on more oxygen can hide hypoventilation that is getting worse, and in chronic "
        "hypercapnia a high FiO2 can itself raise the PaCO2. An arterial gas on the new "
        "setting shows the PaCO2 and pH.",
        "",
    ]
    on = f"on the ordered FiO2 {order.fio2:.2f}" if order.fio2 is not None else "on the new setting"
    instruction = f"Arterial sample {on}, once the new oxygen setting has taken effect."
    return card(
        v,
        context,
        summary_text=text,
        urgency=indicator(v, more_oxygen_with_hypercapnia=True),
        detail_text=detail(v, context, paragraphs),
        topic=("oxygen-order", "Oxygen order and the recent gases"),
        suggestions=[gas_suggestion(v, context, instruction)],
    )


def _shunt_card(v: AssessmentView, order: OxygenOrder, context: CardContext) -> Json:
    unit = context.pressure_unit
    found = next(((v.number(key), words) for key, words in SHUNT_SIZES if v.number(key)), None)
    size = f"{found[1]} {found[0].value:.0f} %" if found and found[0] else "A likely shunt"
    to = f"raising FiO2 to {order.fio2:.2f}" if order.fio2 is not None else "more oxygen"
    text = fit(f"{size}: {to} will raise PaO2 little.", f"{size}: more oxygen will help little.")
    response = ""
    step, change = v.number("fio2_step"), v.number("pao2_change")
    if step is not None and change is not None:
        response = (
            f" Already seen: PaO2 changed by {_pressure(change.value, unit)} for an FiO2 step "
            f"of {step.value:.2f}."
        )
    rationale = next((m.rationale for m in v.mechanisms if m.code == "shunt"), "")
    paragraphs = [
        *_order_lines(order),
        f"**Why this card**: shunt is likely. {md(rationale)}{md(response)}",
        "",
        "Blood that passes through a shunt never meets the added oxygen, so with a large "
        "shunt the PaO2 rises little as FiO2 goes up (the iso-shunt lines); the cause of the "
        "shunt matters more than the FiO2.",
        "",
    ]
    return card(
        v,
        context,
        summary_text=text,
        urgency="info",
        detail_text=detail(v, context, paragraphs),
        topic=("oxygen-order", "Oxygen order and the recent gases"),
    )


def order_cards(
    v: AssessmentView, orders: Sequence[OxygenOrder], context: CardContext
) -> list[Json]:
    """Cards for draft oxygen orders: one per concern the assessment raises, else none."""
    current = v.number("fio2")
    more = [(o, r) for o in orders if (r := _raises(o, current)) is not False]
    if not more or not v.oxygenation_measured:
        return []
    cards: list[Json] = []
    hypercapnia = v.grade("hypoventilation") in ("likely", "possible") or any(
        HYPERCAPNIA in f.tags for f in v.findings
    )
    breathing = [(o, r) for o, r in more if not o.ventilator]
    if hypercapnia and breathing and v.device != "ventilator":
        order, known = breathing[0]
        cards.append(_masking_card(v, order, known is True, context))
    if v.grade("shunt") == "likely":
        cards.append(_shunt_card(v, more[0][0], context))
    return cards
