"""The assessment as an ORU^R01 result message, for systems that file results from v2 only.

Layout (one order group, filled by us as the filler):

* ``MSH`` sender/receiver swapped, ``ORU^R01^ORU_R01``; the original ``PID`` (re-encoded in
  the standard encoding characters) so the receiver can file the result;
* ``OBR`` with OBR-2 the placer order number of the message assessed, OBR-3 the decision id,
  OBR-4 our service code, OBR-7 the time of the index gas, OBR-25 ``F``; an order-level ``NTE``
  with the clinical caution;
* one NM ``OBX`` per derived value of the index gas (sub-id 0), in the result's order, coded
  with LOINC where a term exists (A-a gradient 19991-9 from memory, P/F 50984-4 "Horowitz index
  in Arterial blood") and with our own code system otherwise (the a/A ratio among them: no LOINC
  term for it could be confirmed); the A-a gradient with its age limit (OBX-7 ``<limit``, a
  range form of the standard's) and flag (OBX-8 H or N); the equation in OBX-17, or in an
  ``NTE`` after the OBX when it is longer than OBX-17's text may be;
* the PaO2 deficit partition of the index gas (sub-id 3, or 3.1 and 3.2 when it is given for
  each residence at altitude, with an ``NTE`` naming the assumption): one NM ``OBX`` each for
  the expected PaO2, the fall and every part shown (positive lowers the PaO2), with the method
  (OBX-17 or an ``NTE``, as above); a gas without one gets an ``NTE`` saying why;
* the oxygen-response fit (sub-id 4): NM ``OBX``s for the fitted shunt and V/Q term (or the
  effective shunt when they are not separated) and the FiO2 predicted for the target band
  that applies, each with an ``NTE`` giving its range; an ``NTE`` with the model, any refusal
  and the model caution;
* one coded ``OBX`` for the pattern (with ``NTE``s naming any input known only as a range),
  one for the gas-exchange status (sub-id 1.0), one per mechanism (sub-id 1.n) with its
  grade, an ``NTE`` with the rationale and one with the discriminator; one coded ``OBX`` per
  finding (sub-id 2.n) with an ``NTE`` giving severity and message.

Numbers and units are those of the FHIR result (``render.quantity``): pressures in mm[Hg]
unless kPa is asked for. Pure: the clock and the control id may be given.
"""

from __future__ import annotations

from datetime import UTC, datetime

from service.assess.derive import Derived
from service.assess.partition import ShownPartition, assessment_partitions
from service.assess.presentation import QUANTITY_ORDER, PressureUnit, quantity, shown_quantity
from service.assess.response_view import MODEL_WORDS, applicable_band, band_words
from service.assess.result import CAUTION, Assessment
from service.config import Settings
from service.hl7v2 import er7, tables
from service.hl7v2.ack import reply_header
from service.hl7v2.header import version_tuple
from service.hl7v2.message import V2Message
from service.hl7v2.times import format_dtm
from service.physiology.oxygen_prediction import CAUTION as MODEL_CAUTION
from service.terminology.codes import DERIVED_OBSERVATION_CODES as OBSERVATION_CODES

LOINC_V2 = "LN"
SERVICE_CODE = ("hypoxaemia-mechanism-assessment", "Hypoxaemia mechanism assessment")

DISPLAYS: dict[str, str] = {
    "barometric-pressure": "Barometric pressure used",
    "water-vapour-pressure": "Water vapour pressure at body temperature",
    "fio2": "Inspired oxygen fraction used",
    "inspired-po2": "Inspired oxygen partial pressure",
    "alveolar-po2": "Alveolar oxygen partial pressure (alveolar gas equation)",
    "aa-gradient": OBSERVATION_CODES["aa-gradient"][1],
    "aa-gradient-upper-limit": "A-a gradient upper limit for age",
    "room-air-alveolar-po2": "Alveolar PO2 on room air at this PaCO2 and pressure",
    "room-air-pao2": "PaO2 on room air by this gas's effective shunt (at most)",
    "room-air-pao2-least": "PaO2 on room air by effective shunt, least over the assumptions",
    "room-air-pao2-most": "PaO2 on room air by effective shunt, most over the assumptions",
    "pao2-expected": "PaO2 expected for age at sea level on air",
    "pao2-lower-limit": "PaO2 lower limit of normal for age at sea level on air",
    "paco2-upper-limit": "PaCO2 upper limit for this setting",
    "a-a-ratio": OBSERVATION_CODES["a-a-ratio"][1],
    "pf-ratio": OBSERVATION_CODES["pf-ratio"][1],
    "sf-ratio": "Oxygen saturation by pulse oximetry / inspired oxygen fraction",
    "arterial-o2-content": "Arterial oxygen content",
    "shunt-fraction": "Shunt fraction (venous admixture) estimate",
    "venous-admixture": "Venous admixture by the shunt equation",
    "shunt-dissolved-bound": "Least shunt from dissolved oxygen on near-pure oxygen",
    "imputed-pao2": "Arterial PO2 imputed from SpO2",
    "expected-hco3": "Expected bicarbonate for the PaCO2",
}
MECHANISMS = {
    "low-inspired-oxygen": "Low inspired oxygen",
    "hypoventilation": "Hypoventilation",
    "diffusion-limitation": "Diffusion limitation",
    "vq-mismatch": "Ventilation-perfusion mismatch",
    "shunt": "Shunt",
}
DEFICIT_ROWS = {
    "expected": ("pao2-expected", DISPLAYS["pao2-expected"]),
    "fall": ("pao2-fall", "Fall of PaO2 below the expected value"),
    "inspired": ("deficit-inspired", "Part of the fall due to the inspired PO2"),
    "ventilation": ("deficit-ventilation", "Part of the fall due to the PaCO2"),
    "gas-exchange": ("deficit-gas-exchange", "Part of the fall due to the A-a gradient"),
    "unattributed": ("deficit-unattributed", "Part of the fall not attributed (no PaCO2)"),
}
GAS_EXCHANGE = {"defect": "Defect", "normal": "Normal", "unknown": "Unknown"}
PATTERNS = {
    "no-hypoxaemia": "No hypoxaemia",
    "single": "Single mechanism",
    "mixed": "Mixed mechanisms",
    "indeterminate": "Indeterminate",
    "not-classifiable": "Not classifiable",
}


METHOD_TEXT_LIMIT = 199  # CWE.2 / CE.2 (text) is ST(199) in HL7 v2.5.1
DERIVED_SUB_ID = "0"  # OBX-4 of the derived values (some versions require a sub-id)


class _Writer:
    """Numbers the OBX and NTE segments as they are added."""

    def __init__(self, coded: str, when: str) -> None:
        self.coded, self.when = coded, when
        self.segments: list[str] = []
        self.obx_count = 0
        self.nte_count = 0

    def obx(self, value_type: str, code: str, value: str, sub_id: str = "", **more: str) -> None:
        """One OBX; ``method`` (plain text) goes to OBX-17's text when it fits (CE/CWE text is
        ST(199) in v2.5.1), else to an NTE after the OBX: no field longer than its type."""
        self.obx_count += 1
        self.nte_count = 0
        method = more.get("method", "")
        fits = len(method) <= METHOD_TEXT_LIMIT
        fields = [str(self.obx_count), value_type, code, sub_id, value]
        fields += [more.get("unit", ""), more.get("range", ""), more.get("flag", "")]
        fields += ["", "", "F", "", "", self.when, "", ""]
        fields.append(er7.components("", method) if method and fits else "")
        self.segments.append(er7.segment("OBX", *fields))
        if method and not fits:
            self.note(f"Method: {method}")

    def note(self, text: str) -> None:
        self.nte_count += 1
        self.segments.append(er7.segment("NTE", str(self.nte_count), "L", er7.escape(text)))

    def coded_obx(self, code: str, value: str, sub_id: str = "") -> None:
        self.obx(self.coded, code, value, sub_id)


def _derived(w: _Writer, name: str, d: Derived, a: Assessment, unit: PressureUnit) -> None:
    shown = shown_quantity(name, d, unit)
    loinc = OBSERVATION_CODES.get(name, (None, ""))[0]
    code = (
        er7.components(loinc, DISPLAYS[name], LOINC_V2)
        if loinc
        else er7.components(name, DISPLAYS[name], tables.DERIVED_SYSTEM)
    )
    more = {
        "unit": er7.components(shown["code"], shown["unit"], "UCUM"),
        "method": d.method,
    }
    limit = a.index.derived.get("aa-gradient-upper-limit")
    if name == "aa-gradient" and limit is not None:
        bound = quantity("aa-gradient-upper-limit", limit.value, limit.unit, unit)
        more["range"] = er7.escape(f"<{er7.number(bound['value'])}")
        more["flag"] = "H" if d.value > limit.value else "N"
    w.obx("NM", code, er7.number(shown["value"]), DERIVED_SUB_ID, **more)


def _deficit(w: _Writer, shown: ShownPartition, sub_id: str, unit: PressureUnit) -> None:
    d = shown.partition
    rows = [("expected", d.expected_pao2), ("fall", d.fall), *shown.parts]
    for n, (key, value) in enumerate(rows):
        code, display = DEFICIT_ROWS[key]
        shown_value = quantity(code, value, "mm[Hg]", unit)
        w.obx(
            "NM",
            er7.components(code, display, tables.DERIVED_SYSTEM),
            er7.number(shown_value["value"]),
            sub_id,
            unit=er7.components(shown_value["code"], shown_value["unit"], "UCUM"),
            method=shown.method,
        )
        if n == 0 and shown.assumption is not None:
            w.note(f"Residence not sent: computed {shown.assumption}.")


def _response(w: _Writer, a: Assessment, unit: PressureUnit) -> None:
    t = a.titration
    if t is None or t.fit is None:
        return
    method = er7.components("", "two-parameter model of oxygen exchange fitted to a titration")
    rows: list[tuple[str, str, float, str, str]] = []  # code, display, value, unit, range note
    if t.shunt is not None and t.vq_drop is not None:
        s, d = t.shunt, t.vq_drop
        rows += [
            (
                "fitted-shunt",
                "Shunt fitted to the titration",
                100.0 * s.value,
                "%",
                f"range {s.least:.1%} to {s.most:.1%} (95 % and the assumptions)",
            ),
            (
                "fitted-vq-term",
                "V/Q term fitted to the titration (alveolar to end-capillary PO2 drop)",
                d.value,
                "mm[Hg]",
                f"range {d.least:.0f} to {d.most:.0f} mmHg (95 % and the assumptions)",
            ),
        ]
    elif t.effective_shunt is not None:
        e = t.effective_shunt
        rows.append(
            (
                "effective-shunt",
                "Effective shunt (shunt and V/Q mismatch together)",
                100.0 * e.value,
                "%",
                f"range {e.least:.1%} to {e.most:.1%} (95 % and the a-v difference)",
            )
        )
    choice = applicable_band(a)
    prediction = t.prediction
    if prediction is not None and choice.band is not None and t.response.two_parameter:
        target = next(x for x in prediction.targets if x.band is choice.band)
        if target.fio2 is not None:
            low, high = target.fio2_low, target.fio2_high
            spread = (
                f"range {low:.2f} to {high:.2f}"
                if low is not None and high is not None
                else "upper end beyond FiO2 1.0"
            )
            rows.append(
                (
                    "predicted-fio2-for-target",
                    f"FiO2 predicted for the target band {band_words(target)} (model estimate)",
                    target.fio2,
                    "1",
                    spread,
                )
            )
    for code, display, value, row_unit, note in rows:
        shown = quantity(code, value, row_unit, unit)
        if row_unit == "1":
            shown = {**shown, "value": round(value, 2)}
        w.obx(
            "NM",
            er7.components(code, display, tables.DERIVED_SYSTEM),
            er7.number(shown["value"]),
            "4",
            unit=er7.components(shown["code"], shown["unit"], "UCUM"),
            method=method,
        )
        w.note(note)
    refusal = f"; not separated: {t.response.refusal}" if t.response.refusal else ""
    w.note(f"Model: {MODEL_WORDS[t.fit.model]}{refusal}. {MODEL_CAUTION}")


def oru_result(
    message: V2Message,
    assessment: Assessment,
    *,
    settings: Settings,
    pressure_unit: PressureUnit = "mm[Hg]",
    now: datetime | None = None,
    control_id: str | None = None,
) -> str:
    """The ORU^R01 carrying ``assessment`` of ``message`` back to its sender; ``settings``
    are those it was assessed with (for a partition given for each residence)."""
    a = assessment
    now = now or datetime.now(UTC)
    msh, version = reply_header(message, ("ORU", "R01", "ORU_R01"), now=now, control_id=control_id)
    coded = "CWE" if version_tuple(version) >= (2, 5) else "CE"
    index_time = a.index.gas.time
    when = format_dtm(index_time) if index_time is not None else ""
    segments = [msh]
    pids = message.all("PID")
    if pids:
        segments.append(pids[0].reencoded())
    obrs = message.all("OBR")
    placer = er7.components(*obrs[0].components(2)) if obrs else ""
    service = er7.components(*SERVICE_CODE, tables.DERIVED_SYSTEM)
    obr = ["1", placer, er7.components(a.decision_id, tables.APPLICATION), service]
    obr += ["", "", when] + [""] * 14 + [format_dtm(now), "", "", "F"]
    if version_tuple(version) < (2, 3, 1):
        # v2.3's ORU requires OBR-27 (quantity/timing): one result, at the index gas's time.
        obr += ["", "1^^^" + when]
    segments.append(er7.segment("OBR", *obr))
    segments.append(er7.segment("NTE", "1", "L", er7.escape(CAUTION)))
    w = _Writer(coded, when)
    for name in QUANTITY_ORDER:
        if (d := a.index.derived.get(name)) is not None:
            _derived(w, name, d, a, pressure_unit)
    index = next(g for g in assessment_partitions(a, settings) if g.index)
    many = len(index.shown) > 1
    for n, shown in enumerate(index.shown, start=1):
        _deficit(w, shown, f"3.{n}" if many else "3", pressure_unit)
    _response(w, a, pressure_unit)
    assessment_code = er7.components(
        "hypoxaemia-mechanism-assessment", "Likely mechanism of hypoxaemia", tables.DERIVED_SYSTEM
    )
    pattern = er7.components(a.pattern, PATTERNS.get(a.pattern, a.pattern), tables.PATTERN_SYSTEM)
    w.coded_obx(assessment_code, pattern, "1")
    if a.data_requested:
        w.note("More data would settle it: " + ", ".join(a.data_requested))
    for what in a.uncertain_inputs:
        w.note("Known only as a range, assessed at both ends: " + what)
    if index.absent is not None:
        w.note("No PaO2 deficit partition: " + index.absent)
    exchange = er7.components("gas-exchange-status", "Gas exchange for age", tables.DERIVED_SYSTEM)
    status = GAS_EXCHANGE.get(a.gas_exchange, a.gas_exchange)
    w.coded_obx(exchange, er7.components(a.gas_exchange, status, tables.GAS_EXCHANGE_SYSTEM), "1.0")
    for n, m in enumerate(a.mechanisms, start=1):
        mechanism = er7.components(m.code, MECHANISMS.get(m.code, m.code), tables.MECHANISM_SYSTEM)
        grade = er7.components(m.grade, m.grade.capitalize(), tables.GRADE_SYSTEM)
        w.coded_obx(mechanism, grade, f"1.{n}")
        w.note(m.rationale)
        if m.discriminator:
            w.note("Would settle it: " + m.discriminator)
    finding_code = er7.components(
        "finding", "Data-quality or context finding", tables.DERIVED_SYSTEM
    )
    for n, f in enumerate(a.findings, start=1):
        system = tables.FINDING_SYSTEM if f.system is None else tables.SITE_FINDING_SYSTEM
        w.coded_obx(finding_code, er7.components(f.code, f.display or "", system), f"2.{n}")
        w.note(f"{f.severity}: {f.message}")
    return er7.message(segments + w.segments)
