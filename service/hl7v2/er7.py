"""Writing ER7 (vertical-bar) text with the standard encoding characters ``|^~\\&``.

Every value written is escaped (HL7 v2.5.1 ch. 2: ``\\F\\ \\S\\ \\T\\ \\R\\ \\E\\``), so text from
a rule rationale or a sender's application name can never break a field. Segments end with a
carriage return, the v2 segment terminator.
"""

from __future__ import annotations

from collections.abc import Iterable

ENCODING = "^~\\&"


def escape(text: str) -> str:
    """Escape a value for the standard encoding characters."""
    return (
        text.replace("\\", "\\E\\")
        .replace("|", "\\F\\")
        .replace("^", "\\S\\")
        .replace("&", "\\T\\")
        .replace("~", "\\R\\")
        .replace("\r", "\\X0D\\")
        .replace("\n", "\\X0A\\")
    )


def components(*parts: str) -> str:
    """One field from its components (each escaped), trailing empty ones dropped."""
    return "^".join(escape(p) for p in parts).rstrip("^")


def subcomponents(*parts: str) -> str:
    """One component from its sub-components (each escaped), trailing empty ones dropped."""
    return "&".join(escape(p) for p in parts).rstrip("&")


def segment(name: str, *fields: str) -> str:
    """A segment from already-encoded fields (field 1 first), trailing empty fields dropped."""
    return "|".join((name, *fields)).rstrip("|")


def msh(*fields: str) -> str:
    """An MSH segment; ``fields`` start at MSH-3 (MSH-1 and MSH-2 are fixed here)."""
    return ("MSH|" + ENCODING + "|" + "|".join(fields)).rstrip("|")


def message(segments: Iterable[str]) -> str:
    """Segments joined into a message, each terminated by CR."""
    return "".join(s + "\r" for s in segments)


def number(value: float) -> str:
    """A number as NM: plain decimal notation, no exponent, no trailing zeros."""
    text = format(value, "f")
    return text.rstrip("0").rstrip(".") if "." in text else text
