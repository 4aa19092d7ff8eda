"""The rule directory disappears or is corrupted while the service runs; SIGHUP reloads.

The loaded rule set keeps serving whatever happens to its files. A reload (``SIGHUP``, or
``reload_runtime`` directly) loads the directory again: a broken or missing one is refused with
an error log naming the problem and the old rule set goes on serving; a good one replaces the
old in one step, and the new identity is logged, served by ``/readyz``, the CapabilityStatement,
the metrics and every result.
"""

from __future__ import annotations

import asyncio
import json
import shutil
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import httpx
import pytest
from fastapi import FastAPI

from service.api import create_app
from service.api.reload import reload_runtime
from service.api.state import ServiceState
from service.config import ServerSettings, Settings
from service.runtime import Runtime
from service.workbench.lint import RuleSetRefused
from service.workbench.lock import write_lock
from tests.api.conftest import ALTITUDE, ASSESS, FHIR_JSON, ROOT, TestClient
from tests.api.test_serve import environment, free_port, wait_ready


def rules_copy(tmp_path: Path) -> Path:
    rules = tmp_path / "rules"
    shutil.copytree(ROOT / "rules", rules)
    return rules


def bump_version(rules: Path, version: str) -> None:
    """A reviewed change: a new version, recorded in the lock (`oxyrule lint --update-lock`)."""
    path = rules / "ruleset.yaml"
    text = path.read_text()
    current = next(line for line in text.splitlines() if line.startswith("version:"))
    path.write_text(text.replace(current, f"version: {version}", 1))
    write_lock(rules, Runtime.load(Settings(rules_dir=rules)).ruleset)


def ruleset_of(result: dict[str, object]) -> str:
    text = json.dumps(result)
    found = text.split("oxyrule-default|", 1)[1].split('"', 1)[0]
    return "oxyrule-default|" + found.split("#", 1)[0]  # without the content hash


def assess(client: TestClient) -> httpx.Response:
    response: httpx.Response = client.post(ASSESS, content=ALTITUDE.read_bytes(), headers=FHIR_JSON)
    return response


def reload(app: FastAPI) -> bool:
    service: ServiceState = app.state.service
    return asyncio.run(reload_runtime(service))


def error_lines(log: str) -> list[dict[str, object]]:
    lines = [json.loads(line) for line in log.splitlines() if line.startswith("{")]
    return [line for line in lines if line["level"] == "error"]


def test_the_loaded_rule_set_serves_on_when_its_directory_disappears(
    tmp_path: Path, logged: Callable[[], str]
) -> None:
    rules = rules_copy(tmp_path)
    app = create_app(Settings(rules_dir=rules), ServerSettings())
    with TestClient(app) as client:
        before = assess(client)
        shutil.rmtree(rules)
        assert assess(client).status_code == 200
        assert reload(app) is False  # nothing to load: refused, the old one kept
        after = assess(client)
        assert after.status_code == 200
        assert ruleset_of(after.json()) == ruleset_of(before.json())
        assert client.get("/readyz").status_code == 200
    (refusal,) = error_lines(logged())
    assert refusal["message"] == "rule set reload refused; still serving the loaded rule set"
    assert str(rules) in str(refusal["problem"])
    assert str(refusal["ruleset"]).startswith("oxyrule-default|")


def first_mechanism(rules: Path) -> Path:
    return sorted((rules / "mechanism").glob("*.yaml"))[0]


@pytest.mark.parametrize(
    ("damage", "named"),
    [
        (lambda r: first_mechanism(r).write_text("rule: [unclosed"), "mechanism"),
        (lambda r: first_mechanism(r).write_bytes(b"\xff\xfe\x00 not yaml \x00"), "mechanism"),
        (
            lambda r: first_mechanism(r).write_text(
                first_mechanism(r).read_text().replace("version:", "versoin:", 1)
            ),
            "mechanism",
        ),
        (lambda r: (r / "ruleset.yaml").unlink(), "ruleset.yaml"),
    ],
    ids=["unclosed-yaml", "binary-garbage", "misspelt-key", "manifest-removed"],
)
def test_a_corrupted_rule_set_is_refused_by_a_reload_and_the_old_one_kept(
    tmp_path: Path,
    logged: Callable[[], str],
    damage: Callable[[Path], object],
    named: str,
) -> None:
    rules = rules_copy(tmp_path)
    app = create_app(Settings(rules_dir=rules), ServerSettings())
    with TestClient(app) as client:
        identity = client.get("/readyz").json()["ruleset"]
        damage(rules)
        assert reload(app) is False
        assert client.get("/readyz").json()["ruleset"] == identity
        assert assess(client).status_code == 200
    (refusal,) = error_lines(logged())
    assert named in str(refusal["problem"]), refusal


def test_a_good_reload_swaps_the_rule_set_everywhere_at_once(
    tmp_path: Path, logged: Callable[[], str]
) -> None:
    rules = rules_copy(tmp_path)
    app = create_app(Settings(rules_dir=rules), ServerSettings())
    with TestClient(app) as client:
        old = client.get("/readyz").json()["ruleset"]
        bump_version(rules, "9.9.9-reloaded")
        assert reload(app) is True
        assert client.get("/readyz").json()["ruleset"] == "oxyrule-default|9.9.9-reloaded"
        assert ruleset_of(assess(client).json()) == "oxyrule-default|9.9.9-reloaded"
        capability = client.get("/fhir/metadata").json()
        assert "9.9.9-reloaded" in capability["implementation"]["description"] or (
            "9.9.9-reloaded" in json.dumps(capability)
        )
        text = client.get("/metrics").text
        assert 'version="9.9.9-reloaded"' in text
        assert text.count("oxyrule_ruleset_info{") == 1  # the old identity is gone
    lines = [json.loads(line) for line in logged().splitlines() if line.startswith("{")]
    (done,) = [line for line in lines if line["message"] == "rule set reloaded"]
    assert str(done["ruleset"]).startswith("oxyrule-default|9.9.9-reloaded ")
    assert str(done["previous"]).startswith(old + " ")


def test_sighup_reloads_a_running_server_and_refuses_a_broken_set(tmp_path: Path) -> None:
    rules = rules_copy(tmp_path)
    port = free_port()
    log = tmp_path / "stderr.log"
    with log.open("wb") as stderr:
        process = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(port)],
            cwd=ROOT,
            env=environment(OXYRULE_RULES_DIR=str(rules)),
            stdout=subprocess.DEVNULL,
            stderr=stderr,
        )
        try:
            wait_ready(port, process)
            url = f"http://127.0.0.1:{port}"
            identity = httpx.get(f"{url}/readyz").json()["ruleset"]
            broken = sorted((rules / "mechanism").glob("*.yaml"))[0]
            original = broken.read_text()
            broken.write_text("rule: [unclosed")
            process.send_signal(signal.SIGHUP)
            wait_for_line(log, "rule set reload refused")
            assert httpx.get(f"{url}/readyz").json()["ruleset"] == identity
            ok = httpx.post(f"{url}{ASSESS}", content=ALTITUDE.read_bytes(), headers=FHIR_JSON)
            assert ok.status_code == 200
            broken.write_text(original)
            broken.unlink()  # a set that loads but that lint refuses: a rule file gone
            process.send_signal(signal.SIGHUP)
            wait_for_line(log, "its file is gone")
            assert httpx.get(f"{url}/readyz").json()["ruleset"] == identity
            broken.write_text(original)
            bump_version(rules, "9.9.10-hup")
            process.send_signal(signal.SIGHUP)
            wait_for_line(log, '"rule set reloaded"')
            assert httpx.get(f"{url}/readyz").json()["ruleset"] == "oxyrule-default|9.9.10-hup"
        finally:
            process.terminate()
            process.wait(20)
    text = log.read_text()
    refused = next(json.loads(x) for x in text.splitlines() if "reload refused" in x)
    assert broken.name in refused["problem"] and refused["level"] == "error"
    assert "Traceback" not in text
    assert process.returncode == 0


def wait_for_line(log: Path, words: str, seconds: float = 20) -> None:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if words in log.read_text():
            return
        time.sleep(0.05)
    raise AssertionError(f"no {words!r} in the log:\n{log.read_text()[-2000:]}")


def deleted_rule(rules: Path) -> None:
    sorted((rules / "mechanism").glob("*.yaml"))[0].unlink()


def all_rules_deleted(rules: Path) -> None:
    for path in rules.rglob("*.yaml"):
        if path.name != "ruleset.yaml":
            path.unlink()


def edited_without_review(rules: Path) -> None:
    path = sorted((rules / "mechanism").glob("*.yaml"))[0]
    path.write_text(path.read_text().replace("title:", "title: (edited)", 1))


@pytest.mark.parametrize(
    ("damage", "named"),
    [
        (deleted_rule, "its file is gone"),
        (all_rules_deleted, "its file is gone"),
        (edited_without_review, "content changed but version is still"),
        (lambda r: (r / "ruleset.lock").unlink(), "no lock file"),
    ],
    ids=["one-rule-file-deleted", "every-rule-file-deleted", "edited-not-reviewed", "no-lock"],
)
def test_a_rule_set_that_lint_rejects_is_refused_at_start_and_at_reload(
    tmp_path: Path,
    logged: Callable[[], str],
    damage: Callable[[Path], object],
    named: str,
) -> None:
    # Each of these loaded and served before: with every rule file gone the service answered
    # every mechanism not-assessable, GuidanceResponse success, under the old identity.
    rules = rules_copy(tmp_path)
    app = create_app(Settings(rules_dir=rules), ServerSettings())
    with TestClient(app) as client:
        ready = client.get("/readyz").json()
        damage(rules)
        assert reload(app) is False
        assert client.get("/readyz").json() == ready  # identity and content hash unchanged
        assert assess(client).status_code == 200
    (refusal,) = error_lines(logged())
    assert "fails `oxyrule lint`" in str(refusal["problem"]) and named in str(refusal["problem"])
    with pytest.raises(RuleSetRefused, match=named):
        create_app(Settings(rules_dir=rules), ServerSettings())


def test_readyz_names_the_content_hash_of_what_was_loaded(tmp_path: Path) -> None:
    rules = rules_copy(tmp_path)
    app = create_app(Settings(rules_dir=rules), ServerSettings())
    with TestClient(app) as client:
        before = client.get("/readyz").json()
        assert before["ruleset_hash"] == app.state.service.runtime.ruleset.content_hash
        bump_version(rules, "9.9.11-hash")
        assert reload(app) is True
        after = client.get("/readyz").json()
    assert len(after["ruleset_hash"]) == 64 and after["ruleset_hash"] != before["ruleset_hash"]
