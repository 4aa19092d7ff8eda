"""A plain-text summary of an Assessment, for terminals (the demo and the CLI)."""

from __future__ import annotations

from service.engine import Grade

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
    ("a-a-ratio", "a/A ratio", 2),
    ("pf-ratio", "P/F ratio", 0),
    ("sf-ratio", "S/F ratio", 0),
    ("arterial-o2-content", "arterial O2 content", 1),
    ("shunt-fraction", "shunt fraction", 0),
    ("imputed-pao2", "PaO2 imputed from SpO2", 1),
)
_GRADE_ORDER = {grade: rank for rank, grade in enumerate(Grade)}  # likely first


def summary_text(a: Assessment) -> str:
    """The verdict, the mechanisms with their reasons, the findings and the numbers."""
    lines = [
        f"Pattern: {a.pattern}   (hypoxaemia {a.hypoxaemia}; rule set {a.ruleset_identity})",
        "",
        "Mechanisms",
    ]
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
        if d is not None:
            unit = "" if d.unit == "1" else f" {d.unit}"
            lines.append(f"  {label:<26} {d.value:>8.{decimals}f}{unit}")
    if a.index.barometric_source:
        lines.append(f"  {'pressure source':<26} {a.index.barometric_source}")
    if a.index.fio2_source:
        lines.append(f"  {'FiO2 source':<26} {a.index.fio2_source}")
    lines += ["", CAUTION, ""]
    return "\n".join(lines)
