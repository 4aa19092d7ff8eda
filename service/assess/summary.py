"""A plain-text summary of an Assessment, for terminals (the demo and the CLI)."""

from __future__ import annotations

from service.config import Settings

from .partition import PART_LABELS, ShownPartition, assessment_partitions
from .presentation import PressureUnit, pressure_label, quantity
from .response_view import applicable_band, band_words
from .response_view import summary_line as response_line
from .result import CAUTION, Assessment

# Derived values shown, with their labels and display decimals.
_SHOWN = (
    ("barometric-pressure", "barometric pressure", 0),
    ("water-vapour-pressure", "water vapour pressure", 1),
    ("fio2", "FiO2", 2),
    ("inspired-po2", "inspired PO2", 1),
    ("alveolar-po2", "alveolar PO2", 1),
    ("aa-gradient", "A-a gradient", 1),
    ("aa-gradient-upper-limit", "A-a limit for age", 1),
    ("pao2-expected", "PaO2 expected for age", 1),
    ("pao2-lower-limit", "PaO2 lower limit for age", 1),
    ("paco2-upper-limit", "PaCO2 limit for setting", 1),
    ("room-air-pao2", "PaO2 on room air, at most", 1),
    ("a-a-ratio", "a/A ratio", 2),
    ("pf-ratio", "P/F ratio", 0),
    ("sf-ratio", "S/F ratio", 0),
    ("arterial-o2-content", "arterial O2 content", 1),
    ("shunt-fraction", "shunt fraction", 0),
    ("venous-admixture", "venous admixture", 0),
    ("shunt-dissolved-bound", "shunt at least", 0),
    ("imputed-pao2", "PaO2 imputed from SpO2", 1),
)
_GRADE_ORDER = {"likely": 0, "possible": 1, "unlikely": 2, "not-assessable": 3}


def _signed(value: float, unit: PressureUnit = "mm[Hg]") -> str:
    shown = quantity("", value, "mm[Hg]", unit)["value"]
    text = f"{shown:.{1 if unit == 'mm[Hg]' else 2}f}"
    return text.lstrip("-") if float(text) == 0 else text.replace("-", "−")


def partition_line(shown: ShownPartition, unit: PressureUnit = "mm[Hg]") -> str:
    """The partition in one line: PaO2 against the expected value, and the fall as the sum of
    its parts (in ``unit``; a negative part raises the PaO2)."""
    d = shown.partition
    parts = " + ".join(f"{PART_LABELS[key]} {_signed(value, unit)}" for key, value in shown.parts)
    assumed = f" ({shown.assumption})" if shown.assumption else ""
    return (
        f"{shown.pao2_label} {_signed(d.arterial_po2, unit)} vs "
        f"{_signed(d.expected_pao2, unit)} expected for age: "
        f"fall {_signed(d.fall, unit)} = {parts} {pressure_label(unit)}{assumed}"
    )


def _partition_lines(a: Assessment, settings: Settings) -> list[str]:
    index = next(g for g in assessment_partitions(a, settings) if g.index)
    if not index.shown:
        return [f"PaO2 deficit: not computed ({index.absent})"]
    lines = [partition_line(shown, settings.pressure_unit) for shown in index.shown]
    if any(value < 0.0 for shown in index.shown for _, value in shown.parts):
        lines.append("  (a negative part raises the PaO2: oxygen, or a PaCO2 below the expected)")
    return lines


def _response_lines(a: Assessment) -> list[str]:
    """The titration fit in a line, and the FiO2 it predicts for the band that applies."""
    t = a.titration
    if t is None:
        return []
    lines = [response_line(t)]
    choice = applicable_band(a)
    prediction = t.prediction
    if prediction is not None and choice.band is not None and t.response.two_parameter:
        target = next(x for x in prediction.targets if x.band is choice.band)
        lines.append(
            f"  target {band_words(target)}: {target.note} (model estimate: titrate to "
            "the measured SpO2)"
        )
    return lines


def summary_text(a: Assessment, *, settings: Settings) -> str:
    """The verdict, the PaO2 deficit partition, the mechanisms with their reasons, the findings
    and the numbers. ``settings`` are those ``a`` was assessed with."""
    lines = [
        f"Pattern: {a.pattern}   (hypoxaemia {a.hypoxaemia}; gas exchange {a.gas_exchange}; "
        f"rule set {a.ruleset_identity})",
        *_partition_lines(a, settings),
        *_response_lines(a),
    ]
    if a.uncertain_inputs:
        lines += [f"Known only as a range, assessed at both ends: {u}" for u in a.uncertain_inputs]
    lines += ["", "Mechanisms"]
    for m in sorted(a.mechanisms, key=lambda m: _GRADE_ORDER[m.grade]):
        lines.append(f"  {m.grade:<15} {m.code}")
        lines.append(f"  {'':<15} {m.rationale}")
        if m.discriminator:
            lines.append(f"  {'':<15} would settle it: {m.discriminator}")
    if a.findings:
        lines += ["", "Findings"]
        lines += [f"  {f.severity:<12} {f.code}: {f.message}" for f in a.findings]
    lines += ["", "Numbers (index gas)"]
    derived = a.index.derived
    for name, label, decimals in _SHOWN:
        d = derived.get(name)
        if d is None:
            continue
        if d.unit == "mm[Hg]":  # in the site's pressure unit, written as a reader writes it
            shown = quantity(name, d.value, d.unit, settings.pressure_unit)
            places = decimals + (1 if settings.pressure_unit == "kPa" else 0)
            lines.append(
                f"  {label:<26} {shown['value']:>8.{places}f} "
                f"{pressure_label(settings.pressure_unit)}"
            )
            continue
        unit = "" if d.unit == "1" else f" {d.unit}"
        lines.append(f"  {label:<26} {d.value:>8.{decimals}f}{unit}")
    if a.index.barometric_source:
        lines.append(f"  {'pressure source':<26} {a.index.barometric_source}")
    if a.index.fio2_source:
        lines.append(f"  {'FiO2 source':<26} {a.index.fio2_source}")
    lines += ["", CAUTION, ""]
    return "\n".join(lines)
