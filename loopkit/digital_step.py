"""The sampled loop in time: load, input-voltage and set-point steps of a digital design, between samples too.

:func:`loopkit.timeresponse.step_response` hands a :class:`~loopkit.result.LoopResult` whose control
scheme is digital (``result.digital`` set) to :func:`digital_step_response`; the answer is the same
:class:`~loopkit.timeresponse.StepResponse`, so the CLI's ``loopkit step``, the report and the app
read it unchanged.

The model (the chain of :mod:`loopkit.schemes.digital`, small-signal deviations from the corner's
operating point)::

    v  = Gvd d + Gw w            w: the load current's injected part (sign of :mod:`loopkit.timeresponse`)
    iL = Gid d + Giw w              or the input voltage; Gw = +-Zout or Gvg, Giw = +-Gii or Gig
    y  = K Haa H v               ADC codes (K codes per volt, Haa the anti-alias pole, H the sensing)
    e_k = r_k - y(k Ts)          sampled at the start of each period; r_k = K H(0) r(k Ts) for a set-point step
    u_k = C(z) e_k               the controller's difference equation, PWM steps
    d(t) = Ts sum u_{k-N} / N_pwm delta(t - k Ts - rho)
                                 each duty change a pulse at the modulated edge (tau = N Ts + rho, the total
                                 loop delay): the edge model of loopkit.sampled (hold="edge")

Everything between the events is linear and time-invariant, so the simulation is exact (to
rounding) with the matrix exponential of the plant's state space between consecutive events: the
sample, the duty update at phase ``rho`` (the plant's states jump by ``Ts B u / N_pwm``: the
impulse of the moved edge, whose feedthrough no sample sees), the end of the disturbance's ramp
and the points the waveform is read at (G. F. Franklin, J. D. Powell, M. L. Workman, Digital
Control of Dynamic Systems, 3rd ed., 1998, ch. 4, applied literally in time instead of in z).
Between samples the inductor current and the output therefore move in small steps at each moved
edge, as the switched converter's do.  The state over one sample period is one linear map ``F``
(plant states, the held duty, the disturbance and its slope, the controller's past errors and
outputs, the outputs waiting out the delay), the same for every period except the first (the
step arrives just after the sample at t = 0, so the controller first sees a load or input step
one sample later: the slowest phase of arrival) and the one where a ramp ends.  Each corner's
period is built from at most a few dozen ``scipy.linalg.expm`` of the plant's (order + 3)-square
matrix; the periods are then one batched matrix-vector product each, for all corners at once.

The plant's transfers are realised with :func:`loopkit.timeresponse.realise` (real first- and
second-order sections); each output is the sum of its duty path and its disturbance path, so the
realisations are stacked block-diagonally (superposition).  Stability is the spectral radius of
``F`` (the plant, controller and delay states), the exact sampled-data criterion, and agrees with
the z-plane roots of ``1 + T(z)`` (:mod:`loopkit.discrete_margins`).

A set-point step in volts at the output is ``K H(0)`` times that in ADC codes (one code is
``DigitalLoop.adc_lsb_out_v`` volts at the output); its change is seen at the sample at t = 0.

:func:`hold_controller` analyses another operating point (a load step's starting load) with the
controller designed for the whole design, as :func:`loopkit.result.apply_parts` does for a
network's parts.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import scipy.linalg

from .discrete import Discrete
from .discrete_margins import discrete_loop_margins
from .errors import DesignError, Finding
from .powerstage import corner_label
from .rational import TWO_PI, Rational
from .units import format_value

__all__ = ["MODEL", "SampledPaths", "digital_step_response", "hold_controller", "plant_paths", "simulate_sampled"]

#: How the steps are computed, for the reports' notes.
MODEL = ("sampled loop: the averaged plant with each duty change at the modulated edge after the loop delay, exact"
         " between samples; ADC and PWM resolution left out")
#: Most points of the waveform read between samples (the early part) and at samples (the rest).
_FINE_POINTS = 3000
_COARSE_POINTS = 3000
#: Fewest waveform points per sample period in the early part.
_MIN_PER_PERIOD = 8


@dataclass(frozen=True, eq=False)
class SampledPaths:
    """The plant's transfers per corner for one kind of step.

    ``duty``: ``[Gvd, Gid, Gyd]`` per unit duty (output V, inductor A, ADC codes); ``disturbance``:
    the same three per unit of the step's input (None for a set-point step, which only the
    controller sees); ``ref_codes_per_v``: ADC codes per volt of set point, (corners,) (zero for
    load and input steps).
    """

    duty: list
    disturbance: list | None
    ref_codes_per_v: np.ndarray


def plant_paths(result, kind: str) -> SampledPaths:
    """The :class:`SampledPaths` of a digital result for a ``kind`` step (module notes)."""
    from .schemes.digital import adc_codes_per_volt, sensing_gain
    from .timeresponse import KINDS, _load_sign

    if kind not in KINDS:
        raise DesignError("kind", kind, f"must be one of {', '.join(KINDS)}")
    design, stage = result.design, result.stage
    sense = sensing_gain(design) * adc_codes_per_volt(design)
    if design.digital.anti_alias > 0:
        sense = sense * Rational.from_factors(1.0, (), [(1.0, 1.0 / (TWO_PI * design.digital.anti_alias))])
    n = stage.n_corners
    duty = [stage.gvd, stage.gid, (sense * stage.gvd).cancel()]
    if kind == "reference":
        h0 = np.broadcast_to(np.asarray(sense.dc_gain(), float), (n,)).astype(float)
        return SampledPaths(duty, None, h0)
    if kind == "load":
        sign = _load_sign(design)
        gw, giw = stage.zout * sign, stage.gii * sign
    else:
        gw, giw = stage.gvg, stage.gig
    return SampledPaths(duty, [gw, giw, (sense * gw).cancel()], np.zeros(n))


# ---------------------------------------------------------------------------- the period maps
class _Layout:
    """Indices of the state vector: plant states, d, w, s (slope), then E (past errors), U (past outputs),
    the error and output of this sample, and the pending step p."""

    def __init__(self, m_plant: int, n_b: int, n_a: int, n_whole: int):
        self.m = m_plant
        self.d, self.w, self.s = m_plant, m_plant + 1, m_plant + 2
        self.mc = m_plant + 3
        self.ne = max(n_b - 1, 0)
        self.nu = max(n_a - 1, n_whole, 0)
        self.e0 = self.mc
        self.u0 = self.e0 + self.ne
        self.ek = self.u0 + self.nu
        self.uk = self.ek + 1
        self.p = self.uk + 1
        self.size = self.p + 1


def _realised(tfs: list):
    """(a, b, c, d) per transfer, each (corners, ...), from :func:`loopkit.timeresponse.realise`."""
    from .timeresponse import realise

    return [realise(tf) for tf in tfs]


def _continuous(k: int, duty_ss: list, dist_ss: list | None):
    """Corner ``k``: the flow matrix over (x, d, w, s) and the output rows (v, iL, y, d) over it."""
    blocks = [(ss, "d") for ss in duty_ss] + ([(ss, "w") for ss in dist_ss] if dist_ss else [])
    m = sum(ss.a.shape[1] for ss, _ in blocks)
    mc = m + 3
    flow = np.zeros((mc, mc))
    out = np.zeros((4, mc))
    d_i, w_i, s_i = m, m + 1, m + 2
    flow[w_i, s_i] = 1.0
    j = 0
    for idx, (ss, src) in enumerate(blocks):
        mi = ss.a.shape[1]
        sl = slice(j, j + mi)
        col = d_i if src == "d" else w_i
        flow[sl, sl] = ss.a[k]
        flow[sl, col] = ss.b[k]
        row = idx % 3
        out[row, sl] = ss.c[k]
        out[row, col] += ss.d[k]
        j += mi
    out[3, d_i] = 1.0
    return m, flow, out


def _period_maps(lay: _Layout, flow: np.ndarray, out: np.ndarray, b: np.ndarray, a: np.ndarray, ts: float,
                 rho: float, n_whole: int, n_pwm: float, ref_gain: float, per_period: int,
                 special: dict) -> dict:
    """Per kind of period (``"normal"`` and the keys of ``special``): (F, O).

    ``F`` (size, size) maps the state at the period's start (before the sample) to the next period's;
    ``O`` (per_period, 4, size) gives the outputs at phases ``q Ts / per_period`` (left limits).
    ``special``: name -> list of (phase_s, event) with event ``"kick"`` (the disturbance arrives:
    w := p) or ``"ramp-end"`` (s := 0).
    """
    size, mc = lay.size, lay.mc
    eye = np.eye(size)
    cache: dict = {}
    # the modulated edge: the duty written at the update is an impulse of area Ts u / N_pwm into the plant, not a
    # held input (loopkit.sampled, hold="edge"); d keeps the duty in force for the saturation check only
    jump = ts * flow[: lay.m, lay.d].copy()
    flow = flow.copy()
    flow[:, lay.d] = 0.0
    out = out.copy()
    out[:3, lay.d] = 0.0

    def advance(h: float) -> np.ndarray:
        key = round(h / ts, 13)
        if key not in cache:
            g = np.eye(size)
            g[:mc, :mc] = scipy.linalg.expm(flow * h) if h > 0 else np.eye(mc)
            cache[key] = g
        return cache[key]

    # the sample: e_k = ref_gain w - y, then u_k = b0 e_k + sum b_i e_{k-i} - sum a_i u_{k-i}
    k1 = eye.copy()
    k1[lay.ek, :] = 0.0
    k1[lay.ek, :mc] = -out[2]
    k1[lay.ek, lay.w] += ref_gain
    k2 = eye.copy()
    k2[lay.uk, :] = 0.0
    k2[lay.uk, lay.ek] = b[0]
    for i in range(1, b.size):
        k2[lay.uk, lay.e0 + i - 1] = b[i]
    for i in range(1, a.size):
        k2[lay.uk, lay.u0 + i - 1] = -a[i]
    sample = k2 @ k1
    update = eye.copy()  # the duty the modulator applies, u_{k-N} / N_pwm, and the edge's impulse into the plant
    src = lay.uk if n_whole == 0 else lay.u0 + n_whole - 1
    update[lay.d, :] = 0.0
    update[lay.d, src] = 1.0 / n_pwm
    update[: lay.m, src] += jump / n_pwm
    kick = eye.copy()  # w := p, p := 0
    kick[lay.p, lay.p] = 0.0
    kick[lay.w, lay.p] = 1.0
    ramp_end = eye.copy()
    ramp_end[lay.s, lay.s] = 0.0
    shift = eye.copy()  # end of period: the histories move by one
    for base, count, new in ((lay.e0, lay.ne, lay.ek), (lay.u0, lay.nu, lay.uk)):
        for i in range(count - 1, 0, -1):
            shift[base + i, :] = eye[base + i - 1]
        if count:
            shift[base, :] = eye[new]
    shift[lay.ek, :] = 0.0
    shift[lay.uk, :] = 0.0
    out_full = np.zeros((4, size))
    out_full[:, :mc] = out
    dt = ts / per_period
    maps = {}
    for name, extra in [("normal", [])] + list(special.items()):
        items = [(q * dt, 0, q) for q in range(1, per_period)] + [(rho, 1, "update")]
        items += [(ph, 1, ev) for ph, ev in extra]
        items.sort(key=lambda it: (it[0], it[1]))
        o = np.zeros((per_period, 4, size))
        o[0] = out_full
        g, t = sample, 0.0
        for phase, _, what in items:
            g = advance(phase - t) @ g
            t = phase
            if isinstance(what, int):
                o[what] = out_full @ g
            else:
                g = {"update": update, "kick": kick, "ramp-end": ramp_end}[what] @ g
        maps[name] = (shift @ advance(ts - t) @ g, o)
    return maps


def simulate_sampled(paths: SampledPaths, b, a, ts_s: float, delay_s, pwm_steps: float, amplitude: float,
                     rise_s: float, span_s: float, per_period: int | None = None) -> dict:
    """The sampled closed loop after a step, every corner, exactly (module notes).

    Parameters
    ----------
    paths : SampledPaths
    b, a : array_like
        The controller's difference equation in powers of z^-1 (``a[0] = 1``): ADC codes of error in,
        PWM steps out.
    ts_s : float
        Sample period, s.
    delay_s : float or ndarray (corners,)
        Total loop delay, sample to the duty's action, s (>= 0).
    pwm_steps : float
        PWM steps per unit duty.
    amplitude : float
        The step (A of load rise, V of input, V of set point).
    rise_s : float
        Duration of its straight ramp, s (0: a step).
    span_s : float
        Simulated time, s (rounded up to whole sample periods).
    per_period : int, optional
        Waveform points per sample period in the early part (default: at least 8).

    Returns
    -------
    dict
        ``t_s`` (points,); ``v``, ``i``, ``duty``, ``y`` (corners, points): deviations of the output
        (V), the inductor current (A), the duty and the ADC reading (codes); ``t_samples_s`` and
        ``y_samples``, the codes read at the sample instants of the early part (the first 3000 / 8 periods
        at 8 points per period); ``spectral_radius`` (corners,) of the period map (< 1: stable).
    """
    b = np.atleast_1d(np.asarray(b, float))
    a = np.atleast_1d(np.asarray(a, float))
    if a.size == 0 or a[0] == 0:
        raise DesignError("controller", "a[0] = 0", "a difference equation with a[0] != 0")
    b, a = b / a[0], a / a[0]
    n = paths.duty[0].n_corners
    tau = np.broadcast_to(np.asarray(delay_s, float), (n,)).astype(float)
    if not (np.isfinite(ts_s) and ts_s > 0):
        raise DesignError("ts_s", ts_s, "a sample period > 0 s")
    if np.any(~np.isfinite(tau) | (tau < 0)):
        raise DesignError("delay_s", tau.tolist(), "loop delays >= 0 s")
    if not (np.isfinite(span_s) and span_s > 0):
        raise DesignError("span", span_s, "must be a time > 0 s")
    n_whole = np.floor(tau / ts_s + 1e-9).astype(int)
    rho = np.clip(tau - n_whole * ts_s, 0.0, None)
    rho[rho < 1e-9 * ts_s] = 0.0
    periods = max(int(np.ceil(span_s / ts_s - 1e-9)), 1)
    m_pp = _MIN_PER_PERIOD if per_period is None else max(int(per_period), 1)
    k_rise = int(np.floor(rise_s / ts_s + 1e-12)) if rise_s > 0 else -1
    fine = min(periods, max(_FINE_POINTS // m_pp, k_rise + 1, 1))
    step = max(1, int(np.ceil((periods - fine) / _COARSE_POINTS)))
    periods = fine + step * int(np.ceil((periods - fine) / step))
    duty_ss = _realised(paths.duty)
    dist_ss = _realised(paths.disturbance) if paths.disturbance is not None else None
    disturbance = dist_ss is not None
    special = {}
    if disturbance and rise_s == 0:
        special[0] = [(0.0, "kick")]
    if rise_s > 0:
        special.setdefault(k_rise, []).append((rise_s - k_rise * ts_s, "ramp-end"))
    lays, f_maps, o_maps = [], {}, {}
    for k in range(n):
        m, flow, out = _continuous(k, duty_ss, dist_ss)
        lay = _Layout(m, b.size, a.size, int(n_whole[k]))
        lays.append(lay)
        maps = _period_maps(lay, flow, out, b, a, ts_s, float(rho[k]), int(n_whole[k]), pwm_steps,
                            float(paths.ref_codes_per_v[k]), m_pp,
                            {key: sorted(ev) for key, ev in special.items()})
        for name, (f, o) in maps.items():
            f_maps.setdefault(name, []).append(f)
            o_maps.setdefault(name, []).append(o)
    size = max(lay.size for lay in lays)

    def stacked(mats, shape_fn):
        arr = np.zeros((n,) + shape_fn(size))
        for k, mat in enumerate(mats):
            s = lays[k].size
            if mat.ndim == 2:
                arr[k, :s, :s] = mat
            else:
                arr[k, :, :, :s] = mat
        return arr

    f_all = {name: stacked(v, lambda s: (s, s)) for name, v in f_maps.items()}
    o_all = {name: stacked(v, lambda s: (m_pp, 4, s)) for name, v in o_maps.items()}
    x = np.zeros((n, size))
    for k, lay in enumerate(lays):
        if rise_s > 0:  # a ramp from 0 at t = 0: the sample at t = 0 reads no change either way
            x[k, lay.s] = amplitude / rise_s
        elif disturbance:  # arrives just after the sample at t = 0 (the kick)
            x[k, lay.p] = amplitude
        else:  # a set point: read by the sample at t = 0
            x[k, lay.w] = amplitude
    fine_states = np.zeros((n, size, fine))
    coarse = []
    with np.errstate(over="ignore", invalid="ignore"):
        for p in range(periods):
            if p < fine:
                fine_states[:, :, p] = x
            elif (p - fine) % step == 0:
                coarse.append(x.copy())
            f = f_all.get(p, f_all["normal"])
            x = np.einsum("nij,nj->ni", f, x)
        last = x
        wave = np.einsum("nqoj,njp->nopq", o_all["normal"], fine_states)  # (n, 4, fine, per_period)
        for name, o in o_all.items():
            if name != "normal" and name < fine:
                wave[:, :, name, :] = np.einsum("nqoj,nj->noq", o, fine_states[:, :, name])
        wave = wave.reshape(n, 4, fine * m_pp)
        tail = coarse + [last]
        tail_w = np.einsum("noj,njp->nop", o_all["normal"][:, 0], np.stack(tail, axis=2))
    t_fine = (np.arange(fine)[:, None] * ts_s + np.arange(m_pp)[None, :] * ts_s / m_pp).ravel()
    t_tail = (fine + step * np.arange(len(tail))) * ts_s
    t = np.r_[t_fine, t_tail]
    allw = np.concatenate([wave, tail_w], axis=2)
    radius = np.zeros(n)
    for k, lay in enumerate(lays):
        keep = [j for j in range(lay.size) if j not in (lay.w, lay.s, lay.p)]
        sub = f_all["normal"][k][np.ix_(keep, keep)]
        with np.errstate(over="ignore", invalid="ignore"):
            ev = np.linalg.eigvals(sub) if np.all(np.isfinite(sub)) else np.array([np.inf])
        radius[k] = np.max(np.abs(ev))
    return {"t_s": t, "v": allw[:, 0], "i": allw[:, 1], "y": allw[:, 2], "duty": allw[:, 3],
            "t_samples_s": np.arange(fine) * ts_s, "y_samples": wave[:, 2, ::m_pp], "spectral_radius": radius}


# ---------------------------------------------------------------------------- the response
def _final(paths: SampledPaths, b: np.ndarray, a: np.ndarray, pwm_steps: float, amplitude: float) -> np.ndarray:
    """Final output deviation per corner from the dc gains (an integrator in C(z) drives the error to zero)."""
    gvd = np.asarray(paths.duty[0].dc_gain(), float)
    gyd = np.asarray(paths.duty[2].dc_gain(), float) / pwm_steps
    if paths.disturbance is None:
        gw = np.zeros_like(gvd)
        yw = np.zeros_like(gvd)
    else:
        gw = np.asarray(paths.disturbance[0].dc_gain(), float)
        yw = np.asarray(paths.disturbance[2].dc_gain(), float)
    r = paths.ref_codes_per_v * amplitude
    sa, sb = float(np.sum(a)), float(np.sum(b))
    with np.errstate(divide="ignore", invalid="ignore"):
        if abs(sa) <= 1e-12 * float(np.sum(np.abs(a))):
            u = (r - yw * amplitude) / gyd
        else:
            c1 = sb / sa
            u = c1 * (r - yw * amplitude) / (1.0 + c1 * gyd)
    final = gvd * u / pwm_steps + gw * amplitude
    scale = np.abs(gw * amplitude) + np.abs(paths.ref_codes_per_v * amplitude / np.where(gyd != 0, gyd, 1.0) * gvd)
    return np.where(np.abs(final) <= 1e-9 * scale, 0.0, final)  # a disturbance's zero final value, to rounding


def _default_span(result, rise_s: float) -> float:
    """From the crossovers and the slowest closed-loop root (z -> s = ln z / Ts), as for analog loops."""
    ts = result.digital.ts_s
    fc = result.margins.fc_hz if result.margins is not None else np.array([np.nan])
    z = result.loop.closed_loop_poles()
    z = z[np.isfinite(z) & (np.abs(z) > 1e-12)]
    sigma = -np.log(np.abs(z)) / ts
    sigma = sigma[sigma > 0]
    fc_lo = np.nanmin(fc) if np.any(np.isfinite(fc)) else 0.02 / ts
    slow = 8.0 / sigma.min() if sigma.size else 20.0 / fc_lo
    return rise_s + float(np.clip(slow, 20.0 / fc_lo, 400.0 / fc_lo))


def digital_step_response(result, kind: str, amplitude: float, rise_s: float = 0.0, band_v: float | None = None,
                          span_s: float | None = None):
    """Response of every corner of a digital loop to a load, input-voltage or set-point step.

    Parameters
    ----------
    result : LoopResult
        A feasible digital loop (``result.digital`` set).
    kind : {"load", "line", "reference"}
    amplitude : float
        Load-current rise (A), input-voltage change (V) or set-point change (V at the output; one ADC
        code is ``result.digital.adc_lsb_out_v``).
    rise_s : float
        Rise time of a load or input step, or of the set point (a straight ramp), s.
    band_v : float, optional
        Half-width of the settling band, V (default 1 % of |Vout|).
    span_s : float, optional
        Simulated time, s (default from the crossovers and the slowest closed-loop root).

    Returns
    -------
    loopkit.timeresponse.StepResponse

    Notes
    -----
    Exact for the averaged plant behind the hold and the loop delay (module notes; Franklin, Powell,
    Workman 1998, ch. 4).  Small-signal and unquantised: ADC and PWM resolution and the duty's
    limits are left out; a duty that would leave [0, max_duty] is flagged (``duty-saturates``).
    """
    from .timeresponse import StepResponse, step_figures

    if result.digital is None or result.loop is None:
        raise DesignError("result", "no digital loop", "a feasible digital loop (control.scheme = \"digital\")")
    if not np.isfinite(amplitude) or amplitude == 0:
        raise DesignError("step", amplitude, "must be a nonzero, finite step")
    if not (np.isfinite(rise_s) and rise_s >= 0):
        raise DesignError("rise", rise_s, "must be a time >= 0 s")
    design, stage, dig = result.design, result.stage, result.digital
    vout = abs(design.operating.vout)
    band = 0.01 * vout if band_v is None else float(band_v)
    if not (np.isfinite(band) and band > 0):
        raise DesignError("band", band_v, "must be a voltage > 0")
    span = _default_span(result, rise_s) if span_s is None else float(span_s)
    if not (np.isfinite(span) and span > rise_s):
        raise DesignError("span", format_value(span, "s"), f"must be longer than the rise ({format_value(rise_s, 's')})")
    paths = plant_paths(result, kind)
    sim = simulate_sampled(paths, dig.b, dig.a, dig.ts_s, dig.delay_s, dig.pwm_steps, amplitude, rise_s, span)
    t, v = sim["t_s"], sim["v"]
    final = _final(paths, dig.b, dig.a, dig.pwm_steps, amplitude)
    n = stage.n_corners
    with np.errstate(over="ignore", invalid="ignore"):  # an unstable corner grows without bound: flagged below
        fig = step_figures(t, v, final, band, disturbance=kind != "reference")
        duty = stage.duty[:, None] + sim["duty"]
        i = stage.i_l[:, None] + sim["i"]
        dmin, dmax = duty.min(axis=1), duty.max(axis=1)
        sat = (dmin < dig.duty_min) | (dmax > dig.duty_max)
    stable = sim["spectral_radius"] < 1.0
    findings = []
    for k in range(n):
        where = corner_label(stage.vin[k], stage.load[k])
        if not stable[k]:
            findings.append(Finding("step-unstable", f"{where}: the sampled closed loop is unstable: no step figures",
                                    k, "error"))
        elif not fig["settled_at_end"][k]:
            findings.append(Finding("step-not-settled", f"{where}: not inside ±{format_value(band, 'V')} at the end"
                                    f" of the span ({format_value(t[-1], 's')}): simulate longer", k))
        if sat[k] and stable[k]:
            findings.append(Finding(
                "duty-saturates", f"{where}: the duty would swing {dmin[k]:.1%} to {dmax[k]:.1%}, outside"
                f" {dig.duty_min:.0%} to {dig.duty_max:.0%}: the controller's output limits act and this"
                " small-signal answer is wrong (smaller or slower step, or a large-signal check)", k))
    nan = np.where(stable, 1.0, np.nan)
    return StepResponse(
        kind=kind, amplitude=float(amplitude), rise_s=float(rise_s), t_s=t, v=v, i=i, duty=duty,
        i0=np.asarray(stage.i_l, float).copy(), duty0=np.asarray(stage.duty, float).copy(), vout=vout,
        peak_v=fig["peak"] * nan, peak_pct=100.0 * np.abs(fig["peak"]) / vout * nan, t_peak_s=fig["t_peak_s"] * nan,
        final_v=final * nan, overshoot_pct=fig["overshoot_pct"] * nan, settle_s=fig["settle_s"] * nan, band_v=band,
        duty_min=dmin, duty_max=dmax, saturates=sat, findings=tuple(findings), model=MODEL)


# ---------------------------------------------------------------------------- another operating point
def hold_controller(base, design):
    """The digital loop of ``design`` (another operating point of ``base``'s design) with ``base``'s controller.

    As :func:`loopkit.result.apply_parts` keeps a network's parts when a load step's corners are
    analysed, this keeps the controller designed for every corner (a new run would design a new one
    for the step's corners).  Margins from :func:`loopkit.discrete_margins.discrete_loop_margins`.
    """
    from .loop import LoopSession
    from .schemes.digital import sensing_gain

    if base.digital is None:
        raise DesignError("result", "no digital loop", "a feasible digital loop (control.scheme = \"digital\")")
    session = LoopSession(design)
    tu = session.uncompensated
    if not isinstance(tu, Discrete):
        raise DesignError("control.scheme", design.control.scheme, "digital (the same scheme as the base design)")
    c = base.digital.controller
    loop = tu * c
    f = session.f_hz
    resp, phase = loop.response(f), loop.phase_deg(f)
    margins = discrete_loop_margins(loop, f, resp, phase)
    stage = session.stage
    sense = np.broadcast_to(np.asarray(sensing_gain(design).dc_gain(), float), (stage.n_corners,)).astype(float)
    digital = replace(base.digital, delay_s=np.asarray(session.scheme.figures["delay_s"], float),
                      sensing_gain=sense, adc_lsb_out_v=base.digital.adc_lsb_v / np.abs(sense),
                      gvd_dc=np.asarray(stage.gvd.dc_gain(), float), duty=np.asarray(stage.duty, float),
                      delay_phase_deg=np.full(stage.n_corners, np.nan), realisation=None)
    from .findings import worst_corner

    return replace(base, design=design, stage=stage, f_hz=f, plant_resp=session.plant_resp, comp_resp=c.response(f),
                   loop=loop, loop_exact=loop, loop_resp=resp, loop_phase_deg=phase, margins=margins,
                   worst_corner=worst_corner(margins), design_corner=0, findings=(), open_loop=session.open_loop,
                   digital=digital)
