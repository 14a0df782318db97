"""Mutated designs through the CLI's path: the project's error naming a field, or finite results.

Each example takes a sample design, sets its network to any of the five, then
applies a few mutations: a number moved over many decades (an order-of-magnitude
slip such as ``1.5n`` for ``1.5u``, or anything from 1e-30 to 1e30, negative or
zero), a wrong type (text, a list, a table, true/false, a megabyte of text with
newlines), a key removed or an unknown key added.  The text goes through the
same path as ``loopkit design``: :func:`loopkit.designfile.loads_design`, then
``LoopSession(design).run()`` and the CLI's report.  The property is the one the
README promises (common practice, no source): bad input is refused with a
:class:`~loopkit.errors.DesignError` naming a field, on one line of bounded
length, and anything accepted gives finite numbers.

The default run is bounded (``LOOPKIT_FUZZ_EXAMPLES``, default 300) and
derandomised in CI (tests/conftest.py); the long profile is::

    LOOPKIT_FUZZ_EXAMPLES=20000 python -m pytest -q tests/test_fuzz_designs.py
"""

from __future__ import annotations

import copy
import json
import math
import os
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from loopkit.bounds import bound_for
from loopkit.cli import design_text, stage_report
from loopkit.design import NETWORKS, TOPOLOGIES
from loopkit.designfile import loads_design
from loopkit.errors import DesignError
from loopkit.export import results_json
from loopkit.loop import LoopSession

SAMPLES = sorted((Path(__file__).resolve().parents[1] / "sample_designs").glob("*.toml"))
BASES = [tomllib.loads(p.read_text(encoding="utf-8")) for p in SAMPLES]
OPTO = {"ctr": 0.5, "r_pull": "4.7k", "r_led": "22k", "c_opto": "470p"}
EXAMPLES = int(os.environ.get("LOOPKIT_FUZZ_EXAMPLES", "300"))

#: Every key a design file may hold, by table (lists marked with a trailing "[]").
KEYS = {
    "stage": (
        "topology", "fsw", "inductance", "dcr", "r_switch", "rectifier", "r_rectifier", "diode_drop",
        "light_load", "turns_ratio", "buck_max_duty", "boost_min_duty",
    ),
    "stage.output_caps[]": ("capacitance", "esr", "count"),
    "operating": (
        "vout", "vin", "vin_min", "vin_max", "vin_points", "vin_nominal", "load", "load_min", "load_max",
        "load_points",
    ),
    "sensing": ("kind", "reference", "r_top", "divider_current", "diff_bandwidth"),
    "modulator": ("ramp", "max_duty", "feedforward"),
    "compensator": (
        "network", "fc", "pm", "design_corner", "method", "boost_split", "resistor_series", "capacitor_series",
    ),
    "compensator.opamp": ("gain_db", "gbw", "gm", "r_out"),
    "compensator.opto": ("ctr", "r_pull", "r_led", "c_opto"),
    "compensator.placement": ("fz", "fp", "fz1", "fz2", "fp1", "fp2"),
    "compensator.parts": ("R1", "R2", "R3", "C1", "C2", "C3", "Rc", "Cc", "Chf", "Cz", "Cpole", "Rz", "Rb"),
}
TEXT_CHOICES = {
    "topology": TOPOLOGIES,
    "rectifier": ("synchronous", "diode"),
    "light_load": ("dcm", "forced-ccm", ""),
    "kind": ("divider", "differential"),
    "network": NETWORKS,
    "method": ("k-factor", "placement"),
    "resistor_series": ("E24", "E96", "none"),
    "capacitor_series": ("E6", "E12", "none"),
    "feedforward": (True, False),
    "design_corner": ("worst", 0, 1, 5, 100),
}
PREFIXES = ("f", "p", "n", "u", "m", "", "k", "M", "G")
MAX_MESSAGE = 400  # characters of one error line

magnitudes = st.builds(
    lambda sign, mant, exp: sign * mant * 10.0**exp,
    st.sampled_from((1.0, 1.0, 1.0, -1.0)),
    st.floats(1.0, 9.99),
    st.integers(-30, 30),
)
wrong_types = st.sampled_from(
    ("abc", "", "1.5x", "4k7uF", True, [1, 2], {"x": 1}, "1" * 500_000, "2\n3", "nan", "inf", "1e999", 0, -1)
)


def _as_written(value: float, draw) -> object:
    """A number as a TOML float, an int or engineering text."""
    how = draw(st.sampled_from(("float", "text", "int")))
    if how == "int" and abs(value) < 1e18:
        return int(value)
    if how == "text" and value != 0:
        exp = math.floor(math.log10(abs(value)) / 3) * 3
        prefix = {-15: "f", -12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}.get(exp)
        if prefix is not None:
            return f"{value / 10.0**exp:.4g}{prefix}"
    return float(value)


def _number_like(old, draw, field: str = "", inside: bool = False) -> object:
    """A numeric mutation of ``old``: within its bound, decades away, anywhere, zero, or a wrong type."""
    try:
        base = float(old) if not isinstance(old, str) else float(loads_number(old))
    except (TypeError, ValueError):
        base = 1.0
    kinds = ("inside",) if inside else ("inside", "inside", "inside", "decades", "decades", "anywhere", "zero", "wrong")
    kind = draw(st.sampled_from(kinds))
    bound = bound_for(field)
    if kind == "inside" and bound is not None:
        lo = max(bound.lo, 1e-30) if bound.lo >= 0 else bound.lo
        value = lo * (bound.hi / lo) ** draw(st.floats(0.0, 1.0)) if lo > 0 else draw(st.floats(bound.lo, bound.hi))
        if bound.open_ends and not bound.lo < value < bound.hi:
            value = (bound.lo + bound.hi) / 2
        if field.endswith(".vout") and base < 0:
            value = -value
        if field.endswith(".count"):
            return round(value)
    elif kind in ("decades", "inside"):
        value = (base or 1.0) * 10.0 ** draw(st.integers(-12, 12))
    elif kind == "anywhere":
        value = draw(magnitudes)
    elif kind == "zero":
        value = draw(st.sampled_from((0.0, -0.0, -(base or 1.0))))
    else:
        return draw(wrong_types)
    return _as_written(value, draw)


def loads_number(text: str) -> float:
    from loopkit.units import parse_value

    return parse_value(text)


def _table_at(doc: dict, path: str, create: bool):
    node = doc
    for name in path.removesuffix("[]").split("."):
        if name not in node:
            if not create:
                return None
            node[name] = {} if not path.endswith("[]") or name != "output_caps" else [{}]
        node = node[name]
    if isinstance(node, list):
        return node[0] if node and isinstance(node[0], dict) else None
    return node if isinstance(node, dict) else None


@st.composite
def mutated_documents(draw) -> dict:
    doc = copy.deepcopy(draw(st.sampled_from(BASES)))
    comp = doc.setdefault("compensator", {})
    comp["network"] = draw(st.sampled_from(NETWORKS))
    if comp["network"] == "opto-type2":
        comp.setdefault("opto", dict(OPTO))
    inside = draw(st.booleans())  # only values within their bounds, several at once: stress the arithmetic
    for _ in range(draw(st.integers(2, 6) if inside else st.integers(1, 3))):
        path = draw(st.sampled_from(sorted(KEYS)))
        what = "set" if inside else draw(st.sampled_from(("set",) * 8 + ("delete", "extra")))
        table = _table_at(doc, path, create=what == "set")
        if table is None:
            continue
        if what == "extra":
            table[draw(st.sampled_from(("bogus", "gain", "Inductance", "fsw_hz")))] = draw(magnitudes)
            continue
        key = draw(st.sampled_from(KEYS[path]))
        if path == "operating" and key not in table and key.endswith(("_min", "_max", "_points")):
            continue  # mostly a "give either the list or the range" refusal: tried often enough by "extra"
        if what == "delete":
            table.pop(key, None)
            continue
        old = table.get(key)
        if key in TEXT_CHOICES and (inside or draw(st.integers(0, 4))):
            table[key] = draw(st.sampled_from(TEXT_CHOICES[key]))
        elif isinstance(old, list):
            items = list(old)
            if items and draw(st.booleans()):
                i = draw(st.integers(0, len(items) - 1))
                items[i] = _number_like(items[i], draw, f"{path}.{key}", inside)
            else:
                items = [_number_like(x, draw, f"{path}.{key}", inside) for x in items] or [_number_like(1.0, draw)]
            table[key] = items
        else:
            field = f"{path.removesuffix('[]')}.{key}"
            table[key] = _number_like(old if old is not None else 1.0, draw, field, inside)
    return doc


def toml_text(value, top: bool = True) -> str:
    """TOML of a document, every table inline (a format of our own making: the test's own writer)."""
    if top:
        return "".join(f"{json.dumps(k)} = {toml_text(v, False)}\n" for k, v in value.items())
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf") if math.isinf(value) else repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_text(v, False) for v in value) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {toml_text(v, False)}" for k, v in value.items()) + "}"


def _written(doc: dict, exc: DesignError) -> bool:
    """Whether the field an error names is in the document (or is reported as missing)."""
    if str(exc.value) in ("(missing)", "missing", "0", "0.0") or str(exc.value).endswith("(the default)"):
        return True
    corner = re.fullmatch(r"operating\.(vin|load)\[\d+\]", exc.field)
    if corner and f"{corner.group(1)}_min" in doc.get("operating", {}):
        return True  # a point of a range the file gives: the message names its value
    node = doc
    for token in re.findall(r"\[\d+\]|[^.\[\]]+", exc.field.split(" ")[0]):
        if token.startswith("["):
            i = int(token[1:-1])
            if not isinstance(node, list) or i >= len(node):
                return False
            node = node[i]
        elif isinstance(node, dict) and token in node:
            node = node[token]
        else:
            return False
    return True


def check_document(doc: dict) -> str:
    """Run one document through the CLI's path; returns "refused" or "finite" (or fails)."""
    text = toml_text(doc)
    try:
        design = loads_design(text, "fuzz.toml")
        session = LoopSession(design)
        assert stage_report(design, session.stage, "fuzz.toml").strip()  # what `loopkit stage` prints
        result = session.run()
        report = design_text(result, "fuzz.toml")
        document = json.loads(results_json(result), parse_constant=_no_constant)
    except DesignError as exc:
        message = str(exc)
        assert exc.field or exc.value == "(file)", f"an error naming no field: {message[:300]}"
        assert "\n" not in message and "\r" not in message, f"a message of several lines: {message[:300]!r}"
        assert len(message) <= MAX_MESSAGE, f"a message of {len(message)} characters: {message[:300]}"
        assert _written(doc, exc), f"an error blaming a field the file does not hold: {message[:300]}"
        return "refused"
    stage = result.stage
    for name in ("duty", "i_l", "ripple_pp"):
        assert np.all(np.isfinite(getattr(stage, name))), f"stage.{name} not finite: {getattr(stage, name)}"
    assert np.all(np.isfinite(result.plant_resp)), "plant response not finite"
    if result.feasible:
        for k, v in result.parts.items():
            assert math.isfinite(v) and v > 0, f"part {k} = {v}"
        for k, v in result.parts_exact.items():
            assert math.isfinite(v) and v > 0, f"exact part {k} = {v}"
        assert np.all(np.isfinite(result.loop_resp)), "loop response not finite"
        m = result.margins
        crossed = m.n_crossovers > 0
        assert np.all(np.isfinite(m.fc_hz[crossed])) and np.all(np.isfinite(m.pm_deg[crossed]))
        assert not np.any(np.isnan(m.gm_db)), f"gm_db NaN: {m.gm_db}"
    assert report.strip() and document["caution"]
    return "finite"


def _no_constant(name: str):
    raise AssertionError(f"the results document holds {name}: not JSON")


@pytest.mark.filterwarnings("ignore::loopkit.errors.LoopkitWarning")
@settings(
    max_examples=EXAMPLES,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    print_blob=True,
)
@given(mutated_documents())
def test_mutated_designs_are_refused_by_field_or_give_finite_results(doc):
    check_document(doc)
