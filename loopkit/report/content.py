"""What the design-review report says, as plain data: tables of text cells and sentences.

Every number comes from the one design path (:class:`~loopkit.result.LoopResult`, the step
responses of :mod:`loopkit.timeresponse`) and is written with :func:`loopkit.units.format_value`,
exactly as the CLI writes it, so a reader can compare the report with ``loopkit design`` and its
JSON document.  No HTML here (see :mod:`loopkit.report.html`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..eseries import TOLERANCE
from ..margins import GM_WORDS, gm_state
from ..networks import network_module
from ..schemes import scheme_module
from ..units import format_value
from ..verdict import FC_FSW_LIMIT

__all__ = ["EMPTY", "Table", "corner_table", "design_tables", "findings_table", "limits_lines", "num", "parts_table",
           "step_table"]

#: Cell text where a quantity does not apply.
EMPTY = "—"


@dataclass(frozen=True)
class Table:
    """A table: column titles (with units), rows of text cells, an optional caption and note.

    ``groups`` spans titles over columns: (title, first column, last column), 0-based.
    """

    columns: tuple
    rows: tuple
    caption: str = ""
    note: str = ""
    groups: tuple = field(default_factory=tuple)


def num(value, unit: str = "", digits: int = 3) -> str:
    """Engineering notation as the CLI writes it; :data:`EMPTY` where there is no number."""
    if value is None or not np.isfinite(value):
        return EMPTY
    return format_value(float(value), unit, digits=digits)


def _fixed(value, fmt: str) -> str:
    return EMPTY if value is None or not np.isfinite(value) else format(float(value), fmt)


def _gm(m, k: int) -> str:
    state = gm_state(m)[k]
    return _fixed(m.gm_db[k], ".1f") if state == "number" else GM_WORDS[state]


def mode_text(stage, k: int) -> str:
    sub = str(stage.submode[k])
    return f"{stage.mode[k]} {sub}" if sub else str(stage.mode[k])


def design_tables(result, path: str = "") -> list[Table]:
    """The design as given: power stage, operating range, control scheme and sensing, targets."""
    d = result.design
    st, op = d.stage, d.operating
    stage_rows = [("Topology", st.topology), ("Switching frequency", num(st.fsw, "Hz")),
                  ("Inductance", num(st.inductance, "H"))]
    if st.topology == "flyback":
        stage_rows.append(("Turns ratio", f"{st.turns_ratio:g} : 1"))
    for i, b in enumerate(st.output_caps, 1):
        esr = f", ESR {num(b.esr, 'Ω')}" if b.esr else ""
        stage_rows.append((f"Output capacitors, bank {i}", f"{b.count} × {num(b.capacitance, 'F')}{esr}"))
    stage_rows += [("Inductor DCR", num(st.dcr, "Ω")), ("Switch resistance", num(st.r_switch, "Ω")),
                   ("Rectifier", st.rectifier + (f", {num(st.r_rectifier, 'Ω')}" if st.r_rectifier else "")
                    + (f", drop {num(st.diode_drop, 'V')}" if st.diode_drop else ""))]
    if st.light_load:
        stage_rows.append(("Light load", st.light_load))
    op_rows = [("Output voltage", num(op.vout, "V")),
               ("Input voltages", ", ".join(num(v, "V") for v in op.vin)),
               ("Loads", ", ".join(num(i, "A") for i in op.load)),
               ("Corners", f"{result.stage.n_corners} (every input voltage at every load)")]
    c, m, s = d.control, d.modulator, d.sensing
    scheme = scheme_module(c.scheme)
    ctl_rows = [("Control scheme", scheme.TITLE)]
    if c.scheme == "voltage-mode":
        ctl_rows.append(("PWM ramp", num(m.ramp, "V") + (" with input-voltage feed-forward" if m.feedforward else "")))
    else:
        ctl_rows.append(("Current-sense gain", num(c.sense_gain, "Ω")))
        slope = (num(c.slope, "V/s") if c.slope is not None else num(c.slope_amplitude, "V") + " per period"
                 if c.slope_amplitude is not None else f"{c.slope_ratio:g} × the down-slope"
                 if c.slope_ratio is not None else "chosen for Qp = 1 at the worst CCM corner")
        ctl_rows.append(("Slope compensation", slope))
    ctl_rows += [("Maximum duty", f"{m.max_duty:.0%}"), ("Sensing", f"{s.kind}, reference {num(s.reference, 'V')}")]
    comp = d.compensator
    t = result.targets
    tgt_rows = [("Network", f"{network_module(result.network).TITLE} [{result.network}]")]
    if result.placement is None and result.feasible:
        tgt_rows.append(("Parts", "as given in the design file (no synthesis)"))
    else:
        tgt_rows += [("Target crossover", num(t.fc_hz, "Hz")), ("Target phase margin", f"{t.pm_deg:g} deg"),
                     ("Synthesis", f"{t.method} method, designed at corner #{result.design_corner}"
                      if result.design_corner >= 0 else f"{t.method} method")]
    tgt_rows += [("Required gain margin", f"{comp.gm_db:g} dB"),
                 ("Crossover band accepted", f"fc / {comp.fc_band:g} to fc × {comp.fc_band:g} (CCM corners)"),
                 ("E-series", f"resistors {t.resistor_series}, capacitors {t.capacitor_series}")]
    cols = ("Quantity", "Value")
    return [Table(cols, tuple(stage_rows), "Power stage"), Table(cols, tuple(op_rows), "Operating range"),
            Table(cols, tuple(ctl_rows), "Control and sensing"), Table(cols, tuple(tgt_rows), "Compensator and targets")]


def _designator_order(name: str):
    letters = "".join(ch for ch in name if not ch.isdigit())
    digits = "".join(ch for ch in name if ch.isdigit())
    return (letters, int(digits) if digits else 0)


def parts_table(result) -> Table:
    """The parts list: computed value, the value to build (snapped), series, tolerance, change."""
    t = result.targets
    rows = []
    for name in sorted(result.parts, key=_designator_order):
        value = result.parts[name]
        exact = result.parts_exact.get(name, value)
        unit = "Ω" if name.startswith("R") else "F" if name.startswith("C") else ""
        series = t.resistor_series if name.startswith("R") else t.capacitor_series if name.startswith("C") else ""
        tol = TOLERANCE.get(series)
        change = 100.0 * (value / exact - 1.0) if exact else float("nan")
        rows.append((name, num(exact, unit, 4), num(value, unit, 4), series or EMPTY,
                     f"±{tol:.1%}" if tol else EMPTY, _fixed(change, "+.1f")))
    for name, key in (("Rled", "r_led"), ("Rpull", "r_pull")):
        if network_module(result.network).AMPLIFIER == "optocoupler" and result.design.compensator.opto.get(key):
            value = float(result.design.compensator.opto[key])
            rows.append((name, num(value, "Ω", 4), num(value, "Ω", 4), "given", EMPTY, EMPTY))
    zeros = ", ".join("0 Hz (integrator)" if z == 0 else num(z, "Hz") for z in sorted(result.zeros_hz)) or "none"
    poles = ", ".join("0 Hz (integrator)" if p == 0 else num(p, "Hz") for p in sorted(result.poles_hz)) or "none"
    return Table(("Part", "Computed", "To build", "Series", "Tolerance", "Change (%)"), tuple(rows),
                 "Parts list", f"Network with the parts to build: zeros {zeros}; poles {poles}.")


def corner_table(result) -> Table:
    """Margins at every corner with the parts to build and with the computed (unsnapped) parts."""
    st, m, mx = result.stage, result.margins, result.margins_exact
    given = result.placement is None
    rows = []
    for k in range(st.n_corners):
        row = [f"{k}{' *' if k == result.worst_corner else ''}", num(st.vin[k]), num(st.load[k]), mode_text(st, k),
               num(m.fc_hz[k]), _fixed(m.pm_deg[k], ".1f"), _gm(m, k), num(m.delay_margin_s[k]),
               "yes" if m.stable[k] else "NO"]
        if not given:
            row += [num(mx.fc_hz[k]), _fixed(mx.pm_deg[k], ".1f"), _gm(mx, k)]
        rows.append(tuple(row))
    cols = ["#", "Vin (V)", "Load (A)", "Mode", "fc (Hz)", "PM (deg)", "GM (dB)", "Delay (s)", "Stable"]
    groups = [("parts to build" if not given else "parts as given", 4, 8)]
    if not given:
        cols += ["fc (Hz)", "PM (deg)", "GM (dB)"]
        groups.append(("computed parts (before snapping)", 9, 11))
    note = ("fc: gain crossover (the lowest if several). PM, GM: phase and gain margin"
            f" (GM {GM_WORDS['none']}: the phase never reaches -180 deg below fsw/2; {GM_WORDS['beyond-model']}:"
            " only above half the switching frequency, where the averaged model cannot predict it)."
            " Delay: delay margin. Stable: from the closed-loop poles. *: worst corner (lowest phase margin"
            " with the parts to build).")
    return Table(tuple(cols), tuple(rows), "", note, tuple(groups))


def step_table(step, title: str) -> Table:
    """Figures of a step response (:class:`loopkit.timeresponse.StepResponse`) per corner."""
    rows = []
    for k in range(step.peak_v.size):
        duty = EMPTY if step.duty is None else f"{step.duty_min[k]:.0%} to {step.duty_max[k]:.0%}"
        rows.append((str(k), num(step.peak_v[k]), _fixed(step.peak_pct[k], ".2f"), num(step.t_peak_s[k]),
                     num(step.final_v[k]), _fixed(step.overshoot_pct[k], ".1f"), num(step.settle_s[k]), duty))
    return Table(("#", "Peak (V)", "Peak (%)", "At (s)", "Final (V)", "Overshoot (%)", "Settles (s)", "Duty"),
                 tuple(rows), title,
                 f"Settling band ±{num(step.band_v, 'V')}. {step.model[:1].upper()}{step.model[1:]},"
                 " linearised at the step's start.")


def findings_table(findings) -> Table:
    """Every finding once: severity, corner, what it says (each says what to change)."""
    seen, rows = set(), []
    order = {"error": 0, "warning": 1, "note": 2}
    for f in sorted(findings, key=lambda f: (order.get(f.severity, 3), -1 if f.corner is None else f.corner)):
        key = (f.code, f.message, f.corner)
        if key in seen:
            continue
        seen.add(key)
        rows.append((f.severity, "all" if f.corner is None else f"#{f.corner}", f.message, f.code))
    return Table(("Severity", "Corner", "Finding and what to change", "Code"), tuple(rows))


def limits_lines(result) -> list[str]:
    """The model's limits for this design, in sentences."""
    d = result.design
    fsw = d.stage.fsw
    if result.digital is not None:
        fs = result.digital.fs_hz
        lines = [(f"The loop is the sampled loop T(z): the averaged plant with each duty change at the modulated PWM"
                  f" edge after the loop delay, exact in z up to fs/2 ({num(fs / 2, 'Hz')}); a crossover above fs/10"
                  f" ({num(0.1 * fs, 'Hz')}) is an error finding. The output ripple the ADC samples and the ADC and"
                  " PWM steps are not in T(z): the resolution findings and the switching check show them.")]
    else:
        lines = [(f"The loop is the averaged small-signal model. Its margins are trustworthy up to about fsw/5"
                  f" ({num(FC_FSW_LIMIT * fsw, 'Hz')} here); above that the modulator's sampling makes them"
                  " optimistic.")]
    if result.feasible and result.margins is not None:
        fc_max = np.nanmax(result.margins.fc_hz) if np.any(np.isfinite(result.margins.fc_hz)) else np.nan
        if np.isfinite(fc_max):
            ratio = fsw / fc_max
            lines.append(f"Highest crossover at any corner: {num(fc_max, 'Hz')}, fsw/{ratio:.1f}"
                         + (" — above fsw/5: verify on the bench before trusting the margins." if ratio < 5 else "."))
        beyond = [k for k in range(result.stage.n_corners) if gm_state(result.margins)[k] == "beyond-model"]
        if beyond:
            lines.append("Gain margin beyond the model at corners " + ", ".join(f"#{k}" for k in beyond)
                         + f": the phase reaches -180 deg only above fsw/2 ({num(fsw / 2, 'Hz')}), where the"
                         " averaged model does not hold; the table writes it as "
                         f"'{GM_WORDS['beyond-model']}' rather than a number.")
    if np.any(result.stage.dcm):
        lines.append("DCM corners use the full-order averaged model (J. Sun et al., IEEE TPEL 16(4), 2001) with the"
                     " inductor current kept as a state, the boost-type right-half-plane zero included; peak current"
                     " mode in DCM keeps the reduced-order output impedance its model was derived on.")
    if result.digital is None:
        lines.append("Parts are ideal except the error amplifier's gain and bandwidth where given; part tolerances,"
                     " temperature and capacitor DC-bias derating are not in these margins.")
    else:
        lines.append("The controller's margins are given with its exact and its fixed-point coefficients; plant"
                     " tolerances, temperature and capacitor DC-bias derating are not in these margins.")
    lines.append("Step responses are small-signal: a duty that would saturate is flagged and the answer is then wrong.")
    return lines
