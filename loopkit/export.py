"""Hand-off files: bill of materials (CSV), network netlist (SPICE), results (JSON).

All three are made from one :class:`~loopkit.loop.LoopResult`, so they agree
with each other and with what the CLI and the app show.
"""

from __future__ import annotations

import csv
import io
import json
import math

import numpy as np

from . import __version__, eseries
from .errors import DesignError
from .loop import CAUTION, LoopResult
from .margins import gm_state
from .networks import network_module
from .units import format_value

__all__ = ["bom_csv", "c_header_text", "results_document", "results_json", "spice_netlist"]


def _num(x):
    """JSON-safe float: NaN and infinities become null."""
    x = float(x)
    return x if math.isfinite(x) else None


def _kind(designator: str) -> tuple[str, str]:
    if designator.startswith("R"):
        return "resistor", "ohm"
    if designator.startswith("C"):
        return "capacitor", "F"
    return "other", ""


def bom_csv(result: LoopResult) -> str:
    """Bill of materials of the network: one row per part, snapped values.

    Columns: designator, value (engineering text), value_si, unit, series,
    tolerance (the series' usual tolerance), kind, computed (the exact value
    before snapping).
    """
    t = result.targets
    buf = io.StringIO()
    buf.write(f"# loopkit {__version__} bill of materials, {result.network} network. {CAUTION}\n")
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["designator", "value", "value_si", "unit", "series", "tolerance", "kind", "computed"])
    for name, key in (("Rled", "r_led"), ("Rpull", "r_pull")):
        if network_module(result.network).AMPLIFIER == "optocoupler" and result.design.compensator.opto.get(key):
            value = float(result.design.compensator.opto[key])
            writer.writerow([name, format_value(value, "Ω", digits=4), repr(value), "ohm", "given", "", "resistor",
                             repr(value)])
    for name in sorted(result.parts, key=_designator_order):
        kind, unit = _kind(name)
        series = t.resistor_series if kind == "resistor" else t.capacitor_series if kind == "capacitor" else ""
        tol = eseries.TOLERANCE.get(series)
        value = result.parts[name]
        writer.writerow([
            name, format_value(value, "Ω" if unit == "ohm" else unit, digits=4), repr(float(value)), unit, series,
            f"{tol:.1%}" if tol else "", kind, repr(float(result.parts_exact.get(name, value))),
        ])
    return buf.getvalue()


def _designator_order(name: str):
    letters = "".join(ch for ch in name if not ch.isdigit())
    digits = "".join(ch for ch in name if ch.isdigit())
    return (letters, int(digits) if digits else 0)


def spice_netlist(result: LoopResult) -> str:
    """ngspice deck of the network with its snapped parts: AC source at ``in``, output ``out``."""
    from .loop import network_context

    module = network_module(result.network)
    title = f"loopkit {result.network} network: {result.design.title or 'design'}"
    deck = module.netlist(result.parts, network_context(result.design), title)
    header = f"* {CAUTION}\n* V(out)/V(in) is the network's transfer function, sign included.\n"
    first, _, rest = deck.partition("\n")
    return f"{first}\n{header}{rest}"


def results_document(result: LoopResult) -> dict:
    """The machine-readable results (the ``loopkit design --json`` document)."""
    t = result.targets
    st = result.stage
    doc = {
        "loopkit_version": __version__,
        "caution": CAUTION,
        "title": result.design.title,
        "topology": result.design.stage.topology,
        "network": result.network,
        "feasible": result.feasible,
        "targets": {
            "fc_hz": t.fc_hz, "pm_deg": t.pm_deg, "boost_split": t.boost_split,
            "design_corner": "worst" if t.design_corner is None else t.design_corner,
            "resistor_series": t.resistor_series, "capacitor_series": t.capacitor_series, "method": t.method,
        },
        "parts": {k: float(v) for k, v in result.parts.items()},
        "parts_exact": {k: float(v) for k, v in result.parts_exact.items()},
        "zeros_hz": [_num(z) for z in result.zeros_hz],
        "poles_hz": [_num(p) for p in result.poles_hz],
        "design_corner": result.design_corner,
        "worst_corner": result.worst_corner,
        "corners": [],
        "warnings": [
            {"code": f.code, "message": f.message, "corner": f.corner, "severity": f.severity}
            for f in result.findings
        ],
    }
    if result.digital is not None:
        doc["digital"] = _digital_document(result.digital)
    m, mx = result.margins, result.margins_exact
    for k in range(st.n_corners):
        corner = {
            "index": k, "vin": float(st.vin[k]), "load": float(st.load[k]), "mode": str(st.mode[k]),
            "submode": str(st.submode[k]), "duty": _num(st.duty[k]),
        }
        if m is not None:
            corner.update({
                "fc_hz": _num(m.fc_hz[k]), "pm_deg": _num(m.pm_deg[k]), "gm_db": _num(m.gm_db[k]),
                "gm_state": str(gm_state(m)[k]), "f180_hz": _num(m.f180_hz[k]),
                "f180_beyond_model_hz": _num(m.f180_beyond_hz[k]),
                "delay_margin_s": _num(m.delay_margin_s[k]), "stable": bool(m.stable[k]),
                "crossovers_hz": [float(x) for x in m.crossovers_hz[k]], "conditional": bool(m.conditional[k]),
                "exact_parts": {"fc_hz": _num(mx.fc_hz[k]), "pm_deg": _num(mx.pm_deg[k]), "gm_db": _num(mx.gm_db[k]),
                                "gm_state": str(gm_state(mx)[k])},
            })
        doc["corners"].append(corner)
    return doc


def _digital_document(dig) -> dict:
    """The digital controller as plain floats: the difference equation, sampling, ADC and PWM scaling."""
    return {
        "form": dig.form, "method": dig.method, "ts_s": float(dig.ts_s), "fs_hz": float(dig.fs_hz),
        "b": [float(x) for x in dig.b], "a": [float(x) for x in dig.a],
        "adc_bits": int(dig.adc_bits), "adc_range_v": float(dig.adc_range_v), "adc_lsb_v": float(dig.adc_lsb_v),
        "pwm_counts": float(dig.pwm_counts), "pwm_steps": float(dig.pwm_steps), "dither_bits": int(dig.dither_bits),
        "duty_min": float(dig.duty_min), "duty_max": float(dig.duty_max),
        "word_length": dig.word_length, "frac_bits": dig.frac_bits,
        "fixed_point": _fixed_point_document(dig),
        "corners": [{"delay_s": float(dig.delay_s[k]), "delay_phase_deg": _num(dig.delay_phase_deg[k]),
                     "sensing_gain": float(dig.sensing_gain[k]), "adc_lsb_out_v": float(dig.adc_lsb_out_v[k]),
                     "gvd_dc_v": float(dig.gvd_dc[k]), "duty": float(dig.duty[k])} for k in range(dig.delay_s.size)],
        "designs": {m: {"b": [] if d.controller is None else [float(x) for x in d.controller.difference_equation(0)[0]],
                        "a": [] if d.controller is None else [float(x) for x in d.controller.difference_equation(0)[1]],
                        "worst_pm_deg": None if d.margins is None else _num(np.nanmin(d.margins.pm_deg)),
                        "reason": d.reason} for m, d in dig.designs.items()},
    }


def _fixed_point_document(dig) -> dict | None:
    """The integers of the fixed-point controller, their Q formats and its quantised margins (None if none)."""
    fixed = None if dig.realisation is None else dig.realisation.fixed
    if fixed is None:
        return None
    mq = dig.realisation.margins_quantised
    return {
        "b_int": [int(x) for x in fixed.b_int], "a_int": [int(x) for x in fixed.a_int],
        "word_bits": int(fixed.word_bits), "b_frac_bits": int(fixed.b_frac_bits),
        "a_frac_bits": int(fixed.a_frac_bits), "state_frac_bits": int(fixed.state_frac_bits),
        "acc_bits": int(fixed.acc_bits), "e_min": int(fixed.e_min), "e_max": int(fixed.e_max),
        "u_min": int(fixed.u_min), "u_max": int(fixed.u_max),
        "gain_error_db": float(fixed.gain_error_db), "phase_error_deg": float(fixed.phase_error_deg),
        "pm_deg": [_num(x) for x in mq.pm_deg], "gm_db": [_num(x) for x in mq.gm_db],
        "stable": [bool(x) for x in mq.stable],
    }


def c_header_text(result: LoopResult) -> str:
    """The C header of a digital loop's fixed-point controller (:func:`loopkit.cheader.c_header`)."""
    from .cheader import c_header

    dig = result.digital
    if dig is None or dig.realisation is None or dig.realisation.fixed is None:
        raise DesignError("--c-header", "(no fixed-point controller)",
                          "a digital design whose controller could be realised in fixed point (see its findings)")
    title = result.design.title or "loopkit digital controller"
    if dig.dither_bits:
        title += f"; u in PWM steps of 1/{2 ** dig.dither_bits} count ({dig.dither_bits} dither bits)"
    return c_header(dig.realisation.fixed, title=title)


def results_json(result: LoopResult) -> str:
    """:func:`results_document` as JSON text (NaN and inf written as null)."""
    return json.dumps(results_document(result), indent=2, allow_nan=False) + "\n"


