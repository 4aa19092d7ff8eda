"""Data requests name facts someone can supply, never ones already known."""

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.data_requests import DataRequest, DataRequests


def test_a_known_fact_is_requested_only_when_asked_for_even_if_known() -> None:
    requests = DataRequests({"spo2": 93.0, "fio2": 0.5}, DEFAULT_CATALOGUE)
    requests.ask("spo2", "r@1")
    requests.ask("fio2", "r@1", even_if_known=True)
    assert requests.collected() == (DataRequest("fio2", ("r@1",)),)


def test_a_missing_measured_fact_is_requested_by_every_rule_that_asked() -> None:
    requests = DataRequests({}, DEFAULT_CATALOGUE)
    requests.ask("mixed_venous_po2", "b@1")
    requests.ask("mixed_venous_po2", "a@2")
    assert requests.collected() == (DataRequest("mixed_venous_po2", ("a@2", "b@1")),)


def test_a_missing_derived_fact_becomes_its_missing_inputs_recursively() -> None:
    # aa_gradient needs alveolar_po2 (needs fio2, barometric_pressure, arterial_pco2 and the
    # water vapour pressure, which every gas has).
    known = {"arterial_po2": 60.0, "barometric_pressure": 700.0, "water_vapour_pressure": 47.1}
    requests = DataRequests(known, DEFAULT_CATALOGUE)
    requests.ask("aa_gradient", "r@1")
    assert requests.collected() == (
        DataRequest("arterial_pco2", ("r@1",), ("aa_gradient",)),
        DataRequest("fio2", ("r@1",), ("aa_gradient",)),
    )


def test_a_derived_fact_whose_inputs_are_all_known_is_requested_itself() -> None:
    requests = DataRequests({"spo2": 90.0, "fio2": 0.4}, DEFAULT_CATALOGUE)
    requests.ask("sf_ratio", "r@1")
    assert requests.collected() == (DataRequest("sf_ratio", ("r@1",)),)


def test_requests_come_out_in_catalogue_order() -> None:
    requests = DataRequests({}, DEFAULT_CATALOGUE)
    for fact in ("peep", "spo2", "arterial_po2"):
        requests.ask(fact, "r@1")
    assert [item.fact for item in requests.collected()] == ["arterial_po2", "spo2", "peep"]


def test_a_derived_fact_whose_inputs_are_known_asks_for_its_missing_optional_inputs() -> None:
    # 2.0 (rules/CHANGELOG.md, "Data requests name what a client can send"): the PaCO2 limit
    # at a known pressure needs only the residence at altitude; a content with its Hb, PaO2
    # and pH known asks for the saturation and dyshaemoglobins it could still use, not for
    # the pH it has, nor for itself (the functional saturation, derived, becomes what can be
    # sent: an SaO2 or a co-oximeter's O2Hb).
    residence = DataRequests({"barometric_pressure": 600.0}, DEFAULT_CATALOGUE)
    residence.ask("paco2_upper_limit", "r@1")
    assert [(r.fact, r.needed_for) for r in residence.collected()] == [
        ("altitude_residence", ("paco2_upper_limit",))
    ]
    known = {"haemoglobin": 14.0, "arterial_po2": 60.0, "arterial_ph": 7.4}
    content = DataRequests(known, DEFAULT_CATALOGUE)
    content.ask("arterial_o2_content", "r@1")
    asked = {r.fact for r in content.collected()}
    assert asked == {"arterial_so2", "arterial_o2hb", "carboxyhaemoglobin", "methaemoglobin"}
