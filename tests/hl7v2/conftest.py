"""One loaded runtime for the HL7 v2 tests (loading the rule set is the slow part)."""

from __future__ import annotations

import pytest

from service.runtime import Runtime


@pytest.fixture(scope="session")
def runtime() -> Runtime:
    return Runtime.load()
