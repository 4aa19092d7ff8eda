"""``oxyrule serve`` as a real process: start-up, the README's curl line, refusals to start."""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.api.conftest import ALTITUDE, ROOT
from tests.api.privacy import leaks, marked_bodies, marked_v2_messages, v2_leaks


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port: int = sock.getsockname()[1]
        return port


def environment(**extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("OXYRULE_")}
    return env | extra


def wait_ready(port: int, process: subprocess.Popen[bytes], seconds: float = 20) -> None:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise AssertionError(f"the server exited with {process.returncode}")
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/readyz", timeout=1) as answer:
                if answer.status == 200:
                    return
        except OSError:
            time.sleep(0.1)
    raise AssertionError("the server did not become ready")


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[int, Path]]:
    """``python -m service.cli serve`` on a free loopback port; yields (port, its stderr)."""
    port = free_port()
    log = tmp_path_factory.mktemp("serve") / "stderr.log"
    with log.open("wb") as stderr:
        process = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(port)],
            stdout=subprocess.DEVNULL,
            stderr=stderr,
            env=environment(),
            cwd=ROOT,
        )
        try:
            wait_ready(port, process)
            yield port, log
        finally:
            process.terminate()
            process.wait(15)


@pytest.mark.skipif(shutil.which("curl") is None, reason="curl is not installed")
def test_the_readme_curl_line_assesses_a_fixture(server: tuple[int, Path]) -> None:
    port, _ = server
    # The README line, with the port of this test server:
    command = (
        f"curl -s -X POST 'http://127.0.0.1:{port}/fhir/$assess-hypoxaemia' "
        "-H 'Content-Type: application/fhir+json' "
        "--data-binary @fixtures/demo/altitude-visitor.bundle.json"
    )
    done = subprocess.run(command, shell=True, cwd=ROOT, capture_output=True, check=True)
    result = json.loads(done.stdout)
    assert result["resourceType"] == "Bundle"
    assert result["entry"][0]["resource"]["resourceType"] == "GuidanceResponse"


def test_the_real_server_assesses_a_fixture_and_logs_no_patient_data(
    server: tuple[int, Path],
) -> None:
    port, log = server
    url = f"http://127.0.0.1:{port}/fhir/$assess-hypoxaemia"
    request = urllib.request.Request(
        url, ALTITUDE.read_bytes(), {"Content-Type": "application/fhir+json"}, method="POST"
    )
    with urllib.request.urlopen(request, timeout=10) as answer:
        assert answer.status == 200
        assert json.loads(answer.read())["resourceType"] == "Bundle"
    for content_type, body in marked_bodies():
        request = urllib.request.Request(url, body, {"Content-Type": content_type}, method="POST")
        try:
            urllib.request.urlopen(request, timeout=10).close()
        except urllib.error.HTTPError as refused:
            assert refused.code == 422
    for message in marked_v2_messages():  # python-hl7 would log fields it cannot read
        request = urllib.request.Request(
            f"http://127.0.0.1:{port}/hl7v2",
            message,
            {"Content-Type": "application/hl7-v2"},
            method="POST",
        )
        try:
            urllib.request.urlopen(request, timeout=10).close()
        except urllib.error.HTTPError as refused:
            assert refused.code in (400, 422)
    time.sleep(0.2)
    text = log.read_text()
    lines = [json.loads(line) for line in text.splitlines()]  # every line is JSON
    assert sum(line["message"] == "request" for line in lines) >= 4
    assert leaks(text) == []
    assert v2_leaks(text) == []
    assert "Traceback" not in text


def start(*args: str, **env: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "service.cli", "serve", "--port", str(free_port()), *args],
        env=environment(**env),
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )


@pytest.mark.parametrize(
    ("args", "env", "words"),
    [
        ((), {"OXYRULE_MAX_BODY_BYTES": "-5"}, "OXYRULE_MAX_BODY_BYTES"),
        ((), {"OXYRULE_PAIRING_WINDOW_MINUTES": "soon"}, "OXYRULE_PAIRING_WINDOW_MINUTES"),
        ((), {"OXYRULE_MAX_BODY_BYTE": "100"}, "unknown setting OXYRULE_MAX_BODY_BYTE"),
        ((), {"OXYRULE_CORS_ORIGINS": "https://a.test"}, "OXYRULE_CORS_ORIGINS"),
        ((), {"OXYRULE_API_KEY_HASHES": '["secret"]'}, "OXYRULE_API_KEY_HASHES"),
        (
            (),
            {"OXYRULE_JWT_JWKS": "{nope", "OXYRULE_JWT_ISSUER": "i", "OXYRULE_JWT_AUDIENCE": "a"},
            "OXYRULE_JWT_JWKS",
        ),
        (("--workers", "0"), {}, "--workers"),
        (("--rules", "/nonexistent/rules"), {}, "rule set"),
    ],
    ids=[
        "negative-limit",
        "not-a-number",
        "unknown-variable",
        "cors-not-json",
        "plain-key",
        "jwks-not-json",
        "zero-workers",
        "missing-rules",
    ],
)
def test_a_bad_setting_stops_start_up_with_a_message_naming_it(
    args: tuple[str, ...], env: dict[str, str], words: str
) -> None:
    done = start(*args, **env)
    assert done.returncode == 1
    assert words in done.stderr
    assert done.stderr.startswith("oxyrule: cannot start:")
    assert "Traceback" not in done.stderr


def test_a_broken_rule_set_stops_start_up_naming_the_file(tmp_path: Path) -> None:
    rules = tmp_path / "rules"
    shutil.copytree(ROOT / "rules", rules)
    broken = next(rules.glob("mechanism/*.yaml"))
    broken.write_text(broken.read_text().replace("version:", "versoin:", 1))
    done = start("--rules", str(rules))
    assert done.returncode == 1
    assert broken.name in done.stderr
    assert "Traceback" not in done.stderr


def test_serve_refuses_a_rule_set_that_lint_rejects(tmp_path: Path) -> None:
    # Every rule file deleted: the set loads (a manifest is enough) but lint refuses it (the
    # lock lists rules whose files are gone). It used to start and serve it.
    rules = tmp_path / "rules"
    shutil.copytree(ROOT / "rules", rules)
    for path in rules.rglob("*.yaml"):
        if path.name != "ruleset.yaml":
            path.unlink()
    done = start("--rules", str(rules))
    assert done.returncode == 1
    assert "fails `oxyrule lint`" in done.stderr and "its file is gone" in done.stderr
    assert "Traceback" not in done.stderr


def test_serve_refuses_settings_the_descriptor_limit_cannot_hold() -> None:
    # 300 idle MLLP peers once exhausted the descriptors and HTTP failed with them: the
    # connections the settings allow must fit the process's limit (raised when it can be).
    def low_limit() -> None:
        import resource

        resource.setrlimit(resource.RLIMIT_NOFILE, (200, 200))

    done = subprocess.run(
        [sys.executable, "-m", "service.cli", "serve", "--port", str(free_port())],
        env=environment(OXYRULE_MLLP_PORT=str(free_port()), OXYRULE_MLLP_MAX_CONNECTIONS="500"),
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
        preexec_fn=low_limit,
    )
    assert done.returncode == 1
    assert "OXYRULE_MLLP_MAX_CONNECTIONS" in done.stderr and "ulimit -n" in done.stderr


def test_importing_the_cli_does_not_import_the_web_framework() -> None:
    code = (
        "import sys, service.cli; "
        "print(sorted(m for m in ('fastapi', 'starlette', 'uvicorn', 'service.api') "
        "if m in sys.modules))"
    )
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT
    )
    assert done.stdout.strip() == "[]"


def test_serve_starts_several_workers_from_the_environment() -> None:
    port = free_port()
    process = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--workers", "2"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        env=environment(OXYRULE_PORT=str(port), OXYRULE_LOG_LEVEL="warning"),
        cwd=ROOT,
    )
    try:
        wait_ready(port, process, seconds=30)
        request = urllib.request.Request(
            f"http://127.0.0.1:{port}/fhir/$assess-hypoxaemia",
            ALTITUDE.read_bytes(),
            {"Content-Type": "application/fhir+json"},
        )
        for _ in range(4):
            with urllib.request.urlopen(request, timeout=10) as answer:
                assert answer.status == 200
    finally:
        process.terminate()
        _, stderr = process.communicate(timeout=20)
    assert b"Traceback" not in stderr


def test_kubernetes_service_links_are_not_taken_for_unknown_settings() -> None:
    from service.api.server import StartupError, check_environment

    check_environment(
        {
            "OXYRULE_SERVICE_HOST": "10.0.0.7",
            "OXYRULE_SERVICE_PORT_HTTP": "80",
            "OXYRULE_PORT_80_TCP_ADDR": "10.0.0.7",
            "OXYRULE_RULES_DIR": "/etc/oxyrule/rules",
        }
    )
    with pytest.raises(StartupError, match="OXYRULE_RULE_DIR"):
        check_environment({"OXYRULE_RULE_DIR": "/etc/oxyrule/rules"})
