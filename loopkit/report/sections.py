"""The report's optional sections: efficiency, tolerance study, switching check.

Each function returns an :class:`~loopkit.report.ExtraSection` built from the very library calls
the CLI commands make (``loopkit efficiency``: :mod:`loopkit.efficiency`; ``loopkit tolerance``:
:mod:`loopkit.montecarlo` and :mod:`loopkit.robust`; ``loopkit simulate``:
:mod:`loopkit.switching`), so the report's numbers are the commands' numbers.  Only words and
table cells are made here; the plots are drawn by :mod:`loopkit.report.section_figures`.

:func:`review_sections` is what ``loopkit report`` and the app call: efficiency always (with the
conduction-only note when the design has no ``[losses]``), the tolerance study and the switching
check only when asked for (they take time).
"""

from __future__ import annotations

import numpy as np

from ..errors import DesignError
from .content import EMPTY, Table, num

__all__ = ["efficiency_section", "review_sections", "switching_section", "tolerance_section"]

_FOUR_SWITCH = "four-switch-buck-boost"


def _pct(x, digits: int = 2) -> str:
    """A fraction as a percentage (as ``loopkit efficiency`` prints it)."""
    return EMPTY if x is None or not np.isfinite(x) else f"{100.0 * float(x):.{digits}f}"


def _fix(x, fmt: str = ".1f") -> str:
    return EMPTY if x is None or not np.isfinite(x) else format(float(x), fmt)


# ------------------------------------------------------------------ efficiency
def efficiency_section(design, points: int = 25):
    """Losses and efficiency per corner, efficiency against load, the four-switch modes.

    Parameters
    ----------
    design : Design
    points : int
        Loads per curve (``loopkit efficiency --points``, default the same 25).

    Returns
    -------
    ExtraSection

    Notes
    -----
    Numbers from :func:`loopkit.efficiency.efficiency`, :func:`~loopkit.efficiency.mode_efficiency`
    and :func:`~loopkit.efficiency.efficiency_curves`, the calls of ``loopkit efficiency``; the
    loss expressions and their sources (Erickson & Maksimovic, Fundamentals of Power Electronics,
    2nd ed., 2001, sec. 4.6; Steinmetz's equation) are in :mod:`loopkit.loss_model`.
    """
    from ..cli_efficiency import MODEL_NOTES
    from ..efficiency import LOSS_TITLES, efficiency, efficiency_curves, mode_efficiency
    from ..loss_model import LOSS_FIELDS
    from . import ExtraSection
    from .html import figure
    from .section_figures import efficiency_svg

    eff = efficiency(design)
    modes = mode_efficiency(design) if design.stage.topology == _FOUR_SWITCH else None
    curves = efficiency_curves(design, points)
    n = eff.vin.shape[0]
    summary = Table(
        ("#", "Vin", "load", "mode", "duty (%)", "Pout", "losses", "efficiency (%)", "largest loss"),
        tuple((str(k), num(eff.vin[k], "V"), num(eff.load[k], "A"), str(eff.mode[k]), f"{100 * eff.duty[k]:.1f}",
               num(eff.p_out_w[k], "W"), num(eff.p_loss_w[k], "W"), _pct(eff.efficiency[k]),
               LOSS_TITLES[max(LOSS_FIELDS, key=lambda f: getattr(eff, f)[k])]) for k in range(n)),
        "Efficiency at every corner")
    used = [f for f in LOSS_FIELDS if np.any(getattr(eff, f) != 0)]
    tables = [summary]
    for caption, names in (("Conduction losses per corner", LOSS_FIELDS[:7]),
                           ("Switching and other losses per corner", LOSS_FIELDS[7:])):
        shown = [f for f in names if f in used]
        if shown:
            tables.append(Table(("#",) + tuple(f"{LOSS_TITLES[f]} (W)" for f in shown),
                                tuple((str(k),) + tuple(_watts(getattr(eff, f)[k]) for f in shown) for k in range(n)),
                                caption + " (terms that are zero everywhere left out)"))
    if modes is not None:
        tables.append(Table(
            ("#", "Vin", "load", "mode by the rule") + tuple(f"{m} (%)" for m in modes.modes)
            + ("best", "cost (points)"),
            tuple((str(k), num(modes.vin[k], "V"), num(modes.load[k], "A"), str(modes.rule[k]))
                  + tuple(_pct(modes.efficiency[k, j]) for j in range(len(modes.modes)))
                  + (str(modes.best[k]), _fix(modes.cost_points[k], ".2f")) for k in range(n)),
            "Each four-switch mode at the same input and load",
            "buck-boost: all four switches every period. cost: efficiency points the rule's mode gives away to the"
            " best mode at that corner. A corner in the transition band (mode 'transition' above) is modelled in"
            " the pure mode that can regulate, named here; a real controller there alternates or blends the"
            " modes."))
    text = []
    if not design.losses.given:
        text.append("Conduction losses only: the design has no [losses] table, so switching overlap, output"
                    " capacitances, recovery, dead time, gate drive, core loss and the controller's own power"
                    " are counted as zero. The efficiency shown is an upper bound.")
    elif eff.omitted:
        text.append("Not given in [losses], counted as zero: " + "; ".join(eff.omitted) + ".")
    text.append(MODEL_NOTES)
    html = figure(efficiency_svg(curves, eff),
                       f"Efficiency against load at each input voltage ({curves.load.size} loads per curve, the"
                       " same curves as loopkit efficiency --csv); markers: the design's corners. A step in a curve is where the"
                       " stage changes mode (CCM/DCM, or the four-switch mode), which changes the loss terms.")
    return ExtraSection("Efficiency", tuple(text), tuple(tables), html)


def _watts(x) -> str:
    return "0" if x == 0 else num(x, "W")


# ------------------------------------------------------------------ tolerance study
def tolerance_section(design, draws: int, random_state: int = 0, *, worst: bool = True, robust: bool = False,
                      workers: int = 1, progress=None):
    """Yield, its intervals, the worst-corner PM distribution, sensitivity, worst case, robust network.

    Parameters
    ----------
    design : Design
        With a ``[tolerances]`` table.
    draws : int
        Monte Carlo draws (``loopkit tolerance --draws``), >= 1.
    random_state : int
        ``loopkit tolerance --random-state``: the same number gives the same draws.
    worst : bool
        Also the extreme-value worst case (``--worst-case``).
    robust : bool
        Also the robust network beside the nominal one (``--robust``).
    workers, progress
        Passed to :func:`loopkit.montecarlo.monte_carlo`.

    Notes
    -----
    Wilson score and Clopper-Pearson intervals (:func:`loopkit.montecarlo.wilson_interval`,
    :func:`~loopkit.montecarlo.clopper_pearson_interval`; L. D. Brown, T. T. Cai, A. DasGupta,
    "Interval estimation for a binomial proportion", Statistical Science 16(2), 2001).
    """
    from ..montecarlo import monte_carlo, prepare_study, sensitivity, worst_case, worst_corner
    from ..tolerance_report import _value
    from . import ExtraSection
    from .html import figure
    from .section_figures import pm_histogram_svg

    if design.tolerances.empty:
        raise DesignError("tolerances", "(none)", "a tolerance study needs a [tolerances] table in the design")
    if not isinstance(draws, (int, np.integer)) or draws < 1:
        raise DesignError("tolerance draws", draws, "must be a whole number >= 1")
    study = prepare_study(design)
    mc = monte_carlo(study, int(draws), int(random_state), workers, progress)
    sens = sensitivity(study, mc)
    wc = worst_case(study) if worst else None
    t = study.targets
    nominal_pm = float(worst_corner(study.nominal)["pm_deg"][0])
    lo, hi = mc.wilson
    cl, ch = mc.clopper_pearson
    passed = int(np.sum(mc.passed))
    text = [(f"{mc.n} Monte Carlo draws (random state {mc.random_state}; loopkit tolerance --draws {mc.n}"
            f" --random-state {mc.random_state} gives the same draws) of the tolerances below, each checked against"
            f" the targets (PM >= {t.pm_deg:g} deg, GM >= {t.gm_db:g} dB, fc {_value(t.fc_hz, 'Hz')} within"
            f" x{t.fc_band:g}) at each of {study.n_corners} corners. Worst-corner PM at nominal values:"
            f" {nominal_pm:.1f} deg."),
            (f"Yield {_pct(mc.yield_fraction, 1)} % ({passed} of {mc.n} draws meet every target at every corner);"
            f" {100 * mc.confidence:g} % interval: Wilson score {_pct(lo, 1)} to {_pct(hi, 1)} %, Clopper-Pearson"
            f" {_pct(cl, 1)} to {_pct(ch, 1)} %.")]
    tables = [Table(("quantity", "nominal", "low", "high", "distribution"),
                    tuple((q.key, _value(q.nominal, q.unit), _value(q.low, q.unit), _value(q.high, q.unit),
                           q.distribution if q.distribution == "uniform" else f"normal {q.sigmas:g} sigma")
                          for q in study.quantities), "What varies")]
    tables.append(Table(("", "draws", "passed", "yield (%)", "Wilson low (%)", "Wilson high (%)",
                         "Clopper-Pearson low (%)", "Clopper-Pearson high (%)"),
                        (("yield", str(mc.n), str(passed), _pct(mc.yield_fraction, 1), _pct(lo, 1), _pct(hi, 1),
                          _pct(cl, 1), _pct(ch, 1)),), f"Yield with its {100 * mc.confidence:g} % intervals"))
    w = mc.worst
    rows = []
    for name, key, unit in (("worst PM (deg)", "pm_deg", "deg"), ("worst GM (dB)", "gm_db", "dB"),
                            ("lowest fc", "fc_min_hz", "Hz"), ("highest fc", "fc_max_hz", "Hz")):
        x = w[key][np.isfinite(w[key])]
        rows.append((name,) + tuple((_fix(np.percentile(x, p)) if unit != "Hz" else num(np.percentile(x, p), "Hz"))
                                    if x.size else EMPTY for p in (0, 1, 5, 50, 95, 100)))
    tables.append(Table(("per draw", "min", "p1", "p5", "median", "p95", "max"), tuple(rows),
                        "Worst corner of each draw: percentiles over the draws"))
    if sens:
        tables.append(Table(("quantity", "PM at low (deg)", "PM at high (deg)", "drop (deg)", "Spearman"),
                            tuple((s.key, _fix(s.pm_low_deg), _fix(s.pm_high_deg), _fix(s.effect_deg, ".2f"),
                                   _fix(s.rank_correlation, "+.2f")) for s in sens),
                            "Sensitivity of the worst-corner PM, largest effect first",
                            "One quantity at a time at its limits, the others nominal; Spearman: rank correlation"
                            " of the quantity's draws with the worst-corner PM."))
    if wc is not None:
        tables.append(Table(("", "worst-corner PM (deg)") + tuple(q.key for q in study.quantities),
                            (("worst case", _fix(wc.pm_deg)) + tuple(_value(v, q.unit) for q, v in
                                                                     zip(study.quantities, wc.values)),),
                            "Extreme-value worst case",
                            f"The lowest worst-corner PM found over the tolerance box ({wc.vertices} vertices,"
                            f" {wc.evaluations} evaluations); the Monte Carlo minimum is"
                            f" {_fix(float(np.min(w['pm_deg'])))} deg."))
    if robust:
        tables.append(_robust_table(study))
    html = figure(pm_histogram_svg(w["pm_deg"], t.pm_deg, nominal_pm, None if wc is None else wc.pm_deg),
                       "Worst-corner phase margin of every draw; the target, the nominal values' PM and the"
                       " worst case marked.")
    return ExtraSection("Tolerances and yield", tuple(text), tuple(tables), html)


def _robust_table(study) -> Table:
    from ..robust import robust_synthesis
    from ..tolerance_report import _value

    r = robust_synthesis(study)
    names = sorted(set(r.parts) | set(r.nominal_parts))
    rows = [("worst-corner PM at nominal values (deg)", _fix(r.nominal_pm_at_nominal_deg), _fix(r.pm_at_nominal_deg)),
            (f"lowest PM over {len(r.scenarios)} plant scenarios (deg)", _fix(r.nominal_worst_pm_deg),
             _fix(r.worst_pm_deg)),
            ("scenario corners missing GM, band or crossover", str(r.nominal_misses), str(r.misses))]
    rows += [(k, _value(r.nominal_parts.get(k, np.nan), "Ω" if k.startswith("R") else "F"),
              _value(r.parts.get(k, np.nan), "Ω" if k.startswith("R") else "F")) for k in names]
    return Table(("", "nominal network", "robust network"), tuple(rows),
                 "Robust compensator beside the nominal one",
                 "The robust network has the best worst-case PM over the plant's tolerance box"
                 + (" (no placement did better on every scenario: the nominal parts are kept)." if r.kept_nominal
                    else "."))


# ------------------------------------------------------------------ switching check
def switching_section(result, loop_gain_corner: int | None = None, progress=None):
    """Steady state of every corner against the averaged operating point; the model's limit.

    Parameters
    ----------
    result : LoopResult
        With parts (a feasible result).
    loop_gain_corner : int, optional
        The corner whose loop gain is measured by injection (default the design corner). One
        corner only: it takes from seconds to about a minute (7 frequencies).

    Notes
    -----
    :func:`loopkit.switching.steady_state` and :func:`loopkit.switching.loop_gain` with the
    frequencies of ``loopkit simulate --loop-gain`` (no list), as ``loopkit simulate --only K
    --loop-gain`` runs them.
    """
    from ..switching import closed_loop_setup, loop_gain, steady_state
    from ..switching.analysis import LIMIT_DB, LIMIT_DEG
    from ..switching.command import default_frequencies
    from ..switching.setup import regulated_output
    from . import ExtraSection

    if not result.feasible:
        raise DesignError("switching check", "(no parts)", "needs parts: the targets cannot be met (see Findings)")
    stage = result.stage
    n = stage.n_corners
    k0 = max(result.design_corner, 0) if loop_gain_corner is None else int(loop_gain_corner)
    if not 0 <= k0 < n:
        raise DesignError("switching check corner", loop_gain_corner, f"must be a corner index from 0 to {n - 1}")
    setup = closed_loop_setup(result)
    ss = steady_state(setup, np.arange(n), progress=progress)
    v_set = regulated_output(result)
    lc = ss.limit_cycle  # a digital loop as built: does it settle?
    rows = []
    for k in range(n):
        mode = ("DCM" if ss.dcm[k] else "CCM") + ("" if ss.settled[k] or lc is not None else "?")
        row = (str(k), result.corner_labels[k], mode, num(ss.vout_v[k], "V", 5), num(ss.ripple_pp_v[k], "V"),
               num(ss.il_peak_a[k], "A"), num(stage.i_peak[k], "A"), f"{100 * ss.duty[k]:.2f}",
               f"{100 * stage.duty[k]:.2f}")
        if lc is not None:
            row += ((f"{lc.u_span[k]:.0f} PWM steps, {lc.code_span[k]:.0f} codes, {num(lc.vo_span_v[k], 'V')}"
                     if lc.hunting[k] else "none"),)
        rows.append(row)
    head = ("#", "corner", "mode", "vout", "ripple p-p", "peak iL", "averaged peak iL", "duty (%)", "averaged duty (%)")
    if lc is None:
        tables = [Table(head, tuple(rows), f"Periodic steady state of the switching simulation (the divider regulates to"
                        f" {num(v_set, 'V', 5)}) against the averaged operating point",
                        "?: the run does not repeat from one period to the next (e.g. subharmonic oscillation); the"
                        " figures are those of the last period." if not np.all(ss.settled) else "")]
    else:
        tables = [Table(head + ("limit cycle",), tuple(rows), "Steady state of the loop as built (fixed-point"
                        " controller, ADC and PWM steps) against the averaged operating point",
                        f"Watched for {lc.periods} periods after settling. A limit cycle: the PWM value or the ADC code"
                        " keeps moving (spans: PWM value, ADC code, the output's one-period mean; Peterchev & Sanders"
                        " 2003).")]
    # A steady state more than 1 % off the set point does not regulate (common practice, no source).
    off = np.abs(ss.vout_v - v_set) > 0.01 * abs(v_set)
    max_duty = float(result.design.modulator.max_duty)
    notes = []
    for k in np.nonzero(off)[0]:
        why = (f"the duty is at the modulator's limit (max_duty {100 * max_duty:.0f} %)"
               if ss.duty[k] >= max_duty - 1e-3 else "the loop does not hold the set point there")
        notes.append(f"Corner #{k} ({result.corner_labels[k]}): the simulated output is"
                     f" {100 * (ss.vout_v[k] - v_set) / abs(v_set):+.1f} % from the set point: {why}; the averaged"
                     " operating point and margins do not describe this corner.")
    f = default_frequencies(result, np.array([k0]), result.design.stage.fsw)
    lg = loop_gain(setup, f, corners=np.array([k0]), progress=progress)
    lg_rows = tuple((num(fi, "Hz"), f"{20 * np.log10(abs(lg.t_switching[0, i])):.2f}",
                     f"{np.degrees(np.angle(lg.t_switching[0, i])):.1f}",
                     f"{20 * np.log10(abs(lg.t_averaged[0, i])):.2f}", f"{np.degrees(np.angle(lg.t_averaged[0, i])):.1f}",
                     f"{lg.diff_db[0, i]:+.2f}", f"{lg.diff_deg[0, i]:+.1f}") for i, fi in enumerate(lg.f_hz))
    ref = "T(z)" if lc is not None else "averaged"
    tables.append(Table(("f", "|T| switching (dB)", "phase switching (deg)", f"|T| {ref} (dB)",
                         f"phase {ref} (deg)", "difference (dB)", "difference (deg)"), lg_rows,
                        f"Loop gain by injection at corner #{k0} ({result.corner_labels[k0]})"))
    lim = float(lg.limit_hz[0])
    digital = lc is not None
    what = ("the controller as built: fixed point, ADC, counter PWM, run until it settles" if digital else
            "the parts to build, to its periodic steady state")
    how = ("a sine added to the ADC value the exact controller sees, against T(z)" if digital else
           "a sine in series with the feedback")
    model = "sampled model T(z)" if digital else "averaged model"
    text = [(f"Every corner simulated cycle by cycle (exact piecewise-linear switching, {what}), beside the averaged"
             " model's operating point."),
            (f"The loop gain by injection ({how}, whole periods, single-bin Fourier) is"
            f" measured at corner #{k0} only ({'the design corner' if loop_gain_corner is None else 'chosen'}):"
            " one corner takes from seconds to about a minute; loopkit simulate --only K --loop-gain runs any other."),
            (f"Model limit at corner #{k0}: the {model} departs from the switching loop by more than"
             f" {LIMIT_DB:g} dB or {LIMIT_DEG:g} deg from {num(lim, 'Hz')} on." if np.isfinite(lim) else
             f"Model limit at corner #{k0}: within {LIMIT_DB:g} dB and {LIMIT_DEG:g} deg at every frequency measured"
             f" (up to {num(float(np.max(lg.f_hz)), 'Hz')}).")] + notes
    return ExtraSection("Switching check", tuple(text), tuple(tables))


# ------------------------------------------------------------------ all of them
def review_sections(design, result, *, efficiency: bool = True, tolerance_draws: int = 0, random_state: int = 0,
                    robust: bool = False, switching: bool = False, progress=None) -> list:
    """The optional sections ``loopkit report`` and the app add, in report order.

    ``design`` is the design as loaded (what ``loopkit efficiency`` and ``loopkit tolerance`` read),
    ``result`` its loop (:func:`loopkit.loop.design_loop`).  Efficiency (default on); the tolerance study when ``tolerance_draws`` > 0 (the design needs a
    ``[tolerances]`` table); the switching check when ``switching`` (needs parts).
    """
    out = []
    if efficiency:
        out.append(efficiency_section(design))
    if tolerance_draws:
        out.append(tolerance_section(design, tolerance_draws, random_state, robust=robust, progress=progress))
    if switching:
        out.append(switching_section(result))
    return out
