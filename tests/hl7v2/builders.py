"""Small builders for invented ORU^R01 messages (no real people: placeholder PID, test
processing id T, invented applications and order numbers)."""

from __future__ import annotations

from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
FIXTURES = ROOT / "fixtures" / "hl7v2"
WHEN = "20260105100000+0100"
MMHG = "mm[Hg]^mmHg^UCUM"
KPA = "kPa^kPa^UCUM"
PERCENT = "%^percent^UCUM"


def msh(
    control: str = "MSG-0001",
    *,
    kind: str = "ORU^R01^ORU_R01",
    version: str = "2.5.1",
    processing: str = "T",
    time: str = "20260105101500+0100",
) -> str:
    return (
        f"MSH|^~\\&|INVENTED-LAB|INVENTED-SITE|OXYRULE|INVENTED-SITE|{time}||{kind}|{control}"
        f"|{processing}|{version}"
    )


def pid(identifier: str = "TEST-0001", born: str = "19610412", sex: str = "F") -> str:
    return f"PID|1||{identifier}^^^INVENTED^MR||INVENTED^PATIENT||{born}|{sex}"


def obr(
    n: int = 1,
    when: str = WHEN,
    *,
    specimen: str = "",
    service: str = "24336-0^Gas panel - Arterial blood^LN",
) -> str:
    fields = [str(n), f"ORD-{n:04d}", f"LAB-{n:04d}", service, "", "", when]
    fields += [""] * 7 + [specimen]
    return "OBR|" + "|".join(fields).rstrip("|")


def obx(
    n: int,
    code: str,
    value: str,
    unit: str = MMHG,
    *,
    value_type: str = "NM",
    status: str = "F",
    when: str = WHEN,
    system: str = "LN",
    sub_id: str = "",
) -> str:
    identifier = f"{code}^^{system}" if system else code
    fields = [str(n), value_type, identifier, sub_id, value, unit, "", "", "", "", status]
    fields += ["", "", when]
    return "OBX|" + "|".join(fields).rstrip("|")


def spm(code: str = "BLDA", system: str = "HL70487") -> str:
    return f"SPM|1|||{code}^^{system}"


def message(*segments: str, header: str | None = None, patient: str | None = None) -> str:
    """A message: MSH (default), PID (default), then the given segments, CR-separated."""
    head = [header or msh(), pid() if patient is None else patient]
    return "\r".join([s for s in head if s] + list(segments)) + "\r"


def gas(*extra: str, pao2: str = "62", paco2: str = "65") -> str:
    """A minimal arterial gas order with room-air FiO2, and any extra segments after it."""
    return message(
        obr(),
        obx(1, "2703-7", pao2),
        obx(2, "2019-8", paco2),
        obx(3, "3150-0", "21", PERCENT),
        *extra,
    )


def fixture(name: str) -> str:
    """A v2 fixture's text (segments end with CR, as HL7 v2 says)."""
    return (FIXTURES / name).read_text(encoding="utf-8")


def nte_padding(size: int) -> str:
    """An NTE segment of about ``size`` characters of invented comment text (FT), to make a
    message large without touching what the service reads."""
    return "NTE|1||" + ("invented comment text " * (size // 22 + 1))[:size]
