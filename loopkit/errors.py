"""Errors for bad input and warnings as data.

One base error, :class:`DesignError`, subclasses :class:`ValueError` and carries
the field, the value and what is allowed, so the CLI prints one line and the GUI
marks the field.  Warnings are plain data (:class:`Finding`) so every front end
shows the same thing.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["DesignError", "DesignFileError", "Finding", "InfeasibleDesign", "LoopkitWarning", "shorten"]

#: Characters of a value echoed in a message; longer ones are cut and end in "...".
SHOWN_CHARS = 60

_CONTROL = {ord(c): f"\\x{ord(c):02x}" for c in map(chr, range(32))} | {
    ord("\n"): "\\n", ord("\r"): "\\r", ord("\t"): "\\t", 0x7F: "\\x7f", 0x2028: " ", 0x2029: " "
}


def shorten(value: object, limit: int = SHOWN_CHARS) -> str:
    """``value`` as text for a one-line message: control characters escaped, cut to ``limit`` + "...".

    A value of a megabyte, or one holding newlines, would otherwise flood or
    break the one line the CLI prints (common practice, no source).
    """
    text = value if isinstance(value, str) else repr(value)
    if len(text) > 4 * limit:
        text = text[: 4 * limit]  # escape only what is shown
        cut = True
    else:
        cut = False
    text = text.translate(_CONTROL)
    if cut or len(text) > limit:
        return text[:limit] + "..."
    return text


class DesignError(ValueError):
    """Bad input: names the field, the value and what is allowed.

    Parameters
    ----------
    field : str
        Dotted name of the field, e.g. ``"stage.l"``.
    value : object
        The offending value as the user gave it.
    allowed : str
        What would have been accepted, e.g. ``"must be > 0"``.
    """

    def __init__(self, field: str, value: object, allowed: str):
        self.field = shorten(field, 2 * SHOWN_CHARS)
        self.value = value
        self.allowed = shorten(allowed, 10 * SHOWN_CHARS)
        shown = shorten(value)
        field = self.field
        super().__init__(f"{field} = {shown}: {self.allowed}" if field else f"{shown}: {self.allowed}")


class DesignFileError(DesignError):
    """A design file could not be read: carries the file and the key."""

    def __init__(self, file: str, field: str, value: object, allowed: str):
        self.file = file
        super().__init__(field, value, allowed)
        self.args = (f"{shorten(file, 4 * SHOWN_CHARS)}: {self.args[0]}",)

    def __str__(self) -> str:
        return self.args[0]


class InfeasibleDesign(DesignError):
    """The targets cannot be met: the message says why and what to change."""

    def __init__(self, field: str, value: object, allowed: str, reasons: tuple = ()):
        super().__init__(field, value, allowed)
        self.reasons = tuple(reasons)


@dataclass(frozen=True)
class Finding:
    """A warning or note about a design, shown by CLI and GUI alike.

    Attributes
    ----------
    code : str
        Stable short identifier, e.g. ``"rhp-zero-close"``.
    message : str
        Plain words for the engineer, naming the cause.
    corner : int or None
        Index of the operating corner it concerns, or None for the whole design.
    severity : str
        ``"warning"`` (needs attention) or ``"note"`` (information).
    """

    code: str
    message: str
    corner: int | None = None
    severity: str = "warning"


class LoopkitWarning(UserWarning):
    """Python warning category for loopkit's own runtime warnings (tests make them errors)."""
