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
``"4.7k"``, ``"400kHz"``); a unit letter must match the field (``"22uF"`` is
refused for an inductance; parts take ohms for R designators, farads for C).
Every error names the file, the key, the value as written and what is allowed.

Ranges: give either a list (``vin = [...]``) or ``vin_min``/``vin_max`` with
``vin_points`` (default 3, at least 2 unless min = max), linearly spaced, ends
exact; ``vin_nominal`` must lie in the range and becomes a corner of its own.
Loads likewise (``load_points`` default 2), geometrically spaced.  A saved file
holds the explicit lists, so it reads back to the same corners.

Writing (:func:`dumps_design`, :func:`save_design`) gives the exact design back
on reading; fields at their default that do not apply to the design (e.g. the
turns ratio of a buck) are left out so the file reads cleanly.
"""

from __future__ import annotations

import math
import os
import re
import stat
import tomllib
from dataclasses import MISSING, fields, replace
from pathlib import Path

import numpy as np

from . import bounds
from .bounds import MAX_CORNERS, MAX_FILE_BYTES
from .design import (
    FILE_KEYS,
    CapacitorBank,
    Compensator,
    Control,
    Design,
    Digital,
    Modulator,
    OpAmp,
    Operating,
    Sensing,
    Stage,
)
from .errors import DesignError, DesignFileError, shorten
from .eseries import is_capacitor, is_resistor
from .losses import Losses, losses_from_table, losses_to_table
from .networks import network_module
from .networks.opto_type2 import OPTO_KEYS
from .tolerances import Tolerances, parse_tolerances, tolerances_to_dict, tolerances_toml
from .units import format_value, parse_value

__all__ = ["design_from_dict", "design_to_dict", "dumps_design", "load_design", "loads_design", "save_design"]

FORMAT = "loopkit-design"
VERSION = 1

_TEXT = {"topology", "rectifier", "light_load", "kind", "network", "method", "resistor_series", "capacitor_series",
         "scheme", "update", "carrier", "form"}
_UNITS = {
    "fsw": "Hz",
    "inductance": "H",
    "dcr": "ohm",
    "r_switch": "ohm",
    "r_rectifier": "ohm",
    "diode_drop": "V",
    "capacitance": "F",
    "esr": "ohm",
    "vout": "V",
    "vin": "V",
    "load": "A",
    "reference": "V",
    "r_top": "ohm",
    "divider_current": "A",
    "diff_bandwidth": "Hz",
    "ramp": "V",
    "fc": "Hz",
    "gbw": "Hz",
    "r_out": "ohm",
    "sense_gain": "ohm",
    "slope": "V/s",
    "slope_amplitude": "V",
    "current_limit": "A",
    "adc_range": "V",
    "anti_alias": "Hz",
    "computation_delay": "s",
    "pwm_clock": "Hz",
}
#: Dimensionless fields written as plain TOML numbers (the rest as engineering text).
_PLAIN_NUMBERS = {
    "pm",
    "gm_db",
    "fc_band",
    "max_duty",
    "turns_ratio",
    "buck_max_duty",
    "boost_min_duty",
    "boost_split",
    "gain_db",
    "ctr",
    "gain",
    "slope_ratio",
}
#: Keys of [compensator.placement], all in Hz (the gain is always the one that puts the crossover at fc).
PLACEMENT_KEYS = ("fz", "fp", "fz1", "fz2", "fp1", "fp2")


def _table(value, where: str, header: str = "") -> dict:
    if not isinstance(value, dict):
        shown = "(a list of tables)" if isinstance(value, list) else value
        raise DesignError(where, shown, f"must be a table ({header or f'[{where}]'})")
    return value


def _check_keys(table: dict, allowed: set, where: str) -> None:
    for key, value in table.items():
        if key not in allowed:
            raise DesignError(
                f"{where}.{key}" if where else key, value, f"unknown key; allowed here: {', '.join(sorted(allowed))}"
            )


def _number(table: dict, key: str, where: str, default=None):
    if key not in table:
        return default
    return parse_value(table[key], f"{where}.{key}", _UNITS.get(key))


def _section(cls, table: dict, where: str, extra: dict | None = None, skip: tuple = ()):
    """Build a dataclass from a TOML table: numbers parsed, text kept, keys checked."""
    names = {FILE_KEYS.get(f.name, f.name) for f in fields(cls) if f.name not in skip}
    _check_keys(table, names | set(extra or {}), where)
    kwargs = {}
    for f in fields(cls):
        key = FILE_KEYS.get(f.name, f.name)  # the file's key for this field (fc for fc_hz, ...)
        if f.name in skip or f.name in (extra or {}) or key not in table:
            continue
        value = table[key]
        if key in _TEXT:
            if not isinstance(value, str):
                raise DesignError(f"{where}.{key}", value, "must be text")
            kwargs[f.name] = value
        elif key in ("feedforward",):
            if not isinstance(value, bool):
                raise DesignError(f"{where}.{key}", value, "must be true or false")
            kwargs[f.name] = value
        else:
            kwargs[f.name] = _number(table, key, where)
    kwargs.update(extra or {})
    return cls(**kwargs)


def _list_or_range(table: dict, key: str, where: str, log: bool) -> tuple[float, ...]:
    lo_key, hi_key, n_key = f"{key}_min", f"{key}_max", f"{key}_points"
    if key in table:
        both = [k for k in (lo_key, hi_key, n_key) if k in table]
        if both:
            raise DesignError(
                f"{where}.{both[0]}", table[both[0]], f"give either {key} = [...] or {lo_key}/{hi_key}, not both"
            )
        values = table[key]
        if not isinstance(values, list):
            values = [values]
        if len(values) > MAX_CORNERS:
            raise DesignError(
                f"{where}.{key}", f"({len(values)} values)", f"at most {MAX_CORNERS} (and {MAX_CORNERS} corners in all)"
            )
        return tuple(parse_value(v, f"{where}.{key}[{i}]", _UNITS[key]) for i, v in enumerate(values))
    if lo_key not in table or hi_key not in table:
        raise DesignError(f"{where}.{key}", "(missing)", f"give a list {key} = [...] or {lo_key} and {hi_key}")
    lo = parse_value(table[lo_key], f"{where}.{lo_key}", _UNITS[key])
    hi = parse_value(table[hi_key], f"{where}.{hi_key}", _UNITS[key])
    for name, value in ((lo_key, lo), (hi_key, hi)):
        bounds.check(f"{where}.{name}", value)
    if not hi >= lo:
        raise DesignError(
            f"{where}.{hi_key}", table[hi_key], f"must be >= {where}.{lo_key} ({shorten(table[lo_key])})"
        )
    n = table.get(n_key, 3 if key == "vin" else 2)
    if hi == lo:
        if n_key in table and n != 1:
            raise DesignError(f"{where}.{n_key}", n, f"must be 1 when {lo_key} = {hi_key}")
        return (lo,)
    if not isinstance(n, int) or isinstance(n, bool) or n < 2 or n > 1000:
        raise DesignError(f"{where}.{n_key}", n, "must be a whole number from 2 to 1000 (the range has two ends)")
    spaced = np.geomspace(lo, hi, n) if log and lo > 0 else np.linspace(lo, hi, n)
    values = [float(v) for v in spaced]
    values[0], values[-1] = lo, hi  # the ends exactly as given
    return tuple(values)


def design_from_dict(data: dict) -> Design:
    """Validate a parsed TOML document and build the :class:`Design`."""
    top = {"format", "version", "title", "stage", "operating", "sensing", "modulator", "compensator", "control",
           "tolerances", "digital"}
    top.add("losses")  # [losses]: loopkit.losses
    _check_keys(data, top, "")
    if data.get("format", FORMAT) != FORMAT:
        raise DesignError("format", data["format"], f"must be {FORMAT!r}")
    version = data.get("version", VERSION)
    if version != VERSION:
        raise DesignError("version", version, f"this loopkit reads version {VERSION}")
    for name in ("stage", "operating"):
        if name not in data:
            raise DesignError(name, "(missing)", f"the [{name}] table is required")
    st = _table(data["stage"], "stage")
    caps_raw = st.get("output_caps")
    if caps_raw is None:
        raise DesignError("stage.output_caps", "(missing)", "give at least one [[stage.output_caps]] bank")
    if isinstance(caps_raw, dict):
        caps_raw = [caps_raw]
    if not isinstance(caps_raw, list):
        raise DesignError("stage.output_caps", caps_raw, "must be one or more [[stage.output_caps]] tables")
    banks = []
    for i, bank in enumerate(caps_raw):
        where = f"stage.output_caps[{i}]"
        _table(bank, where, "[[stage.output_caps]] with capacitance, esr, count")
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

    op = _table(data["operating"], "operating")
    allowed = {
        "vout",
        "vin",
        "vin_min",
        "vin_max",
        "vin_points",
        "vin_nominal",
        "load",
        "load_min",
        "load_max",
        "load_points",
    }
    _check_keys(op, allowed, "operating")
    if "vout" not in op:
        raise DesignError("operating.vout", "(missing)", "is required")
    vin = _list_or_range(op, "vin", "operating", log=False)
    nominal = _number(op, "vin_nominal", "operating") if "vin_nominal" in op else None
    if nominal is not None and "vin" not in op:
        lo, hi = vin[0], vin[-1]
        if not lo <= nominal <= hi:
            raise DesignError(
                "operating.vin_nominal",
                op["vin_nominal"],
                f"must lie within vin_min .. vin_max ({format_value(lo, 'V')} .. {format_value(hi, 'V')})",
            )
        # a range always includes its nominal input (replacing a point within 1e-9 of it)
        vin = tuple(sorted([v for v in vin if abs(v - nominal) > 1e-9 * nominal] + [nominal]))
    operating = Operating(
        vout=_number(op, "vout", "operating"),
        vin=vin,
        load=_list_or_range(op, "load", "operating", log=True),
        vin_nominal=nominal,
    )
    sensing = _section(Sensing, _table(data.get("sensing", {}), "sensing"), "sensing")
    modulator = _section(Modulator, _table(data.get("modulator", {}), "modulator"), "modulator")
    compensator = _compensator(_table(data.get("compensator", {}), "compensator"))
    control = _section(Control, _table(data.get("control", {}), "control"), "control")
    title = data.get("title", "")
    if not isinstance(title, str):
        raise DesignError("title", title, "must be text")
    tol = parse_tolerances(data.get("tolerances", {}), len(banks))  # [tolerances]: loopkit.tolerances
    losses = losses_from_table(data.get("losses", {}))
    digital = _section(Digital, _table(data.get("digital", {}), "digital"), "digital")
    return Design(stage, operating, sensing, modulator, compensator, title, control, tolerances=tol, losses=losses,
                  digital=digital)


def _part_unit(designator: str) -> str | None:
    """Unit a part's value may carry: ohm for resistors, F for capacitors."""
    return "ohm" if is_resistor(designator) else "F" if is_capacitor(designator) else None


def _opamp(table: dict, where: str) -> OpAmp:
    """The error amplifier: the typical part, with what the file gives; ``ideal = true`` for an ideal one."""
    table = dict(table)
    ideal = table.pop("ideal", False)
    if not isinstance(ideal, bool):
        raise DesignError(f"{where}.ideal", ideal, "must be true or false")
    given = _section(OpAmp, table, where)
    if ideal:
        for key in ("gain_db", "gbw"):
            if key in table:
                raise DesignError(f"{where}.{key}", table[key], "leave it out when ideal = true")
        return replace(given, gain_db=0.0, gbw=0.0)
    typical = OpAmp.typical()
    return replace(given, **{k: getattr(typical, k) for k in ("gain_db", "gbw") if k not in table})


def _compensator(table: dict) -> Compensator:
    where = "compensator"
    sub = {}
    parts = _table(table.get("parts", {}), f"{where}.parts")
    sub["parts"] = {k: parse_value(v, f"{where}.parts.{k}", _part_unit(k)) for k, v in parts.items()}
    placement = _table(table.get("placement", {}), f"{where}.placement")
    _check_keys(placement, set(PLACEMENT_KEYS), f"{where}.placement")
    sub["placement"] = {k: parse_value(v, f"{where}.placement.{k}", "Hz") for k, v in placement.items()}
    opto = _table(table.get("opto", {}), f"{where}.opto")
    _check_keys(opto, set(OPTO_KEYS), f"{where}.opto")
    sub["opto"] = {k: parse_value(v, f"{where}.opto.{k}", OPTO_KEYS[k] or None) for k, v in opto.items()}
    sub["opamp"] = _opamp(_table(table.get("opamp", {}), f"{where}.opamp"), f"{where}.opamp")
    corner = table.get("design_corner", "worst")
    if corner == "worst":
        corner = None
    elif not isinstance(corner, int) or isinstance(corner, bool):
        raise DesignError(f"{where}.design_corner", corner, "must be 'worst' or a corner index")
    sub["design_corner"] = corner
    rest = {k: v for k, v in table.items() if k not in sub}
    return _section(Compensator, rest, where, extra=sub, skip=tuple(sub))


def _raw(data: dict, field: str):
    """The value at a dotted field (``stage.output_caps[0].esr``) as written, or None."""
    node = data
    for token in re.findall(r"\[\d+\]|[^.\[\]]+", field):
        if token.startswith("["):
            i = int(token[1:-1])
            if not isinstance(node, list) or i >= len(node):
                return None
            node = node[i]
        else:
            if not isinstance(node, dict) or token not in node:
                return None
            node = node[token]
    return node


def loads_design(text: str, file: str = "<text>") -> Design:
    """Parse TOML text into a :class:`Design`.

    Parameters
    ----------
    text : str
        The design file's content.
    file : str
        Name shown in error messages.

    Raises
    ------
    DesignFileError
        Naming ``file``, the key, the value as written there and what is allowed.
    """
    if len(text) > MAX_FILE_BYTES:
        raise DesignFileError(file, "", "(file)", f"is larger than {MAX_FILE_BYTES / 2**20:g} MiB: not a design file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise DesignFileError(file, "", "(TOML)", f"not valid TOML: {exc}") from None
    except RecursionError:
        raise DesignFileError(file, "", "(TOML)", "tables or arrays nested too deeply to read") from None
    try:
        return design_from_dict(data)
    except DesignFileError:
        raise
    except DesignError as exc:
        raw = _raw(data, exc.field) if exc.field else None
        value = raw if isinstance(raw, str) else exc.value  # show what the user typed
        if raw is None and exc.field and _raw(data, exc.field.rpartition(".")[0]) is not None and not str(
            exc.value
        ).startswith("("):
            value = f"{shorten(exc.value)} (the default)"  # a key left out: its default does not fit
        raise DesignFileError(file, exc.field, value, exc.allowed) from None


def load_design(path) -> Design:
    """Read and validate a design file (UTF-8 TOML); errors name the file.

    Only a regular file of at most :data:`~loopkit.bounds.MAX_FILE_BYTES` is
    read: a FIFO, a device or a folder is refused at once (reading one could
    wait for ever or never end).
    """
    path = Path(path)
    try:
        info = os.stat(path)
        if stat.S_ISDIR(info.st_mode):
            raise DesignFileError(str(path), "", "(file)", "cannot be read: it is a folder, not a design file")
        if not stat.S_ISREG(info.st_mode):
            raise DesignFileError(str(path), "", "(file)", "is not a regular file (a pipe or a device?): give a file")
        if info.st_size > MAX_FILE_BYTES:
            raise DesignFileError(
                str(path), "", "(file)", f"is larger than {MAX_FILE_BYTES / 2**20:g} MiB: not a design file"
            )
        # O_NONBLOCK: should the path become a FIFO after the check, opening it does not wait for a writer
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        with os.fdopen(fd, "rb") as fh:
            if not stat.S_ISREG(os.fstat(fh.fileno()).st_mode):
                raise DesignFileError(str(path), "", "(file)", "is not a regular file: give a file")
            raw = fh.read(MAX_FILE_BYTES + 1)
    except OSError as exc:
        raise DesignFileError(str(path), "", "(file)", f"cannot be read: {exc.strerror or exc}") from None
    if len(raw) > MAX_FILE_BYTES:
        raise DesignFileError(str(path), "", "(file)", f"is larger than {MAX_FILE_BYTES / 2**20:g} MiB: not a design file")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise DesignFileError(str(path), "", "(file)", f"is not UTF-8 text (byte {exc.start})") from None
    return loads_design(text, str(path))


# ---------------------------------------------------------------------- writing
def _exact(value: float) -> str:
    """Engineering text that parses back to exactly ``value`` (``"0.8"``, ``"14m"``, ``"4.7u"``)."""
    plain = repr(float(value))
    if 0.1 <= abs(value) < 1 and len(plain) <= 6:  # "0.8" reads better than "800m"
        return plain
    for digits in range(4, 18):
        text = format_value(value, digits=digits, ascii_only=True)
        if parse_value(text) == value:
            return text
    return repr(float(value))


_ESCAPES = {'"': '\\"', "\\": "\\\\", "\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}


def _toml_string(value: str) -> str:
    out = []
    for ch in value:
        if ch in _ESCAPES:
            out.append(_ESCAPES[ch])
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _toml_key(key: str) -> str:
    return key if re.fullmatch(r"[A-Za-z0-9_-]+", key) else _toml_string(key)


def _toml_value(value, key: str = "") -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, float):
        if key in _PLAIN_NUMBERS and math.isfinite(value):
            return repr(float(value))  # tomllib reads repr back to the same double
        return f'"{_exact(value)}"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v, key) for v in value) + "]"
    raise TypeError(f"cannot write {value!r}")


def _defaults(cls) -> dict:
    out = {}
    for f in fields(cls):
        if f.default is not MISSING:
            out[f.name] = f.default
        elif f.default_factory is not MISSING:
            out[f.name] = f.default_factory()
    return out


def _without(body: dict, cls, names) -> dict:
    """``body`` without the fields ``names`` that hold their dataclass default."""
    defaults = _defaults(cls)
    return {k: v for k, v in body.items() if not (k in names and k in defaults and v == defaults[k])}


def _corner_keys(key: str, values, nominal: float | None, log: bool, ranges: bool = True) -> dict:
    """``{key: [...]}``, or ``{key_min, key_max, key_points}`` where that range reads back to exactly ``values``.

    A list of three or more values that the loader's range (linear for ``vin``,
    geometric for ``load``, ends exact, ``vin_nominal`` added) reproduces to the
    last bit is written as that range, so a file given as a range stays one and
    no value like ``3.1622776601683795`` appears.
    """
    values = tuple(float(v) for v in values)
    if ranges and len(values) >= 3 and all(math.isfinite(v) for v in values):
        lo, hi = min(values), max(values)
        rest = list(values)
        if nominal is not None and nominal in rest:
            rest.remove(nominal)
        for points in dict.fromkeys((len(rest), len(rest) + 1)):
            if points < 3:  # two ends read as well as a list
                continue
            table = {f"{key}_min": lo, f"{key}_max": hi, f"{key}_points": points}
            try:
                spaced = _list_or_range(table, key, "operating", log)
            except DesignError:
                continue
            if nominal is not None:
                spaced = tuple(sorted([v for v in spaced if abs(v - nominal) > 1e-9 * nominal] + [nominal]))
            if spaced == values:
                return table
    return {key: list(values)}


def design_to_dict(design: Design, ranges: bool = True) -> dict:
    """The TOML document of a design, as nested dicts (values in SI).

    Fields that hold their default and do not apply to the design (the turns
    ratio of a non-flyback, the four-switch mode thresholds elsewhere, the diode
    drop of a synchronous rectifier, the differential amplifier's bandwidth with
    a divider, Type III's boost split on other networks, the op-amp or gm
    amplifier figures the network does not use, an automatic ``light_load``)
    are left out; reading the document back gives the same design.  Input
    voltages and loads that a range reproduces exactly are written as that
    range (``ranges=False``: always as lists).
    """
    st = design.stage
    stage = {f.name: getattr(st, f.name) for f in fields(Stage) if f.name != "output_caps"}
    irrelevant = set()
    if st.topology != "flyback":
        irrelevant.add("turns_ratio")
    if st.topology != "four-switch-buck-boost":
        irrelevant |= {"buck_max_duty", "boost_min_duty"}
    if st.synchronous:
        irrelevant.add("diode_drop")
    irrelevant.add("light_load")  # "" (automatic) is left out: the file says nothing, as the user did
    stage = _without(stage, Stage, irrelevant)
    stage["output_caps"] = [{"capacitance": b.capacitance, "esr": b.esr, "count": b.count} for b in st.output_caps]
    op = design.operating
    operating = {
        "vout": op.vout,
        **_corner_keys("vin", op.vin, op.vin_nominal, log=False, ranges=ranges),
        **_corner_keys("load", op.load, None, log=True, ranges=ranges),
    }
    if op.vin_nominal is not None:
        operating["vin_nominal"] = op.vin_nominal
    sensing = {f.name: getattr(design.sensing, f.name) for f in fields(Sensing)}
    if design.sensing.kind == "divider":
        sensing = _without(sensing, Sensing, {"diff_bandwidth"})
    comp = design.compensator
    compensator = {
        FILE_KEYS.get(f.name, f.name): getattr(comp, f.name)
        for f in fields(Compensator)
        if f.name not in ("parts", "placement", "opto", "opamp", "design_corner")
    }
    if network_module(comp.network).ZEROS != 2:
        compensator = _without(compensator, Compensator, {"boost_split"})
    compensator["design_corner"] = "worst" if comp.design_corner is None else comp.design_corner
    opamp = {f.name: getattr(comp.opamp, f.name) for f in fields(OpAmp)}
    if network_module(comp.network).AMPLIFIER == "transconductance":  # gain_db, gbw unused: written only where changed
        typical = OpAmp.typical()
        opamp = {k: v for k, v in opamp.items() if k in ("gm", "r_out") or v != getattr(typical, k)}
    elif comp.opamp.ideal:
        opamp = {"ideal": True}
    else:
        opamp = _without(opamp, OpAmp, {"gm", "r_out"})
    if opamp:
        compensator["opamp"] = opamp
    for name in ("parts", "placement", "opto"):
        if getattr(comp, name):
            compensator[name] = dict(getattr(comp, name))
    return {
        "format": FORMAT,
        "version": VERSION,
        "title": design.title,
        "stage": stage,
        "operating": operating,
        "sensing": sensing,
        "modulator": {f.name: getattr(design.modulator, f.name) for f in fields(Modulator)},
        "compensator": compensator,
        **({} if design.control == Control() else {"control": {
            f.name: getattr(design.control, f.name) for f in fields(Control)
            if getattr(design.control, f.name) is not None}}),
        **({} if design.tolerances == Tolerances() else {"tolerances": tolerances_to_dict(design.tolerances)}),
        **({} if design.losses == Losses() else {"losses": losses_to_table(design.losses)}),
        **({} if design.digital == Digital() and design.control.scheme != "digital" else {"digital": {
            f.name: getattr(design.digital, f.name) for f in fields(Digital)
            if getattr(design.digital, f.name) is not None}}),
    }


def dumps_design(design: Design) -> str:
    """TOML text of a design; ``loads_design(dumps_design(d)) == d``.

    Values with a unit are written in engineering notation with as many digits
    as it takes to read back the same double (``"4.7u"``, ``"49.9k"``);
    dimensionless ones (phase margin, duty limits, turns ratio) as TOML numbers.
    """
    text = _dumps(design_to_dict(design))
    try:
        same = loads_design(text) == design
    except DesignError:
        same = False
    if not same:  # a range that does not read back the same: write the explicit lists
        text = _dumps(design_to_dict(design, ranges=False))
    return text


def _dumps(data: dict) -> str:
    lines = ["# loopkit design file: a design aid; verify every result on the bench.", ""]

    def table(name: str, body: dict) -> None:
        simple = {
            k: v
            for k, v in body.items()
            if not isinstance(v, (dict, list)) or (isinstance(v, list) and not (v and isinstance(v[0], dict)))
        }
        lines.append(f"[{name}]")
        for k, v in simple.items():
            lines.append(f"{_toml_key(k)} = {_toml_value(v, k)}")
        lines.append("")
        for k, v in body.items():
            if isinstance(v, dict):
                table(f"{name}.{_toml_key(k)}", v)
            elif isinstance(v, list) and v and isinstance(v[0], dict):
                for item in v:
                    lines.append(f"[[{name}.{_toml_key(k)}]]")
                    lines.extend(f"{_toml_key(ik)} = {_toml_value(iv, ik)}" for ik, iv in item.items())
                    lines.append("")

    for key in ("format", "version", "title"):
        lines.append(f"{key} = {_toml_value(data[key])}")
    lines.append("")
    for key in ("stage", "operating", "sensing", "modulator", "compensator", "control", "digital", "losses"):
        if key in data:
            table(key, data[key])
    if "tolerances" in data:
        lines.append(tolerances_toml(data["tolerances"]))
    return "\n".join(lines).rstrip() + "\n"


def save_design(design: Design, path, keep_layout: bool = False) -> Path:
    """Write a design file atomically; returns the path written.

    Through :func:`loopkit.atomicfile.write_text_atomic`: a temporary file beside
    ``path``, synced, then renamed over it, so a crash or a full disk leaves
    either the old file or the new one, never a mix; temporary files left by
    earlier, killed saves of the same file are removed.  An existing file keeps
    its permissions; a read-only one is refused (:class:`PermissionError`
    naming it); a new one gets the usual ones (0666 less the umask).  A
    symbolic link is followed.

    With ``keep_layout`` and a ``path`` that holds a design file already, only
    what differs from the design it reads as is changed in its text, keeping
    its comments, key order, ranges and notation
    (:func:`loopkit.designedit.edit_design_text`); otherwise (or when that file
    does not load) the whole file is written by :func:`dumps_design`.
    """
    from .atomicfile import write_text_atomic

    text = None
    if keep_layout:
        from .designedit import edit_design_text

        try:
            old = Path(path).read_text(encoding="utf-8")
            text = edit_design_text(old, loads_design(old, str(path)), design, str(path))
        except (OSError, ValueError):  # no file, not UTF-8, not a design: write it whole
            text = None
    return write_text_atomic(path, dumps_design(design) if text is None else text)
