"""An HL7 v2 message in ER7 (vertical-bar) encoding, parsed with python-hl7, behind a typed facade.

python-hl7 (package ``hl7``) splits the text by the separators declared in MSH-1 and MSH-2 and
un-escapes ``\\F\\``, ``\\S\\``, ``\\T\\``, ``\\R\\``, ``\\E\\`` and hex sequences; it does not
validate structure, which this package does itself so that every problem is located. Its parse
tree is uneven (a field without separators is a plain string, one with them a list of lists),
so nothing outside this module touches it: ``Segment.value(field, component, subcomponent)``
always answers a string, empty when absent (HL7 v2.5.1 chapter 2, message construction).

Segments are counted per name across the whole message (``OBX[3]`` is the third OBX), which
is how ERR-2 (ERL.2) locates a segment.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import hl7  # type: ignore[import-untyped]
import hl7.containers  # type: ignore[import-untyped]
import hl7.util  # type: ignore[import-untyped]

from service.hl7v2.er7 import escape
from service.hl7v2.errors import ErrorCode, Location, MessageRejected, V2Error
from service.intake.limits import DEFAULT_READ_LIMITS


def hl7_library_loggers() -> list[logging.Logger]:
    """The loggers of python-hl7, which log the text of a field they cannot un-escape."""
    return [hl7.util.logger, hl7.containers.logger]


# python-hl7 logs the whole text of a field it cannot un-escape ("Error decoding value [..],
# field [1961\\Q07\\23]": a birth date, a value, an identifier), and with no handler Python
# prints it on stderr. Silenced here, at import, wherever the library is used (CLI, servers,
# tests); the adapter reports the problem itself, located and without the text. Found by
# tests/fuzz/hl7v2.py. (`service.api.logs` keeps them silent when a log config is applied.)
for _library_logger in hl7_library_loggers():
    _library_logger.disabled = True
    _library_logger.propagate = False

START_BLOCK, END_BLOCK, CARRIAGE_RETURN = b"\x0b", b"\x1c", b"\r"
STANDARD_ENCODING = "^~\\&"  # component, repetition, escape, sub-component
SEGMENT_ID = re.compile(r"[A-Z][A-Z0-9]{2}")
_NEWLINES = re.compile(r"\r\n|\n|\r")


def _child(node: object, index: int) -> object:
    """Item ``index`` (1-based) of a python-hl7 container, or of a leaf string (itself at 1).

    python-hl7's containers are lists, so this is one index, in constant time. (It used to copy
    the container first, which made reading every component of a field quadratic in their
    number: 69 s for one field of 100,000 components; tests/hl7v2/test_budgets.py.)
    """
    if isinstance(node, str):
        return node if index == 1 else ""
    assert isinstance(node, list)
    return node[index - 1] if 0 < index <= len(node) else ""


def _count(node: object) -> int:
    return 1 if isinstance(node, str) else len(node)  # type: ignore[arg-type]


@dataclass(frozen=True, slots=True)
class Segment:
    """One segment of a parsed message; ``sequence`` is its occurrence among same-name ones."""

    name: str
    sequence: int
    _raw: Any
    _message: Any

    def _field(self, field: int) -> object:
        return self._raw[field] if 0 < field < len(self._raw) else ""

    def value(self, field: int, component: int = 1, subcomponent: int = 1, rep: int = 1) -> str:
        """The un-escaped text at field/component/sub-component (of repetition ``rep``)."""
        leaf = _child(_child(_child(self._field(field), rep), component), subcomponent)
        if not isinstance(leaf, str):  # deeper than asked: the first leaf, as python-hl7 does
            while not isinstance(leaf, str):
                leaf = _child(leaf, 1)
        if self.name == "MSH" and field in (1, 2):
            return leaf
        return str(self._message.unescape(leaf)) if self._message.esc in leaf else leaf

    def components(self, field: int, rep: int = 1) -> list[str]:
        """The un-escaped first sub-components of each component of one repetition."""
        repetition = _child(self._field(field), rep)
        return [self.value(field, c, 1, rep) for c in range(1, _count(repetition) + 1)]

    def subcomponents(self, field: int, component: int, rep: int = 1) -> list[str]:
        """The un-escaped sub-components of one component (an HD's namespace, id and type
        when it is sent inside a component)."""
        node = _child(_child(self._field(field), rep), component)
        return [self.value(field, component, s, rep) for s in range(1, _count(node) + 1)]

    def repetitions(self, field: int) -> int:
        """How many repetitions the field has (0 when empty)."""
        node = self._field(field)
        if isinstance(node, str) or str(node) == "":
            return 0 if str(node) == "" else 1
        return _count(node)

    def raw(self, field: int) -> str:
        """The field as sent (still escaped, in the message's own separators)."""
        return str(self._field(field))

    @property
    def field_count(self) -> int:
        """The number of the last field present."""
        return len(self._raw) - 1

    def at(self, field: int | None = None, component: int | None = None) -> Location:
        """The location of this segment, or of one of its fields or components."""
        return Location(self.name, self.sequence, field, component)

    def reencoded(self) -> str:
        """The segment in the standard encoding characters, whatever the sender's were."""
        if self.name == "MSH":
            raise ValueError("MSH is written, not re-encoded")
        fields = [self.name]
        for f in range(1, self.field_count + 1):
            node = self._field(f)
            reps = []
            for r in range(1, _count(node) + 1 if str(node) else 1):
                rep = _child(node, r)
                comps = []
                for c in range(1, _count(rep) + 1):
                    comp = _child(rep, c)
                    subs = [escape(self.value(f, c, s, r)) for s in range(1, _count(comp) + 1)]
                    comps.append("&".join(subs))
                reps.append("^".join(comps))
            fields.append("~".join(reps))
        return "|".join(fields)


@dataclass(frozen=True, slots=True)
class Header:
    """What the replies need from MSH, read once (un-escaped, components split)."""

    sending_application: tuple[str, ...] = ()
    sending_facility: tuple[str, ...] = ()
    receiving_application: tuple[str, ...] = ()
    receiving_facility: tuple[str, ...] = ()
    time: str = ""
    message_code: str = ""
    trigger: str = ""
    structure: str = ""
    control_id: str = ""
    processing_id: str = ""
    version: str = ""
    charset: str = ""
    accept_ack: str = ""  # MSH-15, HL7 table 0155: AL, NE, ER, SU (empty: original mode)
    application_ack: str = ""  # MSH-16, the same table

    @classmethod
    def of(cls, msh: Segment) -> Header:
        def hd(field: int) -> tuple[str, ...]:
            """Each component ER7-encoded with its sub-components (``LAB&1.2.3.4&ISO``), so
            a reply names the application and facility exactly as they were sent."""
            repetition = msh.components(field)
            parts = [
                "&".join(escape(s) for s in msh.subcomponents(field, c)).rstrip("&")
                for c in range(1, len(repetition) + 1)
            ]
            while parts and not parts[-1]:
                parts.pop()
            return tuple(parts)

        return cls(
            sending_application=hd(3),
            sending_facility=hd(4),
            receiving_application=hd(5),
            receiving_facility=hd(6),
            time=msh.value(7),
            message_code=msh.value(9, 1),
            trigger=msh.value(9, 2),
            structure=msh.value(9, 3),
            control_id=msh.value(10),
            processing_id=msh.value(11),
            version=msh.value(12),
            charset=msh.value(18),
            accept_ack=msh.value(15),
            application_ack=msh.value(16),
        )


@dataclass(frozen=True, slots=True)
class V2Message:
    """A parsed message: its header and its segments, in order."""

    header: Header
    segments: tuple[Segment, ...]

    def __iter__(self) -> Iterator[Segment]:
        return iter(self.segments)

    def all(self, name: str) -> list[Segment]:
        """Every segment with that id, in order."""
        return [s for s in self.segments if s.name == name]

    @property
    def msh(self) -> Segment:
        return self.segments[0]


def normalise(text: str) -> str:
    """Segments separated by CR only (files often use LF or CRLF), blank lines dropped."""
    text = text.lstrip("\ufeff \t\r\n")
    return "\r".join(line for line in _NEWLINES.split(text) if line.strip())


def _rejected(reason: str, location: Location | None = None) -> MessageRejected:
    return MessageRejected([V2Error(location, ErrorCode.SEGMENT_SEQUENCE, reason)])


def _check_encoding(text: str) -> None:
    if text[:3] in ("FHS", "BHS"):
        raise _rejected("batch and file envelopes (FHS, BHS) are not supported; send one message")
    if not text.startswith("MSH"):
        raise _rejected("not an HL7 v2 message: the first segment must be MSH")
    at = Location("MSH", 1, 2)
    if len(text) < 8:
        raise _rejected("MSH ends before its encoding characters (MSH-1, MSH-2)", at)
    separator = text[3]
    end = text.find(separator, 4)
    encoding = text[4:end] if end > 0 else ""
    usable = (
        not separator.isalnum()
        and separator not in "\r\n "
        and len(encoding) in (4, 5)
        and len(set(encoding)) == len(encoding)
        and separator not in encoding
        and not any(c.isalnum() or c in "\r\n " for c in encoding)
    )
    if not usable:
        raise _rejected(
            "MSH-1/MSH-2 must give a field separator and four distinct encoding characters "
            "(usually |^~\\&)",
            at,
        )


@dataclass(frozen=True, slots=True)
class V2Limits:
    """How much of a message is parsed at all: the budget of one message's work.

    A blood-gas ORU^R01 has a few dozen segments, a field a few components. The parser builds
    an object per element (about 2.5 µs each), and reading and assessing grow with the number of
    segments, so these bounds keep the worst message inside a body limit to a fraction of a
    second. They are counted on the text, in C (``str.count``), before anything is built; a
    message over one is refused AR, located (settings ``OXYRULE_HL7_MAX_*``).
    """

    max_segments: int = 500
    max_field_parts: int = 256  # repetitions × components × sub-components of one field
    max_parts: int = 20_000  # every field, component and sub-component of the message
    max_issues: int = DEFAULT_READ_LIMITS.max_issues  # listed in the answer; the rest counted


DEFAULT_LIMITS = V2Limits()


def _over_budget(text: str, limits: V2Limits) -> MessageRejected | None:
    """The refusal of a message over ``limits`` (counted on the normalised text), or None.

    Linear in the text, and mostly in C: a segment whose separators are too few to put any
    field over its limit is not split at all.
    """
    field_sep, encoding = text[3], text[4:8]
    inner = (encoding[0], encoding[1], encoding[3])  # component, repetition, sub-component
    segments = text.split("\r")
    if len(segments) > limits.max_segments:
        name = segments[limits.max_segments][:3]
        reason = (
            f"more than {limits.max_segments} segments (setting OXYRULE_HL7_MAX_SEGMENTS); "
            "send one patient's recent results"
        )
        return _rejected(reason, Location(name if SEGMENT_ID.fullmatch(name) else "MSH", 1))
    over_total = text.count(field_sep) + len(segments) + sum(map(text.count, inner)) > (
        limits.max_parts
    )
    counts: dict[str, int] = {}
    running = 0
    for segment in segments:
        name = segment[:3]
        counts[name] = counts.get(name, 0) + 1
        if not over_total and sum(map(segment.count, inner)) < limits.max_field_parts:
            continue  # no field of this segment can be over its limit
        for number, field in enumerate(segment.split(field_sep)):
            if number == 0 or (name == "MSH" and number == 1):
                continue  # the segment id; MSH-2, the encoding characters themselves
            parts = 1 + sum(map(field.count, inner))
            running += parts
            if parts <= limits.max_field_parts and running <= limits.max_parts:
                continue
            at = Location(
                name if SEGMENT_ID.fullmatch(name) else "MSH",
                counts[name],
                number + 1 if name == "MSH" else number,  # MSH-1 is the separator itself
            )
            if parts > limits.max_field_parts:
                reason = (
                    f"the field has more than {limits.max_field_parts} repetitions, components "
                    "and sub-components (setting OXYRULE_HL7_MAX_FIELD_PARTS)"
                )
            else:
                reason = (
                    f"the message has more than {limits.max_parts} fields, components and "
                    "sub-components (setting OXYRULE_HL7_MAX_PARTS)"
                )
            return MessageRejected([V2Error(at, ErrorCode.VALUE_TOO_LONG, reason)])
    return None


def parse_message(text: str, limits: V2Limits = DEFAULT_LIMITS) -> V2Message:
    """Parse ER7 text (segments separated by CR, LF or CRLF), within ``limits``.

    Raises:
        MessageRejected: not an HL7 v2 message, its MSH cannot be read, or it is over a limit.
    """
    text = normalise(text)
    _check_encoding(text)
    refusal = _over_budget(text, limits)
    if refusal is not None:
        raise refusal
    try:
        parsed = hl7.parse(text)
    except Exception:  # python-hl7 raises several kinds on broken input
        raise _rejected("the message cannot be split into segments and fields") from None
    counts: dict[str, int] = {}
    segments: list[Segment] = []
    for raw in parsed:
        name = str(raw[0]) if len(raw) else ""
        counts[name] = counts.get(name, 0) + 1
        segments.append(Segment(name, counts[name], raw, parsed))
    return V2Message(Header.of(segments[0]), tuple(segments))


def read_header(text: str) -> Header | None:
    """The header of whatever came in, for an ACK to a message that could not be parsed."""
    try:
        first = normalise(text).split("\r", 1)[0]
        return parse_message(first).header
    except Exception:  # best effort: no header is a valid answer
        return None


def _charset_of(raw: bytes) -> str:
    line = raw.split(b"\r", 1)[0].split(b"\n", 1)[0]
    if len(line) < 4:
        return ""
    fields = line.split(line[3:4])
    return fields[17].decode("ascii", "replace") if len(fields) > 17 else ""


def v2_text(raw: bytes) -> str | None:
    """The message text if ``raw`` is an HL7 v2 message (plain or MLLP-framed), else None.

    Text is read as UTF-8 unless MSH-18 names ISO 8859-1; bytes that do not decode become
    U+FFFD, which no code, unit or number the service reads contains, so they are refused
    where they matter rather than guessed at.
    """
    body = raw.removeprefix(b"\xef\xbb\xbf").lstrip(b" \t\r\n")
    if body.startswith(START_BLOCK):
        body = body[1:].split(END_BLOCK, 1)[0]
    if not body.startswith(b"MSH"):
        return None
    encoding = "latin-1" if "8859/1" in _charset_of(body) else "utf-8"
    return body.decode(encoding, errors="replace")
