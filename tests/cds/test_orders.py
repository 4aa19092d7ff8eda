"""Draft oxygen and ventilator orders read from ``context.draftOrders`` (FHIR R4, R5)."""

from __future__ import annotations

from typing import Any

import pytest

from service.cds.orders import read_orders

LOINC, UCUM = "http://loinc.org", "http://unitsofmeasure.org"
DEVICES = "https://oxyrule.org/fhir/CodeSystem/oxygen-device"


def bundle(*resources: dict[str, Any]) -> dict[str, Any]:
    return {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [{"resource": r} for r in resources],
    }


def quantity(value: float, unit: str) -> dict[str, Any]:
    return {"value": value, "unit": unit, "system": UCUM, "code": unit}


def device_request(
    rid: str, device: str | None, *parameters: tuple[str, dict[str, Any]]
) -> dict[str, Any]:
    resource: dict[str, Any] = {
        "resourceType": "DeviceRequest",
        "id": rid,
        "status": "draft",
        "intent": "order",
        "parameter": [
            {"code": {"coding": [{"system": LOINC, "code": code}]}, "valueQuantity": value}
            for code, value in parameters
        ],
    }
    if device is not None:
        resource["codeCodeableConcept"] = {"coding": [{"system": DEVICES, "code": device}]}
    return resource


@pytest.mark.parametrize(
    ("value", "unit", "fio2"),
    [
        (40, "%", 0.40),
        (0.4, "1", 0.40),
        (0.4, "%", 0.40),  # a fraction sent with unit % is read as a fraction (normalise_fio2)
    ],
)
def test_a_device_request_states_the_fio2(value: float, unit: str, fio2: float) -> None:
    (order,) = read_orders(
        bundle(device_request("v", "venturi-mask", ("3150-0", quantity(value, unit))))
    )
    assert order.fio2 == pytest.approx(fio2)
    assert (order.device, order.ventilator, order.fio2_estimated) == ("venturi-mask", False, False)
    assert order.reference == "DeviceRequest/v"


def test_a_ventilator_setting_with_peep_is_a_ventilator_order() -> None:
    found = read_orders(
        bundle(
            device_request(
                "vent", None, ("19994-3", quantity(0.8, "1")), ("20077-4", quantity(8, "cm[H2O]"))
            )
        )
    )
    assert found[0].ventilator and found[0].fio2 == pytest.approx(0.8)


def test_nasal_oxygen_by_flow_gets_an_estimated_fio2() -> None:
    request = {
        "resourceType": "ServiceRequest",
        "id": "o2",
        "status": "draft",
        "intent": "order",
        # SNOMED CT 57485005 Oxygen therapy (from memory), SNOMED 336623009 nasal cannula.
        "code": {"coding": [{"system": "http://snomed.info/sct", "code": "57485005"}]},
        "orderDetail": [{"coding": [{"system": "http://snomed.info/sct", "code": "336623009"}]}],
        "quantityQuantity": quantity(2, "L/min"),
    }
    (order,) = read_orders(bundle(request))
    # "4 % per litre" (common practice): 0.21 + 0.04 x 2 = 0.29.
    assert order.fio2 == pytest.approx(0.29)
    assert order.fio2_estimated and order.device == "nasal-cannula"
    assert order.flow_l_min == 2.0


def test_an_r5_order_detail_parameter_is_read() -> None:
    request = {
        "resourceType": "ServiceRequest",
        "id": "o2",
        "code": {"coding": [{"system": "http://snomed.info/sct", "code": "57485005"}]},
        "orderDetail": [
            {
                "parameter": [
                    {
                        "code": {"coding": [{"system": LOINC, "code": "3151-8"}]},
                        "valueQuantity": quantity(500, "mL/min"),
                    }
                ]
            }
        ],
    }
    (order,) = read_orders(bundle(request))
    assert order.flow_l_min == pytest.approx(0.5)  # 500 mL/min = 0.5 L/min
    assert order.fio2 is None  # no device: no estimate


def test_oxygen_as_a_medication_is_read_from_its_rate() -> None:
    request = {
        "resourceType": "MedicationRequest",
        "id": "o2",
        # RxNorm 7806 Oxygen (from memory)
        "medicationCodeableConcept": {
            "coding": [{"system": "http://www.nlm.nih.gov/research/umls/rxnorm", "code": "7806"}]
        },
        "dosageInstruction": [{"doseAndRate": [{"rateQuantity": quantity(4, "L/min")}]}],
    }
    (order,) = read_orders(bundle(request))
    assert order.flow_l_min == 4.0 and order.fio2 is None


def test_a_unit_that_cannot_be_read_is_named_not_guessed() -> None:
    (order,) = read_orders(
        bundle(device_request("v", "venturi-mask", ("3150-0", quantity(40, "kg"))))
    )
    assert order.fio2 is None
    assert order.unread == ("a parameter (unit 'kg')",)


def test_other_orders_and_unselected_ones_are_left_out() -> None:
    drafts = bundle(
        {
            "resourceType": "MedicationRequest",
            "id": "pain",
            "medicationCodeableConcept": {"text": "invented"},
        },
        {"resourceType": "ServiceRequest", "id": "xray", "code": {"text": "invented imaging"}},
        device_request("a", "venturi-mask", ("3150-0", quantity(35, "%"))),
        device_request("b", "venturi-mask", ("3150-0", quantity(60, "%"))),
    )
    assert [o.reference for o in read_orders(drafts)] == ["DeviceRequest/a", "DeviceRequest/b"]
    assert [o.reference for o in read_orders(drafts, ("DeviceRequest/b",))] == ["DeviceRequest/b"]
    assert read_orders(drafts, ()) == []


def test_a_set_fio2_device_without_its_fio2_has_none() -> None:
    (order,) = read_orders(
        bundle(device_request("h", "high-flow-nasal", ("3151-8", quantity(40, "L/min"))))
    )
    assert order.fio2 is None and order.flow_l_min == 40.0
