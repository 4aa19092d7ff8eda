"""``oxyrule assess`` with an HL7 v2 file (README, Using it), and ``mllp``."""

from __future__ import annotations

import json
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from service.cli import build_parser, main

from .builders import FIXTURES, message, obr, obx

TWIN = FIXTURES / "post-operative-drowsiness.hl7"


def run(*args: str, stdin: bytes = b"") -> subprocess.CompletedProcess[bytes]:
    return subprocess.run(
        [sys.executable, "-m", "service.cli", *args], input=stdin, capture_output=True, check=False
    )


def test_assess_prints_the_fhir_result_of_a_v2_file(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["assess", str(TWIN)]) == 0
    result = json.loads(capsys.readouterr().out)
    assert result["resourceType"] == "Bundle"
    params = result["entry"][1]["resource"]["parameter"]
    assert {"name": "pattern", "valueCode": "single"} in params


def test_assess_reads_a_cr_separated_mllp_framed_file_and_stdin(tmp_path: Path) -> None:
    framed = tmp_path / "framed.hl7"
    text = TWIN.read_text(encoding="utf-8").replace("\n", "\r")
    framed.write_bytes(b"\x0b" + text.encode() + b"\x1c\r")
    for args, stdin in (((str(framed),), b""), (("-",), text.encode())):
        done = run("assess", *args, stdin=stdin)
        assert done.returncode == 0, done.stderr
        assert json.loads(done.stdout)["resourceType"] == "Bundle"


def test_assess_exits_2_with_an_operation_outcome_for_a_refused_message(tmp_path: Path) -> None:
    bad = tmp_path / "bad.hl7"
    bad.write_text(message(obr(), obx(1, "2703-7", "sixty")), encoding="utf-8")
    done = run("assess", str(bad))
    assert done.returncode == 2
    outcome = json.loads(done.stdout)
    assert outcome["resourceType"] == "OperationOutcome"
    assert outcome["issue"][0]["location"] == ["OBX[1]-5"]  # v2, not FHIRPath


def test_mllp_subcommand_options() -> None:
    args = build_parser().parse_args(["mllp", "--port", "2575"])
    assert (args.port, args.host, args.max_frame_bytes, args.idle_timeout) == (
        2575,
        "127.0.0.1",
        1024 * 1024,
        300.0,
    )
    with pytest.raises(SystemExit):
        build_parser().parse_args(["mllp"])  # the port is required


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port: int = s.getsockname()[1]
        return port


def test_mllp_subcommand_listens_and_answers() -> None:
    port = _free_port()
    server = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "mllp", "--port", str(port)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    try:
        deadline = time.monotonic() + 30
        while True:
            try:
                client = socket.create_connection(("127.0.0.1", port), timeout=5)
                break
            except OSError:
                assert time.monotonic() < deadline and server.poll() is None
                time.sleep(0.1)
        with client:
            text = TWIN.read_text(encoding="utf-8").replace("\n", "\r")
            client.sendall(b"\x0b" + text.encode() + b"\x1c\r")
            reply = b""
            while not reply.endswith(b"\x1c\r"):
                chunk = client.recv(65536)
                assert chunk
                reply += chunk
        assert b"MSA|AA|DEMO-POSTOP-0001" in reply
    finally:
        server.terminate()
        _, err = server.communicate(timeout=30)
    assert b"MLLP listening" in err
    assert b"DEMO-0001" not in err  # no patient identifier in the log
    # The same JSON lines as `oxyrule serve` (it logged plain text before).
    lines = [json.loads(line) for line in err.decode().splitlines() if line.strip()]
    assert lines and all({"time", "level", "logger", "message"} <= set(line) for line in lines)


def test_mllp_subcommand_refuses_more_peers_than_the_descriptor_limit_holds() -> None:
    def low_limit() -> None:
        import resource

        resource.setrlimit(resource.RLIMIT_NOFILE, (200, 200))

    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "service.cli",
            "mllp",
            "--port",
            str(_free_port()),
            "--max-connections",
            "500",
        ],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
        preexec_fn=low_limit,
    )
    assert done.returncode == 1
    assert "--max-connections" in done.stderr and "ulimit -n" in done.stderr
