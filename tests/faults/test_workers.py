"""A real ``oxyrule serve --workers 2``: reload and shutdown under keep-alive traffic.

Before: a SIGHUP restarted the workers one by one, each loading the directory as it then was,
so for seconds two rule sets answered side by side, and the workers stopped on the way reset
their keep-alive clients (9 resets); a SIGTERM skipped the ``/readyz`` 503 phase altogether
and reset 10 keep-alive requests. Now every worker switches to one verified copy at the same
instant, no connection is reset, and each worker drains as a single server does.
"""

from __future__ import annotations

import http.client
import json
import shutil
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from service.api.server import DRAIN_SECONDS
from tests.api.conftest import ROOT
from tests.api.test_serve import environment, free_port, wait_ready
from tests.faults.test_rules_reload import bump_version


@dataclass(frozen=True, slots=True)
class Seen:
    started: float
    ended: float
    version: str | None  # None: an error (reset, refused, status other than 200)
    status: int
    close: bool  # the answer said Connection: close
    reused: bool  # sent on a keep-alive connection that had answered before


def keep_alive_client(port: int, stop: threading.Event, seen: list[Seen]) -> None:
    """One keep-alive connection asking /readyz again and again (reconnecting when the server
    says Connection: close, as any HTTP/1.1 client does); every answer and error recorded."""
    connection = http.client.HTTPConnection("127.0.0.1", port, timeout=10)
    reused = False
    while not stop.is_set():
        started = time.monotonic()
        try:
            connection.request("GET", "/readyz")
            answer = connection.getresponse()
            body = answer.read()
            close = (answer.getheader("connection") or "").lower() == "close"
            version = json.loads(body).get("ruleset") if answer.status == 200 else None
            seen.append(Seen(started, time.monotonic(), version, answer.status, close, reused))
            reused = not close
            if close:
                connection.close()
        except (OSError, http.client.HTTPException):
            seen.append(Seen(started, time.monotonic(), None, 0, False, reused))
            reused = False
            connection.close()
            if stop.is_set():
                break
            time.sleep(0.05)
        time.sleep(0.005)
    connection.close()


@contextmanager
def serving(rules: Path, port: int, log: Path) -> Iterator[subprocess.Popen[bytes]]:
    with log.open("wb") as stderr:
        process = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--workers", "2", "--port", str(port)],
            cwd=ROOT,
            env=environment(OXYRULE_RULES_DIR=str(rules)),
            stdout=subprocess.DEVNULL,
            stderr=stderr,
        )
        try:
            wait_ready(port, process, seconds=60)
            yield process
        finally:
            if process.poll() is None:
                process.terminate()
            process.wait(30)


def wait_for(log: Path, words: str, seconds: float = 60) -> None:
    deadline = time.monotonic() + seconds
    while words not in log.read_text():
        assert time.monotonic() < deadline, f"no {words!r} in:\n{log.read_text()}"
        time.sleep(0.05)


def test_a_reload_switches_every_worker_at_once_and_sigterm_drains_them_without_a_reset(
    tmp_path: Path,
) -> None:
    # One server for both (a multi-worker start takes seconds): a refused reload, a good one,
    # then SIGTERM, all under four keep-alive clients.
    rules = tmp_path / "rules"
    shutil.copytree(ROOT / "rules", rules)
    port, log = free_port(), tmp_path / "stderr.log"
    stop, seen = threading.Event(), list[Seen]()
    clients = [
        threading.Thread(target=keep_alive_client, args=(port, stop, seen)) for _ in range(4)
    ]
    with serving(rules, port, log) as process:
        for client in clients:
            client.start()
        time.sleep(0.5)
        # A set lint rejects (a rule file gone) is refused by the supervisor: nothing changes.
        removed = sorted((rules / "mechanism").glob("*.yaml"))[0]
        kept = removed.read_text()
        removed.unlink()
        process.send_signal(signal.SIGHUP)
        wait_for(log, "its file is gone")
        removed.write_text(kept)
        bump_version(rules, "9.9.12-workers")
        process.send_signal(signal.SIGHUP)
        wait_for(log, '"rule set reloaded"')
        time.sleep(0.5)
        signalled = time.monotonic()
        process.send_signal(signal.SIGTERM)
        process.wait(30)
        stop.set()
        for client in clients:
            client.join(20)
    assert process.returncode == 0
    before = [s for s in seen if s.started < signalled]
    assert [s for s in before if s.version is None] == []  # no reset, no error, no 503
    from service.runtime import Runtime

    old, new = Runtime.load().ruleset.identity, "oxyrule-default|9.9.12-workers"
    assert {s.version for s in before} == {old, new}
    switched = min(s.ended for s in before if s.version == new)
    # Never mixed: once one answer came from the new set, no request begun after it was
    # answered by the old one, on any worker.
    assert [s for s in before if s.started > switched and s.version == old] == []
    text = log.read_text()
    assert "Traceback" not in text
    # Each worker switches at its first request after the commit (a worker the kernel gave no
    # connection since has nothing to answer yet: its first request will find the new set).
    assert 1 <= text.count('"rule set switched"') <= 2
    # SIGTERM: readiness 503 on every worker while it drains, each answer saying close.
    during = [s for s in seen if s.started >= signalled]
    draining = [s for s in during if s.status == 503]
    assert draining, "no /readyz 503 phase while the workers drained"
    assert all(s.close for s in draining)  # keep-alive clients told to reconnect elsewhere
    # No request on a kept-alive connection fails: every answer of the drain said close. (A
    # new connection made in the instant the last worker stops accepting can still be
    # refused or reset: that is TCP; in Kubernetes the pod has left the endpoints by then.)
    assert [s for s in during if s.status == 0 and s.reused] == []
    assert [s for s in during if s.status == 0 and s.started < signalled + DRAIN_SECONDS] == []
