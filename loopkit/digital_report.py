"""The ``loopkit design`` text of a digital loop: sampling, delays, the controller's coefficients, margins.

Formatting only: every number comes from :class:`loopkit.digital_loop.DigitalLoop` and the
result's margins.  Tables are plain text within 80 columns (:mod:`loopkit.tables`).
"""

from __future__ import annotations

import numpy as np

from .cautions import CAUTION
from .margins import GM_WORDS, gm_state
from .tables import Column, format_table, wrap_note
from .units import format_value

__all__ = ["coefficient_rows", "digital_text"]


def _fmt(value: float, unit: str = "") -> str:
    return format_value(float(value), unit) if np.isfinite(value) else "-"


def _gm(m, k: int) -> str:
    state = gm_state(m)[k]
    return f"{m.gm_db[k]:.1f}" if state == "number" else GM_WORDS[state]


def coefficient_rows(dig) -> list[tuple[str, float]]:
    """(name, value) of the difference equation's coefficients: ``b0 .. bn``, then ``a1 .. an`` (a0 = 1)."""
    rows = [(f"b{i}", float(v)) for i, v in enumerate(dig.b)]
    rows += [(f"a{i}", float(v)) for i, v in enumerate(dig.a) if i > 0]
    return rows


def _controller_lines(result) -> list[str]:
    dig = result.digital
    t = result.targets
    k = result.design_corner
    st = result.stage
    lines = [
        wrap_note(f"Controller: {dig.form}, {dig.method} design, for fc {_fmt(t.fc_hz, 'Hz')} and PM {t.pm_deg:g}"
                  f" deg at corner #{k} ({_fmt(st.vin[k], 'V')} in, {_fmt(st.load[k], 'A')})"),
        wrap_note(f"Sampling: fs {_fmt(dig.fs_hz, 'Hz')} (Ts {_fmt(dig.ts_s, 's')}), Nyquist {_fmt(dig.fs_hz / 2, 'Hz')};"
                  f" ADC {dig.adc_bits} bits over {_fmt(dig.adc_range_v, 'V')} (1 code = {_fmt(dig.adc_lsb_v, 'V')});"
                  f" PWM {dig.pwm_counts:.6g} counts per period"
                  + (f", {dig.pwm_steps:.6g} steps with {dig.dither_bits} dither bit{'s' if dig.dither_bits > 1 else ''}" if dig.dither_bits else "")),
        "",
        wrap_note("Difference equation, e = set point - ADC reading (codes), u = PWM steps:"
                  " u[k] = b0 e[k] + b1 e[k-1] + ... - a1 u[k-1] - ...  (exact coefficients, and the"
                  " integers of the fixed-point controller, value = integer / 2^Q):"),
    ]
    fixed = dig.realisation.fixed if dig.realisation is not None else None
    rows = [[name, f"{value:.12g}"] for name, value in coefficient_rows(dig)]
    cols = [Column("coef", "", "<"), Column("value")]
    if fixed is not None:
        ints = list(fixed.b_int) + list(fixed.a_int)
        qs = [fixed.b_frac_bits] * len(fixed.b_int) + [fixed.a_frac_bits] * len(fixed.a_int)
        rows = [r + [str(i), str(q)] for r, i, q in zip(rows, ints, qs)]
        cols += [Column("integer"), Column("Q")]
    lines.append(format_table(cols, rows))
    if fixed is not None:
        mq = dig.realisation.margins_quantised
        lines += ["", wrap_note(
            f"Fixed point: {fixed.word_bits}-bit coefficients, stored outputs with {fixed.state_frac_bits} extra"
            f" fraction bits, a {fixed.acc_bits}-bit accumulator at worst (int64 in the C header); the quantised"
            f" controller's response is within {fixed.gain_error_db:.2g} dB and {fixed.phase_error_deg:.2g} deg of"
            f" the exact one up to fs/2; worst-corner PM {np.nanmin(mq.pm_deg):.1f} deg with it"
            f" ({np.nanmin(result.margins.pm_deg):.1f} deg exact). Output limits {fixed.u_min} .. {fixed.u_max}"
            f" PWM steps; the C header: loopkit export FILE --c-header OUT.h")]
    z, p = dig.controller.zeros()[0], dig.controller.poles()[0]

    def roots(r):
        return ", ".join(f"{x.real:.6g}" if abs(x.imag) < 1e-12 else f"{x.real:.6g}{x.imag:+.6g}j"
                         for x in r if np.isfinite(x))

    lines += ["", wrap_note(f"z-plane zeros {roots(z) or 'none'}; poles {roots(p)}")]
    return lines


def _delay_table(result) -> str:
    dig, st, m = result.digital, result.stage, result.margins
    rows = []
    for k in range(st.n_corners):
        mark = "*" if k == result.worst_corner else ""
        rows.append([f"{k}{mark}", _fmt(st.vin[k]), _fmt(st.load[k]), f"{st.duty[k]:.3f}",
                     f"{dig.delay_s[k] / dig.ts_s:.3f}", f"{dig.delay_phase_deg[k]:.1f}", _fmt(m.fc_hz[k]),
                     f"{m.pm_deg[k]:.1f}" if np.isfinite(m.pm_deg[k]) else "-", _gm(m, k),
                     "yes" if m.stable[k] else "NO"])
    cols = [Column("#", "", "<"), Column("Vin", "V"), Column("Load", "A"), Column("Duty"), Column("Delay", "Ts"),
            Column("Lag", "deg"), Column("fc", "Hz"), Column("PM", "deg"), Column("GM", "dB"),
            Column("Stable", "", "<")]
    return format_table(cols, rows)


def _comparison_table(result) -> str:
    rows = []
    for method, d in result.digital.designs.items():
        chosen = "*" if method == result.digital.method else ""
        if d.margins is None:
            rows.append([f"{method}{chosen}", "-", "-", "-", "-"])
            continue
        m = d.margins
        rows.append([f"{method}{chosen}", f"{np.nanmin(m.pm_deg):.1f}", f"{np.nanmin(m.gm_db):.1f}",
                     f"{int(np.sum(m.stable))}/{m.stable.size}", f"{d.k_factor:.3g}"])
    cols = [Column("method", "", "<"), Column("worst PM", "deg"), Column("worst GM", "dB"), Column("stable"),
            Column("K")]
    return format_table(cols, rows)


def digital_text(result, header: list[str], findings: list[str]) -> str:
    """The report: ``header`` lines (design, file), the controller, delays and margins, ``findings`` lines."""
    out = list(header) + ["", "Control: digital control"]
    if not result.feasible or result.digital is None:
        out.append("No controller: the targets cannot be met (see warnings).")
    else:
        out += _controller_lines(result)
        out += ["", "Loop gain at every corner, T(z) = Tu(z) C(z) up to fs/2:", _delay_table(result),
                wrap_note("Delay: sample to the modulated edge, in sample periods. Lag: phase the sampling and"
                          " the delay cost at the target fc. PM, GM on the unit circle up to fs/2; Stable: from the"
                          " z-plane roots of 1 + T. *: worst corner."),
                "", "The same targets by each design method (*: the one used):", _comparison_table(result)]
    if findings:
        out += ["", "Warnings and notes:"] + findings
    out += ["", wrap_note(CAUTION)]
    return "\n".join(out)
