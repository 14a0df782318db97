"""Errors for bad input and warnings as data.

One base error, :class:`DesignError`, subclasses :class:`ValueError` and carries
the field, the value and what is allowed, so the CLI prints one line and the GUI
marks the field.  Warnings are plain data (:class:`Finding`) so every front end
shows the same thing.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["DesignError", "DesignFileError", "Finding", "InfeasibleDesign", "LoopkitWarning"]


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
        self.field = field
        self.value = value
        self.allowed = allowed
        shown = value if isinstance(value, str) else repr(value)
        super().__init__(f"{field} = {shown}: {allowed}" if field else f"{shown}: {allowed}")


class DesignFileError(DesignError):
    """A design file could not be read: carries the file and the key."""

    def __init__(self, file: str, field: str, value: object, allowed: str):
        self.file = file
        super().__init__(field, value, allowed)
        self.args = (f"{file}: {self.args[0]}",)

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
