"""Engineering notation: ``22u``, ``4.7k``, ``2m2``, ``400kHz`` in; the same out.

Values are SI floats inside loopkit; these two functions are the only place
where text becomes a number and back.
"""

from __future__ import annotations

import math
import re

from .errors import DesignError

__all__ = ["parse_value", "format_value", "PREFIXES"]

#: SI prefixes accepted on input (``µ`` and ``μ`` are both micro; ``meg`` as in SPICE).
PREFIXES = {
    "f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6,
    "m": 1e-3, "": 1.0, "k": 1e3, "K": 1e3, "M": 1e6, "meg": 1e6, "G": 1e9,
}

# Unit words accepted after the number/prefix (lower case) and the unit each means.
_UNIT_WORDS = {
    "ohm": "ohm", "ohms": "ohm", "ω": "ohm", "r": "ohm", "hz": "hz", "h": "h", "f": "f",
    "v": "v", "a": "a", "s": "s", "w": "w", "%": "%", "deg": "deg", "db": "db",
}

_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PREFIX = r"(?:meg|MEG|Meg|[fpnuµμmkKMG])?"
_PLAIN = re.compile(rf"^({_NUMBER})\s*({_PREFIX})\s*([A-Za-zΩ%]*)$")
# "2m2" = 2.2 m, "4k7" = 4.7 k, "1R5" = 1.5
_INFIX = re.compile(r"^([+-]?\d+)([fpnuµμmkKMGR])(\d+)\s*([A-Za-zΩ%]*)$")


def _check_unit(text: str, unit_text: str, field: str, unit: str | None) -> None:
    if not unit_text:
        return
    meaning = _UNIT_WORDS.get(unit_text.lower())
    if meaning is None:
        raise DesignError(
            field, text, f"unknown unit '{unit_text}' (use a number with an SI prefix, e.g. 22u, 4.7k, 400kHz)"
        )
    if unit is not None and meaning != _UNIT_WORDS.get(unit.lower(), unit.lower()):
        raise DesignError(field, text, f"expected a value in {unit}, not '{unit_text}'")


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
    if isinstance(text, (int, float)):
        value = float(text)
        if not math.isfinite(value):
            raise DesignError(field, text, "must be a finite number")
        return value
    if not isinstance(text, str):
        raise DesignError(field, text, "expected a number such as 22u or 4.7k")
    s = text.strip().replace(" ", "")
    if not s:
        raise DesignError(field, text, "is empty; expected a number such as 22u or 4.7k")
    m = _INFIX.match(s)
    if m:
        whole, prefix, frac, unit_text = m.groups()
        scale = 1.0 if prefix == "R" else PREFIXES[prefix]
        _check_unit(text, unit_text, field, unit)
        return _scaled(f"{whole}.{frac}", scale)
    m = _PLAIN.match(s)
    if not m:
        raise DesignError(field, text, "not a number; expected e.g. 22u, 4.7k, 100n, 1.5M, 400kHz")
    number, prefix, unit_text = m.groups()
    # "m" is milli and "M" mega; "10f" is femto, as in SPICE; a unit letter that is
    # not a prefix (H, V, A, Hz) is taken as the unit.
    scale = 1e6 if prefix.lower() == "meg" else PREFIXES[prefix]
    _check_unit(text, unit_text, field, unit)
    value = _scaled(number, scale)
    if not math.isfinite(value):
        raise DesignError(field, text, "must be a finite number")
    return value


_OUT_PREFIXES = [(1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"),
                 (1e-6, "µ"), (1e-9, "n"), (1e-12, "p"), (1e-15, "f")]


def format_value(value: float, unit: str = "", digits: int = 3, ascii_only: bool = False) -> str:
    """Format a number in engineering notation with ``digits`` significant digits.

    Parameters
    ----------
    value : float
        Value in SI units.
    unit : str
        Unit appended after the prefix (``"H"``, ``"Hz"``, ``"Ω"``...).
    digits : int
        Significant digits (trailing zeros are dropped).
    ascii_only : bool
        Write ``u`` instead of ``µ`` (for files and netlists).

    Returns
    -------
    str
        e.g. ``format_value(2.2e-5, "H") == "22µH"``; the text parses back with
        :func:`parse_value` to the value rounded to ``digits`` digits.
    """
    if value is None or not math.isfinite(value):
        return "—" if not ascii_only else "-"
    if value == 0:
        return f"0{unit}"
    sign = "-" if value < 0 else ""
    mag = abs(value)
    rounded = float(f"{mag:.{digits}g}")
    for scale, prefix in _OUT_PREFIXES:
        if rounded >= scale * 0.9999999999:
            break
    else:
        scale, prefix = _OUT_PREFIXES[-1]
    mantissa = float(f"{rounded / scale:.{digits}g}")
    if mantissa >= 1000 and scale < 1e9:
        idx = [s for s, _ in _OUT_PREFIXES].index(scale)
        scale, prefix = _OUT_PREFIXES[idx - 1]
        mantissa = float(f"{rounded / scale:.{digits}g}")
    text = f"{mantissa:.{digits}g}"
    if "e" in text:
        text = f"{mantissa:f}".rstrip("0").rstrip(".")
    if ascii_only and prefix == "µ":
        prefix = "u"
    return f"{sign}{text}{prefix}{unit}"
