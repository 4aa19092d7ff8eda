"""An invented FHIR Bulk Data export (``oxyrule bulk synth N OUT_DIR``), for tests, benchmarks
and the demo. No real person, place or brand: every patient, ward and value is made up here.

Each invented patient has a scenario that fixes how their gases behave. They have one to three
stays at invented locations over a year, and one to four gases per stay, the first on air and
the later ones on oxygen, each with its context: the device and FiO2 charted when set (the
setting in force), SpO2, Hb, temperature most times, PEEP when ventilated. What rule set 2.0
makes of each (``tests/bulk/test_synth.py`` checks that the export shows all of it):

* ``no-hypoxaemia``: a normal gradient for age; ``no-hypoxaemia``.
* ``hypoventilation``: acute hypercapnia with a normal gradient; hypoventilation the ``single``
  cause, oxygen masking the hypercapnia on the later gases.
* ``chronic-hypercapnia``: compensated hypercapnia and a widened gradient, on controlled
  oxygen; hypoventilation likely, often ``mixed`` with a gas-exchange defect, V/Q likely when
  the response to oxygen shows it.
* ``vq-mismatch``: a gradient that widens on oxygen while the venous admixture falls (low V/Q
  units); ``indeterminate`` on air alone, V/Q likely (``single``) once a gas on oxygen within the
  oxygen-response window shows the admixture falling.
* ``shunt``: ventilated on a high FiO2 that barely raises the PaO2; shunt the ``single`` cause.
* ``altitude``: at a clinic 2,400 m up, residents (a lower PaCO2, compensated) and visitors;
  the residence is sent for two in three, so the others have a deficit partition for each
  residence; low inspired oxygen the ``single`` cause, normal for altitude.
* ``diffusion``: a low DLCO and desaturation on a walk test at a lung-function visit in the
  months before each stay (within the lung-function window); diffusion limitation likely.
* ``data-problem``: no FiO2 (``indeterminate``), a venous-looking sample or an impossible pH
  (``not-classifiable``).

Values come from the physiology core (alveolar gas equation, Severinghaus saturation curve,
Henderson–Hasselbalch through [H+] = 24 × PaCO2 / HCO3), so gases are internally consistent.
Some lines are bad on purpose, as real exports have them: truncated JSON, a misspelt resource
type, an Observation with no subject, a unit the quantity cannot take, a duplicated Patient, a
file of a type the job does not read, and a manifest entry whose file is missing.

The same seed and N give the same files, byte for byte. Files are written as they are built
(``OBSERVATIONS_PER_FILE`` lines each, every other one gzip-compressed), never held whole.
"""

from __future__ import annotations

import gzip
import random
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any, BinaryIO, cast

import orjson

from service.fhir import codes as fhir_codes
from service.physiology import acid_base, gas_exchange, saturation
from service.physiology.atmosphere import barometric_pressure_mmhg
from service.terminology import codes

OBSERVATIONS_PER_FILE = 50_000
START = datetime(2026, 1, 1, tzinfo=UTC)
DAYS = 365
_TAG = {"tag": [{"system": fhir_codes.TEST_DATA_TAG_SYSTEM, "code": fhir_codes.TEST_DATA_TAG_CODE}]}

# Invented places: (id, name, altitude in metres).
LOCATIONS: tuple[tuple[str, str, float], ...] = (
    ("ward-emergency", "Emergency unit (invented)", 45.0),
    ("ward-respiratory", "Respiratory ward (invented)", 45.0),
    ("ward-medical", "Medical ward 4 (invented)", 45.0),
    ("ward-icu", "Intensive care unit (invented)", 45.0),
    ("ward-recovery", "Post-anaesthesia recovery (invented)", 45.0),
    ("clinic-highland", "Highland clinic (invented)", 2400.0),
)
SCENARIOS: tuple[tuple[str, float], ...] = (
    ("no-hypoxaemia", 0.16),
    ("hypoventilation", 0.12),
    ("chronic-hypercapnia", 0.14),
    ("vq-mismatch", 0.18),
    ("shunt", 0.12),
    ("altitude", 0.08),
    ("diffusion", 0.08),
    ("data-problem", 0.12),
)


@dataclass(slots=True)
class Written:
    """What was written."""

    patients: int = 0
    observations: int = 0
    gases: int = 0
    bad_lines: int = 0
    files: int = 0


@dataclass(slots=True)
class _Files:
    """NDJSON files written line by line; Observations rotate over numbered files."""

    folder: Path
    written: Written
    streams: dict[str, BinaryIO] = field(default_factory=dict)
    names: dict[str, str] = field(default_factory=dict)  # stream key -> file name
    types: dict[str, str] = field(default_factory=dict)  # file name -> resource type
    observation_lines: int = 0
    observation_file: int = -1

    def write(self, kind: str, line: bytes) -> None:
        key = kind
        if kind == "Observation":
            if self.observation_lines % OBSERVATIONS_PER_FILE == 0:
                self.observation_file += 1
                if "Observation" in self.streams:
                    self.streams.pop("Observation").close()
            self.observation_lines += 1
            number = self.observation_file
            name = f"Observation.{number:03d}.ndjson" + (".gz" if number % 2 else "")
        else:
            name = f"{kind}.ndjson"
        stream = self.streams.get(key)
        if stream is None:
            path = self.folder / name
            # mtime=0: the same seed gives the same compressed bytes.
            opened = cast(
                BinaryIO,
                gzip.GzipFile(filename=path, mode="wb", mtime=0)
                if name.endswith(".gz")
                else path.open("wb"),
            )
            stream = self.streams[key] = opened
            self.types[name] = kind
            self.written.files += 1
        stream.write(line + b"\n")

    def close(self) -> None:
        for stream in self.streams.values():
            stream.close()


def _quantity(value: float, unit: str, code: str) -> dict[str, object]:
    return {"value": value, "unit": unit, "system": codes.UCUM, "code": code}


class _Patient:
    """One invented patient's resources, written as they are made."""

    def __init__(self, number: int, rng: random.Random, files: _Files) -> None:
        self.rng = rng
        self.files = files
        self.id = f"syn-{number:06d}"
        self.ref = f"Patient/{self.id}"
        self.count = 0
        self.age = rng.randint(19, 90)
        self.scenario = rng.choices([s for s, _ in SCENARIOS], [w for _, w in SCENARIOS])[0]
        self.problem = rng.choice(("no-fio2", "venous-looking", "impossible-ph"))
        # At the high-altitude clinic: lives there or came up; said in two cases out of three.
        self.residence = rng.choice(("resident", "visitor"))
        self.residence_sent = rng.random() < 2 / 3

    def emit(self, kind: str, resource: Mapping[str, object]) -> None:
        self.files.write(kind, orjson.dumps(resource))
        if kind == "Observation":
            self.files.written.observations += 1

    def observation(
        self,
        when: datetime,
        system: str,
        code: str,
        value: Mapping[str, object],
        encounter: str | None,
        *,
        key: str = "valueQuantity",
    ) -> dict[str, object]:
        self.count += 1
        resource: dict[str, object] = {
            "resourceType": "Observation",
            "id": f"{self.id}-o{self.count}",
            "meta": _TAG,
            "status": "final",
            "code": {"coding": [{"system": system, "code": code}]},
            "subject": {"reference": self.ref},
            "effectiveDateTime": when.strftime("%Y-%m-%dT%H:%M:%SZ"),
            key: value,
        }
        if encounter is not None:
            resource["encounter"] = {"reference": encounter}
        return resource

    def loinc(
        self, when: datetime, code: str, value: float, unit: str, ucum: str, encounter: str | None
    ) -> None:
        quantity = _quantity(round(value, 2), unit, ucum)
        self.emit("Observation", self.observation(when, codes.LOINC, code, quantity, encounter))


def _hco3(p: _Patient) -> float:
    rng = p.rng
    if p.scenario == "chronic-hypercapnia":
        return rng.uniform(30.0, 35.0)
    if p.scenario == "altitude" and p.residence == "resident":
        return rng.uniform(20.0, 23.0)  # renal compensation of a lifelong low PaCO2
    return rng.uniform(22.5, 26.5)


def _paco2(p: _Patient) -> float:
    rng = p.rng
    if p.scenario == "altitude":
        # Residents at 2,400 m run a lower PaCO2 than visitors, who hyperventilate little
        # below about 3,000 m (the references the service uses for the expected PaCO2).
        return rng.uniform(27.0, 34.0) if p.residence == "resident" else rng.uniform(34.0, 40.0)
    return {
        "hypoventilation": rng.uniform(55.0, 72.0),
        "chronic-hypercapnia": rng.uniform(50.0, 62.0),
        "vq-mismatch": rng.uniform(32.0, 40.0),
        "diffusion": rng.uniform(33.0, 38.0),
    }.get(p.scenario, rng.uniform(36.0, 43.0))


def _pao2(scenario: str, alveolar: float, fio2: float, age: int, rng: random.Random) -> float:
    """An arterial PO2 from the alveolar PO2 with a scenario's gradient (mm[Hg])."""
    normal = 2.5 + 0.21 * age
    if scenario == "shunt":
        # A fixed admixture: oxygen barely raises PaO2.
        return rng.uniform(52.0, 68.0) + 12.0 * (fio2 - 0.6)
    gradient = {
        "vq-mismatch": rng.uniform(30.0, 50.0) * (1 + 5.0 * (fio2 - 0.21)),
        "chronic-hypercapnia": rng.uniform(18.0, 30.0) * (1 + 2.0 * (fio2 - 0.21)),
        "diffusion": rng.uniform(22.0, 35.0) * (1 + 1.5 * (fio2 - 0.21)),
    }.get(scenario, normal * rng.uniform(0.3, 0.9))
    return max(38.0, alveolar - gradient)


def write_export(folder: Path, *, patients: int, seed: int) -> Written:
    """Write an invented export of ``patients`` patients into ``folder`` (new or empty).

    Raises:
        FileExistsError: ``folder`` exists and is not empty.
    """
    if folder.exists() and any(folder.iterdir()):
        raise FileExistsError(f"{folder}: not empty; synth writes a new export")
    folder.mkdir(parents=True, exist_ok=True)
    rng = random.Random(seed)
    written = Written()
    files = _Files(folder, written)
    try:
        for loc_id, name, altitude in LOCATIONS:
            location = {
                "resourceType": "Location",
                "id": loc_id,
                "meta": _TAG,
                "name": name,
                "position": {"longitude": 0.0, "latitude": 0.0, "altitude": altitude},
            }
            files.write("Location", orjson.dumps(location))
        for number in range(1, patients + 1):
            _write_patient(_Patient(number, rng, files), number)
            written.patients += 1
        _bad_lines(rng, files)
    finally:
        files.close()
    _manifest(folder, files)
    return written


def _write_patient(p: _Patient, number: int) -> None:
    rng = p.rng
    birth = START - timedelta(days=int(p.age * 365.25) + rng.randint(0, 364))
    patient = {
        "resourceType": "Patient",
        "id": p.id,
        "meta": _TAG,
        "birthDate": birth.strftime("%Y-%m-%d"),
        "gender": rng.choice(("female", "male")),
    }
    p.emit("Patient", patient)
    if number % 997 == 0:  # an export that repeats a Patient (the first one is used)
        p.emit("Patient", patient)
        p.files.written.bad_lines += 1
    if p.scenario == "altitude" and p.residence_sent:
        when = START + timedelta(days=rng.randint(0, 60))
        residence = {"coding": [{"system": codes.ALTITUDE_RESIDENCE_CODES, "code": p.residence}]}
        resource = p.observation(
            when, codes.INPUT_CODES, "altitude-residence", residence, None,
            key="valueCodeableConcept",
        )  # fmt: skip
        p.emit("Observation", resource)
    for stay in range(rng.randint(1, 3)):
        _write_stay(p, stay)


def _lung_function(p: _Patient, when: datetime) -> None:
    """A lung-function clinic visit: DLCO low, desaturation on a walk test."""
    rng = p.rng
    for code, value in (
        ("dlco-percent-predicted", rng.uniform(32.0, 55.0)),
        ("spo2-exertional-baseline", rng.uniform(93.0, 96.0)),
        ("spo2-exertional-nadir", rng.uniform(80.0, 87.0)),
    ):
        quantity = _quantity(round(value), "%", "%")
        p.emit("Observation", p.observation(when, codes.INPUT_CODES, code, quantity, None))


def _location_for(p: _Patient) -> tuple[str, str, float]:
    rng = p.rng
    if p.scenario == "altitude":
        return LOCATIONS[5]
    if p.scenario == "shunt":
        return LOCATIONS[3]
    return rng.choice(LOCATIONS[:5])


def _write_stay(p: _Patient, stay: int) -> None:
    rng = p.rng
    loc_id, _, altitude = _location_for(p)
    start = START + timedelta(days=rng.randint(61, DAYS - 5), minutes=rng.randint(0, 1439))
    end = start + timedelta(days=rng.randint(1, 4))
    if p.scenario == "diffusion":  # seen in the lung-function clinic in the months before
        _lung_function(p, start - timedelta(days=rng.randint(7, 120), hours=rng.randint(1, 9)))
    encounter_id = f"{p.id}-e{stay + 1}"
    p.emit(
        "Encounter",
        {
            "resourceType": "Encounter",
            "id": encounter_id,
            "meta": _TAG,
            "status": "finished",
            "class": {"system": "http://terminology.hl7.org/CodeSystem/v3-ActCode", "code": "IMP"},
            "subject": {"reference": p.ref},
            "period": {"start": _stamp(start), "end": _stamp(end)},
            "location": [{"location": {"reference": f"Location/{loc_id}"}}],
        },
    )
    encounter = f"Encounter/{encounter_id}"
    pb = barometric_pressure_mmhg(altitude_m=altitude)
    when = start + timedelta(minutes=rng.randint(20, 120))
    hb = rng.uniform(9.0, 15.5)
    for gas in range(rng.randint(1, 4)):
        _write_gas(p, when, gas, pb, hb, encounter)
        when += timedelta(minutes=rng.choice((35, 45, 60, 90, 180, 360)))


def _stamp(when: datetime) -> str:
    return when.strftime("%Y-%m-%dT%H:%M:%SZ")


def _oxygen(p: _Patient, gas: int) -> tuple[float, str]:
    """(FiO2, how it is recorded) for the ``gas``-th gas of a stay."""
    rng = p.rng
    if p.scenario == "shunt":
        return rng.choice((0.6, 0.7, 0.8, 1.0)), "ventilator"
    if p.scenario in ("altitude", "no-hypoxaemia") or gas == 0:
        return 0.21, "air"
    if p.scenario in ("hypoventilation", "chronic-hypercapnia"):
        return rng.choice((0.24, 0.28)), "venturi"
    return rng.choice((0.28, 0.35, 0.4, 0.6)), "mask"


def _write_gas(p: _Patient, when: datetime, gas: int, pb: float, hb: float, encounter: str) -> None:
    rng = p.rng
    fio2, how = _oxygen(p, gas)
    paco2 = _paco2(p)
    hco3 = _hco3(p)
    alveolar = gas_exchange.alveolar_po2_mmhg(fio2=fio2, paco2_mmhg=paco2, barometric_mmhg=pb)
    pao2 = _pao2(p.scenario, alveolar, fio2, p.age, rng)
    ph = acid_base.ph_from_hydrogen_ion(
        hydrogen_ion_nmol_l=acid_base.hydrogen_ion_nmol_l(paco2_mmhg=paco2, hco3_mmol_l=hco3)
    )
    spo2 = 100 * saturation.saturation_from_po2(po2_mmhg=pao2)
    before = when - timedelta(minutes=rng.choice((5, 10, 15)))
    problem = p.problem if p.scenario == "data-problem" else None
    if problem != "no-fio2":
        _write_oxygen(p, before, fio2, how, encounter)
    if how == "ventilator":
        p.loinc(before, "20077-4", rng.choice((8, 10, 12, 14)), "cmH2O", "cm[H2O]", encounter)
    p.loinc(
        when - timedelta(minutes=2),
        "59408-5",
        min(100.0, spo2 + rng.uniform(-1, 1.5)),
        "%",
        "%",
        encounter,
    )
    p.loinc(when, "2703-7", pao2, "mmHg", "mm[Hg]", encounter)
    p.loinc(when, "2019-8", paco2, "mmHg", "mm[Hg]", encounter)
    shown_ph = 8.9 if problem == "impossible-ph" else ph
    p.loinc(when, "2744-1", shown_ph, "pH", "[pH]", encounter)
    p.loinc(when, "1960-4", hco3, "mmol/L", "mmol/L", encounter)
    p.loinc(when, "718-7", hb, "g/dL", "g/dL", encounter)
    if problem == "venous-looking":
        p.loinc(when, "2708-6", max(50.0, spo2 - 22.0), "%", "%", encounter)
    if rng.random() < 0.8:
        p.loinc(before, "8310-5", rng.uniform(36.4, 38.6), "Cel", "Cel", encounter)
    p.files.written.gases += 1


# How oxygen is recorded: the device charted with each change, then the FiO2.
DEVICES = {"air": "none-room-air", "venturi": "venturi-mask", "mask": "venturi-mask"}


def _write_oxygen(p: _Patient, when: datetime, fio2: float, how: str, encounter: str) -> None:
    """The setting charted when it is set: the device and the FiO2 (a setting stays in force
    until the next is charted)."""
    code = DEVICES.get(how, "ventilator")
    device = {"coding": [{"system": codes.OXYGEN_DEVICE_CODES, "code": code}]}
    resource = p.observation(
        when, codes.LOINC, "107117-4", device, encounter, key="valueCodeableConcept"
    )
    p.emit("Observation", resource)
    if how == "ventilator":
        p.loinc(when, "19994-3", fio2, "1", "1", encounter)
    else:
        p.loinc(when, "3150-0", 100 * fio2, "%", "%", encounter)


def _bad_lines(rng: random.Random, files: _Files) -> None:
    """A few lines of the kinds real exports carry; each lands in ``errors/``."""
    written = files.written
    count = max(2 * 4, written.observations // 400)  # every kind below at least twice
    samples: list[Callable[[int], bytes]] = [
        lambda i: b'{"resourceType":"Observation","id":"cut-%d","status":"fin' % i,
        lambda i: orjson.dumps({"resourceType": "Observaton", "id": f"typo-{i}"}),
        lambda i: orjson.dumps(
            {
                "resourceType": "Observation",
                "id": f"nosubject-{i}",
                "status": "final",
                "code": {"coding": [{"system": codes.LOINC, "code": "2703-7"}]},
                "effectiveDateTime": "2026-06-01T10:00:00Z",
                "valueQuantity": _quantity(70, "mmHg", "mm[Hg]"),
            }
        ),
        lambda i: orjson.dumps(
            {
                "resourceType": "Observation",
                "id": f"badunit-{i}",
                "status": "final",
                "code": {"coding": [{"system": codes.LOINC, "code": "2019-8"}]},
                "subject": {"reference": f"Patient/syn-{1 + i % max(1, written.patients):06d}"},
                "effectiveDateTime": "2026-06-01T10:00:00Z",
                "valueQuantity": _quantity(40, "g", "g"),
            }
        ),
    ]
    for i in range(count):
        files.write("Observation", samples[i % len(samples)](i))
        written.bad_lines += 1
    condition: dict[str, Any] = {
        "resourceType": "Condition",
        "id": "cond-1",
        "meta": _TAG,
        "subject": {"reference": "Patient/syn-000001"},
    }
    files.write("Condition", orjson.dumps(condition))


def _manifest(folder: Path, files: _Files) -> None:
    output = [{"type": kind, "url": name} for name, kind in sorted(files.types.items())]
    # A file the export server listed but the download missed: reported, not fatal.
    output.append({"type": "Observation", "url": "Observation.999.ndjson"})
    manifest = {
        "transactionTime": START.isoformat(),
        "request": "$export",
        "requiresAccessToken": False,
        "output": output,
        "error": [],
    }
    (folder / "manifest.json").write_bytes(orjson.dumps(manifest, option=orjson.OPT_INDENT_2))
