"""Engineering notation: ``22u``, ``4.7k``, ``2m2``, ``400kHz`` in; the same out.

Values are SI floats inside loopkit; these two functions are the only place
where text becomes a number and back.
"""

from __future__ import annotations

import math
import numbers
import re

from .errors import DesignError, shorten

__all__ = ["PREFIXES", "format_value", "parse_value"]

#: SI prefixes accepted on input (``µ`` and ``μ`` are both micro; ``meg`` as in SPICE).
PREFIXES = {
    "f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6,
    "m": 1e-3, "": 1.0, "k": 1e3, "K": 1e3, "M": 1e6, "meg": 1e6, "G": 1e9,
}

# Unit words accepted after the number/prefix (lower case) and the unit each means.
_UNIT_WORDS = {
    "ohm": "ohm", "ohms": "ohm", "ω": "ohm", "\u2126": "ohm", "r": "ohm", "hz": "hz", "h": "h", "f": "f",
    "v": "v", "a": "a", "s": "s", "w": "w", "c": "c", "%": "%", "deg": "deg", "db": "db",
}

_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PREFIX = r"(?:meg|MEG|Meg|[fpnuµμmkKMG])?"
_UNIT_CHARS = "A-Za-zΩ\u2126%"
_PLAIN = re.compile(rf"^({_NUMBER})\s*({_PREFIX})\s*([{_UNIT_CHARS}]*)$")
# "2m2" = 2.2 m, "4k7" = 4.7 k, "1R5" = 1.5 ohm (IEC 60062 letter code: R only for ohms)
_INFIX = re.compile(rf"^([+-]?\d+)([fpnuµμmkKMGR])(\d+)\s*([{_UNIT_CHARS}]*)$")


def _meaning(unit: str) -> str:
    return _UNIT_WORDS.get(unit.lower(), unit.lower())


def _check_unit(text: str, unit_text: str, field: str, unit: str | None, prefix: str = "") -> None:
    if not unit_text:
        return
    meaning = _UNIT_WORDS.get(unit_text.lower())
    if meaning is None:
        raise DesignError(
            field,
            text,
            f"unknown unit '{shorten(prefix + unit_text, 20)}' (use a number with an SI prefix, e.g. 22u, 4.7k, 400kHz)",
        )
    if unit is not None and meaning != _meaning(unit):
        raise DesignError(field, text, f"expected a value in {unit}, not '{shorten(unit_text, 20)}'")


def _scaled(number: str, scale: float) -> float:
    """``number * scale`` without binary rounding noise (``100n`` is exactly 1e-7)."""
    if "e" in number.lower() or scale == 1.0:
        return float(number) * scale
    return float(f"{number}e{round(math.log10(scale))}")


def parse_value(text: object, field: str = "", unit: str | None = None) -> float:
    """Parse a number in engineering notation.

    Parameters
    ----------
    text : str or float
        ``"22u"``, ``"4.7kohm"``, ``"400kHz"``, ``"2m2"``, ``"330µ"``, ``"1.5M"``,
        or a plain number.  ``M`` is mega, ``m`` milli, ``meg`` mega.
    field : str
        Field name used in the error message.
    unit : str, optional
        Expected unit word (``"H"``, ``"F"``, ``"ohm"``, ``"Hz"``, ``"V"``, ``"A"``);
        a different unit letter after the number is an error.

    Returns
    -------
    float
        The value in SI units.

    Raises
    ------
    DesignError
        For anything that is not a finite number in this notation.
    """
    if isinstance(text, bool):
        raise DesignError(field, text, "expected a number, not true/false")
    if isinstance(text, numbers.Real):  # int, float and numpy scalars
        value = float(text)
        if not math.isfinite(value):
            raise DesignError(field, text, "must be a finite number")
        return value
    if not isinstance(text, str):
        raise DesignError(field, text, "expected a number such as 22u or 4.7k")
    s = text.strip()  # blanks inside are allowed only between number, prefix and unit
    if not s:
        raise DesignError(field, text, "is empty; expected a number such as 22u or 4.7k")
    m = _INFIX.match(s)
    if m:
        whole, prefix, frac, unit_text = m.groups()
        scale = 1.0 if prefix == "R" else PREFIXES[prefix]
        if prefix == "R" and unit is not None and _meaning(unit) != "ohm":
            # "1R5" on an inductor usually means 1.5 uH; never guess: R is ohms only.
            raise DesignError(field, text, f"'R' as a decimal mark is for ohms only; give the value in {unit} with an SI prefix (e.g. 1.5u)")
        _check_unit(text, unit_text, field, unit)
        return _scaled(f"{whole}.{frac}", scale)
    m = _PLAIN.match(s)
    if not m:
        raise DesignError(field, text, "not a number; expected e.g. 22u, 4.7k, 100n, 1.5M, 400kHz")
    number, prefix, unit_text = m.groups()
    # "m" is milli and "M" mega; "10f" is femto, as in SPICE; a unit letter that is
    # not a prefix (H, V, A, Hz) is taken as the unit.
    scale = 1e6 if prefix.lower() == "meg" else PREFIXES[prefix]
    _check_unit(text, unit_text, field, unit, prefix)
    value = _scaled(number, scale)
    if not math.isfinite(value):
        raise DesignError(field, text, "must be a finite number")
    return value


_OUT_PREFIXES = {9: "G", 6: "M", 3: "k", 0: "", -3: "m", -6: "µ", -9: "n", -12: "p", -15: "f"}


def format_value(value: float, unit: str = "", digits: int = 3, ascii_only: bool = False) -> str:
    """Format a number in engineering notation with ``digits`` significant digits.

    Parameters
    ----------
    value : float
        Value in SI units.
    unit : str
        Unit appended after the prefix (``"H"``, ``"Hz"``, ``"Ω"``...).
    digits : int
        Significant digits, >= 1 (trailing zeros are dropped).
    ascii_only : bool
        Write ``u`` instead of ``µ`` (for files and netlists).

    Returns
    -------
    str
        e.g. ``format_value(2.2e-5, "H") == "22µH"``.  The text is the decimal
        ``f"{value:.{digits}g}"`` with its point moved to a prefix from f to G, so
        :func:`parse_value` reads it back as exactly ``float(f"{value:.{digits}g}")``.
        Magnitudes below 1f or from 1000G are written as ``1.5e-18``.  NaN and
        infinity give ``"—"`` (``"-"`` with ``ascii_only``).
    """
    if digits < 1:
        raise ValueError(f"digits must be >= 1, not {digits}")
    if value is None or not math.isfinite(value):
        return "—" if not ascii_only else "-"
    if value == 0:
        return f"0{unit}"
    sign = "-" if value < 0 else ""
    mag = abs(float(value))
    mant, exp_text = f"{mag:.{digits - 1}e}".split("e")  # correctly rounded: "4.70", "+03"
    exp = int(exp_text)
    figures = mant.replace(".", "")
    eng = 3 * (exp // 3)
    if eng not in _OUT_PREFIXES:
        if math.isinf(float(f"{mant}e{exp}")):  # rounded past the largest double: keep every digit
            return f"{sign}{mag!r}{unit}".replace("e+", "e")
        whole, _, frac = mant.partition(".")
        frac = frac.rstrip("0")
        return f"{sign}{whole}{'.' + frac if frac else ''}e{exp}{unit}"
    shift = exp - eng + 1  # figures before the decimal point: 1, 2 or 3
    whole = figures[:shift].ljust(shift, "0")
    frac = figures[shift:].rstrip("0")
    prefix = _OUT_PREFIXES[eng]
    if ascii_only and prefix == "µ":
        prefix = "u"
    return f"{sign}{whole}{'.' + frac if frac else ''}{prefix}{unit}"
