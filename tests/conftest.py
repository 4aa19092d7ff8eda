"""Test-wide settings.

Hypothesis's per-example deadline (200 ms by default) times the machine, not the code: on a
loaded two-core runner a property test's slow example fails for no fault of the code under test.
Speed has its own commands (``python -m tests.benchmarks...``), so the deadline is off here.
The mutation runner chooses its own profile (fewer examples) through
``OXYRULE_HYPOTHESIS_PROFILE``.
"""

from __future__ import annotations

import os

from hypothesis import settings

settings.register_profile("oxyrule", deadline=None)
settings.load_profile(os.environ.get("OXYRULE_HYPOTHESIS_PROFILE", "oxyrule"))
