"""Changing a design file in place: only what changed, the rest exactly as the user wrote it.

``loopkit design --write`` puts the parts (and any target given on the command
line) into the user's own file.  Rewriting the whole file from the design
(:func:`loopkit.designfile.dumps_design`) would lose the user's comments, key
order, ranges given as ``vin_min``/``vin_max`` and engineering notation, so
this module edits the file's text instead: it parses it with tomlkit (a TOML
library that keeps comments and layout), compares the design the file reads as
with the new one field by field (through
:func:`loopkit.designfile.design_to_dict`, so both sides are written the same
way) and changes, adds or removes only the keys whose value differs.  A new
value is written as the file writer writes it (``"49.9k"``; dimensionless
fields as TOML numbers), keeping the unit the user wrote after the old one
(``"25kHz"``) and a plain TOML number where the user wrote one.  A changed
input-voltage or load range is written as a range again where one reproduces
the new corners, else as a list, and the keys of the other form are removed.

The edited text must read back to the new design; if it ever did not, the
whole file is written by :func:`~loopkit.designfile.dumps_design` instead, so
a save never writes a design other than the one asked for.
"""

from __future__ import annotations

from pathlib import Path

import tomlkit
from tomlkit.items import AoT, InlineTable, Item, Table

from .atomicfile import check_writable, write_text_atomic
from .design import Design
from .designfile import _PLAIN_NUMBERS, _UNITS, _exact, _part_unit, design_to_dict, dumps_design, loads_design
from .errors import DesignError, DesignFileError
from .networks.opto_type2 import OPTO_KEYS
from .units import parse_value

__all__ = ["edit_design_text", "update_design_file"]

_ABSENT = object()
#: Keys that say the same thing in two forms (a list or a range); a change to one removes the others.
_FAMILIES = {
    "vin": ("vin", "vin_min", "vin_max", "vin_points"),
    "load": ("load", "load_min", "load_max", "load_points"),
}
#: Unit words the user may have written after a value; kept on a new value.
_UNIT_WORDS = ("ohms", "ohm", "\u03a9", "\u2126", "Hz", "F", "H", "V", "A", "S")


def _unit_of(key: str, where: str) -> str | None:
    if where.endswith(".parts"):
        return _part_unit(key)
    if where.endswith(".placement"):
        return None if key == "gain" else "Hz"
    if where.endswith(".opto"):
        return OPTO_KEYS.get(key) or None
    for end in ("_min", "_max", "_nominal"):
        key = key.removesuffix(end)
    return _UNITS.get(key)


def _unit_suffix(raw, unit: str | None) -> str:
    """The unit text the user wrote after ``raw``'s number (``"40kHz"`` -> ``"Hz"``), or ""."""
    if not isinstance(raw, str) or not unit:
        return ""
    text = raw.strip()
    try:
        value = parse_value(text, "", unit)
    except DesignError:
        return ""
    for word in _UNIT_WORDS:
        if text.lower().endswith(word.lower()) and len(text) > len(word):
            stem = text[: -len(word)].rstrip()
            try:
                if parse_value(stem, "", unit) == value:
                    return text[len(stem) :]
            except DesignError:
                continue
    return ""


def _value(key: str, value, raw, unit: str | None):
    """``value`` (SI) as the file writer writes it, in the form the user used for ``raw``."""
    if isinstance(value, (bool, str, int)):
        return value
    if isinstance(value, (list, tuple)):
        raws = raw if isinstance(raw, list) else []
        pick = [raws[i] if i < len(raws) else (raws[-1] if raws else None) for i in range(len(value))]
        return [_value(key, v, r, unit) for v, r in zip(value, pick)]
    value = float(value)
    if key in _PLAIN_NUMBERS or (isinstance(raw, (int, float)) and not isinstance(raw, bool)):
        if isinstance(raw, int) and value.is_integer() and abs(value) < 2**53:
            return int(value)
        return value
    return _exact(value) + _unit_suffix(raw, unit)


def _raw(table, key: str):
    item = table.get(key) if hasattr(table, "get") else None
    return item.unwrap() if isinstance(item, Item) else item


def _merge(table, old: dict, new: dict, where: str) -> None:
    """Change ``table`` (a tomlkit table that reads as ``old``) so that it reads as ``new``."""
    changed = set()
    for key in dict.fromkeys([*old, *new]):
        o, n = old.get(key, _ABSENT), new.get(key, _ABSENT)
        if o == n:
            continue
        changed.add(key)
        if n is _ABSENT:
            if key in table:
                del table[key]
        elif isinstance(n, dict):
            if not isinstance(table.get(key), (dict, Table, InlineTable)):
                table[key] = tomlkit.inline_table() if isinstance(table, InlineTable) else tomlkit.table()
            _merge(table[key], o if isinstance(o, dict) else {}, n, f"{where}.{key}" if where else key)
        elif key == "output_caps":
            _merge_banks(table, o if isinstance(o, list) else [], n, f"{where}.{key}")
        else:
            table[key] = _value(key, n, _raw(table, key), _unit_of(key, where))
    if where == "operating":
        for family in _FAMILIES.values():
            if changed & set(family):
                for key in family:
                    if key not in new and key in table:
                        del table[key]


def _merge_banks(table, old: list, new: list, where: str) -> None:
    """The ``[[stage.output_caps]]`` banks: edited one by one when their number stays, else written anew."""
    current = table.get("output_caps")
    if len(old) == len(new) and current is not None:
        items = [current] if isinstance(current, (dict, Table)) and not isinstance(current, AoT) else list(current)
        if len(items) == len(new):
            for i, (o, n) in enumerate(zip(old, new)):
                _merge(items[i], o, n, f"{where}[{i}]")
            return
    banks = tomlkit.aot()
    for i, bank in enumerate(new):
        t = tomlkit.table()
        _merge(t, {}, bank, f"{where}[{i}]")
        banks.append(t)
    table["output_caps"] = banks


def edit_design_text(text: str, before: Design | None, after: Design, file: str = "<text>") -> str:
    """The design file ``text`` changed to read as ``after``, everything else kept as written.

    Parameters
    ----------
    text : str
        The design file's text (TOML).
    before : Design or None
        The design ``text`` reads as (None: read it from ``text``).
    after : Design
        The design the result must read as.
    file : str
        Name shown in error messages.

    Returns
    -------
    str
        The edited text; ``loads_design(result) == after``.
    """
    if before is None:
        before = loads_design(text, file)
    doc = tomlkit.parse(text)
    _merge(doc, design_to_dict(before), design_to_dict(after), "")
    out = tomlkit.dumps(doc)
    try:
        same = loads_design(out, file) == after
    except DesignError:
        same = False
    return out if same else dumps_design(after)


def update_design_file(path, before: Design, after: Design) -> Path:
    """Write ``after`` into the design file ``path`` (which was read as ``before``), changing only what differs.

    The file is read again and must still read as ``before`` (an edit made by
    someone else in the meantime is not overwritten); a read-only file is
    refused; the write is atomic (:mod:`loopkit.atomicfile`).

    Raises
    ------
    DesignFileError
        The file changed since it was read.
    OSError
        Naming ``path``: read-only, not readable, not writable.
    """
    path = Path(path)
    check_writable(path)
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise DesignFileError(str(path), "", "(file)", f"is not UTF-8 text (byte {exc.start})") from None
    try:
        same = loads_design(text, str(path)) == before
    except DesignError:
        same = False
    if not same:
        raise DesignFileError(str(path), "", "(file)", "changed since loopkit read it; nothing written (run it again)")
    return write_text_atomic(path, edit_design_text(text, before, after, str(path)))
