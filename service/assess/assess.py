"""The main job, in process: an ``Intake`` and a loaded rule set in, an ``Assessment`` out.

Pure apart from the clock and the decision id, both injectable: pairing, physiology and the
rule engine, glued together. Every arterial gas gets its derived values; the latest (the
index gas) is evaluated by the rules, with the response to oxygen read from every pair of gases
(``serial``). Inputs known only as a range (an estimated FiO2, an assumed pressure, a missing
age or residence) are evaluated at the ends of their ranges and only what holds in all of them
is kept (``uncertainty``, ``service.engine.scenarios``). The engine decides everything
about the verdict (grades, demotion on untrusted data, the order of findings, what is
missing, what to ask for); this module only gathers the facts and the findings met before
the rules, and maps the verdict to the adapter-neutral ``Assessment``.
"""

from __future__ import annotations

import uuid
from dataclasses import replace
from datetime import UTC, datetime, timedelta

from service.config import Settings
from service.engine import Evaluation, Pattern, RuleSet, Severity
from service.engine.evaluate import run_rules
from service.engine.rationale import Units
from service.engine.scenarios import combine, evaluate_scenarios
from service.engine.verdict import SEVERITY_RANK, MechanismAssessment, Verdict
from service.intake.model import Intake, Quantity, Specimen
from service.physiology.oxygen_prediction import TargetBand

from .derivation import FactValue
from .derive import GasFacts, derive_again, derive_gas_facts, with_fio2_raised
from .pairing import SETTINGS, PairedGas, Pairing, Windows, pair_gases
from .presentation import PressureUnit, display_units
from .result import Assessment, Finding, GasResult, MechanismVerdict, ResultStatus
from .serial import serial_facts
from .titration import TitrationRules, assess_titration, record_points
from .trend import assessment_trend
from .uncertainty import input_ranges, representative_changes

# The rule-set parameter that says how far a PaO2 may exceed the alveolar PO2 before the data
# are doubted; the uncertain ranges are narrowed with it (0 when a rule set has none).
ALVEOLAR_TOLERANCE = "alveolar_excess_tolerance"

VALUE_OUT_OF_RANGE = "value-out-of-range"
VALUE_OUTSIDE_WINDOW = "value-outside-window"


def _duration(delta: timedelta) -> str:
    """A time span in words, to the nearest whole unit that reads well."""
    seconds = abs(delta.total_seconds())
    if seconds >= 2 * 86400:
        return f"{seconds / 86400:.0f} days"
    if seconds >= 2 * 3600:
        return f"{seconds / 3600:.0f} hours"
    return f"{seconds / 60:.0f} minutes"


def _outside_window(gas: PairedGas, windows: Windows) -> list[Finding]:
    """An information finding for each kind of value sent but taken too far from the gas to
    describe it (an FiO2 has its own rule, ``fio2-time-mismatch``). The finding names the
    kind and the time apart, never the value."""
    found: list[Finding] = []
    anchor = gas.time
    for quantity, m in gas.out_of_window.items():
        if quantity is Quantity.FIO2 or anchor is None or m.time is None:
            continue
        apart = anchor - m.time
        when = "before" if apart >= timedelta(0) else "after"
        limit = windows.setting if quantity in SETTINGS and apart > timedelta(0) else None
        limit = limit or windows.limit(quantity)
        beyond = f", beyond the {_duration(limit)} it is taken to describe" if limit else ""
        found.append(
            Finding(
                VALUE_OUTSIDE_WINDOW,
                Severity.INFORMATION,
                f"{quantity.value.replace('_', ' ')} taken {_duration(apart)} {when} the gas"
                f"{beyond}: not used",
                expression=m.source.expression,
            )
        )
    return found


def _specimen_flags(pairing: Pairing) -> dict[str, FactValue]:
    excluded = pairing.excluded_specimens
    unknown = any(m.specimen in (Specimen.UNKNOWN, None) for m in excluded)
    not_arterial = bool(pairing.non_arterial_po2) or any(
        m.specimen not in (Specimen.UNKNOWN, None) for m in excluded
    )
    return {"specimen_unknown": unknown, "specimen_not_arterial": not_arterial}


def _mechanism(item: MechanismAssessment, units: Units) -> MechanismVerdict:
    deciding = item.deciding
    if len(deciding) == 1 and item.demoted_because is None and item.uncertain_because is None:
        # The usual case, one rule decided and nothing said beside it: the rule's own
        # rationale, discriminator and trace lines, as the general way below joins them.
        only = deciding[0]
        rule = only.rule
        found = rule.discriminator
        return MechanismVerdict(
            item.mechanism,
            item.grade,
            only.rationale_in(units),
            (rule.ref,),
            None if found is None else found.text or None,
            only.trace_lines,
        )
    discriminators = " ".join(d.text for d in item.discriminators)
    return MechanismVerdict(
        code=item.mechanism,
        grade=item.grade,
        rationale=" ".join(item.rationales_in(units)),
        rules=item.rules,
        discriminator=discriminators or None,
        trace=tuple([line for result in item.deciding for line in result.trace_lines]),
    )


def _merge(rule_findings: list[Finding], intake_findings: list[Finding]) -> list[Finding]:
    """Rule findings, with the location of an intake finding of the same code folded in;
    intake findings no rule restates are kept as they are."""
    located = {f.code: f.expression for f in intake_findings if f.expression}
    merged = [
        replace(f, expression=located[f.code]) if f.code in located and not f.expression else f
        for f in rule_findings
    ]
    stated = {f.code for f in rule_findings}
    return merged + [f for f in intake_findings if f.code not in stated]


def _status(verdict: Verdict) -> ResultStatus:
    if verdict.pattern is Pattern.NOT_CLASSIFIABLE:
        return ResultStatus.DATA_REQUIRED
    if verdict.data_requested:
        return ResultStatus.DATA_REQUESTED
    return ResultStatus.SUCCESS


# The windows of the settings last asked about (settings are frozen; a process has one).
_LAST_WINDOWS: list[tuple[Settings, Windows]] = []


def windows(settings: Settings) -> Windows:
    """The pairing windows of the site's settings (worked out once per settings object)."""
    last = _LAST_WINDOWS[-1] if _LAST_WINDOWS else None
    if last is not None and last[0] is settings:
        return last[1]
    found = _windows(settings)
    _LAST_WINDOWS[:] = [(settings, found)]
    return found


def _windows(settings: Settings) -> Windows:
    return Windows(
        same_sample=timedelta(minutes=settings.same_sample_minutes),
        context=timedelta(minutes=settings.pairing_window_minutes),
        setting=timedelta(hours=settings.setting_window_hours),
        haemoglobin=timedelta(hours=settings.haemoglobin_window_hours),
        dyshaemoglobins=timedelta(hours=settings.dyshaemoglobin_window_hours),
        temperature=timedelta(hours=settings.temperature_window_hours),
        lung_function=timedelta(days=settings.lung_function_window_days),
    )


_TITRATION_RULES: dict[str, TitrationRules] = {}


def titration_rules(ruleset: RuleSet) -> TitrationRules:
    """What the titration takes from the rule set's parameters (percentages there, fractions
    here); the defaults where a rule set lacks one. Kept per rule-set content hash (which
    covers its site overrides)."""
    found = _TITRATION_RULES.get(ruleset.content_hash)
    if found is None:
        if len(_TITRATION_RULES) > 16:  # rule sets reloaded many times: start afresh
            _TITRATION_RULES.clear()
        found = _TITRATION_RULES[ruleset.content_hash] = _titration_rules(ruleset)
    return found


def _titration_rules(ruleset: RuleSet) -> TitrationRules:
    default = TitrationRules()

    def fraction(name: str, fallback: float) -> float:
        parameter = ruleset.parameters.get(name)
        return fallback if parameter is None else parameter.value / 100.0

    bands = dict(default.bands)
    standard = (TargetBand.STANDARD, ("target_low", "target_high"))
    hypercapnic = (
        TargetBand.HYPERCAPNIC_RISK,
        ("hypercapnic_target_low", "hypercapnic_target_high"),
    )
    for band, (low, high) in (standard, hypercapnic):
        edges = bands[band]
        bands[band] = (fraction(low, edges[0]), fraction(high, edges[1]))
    return TitrationRules(
        oximeter_low=fraction("oximeter_range_low", default.oximeter_low),
        carboxyhaemoglobin_high=fraction(
            "carboxyhaemoglobin_high", default.carboxyhaemoglobin_high
        ),
        methaemoglobin_high=fraction("methaemoglobin_high", default.methaemoglobin_high),
        bands=tuple(bands.items()),
    )


def _fio2_raised(index: GasFacts, ruleset: RuleSet, settings: Settings) -> float | None:
    """The FiO2 the index gas's PaO2 proves, when above its device estimate (else None)."""
    parameter = ruleset.parameters.get(ALVEOLAR_TOLERANCE)
    tolerance = parameter.value if parameter is not None else 0.0
    # Only the representative's changes: the scenarios are built once, by ``evaluate_gas``.
    changes = representative_changes(index, tolerance_mmhg=tolerance, settings=settings)
    fio2 = changes.get("fio2")
    return fio2 if isinstance(fio2, float) and changes.get("fio2_raised_by_pao2") is True else None


def evaluate_gas(
    index: GasFacts,
    gases: list[GasFacts],
    *,
    ruleset: RuleSet,
    settings: Settings,
    extra: dict[str, FactValue],
    input_errors: list[str],
    serial: dict[str, float] | None = None,
    pressure_unit: PressureUnit = "mm[Hg]",
) -> tuple[Evaluation, Verdict, tuple[str, ...]]:
    """The index gas's evaluation as its inputs were sent, the verdict that holds across the
    ranges of its uncertain inputs, and those inputs in words (pressures in
    ``pressure_unit``)."""
    parameter = ruleset.parameters.get(ALVEOLAR_TOLERANCE)
    tolerance = parameter.value if parameter is not None else 0.0
    ranges = input_ranges(
        index, tolerance_mmhg=tolerance, settings=settings, pressure_unit=pressure_unit
    )
    found = serial_facts(gases, settings=settings) if serial is None else serial
    common = {**found, **extra}
    facts = (
        {**derive_again(index, ranges.representative, settings=settings), **common}
        if ranges.representative
        else {**index.facts, **common}
    )
    run = run_rules(ruleset, facts)
    representative = run.decided(input_errors)
    if not ranges.scenarios or not ranges.uncertainties:
        return representative, representative.verdict, ()
    scenarios = evaluate_scenarios(
        ruleset,
        (
            (label, {**derive_again(index, changes, settings=settings), **common}, only_for)
            for label, changes, only_for in ranges.scenarios
        ),
        input_errors=input_errors,
        # Scenarios' data requests are read only when the representative is not counted.
        ask=not ranges.representative_counts,
        like=run,
    )
    verdict = combine(
        representative,
        scenarios,
        ranges.uncertainties,
        representative_counts=ranges.representative_counts,
    )
    return representative, verdict, tuple(u.what for u in ranges.uncertainties)


def assess(
    intake: Intake,
    *,
    ruleset: RuleSet,
    settings: Settings,
    now: datetime | None = None,
    decision_id: str | None = None,
    pressure_unit: PressureUnit | None = None,
) -> Assessment:
    """Assess one patient's data: every gas's physiology, the index gas's verdict.

    ``pressure_unit`` is the unit the sentences show pressures in (rationales, findings, the
    uncertain inputs); by default the site's. Numbers stay in canonical units either way.
    """
    now = now or datetime.now(UTC)
    unit: PressureUnit = pressure_unit or settings.pressure_unit
    units = display_units(unit)
    paired_within = windows(settings)
    pairing = pair_gases(intake, windows=paired_within)
    gases = [
        derive_gas_facts(g, patient=intake.patient, settings=settings, today=now.date())
        for g in pairing.gases
    ]
    index = gases[0]
    raised = _fio2_raised(index, ruleset, settings)
    if raised is not None:
        index = gases[0] = with_fio2_raised(index, raised, settings=settings)
    chosen = titration_rules(ruleset)
    points = record_points(
        intake,
        windows=paired_within,
        settings=settings,
        rules=chosen,
        by_quantity=pairing.by_quantity,
    )
    titration = (
        assess_titration(
            intake,
            index=index.facts,
            index_time=index.gas.time,
            windows=paired_within,
            settings=settings,
            rules=chosen,
            points=points,
        )
        if points is not None
        else None
    )
    intake_findings = [
        Finding(i.code, Severity(i.severity.value), i.message, expression=i.expression)
        for i in intake.issues
    ]
    serial = serial_facts(gases, settings=settings)
    evaluation, verdict, uncertain = evaluate_gas(
        index,
        gases,
        ruleset=ruleset,
        settings=settings,
        extra={**_specimen_flags(pairing), **(titration.facts if titration else {})},
        input_errors=[f.code for f in intake_findings if f.severity is Severity.ERROR],
        serial=serial,
        pressure_unit=unit,
    )
    declared = ruleset.findings
    rule_findings = [
        Finding(
            str(f.code),
            f.severity,
            f.rationale_in(units),
            rule=f.rule,
            system=d.system if (d := declared.get(f.code)) is not None else None,
            display=d.display if d is not None else None,
            about_data=d.about == "data" if d is not None else None,
        )
        for f in verdict.findings
    ]
    physiology = [
        Finding(VALUE_OUT_OF_RANGE, Severity.WARNING, problem)
        for g in gases
        for problem in g.problems
    ]
    findings = (
        _merge(rule_findings, intake_findings)
        + physiology
        + _outside_window(pairing.index, paired_within)
    )
    findings.sort(key=lambda f: SEVERITY_RANK[f.severity])  # stable: the engine's order within
    return Assessment(
        decision_id=decision_id or str(uuid.uuid4()),
        timestamp=now,
        ruleset_identity=ruleset.identity,
        ruleset_hash=ruleset.content_hash,
        patient=intake.patient,
        pattern=verdict.pattern,
        hypoxaemia=verdict.hypoxaemia,
        mechanisms=[_mechanism(item, units) for item in verdict.mechanisms],
        findings=findings,
        index=index,
        gases=[
            GasResult(facts=g, index=i == 0)
            for i, g in enumerate(gases)
            if g.gas.anchor is not None and g.gas.anchor.quantity is Quantity.ARTERIAL_PO2
        ],
        data_requested=[r.fact for r in verdict.data_requested],
        status=_status(verdict),
        evaluation=evaluation,
        uncertain_inputs=uncertain,
        gas_exchange=verdict.gas_exchange,
        serial=serial,
        titration=titration,
        trend=assessment_trend(
            gases,
            titration=titration,
            intake=intake,
            windows=paired_within,
            settings=settings,
            rules=chosen,
            points=points,
        ),
    )
