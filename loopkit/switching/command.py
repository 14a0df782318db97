"""``loopkit simulate``: the designed loop run cycle by cycle, beside the averaged model.

Formatting only: every number comes from :mod:`loopkit.switching` and the averaged path.
A progress bar (tqdm, on standard error, only on a terminal) follows each stage of the run;
Ctrl-C cancels (the CLI's exit status 130).
"""

from __future__ import annotations

import argparse

import numpy as np

__all__ = ["add_parser", "default_frequencies", "run"]


def add_parser(sub, add_target_options) -> None:
    """Register the ``simulate`` subcommand on the CLI's subparsers."""
    p = sub.add_parser("simulate", help="switching simulation of the designed loop: steady state, load step,"
                                        " loop gain by injection, against the averaged model")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.add_argument("--only", type=int, metavar="K", help="simulate corner K only (index as in 'loopkit stage')")
    p.add_argument("--load-step", metavar="AMPS", help="load step to simulate, A (e.g. 1.5; negative for a fall)")
    p.add_argument("--loop-gain", metavar="LIST", nargs="?", const="auto",
                   help="measure the loop gain by injection at these frequencies (e.g. 5k,20k,80k; "
                        "without a list: fc/4 to fsw/3)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    add_target_options(p)
    p.set_defaults(run=run)


def _bar(args, desc: str):
    from tqdm import tqdm

    bar = tqdm(total=1, desc=desc, unit="step", leave=False, disable=True if args.no_progress else None)

    def progress(done, total):
        if bar.total != total:
            bar.total = total
            bar.refresh()
        bar.n = done
        bar.refresh() if done == total else bar.update(0)
        return True

    return bar, progress


def _frequencies(text: str, result, corners, fsw: float) -> np.ndarray:
    from ..errors import DesignError
    from ..units import parse_value

    if text == "auto":
        fc = result.margins.fc_hz[corners]
        fc = float(np.nanmin(fc)) if np.any(np.isfinite(fc)) else fsw / 20
        f = np.array([fc / 4, fc / 2, fc, 2 * fc, fsw / 10, fsw / 5, fsw / 3])
        return np.unique(np.clip(f, fsw / 400, 0.45 * fsw))
    try:
        return np.array([parse_value(x, "--loop-gain", "Hz") for x in text.split(",") if x.strip()])
    except DesignError:
        raise
    except ValueError:
        raise DesignError("--loop-gain", text, "must be a list of frequencies, e.g. 5k,20k,80k") from None


def run(args: argparse.Namespace) -> int:
    """The ``simulate`` command."""
    from .. import cli
    from ..errors import DesignError
    from ..tables import Column, format_table, wrap_note
    from . import closed_loop_setup, load_step, loop_gain, steady_state
    from .setup import regulated_output

    design = cli.load_design(args.file)
    result = cli._loop_result(design, args, need_parts="simulate")
    n = result.stage.n_corners
    if args.only is not None and not 0 <= args.only < n:
        raise DesignError("--only", args.only, f"must be from 0 to {n - 1}")
    corners = np.arange(n) if args.only is None else np.array([args.only])
    setup = closed_loop_setup(result)
    fmt, stage = cli._fmt, result.stage
    names = cli._corner_names(stage)
    lines = [design.title or args.file, f"file: {args.file}", "",
             wrap_note("switching simulation (exact piecewise-linear, cycle by cycle) of "
                       + ("the controller as built (fixed point, ADC, counter PWM), against the sampled model T(z)"
                          if setup.digital is not None else "the parts to build, against the averaged model"))]
    bar, progress = _bar(args, "steady state")
    with bar:
        ss = steady_state(setup, corners, progress=progress)
    v_set = regulated_output(result)
    cols = [Column("#"), Column("corner", "", "<"), Column("mode"), Column("vout", "V"), Column("ripple", "V"),
            Column("peak iL", "A"), Column("avg pk", "A"), Column("duty"), Column("avg duty")]
    rows = []
    for j, k in enumerate(corners):
        mode = ("DCM" if ss.dcm[j] else "CCM") + ("" if ss.settled[j] else "?")
        rows.append([str(k), names[k], mode, fmt(ss.vout_v[j], "V", 5), fmt(ss.ripple_pp_v[j], "V"),
                     fmt(ss.il_peak_a[j], "A"), fmt(stage.i_peak[k], "A"), f"{ss.duty[j]:.2%}",
                     f"{stage.duty[k]:.2%}"])
    lc = ss.limit_cycle
    if lc is not None:  # a digital loop: the loop as built, watched for hunting after it settles
        cols.append(Column("limit cycle", "", "<"))
        for j, row in enumerate(rows):
            row[2] = row[2].rstrip("?")
            row.append(f"{lc.u_span[j]:.0f} PWM steps, {lc.code_span[j]:.0f} codes, {fmt(lc.vo_span_v[j], 'V')}"
                       if lc.hunting[j] else "none")
        dp = setup.digital
        v_code = dp.ref_code * dp.lsb_v / dp.h_dc
        lines += ["", wrap_note(f"steady state of the loop as built (fixed-point controller, ADC and PWM steps),"
                                f" watched for {lc.periods} periods after settling; the reference code"
                                f" {dp.ref_code} stands for {fmt(v_code, 'V', 5)} at the sampling instant,"
                                f" ±{fmt(dp.lsb_out_v / 2, 'V')}"), format_table(cols, rows)]
        if np.any(lc.hunting):
            lines.append(wrap_note("a limit cycle: the PWM value or the ADC code keeps moving (spans shown: PWM"
                                   " value, ADC code, the output's one-period average); see the resolution"
                                   " findings of loopkit design (Peterchev & Sanders 2003)"))
    else:
        lines += ["", wrap_note(f"steady state (the divider's parts regulate to {fmt(v_set, 'V', 5)})"),
                  format_table(cols, rows)]
    if lc is None and not np.all(ss.settled):
        lines.append(wrap_note("? the run does not repeat from one period to the next there (e.g. subharmonic"
                               " oscillation): the figures are those of the last period"))
    if args.load_step is not None:
        amp = cli.parse_value(args.load_step, "--load-step", "A")
        bar, progress = _bar(args, "load step")
        with bar:
            st = load_step(setup, amp, corners=corners, progress=progress)
        avg = st.averaged
        cols = [Column("#"), Column("corner", "", "<"), Column("peak", "V"), Column("avg peak", "V"),
                Column("ratio"), Column("settles", "s"), Column("avg settles", "s")]
        rows = [[str(k), names[k], fmt(st.peak_v[j], "V"), fmt(avg.peak_v[k], "V"), f"{st.peak_ratio[j]:.3f}",
                 fmt(st.settle_s[j], "s"), fmt(avg.settle_s[k], "s")] for j, k in enumerate(corners)]
        model = "the sampled model (loopkit step)" if setup.digital is not None else "the averaged model"
        lines += ["", wrap_note(f"load step {fmt(amp, 'A')} at a clock edge: one-period moving average of the output"
                                f" vs {model}, settling band ±{fmt(st.band_v, 'V')}"),
                  format_table(cols, rows)]
    if args.loop_gain is not None:
        f = _frequencies(args.loop_gain, result, corners, design.stage.fsw)
        bar, progress = _bar(args, "loop gain")
        with bar:
            lg = loop_gain(setup, f, corners=corners, progress=progress)
        cols = [Column("#"), Column("f", "Hz"), Column("|T| sw", "dB"), Column("ph sw", "deg"),
                Column("|T| avg", "dB"), Column("ph avg", "deg"), Column("diff", "dB"), Column("diff", "deg")]
        rows = []
        for j, k in enumerate(corners):
            for i, fi in enumerate(lg.f_hz):
                rows.append([str(k), fmt(fi, "Hz"), f"{20 * np.log10(abs(lg.t_switching[j, i])):.2f}",
                             f"{np.degrees(np.angle(lg.t_switching[j, i])):.1f}",
                             f"{20 * np.log10(abs(lg.t_averaged[j, i])):.2f}",
                             f"{np.degrees(np.angle(lg.t_averaged[j, i])):.1f}", f"{lg.diff_db[j, i]:+.2f}",
                             f"{lg.diff_deg[j, i]:+.1f}"])
        how = ("loop gain T by injection in the controller (exact coefficients, no quantisation; whole periods,"
               " single-bin Fourier) vs T(z)" if setup.digital is not None else
               "loop gain T by series injection (whole periods, single-bin Fourier) vs the averaged model")
        lines += ["", wrap_note(how), format_table(cols, rows)]
        for j, k in enumerate(corners):
            lim = lg.limit_hz[j]
            text = (f"#{k}: the averaged model departs by more than 1 dB or 5 deg from {fmt(lim, 'Hz')} on"
                    if np.isfinite(lim) else f"#{k}: within 1 dB and 5 deg at every frequency measured")
            lines.append(wrap_note(text))
    lines += ["", wrap_note(cli.CAUTION)]
    print("\n".join(lines))
    return 0


def default_frequencies(result, corners, fsw: float) -> np.ndarray:
    """The frequencies ``--loop-gain`` measures without a list (fc/4 to fsw/3); the report uses them too."""
    return _frequencies("auto", result, corners, fsw)
