"""The ``loopkit`` command line: tables, CSV and JSON from the one design path.

Subcommands::

    loopkit stage FILE                      power stage at every corner
    loopkit bode FILE --plant|--loop|--compensator [--csv OUT]
    loopkit design FILE [--fc 20k] [--pm 60] [--type 2|3] [--json] [--write]
    loopkit export FILE [--bom OUT.csv] [--spice OUT.cir] [--json OUT.json] [--svg OUT.svg] [--c-header OUT.h]
    loopkit measured FILE MEASUREMENT.csv [--kind loop|plant] [--corner N] [--columns ...] [--fit] [--csv OUT]
    loopkit step FILE --load 0.5:3 [--rise 1u] [--vin-step 18:24] [--ref-step 1%] [--band 1%] [--csv OUT]
    loopkit sweep FILE [--points 400] [--csv OUT]
    loopkit simulate FILE [--only K] [--load-step AMPS] [--loop-gain [5k,20k,80k]]
    loopkit efficiency FILE [--csv OUT] [--json] [--points 25] [--load-min A]
    loopkit report FILE -o OUT.html [--pdf OUT.pdf] [--measured MEASUREMENT.csv] [--load-step 0.5:3]
                   [--tolerance-draws N [--random-state S] [--robust]] [--switching] [--no-efficiency]
    loopkit tolerance FILE [--draws 1000] [--random-state 0] [--workers 2] [--worst-case] [--robust]
                      [--csv OUT] [--json OUT]
    loopkit gui [FILE]

Every command calls the same library path as the app and the tests
(:func:`loopkit.analyse_stage`, :func:`loopkit.loop.design_loop`).  Bad input
ends with exit status 2 and one line on stderr naming the field, the value
and what is allowed; never a traceback.
"""

from __future__ import annotations

import argparse
import csv
import errno
import io
import os
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np

from . import __version__
from .atomicfile import check_writable, write_files_atomic, write_text_atomic
from .cautions import CAUTION
from .design import METHODS, Design
from .designfile import load_design
from .errors import DesignError, DesignFileError
from .margins import GM_WORDS, gm_state
from .networks import NETWORKS, network_title
from .powerstage import StageResult, analyse_stage
from .schemes import scheme_module
from .tables import EMPTY, Column, format_table, wrap_note
from .units import format_value, parse_value

__all__ = ["CAUTION", "bode_table", "build_parser", "corner_name", "design_text", "main", "stage_report"]


SERIES = ("E6", "E12", "E24", "E48", "E96", "E192", "none")

#: Exit status for bad input (argparse uses the same).
EXIT_BAD_INPUT = 2
#: Exit status of every command that reports a loop when it does not meet its targets at every
#: corner (or no parts meet them): the report says which corner and why.
EXIT_NOT_MET = 1


def _verdict_status(result, command: str, file: str) -> int:
    """0 when the loop meets its targets at every corner; else a line on stderr and :data:`EXIT_NOT_MET`."""
    if result is None or result.met:
        return 0
    errors = [f for f in result.findings if f.severity == "error"]
    corners = sorted({f.corner for f in errors if f.corner is not None})
    if not result.feasible:
        why = "the targets cannot be met (the report says why)"
    elif corners:
        why = (f"{len(corners)} of {result.stage.n_corners} corners miss the targets"
               f" ({', '.join(sorted({f.code for f in errors}))}; `loopkit design {file}` says which and why)")
    else:
        why = f"{errors[0].message}"
    print(f"loopkit {command}: {file}: not met: {why}", file=sys.stderr)
    return EXIT_NOT_MET


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line on stderr, not usage plus message."""

    def error(self, message: str):
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


# ---------------------------------------------------------------------- formatting
_ASCII = False  # set by main() when stdout cannot encode "µ"


def _fmt(value: float, unit: str = "", digits: int = 3) -> str:
    """Engineering notation for a table cell; ``-`` where the quantity does not apply."""
    if value is None or not np.isfinite(value):
        return EMPTY
    return format_value(float(value), unit, digits=digits, ascii_only=_ASCII)


def _plain(value: float, fmt: str) -> str:
    return EMPTY if value is None or not np.isfinite(value) else format(float(value), fmt)


def corner_name(vin: float, load: float) -> str:
    """Corner name used in CSV headers: ``"vin=12V load=1.5A"`` (ASCII)."""
    return f"vin={format_value(float(vin), 'V', 4, True)} load={format_value(float(load), 'A', 4, True)}"


def _mode_text(stage: StageResult, k: int) -> str:
    sub = stage.submode[k]
    mode = str(stage.mode[k])
    return f"{mode} {'trans' if sub == 'transition' else sub}" if sub else mode


def _findings_text(findings) -> list[str]:
    """Each finding once, with its corner."""
    seen, lines = set(), []
    for f in findings:
        key = (f.code, f.message, f.corner)
        if key in seen:
            continue
        seen.add(key)
        where = f"#{f.corner}" if f.corner is not None else "-"
        lines.append(wrap_note(f"{f.message} [{f.code}]", first=f"  {where:>4} {f.severity}: "))
    return lines


def _design_header(design: Design, path: str) -> list[str]:
    st, op = design.stage, design.operating
    caps = " + ".join(
        f"{b.count}x{_fmt(b.capacitance, 'F')}" + (f" ESR {_fmt(b.esr, 'Ω' if not _ASCII else 'ohm')}" if b.esr else "")
        for b in st.output_caps
    )
    lines = [design.title or Path(path).stem, f"file: {path}"]
    extra = f", n = {st.turns_ratio:g}:1" if st.topology == "flyback" else ""
    lines.append(
        wrap_note(
            f"{st.topology}, Vout {_fmt(op.vout, 'V')}, fsw {_fmt(st.fsw, 'Hz')}, L {_fmt(st.inductance, 'H')}{extra}, "
            f"Cout {caps}, {st.rectifier} rectifier, light load {st.light_load_mode}"
        )
    )
    return lines


def stage_report(design: Design, stage: StageResult, path: str = "") -> str:
    """The ``loopkit stage`` text: one row per corner, legend, warnings, caution."""
    n = stage.n_corners
    warned = {f.corner for f in stage.findings if f.severity == "warning"}
    any_ccm, any_dcm = bool(np.any(~stage.dcm)), bool(np.any(stage.dcm))
    has_esr = bool(np.any(np.isfinite(stage.f_esr_hz)))
    cols = [
        Column("#", "", "<"),
        Column("Vin", "V"),
        Column("Load", "A"),
        Column("Duty", "%"),
        Column("Mode", "", "<"),
        Column("Ripple", "A pp"),
    ]
    if any_ccm:
        cols += [Column("f0", "Hz"), Column("Q")]
    if any_dcm:
        cols += [Column("fp", "Hz"), Column("fhf", "Hz")]
    if has_esr:
        cols.append(Column("ESR zero", "Hz"))
    cols.append(Column("RHP zero", "Hz"))
    rows = []
    for k in range(n):
        row = [
            f"{k:>{len(str(n - 1))}}{'!' if k in warned else ''}",
            _fmt(stage.vin[k]),
            _fmt(stage.load[k]),
            _plain(100.0 * stage.duty[k], ".1f"),
            _mode_text(stage, k),
            _fmt(stage.ripple_pp[k]),
        ]
        if any_ccm:
            row += [_fmt(stage.f0_hz[k]), _plain(stage.q[k], ".3g")]
        if any_dcm:
            row += [_fmt(stage.fp_hz[k]), _fmt(stage.f_hf_hz[k])]
        if has_esr:
            zs = sorted(z for z in stage.f_esr_hz[k] if np.isfinite(z))
            row.append(",".join(_fmt(z) for z in zs) or EMPTY)
        row.append(_fmt(stage.f_rhp_hz[k]))
        rows.append(row)
    out = _design_header(design, path) + [""] if path or design.title else []
    out.append(format_table(cols, rows))
    legend = ["Ripple: inductor current peak to peak" + (" (DCM: its peak)" if any_dcm else "") + "."]
    if design.stage.topology == "flyback":
        legend.append("Flyback: Vin and ripple on the primary side (magnetising current).")
    if design.stage.topology == "four-switch-buck-boost":
        legend.append("Duty: of the leg that switches (buck leg in buck mode, boost leg in boost mode).")
    if any_ccm:
        legend.append("f0, Q: CCM double pole.")
    if any_dcm:
        legend.append("fp, fhf: DCM output pole and high-frequency pole.")
    if has_esr:
        legend.append("ESR zero: one per capacitor bank.")
    legend.append("RHP zero: right-half-plane zero of Gvd.")
    if np.any(stage.submode == "transition"):
        legend.append("trans: four-switch transition band.")
    legend.append(f"{EMPTY}: does not apply." + (" !: see warnings." if warned else ""))
    out.append(wrap_note(" ".join(legend)))
    findings = list(stage.findings)
    if design.control.scheme == "digital":  # its delays and coefficients are in loopkit design
        findings += list(scheme_module("digital").uncompensated(design, stage).findings)
    elif design.control.scheme != "voltage-mode":
        scheme = scheme_module(design.control.scheme).uncompensated(design, stage)
        out += ["", _current_mode_table(design, stage, scheme.figures)]
        findings += list(scheme.findings)
    notes = _findings_text(findings)
    if notes:
        out += ["", "Warnings and notes:"] + notes
    out += ["", wrap_note(CAUTION)]
    return "\n".join(out)


def _current_mode_table(design: Design, stage: StageResult, fig: dict) -> str:
    """Peak current mode per corner: slopes at the comparator, mc, Qp, perturbation ratio, peak current."""
    cols = [Column("#", "", "<"), Column("Vin", "V"), Column("Load", "A"), Column("Mode", "", "<"),
            Column("Sn", "V/s"), Column("Sf", "V/s"), Column("mc"), Column("Qp"), Column("ratio"),
            Column("Ipeak", "A")]
    rows = []
    for k in range(stage.n_corners):
        dcm = bool(stage.dcm[k])
        rows.append([str(k), _fmt(stage.vin[k]), _fmt(stage.load[k]), _mode_text(stage, k),
                     _fmt(fig["sn_v_per_s"][k]), _fmt(fig["sf_v_per_s"][k]), _plain(fig["mc"][k], ".3g"),
                     EMPTY if dcm else _plain(fig["qp"][k], ".3g"), EMPTY if dcm else _plain(fig["ratio"][k], "+.3f"),
                     _fmt(fig["i_peak_a"][k])])
    se = float(fig["se_v_per_s"][0])
    c = design.control
    how = ("as given" if c.slope is not None or c.slope_amplitude is not None
           else f"{c.slope_ratio:g} x the steepest down-slope" if c.slope_ratio is not None
           else "chosen for Qp = 1 at the worst CCM corner")
    legend = (f"Peak current mode, sense gain {_fmt(c.sense_gain, 'ohm' if _ASCII else 'Ω')}, external ramp"
              f" {_fmt(se, 'V/s')} ({_fmt(se / design.stage.fsw, 'V')} per period; {how}). Sn, Sf: on- and"
              " off-time slopes of the sensed current at the comparator. mc = 1 + Se/Sn. Qp: Q of the"
              " sampling double pole at fsw/2 (Ridley 1991). ratio: a peak-current error's factor from one"
              " period to the next, -(Sf - Se)/(Sn + Se); |ratio| >= 1 is subharmonic oscillation."
              f" Ipeak: peak inductor current{' (primary)' if design.stage.topology == 'flyback' else ''}.")
    return format_table(cols, rows) + "\n" + wrap_note(legend)


# ---------------------------------------------------------------------- design
def _part_unit(designator: str) -> str:
    if designator.startswith("R"):
        return "ohm" if _ASCII else "Ω"
    return "F" if designator.startswith("C") else ""


def _gm(m, k: int) -> str:
    """The gain margin as the CLI, JSON and app write it: a number, "none" or "beyond fsw/2"."""
    state = gm_state(m)[k]
    return _plain(m.gm_db[k], ".1f") if state == "number" else GM_WORDS[state]


def _angle(value: float) -> str:
    return _plain(value, ".1f")


def _targets_lines(result) -> list[str]:
    t, st = result.targets, result.stage
    given = _given(result)
    lines = [f"Network: {network_title(result.network)} [{result.network}]"]
    if result.design.control.scheme != "voltage-mode":
        lines.append(f"Control: {scheme_module(result.design.control.scheme).TITLE}")
    if given:
        lines.append(
            "Parts: as given in the design file's [compensator.parts] (no synthesis; use --synthesise"
            " or a target option to design new ones)"
        )
    else:
        k = result.design_corner
        at = ""
        if k >= 0:
            why = ", the worst for phase at fc" if t.design_corner is None else ""
            at = f", designed at corner #{k} ({_fmt(st.vin[k], 'V')} in, {_fmt(st.load[k], 'A')}{why})"
        lines.append(f"Targets: fc {_fmt(t.fc_hz, 'Hz')}, phase margin {t.pm_deg:g} deg, {t.method} method{at}")
        p = result.placement
        if p is not None:
            kf = f", K = {p.k_factor:.3g}" if np.isfinite(p.k_factor) else ""
            lines.append(
                f"Plant phase at fc {_angle(p.plant_phase_deg)} deg; boost {_angle(p.boost_deg)} deg"
                f" (needed {_angle(p.required_boost_deg)} deg){kf}"
            )
    return [wrap_note(line) for line in lines]


def _given(result) -> bool:
    """True when the design's own parts were analysed (no synthesis, nothing snapped)."""
    return result.feasible and result.placement is None


def _parts_table(result) -> str:
    t = result.targets
    if _given(result):
        rows = [[name, _fmt(value, _part_unit(name), 4)] for name, value in result.parts.items()]
        return format_table([Column("Part", "", "<"), Column("value")], rows)
    rows = []
    for name, value in result.parts.items():
        exact = result.parts_exact.get(name, value)
        unit = _part_unit(name)
        series = t.resistor_series if name.startswith("R") else t.capacitor_series if name.startswith("C") else ""
        change = 100.0 * (value / exact - 1.0) if exact else float("nan")
        rows.append([name, _fmt(exact, unit, 4), _fmt(value, unit), series, _plain(change, "+.1f")])
    cols = [
        Column("Part", "", "<"),
        Column("computed"),
        Column("to build"),
        Column("series", "", "<"),
        Column("change", "%"),
    ]
    return format_table(cols, rows)


def _roots_text(label: str, roots) -> str:
    shown = ["0 Hz (integrator)" if r == 0 else _fmt(r, "Hz") for r in sorted(roots)]
    return f"{label} {', '.join(shown) if shown else 'none'}"


def _margins_table(result) -> str:
    st, m, mx = result.stage, result.margins, result.margins_exact
    warned = {f.corner for f in result.findings if f.severity == "warning" and f.corner is not None}
    width = len(str(st.n_corners - 1))
    rows = []
    for k in range(st.n_corners):
        mark = ("*" if k == result.worst_corner else "") + ("!" if k in warned else "")
        rows.append(
            [
                f"{k:>{width}}{mark}",
                _fmt(st.vin[k]),
                _fmt(st.load[k]),
                _mode_text(st, k),
                _fmt(m.fc_hz[k]),
                _angle(m.pm_deg[k]),
                _gm(m, k),
                _fmt(m.delay_margin_s[k]),
                "yes" if m.stable[k] else "NO",
                _fmt(mx.fc_hz[k]),
                _angle(mx.pm_deg[k]),
                _gm(mx, k),
            ]
        )
    if _given(result):  # the given parts are built as they are: one set of figures
        rows = [row[:9] for row in rows]
    cols = [
        Column("#", "", "<"),
        Column("Vin", "V"),
        Column("Load", "A"),
        Column("Mode", "", "<"),
        Column("fc", "Hz"),
        Column("PM", "deg"),
        Column("GM", "dB"),
        Column("Delay", "s"),
        Column("Stable", "", "<"),
        Column("fc", "Hz"),
        Column("PM", "deg"),
        Column("GM", "dB"),
    ]
    if _given(result):
        return format_table(cols[:9], rows, groups=[("parts as given", 4, 8)])
    return format_table(cols, rows, groups=[("parts to build", 4, 8), ("computed parts", 9, 11)])


def design_text(result, path: str = "") -> str:
    """The ``loopkit design`` text: targets, parts, poles and zeros, margins per corner, warnings."""
    if result.design.control.scheme == "digital":  # no parts: the controller's coefficients instead
        from .digital_report import digital_text

        return digital_text(result, _design_header(result.design, path), _findings_text(result.findings))
    out = _design_header(result.design, path) + [""] + _targets_lines(result) + [""]
    if not result.feasible:
        out.append("No parts: the targets cannot be met with this network.")
    else:
        out += [
            _parts_table(result),
            "",
            wrap_note(
                "Network with the parts to build: "
                + _roots_text("zeros", result.zeros_hz)
                + "; "
                + _roots_text("poles", result.poles_hz)
            ),
            "",
            "Loop gain at every corner:",
            _margins_table(result),
            wrap_note(
                "fc: gain crossover (the lowest if several). PM, GM: phase and gain margin"
                f" (GM {GM_WORDS['none']}: the phase never reaches -180 deg below fsw/2; {GM_WORDS['beyond-model']}:"
                " it does only above half the switching frequency, where the averaged model does not predict"
                " it). Delay: delay margin."
                " Stable: from the closed-loop poles. *: worst corner (lowest phase margin with the"
                " parts to build)."
                + (
                    " !: see warnings."
                    if any(f.severity == "warning" and f.corner is not None for f in result.findings)
                    else ""
                )
            ),
        ]
    notes = _findings_text(result.findings)
    if notes:
        out += ["", "Warnings and notes:"] + notes
    out += ["", wrap_note(CAUTION)]
    return "\n".join(out)


# ---------------------------------------------------------------------- bode
#: Frequencies a Bode table may span, Hz: below 1 mHz and above 10 GHz no converter loop has anything to show.
F_GRID_HZ = (1e-3, 1e10)


def _grid(args, design: Design, default_fmax: float) -> np.ndarray:
    fmin = parse_value(args.fmin, "--fmin", "Hz") if args.fmin is not None else 10.0
    fmax = parse_value(args.fmax, "--fmax", "Hz") if args.fmax is not None else default_fmax
    for name, value, text in (("--fmin", fmin, args.fmin), ("--fmax", fmax, args.fmax)):
        if not F_GRID_HZ[0] <= value <= F_GRID_HZ[1]:
            raise DesignError(name, text if text is not None else _fmt(value, "Hz"),
                              f"must be from {_fmt(F_GRID_HZ[0], 'Hz')} to {_fmt(F_GRID_HZ[1], 'Hz')}")
    if not fmax > fmin:
        raise DesignError(
            "--fmax",
            args.fmax if args.fmax is not None else _fmt(fmax, "Hz"),
            f"must be above --fmin ({_fmt(fmin, 'Hz')})",
        )
    if not 2 <= args.points <= 100_000:
        raise DesignError("--points", args.points, "must be a whole number from 2 to 100000")
    return np.geomspace(fmin, fmax, args.points)


def bode_table(f_hz: np.ndarray, curves: list[tuple[str, np.ndarray, np.ndarray]]) -> str:
    """CSV text: ``f_hz`` then, per curve, ``<name> mag_db`` and ``<name> phase_deg``.

    ``curves`` holds (name, mag_db (nf,), phase_deg (nf,)) per column set.
    """
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    header = ["f_hz"]
    for name, _, _ in curves:
        header += [f"{name} mag_db", f"{name} phase_deg"]
    writer.writerow(header)
    for i, f in enumerate(f_hz):
        row = [f"{f:.10g}"]
        for _, mag, ph in curves:
            row += [f"{mag[i]:.6g}", f"{ph[i]:.6g}"]
        writer.writerow(row)
    return buf.getvalue()


def _corner_names(stage: StageResult) -> list[str]:
    names = [corner_name(v, i) for v, i in zip(stage.vin, stage.load)]
    if len(set(names)) < len(names):  # values too close to tell apart at 4 digits
        names = [f"#{k} {name}" for k, name in enumerate(names)]
    return names


def _cmd_bode(args) -> int:
    design = load_design(args.file)
    kinds = [k for k in ("plant", "loop", "compensator") if getattr(args, k)] or ["plant"]
    nyquist = None
    if design.control.scheme == "digital" and ("loop" in kinds or "compensator" in kinds):
        # a sampled loop ends at fs/2 (its response repeats beyond); the plant alone is continuous
        nyquist = design.stage.fsw * design.digital.sample_ratio / 2.0
        if args.fmax is not None and parse_value(args.fmax, "--fmax", "Hz") > nyquist * (1 + 1e-12):
            raise DesignError("--fmax", args.fmax, f"a digital loop ends at the Nyquist frequency fs/2 = {_fmt(nyquist, 'Hz')}")
    f_hz = _grid(args, design, design.stage.fsw / 2.0 if nyquist is None else nyquist)
    stage = analyse_stage(design)
    names = _corner_names(stage)
    curves = []
    result = None
    if "loop" in kinds or "compensator" in kinds:
        result = _loop_result(design, args, f_hz, need_parts="plot")
    for kind in kinds:
        prefix = f"{kind} " if len(kinds) > 1 else ""
        if kind == "compensator":
            mag, ph = result.compensator.bode(f_hz)
            curves.append(("compensator", mag[0], ph[0]))
            continue
        tf = stage.gvd if kind == "plant" else result.loop
        mag, ph = tf.bode(f_hz)
        curves += [(f"{prefix}{name}", mag[k], ph[k]) for k, name in enumerate(names)]
    text = bode_table(f_hz, curves)
    if args.csv in (None, "-"):
        sys.stdout.write(text)
        return _verdict_status(result, "bode", args.file)
    _write_text(args.csv, text)
    what = " + ".join(kinds)
    print(
        wrap_note(
            f"wrote {args.csv}: {what}, {len(curves)} column sets x {f_hz.size} frequencies "
            f"({_fmt(f_hz[0], 'Hz')} to {_fmt(f_hz[-1], 'Hz')})"
            + (f"; Nyquist frequency fs/2 = {_fmt(nyquist, 'Hz')}" if nyquist is not None else "")
        )
    )
    print(wrap_note(CAUTION))
    return _verdict_status(result, "bode", args.file)


def _write_text(path: str, text: str) -> None:
    write_text_atomic(path, text)


# ---------------------------------------------------------------------- loop (design, export)
def _targets(design: Design, args):
    """Targets from the design file with the command-line overrides; None when nothing is overridden."""
    from .loop import Targets

    changes = {}
    if getattr(args, "fc", None) is not None:
        changes["fc_hz"] = parse_value(args.fc, "--fc", "Hz")
        if not changes["fc_hz"] > 0:
            raise DesignError("--fc", args.fc, "must be > 0 Hz")
    if getattr(args, "pm", None) is not None:
        pm = parse_value(args.pm, "--pm", "deg")
        if not 0 < pm < 180:
            raise DesignError("--pm", args.pm, "must be between 0 and 180 deg")
        changes["pm_deg"] = pm
    if getattr(args, "method", None) is not None:
        changes["method"] = args.method
    if getattr(args, "network", None) is not None:
        changes["network"] = args.network
    elif getattr(args, "type", None) is not None:
        changes["network"] = f"type{args.type}"
    series = getattr(args, "series", None)
    if series is not None:
        changes["resistor_series"] = changes["capacitor_series"] = series
    if getattr(args, "resistor_series", None) is not None:
        changes["resistor_series"] = args.resistor_series
    if getattr(args, "capacitor_series", None) is not None:
        changes["capacitor_series"] = args.capacitor_series
    if getattr(args, "corner", None) is not None:
        if args.corner != "worst":
            try:
                corner = int(args.corner)
            except ValueError:
                raise DesignError("--corner", args.corner, "must be 'worst' or a corner index") from None
            if not 0 <= corner < design.operating.n_corners:
                raise DesignError("--corner", args.corner, f"must be from 0 to {design.operating.n_corners - 1}")
            changes["design_corner"] = corner
        else:
            changes["design_corner"] = None
    if not changes and not getattr(args, "synthesise", False):
        return None
    return replace(Targets.from_design(design), **changes)


def _loop_result(design: Design, args, f_hz=None, need_parts: str = ""):
    """The loop for the command's targets; with ``need_parts`` an infeasible result is an error."""
    from .loop import design_loop

    result = design_loop(design, _targets(design, args), f_hz=f_hz)
    if need_parts and not result.feasible:
        why = next((f.message for f in result.findings if f.code == "infeasible"), "the targets cannot be met")
        raise DesignError("", args.file, f"{why}; nothing to {need_parts} (loopkit design {args.file} says more)")
    return result


def _add_target_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("targets (default: the design file's [compensator] table)")
    g.add_argument("--fc", help="target crossover frequency, e.g. 20k (Hz)")
    g.add_argument("--pm", help="target phase margin, deg, e.g. 60")
    g.add_argument("--type", choices=("1", "2", "3"), help="op-amp network Type I, II or III")
    g.add_argument("--network", choices=NETWORKS, help="network by name (overrides --type)")
    g.add_argument("--method", choices=METHODS,
                   help="synthesis: auto (K-factor, then a search for the worst corner; default), k-factor, placement")
    g.add_argument(
        "--series",
        choices=SERIES,
        metavar="SERIES",
        help="E-series for resistors and capacitors: E6, E12, E24, E48, E96, E192 or none",
    )
    g.add_argument("--resistor-series", choices=SERIES, metavar="SERIES", help="E-series for resistors (default E96)")
    g.add_argument("--capacitor-series", choices=SERIES, metavar="SERIES", help="E-series for capacitors (default E12)")
    g.add_argument("--corner", help="corner index to design at, or 'worst' (default)")
    g.add_argument(
        "--synthesise",
        action="store_true",
        help="synthesise new parts even when the design file gives [compensator.parts]",
    )


def _cmd_design(args) -> int:
    from .export import results_json

    design = load_design(args.file)
    if args.write:
        check_writable(args.file)  # a read-only file is refused before the work, not after
    result = _loop_result(design, args)
    if args.json:
        sys.stdout.write(results_json(result))
    else:
        print(design_text(result, args.file))
    if args.write:
        if not result.feasible:
            raise DesignError("--write", args.file, "no parts to write: the targets are not feasible (see warnings)")
        from .designedit import update_design_file  # tomlkit only for this
        from .loop import apply_parts

        update_design_file(args.file, design, apply_parts(design, result))  # only the parts and targets change
        print(f"saved the parts and targets to {args.file}", file=sys.stderr if args.json else sys.stdout)
    return _verdict_status(result, "design", args.file)


def _cmd_export(args) -> int:
    from . import export

    if not (args.bom or args.spice or args.json or args.svg or args.c_header):
        raise DesignError("--bom/--spice/--json/--svg/--c-header", "(none given)", "give at least one output file")
    outputs = [
        (option, path, writer)
        for option, path, writer in (
            ("--bom", args.bom, export.bom_csv),
            ("--spice", args.spice, export.spice_netlist),
            ("--json", args.json, export.results_json),
            ("--svg", args.svg, _network_drawing),
            ("--c-header", args.c_header, export.c_header_text),
        )
        if path
    ]
    _check_outputs(args.file, outputs)
    design = load_design(args.file)
    if design.control.scheme == "digital" and (args.bom or args.spice or args.svg):
        option = "--bom" if args.bom else "--spice" if args.spice else "--svg"
        raise DesignError(option, getattr(args, option[2:]), "a digital controller has no parts or network:"
                          " export --json (the difference equation's coefficients as plain numbers) or --c-header")
    if design.control.scheme != "digital" and args.c_header:
        raise DesignError("--c-header", args.c_header, "needs a digital controller ([control] scheme = \"digital\")")
    result = _loop_result(design, args, need_parts="export")
    # every file made in memory, then all written to temporaries and moved: a failure leaves none half-written
    write_files_atomic([(path, writer(result)) for _, path, writer in outputs])
    print(wrap_note(f"wrote {', '.join(path for _, path, _ in outputs)}"))
    print(wrap_note(CAUTION))
    return _verdict_status(result, "export", args.file)


def _check_outputs(design_file: str, outputs) -> None:
    """Each export to its own file, none of them the design file, none read-only (before any work)."""
    seen = {}
    for option, path, _ in outputs:
        key = os.path.realpath(path)
        if key == os.path.realpath(design_file):
            raise DesignError(option, path, "is the design file itself; choose another output file")
        if key in seen:
            raise DesignError(option, path, f"is also the {seen[key]} file; give each output its own file")
        seen[key] = option
        check_writable(path)


def _network_drawing(result) -> str:
    """SVG of the network with the parts to build, the caution as an XML comment before the drawing."""
    from .loop import network_context
    from .schematic import network_svg

    svg = network_svg(result.network, result.parts, network_context(result.design))
    head, sep, body = svg.partition("?>") if svg.startswith("<?xml") else ("", "", svg)
    comment = f"<!-- loopkit {result.network} network, parts to build. {CAUTION} -->\n"
    return f"{head}{sep}\n{comment}{body.lstrip()}" if sep else comment + body


# ---------------------------------------------------------------------- step (closed loop in time)
def _step_pair(text: str, option: str, unit: str) -> tuple[float, float]:
    parts = str(text).split(":")
    if len(parts) != 2:
        raise DesignError(option, text, f"must be FROM:TO, e.g. 0.5:3 ({unit})")
    a, b = (parse_value(x, option, unit) for x in parts)
    if a == b:
        raise DesignError(option, text, "FROM and TO must differ")
    return a, b


def _volts_or_percent(text: str, option: str, vout: float) -> float:
    t = str(text).strip()
    if t.endswith("%"):
        try:
            pct = float(t[:-1])
        except ValueError:
            raise DesignError(option, text, "must be a voltage (e.g. 50m) or a percentage of Vout (e.g. 1%)") from None
        return pct / 100.0 * abs(vout)
    return parse_value(t, option, "V")


def _ref_codes(text: str, base) -> float | None:
    """A digital set-point step given in ADC codes ("1code", "-2codes") as volts at the output; None otherwise."""
    t = str(text).strip().lower()
    stem = t.removesuffix("codes").removesuffix("code")
    if stem == t:
        return None
    try:
        codes = float(stem)
    except ValueError:
        raise DesignError("--ref-step", text, "ADC codes as a number, e.g. 1code or -2codes") from None
    if not (np.isfinite(codes) and codes != 0):
        raise DesignError("--ref-step", text, "a nonzero number of ADC codes")
    per_code = base.digital.adc_lsb_v / float(base.digital.sensing_gain[0])  # signed: output volts per code
    return codes * per_code


def _cmd_step(args) -> int:
    """Load, input-voltage and set-point steps per corner from the averaged closed loop (or the sampled loop of a
    digital design, its controller kept at the step's corners)."""
    from .loop import LoopSession, apply_parts, design_loop
    from .timeresponse import deviation_rule_of_thumb, sizing, step_response

    design = load_design(args.file)
    digital = design.control.scheme == "digital"
    vout = abs(design.operating.vout)
    if not (args.load or args.vin_step or args.ref_step):
        raise DesignError("--load/--vin-step/--ref-step", "(none given)", "give at least one step")
    rise = parse_value(args.rise, "--rise", "s") if args.rise is not None else 0.0
    band = _volts_or_percent(args.band, "--band", vout) if args.band is not None else 0.01 * vout
    limit = _volts_or_percent(args.max_dev, "--max-dev", vout) if args.max_dev is not None else None
    settle_limit = parse_value(args.max_settle, "--max-settle", "s") if args.max_settle is not None else None
    span = parse_value(args.span, "--span", "s") if args.span is not None else None
    for option, value in (("--band", band), ("--max-dev", limit), ("--max-settle", settle_limit), ("--span", span)):
        if value is not None and not value > 0:
            raise DesignError(option, getattr(args, option[2:].replace("-", "_")), "must be > 0")
    base = _loop_result(design, args, need_parts="simulate")
    built = apply_parts(design, base)
    if digital:  # the controller designed for every corner, kept at the step's corners (as the parts are)
        from .digital_step import hold_controller

        def at_point(moved):
            return hold_controller(base, moved)
    else:
        def at_point(moved):
            return LoopSession(moved).run()
    runs = []  # (title, kind, amplitude, result)
    if args.load:
        a, b = _step_pair(args.load, "--load", "A")
        moved = replace(built, operating=replace(built.operating, load=(a,)))
        runs.append((f"load step {_fmt(a, 'A')} to {_fmt(b, 'A')}", "load", b - a, at_point(moved)))
    if args.vin_step:
        a, b = _step_pair(args.vin_step, "--vin-step", "V")
        moved = replace(built, operating=replace(built.operating, vin=(a,)))
        runs.append((f"input step {_fmt(a, 'V')} to {_fmt(b, 'V')}", "line", b - a, at_point(moved)))
    if args.ref_step:
        r = _ref_codes(args.ref_step, base) if digital else None
        r = _volts_or_percent(args.ref_step, "--ref-step", vout) if r is None else r
        runs.append((f"set-point step {_fmt(r, 'V')}", "reference", r, base if digital else design_loop(built)))
    status, csv_cols, lines = 0, [], [design.title or Path(args.file).stem, f"file: {args.file}"]
    for title, kind, amp, result in runs:
        sr = step_response(result, kind, amp, rise_s=rise, band_v=band, span_s=span)
        corners = range(result.stage.n_corners)
        if args.corner is not None:
            if not 0 <= args.corner < result.stage.n_corners:
                raise DesignError("--corner", args.corner, f"must be from 0 to {result.stage.n_corners - 1}")
            corners = [args.corner]
        model = sr.model + (f"; one ADC code is {_fmt(float(np.min(result.digital.adc_lsb_out_v)), 'V')} at the"
                            " output" if digital else "")
        lines += ["", wrap_note(f"{title}, rise {_fmt(rise, 's')}, settling band ±{_fmt(band, 'V')}"
                                f" ({model}, linearised at the step's start)")]
        cols = [Column("#"), Column("corner", "", "<"), Column("peak", "V"), Column("peak", "%"),
                Column("at", "s"), Column("final", "V"), Column("overshoot", "%"), Column("settles", "s"),
                Column("duty", "range")]
        rows = []
        for k in corners:
            duty = EMPTY if sr.duty is None else f"{sr.duty_min[k]:.0%}-{sr.duty_max[k]:.0%}"
            rows.append([str(k), corner_name(result.stage.vin[k], result.stage.load[k]).replace("vin=", "")
                         .replace(" load=", " "), _fmt(sr.peak_v[k], "V"), _plain(sr.peak_pct[k], ".2f"),
                         _fmt(sr.t_peak_s[k], "s"), _fmt(sr.final_v[k], "V"), _plain(sr.overshoot_pct[k], ".1f"),
                         _fmt(sr.settle_s[k], "s"), duty])
        lines.append(format_table(cols, rows))
        if kind == "load":
            c_f = sum(bank.capacitance * bank.count for bank in design.stage.output_caps)
            fc = result.margins.fc_hz
            est = deviation_rule_of_thumb(amp, fc, c_f)
            text = (f"rule of thumb dV = dI/(2 pi fc C) (common practice, no source), C = {_fmt(c_f, 'F')}: "
                    + ", ".join(f"#{k} {_fmt(est[k], 'V')} (fc {_fmt(fc[k], 'Hz')})" for k in corners))
            if limit is not None:
                need = sizing(amp, limit, fc, c_f)
                text += (f"; to keep within {_fmt(limit, 'V')}: fc >= {_fmt(need['fc_needed_hz'][0], 'Hz')} with"
                         f" this C, or C >= " + ", ".join(f"#{k} {_fmt(need['c_needed_f'][k], 'F')}" for k in corners)
                         + " at today's fc")
            lines.append(wrap_note(text))
        if args.corner is None:
            notes = [f for f in sr.findings]
        else:
            notes = [f for f in sr.findings if f.corner == args.corner]
        lines += _findings_text(notes)
        if result.design.control.scheme not in ("voltage-mode", "digital"):
            lines.append(wrap_note("duty and inductor current: voltage mode only (not modelled for this scheme)"))
        if limit is not None and np.any(~(np.abs(sr.peak_v[list(corners)]) <= limit)):
            status = EXIT_NOT_MET
        if settle_limit is not None and np.any(~(sr.settle_s[list(corners)] <= settle_limit)):
            status = EXIT_NOT_MET
        csv_cols.append((kind, result, sr, list(corners)))
    lines += ["", wrap_note(CAUTION)]
    if args.csv:
        _write_text(args.csv, _step_csv(csv_cols))
        lines.insert(-2, wrap_note(f"wrote {args.csv}"))
    print("\n".join(lines))
    if status:
        print(f"loopkit step: {args.file}: a step misses --max-dev/--max-settle (see the table)", file=sys.stderr)
    return status


def _step_csv(runs) -> str:
    """One block per step: t_s, then per corner the output deviation (and inductor current, duty in voltage mode)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([f"# {CAUTION}"])
    for kind, result, sr, corners in runs:
        names = _corner_names(result.stage)
        header, cols = [f"{kind} t_s"], [sr.t_s]
        for k in corners:
            header.append(f"{kind} {names[k]} dv_v")
            cols.append(sr.v[k])
            if sr.i is not None:
                header += [f"{kind} {names[k]} il_a", f"{kind} {names[k]} duty"]
                cols += [sr.i[k], sr.duty[k]]
        writer.writerow(header)
        for row in np.stack(cols, axis=1):
            writer.writerow([f"{x:.9g}" for x in row])
    return buf.getvalue()


def _cmd_stage(args) -> int:
    design = load_design(args.file)
    print(stage_report(design, analyse_stage(design), args.file))
    return 0


def _cmd_sweep(args) -> int:
    """Dense input-voltage sweep (:func:`loopkit.sweep.vin_sweep`): per load, the lowest PM and the fc range."""
    from .sweep import vin_sweep
    from .tolerance_report import progress_bar

    design = load_design(args.file)
    if not 2 <= args.points <= 1_000_000:
        raise DesignError("--points", args.points, "must be a whole number from 2 to 1000000")
    if args.csv and args.csv != "-":
        check_writable(args.csv)
    result = _loop_result(design, args)
    if not result.feasible:
        print(design_text(result, args.file))
        return _verdict_status(result, "sweep", args.file)
    lo, hi = min(design.operating.vin), max(design.operating.vin)
    vin = np.linspace(lo, hi, args.points) if hi > lo else np.array([lo])
    update, close = progress_bar(vin.size, None if not args.no_progress else False)
    try:
        s = vin_sweep(design, result, vin, update)
    finally:
        close()
    rows = []
    for load in design.operating.load:
        k = np.nonzero(s.load == load)[0]
        usable = k[s.stable[k] & np.isfinite(s.pm_deg[k])]
        worst = usable[np.argmin(s.pm_deg[usable])] if usable.size else None
        gm = s.gm_db[k][np.isfinite(s.gm_db[k])]
        rows.append([format_value(load, "A"), f"{s.pm_deg[worst]:.1f}" if worst is not None else "-",
                     format_value(s.vin[worst], "V") if worst is not None else "-",
                     format_value(np.nanmin(s.fc_hz[k]), "Hz"), format_value(np.nanmax(s.fc_hz[k]), "Hz"),
                     f"{gm.min():.1f}" if gm.size else "none", str(int(np.sum(~s.stable[k])))])
    lines = [wrap_note(f"input-voltage sweep of {args.file}: {vin.size} input voltages x"
                       f" {len(design.operating.load)} loads, "
                       + (f"controller kept: {s.controller}" if s.controller else "parts as built")), "",
             format_table([Column("load"), Column("lowest PM", "deg"), Column("at vin"), Column("fc min"),
                           Column("fc max"), Column("lowest GM", "dB"), Column("unstable")], rows), ""]
    if args.csv:
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["vin_v", "load_a", "fc_hz", "pm_deg", "gm_db", "stable"])
        for i in range(s.vin.size):
            w.writerow([f"{s.vin[i]:.10g}", f"{s.load[i]:.10g}", f"{s.fc_hz[i]:.10g}", f"{s.pm_deg[i]:.6g}",
                        f"{s.gm_db[i]:.6g}", int(s.stable[i])])
        _write_text(args.csv, buf.getvalue())
        lines.append(wrap_note(f"wrote {args.csv}: {s.vin.size} swept corners"))
    lines.append(wrap_note(CAUTION))
    print("\n".join(lines))
    return 0


def _cmd_tolerance(args) -> int:
    """Tolerance study (:mod:`loopkit.montecarlo`); Ctrl-C keeps the draws finished and reports them."""
    from .montecarlo import monte_carlo, prepare_study, sensitivity, worst_case
    from .tolerance_report import draws_csv, progress_bar, study_json, study_text

    design = load_design(args.file)
    if args.draws < 0:
        raise DesignError("--draws", args.draws, "must be a whole number >= 0")
    if args.workers < 1:
        raise DesignError("--workers", args.workers, "must be a whole number >= 1")
    min_yield = None
    if args.min_yield is not None:
        try:
            min_yield = float(args.min_yield.strip().rstrip("%")) / 100.0
        except ValueError:
            min_yield = -1.0
        if not 0.0 <= min_yield <= 1.0:
            raise DesignError("--min-yield", args.min_yield, "must be a percentage from 0 to 100, e.g. 99%")
    for out in (args.csv, args.json):
        if out and out != "-":
            check_writable(out)
    if args.robust:
        from .robust import check_robust_applies

        check_robust_applies(design)  # before the study's work
    study = prepare_study(design)
    mc = None
    if args.draws:
        client = None
        if args.dask:
            try:
                from distributed import Client
            except ImportError:
                raise DesignError("--dask", args.dask, "needs Dask: pip install 'loopkit[dask]'") from None
            client = Client(args.dask)
        update, close = progress_bar(args.draws, None if not args.no_progress else False)
        try:
            mc = monte_carlo(study, args.draws, args.random_state, args.workers, update, client=client)
        finally:
            close()
            if client is not None:
                client.close()
    sens = sensitivity(study, mc)
    wc = worst_case(study) if args.worst_case else None
    text = study_text(study, mc, sens, wc, args.file)
    robust = None
    if args.robust:
        from .robust import robust_synthesis
        from .tolerance_report import robust_text

        robust = robust_synthesis(study)
        head, _, tail = text.rpartition("\n\nCaution")
        text = head + "\n\n" + robust_text(robust) + "\n\nCaution" + tail
    print(text)
    if args.csv and mc is not None:
        _write_text(args.csv, draws_csv(mc))
    if args.json:
        _write_text(args.json, study_json(study, mc, sens, wc, robust))
    if mc is not None and mc.cancelled:
        return 130
    if min_yield is not None and mc is not None and mc.yield_fraction < min_yield:
        print(f"loopkit tolerance: {args.file}: yield {100 * mc.yield_fraction:.1f} % is below"
              f" {100 * min_yield:g} %", file=sys.stderr)
        return EXIT_NOT_MET
    return 0


def _cmd_gui(args) -> int:
    """Start the desktop app (package ``app``) as its own process: the library never imports it."""
    import importlib.util
    import subprocess

    if importlib.util.find_spec("app") is None:
        raise DesignError("gui", "app", "the desktop app is not installed with this loopkit")
    return subprocess.call([sys.executable, "-m", "app", *([args.file] if args.file else [])])


# ---------------------------------------------------------------------- measured
def _cmd_measured(args) -> int:
    """A bench measurement against the design: measured margins, the difference, optionally the fit."""
    from .loop import design_loop
    from .measured import parse_columns, read_measurement
    from .measured_fit import compare, measured_margins

    design = load_design(args.file)
    columns = parse_columns(args.columns) if args.columns else None
    m = read_measurement(args.measurement, args.kind, columns)
    if args.invert:
        m = replace(m, response=-m.response)
    outputs = [(o, p, None) for o, p in (("--csv", args.csv), ("--save-fit", args.save_fit)) if p]
    _check_outputs(args.file, outputs)
    for option, path, _ in outputs:
        if os.path.realpath(path) == os.path.realpath(args.measurement):
            raise DesignError(option, path, "is the measurement itself; choose another output file")
    result = design_loop(design)
    n = result.stage.n_corners
    corner = max(result.design_corner, 0)
    if args.corner is not None:
        if not (args.corner.isdigit() and int(args.corner) < n):
            raise DesignError("--corner", args.corner, f"must be a corner index from 0 to {n - 1}")
        corner = int(args.corner)
    if args.kind != "plant" and not result.feasible:
        raise DesignError("", args.file, f"no parts to compare a {args.kind} measurement with (loopkit design"
                          f" {args.file} says why)")
    cmp = compare(m, result, corner)
    lo, hi = m.f_range_hz
    st = result.stage
    lines = [wrap_note(f"{args.measurement}: {m.kind}, {m.f_hz.size} points, {_fmt(lo, 'Hz')} to {_fmt(hi, 'Hz')};"
                       f" against {args.file} at corner #{corner} ({corner_name(st.vin[corner], st.load[corner])})")]
    if m.kind == "loop":
        mm = measured_margins(m)
        gm = f"{_plain(mm.gm_db, '.1f')} dB at {_fmt(mm.f180_hz, 'Hz')}" if np.isfinite(mm.gm_db) else EMPTY
        lines.append(f"  measured:  fc {_fmt(mm.fc_hz, 'Hz')}, PM {_plain(mm.pm_deg, '.1f')} deg, GM {gm}")
        if len(mm.crossovers_hz) > 1:
            lines.append(wrap_note(f"the measured gain crosses 0 dB {len(mm.crossovers_hz)} times ("
                                   + ", ".join(_fmt(x, "Hz") for x in mm.crossovers_hz) + "); PM is the smallest",
                                   first="  note: "))
        pm = result.margins
        gmp = (f"{_plain(pm.gm_db[corner], '.1f')} dB at {_fmt(pm.f180_hz[corner], 'Hz')}"
               if np.isfinite(pm.gm_db[corner]) else _gm(pm, corner))
        lines.append(f"  predicted: fc {_fmt(pm.fc_hz[corner], 'Hz')}, PM {_plain(pm.pm_deg[corner], '.1f')} deg,"
                     f" GM {gmp}")
        lines.extend(wrap_note(note, first="  note: ") for note in mm.notes)
    if m.kind == "loop" and abs(cmp.diff_deg[0]) > 135.0:
        lines.append(wrap_note("at the lowest frequency the measured phase is opposite to the predicted one: if the"
                               " analyser shows the loop as -T (its phase at crossover is the phase margin), give"
                               " --invert", first="  note: "))
    picks = np.unique([int(np.argmin(np.abs(np.log(m.f_hz / f)))) for f in np.geomspace(lo, hi, 9)])
    meas_ph = np.degrees(np.unwrap(np.angle(cmp.measured)))
    pred_ph = np.degrees(np.unwrap(np.angle(cmp.predicted)))
    cols = [Column("f", "Hz"), Column("measured", "dB"), Column("", "deg"), Column("predicted", "dB"),
            Column("", "deg"), Column("difference", "dB"), Column("", "deg")]
    rows = [[_fmt(m.f_hz[i], ""), _plain(20 * np.log10(abs(cmp.measured[i])), ".2f"), _plain(meas_ph[i], ".1f"),
             _plain(20 * np.log10(abs(cmp.predicted[i])), ".2f"), _plain(pred_ph[i], ".1f"),
             _plain(cmp.diff_db[i], "+.2f"), _plain(cmp.diff_deg[i], "+.1f")] for i in picks]
    lines += ["", "Measured against predicted (difference = measured / predicted):", format_table(cols, rows, indent="  ")]
    if args.fit or args.save_fit:
        from .measured_fit import FIT_PARAMETERS, fit_stage

        params = tuple(filter(None, (x.strip() for x in args.fit_params.split(","))))
        for p in params or ("",):
            if p not in FIT_PARAMETERS:
                raise DesignError("--fit-params", args.fit_params, f"a list from {', '.join(FIT_PARAMETERS)}")
        fit = fit_stage(design, m, corner, params=params, result=result)
        gain_unit = "1/" + ("ohm" if design.control.scheme == "peak-current" else "V")
        frows = [[p.name, ("ohm" if _ASCII and p.unit == "Ω" else p.unit) or gain_unit, _fmt(p.design_value), _fmt(p.value),
                  _fmt(p.sigma) if np.isfinite(p.sigma) else EMPTY,
                  f"{(p.value / p.design_value - 1):+.1%}" if p.design_value else EMPTY,
                  "at bound" if p.at_bound else ""] for p in fit.parameters]
        lines += ["", f"Fitted stage parameters (bounded least squares, corner #{corner}):",
                  format_table([Column("param", align="<"), Column("unit", align="<"), Column("design"),
                                Column("fitted"), Column("+-1 sigma" if _ASCII else "±1 sigma"), Column("change"), Column("", align="<")],
                               frows, indent="  "),
                  f"  residual rms {fit.rms_db:.3f} dB, {fit.rms_deg:.2f} deg over {fit.n_points} points"]
        if not fit.success:
            lines.append(wrap_note(f"the fit did not converge: {fit.message}", first="  note: "))
        lines.extend(wrap_note(note, first="  note: ") for note in fit.notes)
        if args.save_fit:
            from .designfile import save_design

            save_design(fit.design, args.save_fit)
            lines.append(wrap_note(f"wrote {args.save_fit}: the design with the fitted values"))
    if args.csv:
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["f_hz", "measured_mag_db", "measured_phase_deg", "predicted_mag_db", "predicted_phase_deg",
                    "diff_db", "diff_deg"])
        for i in range(m.f_hz.size):
            w.writerow([f"{m.f_hz[i]:.10g}", f"{20 * np.log10(abs(cmp.measured[i])):.6g}", f"{meas_ph[i]:.6g}",
                        f"{20 * np.log10(abs(cmp.predicted[i])):.6g}", f"{pred_ph[i]:.6g}", f"{cmp.diff_db[i]:.6g}",
                        f"{cmp.diff_deg[i]:.6g}"])
        _write_text(args.csv, buf.getvalue())
        lines.append(wrap_note(f"wrote {args.csv}: measured, predicted and difference at {m.f_hz.size} frequencies"))
    lines.append(wrap_note(CAUTION))
    print("\n".join(lines))
    return 0


# ---------------------------------------------------------------------- report
def _cmd_report(args) -> int:
    """The design-review report: HTML (and a PDF of it), with measurements laid over their corner."""
    from .loop import design_loop
    from .measured import parse_columns, read_measurement
    from .measured_overlay import measured_overlay
    from .report import find_chromium, write_report

    if not (args.output or args.pdf):
        raise DesignError("--output/--pdf", "(none given)", "give the HTML file (-o) or the PDF file (--pdf), or both")
    outputs = [(o, p, None) for o, p in (("-o", args.output), ("--pdf", args.pdf)) if p]
    _check_outputs(args.file, outputs)
    if args.pdf:
        find_chromium()  # a missing Chromium is said before the work
    load_step = _step_pair(args.load_step, "--load-step", "A") if args.load_step else None
    design = load_design(args.file)
    if args.tolerance_draws < 0:
        raise DesignError("--tolerance-draws", args.tolerance_draws, "must be a whole number >= 0")
    if args.tolerance_draws and design.tolerances.empty:
        raise DesignError("--tolerance-draws", args.tolerance_draws, f"needs a [tolerances] table in {args.file}")
    if args.robust and not args.tolerance_draws:
        raise DesignError("--robust", "(given)", "goes with --tolerance-draws N")
    result = design_loop(design)
    overlays = []
    if args.measured:
        columns = parse_columns(args.columns) if args.columns else None
        m = read_measurement(args.measured, args.kind, columns)
        if args.invert:
            m = replace(m, response=-m.response)
        n = result.stage.n_corners
        corner = max(result.design_corner, 0)
        if args.corner is not None:
            if not (args.corner.isdigit() and int(args.corner) < n):
                raise DesignError("--corner", args.corner, f"must be a corner index from 0 to {n - 1}")
            corner = int(args.corner)
        if args.kind != "plant" and not result.feasible:
            raise DesignError("", args.file, f"no parts to compare a {args.kind} measurement with (loopkit design"
                              f" {args.file} says why)")
        overlays.append(measured_overlay(result, m, corner))
    from .report.sections import review_sections

    extra = review_sections(design, result, efficiency=not args.no_efficiency, tolerance_draws=args.tolerance_draws,
                            random_state=args.random_state, robust=args.robust, switching=args.switching)
    write_report(result, args.output, args.pdf, path=args.file, overlays=overlays, load_step=load_step,
                 extra_sections=extra)
    print(wrap_note(f"wrote {', '.join(p for _, p, _ in outputs)}"))
    print(wrap_note(CAUTION))
    return _verdict_status(result, "report", args.file)


# ---------------------------------------------------------------------- parser
def build_parser() -> argparse.ArgumentParser:
    """The argparse parser of the ``loopkit`` command."""
    parser = _Parser(
        prog="loopkit",
        description="Design and verify the feedback loop of a switching "
        "DC-DC converter at every operating corner. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"loopkit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("stage", help="power stage at every corner: duty, mode, ripple, poles, zeros")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.set_defaults(run=_cmd_stage)

    p = sub.add_parser("bode", help="Bode data (Hz, dB, deg) per corner as CSV")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.add_argument("--plant", action="store_true", help="control-to-output Gvd of the power stage (the default)")
    p.add_argument("--loop", action="store_true", help="loop gain T with the snapped parts")
    p.add_argument("--compensator", action="store_true", help="the compensator network (snapped parts)")
    p.add_argument("--csv", metavar="OUT", help="CSV file to write ('-' or none: standard output)")
    p.add_argument("--points", type=int, default=1000, help="number of log-spaced frequencies (default 1000)")
    p.add_argument("--fmin", help="lowest frequency, e.g. 10 (Hz, default 10)")
    p.add_argument("--fmax", help="highest frequency, e.g. 1M (Hz, default fsw/2)")
    _add_target_options(p)
    p.set_defaults(run=_cmd_bode)

    p = sub.add_parser("design", help="synthesise the compensator; parts, margins at every corner")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    _add_target_options(p)
    p.add_argument("--json", action="store_true", help="print one JSON document instead of tables")
    p.add_argument("--write", action="store_true", help="save the parts and targets back into FILE")
    p.set_defaults(run=_cmd_design)

    p = sub.add_parser("export", help="hand-off files: BOM (CSV), SPICE netlist, results (JSON), drawing (SVG)")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.add_argument("--bom", metavar="OUT.csv", help="bill of materials")
    p.add_argument("--spice", metavar="OUT.cir", help="ngspice netlist of the network (nodes in, out)")
    p.add_argument("--json", metavar="OUT.json", help="results document")
    p.add_argument("--svg", metavar="OUT.svg", help="drawing of the network with the parts to build")
    p.add_argument("--c-header", metavar="OUT.h", help="digital control: the fixed-point controller as a C header")
    _add_target_options(p)
    p.set_defaults(run=_cmd_export)

    p = sub.add_parser("measured", help="a bench measurement against the design: margins, difference, fit")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.add_argument("measurement", metavar="MEASUREMENT.csv", help="measured response (CSV from the analyser)")
    p.add_argument("--kind", choices=("loop", "plant", "compensator"), default="loop",
                   help="what was measured: loop gain T (default), plant (control voltage to output), compensator")
    p.add_argument("--corner", help="corner index the measurement was taken at (default: the design corner)")
    p.add_argument("--columns", help="column mapping where the header is ambiguous, e.g. f_khz=0,gain_db=2,phase_deg=3")
    p.add_argument("--invert", action="store_true",
                   help="negate the measurement (an analyser that shows the loop as -T)")
    p.add_argument("--fit", action="store_true", help="fit output capacitance, ESR, inductance and modulator gain")
    p.add_argument("--fit-params", default="c,esr,l,gain", metavar="LIST",
                   help="parameters to fit, from c, esr, l, gain (default all)")
    p.add_argument("--save-fit", metavar="OUT.toml", help="with --fit: write the design with the fitted values")
    p.add_argument("--csv", metavar="OUT", help="write measured, predicted and difference at every frequency")
    p.set_defaults(run=_cmd_measured)

    p = sub.add_parser("step", help="load, input and set-point steps per corner: peak, overshoot, settling")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.add_argument("--load", metavar="FROM:TO", help="load step, A, e.g. 0.5:3 (linearised at FROM)")
    p.add_argument("--vin-step", metavar="FROM:TO", help="input-voltage step, V, e.g. 18:24 (linearised at FROM)")
    p.add_argument("--ref-step", metavar="STEP", help="set-point step: volts (50m) or percent of Vout (1%%); digital designs also ADC codes"
                   " (1code)")
    p.add_argument("--rise", help="rise time of the step, s (default 0: an ideal step)")
    p.add_argument("--band", help="settling band: volts or percent of Vout (default 1%%)")
    p.add_argument("--max-dev", help="allowed peak deviation: volts or percent of Vout (exit 1 when missed)")
    p.add_argument("--max-settle", help="allowed settling time, s (exit 1 when missed)")
    p.add_argument("--span", help="simulated time, s (default from the crossover and the slowest pole)")
    p.add_argument("--corner", type=int, help="show one corner only (index in the step's corners)")
    p.add_argument("--csv", metavar="OUT", help="write the waveforms as CSV")
    p.set_defaults(run=_cmd_step)

    p = sub.add_parser("sweep", help="margins at many input voltages with the parts to build (every load)")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.add_argument("--points", type=int, default=400, help="input voltages from vin min to max (default 400)")
    p.add_argument("--csv", metavar="OUT", help="write vin, load, fc, PM, GM, stable per swept corner")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    _add_target_options(p)
    p.set_defaults(run=_cmd_sweep)

    p = sub.add_parser("tolerance", help="tolerance study: Monte Carlo yield, sensitivity, worst case")
    p.add_argument("file", metavar="FILE", help="design file (TOML) with a [tolerances] table")
    p.add_argument("--draws", type=int, default=1000, help="Monte Carlo draws (default 1000; 0: none)")
    p.add_argument("--random-state", type=int, default=0, help="random state of the draws (default 0)")
    p.add_argument("--workers", type=int, default=1, help="processes (default 1)")
    p.add_argument("--dask", metavar="ADDRESS", help="run the draws on a Dask scheduler (pip install loopkit[dask])")
    p.add_argument("--worst-case", action="store_true", help="also the extreme-value worst case")
    p.add_argument("--robust", action="store_true",
                   help="also the network for the best worst-case PM over the plant's tolerance box")
    p.add_argument("--min-yield", metavar="PERCENT", help="exit 1 when the yield is below this, e.g. 99%%")
    p.add_argument("--csv", metavar="OUT", help="write the draws (values, worst-corner margins, passed) as CSV")
    p.add_argument("--json", metavar="OUT", help="write the whole study as JSON")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.set_defaults(run=_cmd_tolerance)
    from .switching.command import add_parser as add_simulate_parser

    add_simulate_parser(sub, _add_target_options)
    p = sub.add_parser("report", help="design-review report: HTML page (and PDF) with plots, tables, findings")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.add_argument("-o", "--output", metavar="OUT.html", help="the report as one self-contained HTML file")
    p.add_argument("--pdf", metavar="OUT.pdf", help="the report as PDF (needs headless Chromium)")
    p.add_argument("--measured", metavar="MEASUREMENT.csv", help="a bench measurement to lay over its corner")
    p.add_argument("--kind", choices=("loop", "plant", "compensator"), default="loop",
                   help="what was measured: loop gain T (default), plant (control voltage to output), compensator")
    p.add_argument("--corner", help="corner index the measurement was taken at (default: the design corner)")
    p.add_argument("--columns", help="column mapping where the header is ambiguous, e.g. f_khz=0,gain_db=2,phase_deg=3")
    p.add_argument("--invert", action="store_true", help="negate the measurement (an analyser that shows -T)")
    p.add_argument("--load-step", metavar="FROM:TO", help="load step shown, A (default: half the largest load to it)")
    p.add_argument("--no-efficiency", action="store_true", help="leave out the efficiency section")
    p.add_argument("--tolerance-draws", type=int, default=0, metavar="N",
                   help="add the tolerance study with N Monte Carlo draws (needs [tolerances]; default 0: none)")
    p.add_argument("--random-state", type=int, default=0, help="random state of the tolerance draws (default 0)")
    p.add_argument("--robust", action="store_true", help="with the tolerance study, also the robust network")
    p.add_argument("--switching", action="store_true",
                   help="add the switching check: steady state per corner, loop gain by injection at the design corner")
    p.set_defaults(run=_cmd_report)

    p = sub.add_parser("gui", help="open the desktop app")
    p.add_argument("file", metavar="FILE", nargs="?", help="design file to open")
    p.set_defaults(run=_cmd_gui)

    from .cli_efficiency import add_efficiency_command  # loopkit efficiency (its own module)

    add_efficiency_command(sub)
    return parser


def _stdout_can(text: str) -> bool:
    try:
        text.encode(sys.stdout.encoding or "ascii")
    except (UnicodeEncodeError, LookupError):
        return False
    return True


def _quiet_stdout() -> None:
    """Point standard output at the null device, so the interpreter's last flush cannot fail."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, AttributeError, ValueError):
        pass


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit status (0 success, 2 bad input).

    A closed standard output (``loopkit ... >&-``) is one line on stderr and
    status 2; a reader that stops early (``loopkit ... | head -1``) ends the
    command quietly with status 0: what it read was complete.
    """
    global _ASCII
    if sys.stdout is None:  # started with standard output closed
        if sys.stderr is not None:
            print("loopkit: error: standard output is closed: there is nowhere to write", file=sys.stderr)
        return EXIT_BAD_INPUT
    _ASCII = not _stdout_can("µΩ")
    args = build_parser().parse_args(argv)
    from .threads import limit_blas_threads

    limit_blas_threads()
    try:
        status = args.run(args)
        sys.stdout.flush()  # a write error shows here, not as a traceback at exit
        return status
    except DesignFileError as exc:
        print(f"loopkit {args.command}: error: {exc}", file=sys.stderr)
    except DesignError as exc:  # found after loading (e.g. a corner the stage cannot reach): name the file
        file = getattr(args, "file", None)
        where = "" if exc.field.startswith("--") or not file or file in str(exc) else f"{file}: "
        print(f"loopkit {args.command}: error: {where}{exc}", file=sys.stderr)
    except BrokenPipeError:  # e.g. piped into head: stop quietly
        _quiet_stdout()
        return 0
    except OSError as exc:
        if exc.filename is None and exc.errno in (errno.EBADF, errno.ENOSPC, errno.EIO):
            _quiet_stdout()  # the standard output itself failed (closed, full disk)
            print(f"loopkit {args.command}: error: cannot write the standard output: {exc.strerror}", file=sys.stderr)
            return EXIT_BAD_INPUT
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        print(f"loopkit {args.command}: error: {where}{exc.strerror or exc}", file=sys.stderr)
    except KeyboardInterrupt:
        return 130
    return EXIT_BAD_INPUT


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
