"""The design file: TOML in, TOML out, validated, saved atomically.

Format (version 1)::

    format = "loopkit-design"
    version = 1
    title = "24 V bus to 3.3 V / 3 A synchronous buck"

    [stage]
    topology = "buck"            # buck | boost | inverting-buck-boost |
                                 # four-switch-buck-boost | flyback
    fsw = "400k"                 # Hz
    inductance = "4.7u"          # H (flyback: magnetising, primary side)
    dcr = "12m"                  # ohm
    r_switch = "15m"             # ohm
    rectifier = "synchronous"    # synchronous | diode
    r_rectifier = "8m"           # ohm
    diode_drop = "0.45"          # V, diode only
    light_load = "forced-ccm"    # forced-ccm | dcm
    turns_ratio = 4              # flyback Np/Ns
    [[stage.output_caps]]        # one table per bank
    capacitance = "22u"
    esr = "3m"
    count = 4

    [operating]
    vout = "3.3"
    vin = ["18", "24", "36"]     # or vin_min, vin_max, vin_points (and vin_nominal)
    load = ["0.3", "3"]          # or load_min, load_max, load_points

    [sensing] / [modulator] / [compensator] (with [compensator.parts],
    [compensator.opamp], [compensator.placement], [compensator.opto])

Numbers may be TOML numbers or strings in engineering notation (``"22u"``,
``"4.7k"``, ``"400kHz"``).  Every error names the file, the key, the value and
what is allowed.
"""

from __future__ import annotations

import os
import tempfile
import tomllib
from dataclasses import fields
from pathlib import Path

import numpy as np

from .design import CapacitorBank, Compensator, Design, Modulator, Operating, OpAmp, Sensing, Stage
from .errors import DesignError, DesignFileError
from .units import format_value, parse_value

__all__ = ["load_design", "loads_design", "save_design", "dumps_design", "design_from_dict", "design_to_dict"]

FORMAT = "loopkit-design"
VERSION = 1

_TEXT = {"topology", "rectifier", "light_load", "kind", "network", "method", "resistor_series", "capacitor_series"}
_UNITS = {
    "fsw": "Hz", "inductance": "H", "dcr": "ohm", "r_switch": "ohm", "r_rectifier": "ohm",
    "diode_drop": "V", "capacitance": "F", "esr": "ohm", "vout": "V", "vin": "V", "load": "A",
    "reference": "V", "r_top": "ohm", "divider_current": "A", "diff_bandwidth": "Hz", "ramp": "V",
    "fc": "Hz", "gbw": "Hz", "r_out": "ohm",
}


def _check_keys(table: dict, allowed: set, where: str) -> None:
    for key in table:
        if key not in allowed:
            raise DesignError(f"{where}.{key}" if where else key, table[key],
                              f"unknown key; allowed here: {', '.join(sorted(allowed))}")


def _number(table: dict, key: str, where: str, default=None):
    if key not in table:
        return default
    return parse_value(table[key], f"{where}.{key}", _UNITS.get(key))


def _section(cls, table: dict, where: str, extra: dict | None = None, skip: tuple = ()):
    """Build a dataclass from a TOML table: numbers parsed, text kept, keys checked."""
    names = {f.name for f in fields(cls)} - set(skip)
    _check_keys(table, names | set(extra or {}), where)
    kwargs = {}
    for f in fields(cls):
        if f.name in skip or f.name in (extra or {}) or f.name not in table:
            continue
        value = table[f.name]
        if f.name in _TEXT:
            if not isinstance(value, str):
                raise DesignError(f"{where}.{f.name}", value, "must be text")
            kwargs[f.name] = value
        elif f.name in ("feedforward",):
            if not isinstance(value, bool):
                raise DesignError(f"{where}.{f.name}", value, "must be true or false")
            kwargs[f.name] = value
        else:
            kwargs[f.name] = _number(table, f.name, where)
    kwargs.update(extra or {})
    return cls(**kwargs)


def _list_or_range(table: dict, key: str, where: str, log: bool) -> tuple[float, ...]:
    if key in table:
        values = table[key]
        if not isinstance(values, list):
            values = [values]
        return tuple(parse_value(v, f"{where}.{key}[{i}]", _UNITS[key]) for i, v in enumerate(values))
    lo_key, hi_key, n_key = f"{key}_min", f"{key}_max", f"{key}_points"
    if lo_key not in table or hi_key not in table:
        raise DesignError(f"{where}.{key}", "(missing)", f"give a list {key} = [...] or {lo_key} and {hi_key}")
    lo = parse_value(table[lo_key], f"{where}.{lo_key}", _UNITS[key])
    hi = parse_value(table[hi_key], f"{where}.{hi_key}", _UNITS[key])
    if not hi >= lo:
        raise DesignError(f"{where}.{hi_key}", table[hi_key], f"must be >= {where}.{lo_key} ({table[lo_key]})")
    n = table.get(n_key, 3 if key == "vin" else 2)
    if not isinstance(n, int) or n < 1 or n > 1000:
        raise DesignError(f"{where}.{n_key}", n, "must be a whole number from 1 to 1000")
    if n == 1 or hi == lo:
        return (lo,) if hi == lo else (lo, hi)[:n]
    if log and lo > 0:
        return tuple(float(v) for v in np.geomspace(lo, hi, n))
    return tuple(float(v) for v in np.linspace(lo, hi, n))


def design_from_dict(data: dict) -> Design:
    """Validate a parsed TOML document and build the :class:`Design`."""
    top = {"format", "version", "title", "stage", "operating", "sensing", "modulator", "compensator"}
    _check_keys(data, top, "")
    if data.get("format", FORMAT) != FORMAT:
        raise DesignError("format", data["format"], f"must be {FORMAT!r}")
    version = data.get("version", VERSION)
    if version != VERSION:
        raise DesignError("version", version, f"this loopkit reads version {VERSION}")
    for name in ("stage", "operating"):
        if name not in data:
            raise DesignError(name, "(missing)", f"the [{name}] table is required")
    st = data["stage"]
    if not isinstance(st, dict):
        raise DesignError("stage", st, "must be a table")
    caps_raw = st.get("output_caps")
    if caps_raw is None:
        raise DesignError("stage.output_caps", "(missing)", "give at least one [[stage.output_caps]] bank")
    if isinstance(caps_raw, dict):
        caps_raw = [caps_raw]
    banks = []
    for i, bank in enumerate(caps_raw):
        where = f"stage.output_caps[{i}]"
        _check_keys(bank, {"capacitance", "esr", "count"}, where)
        if "capacitance" not in bank:
            raise DesignError(f"{where}.capacitance", "(missing)", "is required")
        count = bank.get("count", 1)
        if not isinstance(count, int) or isinstance(count, bool):
            raise DesignError(f"{where}.count", count, "must be a whole number >= 1")
        banks.append(CapacitorBank(_number(bank, "capacitance", where), _number(bank, "esr", where, 0.0), count))
    for key in ("topology", "fsw", "inductance"):
        if key not in st:
            raise DesignError(f"stage.{key}", "(missing)", "is required")
    stage = _section(Stage, st, "stage", extra={"output_caps": tuple(banks)})

    op = data["operating"]
    allowed = {"vout", "vin", "vin_min", "vin_max", "vin_points", "vin_nominal",
               "load", "load_min", "load_max", "load_points"}
    _check_keys(op, allowed, "operating")
    if "vout" not in op:
        raise DesignError("operating.vout", "(missing)", "is required")
    vin = _list_or_range(op, "vin", "operating", log=False)
    nominal = _number(op, "vin_nominal", "operating") if "vin_nominal" in op else None
    if nominal is not None and "vin" not in op and min(vin) <= nominal <= max(vin) and nominal not in vin:
        vin = tuple(sorted(vin + (nominal,)))  # a range always includes its nominal input
    operating = Operating(
        vout=_number(op, "vout", "operating"),
        vin=vin,
        load=_list_or_range(op, "load", "operating", log=True),
        vin_nominal=nominal,
    )
    sensing = _section(Sensing, data.get("sensing", {}), "sensing")
    modulator = _section(Modulator, data.get("modulator", {}), "modulator")
    compensator = _compensator(data.get("compensator", {}))
    title = data.get("title", "")
    if not isinstance(title, str):
        raise DesignError("title", title, "must be text")
    return Design(stage, operating, sensing, modulator, compensator, title)


def _compensator(table: dict) -> Compensator:
    where = "compensator"
    sub = {}
    parts = table.get("parts", {})
    sub["parts"] = {k: parse_value(v, f"{where}.parts.{k}") for k, v in parts.items()}
    sub["placement"] = {k: parse_value(v, f"{where}.placement.{k}") for k, v in table.get("placement", {}).items()}
    sub["opto"] = {k: parse_value(v, f"{where}.opto.{k}") for k, v in table.get("opto", {}).items()}
    sub["opamp"] = _section(OpAmp, table.get("opamp", {}), f"{where}.opamp")
    corner = table.get("design_corner", "worst")
    if corner == "worst":
        corner = None
    elif not isinstance(corner, int) or isinstance(corner, bool):
        raise DesignError(f"{where}.design_corner", corner, "must be 'worst' or a corner index")
    sub["design_corner"] = corner
    rest = {k: v for k, v in table.items() if k not in sub}
    return _section(Compensator, rest, where, extra=sub, skip=tuple(sub))


def loads_design(text: str, file: str = "<text>") -> Design:
    """Parse TOML text into a :class:`Design`; errors carry ``file``."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise DesignFileError(file, "", "(TOML)", f"not valid TOML: {exc}") from None
    try:
        return design_from_dict(data)
    except DesignFileError:
        raise
    except DesignError as exc:
        raise DesignFileError(file, exc.field, exc.value, exc.allowed) from None


def load_design(path) -> Design:
    """Read and validate a design file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise DesignFileError(str(path), "", "(file)", f"cannot be read: {exc.strerror}") from None
    return loads_design(text, str(path))


# ---------------------------------------------------------------------- writing
def _exact(value: float) -> str:
    """Engineering text that parses back to exactly ``value``."""
    for digits in range(4, 18):
        text = format_value(value, digits=digits, ascii_only=True)
        if parse_value(text) == value:
            return text
    return repr(float(value))


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        escaped = value.replace("\\", "\\\\").replace('"', '\\"')
        return f'"{escaped}"'
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return f'"{_exact(value)}"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {value!r}")


def design_to_dict(design: Design) -> dict:
    """The TOML document of a design, as nested dicts (values in SI)."""
    st = design.stage
    stage = {f.name: getattr(st, f.name) for f in fields(Stage) if f.name != "output_caps"}
    stage["output_caps"] = [{"capacitance": b.capacitance, "esr": b.esr, "count": b.count} for b in st.output_caps]
    op = design.operating
    operating = {"vout": op.vout, "vin": list(op.vin), "load": list(op.load)}
    if op.vin_nominal is not None:
        operating["vin_nominal"] = op.vin_nominal
    comp = design.compensator
    compensator = {f.name: getattr(comp, f.name) for f in fields(Compensator)
                   if f.name not in ("parts", "placement", "opto", "opamp", "design_corner")}
    compensator["design_corner"] = "worst" if comp.design_corner is None else comp.design_corner
    compensator["opamp"] = {f.name: getattr(comp.opamp, f.name) for f in fields(OpAmp)}
    for name in ("parts", "placement", "opto"):
        if getattr(comp, name):
            compensator[name] = dict(getattr(comp, name))
    return {
        "format": FORMAT,
        "version": VERSION,
        "title": design.title,
        "stage": stage,
        "operating": operating,
        "sensing": {f.name: getattr(design.sensing, f.name) for f in fields(Sensing)},
        "modulator": {f.name: getattr(design.modulator, f.name) for f in fields(Modulator)},
        "compensator": compensator,
    }


def dumps_design(design: Design) -> str:
    """TOML text of a design; ``loads_design(dumps_design(d)) == d``."""
    data = design_to_dict(design)
    lines = ["# loopkit design file: a design aid; verify every result on the bench.", ""]

    def table(name: str, body: dict) -> None:
        simple = {k: v for k, v in body.items() if not isinstance(v, (dict, list)) or
                  (isinstance(v, list) and not (v and isinstance(v[0], dict)))}
        lines.append(f"[{name}]")
        for k, v in simple.items():
            lines.append(f"{k} = {_toml_value(v)}")
        lines.append("")
        for k, v in body.items():
            if isinstance(v, dict):
                table(f"{name}.{k}", v)
            elif isinstance(v, list) and v and isinstance(v[0], dict):
                for item in v:
                    lines.append(f"[[{name}.{k}]]")
                    lines.extend(f"{ik} = {_toml_value(iv)}" for ik, iv in item.items())
                    lines.append("")

    for key in ("format", "version", "title"):
        lines.append(f"{key} = {_toml_value(data[key])}")
    lines.append("")
    for key in ("stage", "operating", "sensing", "modulator", "compensator"):
        table(key, data[key])
    return "\n".join(lines).rstrip() + "\n"


def save_design(design: Design, path) -> None:
    """Write a design file atomically: a temporary file beside it, then rename."""
    path = Path(path)
    text = dumps_design(design)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent or ".")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
