"""The PaO2 deficit partition as a sequence of steps, for every surface that shows it.

``deficit.partition_pao2_deficit`` splits expected PaO2 − PaO2 into parts. Shown as a
waterfall, the parts are steps: start at the expected PaO2 (age, sea level, air), take each part
in turn (a positive part lowers the PaO2, a negative one — an oxygen credit, a PaCO2 below the
expected value — raises it), and end at the measured PaO2. By construction the last level is
the PaO2: expected − (inspired + ventilation + gas exchange + unattributed) = PaO2.

Which parts are shown: inspired always; ventilation and gas exchange when PaCO2 is known;
unattributed when it holds their sum (PaCO2 unknown) or, should it ever be, when it is not
negligible (``RESIDUE_MMHG``). A part is never shown as a zero standing in for "unknown".

All values in mm[Hg]. Pure arithmetic: no drawing and no text here, so the FHIR, HL7 v2,
text and HTML surfaces agree on the numbers and the chart code only draws.
"""

from __future__ import annotations

from dataclasses import dataclass

from .deficit import DeficitPartition

# Half the display precision of a pressure in mm[Hg] (0.1): an unattributed rest below this is
# rounding, not a part.
RESIDUE_MMHG = 0.05

# The parts in the order they are taken (the setting first, then what the patient adds).
INSPIRED = "inspired"
VENTILATION = "ventilation"
GAS_EXCHANGE = "gas-exchange"
UNATTRIBUTED = "unattributed"
PART_KEYS = (INSPIRED, VENTILATION, GAS_EXCHANGE, UNATTRIBUTED)


@dataclass(frozen=True, slots=True)
class Step:
    """One bar of the waterfall: a level change from ``start_mmhg`` to ``end_mmhg``.

    ``key`` is ``expected`` (a bar from 0 to the expected PaO2), a part key, or ``measured``
    (a bar from 0 to the PaO2). ``part_mmhg`` is the part as the partition states it (positive:
    lowers the PaO2); for the two end bars it is None.
    """

    key: str
    start_mmhg: float
    end_mmhg: float
    part_mmhg: float | None

    @property
    def lowers(self) -> bool:
        """Whether the step lowers the PaO2 (a part > 0)."""
        return self.part_mmhg is not None and self.part_mmhg > 0.0


def shown_parts(partition: DeficitPartition) -> tuple[tuple[str, float], ...]:
    """(key, mm[Hg]) of each part that is shown, in ``PART_KEYS`` order; absent parts absent."""
    parts: list[tuple[str, float]] = [(INSPIRED, partition.inspired)]
    if partition.ventilation is not None:
        parts.append((VENTILATION, partition.ventilation))
    if partition.gas_exchange is not None:
        parts.append((GAS_EXCHANGE, partition.gas_exchange))
    carries_rest = partition.ventilation is None or partition.gas_exchange is None
    if carries_rest or abs(partition.unattributed) >= RESIDUE_MMHG:
        parts.append((UNATTRIBUTED, partition.unattributed))
    return tuple(parts)


def waterfall(partition: DeficitPartition) -> tuple[Step, ...]:
    """The steps from the expected PaO2 through each shown part to the measured PaO2.

    The level after the last part equals the PaO2 to within ``RESIDUE_MMHG`` (a rest below it
    is not shown); the ``measured`` bar is drawn at the PaO2 itself.
    """
    steps = [Step("expected", 0.0, partition.expected_pao2, None)]
    level = partition.expected_pao2
    for key, part in shown_parts(partition):
        steps.append(Step(key, level, level - part, part))
        level -= part
    steps.append(Step("measured", 0.0, partition.arterial_po2, None))
    return tuple(steps)
