"""The titration takes its limits from the rule set's parameters, a site's overrides included
(service/assess/assess.py, titration_rules): percentages there, fractions here (1 % = 0.01)."""

from __future__ import annotations

import pytest

from service.assess.assess import titration_rules
from service.assess.catalogue import DEFAULT_CATALOGUE
from service.config import Settings
from service.engine.loader import load_ruleset
from service.physiology.oxygen_prediction import TargetBand

# Values inside each parameter's accepted range and away from the shipped defaults (invented
# site choices).
OVERRIDES = {
    "oximeter_range_low": 75.0,
    "carboxyhaemoglobin_high": 8.0,
    "methaemoglobin_high": 4.0,
    "target_low": 92.0,
    "target_high": 97.0,
    "hypercapnic_target_low": 86.0,
    "hypercapnic_target_high": 91.0,
}


def test_a_sites_overrides_are_the_titrations_limits() -> None:
    ruleset = load_ruleset(Settings().rules_dir, catalogue=DEFAULT_CATALOGUE, overrides=OVERRIDES)
    rules = titration_rules(ruleset)
    assert rules.oximeter_low == pytest.approx(0.75)
    assert rules.carboxyhaemoglobin_high == pytest.approx(0.08)
    assert rules.methaemoglobin_high == pytest.approx(0.04)
    bands = dict(rules.bands)
    assert bands[TargetBand.STANDARD] == pytest.approx((0.92, 0.97))
    assert bands[TargetBand.HYPERCAPNIC_RISK] == pytest.approx((0.86, 0.91))
