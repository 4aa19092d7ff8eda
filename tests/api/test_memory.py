"""The memory budget of a server worker: at most 80 MiB resident, and what it need not load.

80 MiB is the project's budget per worker (README, Performance), chosen so that a replica with
two workers fits a 256 MiB container limit with room for the bodies in flight. Of a worker's
~66 MiB today, the interpreter and FastAPI with pydantic take ~45; the libraries used only
when authentication or CDS fetching is configured (PyJWT with cryptography ~10 MiB, httpx
~7 MiB) are imported where they are used, so a worker that does neither never holds them.
"""

from __future__ import annotations

import re
import subprocess
import sys
import textwrap
import urllib.request
from pathlib import Path

from tests.api.conftest import ALTITUDE, ROOT
from tests.api.test_serve import environment, free_port, wait_ready

BUDGET_MIB = 80
ONLY_WHEN_USED = ("jwt", "cryptography", "httpx")


def peak_resident_mib(pid: int) -> float:
    """The peak resident set (VmHWM) of a process, from ``/proc`` (Linux, proc(5))."""
    status = Path(f"/proc/{pid}/status").read_text()
    match = re.search(r"VmHWM:\s+(\d+) kB", status)
    assert match, status
    return int(match[1]) / 1024


def test_a_worker_that_has_assessed_stays_within_its_memory_budget() -> None:
    port = free_port()
    process = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--port", str(port)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        env=environment(),
        cwd=ROOT,
    )
    try:
        wait_ready(port, process)
        body = ALTITUDE.read_bytes()
        for _ in range(30):
            request = urllib.request.Request(
                f"http://127.0.0.1:{port}/fhir/$assess-hypoxaemia",
                body,
                {"Content-Type": "application/fhir+json"},
            )
            with urllib.request.urlopen(request, timeout=10) as answer:
                assert answer.status == 200
        for path in ("/fhir/metadata", "/metrics", "/openapi.json"):
            with urllib.request.urlopen(f"http://127.0.0.1:{port}{path}", timeout=10) as answer:
                assert answer.status == 200
        assert peak_resident_mib(process.pid) <= BUDGET_MIB
    finally:
        process.terminate()
        process.wait(15)


def test_the_app_does_not_load_authentication_or_fetching_libraries_it_does_not_use() -> None:
    """Built with the default settings and asked for an assessment, the CapabilityStatement
    and the CDS discovery (refused: no CDS client is configured), the app has imported
    neither PyJWT, cryptography nor httpx (run in a fresh interpreter: the test process
    itself imports them)."""
    script = textwrap.dedent(
        f"""
        import asyncio, sys
        from service.api import create_app
        from service.config import ServerSettings, Settings

        async def call(app, method, path, body=b""):
            sent = []
            async def receive():
                return {{"type": "http.request", "body": body, "more_body": False}}
            async def send(message):
                sent.append(message)
            scope = {{
                "type": "http", "asgi": {{"version": "3.0"}}, "http_version": "1.1",
                "method": method, "scheme": "http", "path": path, "raw_path": path.encode(),
                "query_string": b"", "root_path": "", "client": ("127.0.0.1", 1),
                "server": ("127.0.0.1", 80),
                "headers": [(b"content-type", b"application/fhir+json"), (b"host", b"x")],
                "state": {{}},
            }}
            await app(scope, receive, send)
            return sent[0]["status"]

        async def main():
            app = create_app(Settings(), ServerSettings())
            async with app.router.lifespan_context(app):
                body = open({str(ALTITUDE)!r}, "rb").read()
                statuses = [
                    await call(app, "POST", "/fhir/$assess-hypoxaemia", body),
                    await call(app, "GET", "/fhir/metadata"),
                    await call(app, "GET", "/cds-services"),
                ]
            print(statuses, [m for m in {ONLY_WHEN_USED!r} if m in sys.modules])

        asyncio.run(main())
        """
    )
    done = subprocess.run(
        [sys.executable, "-c", script],
        cwd=ROOT,
        env=environment(),
        capture_output=True,
        text=True,
        timeout=60,
        check=True,
    )
    assert done.stdout.strip() == "[200, 200, 401] []", done.stdout + done.stderr
