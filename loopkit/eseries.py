"""IEC 60063 preferred values (E6 ... E192) and snapping parts to them.

The tables are the published ones, written out digit for digit, not computed:
IEC 60063:2015, *Preferred number series for resistors and capacitors*.  E6,
E12 and E24 differ from ``round(10**(k/n), 1)`` at several values (E24 has 2.7,
3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2 where the formula gives 2.6, 2.9, ...), and
E192 has 9.20 where ``round(10**(185/192), 2)`` gives 9.19; the tests check the
tables against both the formula and these published exceptions.

Snapping is by ratio (nearest in log space), so 9.9 kohm in E12 goes to 10 kohm,
not to 8.2 kohm; a value at the exact geometric midpoint of two preferred values
goes up.  Every function works across decades (1 pF ... 10 Mohm and beyond) and
returns values that equal the decimal literal (``snap(4.6e-6, "E12") == 4.7e-6``).
"""

from __future__ import annotations

import functools
import math
import re
from types import MappingProxyType

import numpy as np

from .errors import DesignError, Finding
from .units import format_value

__all__ = [
    "C_MIN_F",
    "R_MAX_OHM",
    "R_MIN_OHM",
    "SERIES",
    "SERIES_NAMES",
    "TOLERANCE",
    "is_capacitor",
    "is_resistor",
    "neighbours",
    "part_warnings",
    "snap",
    "snap_parts",
    "values",
]

_E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)

_E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)

_E24 = (
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
    3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
)  # fmt: skip

_E48 = (
    1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69,
    1.78, 1.87, 1.96, 2.05, 2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01,
    3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42, 4.64, 4.87, 5.11, 5.36,
    5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53,
)  # fmt: skip

_E96 = (
    1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30,
    1.33, 1.37, 1.40, 1.43, 1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74,
    1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10, 2.15, 2.21, 2.26, 2.32,
    2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
    3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12,
    4.22, 4.32, 4.42, 4.53, 4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49,
    5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65, 6.81, 6.98, 7.15, 7.32,
    7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
)  # fmt: skip

_E192 = (
    1.00, 1.01, 1.02, 1.04, 1.05, 1.06, 1.07, 1.09, 1.10, 1.11, 1.13, 1.14,
    1.15, 1.17, 1.18, 1.20, 1.21, 1.23, 1.24, 1.26, 1.27, 1.29, 1.30, 1.32,
    1.33, 1.35, 1.37, 1.38, 1.40, 1.42, 1.43, 1.45, 1.47, 1.49, 1.50, 1.52,
    1.54, 1.56, 1.58, 1.60, 1.62, 1.64, 1.65, 1.67, 1.69, 1.72, 1.74, 1.76,
    1.78, 1.80, 1.82, 1.84, 1.87, 1.89, 1.91, 1.93, 1.96, 1.98, 2.00, 2.03,
    2.05, 2.08, 2.10, 2.13, 2.15, 2.18, 2.21, 2.23, 2.26, 2.29, 2.32, 2.34,
    2.37, 2.40, 2.43, 2.46, 2.49, 2.52, 2.55, 2.58, 2.61, 2.64, 2.67, 2.71,
    2.74, 2.77, 2.80, 2.84, 2.87, 2.91, 2.94, 2.98, 3.01, 3.05, 3.09, 3.12,
    3.16, 3.20, 3.24, 3.28, 3.32, 3.36, 3.40, 3.44, 3.48, 3.52, 3.57, 3.61,
    3.65, 3.70, 3.74, 3.79, 3.83, 3.88, 3.92, 3.97, 4.02, 4.07, 4.12, 4.17,
    4.22, 4.27, 4.32, 4.37, 4.42, 4.48, 4.53, 4.59, 4.64, 4.70, 4.75, 4.81,
    4.87, 4.93, 4.99, 5.05, 5.11, 5.17, 5.23, 5.30, 5.36, 5.42, 5.49, 5.56,
    5.62, 5.69, 5.76, 5.83, 5.90, 5.97, 6.04, 6.12, 6.19, 6.26, 6.34, 6.42,
    6.49, 6.57, 6.65, 6.73, 6.81, 6.90, 6.98, 7.06, 7.15, 7.23, 7.32, 7.41,
    7.50, 7.59, 7.68, 7.77, 7.87, 7.96, 8.06, 8.16, 8.25, 8.35, 8.45, 8.56,
    8.66, 8.76, 8.87, 8.98, 9.09, 9.20, 9.31, 9.42, 9.53, 9.65, 9.76, 9.88,
)  # fmt: skip

#: Series name -> mantissas of one decade, ``1.0 <= m < 10`` (IEC 60063:2015).
SERIES = MappingProxyType({"E6": _E6, "E12": _E12, "E24": _E24, "E48": _E48, "E96": _E96, "E192": _E192})

#: Names accepted wherever a series is chosen; ``"none"`` keeps values as computed.
SERIES_NAMES = (*SERIES, "none")

#: The tolerance usually sold with each series, as a fraction (IEC 60063 pairs
#: E6 with 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %, E192 0.5 % or better).
TOLERANCE = MappingProxyType({"E6": 0.2, "E12": 0.1, "E24": 0.05, "E48": 0.02, "E96": 0.01, "E192": 0.005})

# Mantissas as integers with their number of decimals (E6-E24: one, E48-E192: two),
# so that a value m x 10^d is built as the exact decimal m_int x 10^(d - decimals).
_DECIMALS = {"E6": 1, "E12": 1, "E24": 1, "E48": 2, "E96": 2, "E192": 2}
_INT = {name: np.array([round(m * 10 ** _DECIMALS[name]) for m in SERIES[name]], dtype=np.int64) for name in SERIES}
_POW10 = np.array([float(f"1e{k}") for k in range(23)])  # exact doubles 1e0 ... 1e22

# Two log distances closer than this (natural log) are a tie; ties go up.
_TIE = 1e-12

# Designators: a resistor is R followed by nothing, a digit, "_" or a lower-case
# letter (R1, R_led, Rpull); likewise C for capacitors (C1, Chf).  "CTR" (a ratio)
# is neither.
_RESISTOR = re.compile(r"^R(?:$|[0-9_a-z])")
_CAPACITOR = re.compile(r"^C(?:$|[0-9_a-z])")


def is_resistor(designator: str) -> bool:
    """True for a resistor designator (``R1``, ``R2``, ``Rpull``, ``R_led``)."""
    return bool(_RESISTOR.match(designator))


def is_capacitor(designator: str) -> bool:
    """True for a capacitor designator (``C1``, ``Chf``); ``CTR`` is not one."""
    return bool(_CAPACITOR.match(designator))


def _check_series(series: str, allow_none: bool = True) -> None:
    names = SERIES_NAMES if allow_none else tuple(SERIES)
    if series not in names:
        raise DesignError("series", series, f"must be one of {', '.join(names)}")


def _decimal_values(ints: np.ndarray, exponents: np.ndarray) -> np.ndarray:
    """``ints * 10**exponents`` as the doubles nearest to those decimals.

    Dividing or multiplying two exactly representable numbers is correctly
    rounded in IEEE arithmetic, and 10**k is exact for 0 <= k <= 22, so the
    result equals the Python literal (e.g. 47 x 10^-7 -> 4.7e-06).
    """
    ints = np.asarray(ints, dtype=float)
    exponents = np.asarray(exponents, dtype=np.int64)
    k = np.clip(np.abs(exponents), 0, 22)
    exact = np.where(exponents >= 0, ints * _POW10[k], ints / _POW10[k])
    far = np.abs(exponents) > 22
    if np.any(far):  # beyond 1e+-22 the power of ten is inexact: let Python parse the decimal
        exact[far] = [float(f"{int(m)}e{int(e)}") for m, e in zip(ints[far], exponents[far])]
    return exact


@functools.lru_cache(maxsize=512)
def _table(series: str, d_lo: int, d_hi: int) -> np.ndarray:
    """All values of ``series`` with decade exponents d_lo ... d_hi, ascending (cached, read-only)."""
    decades = np.arange(d_lo, d_hi + 1)
    ints, exps = np.broadcast_arrays(_INT[series][None, :], decades[:, None] - _DECIMALS[series])
    table = _decimal_values(ints, exps).ravel()
    table.flags.writeable = False
    return table


def _positive_array(value, field: str) -> np.ndarray:
    x = np.asarray(value, dtype=float)
    bad = ~(np.isfinite(x) & (x > 0))
    if np.any(bad):
        first = x.ravel()[np.flatnonzero(bad.ravel())[0]]
        raise DesignError(
            field,
            format_value(float(first)) if np.isfinite(first) else repr(float(first)),
            "must be a finite value > 0 to pick a preferred value",
        )
    return x


def _decade(x: float) -> int:
    return math.floor(math.log10(x))


def values(series: str, lo: float, hi: float) -> np.ndarray:
    """Every preferred value of ``series`` from ``lo`` to ``hi`` (both included).

    Parameters
    ----------
    series : str
        ``"E6"``, ``"E12"``, ``"E24"``, ``"E48"``, ``"E96"`` or ``"E192"``.
    lo, hi : float
        Range in SI units (ohm or farad), ``0 < lo <= hi``.  A preferred value
        within 1e-9 (relative) of an end counts as inside.

    Returns
    -------
    ndarray
        Ascending values, each equal to its decimal literal (``values("E12", 1e3,
        1e4)`` ends with ``8200.0, 10000.0``).
    """
    _check_series(series, allow_none=False)
    lo_hi = _positive_array([lo, hi], "values range")
    lo, hi = float(lo_hi[0]), float(lo_hi[1])
    if hi < lo:
        raise DesignError("values range", f"{format_value(lo)} .. {format_value(hi)}", "needs lo <= hi")
    table = _table(series, _decade(lo) - 1, _decade(hi) + 1)
    keep = (table >= lo * (1 - 1e-9)) & (table <= hi * (1 + 1e-9))
    return table[keep]


def _snap_array(x: np.ndarray, series: str) -> np.ndarray:
    flat = x.ravel()
    if flat.size == 0:
        return x.copy()
    table = _table(series, _decade(float(flat.min())) - 1, _decade(float(flat.max())) + 1)
    idx = np.searchsorted(table, flat, side="left")  # table[idx-1] < x <= table[idx]
    upper = table[idx]
    lower = table[idx - 1]
    d_up = np.log(upper / flat)
    d_down = np.log(flat / lower)
    out = np.where(d_up <= d_down + _TIE, upper, lower)
    return out.reshape(x.shape)


def snap(value, series: str):
    """The preferred value of ``series`` nearest to ``value`` by ratio.

    Parameters
    ----------
    value : float or array_like
        Part value(s) in ohm or farad, > 0.
    series : str
        One of :data:`SERIES_NAMES`; ``"none"`` returns ``value`` unchanged.

    Returns
    -------
    float or ndarray
        Same shape as ``value``.  Nearest means smallest ``|ln(snapped / value)|``;
        at the geometric midpoint of two neighbours (within 1e-12 in ln) the
        upper one is taken.

    Examples
    --------
    >>> snap(9.9e3, "E12")
    10000.0
    >>> snap(4.4e-9, "E24")  # 4.3n and 4.7n meet at 4.496n
    4.3e-09
    """
    _check_series(series)
    if series == "none":
        return value
    x = _positive_array(value, "value")
    out = _snap_array(x, series)
    return float(out) if out.ndim == 0 else out


def neighbours(value: float, series: str) -> tuple[float, float]:
    """The preferred values just below and just above ``value``.

    Parameters
    ----------
    value : float
        Part value, > 0.
    series : str
        One of :data:`SERIES_NAMES`.

    Returns
    -------
    (below, above) : tuple of float
        Largest preferred value <= ``value`` and smallest >= ``value``.  When
        ``value`` is itself a preferred value (within 1e-9 relative) both are
        that value; with ``"none"`` both are ``value``.
    """
    _check_series(series)
    x = float(_positive_array(value, "value"))
    if series == "none":
        return x, x
    table = _table(series, _decade(x) - 1, _decade(x) + 1)
    near = np.flatnonzero(np.abs(table / x - 1) <= 1e-9)
    if near.size:
        v = float(table[near[0]])
        return v, v
    i = int(np.searchsorted(table, x))
    return float(table[i - 1]), float(table[i])


def snap_parts(parts: dict, resistor_series: str, capacitor_series: str) -> dict:
    """Snap every resistor and capacitor of a part list to its series.

    Parameters
    ----------
    parts : dict
        Designator -> value (ohm or farad).  Designators as in
        :func:`is_resistor` / :func:`is_capacitor`; anything else (``CTR``,
        ``gm``) is copied unchanged.
    resistor_series, capacitor_series : str
        One of :data:`SERIES_NAMES` each.

    Returns
    -------
    dict
        A new dict with the same keys in the same order.
    """
    for name, series in (
        ("compensator.resistor_series", resistor_series),
        ("compensator.capacitor_series", capacitor_series),
    ):
        if series not in SERIES_NAMES:
            raise DesignError(name, series, f"must be one of {', '.join(SERIES_NAMES)}")
    out = {}
    for key, value in parts.items():
        series = resistor_series if is_resistor(key) else capacitor_series if is_capacitor(key) else None
        if series is None:
            out[key] = value
            continue
        x = _positive_array(value, f"compensator.parts.{key}")
        out[key] = float(x) if series == "none" else float(_snap_array(x, series))
    return out


#: Thresholds of :func:`part_warnings` (common practice, no source).
C_MIN_F = 10e-12
R_MIN_OHM = 1e3
R_MAX_OHM = 1e6


def part_warnings(parts: dict) -> list[Finding]:
    """Warnings about part values that are hard to build as computed.

    A capacitor below 10 pF is comparable to the board's and the amplifier's
    stray capacitance, so the pole or zero it sets moves.  A resistor below
    1 kohm loads the error amplifier's output and the sensed node; above
    1 Mohm, bias and leakage currents and noise pickup become comparable to the
    signal current.  These limits are common practice, no source.

    Parameters
    ----------
    parts : dict
        Designator -> value in ohm or farad.

    Returns
    -------
    list of Finding
        Codes ``"capacitor-small"`` and ``"resistor-range"``, one per part.
    """
    findings = []
    for key, value in parts.items():
        if is_capacitor(key) and value < C_MIN_F:
            findings.append(
                Finding(
                    "capacitor-small",
                    f"{key} = {format_value(value, 'F')} is below 10 pF: stray capacitance of the board and the "
                    "amplifier is comparable and moves its pole/zero; raise the capacitor by lowering the "
                    "resistances (e.g. a smaller R1)",
                )
            )
        elif is_resistor(key) and not (R_MIN_OHM <= value <= R_MAX_OHM):
            side = (
                "below 1 kΩ: it loads the amplifier output and the sensed node"
                if value < R_MIN_OHM
                else ("above 1 MΩ: bias and leakage currents and noise pickup become significant")
            )
            findings.append(
                Finding(
                    "resistor-range",
                    f"{key} = {format_value(value, 'Ω')} is {side}; choose another impedance level (R1)",
                )
            )
    return findings
