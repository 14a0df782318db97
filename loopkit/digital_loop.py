"""The loop with a digital controller: from the sampled plant to a :class:`~loopkit.result.LoopResult`.

:class:`loopkit.loop.LoopSession` hands a design whose control scheme is sampled
(:mod:`loopkit.schemes.digital`) to :func:`prepare` (the analysis grid ends at fs/2, the open
loop is ``Tu(z)``) and :func:`run` (the controller for the targets, margins, findings).  The same
session serves the CLI, the app and the tests.

Per run, at the design corner (the CCM corner whose ``Tu(z)`` has the most gain at fc), three controllers of the design's form are made from the same fc and PM:
``direct`` (designed in z on the exact sampled loop), ``tustin`` and ``matched`` (one analog
design, discretised; :mod:`loopkit.digital_design`).  The design's ``digital.method`` picks the
one the result carries; the others are kept with their margins for comparison.  Margins come
from :func:`loopkit.discrete_margins.discrete_loop_margins` (unit circle up to fs/2, stability
from the z-plane roots of 1 + T), the verdict and findings from :mod:`loopkit.verdict` and
:mod:`loopkit.findings` as for analog loops, plus the model's limit for sampled loops
(:data:`FC_FS_LIMIT`).

:class:`DigitalLoop` (``LoopResult.digital``) carries what firmware and its fixed-point
realisation need: the difference equation ``(b, a)``, Ts, the ADC and PWM scaling, the duty range
and the output's sensitivity to duty (dc Gvd) per corner.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
from scipy.signal import lfilter

from .digital_control import matched, tustin
from .digital_design import analog_design, direct_design
from .digital_handoff import realisation
from .discrete import Discrete, nyquist_grid
from .discrete_margins import discrete_loop_margins
from .errors import DesignError, Finding, InfeasibleDesign
from .findings import loop_findings, target_findings, unique, why_not_single_crossover, worst_corner
from .margins import Margins
from .rational import Rational
from .result import LoopResult, OpenLoop, Targets, with_targets
from .schemes import digital as scheme
from .units import format_value

__all__ = ["FC_FS_LIMIT", "DigitalDesign", "DigitalLoop", "closed_loop_step", "prepare", "run"]

#: A crossover above fs times this gets the model-limit error: the sampled model is exact for the averaged
#: plant, but the ripple and the duty's quantisation matter more there (common practice, no source).
FC_FS_LIMIT = 0.1


@dataclass(frozen=True, eq=False)
class DigitalDesign:
    """One controller for the targets: how it was made, its coefficients and the margins it gives.

    ``controller`` is None (and ``reason`` says why) where the targets cannot be met that way.
    """

    method: str
    controller: Discrete | None
    k_factor: float
    margins: Margins | None
    reason: str = ""


@dataclass(frozen=True, eq=False)
class DigitalLoop:
    """The digital side of a :class:`~loopkit.result.LoopResult` (scheme ``digital``).

    Attributes
    ----------
    ts_s, fs_hz : float
        Sample period, s, and sampling rate, Hz.
    form, method : str
        The controller's form and how it was made (``digital.form``, ``digital.method``).
    controller : Discrete
        ``C(z)``: ADC codes of error ``e = r - y`` in, PWM steps out (one corner, shared by all).
    b, a : ndarray
        Its difference equation ``sum a_i u[k-i] = sum b_i e[k-i]``, ``a[0] = 1`` (powers of z^-1).
    designs : dict of str -> DigitalDesign
        ``direct``, ``tustin`` and ``matched`` controllers for the same targets, with their margins.
    delay_s : ndarray (corners,)
        Total loop delay, sample to the modulated edge, s.
    delay_phase_deg : ndarray (corners,)
        Phase the sampling and the delay cost at the target fc: continuous chain minus ``Tu(z)``, deg.
    adc_bits : int
    adc_range_v, adc_lsb_v : float
        ADC full scale and one code, V at its input.
    sensing_gain : ndarray (corners,)
        Output to ADC input at dc, V/V (signed).
    adc_lsb_out_v : ndarray (corners,)
        One ADC code referred to the output, V.
    pwm_counts, pwm_steps : float
        Counter counts per switching period and steps with dithering (``u`` is in steps).
    dither_bits : int
    duty_min, duty_max : float
        The duty range the controller's output is limited to.
    gvd_dc : ndarray (corners,)
        dc output change per unit duty, V (the sensitivity of the output to duty).
    duty : ndarray (corners,)
        Steady duty per corner.
    word_length, frac_bits : int or None
        Fixed-point format asked for in the design (None: to be chosen).
    """

    ts_s: float
    fs_hz: float
    form: str
    method: str
    controller: Discrete
    b: np.ndarray
    a: np.ndarray
    designs: dict
    delay_s: np.ndarray
    delay_phase_deg: np.ndarray
    adc_bits: int
    adc_range_v: float
    adc_lsb_v: float
    sensing_gain: np.ndarray
    adc_lsb_out_v: np.ndarray
    pwm_counts: float
    pwm_steps: float
    dither_bits: int
    duty_min: float
    duty_max: float
    gvd_dc: np.ndarray
    duty: np.ndarray
    word_length: int | None = None
    frac_bits: int | None = None
    figures: dict = field(default_factory=dict)
    #: The controller in integers, its margins and the ADC/PWM resolution check
    #: (:class:`loopkit.digital_handoff.Realisation`).
    realisation: object = None


def prepare(session, f_hz=None) -> None:
    """Set the session's grid (up to fs/2), ``uncompensated`` (``Tu(z)``) and open loop for a sampled scheme.

    A given grid's lowest frequency is kept; the grid always ends at fs/2 exactly (the margins
    need every crossing up to there bracketed).
    """
    tu = session.scheme.sampled
    f_lo = float(np.asarray(f_hz, float)[0]) if f_hz is not None else float(session.f_hz[0])
    if not 0 < f_lo < tu.nyquist_hz:
        raise DesignError("f_hz", format_value(f_lo, "Hz"), f"a digital loop's grid starts between 0 and fs/2"
                          f" = {format_value(tu.nyquist_hz, 'Hz')}")
    session.f_hz = nyquist_grid(tu.ts_s, f_lo, 1000)
    session.uncompensated = tu
    session.open_loop = OpenLoop(tu, tu.response(session.f_hz), tu.phase_deg(session.f_hz), session.scheme.gvg,
                                 session.scheme.zout, dict(session.scheme.figures))
    session.plant_resp = session.stage.gvd.response(session.f_hz)


def _model_findings(fc_hz: float, fs_hz: float) -> list[Finding]:
    if fc_hz <= FC_FS_LIMIT * fs_hz:
        return []
    return [Finding("fc-fs", f"crossover target {format_value(fc_hz, 'Hz')} is above fs/10"
                    f" ({format_value(FC_FS_LIMIT * fs_hz, 'Hz')}): the sampled model is exact for the averaged"
                    " plant, but the switching ripple and the duty's quantisation dominate there; lower fc to"
                    " fs/10 or below (fs/20 is usual)", None, "error")]


def _designs(session, targets: Targets, corner: int, pm_goal: dict | None = None) -> dict:
    """The direct, Tustin and matched controllers for the targets at ``corner``, with their margins.

    ``pm_goal``: per method, the phase margin asked at the design corner (default the target's).
    """
    d = session.design.digital
    tu = session.uncompensated
    ts = tu.ts_s
    fc = targets.fc_hz
    goal = {m: targets.pm_deg for m in ("direct", "tustin", "matched")} | dict(pm_goal or {})
    pm = goal["direct"]
    out = {}
    try:
        c, k = direct_design(d.form, tu.take(corner), fc, pm)
        out["direct"] = (c, k, "")
    except InfeasibleDesign as exc:
        out["direct"] = (None, np.nan, f"{exc.allowed}; {'; '.join(exc.reasons)}")
    delay = session.scheme.figures["delay_s"][corner]  # the edge model's low-frequency limit (loopkit.sampled)
    chain = session.scheme.tu.take(corner) * Rational.from_factors(1.0, (), (), delay_s=delay)
    for method, discretise in (("tustin", lambda c: tustin(c, ts, fc)), ("matched", lambda c: matched(c, ts))):
        try:
            ca, k = analog_design(d.form, chain, fc, goal[method])
            out[method] = (discretise(ca), k, "")
        except InfeasibleDesign as exc:
            out[method] = (None, np.nan, f"the analog design: {exc.allowed}")
    designs = {}
    for method, (c, k, why) in out.items():
        margins = None
        if c is not None:
            loop = tu * c
            margins = discrete_loop_margins(loop, session.f_hz, loop.response(session.f_hz),
                                            loop.phase_deg(session.f_hz))
        designs[method] = DigitalDesign(method, c, k, margins, why)
    return designs


def _design_corner(session, targets: Targets) -> int:
    """The given corner, or the CCM corner whose ``Tu(z)`` has the most gain at fc (ties: the least phase).

    With one controller for every corner, the corner of most gain crosses highest, where the loop delay
    costs the most phase; designing there keeps the other corners' crossovers below fc, where they have
    more phase (common practice, no source).  DCM corners are left out unless every corner is in DCM.
    """
    if targets.design_corner is not None:
        return int(targets.design_corner)
    f = np.array([targets.fc_hz])
    tu = session.uncompensated
    mag = np.abs(tu.response(f)[:, 0])
    phase = tu.phase_deg(f)[:, 0]
    dcm = session.stage.dcm
    candidates = np.nonzero(~dcm)[0] if np.any(~dcm) else np.arange(mag.size)
    order = np.lexsort((np.round(phase[candidates], 9), -mag[candidates]))
    return int(candidates[order[0]])


def run(session, targets: Targets, preview: bool = False) -> LoopResult:
    """Design the digital controller for ``targets`` and analyse every corner (module notes).

    ``preview`` (a slider being dragged) leaves out the fixed-point realisation and the resolution check
    (:mod:`loopkit.digital_handoff`, about a third of a run); the drag ends with a full run.
    """
    design, stage = session.design, session.stage
    d = design.digital
    tu = session.uncompensated
    fs = 1.0 / tu.ts_s
    findings = list(stage.findings) + list(session.scheme.findings)
    # the findings' advice counts the controller's zeros as a network's: one (pi) like Type II, two like Type III
    advice = replace(targets, network="type2" if d.form == "pi" else "type3")
    findings.extend(target_findings(stage, design.stage.fsw, advice))
    findings.extend(_model_findings(targets.fc_hz, fs))
    if not 0 < targets.fc_hz < 0.5 * fs:
        return session._infeasible(targets, findings, "compensator.fc", format_value(targets.fc_hz, "Hz"),
                                   f"must be between 0 and fs/2 = {format_value(0.5 * fs, 'Hz')}")
    corner = _design_corner(session, targets)
    designs = _designs(session, targets, corner)
    chosen = designs[d.method]
    if chosen.controller is None:
        return session._infeasible(targets, findings, "compensator.pm", f"{targets.pm_deg:g} deg",
                                   f"no {d.method} {d.form} controller: {chosen.reason}")
    m_c = chosen.margins
    if m_c.n_crossovers[corner] != 1 or not m_c.stable[corner]:  # as for analog loops: one stable crossover
        return session._infeasible(targets, findings, "compensator.fc", format_value(targets.fc_hz, "Hz"),
                                   why_not_single_crossover(stage, corner, m_c, corner, advice.network,
                                                            targets.fc_hz))
    c = chosen.controller
    loop = tu * c
    f = session.f_hz
    resp, phase = loop.response(f), loop.phase_deg(f)
    margins = chosen.margins
    for method, other in designs.items():
        if method != d.method and other.margins is not None:
            findings.append(Finding(f"compare-{method}", f"the {method} controller of the same form gives a"
                                    f" worst-corner PM of {np.nanmin(other.margins.pm_deg):.1f} deg"
                                    f" (this one {np.nanmin(margins.pm_deg):.1f} deg)", None, "note"))
    findings.extend(loop_findings(margins, stage, design.stage.fsw, advice))
    f_fc = np.array([targets.fc_hz])
    cont = session.scheme.tu.phase_deg(f_fc)[:, 0]
    samp = tu.phase_deg(f_fc)[:, 0]
    delay_phase = cont - samp
    b, a = c.difference_equation(0)
    counts = d.pwm_clock / design.stage.fsw
    sense = scheme.sensing_gain(design).dc_gain()
    sense = np.broadcast_to(sense, (stage.n_corners,)).astype(float)
    lsb = d.adc_range / 2.0 ** d.adc_bits
    digital = DigitalLoop(
        ts_s=tu.ts_s, fs_hz=fs, form=d.form, method=d.method, controller=c, b=b, a=a, designs=designs,
        delay_s=np.asarray(session.scheme.figures["delay_s"], float), delay_phase_deg=delay_phase,
        adc_bits=d.adc_bits, adc_range_v=d.adc_range, adc_lsb_v=lsb, sensing_gain=sense,
        adc_lsb_out_v=lsb / np.abs(sense), pwm_counts=counts, pwm_steps=scheme.pwm_steps(design),
        dither_bits=d.dither_bits, duty_min=0.0, duty_max=design.modulator.max_duty,
        gvd_dc=np.asarray(stage.gvd.dc_gain(), float), duty=np.asarray(stage.duty, float),
        word_length=d.word_length, frac_bits=d.frac_bits,
    )
    if not preview:
        handoff = realisation(digital, tu, f, targets.pm_deg, targets.gm_db, design.stage.fsw)
        digital = replace(digital, realisation=handoff)
        findings.extend(handoff.findings)
    zeros, poles = c.zeros()[0], c.poles()[0]
    return LoopResult(
        design=with_targets(design, targets), stage=stage, targets=targets, f_hz=f, feasible=True,
        network=targets.network, parts_exact={}, parts={}, zeros_hz=_z_to_hz(zeros, tu.ts_s),
        poles_hz=_z_to_hz(poles, tu.ts_s), placement=None, compensator=c, compensator_exact=c, loop=loop,
        loop_exact=loop, plant_resp=session.plant_resp, comp_resp=c.response(f), loop_resp=resp,
        loop_phase_deg=phase, margins=margins, worst_corner=worst_corner(margins), design_corner=corner,
        findings=tuple(unique(findings)), open_loop=session.open_loop, digital=digital,
    )


def _z_to_hz(roots: np.ndarray, ts_s: float) -> tuple:
    """Real z-plane roots in (0, 1] as the frequency ``-ln(z) / (2 pi Ts)``, Hz (0 for the integrator);
    other roots (at the origin, negative or complex) as NaN."""
    out = []
    for r in roots:
        if not np.isfinite(r):
            continue
        real = abs(r.imag) < 1e-12 and 0 < r.real <= 1
        out.append(float(-np.log(r.real) / (2 * np.pi * ts_s)) if real else float("nan"))
    return tuple(out)


def closed_loop_step(result: LoopResult, corner: int, samples: int, where: str = "duty") -> np.ndarray:
    """Output samples of the sampled closed loop after a unit step, per sample ``k = 0 .. samples-1``.

    Parameters
    ----------
    result : LoopResult
        A digital loop (``result.digital`` set).
    corner : int
    samples : int
    where : {"duty", "reference"}
        ``"duty"``: a step of one PWM step added to the controller's output (a disturbance at the
        modulator): ``y/d = Tu / (1 + Tu C)``; ``"reference"``: a step of one ADC code in the set
        point: ``y/r = Tu C / (1 + Tu C)``.  ``y`` in ADC codes.

    Notes
    -----
    The closed loop's polynomials from the factored ``Tu(z)`` and ``C(z)``, run by
    ``scipy.signal.lfilter`` (exact for the linear sampled loop).
    """
    if result.digital is None:
        raise DesignError("result", "an analog loop", "a digital loop (control.scheme = \"digital\")")
    if where not in ("duty", "reference"):
        raise DesignError("where", where, "duty or reference")
    tu = result.open_loop.tu.take(corner)
    c = result.digital.controller
    nt, dt = tu.polys()
    nc, dc = c.polys()
    nt, dt, nc, dc = (np.trim_zeros(p[0], "b") for p in (nt, dt, nc, dc))
    char = np.polynomial.polynomial.polyadd(np.polynomial.polynomial.polymul(dt, dc),
                                            np.polynomial.polynomial.polymul(nt, nc))
    num = np.polynomial.polynomial.polymul(nt, dc if where == "duty" else nc)
    # ascending in z -> descending, padded to the same length: powers of z^-1 for lfilter
    m = max(char.size, num.size)
    num_d = np.r_[np.zeros(m - num.size), num[::-1]]
    den_d = np.r_[np.zeros(m - char.size), char[::-1]]
    return lfilter(num_d, den_d, np.ones(int(samples)))
