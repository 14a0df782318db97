"""Part tolerances of a design: what varies from unit to unit, and by how much.

The design file's ``[tolerances]`` table (all optional)::

    [tolerances]
    distribution = "uniform"        # default for every entry: uniform | normal
    sigmas = 3                      # normal: the limits lie this many standard deviations out
    inductance = "20%"              # +-20 % about the design's value
    dcr = { min = "8m", max = "14m" }
    r_switch = { percent = 30, distribution = "normal" }
    ramp = "5%"                     # also sense_gain, r_rectifier, gbw, ctr, c_opto
    parts_from_series = true        # compensator parts get their E-series tolerance by default

    [[tolerances.output_caps]]      # one table per capacitor bank, in the stage's order
    capacitance = "10%"
    esr = "30%"
    derating = 0.6                  # capacitance at working voltage and temperature / marked value

    [tolerances.parts]              # overrides of the E-series default, per designator
    C1 = "5%"

    [[tolerances.temperature]]      # temperature corners: every draw is also analysed at each
    name = "-40 C"                  # the factors multiply the drawn values (your data: loopkit has none)
    capacitance = 0.85              # every bank's capacitance (esr likewise); or any key above
    esr = 3.0

An entry is ``"P%"`` (plus or minus P per cent of the design's value), or a table with
``percent`` or with ``min`` and ``max`` (values in the quantity's unit), and optionally its own
``distribution`` and ``sigmas``.  A normal distribution is truncated at the limits (the study's
extreme-value search walks the same box the draws fill).

Compensator parts default to the tolerance IEC 60063 pairs with the series they are snapped to
(E6 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %, E192 0.5 %: :data:`loopkit.eseries.TOLERANCE`).

A ceramic bank's ``derating`` is the user's factor for its capacitance at the working voltage and
temperature (loopkit ships no vendor data): it moves the bank's nominal capacitance and both its
limits.  It applies in tolerance studies; the nominal design is analysed at the marked value.

The reference voltage has no entry: with the divider fixed, a reference off its value moves the
output voltage, not the loop gain, and the operating point's output voltage is one value per
design.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import DesignError
from .eseries import TOLERANCE, is_capacitor, is_resistor
from .units import format_value, parse_value

__all__ = [
    "DISTRIBUTIONS",
    "QUANTITIES",
    "TEMPERATURE_KEYS",
    "Quantity",
    "Spread",
    "TemperatureCorner",
    "Tolerances",
    "draw_values",
    "parse_tolerances",
    "quantities",
    "temperature_factors",
    "tolerances_to_dict",
    "tolerances_toml",
]

#: Distributions an entry may ask for.
DISTRIBUTIONS = ("uniform", "normal")

#: Scalar quantities of ``[tolerances]``: key -> (the design field it varies, unit).
QUANTITIES = {
    "inductance": ("stage.inductance", "H"),
    "dcr": ("stage.dcr", "ohm"),
    "r_switch": ("stage.r_switch", "ohm"),
    "r_rectifier": ("stage.r_rectifier", "ohm"),
    "ramp": ("modulator.ramp", "V"),
    "sense_gain": ("control.sense_gain", "ohm"),
    "gbw": ("compensator.opamp.gbw", "Hz"),
    "ctr": ("compensator.opto.ctr", ""),
    "c_opto": ("compensator.opto.c_opto", "F"),
}
_BANK_KEYS = {"capacitance": "F", "esr": "ohm"}
_SIGMAS = (1.0, 6.0)


@dataclass(frozen=True)
class Spread:
    """One quantity's tolerance: ``percent`` about the nominal, or absolute ``low`` .. ``high``.

    ``distribution`` is ``"uniform"`` or ``"normal"`` (truncated at the limits, the limits
    ``sigmas`` standard deviations from the middle).
    """

    percent: float | None = None
    low: float | None = None
    high: float | None = None
    distribution: str = "uniform"
    sigmas: float = 3.0

    def limits(self, nominal: float) -> tuple[float, float]:
        """(low, high) for a design value ``nominal``."""
        if self.percent is not None:
            k = self.percent / 100.0
            return nominal * (1.0 - k), nominal * (1.0 + k)
        return float(self.low), float(self.high)


#: Keys a temperature corner may scale: the scalar quantities and every bank's capacitance and ESR.
TEMPERATURE_KEYS = (*QUANTITIES, "capacitance", "esr")
_FACTOR = (0.01, 100.0)


@dataclass(frozen=True)
class TemperatureCorner:
    """A named temperature corner: factors (key of :data:`TEMPERATURE_KEYS` -> multiplier) on the values."""

    name: str
    factors: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Tolerances:
    """The ``[tolerances]`` table: entries by quantity key, per-bank entries and deratings.

    Attributes
    ----------
    entries : dict
        Quantity key of :data:`QUANTITIES` -> :class:`Spread`.
    banks : tuple of dict
        Per capacitor bank, ``"capacitance"`` / ``"esr"`` -> :class:`Spread`.
    derating : tuple of float
        Per capacitor bank, capacitance at working conditions over the marked value (1 = none).
    parts : dict
        Designator -> :class:`Spread`, overriding the series default.
    parts_from_series : bool
        Compensator parts without an entry get their series' IEC 60063 tolerance.
    distribution, sigmas
        Defaults of the entries that name none (kept to write the file back).
    """

    entries: dict = field(default_factory=dict)
    banks: tuple = ()
    derating: tuple = ()
    parts: dict = field(default_factory=dict)
    parts_from_series: bool = True
    distribution: str = "uniform"
    sigmas: float = 3.0
    temperatures: tuple = ()

    @property
    def empty(self) -> bool:
        return (not (self.entries or any(self.banks) or self.parts or self.temperatures)
                and not any(d != 1.0 for d in self.derating))


@dataclass(frozen=True)
class Quantity:
    """One varied quantity of a study, resolved against a design.

    ``key`` names it (``inductance``, ``output_caps[0].capacitance``, ``parts.R2``);
    ``nominal`` is the design's value (derated for a bank's capacitance); ``low`` and ``high``
    the tolerance box's limits.
    """

    key: str
    nominal: float
    low: float
    high: float
    distribution: str
    sigmas: float
    unit: str


def _spread(value, where: str, unit: str, default_dist: str, default_sigmas: float, nonneg: bool) -> Spread:
    if isinstance(value, str):
        return Spread(percent=_percent(value, where), distribution=default_dist, sigmas=default_sigmas)
    if not isinstance(value, dict):
        raise DesignError(where, value, 'must be "P%" or a table with percent, or min and max')
    allowed = {"percent", "min", "max", "distribution", "sigmas"}
    for key in value:
        if key not in allowed:
            raise DesignError(f"{where}.{key}", value[key], f"unknown key; allowed here: {', '.join(sorted(allowed))}")
    dist = value.get("distribution", default_dist)
    if dist not in DISTRIBUTIONS:
        raise DesignError(f"{where}.distribution", dist, f"must be one of {', '.join(DISTRIBUTIONS)}")
    sigmas = _sigmas(value.get("sigmas", default_sigmas), f"{where}.sigmas")
    if "percent" in value:
        if "min" in value or "max" in value:
            raise DesignError(f"{where}.percent", value["percent"], "give percent or min and max, not both")
        return Spread(percent=_percent(value["percent"], f"{where}.percent"), distribution=dist, sigmas=sigmas)
    if "min" not in value or "max" not in value:
        raise DesignError(where, "(incomplete)", "give percent, or both min and max")
    lo = parse_value(value["min"], f"{where}.min", unit or None)
    hi = parse_value(value["max"], f"{where}.max", unit or None)
    if not (np.isfinite(lo) and np.isfinite(hi)):
        raise DesignError(f"{where}.min", value["min"], "must be finite")
    if lo < 0 or (lo == 0 and not nonneg):
        raise DesignError(f"{where}.min", value["min"], "must be >= 0" if nonneg else "must be > 0")
    if not hi >= lo:
        raise DesignError(f"{where}.max", value["max"], f"must be >= min ({format_value(lo, unit)})")
    return Spread(low=lo, high=hi, distribution=dist, sigmas=sigmas)


def _percent(value, where: str) -> float:
    if isinstance(value, str):
        text = value.strip().lstrip("±").replace("+-", "").strip()
        if not text.endswith("%"):
            raise DesignError(where, value, 'a tolerance in text is "P%" (e.g. "20%")')
        try:
            p = float(text[:-1])
        except ValueError:
            raise DesignError(where, value, 'must be "P%" with P a number from 0 to below 100') from None
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        p = float(value)
    else:
        raise DesignError(where, value, "must be a percentage from 0 to below 100")
    if not (np.isfinite(p) and 0.0 <= p < 100.0):
        raise DesignError(where, value, "must be from 0 % to below 100 % (a part cannot reach zero or less)")
    return p


def _sigmas(value, where: str) -> float:
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not _SIGMAS[0] <= value <= _SIGMAS[1]:
        raise DesignError(where, value, f"must be a number of standard deviations from {_SIGMAS[0]:g} to {_SIGMAS[1]:g}")
    return float(value)


def parse_tolerances(table, n_banks: int) -> Tolerances:
    """The ``[tolerances]`` table of a design file as :class:`Tolerances`.

    Parameters
    ----------
    table : dict
        The parsed TOML table.
    n_banks : int
        Number of the stage's capacitor banks (``[[tolerances.output_caps]]`` may not have more).

    Raises
    ------
    DesignError
        Naming the key, the value and what is allowed.
    """
    where = "tolerances"
    if not isinstance(table, dict):
        raise DesignError(where, table, "must be a table ([tolerances])")
    allowed = set(QUANTITIES) | {"distribution", "sigmas", "output_caps", "parts", "parts_from_series",
                                 "temperature"}
    for key in table:
        if key not in allowed:
            raise DesignError(f"{where}.{key}", table[key], f"unknown key; allowed here: {', '.join(sorted(allowed))}")
    dist = table.get("distribution", "uniform")
    if dist not in DISTRIBUTIONS:
        raise DesignError(f"{where}.distribution", dist, f"must be one of {', '.join(DISTRIBUTIONS)}")
    sigmas = _sigmas(table.get("sigmas", 3.0), f"{where}.sigmas")
    from_series = table.get("parts_from_series", True)
    if not isinstance(from_series, bool):
        raise DesignError(f"{where}.parts_from_series", from_series, "must be true or false")
    entries = {}
    for key, (_, unit) in QUANTITIES.items():
        if key in table:
            nonneg = key in ("dcr", "r_switch", "r_rectifier", "c_opto")
            entries[key] = _spread(table[key], f"{where}.{key}", unit, dist, sigmas, nonneg)
    raw_banks = table.get("output_caps", [])
    if isinstance(raw_banks, dict):
        raw_banks = [raw_banks]
    if not isinstance(raw_banks, list):
        raise DesignError(f"{where}.output_caps", raw_banks, "must be [[tolerances.output_caps]] tables")
    if len(raw_banks) > n_banks:
        raise DesignError(f"{where}.output_caps", f"({len(raw_banks)} tables)",
                          f"at most one per capacitor bank of the stage ({n_banks})")
    banks, derating = [], []
    for i, bank in enumerate(raw_banks):
        w = f"{where}.output_caps[{i}]"
        if not isinstance(bank, dict):
            raise DesignError(w, bank, "must be a table with capacitance, esr, derating")
        for key in bank:
            if key not in ("capacitance", "esr", "derating"):
                raise DesignError(f"{w}.{key}", bank[key], "unknown key; allowed here: capacitance, derating, esr")
        banks.append({k: _spread(bank[k], f"{w}.{k}", u, dist, sigmas, k == "esr") for k, u in _BANK_KEYS.items()
                      if k in bank})
        d = bank.get("derating", 1.0)
        if not isinstance(d, (int, float)) or isinstance(d, bool) or not 0.0 < d <= 1.0:
            raise DesignError(f"{w}.derating", d, "must be a factor above 0 and at most 1 (capacitance at working"
                              " voltage and temperature over the marked value)")
        derating.append(float(d))
    raw_parts = table.get("parts", {})
    if not isinstance(raw_parts, dict):
        raise DesignError(f"{where}.parts", raw_parts, "must be a table of designator = tolerance")
    parts = {}
    for name, value in raw_parts.items():
        unit = "ohm" if is_resistor(name) else "F" if is_capacitor(name) else ""
        parts[name] = _spread(value, f"{where}.parts.{name}", unit, dist, sigmas, False)
    return Tolerances(entries=entries, banks=tuple(banks), derating=tuple(derating), parts=parts,
                      parts_from_series=from_series, distribution=dist, sigmas=sigmas,
                      temperatures=_temperatures(table.get("temperature", [])))


def _temperatures(raw) -> tuple:
    where = "tolerances.temperature"
    if isinstance(raw, dict):
        raw = [raw]
    if not isinstance(raw, list):
        raw = [raw]
    out, names = [], set()
    for i, corner in enumerate(raw):
        w = f"{where}[{i}]"
        if not isinstance(corner, dict):
            raise DesignError(w, corner, "must be a [[tolerances.temperature]] table with name and factors")
        name = corner.get("name")
        if not isinstance(name, str) or not name.strip():
            raise DesignError(f"{w}.name", name if name is not None else "(missing)", "give the corner a name (text)")
        if name in names:
            raise DesignError(f"{w}.name", name, "each temperature corner needs its own name")
        names.add(name)
        factors = {}
        for key, value in corner.items():
            if key == "name":
                continue
            if key not in TEMPERATURE_KEYS:
                raise DesignError(f"{w}.{key}", value, f"unknown key; allowed here: name, {', '.join(TEMPERATURE_KEYS)}")
            if not isinstance(value, (int, float)) or isinstance(value, bool) or not _FACTOR[0] <= value <= _FACTOR[1]:
                raise DesignError(f"{w}.{key}", value, f"must be a factor from {_FACTOR[0]:g} to {_FACTOR[1]:g}")
            factors[key] = float(value)
        out.append(TemperatureCorner(name, factors))
    return tuple(out)


def temperature_factors(qs: list[Quantity], tol: Tolerances) -> np.ndarray:
    """Multipliers of each quantity at each temperature corner, (corners, quantities); one row of ones
    when the design has none.  ``capacitance`` and ``esr`` apply to every bank."""
    if not tol.temperatures:
        return np.ones((1, len(qs)))
    out = np.ones((len(tol.temperatures), len(qs)))
    for t, corner in enumerate(tol.temperatures):
        for j, q in enumerate(qs):
            key = q.key.rpartition(".")[2] if q.key.startswith("output_caps[") else q.key
            out[t, j] = corner.factors.get(key, 1.0)
    return out


def _spread_to_dict(s: Spread, tol: Tolerances):
    extra = {}
    if s.distribution != tol.distribution:
        extra["distribution"] = s.distribution
    if s.sigmas != tol.sigmas:
        extra["sigmas"] = s.sigmas
    if s.percent is not None:
        return {"percent": s.percent, **extra} if extra else f"{s.percent!r}%"
    return {"min": s.low, "max": s.high, **extra}


def tolerances_to_dict(tol: Tolerances) -> dict:
    """The TOML table of :class:`Tolerances` (values in SI; the inverse of :func:`parse_tolerances`)."""
    out: dict = {}
    if tol.distribution != "uniform":
        out["distribution"] = tol.distribution
    if tol.sigmas != 3.0:
        out["sigmas"] = tol.sigmas
    if not tol.parts_from_series:
        out["parts_from_series"] = False
    for key, s in tol.entries.items():
        out[key] = _spread_to_dict(s, tol)
    if tol.banks or tol.derating:
        banks = []
        for i in range(max(len(tol.banks), len(tol.derating))):
            b = {k: _spread_to_dict(s, tol) for k, s in (tol.banks[i] if i < len(tol.banks) else {}).items()}
            d = tol.derating[i] if i < len(tol.derating) else 1.0
            if d != 1.0:
                b["derating"] = d
            banks.append(b)
        out["output_caps"] = banks
    if tol.parts:
        out["parts"] = {k: _spread_to_dict(s, tol) for k, s in tol.parts.items()}
    if tol.temperatures:
        out["temperature"] = [{"name": c.name, **c.factors} for c in tol.temperatures]
    return out


def _field_value(design, path: str) -> float | None:
    section, _, rest = path.partition(".")
    obj = getattr(design, section)
    for name in rest.split("."):
        obj = obj.get(name) if isinstance(obj, dict) else getattr(obj, name, None)
        if obj is None:
            return None
    return float(obj)


def quantities(design, tolerances: Tolerances | None = None, parts: dict | None = None) -> list[Quantity]:
    """Every varied quantity of a study, resolved against ``design``.

    Parameters
    ----------
    design : Design
    tolerances : Tolerances, optional
        Default: ``design.tolerances``.
    parts : dict, optional
        The compensator's parts (designator -> value); default the design's own.  Parts get their
        entry in ``tolerances.parts`` or, with ``parts_from_series``, the IEC 60063 tolerance of
        the series they are snapped to (no tolerance for the series ``none``).

    Returns
    -------
    list of Quantity
        In a fixed order: the scalar quantities, the banks, then the parts (sorted).  A bank's
        derating alone (no capacitance tolerance) gives a quantity of zero width.

    Raises
    ------
    DesignError
        An entry for a quantity the design does not have (e.g. ``sense_gain`` in voltage mode),
        or limits that leave the quantity's physical range.
    """
    tol = tolerances if tolerances is not None else getattr(design, "tolerances", Tolerances())
    out = []
    for key, spread in tol.entries.items():
        path, unit = QUANTITIES[key]
        nominal = _field_value(design, path)
        shown = f"{spread.percent:g}%" if spread.percent is not None else f"{spread.low:g} .. {spread.high:g}"
        if key == "sense_gain" and design.control.scheme != "peak-current":
            raise DesignError(f"tolerances.{key}", shown, "applies to peak current mode only")
        if key == "ramp" and design.control.scheme != "voltage-mode":
            raise DesignError(f"tolerances.{key}", shown, "applies to voltage mode only")
        if key in ("ctr", "c_opto") and design.compensator.network != "opto-type2":
            raise DesignError(f"tolerances.{key}", shown, "applies to the opto-type2 network only")
        if key == "gbw" and not nominal:
            raise DesignError(f"tolerances.{key}", shown, "the design's amplifier has no finite gbw")
        if nominal is None:
            raise DesignError(f"tolerances.{key}", shown, f"the design has no {path}")
        lo, hi = spread.limits(nominal)
        out.append(Quantity(key, nominal, lo, hi, spread.distribution, spread.sigmas, unit))
    for i, bank in enumerate(design.stage.output_caps):
        entries = tol.banks[i] if i < len(tol.banks) else {}
        d = tol.derating[i] if i < len(tol.derating) else 1.0
        for name, unit in _BANK_KEYS.items():
            spread = entries.get(name)
            nominal = float(getattr(bank, name)) * (d if name == "capacitance" else 1.0)
            if spread is None and not (name == "capacitance" and d != 1.0):
                continue
            if spread is None:
                lo = hi = nominal
                dist, sig = tol.distribution, tol.sigmas
            else:
                lo, hi = spread.limits(float(getattr(bank, name)))
                if name == "capacitance":
                    lo, hi = lo * d, hi * d
                dist, sig = spread.distribution, spread.sigmas
            out.append(Quantity(f"output_caps[{i}].{name}", nominal, lo, hi, dist, sig, unit))
    parts = design.compensator.parts if parts is None else parts
    comp = design.compensator
    for name in sorted(tol.parts):
        if name not in parts:
            raise DesignError(f"tolerances.parts.{name}", name,
                              f"not a part of this network ({', '.join(sorted(parts)) or 'no parts yet'})")
    for name in sorted(parts):
        spread = tol.parts.get(name)
        unit = "ohm" if is_resistor(name) else "F" if is_capacitor(name) else ""
        if spread is None and tol.parts_from_series and unit:
            series = comp.resistor_series if unit == "ohm" else comp.capacitor_series
            if series in TOLERANCE:
                spread = Spread(percent=100.0 * TOLERANCE[series], distribution=tol.distribution, sigmas=tol.sigmas)
        if spread is None:
            continue
        nominal = float(parts[name])
        lo, hi = spread.limits(nominal)
        out.append(Quantity(f"parts.{name}", nominal, lo, hi, spread.distribution, spread.sigmas, unit))
    for q in out:
        if q.low < 0 or (q.low == 0 and q.nominal > 0 and q.key not in ("dcr", "r_switch", "r_rectifier", "c_opto")
                         and not q.key.endswith(".esr")):
            raise DesignError(f"tolerances.{q.key}", format_value(q.low, q.unit),
                              "the lower limit must stay above zero: give a smaller tolerance")
    return out


def draw_values(qs: list[Quantity], n: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` random draws of every quantity, shape (n, len(qs)).

    Uniform: ``low + (high - low) u``; normal: the middle plus ``(high - low) / (2 sigmas)``
    times the standard normal truncated at ``+-sigmas`` (inverse-CDF sampling of
    :func:`scipy.stats.truncnorm`).  One uniform number per draw and quantity, taken row by row
    from ``rng``, so a given random state gives the same draws.
    """
    from scipy.stats import truncnorm

    u = rng.random((n, len(qs)))
    out = np.empty_like(u)
    for j, q in enumerate(qs):
        if q.distribution == "normal" and q.high > q.low:
            z = truncnorm.ppf(u[:, j], -q.sigmas, q.sigmas)
            out[:, j] = 0.5 * (q.low + q.high) + z * (q.high - q.low) / (2.0 * q.sigmas)
        else:
            out[:, j] = q.low + (q.high - q.low) * u[:, j]
    return out


def _inline(value) -> str:
    if isinstance(value, str):
        return '"' + value + '"'
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_inline(v)}" for k, v in value.items()) + " }"
    return repr(float(value)) if isinstance(value, float) else str(value)


def tolerances_toml(table: dict) -> str:
    """TOML text of the table :func:`tolerances_to_dict` gives (inline tables for min/max entries)."""
    lines = ["[tolerances]"]
    lines += [f"{k} = {_inline(v)}" for k, v in table.items() if k not in ("output_caps", "parts", "temperature")]
    lines.append("")
    for bank in table.get("output_caps", []):
        lines.append("[[tolerances.output_caps]]")
        lines += [f"{k} = {_inline(v)}" for k, v in bank.items()]
        lines.append("")
    if table.get("parts"):
        lines.append("[tolerances.parts]")
        lines += [f"{k} = {_inline(v)}" for k, v in table["parts"].items()]
        lines.append("")
    for corner in table.get("temperature", []):
        lines.append("[[tolerances.temperature]]")
        lines += [f'name = {_toml_text(corner["name"])}'] + [f"{k} = {v!r}" for k, v in corner.items() if k != "name"]
        lines.append("")
    return "\n".join(lines)


def _toml_text(text: str) -> str:
    import json

    return json.dumps(text, ensure_ascii=False)  # a JSON string is a TOML basic string
