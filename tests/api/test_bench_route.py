"""The bench's HTTP side: on by default, off by a setting, never public, strict about what it
is sent, and every what-if assessed by the service itself."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

from tests.api.conftest import ALTITUDE, ROOT, AppFactory, TestClient

DEMO = ROOT / "fixtures" / "demo"
CASE = DEMO / "post-operative-drowsiness.bundle.json"


def test_the_bench_is_on_by_default_and_off_by_the_setting(make_app: AppFactory) -> None:
    with TestClient(make_app()) as client:
        page = client.get("/bench")
        assert page.status_code == 200
        assert '<script type="module" src="/bench/static/bench.js">' in page.text
        policy = page.headers["content-security-policy"]
        assert "default-src 'none'" in policy and "script-src 'self'" in policy
        assert "connect-src 'self'" in policy
        assert (
            client.get("/bench/static/bench.js")
            .headers["content-type"]
            .startswith("text/javascript")
        )
        assert client.get("/bench/static/secrets.txt").status_code == 404
    with TestClient(make_app(bench=False)) as client:
        for path in ("/bench", "/bench/static/bench.js", "/bench/api/info"):
            assert client.get(path).status_code == 404, path
        assert client.post("/bench/api/assess", json={"input": "{}"}).status_code in (404, 405)


def test_the_page_fetches_nothing_from_elsewhere() -> None:
    static = ROOT / "service" / "api" / "bench_static"
    for name in ("bench.html", "bench.js", "bench.css"):
        # The SVG namespace is a name, not an address: nothing is fetched from it.
        text = (static / name).read_text().replace('"http://www.w3.org/2000/svg"', "")
        assert "http://" not in text and "https://" not in text and "//cdn" not in text, name
        assert "@import" not in text and "url(" not in text, name


def test_a_what_if_is_assessed_by_the_service(client: TestClient) -> None:
    body = {"input": CASE.read_text(), "what_if": {"paco2_mmhg": 40}}
    view = client.post("/bench/api/assess", json=body).json()
    grades = {m["code"]: m["grade"] for m in view["verdict"]["mechanisms"]}
    assert grades["hypoventilation"] == "unlikely"
    assert view["what_if"]["changed"] is True
    paco2 = next(f for f in view["what_if"]["fields"] if f["key"] == "paco2_mmhg")
    assert (paco2["sent"], paco2["value"]) == (65.0, 40.0)
    # The same answer as the assess operation for the same changed case: one engine.
    plain = client.post("/bench/api/assess", json={"input": CASE.read_text()}).json()
    assert {m["code"]: m["grade"] for m in plain["verdict"]["mechanisms"]}["hypoventilation"] == (
        "likely"
    )


def test_a_what_if_in_kpa_is_read_in_kpa(client: TestClient) -> None:
    body = {"input": CASE.read_text(), "units": "kPa", "what_if": {"paco2_mmhg": 5.33}}
    view = client.post("/bench/api/assess", json=body).json()
    paco2 = next(f for f in view["what_if"]["fields"] if f["key"] == "paco2_mmhg")
    assert paco2["unit"] == "kPa" and abs(paco2["value"] - 5.33) < 0.01


def test_bad_requests_are_located_refusals(client: TestClient) -> None:
    not_json = client.post(
        "/bench/api/assess", content=b"{", headers={"Content-Type": "application/json"}
    )
    assert not_json.status_code == 400
    assert not_json.json()["resourceType"] == "OperationOutcome"
    missing = client.post("/bench/api/assess", json={"what_if": {}})
    assert missing.status_code == 400 and "input" in missing.text
    far = client.post("/bench/api/assess", json={"input": CASE.read_text(), "what_if": {"fio2": 3}})
    assert far.status_code == 422 and "what_if.fio2: outside" in far.text
    both = client.post(
        "/bench/api/assess",
        json={
            "input": CASE.read_text(),
            "what_if": {"altitude_m": 100, "barometric_pressure_mmhg": 700},
        },
    )
    assert both.status_code == 422 and "not both" in both.text
    rejected = client.post("/bench/api/assess", json={"input": '{"resourceType": "Patient"}'})
    assert rejected.status_code == 422
    assert client.get("/bench/api/fixture", params={"name": "../../etc/passwd"}).status_code == 422


def test_an_hl7_v2_message_is_read_by_the_service(client: TestClient) -> None:
    message = (ROOT / "fixtures" / "hl7v2" / "altitude-visitor.hl7").read_text()
    view = client.post("/bench/api/assess", json={"input": message}).json()
    assert view["kind"] == "hl7v2"
    fhir = client.post("/bench/api/assess", json={"input": ALTITUDE.read_text()}).json()
    assert view["verdict"]["pattern"] == fhir["verdict"]["pattern"]


def test_the_fixture_panel_shows_what_differed(make_app: AppFactory, tmp_path: Path) -> None:
    folder = tmp_path / "fixtures"
    folder.mkdir()
    shutil.copy(CASE, folder / "good.bundle.json")
    shutil.copy(DEMO / "post-operative-drowsiness.expected.yaml", folder / "good.expected.yaml")
    text = (DEMO / "post-operative-drowsiness.expected.yaml").read_text()
    shutil.copy(CASE, folder / "bad.bundle.json")
    (folder / "bad.expected.yaml").write_text(
        text.replace("hypoventilation: likely", "hypoventilation: unlikely")
    )
    with TestClient(make_app(fixtures_dir=folder)) as client:
        run = client.get("/bench/api/fixtures").json()
    assert run["summary"] == "1 passed, 1 failed"
    bad = next(c for c in run["cases"] if c["name"] == "bad")
    assert bad["status"] == "failed"
    assert {"what": "mechanism hypoventilation", "expected": "unlikely", "got": "likely",
            "unit": ""} in bad["mismatches"]  # fmt: skip


def test_a_saved_fixture_is_the_case_as_read_and_passes(client: TestClient, tmp_path: Path) -> None:
    from service.runtime import Runtime
    from service.workbench.expectations import find_cases
    from service.workbench.runner import run_cases

    body = {"input": ALTITUDE.read_text(), "name": "Saved Case!", "description": "Invented."}
    made = client.post("/bench/api/fixture", json=body).json()
    for f in made["files"]:
        (tmp_path / f["name"]).write_text(f["text"])
    bundle = json.loads((tmp_path / "saved-case.bundle.json").read_text())
    text = json.dumps(bundle)
    assert "demo-altitude" not in text  # no original id travels
    (result,) = run_cases(find_cases([tmp_path]), Runtime.load())
    assert result.passed, result.mismatches
