"""``POST /hl7v2`` over HTTP: the ACK (HL7 v2.5.1 chapter 2), the FHIR answer, media types, auth.

The v2 twin of the invented demo case (fixtures/hl7v2) must be acknowledged AA with MSA-2 =
its MSH-10 and graded as the FHIR path grades the same data (HL7 v2.5.1 ch. 2 original-mode
acknowledgement: MSA-1 AA, MSA-2 the control id of the message acknowledged).
"""

from __future__ import annotations

from pathlib import Path

import orjson
from fastapi.testclient import TestClient

from service.api.app import create_app
from service.config import ServerSettings

ROOT = Path(__file__).resolve().parents[2]
V2 = (ROOT / "fixtures" / "hl7v2" / "post-operative-drowsiness.hl7").read_bytes()
FHIR = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"


def _client(**server: object) -> TestClient:
    return TestClient(create_app(server=ServerSettings(**server)))  # type: ignore[arg-type]


def _msh10(message: bytes) -> str:
    msh = message.replace(b"\r\n", b"\r").split(b"\r", 1)[0].decode()
    return msh.split("|")[9]


def test_a_hypoventilation_message_is_acknowledged_aa_with_its_control_id() -> None:
    response = _client().post(
        "/hl7v2", content=V2, headers={"Content-Type": "x-application/hl7-v2+er7"}
    )
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("x-application/hl7-v2+er7")
    segments = response.text.replace("\r\n", "\r").split("\r")
    msa = next(s for s in segments if s.startswith("MSA"))
    assert msa.split("|")[1:3] == ["AA", _msh10(V2)]


def test_the_fhir_answer_grades_as_the_fhir_path_does() -> None:
    client = _client()
    v2 = client.post(
        "/hl7v2",
        content=V2,
        headers={"Content-Type": "application/hl7-v2", "Accept": "application/fhir+json"},
    )
    fhir = client.post(
        "/fhir/$assess-hypoxaemia",
        content=FHIR.read_bytes(),
        headers={"Content-Type": "application/fhir+json"},
    )

    def grades(result: dict[str, object]) -> dict[str, str]:
        params = result["entry"][1]["resource"]["parameter"]  # type: ignore[index]
        return {
            p["part"][0]["valueCode"]: p["part"][1]["valueCode"]
            for p in params
            if p["name"] == "mechanism"
        }

    assert v2.status_code == fhir.status_code == 200
    assert grades(orjson.loads(v2.content)) == grades(orjson.loads(fhir.content))
    assert grades(orjson.loads(v2.content))["hypoventilation"] == "likely"


def test_garbage_is_answered_not_crashed() -> None:
    response = _client().post(
        "/hl7v2", content=b"\x00\x01 not a message", headers={"Content-Type": "text/plain"}
    )
    assert response.status_code in (400, 422)
    assert "MSA|A" in response.text


def test_other_media_types_are_refused_with_415() -> None:
    response = _client().post("/hl7v2", content=V2, headers={"Content-Type": "application/json"})
    assert response.status_code == 415
    assert response.json()["issue"][0]["location"] == ["http.Content-Type"]


def test_authentication_applies_when_configured() -> None:
    import hashlib

    digest = "sha256:" + hashlib.sha256(b"invented-key").hexdigest()
    client = _client(api_key_hashes=[digest])
    headers = {"Content-Type": "text/plain"}
    assert client.post("/hl7v2", content=V2, headers=headers).status_code == 401
    headers["Authorization"] = "Bearer invented-key"
    assert client.post("/hl7v2", content=V2, headers=headers).status_code == 200


def test_serve_runs_an_mllp_listener_beside_http(tmp_path: Path) -> None:
    # A real `oxyrule serve --mllp-port` process: one framed message over TCP gets its ACK.
    import os
    import socket
    import subprocess
    import sys
    import time

    def free_port() -> int:
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            port: int = s.getsockname()[1]
            return port

    http_port, mllp_port = free_port(), free_port()
    env = {k: v for k, v in os.environ.items() if not k.startswith("OXYRULE_")}
    process = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "service.cli",
            "serve",
            "--port",
            str(http_port),
            "--mllp-port",
            str(mllp_port),
        ],
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        deadline = time.monotonic() + 30
        while True:
            try:
                connection = socket.create_connection(("127.0.0.1", mllp_port), timeout=1)
                break
            except OSError:
                if time.monotonic() > deadline or process.poll() is not None:
                    raise
                time.sleep(0.2)
        with connection:
            message = V2.replace(b"\r\n", b"\r").replace(b"\n", b"\r")
            connection.sendall(b"\x0b" + message + b"\x1c\r")
            connection.settimeout(20)
            reply = b""
            while not reply.endswith(b"\x1c\r"):
                chunk = connection.recv(65536)
                assert chunk, "connection closed before the ACK"
                reply += chunk
        assert f"MSA|AA|{_msh10(V2)}".encode() in reply
    finally:
        process.terminate()
        process.wait(timeout=20)


def test_mllp_needs_a_single_worker() -> None:
    import pytest
    from pydantic import ValidationError

    with pytest.raises(ValidationError, match="OXYRULE_WORKERS=1"):
        ServerSettings(mllp_port=2575, workers=2)


def test_hl7v2_messages_are_counted_by_transport_and_acknowledgment() -> None:
    # /metrics counted no HL7 v2 traffic beyond the HTTP route's requests.
    client = _client()
    headers = {"Content-Type": "application/hl7-v2"}
    client.post("/hl7v2", content=V2, headers=headers)
    client.post("/hl7v2", content=b"MSH|^~\\&|A|B|C|D|20260101||ADT^A01|X|T|2.5.1", headers=headers)
    text = client.get("/metrics").text
    assert 'oxyrule_hl7v2_messages_total{transport="http",ack="AA"} 1' in text
    assert 'oxyrule_hl7v2_messages_total{transport="http",ack="AR"} 1' in text
