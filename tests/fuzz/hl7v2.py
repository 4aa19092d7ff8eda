"""Coverage-guided fuzzing of the HL7 v2 intake and the whole v2 path (a separate command).

    python -m tests.fuzz.hl7v2 [-max_total_time=300] [corpus dirs...]

Needs ``atheris`` (``pip install atheris``; not a test dependency). Starts from the seed corpus
in ``tests/fuzz/corpus/hl7v2`` (ORU^R01 messages built from ``fixtures/hl7v2``; regenerate with
``python -m tests.fuzz.hl7v2 --write-seeds``). New inputs go to ``.fuzz-corpus/hl7v2``.

The bytes are what a sender would post to ``/hl7v2`` or put in an MLLP frame. The property:
``handle_v2`` answers every input with a well-formed reply (an ACK carrying MSA-1 AA, AE or AR,
an ORU^R01, or FHIR JSON) and never reaches its last line of defence (status 500, ERR 207),
which would mean an exception escaped the adapter; and the MLLP frame decoder takes the same
bytes in any cut without failing or holding more than its limit. Any other outcome is a crash:
libFuzzer writes it to ``crash-*``; copy it into ``tests/fuzz/regressions/hl7v2/`` and
``tests/fuzz/test_regressions.py`` keeps it fixed.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import orjson

from tests.fuzz.libfuzzer import fuzzer_args

HERE = Path(__file__).resolve().parent
SEEDS = HERE / "corpus" / "hl7v2"
REPLIES = ("ack", "fhir", "result")
MSA_CODES = {"AA", "AE", "AR"}
FRAME_LIMIT = 2048  # small, so that the fuzzer reaches the over-the-limit path


def _segments(body: bytes) -> list[str]:
    return body.decode("utf-8").replace("\r\n", "\r").split("\r")


def check_reply(reply: str, response: Any) -> None:
    assert response.status != 500, "handle_v2 fell back to its internal-error answer"
    assert response.status in (200, 400, 422), response.status
    assert response.ack_code in MSA_CODES, response.ack_code
    if reply == "fhir":
        answer = orjson.loads(response.body)
        expected = "Bundle" if response.ack_code == "AA" else "OperationOutcome"
        assert answer["resourceType"] == expected, answer.get("resourceType")
        return
    segments = _segments(response.body)
    assert segments[0].startswith("MSH|^~\\&|"), "the reply does not start with our MSH"
    if reply == "result" and response.ack_code == "AA":
        assert any(s.startswith("OBX|") for s in segments), "a result reply without OBX"
        return
    msa = [s for s in segments if s.startswith("MSA|")]
    assert len(msa) == 1, "an ACK carries exactly one MSA"
    assert msa[0].split("|")[1] == response.ack_code


def _comparable(events: list[Any]) -> list[Any]:
    return [
        (e.payload,) if hasattr(e, "payload") else (e.reason, e.head[:FRAME_LIMIT], e.too_large)
        for e in events
    ]


def _check_framing(data: bytes, framing: Any) -> None:
    whole = framing.FrameDecoder(FRAME_LIMIT)
    events = whole.feed(data)
    cut = framing.FrameDecoder(FRAME_LIMIT)
    step = 1 + (data[0] % 7 if data else 0)
    pieces = [e for i in range(0, len(data), step) for e in cut.feed(data[i : i + step])]
    # An oversize frame keeps its first bytes for the refusal; how many past the limit depends
    # on the cut, so compare them up to the limit (the first crash this fuzzer found).
    assert _comparable(pieces) == _comparable(events), "another cut gave other frames"
    assert whole.held <= len(data)
    for event in events:
        if isinstance(event, framing.Frame):
            assert len(event.payload) <= FRAME_LIMIT


def check(runtime: Any, modules: Any, data: bytes) -> None:
    """The property, for one input; ``modules`` is (handle, message, framing)."""
    handle, message, framing = modules
    reply = REPLIES[len(data) % len(REPLIES)]  # each seed reaches each reply by its length
    text = message.v2_text(data)
    if text is None:
        text = data.decode("utf-8", errors="replace")
    check_reply(reply, handle.handle_v2(text, runtime, reply=reply))
    _check_framing(data, framing)


def write_seeds() -> None:
    """Write the seed corpus: the v2 fixtures and a few built variants, CR-separated."""
    from tests.hl7v2 import builders as b

    SEEDS.mkdir(parents=True, exist_ok=True)
    seeds = {
        f"fixture-{path.stem}.hl7": path.read_text(encoding="utf-8")
        for path in sorted(b.FIXTURES.glob("*.hl7"))
    }
    seeds |= {
        "gas-kpa.hl7": b.message(
            b.obr(),
            b.obx(1, "2703-7", "8.3", b.KPA),
            b.obx(2, "2019-8", "8.7", b.KPA),
            b.obx(3, "3150-0", "21", b.PERCENT),
        ),
        "gas-sn-comparator.hl7": b.gas(b.obx(4, "2708-6", "<^90", "%^^UCUM", value_type="SN")),
        "gas-venous-specimen.hl7": b.message(
            b.obr(specimen="BLDV"), b.obx(1, "2703-7", "40"), b.spm("BLDV")
        ),
        "two-orders.hl7": b.message(
            b.obr(1),
            b.obx(1, "2703-7", "55"),
            b.obr(2, "20260105110000+0100"),
            b.obx(1, "2703-7", "71", when="20260105110000+0100"),
        ),
        "content-error.hl7": b.message(b.obr(), b.obx(1, "2703-7", "sixty-two")),
        "unsupported-type.hl7": b.message(b.obr(), header=b.msh(kind="ADT^A01^ADT_A01")),
        "escapes.hl7": b.gas(b.obx(4, "8310-5", "37.2", "Cel^deg\\S\\C\\T\\x^UCUM")),
    }
    for name, text in seeds.items():
        lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
        (SEEDS / name).write_bytes("\r".join(line for line in lines if line).encode() + b"\r")
    framed = (SEEDS / "fixture-altitude-visitor.hl7").read_bytes()
    (SEEDS / "framed-twice.mllp").write_bytes((b"\x0b" + framed + b"\x1c\r") * 2)


def main() -> None:
    if "--write-seeds" in sys.argv:
        write_seeds()
        return
    import atheris

    with atheris.instrument_imports():
        from service.hl7v2 import framing, handle, message
        from service.runtime import Runtime
    runtime = Runtime.load()
    modules = (handle, message, framing)

    def one_input(data: bytes) -> None:
        check(runtime, modules, data)

    atheris.Setup(fuzzer_args(sys.argv, "hl7v2", SEEDS), one_input)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
