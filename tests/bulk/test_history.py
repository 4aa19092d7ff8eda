"""Long invented stays: each gas through bulk equals ``oxyrule assess`` on the history at it.

The fixtures are single moments; a Bulk Data export holds days and years. Here invented stays of
three days (values on a five-minute grid, so that values tie and fall exactly on the edges of
the service's windows: 5 and 30 minutes, 4 and 24 hours) go through ``oxyrule bulk``, and every
gas is compared with the service assessing the patient's whole history at that gas
(``tests/bulk/history.py``, which states the promise of ``service/bulk/episodes.py`` literally):

* in process, everything the assessment holds: the pattern, the grades with their rationales,
  every finding with its severity and message (in any order), the values paired with each gas
  (by the Observation they came from), the values reported outside their window, the response
  to oxygen, the index gas's facts;
* through the real ``oxyrule assess`` command, the result rows the job wrote.

The episodes are a small part of the history (checked), so this compares the cut with the whole.
All values are invented.
"""

from __future__ import annotations

import json
import random
from collections import Counter
from collections.abc import Callable, Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest

from service.assess.result import Assessment
from service.bulk.episodes import EpisodeWindows, cut_episodes, patient_data, read_limits
from service.bulk.job import JobReport
from service.bulk.pseudonym import Pseudonymiser
from service.bulk.records import Record
from service.config import Settings
from service.fhir.extract import read_bundle
from service.intake.limits import ReadLimits
from service.runtime import Runtime
from service.terminology import codes
from tests.bulk.conftest import read_table
from tests.bulk.fixture_export import export_fixtures
from tests.bulk.history import classify, gas_times, history_at
from tests.bulk.test_equivalence import _row_verdict, assess_cli
from tests.titration_reference import arterial, ph2o_37_mmhg

SEEDS = (1, 2, 3, 4, 5)
START = datetime(2026, 5, 4, 0, 0, tzinfo=UTC)
GRID = timedelta(minutes=5)
DAYS = 3
NOW = datetime(2027, 1, 1, tzinfo=UTC)
PH2O_MMHG = ph2o_37_mmhg()
WIDE = ReadLimits(max_entries=100_000, max_issues=100)  # the history is read whole in process


def _when(rng: random.Random, *, days: float = DAYS) -> datetime:
    return START + GRID * rng.randrange(int(days * 24 * 12))


class _Stay:
    """One invented patient's resources, in the order an export would hold them."""

    def __init__(self, seed: int) -> None:
        self.rng = random.Random(seed)
        self.seed = seed
        self.count = 0
        self.lung = (self.rng.uniform(0.03, 0.25), self.rng.uniform(0.0, 60.0))
        self.resources: list[dict[str, Any]] = [
            {
                "resourceType": "Patient",
                "id": "pt",
                "birthDate": f"{self.rng.randint(1940, 2000)}-06-15",
            }
        ]
        altitude = self.rng.choice((45.0, 1800.0, 3600.0))
        self.resources.append(
            {
                "resourceType": "Location",
                "id": "place",
                "name": "Invented ward",
                "position": {"longitude": 0.0, "latitude": 0.0, "altitude": altitude},
            }
        )
        self.resources.append(
            {
                "resourceType": "Encounter",
                "id": "visit",
                "status": "finished",
                "subject": {"reference": "Patient/pt"},
                "location": [{"location": {"reference": "Location/place"}}],
            }
        )

    def obs(
        self,
        when: datetime | None,
        code: str,
        value: float | None = None,
        unit: str = "%",
        *,
        system: str = codes.LOINC,
        coded: tuple[str, str] | None = None,
        status: str = "final",
        components: tuple[tuple[str, float, str], ...] = (),
    ) -> None:
        self.count += 1
        r: dict[str, Any] = {
            "resourceType": "Observation",
            "id": f"o{self.count}-{code}",
            "status": status,
            "code": {"coding": [{"system": system, "code": code}]},
            "subject": {"reference": "Patient/pt"},
            "encounter": {"reference": "Encounter/visit"},
        }
        if when is not None:
            r["effectiveDateTime"] = when.strftime("%Y-%m-%dT%H:%M:%SZ")
        if coded is not None:
            r["valueCodeableConcept"] = {"coding": [{"system": coded[0], "code": coded[1]}]}
        elif value is not None:
            r["valueQuantity"] = {"value": value, "system": codes.UCUM, "code": unit}
        if components:
            r["component"] = [
                {
                    "code": {"coding": [{"system": codes.LOINC, "code": c}]},
                    "valueQuantity": {"value": v, "system": codes.UCUM, "code": u},
                }
                for c, v, u in components
            ]
        self.resources.append(r)


def invented_stay(seed: int) -> list[dict[str, Any]]:
    """Three invented days of one patient: gases on changing oxygen and their context, oxygen
    titrations; then a few moments the titration must be followed into."""
    s = _Stay(seed)
    gases = _gases(s)
    _oxygen(s, gases)
    _context(s)
    _other_blood(s, gases)
    _patient_level(s)
    _unused(s, gases)
    _titrations(s, gases)
    _after_the_stay(s)
    return s.resources


def _gases(s: _Stay) -> list[datetime]:
    """Runs of gases (each run on changing oxygen; now and then the analyser charts the FiO2
    with the PO2), and two blood PO2s of unstated specimen."""
    rng = s.rng
    gases: list[datetime] = []
    for _ in range(rng.randint(3, 5)):
        first = _when(rng)
        gases += [first + GRID * rng.choice((0, 6, 9, 12, 36, 48)) * k for k in range(3)]
    gases = sorted(set(gases))
    for g in gases:
        fio2 = (("3150-0", rng.choice((28.0, 35.0, 50.0)), "%"),) if rng.random() < 0.3 else ()
        s.obs(g, "2703-7", rng.uniform(45, 140), "mm[Hg]", components=fio2)
        if rng.random() < 0.85:
            s.obs(g + GRID * rng.choice((0, 0, 0, 1, 2)), "2019-8", rng.uniform(32, 62), "mm[Hg]")
        if rng.random() < 0.7:
            s.obs(g, "2744-1", rng.uniform(7.32, 7.46), "[pH]")
        if rng.random() < 0.3:
            s.obs(g, "2708-6", rng.uniform(86, 98))
    for _ in range(2):  # doubtful: judged on its own
        s.obs(rng.choice(gases) + GRID * rng.choice((-3, 0, 2, 30)), "11556-8", 48, "mm[Hg]")
    return gases


def _oxygen(s: _Stay, gases: list[datetime]) -> None:
    """The setting in force, charted when it changes: before most gases (minutes to hours,
    across the 4-hour edge), after some, and at other times."""
    rng = s.rng
    times = [g - GRID * rng.choice((1, 2, 6, 12, 47, 48, 49, -2, -6)) for g in gases]
    times += [_when(rng) for _ in range(rng.randint(2, 5))]
    for when in times:
        if rng.random() < 0.2:
            continue  # not charted: an older setting stays in force, or none
        if rng.random() < 0.25:
            s.obs(when, "107117-4", coded=(codes.OXYGEN_DEVICE_CODES, "nasal-cannula"))
            s.obs(when, "3151-8", rng.choice((1, 2, 3)), "L/min")
        else:
            for _ in range(rng.choice((1, 1, 1, 2))):  # now and then charted twice at once
                s.obs(when, "3150-0", rng.choice((21, 24, 28, 35, 40, 60, 80)))


def _context(s: _Stay) -> None:
    rng = s.rng
    for when in sorted(_when(rng) for _ in range(rng.randint(15, 30))):
        for _ in range(rng.choice((1, 1, 1, 2))):  # two probes at once, now and then
            # Now and then charted with the oxygen it was read on, as one Observation.
            on = (("3150-0", rng.choice((24.0, 40.0)), "%"),) if rng.random() < 0.2 else ()
            s.obs(when, "59408-5", rng.randint(86, 99), components=on)
    for when in sorted(_when(rng) for _ in range(rng.randint(1, 4))):
        s.obs(when, "718-7", rng.uniform(8.5, 15.5), "g/dL")
    for when in sorted(_when(rng) for _ in range(rng.randint(0, 4))):
        s.obs(when, "8310-5", rng.uniform(36.2, 38.9), "Cel")
    for when in sorted(_when(rng) for _ in range(rng.randint(0, 2))):
        s.obs(when, rng.choice(("20563-3", "2614-6")), rng.uniform(0.5, 3.0))
    if rng.random() < 0.5:
        s.obs(_when(rng), "76268-2", rng.uniform(600, 760), "mm[Hg]")


def _other_blood(s: _Stay, gases: list[datetime]) -> None:
    """A venous gas and a mixed-venous saturation, now and then beside a gas."""
    rng = s.rng
    for _ in range(rng.randint(1, 3)):
        when = rng.choice(gases) + GRID * rng.choice((-7, -2, 0, 3, 6, 40))
        fio2 = (("3150-0", rng.choice((30.0, 45.0)), "%"),) if rng.random() < 0.5 else ()
        s.obs(when, "2705-2", rng.uniform(30, 45), "mm[Hg]", components=fio2)
        s.obs(when, "2021-4", rng.uniform(42, 60), "mm[Hg]")
    if rng.random() < 0.5:
        s.obs(rng.choice(gases) + GRID * rng.choice((-6, 0, 6, 7)), "19224-5", rng.uniform(55, 75))


def _patient_level(s: _Stay) -> None:
    """Lung function months before and after the stay; the residence whenever it was asked."""
    rng = s.rng
    system = codes.INPUT_CODES
    for days in rng.sample((-250, -120, -30, 20, 200), 3):
        when = START + timedelta(days=days, hours=9)
        s.obs(when, "dlco-percent-predicted", rng.uniform(35, 95), system=system)
        if rng.random() < 0.5:
            s.obs(when, "spo2-exertional-baseline", 95, system=system)
            s.obs(when, "spo2-exertional-nadir", rng.uniform(80, 93), system=system)
    # Even seeds chart both answers at once (a correction): the one written last is used.
    asked = _when(rng)
    count = 2 if s.seed % 2 == 0 else rng.randint(0, 1)
    for residence in rng.sample(("resident", "visitor"), count):
        coded = (codes.ALTITUDE_RESIDENCE_CODES, residence)
        s.obs(asked, "altitude-residence", system=system, coded=coded)


def _unused(s: _Stay, gases: list[datetime]) -> None:
    """What the reader does not use (a code it does not read, an entry made in error), and a
    value with no time."""
    rng = s.rng
    for _ in range(rng.randint(1, 4)):
        when = rng.choice(gases) + GRID * rng.choice((-6, 0, 5, 7, 100))
        s.obs(when, "8867-4", rng.randint(60, 120), "/min")  # heart rate: not read
    s.obs(rng.choice(gases), "718-7", 12.0, "g/dL", status="entered-in-error")
    if rng.random() < 0.5:
        s.obs(None, "718-7", 13.1, "g/dL")  # used only when no timed Hb qualifies


def _spo2_on(s: _Stay, fio2: float) -> float:
    """An invented SpO2 (%) on ``fio2``: the two-parameter lung of this stay (a shunt and a V/Q
    term), written out independently of the service (``tests.titration_reference``), at sea
    level with PaCO2 40 mmHg, charted to a whole percent with a reader's scatter."""
    shunt, drop = s.lung
    found = arterial(shunt=shunt, drop=drop, fio2=fio2, paco2=40.0, pb=760.0, ph2o=PH2O_MMHG)
    return float(min(100, max(60, round(100 * found.sao2 + s.rng.choice((-1, 0, 0, 1))))))


def _steps(s: _Stay, start: datetime, fio2s: list[float], step: int) -> datetime:
    """FiO2 steps charted from ``start``, ``step`` grid points apart, SpO2 read on each: at the
    change itself (not yet settled), on the settling edge and after it. The end of the last."""
    for k, fio2 in enumerate(fio2s):
        when = start + GRID * step * k
        s.obs(when, "3150-0", round(100 * fio2))
        for after in sorted(s.rng.sample(range(step), 3)):
            s.obs(when + GRID * after, "59408-5", _spo2_on(s, fio2))
    return start + GRID * step * len(fio2s)


def _titrations(s: _Stay, gases: list[datetime]) -> None:
    """Oxygen titrations within two hours: SpO2 on three or four FiO2 steps on their own, and
    steps that end at a gas of the stay (a mixed titration: the gas is a point too)."""
    rng = s.rng
    levels = [0.21, 0.24, 0.28, 0.35, 0.40, 0.50, 0.60]
    for _ in range(rng.randint(1, 3)):  # oximetry alone, anywhere in the stay
        start = _when(rng)
        _steps(s, start, sorted(rng.sample(levels, rng.choice((3, 4)))), rng.choice((4, 5, 6)))
    for g in rng.sample(gases, 2):  # ending at a gas
        fio2s = sorted(rng.sample(levels, 3), reverse=rng.random() < 0.5)
        step = rng.choice((4, 6))
        _steps(s, g - GRID * step * len(fio2s) + GRID, fio2s, step)


def _after_the_stay(s: _Stay) -> None:
    """Moments after the three days, each a day apart so that nothing else reaches them.

    Day 4: a titration by oximetry, then, hours after the last setting went out of force, SpO2
    on no known oxygen and a gas with none: the service's titration for that gas is the one of
    the morning (the latest points it can use before it). Day 5: the last FiO2 of the record
    charted, SpO2 on it three hours later, then SpO2 and a gas after it went out of force: two
    levels where a site assumes room air, with one moment of settings near them. Day 4 also
    has a later gas charted with its FiO2, just after SpO2 on no known oxygen: not in the
    history of the first gas, whose SpO2 it would otherwise place on that FiO2. Day 6: two gases
    whose FiO2 the analyser charted with the PO2 and SpO2 on each, then, hours later, a gas with
    no FiO2: its titration is on the settings of the earlier gases, nothing charted alone. One
    stay: a COHb of 9 % a week later, which leaves out every SpO2 of the record from the
    titration.
    """
    rng = s.rng
    day4 = START + timedelta(days=4, hours=1)
    done = _steps(s, day4, [0.28, 0.35, 0.50], 5)
    gas = done + timedelta(hours=4, minutes=40)
    s.obs(gas - timedelta(hours=1), "59408-5", _spo2_on(s, 0.21))
    s.obs(gas, "2703-7", rng.uniform(55, 80), "mm[Hg]")
    s.obs(gas, "2019-8", 40.0, "mm[Hg]")
    s.obs(gas + timedelta(minutes=40), "59408-5", _spo2_on(s, 0.50))
    later = (("3150-0", 50.0, "%"),)
    s.obs(gas + timedelta(minutes=60), "2703-7", rng.uniform(70, 120), "mm[Hg]", components=later)
    day5 = START + timedelta(days=5, hours=2)
    s.obs(day5, "3150-0", 35)
    s.obs(day5 + timedelta(hours=3), "59408-5", _spo2_on(s, 0.35))
    s.obs(day5 + timedelta(hours=4, minutes=20), "59408-5", _spo2_on(s, 0.21))
    s.obs(day5 + timedelta(hours=4, minutes=30), "2703-7", rng.uniform(60, 90), "mm[Hg]")
    day6 = START + timedelta(days=6, hours=3)
    for k, fio2 in enumerate((0.28, 0.40)):
        panel = day6 + timedelta(minutes=40 * k)
        on = (("3150-0", 100 * fio2, "%"),)
        s.obs(panel, "2703-7", rng.uniform(55, 110), "mm[Hg]", components=on)
        for minutes in (10, 20):
            s.obs(panel + timedelta(minutes=minutes), "59408-5", _spo2_on(s, fio2))
    alone = day6 + timedelta(hours=5, minutes=40)
    s.obs(alone - timedelta(hours=1), "59408-5", _spo2_on(s, 0.21))
    s.obs(alone, "2703-7", rng.uniform(55, 80), "mm[Hg]")
    if s.seed == 4:
        s.obs(START + timedelta(days=12), "20563-3", 9.0)


def _bundle_file(folder: Path, seed: int, resources: list[dict[str, Any]]) -> Path:
    path = folder / f"stay-{seed}.bundle.json"
    entries = [{"resource": r} for r in resources]
    bundle = {"resourceType": "Bundle", "type": "collection", "entry": entries}
    path.write_text(json.dumps(bundle), encoding="utf-8")
    return path


STAYS = {seed: invented_stay(seed) for seed in SEEDS}


@pytest.fixture(scope="module")
def export(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[int, str]]:
    """The invented stays as one Bulk Data export; the patient each stay became."""
    folder = tmp_path_factory.mktemp("stays")
    paths = {seed: _bundle_file(folder, seed, stay) for seed, stay in STAYS.items()}
    exported = export_fixtures(folder / "export", list(paths.values()))
    return folder / "export", {seed: exported.patients[p] for seed, p in paths.items()}


def _records(resources: list[dict[str, Any]]) -> list[Record]:
    return [
        Record(r["resourceType"], "Patient/pt", "Observation.ndjson", n, json.dumps(r).encode())
        for n, r in enumerate(resources, start=1)
        if r["resourceType"] != "Location"
    ]


def summary(a: Assessment) -> dict[str, Any]:
    """Everything an assessment holds that the cut could change (not the decision id, not
    where in the Bundle a finding points: the two Bundles differ in length)."""

    def pairing(g: Any) -> tuple[Any, ...]:
        paired = g.gas
        return (
            paired.anchor.source.reference if paired.anchor else None,
            sorted((q.value, m.source.reference) for q, m in paired.values.items()),
            sorted((q.value, m.source.reference) for q, m in paired.out_of_window.items()),
            sorted(q.value for q in paired.untimed),
        )

    return {
        "verdict": (a.pattern, a.hypoxaemia, a.gas_exchange, a.status),
        "mechanisms": [(m.code, m.grade, m.rationale, m.rules) for m in a.mechanisms],
        # As a multiset: the service lists the values outside their windows in the order their
        # kinds first appear in the Bundle, which the cut changes.
        "findings": sorted((f.code, f.severity, f.message, f.rule or "") for f in a.findings),
        "data_requested": a.data_requested,
        "uncertain": a.uncertain_inputs,
        "serial": dict(a.serial),
        "index": pairing(a.index),
        "gases": [pairing(g.facts) for g in a.gases],
        "facts": a.index.facts,
        "titration": titration(a),
        "trend": a.trend,
    }


def titration(a: Assessment) -> dict[str, Any] | None:
    """The response to oxygen as fitted: its points (each with the Observation it came from),
    window, fit, predictions, bounds and facts. Not the list of measurements left out: the
    service lists every SpO2 of what it is sent, years of them in a whole history."""
    t = a.titration
    if t is None:
        return None
    return {
        "points": t.series.points,
        "window": (t.series.window_start, t.series.window_end),
        "response": t.response,
        "prediction": t.prediction,
        "bounds": (t.shunt, t.vq_drop, t.effective_shunt, t.vq_drop_limit_mmhg),
        "levels": (t.fio2_levels, t.fio2_known_levels),
        "sources": sorted({source.reference for source in t.sources}),
        "facts": t.facts,
    }


@pytest.mark.parametrize("room_air", [False, True], ids=["charted-oxygen", "room-air-assumed"])
def test_every_episode_is_assessed_as_the_whole_history_at_its_gas(room_air: bool) -> None:
    settings = Settings(assume_room_air=room_air)
    runtime = Runtime.load(settings)
    windows = EpisodeWindows.of(settings, runtime.ruleset)
    span = timedelta(minutes=settings.titration_window_minutes)
    seen: Counter[str] = Counter()
    for seed, resources in STAYS.items():
        data = patient_data(
            "Patient/pt",
            _records(resources),
            concept_map=None,
            pseudonym=Pseudonymiser(),
            max_resources=10_000,
        )
        assert not data.errors, seed
        locations = {f"Location/{r['id']}": r for r in resources if r["resourceType"] == "Location"}
        classified = classify(resources)
        episodes = list(cut_episodes(data, windows=windows, locations=locations))
        assert [e.time for e in episodes] == gas_times(classified), seed
        for episode in episodes:
            whole = history_at(classified, episode.time, settings)
            cut = runtime.assess_intake(
                read_bundle(episode.bundle, limits=read_limits(5000)), now=NOW, decision_id="x"
            )
            reference = runtime.assess_intake(read_bundle(whole, limits=WIDE), now=NOW)
            assert summary(cut) == summary(reference), (seed, episode.time)
            assert len(episode.bundle["entry"]) < len(whole["entry"])  # type: ignore[arg-type]
            seen.update(_reached(cut, episode.time, span))
    # The stays reach what the cut must get right.
    assert seen["compared"] >= 80 and seen["doubtful"] >= 3, seen
    assert seen["serial"] >= 10 and seen["outside"] >= 10, seen
    assert seen["oximetry alone"] >= 5 and seen["gases and oximetry"] >= 20, seen
    assert seen["target predicted"] >= 3 and seen["trend fitted"] >= 10, seen
    if room_air:
        assert seen["room air assumed"] >= 10, seen
    else:
        assert seen["window ends before the gas"] >= 4, seen


def _reached(a: Assessment, t: datetime, span: timedelta) -> Iterator[str]:
    """What one assessment shows of the cases the cut must get right."""
    yield "compared"
    if not a.gases:
        yield "doubtful"
    if a.serial:
        yield "serial"
    if any(f.code == "value-outside-window" for f in a.findings):
        yield "outside"
    t9n = a.titration
    if t9n is not None:
        gas = any(p.pao2_mmhg is not None for p in t9n.series.points)
        yield "gases and oximetry" if gas else "oximetry alone"
        if any(f.code.startswith("fio2-for-") for f in a.findings):
            yield "target predicted"
        end = t9n.series.window_end
        if end is not None and end < t - span:
            yield "window ends before the gas"
        if any(p.inspired.source.value == "site-setting" for p in t9n.series.points):
            yield "room air assumed"
    if a.trend is not None and any(
        m.measure in ("shunt", "vq_drop") and m.series for m in a.trend.measures
    ):
        yield "trend fitted"


def test_the_rows_equal_oxyrule_assess_on_the_history_at_each_gas(
    export: tuple[Path, dict[int, str]],
    local_run: Callable[[Path, int], tuple[Path, JobReport]],
) -> None:
    folder, patients = export
    out, _ = local_run(folder, 1)
    rows = read_table(out / "results")
    settings = Settings()
    cases: list[tuple[dict[str, Any], dict[str, Any]]] = []
    for seed, resources in STAYS.items():
        patient = patients[seed]
        classified = classify(resources)
        for row in sorted((r for r in rows if r["patient"] == patient), key=lambda r: r["time"]):
            cases.append((row, history_at(classified, row["time"], settings)))
    assert len(cases) >= 40
    verdicts = assess_cli([bundle for _, bundle in cases])
    for (row, _), verdict in zip(cases, verdicts, strict=True):
        assert _row_verdict(row) == verdict, (row["patient"], row["time"])
