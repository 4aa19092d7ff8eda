"""MLLP framing (HL7 MLLP, release 2: ``0x0B <message> 0x1C 0x0D``), decoded incrementally."""

from __future__ import annotations

from service.hl7v2.framing import BrokenFrame, Frame, FrameDecoder

A, B = b"MSH|a", b"MSH|b"


def framed(body: bytes) -> bytes:
    return b"\x0b" + body + b"\x1c\r"


def test_two_frames_in_one_read() -> None:
    assert FrameDecoder(100).feed(framed(A) + framed(B)) == [Frame(A), Frame(B)]


def test_a_frame_cut_anywhere_comes_out_whole() -> None:
    data = framed(A) + framed(B)
    for cut in range(len(data) + 1):
        decoder = FrameDecoder(100)
        assert decoder.feed(data[:cut]) + decoder.feed(data[cut:]) == [Frame(A), Frame(B)]
    decoder = FrameDecoder(100)
    events = [e for byte in data for e in decoder.feed(bytes([byte]))]
    assert events == [Frame(A), Frame(B)]


def test_mid_frame_state_is_visible() -> None:
    decoder = FrameDecoder(100)
    decoder.feed(b"\x0bMSH|")
    assert decoder.in_frame and decoder.held == 4
    decoder.feed(b"x\x1c")
    assert not decoder.in_frame


def test_bytes_outside_frames_are_dropped_and_counted() -> None:
    decoder = FrameDecoder(100)
    assert decoder.feed(b"noise\r\n" + framed(A) + b"\r\nmore") == [Frame(A)]
    assert decoder.discarded == len("noise") + len("more")


def test_a_new_start_block_before_the_end_breaks_the_frame() -> None:
    events = FrameDecoder(100).feed(b"\x0bMSH|cut" + framed(B))
    assert events == [
        BrokenFrame(
            "truncated frame: a start block (0x0B) came before the end block (0x1C)", b"MSH|cut"
        ),
        Frame(B),
    ]


def test_an_oversized_frame_is_dropped_as_it_comes_and_refused() -> None:
    decoder = FrameDecoder(10)
    events = decoder.feed(b"\x0b" + b"MSH|" + b"x" * 20)
    assert events == [] and decoder.held == 24
    events = decoder.feed(b"y" * 5 + b"\x1c\r" + framed(A))
    assert events[0] == BrokenFrame(
        "frame of 29 bytes exceeds the limit of 10", b"MSH|" + b"x" * 20, too_large=True
    )
    assert events[1:] == [Frame(A)]


def test_an_end_block_without_cr_still_ends_the_frame() -> None:
    assert FrameDecoder(100).feed(b"\x0bMSH|a\x1c\x0bMSH|b\x1c") == [Frame(A), Frame(B)]
