"""Pure physiology of oxygenation: floats in canonical units in, floats out.

No I/O, no FHIR, no HTTP, no rule engine. Arguments are keyword-only and carry their unit in
their name (``paco2_mmhg``, ``haemoglobin_g_dl``); fractions (FiO2, saturations) are 0–1.
Every public function documents its equation and source, and rejects impossible input with
``ImpossibleValueError`` or ``OutsideModelRangeError`` (see ``service.exceptions``).
"""
