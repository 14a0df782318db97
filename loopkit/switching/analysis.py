"""What the switching simulation gives: the periodic steady state, a load step, the measured loop gain.

* :func:`steady_state`: the periodic steady state of every corner, found by the shooting
  method (Newton's method on the state one period later, with a finite-difference
  Jacobian: T. J. Aprille, T. N. Trick, "Steady-state analysis of nonlinear circuits with
  periodic inputs", Proc. IEEE 60(1), 1972, from memory), then checked by running on:
  output mean and ripple, peak and valley inductor current, duty, CCM or DCM seen.
* :func:`load_step`: from the steady state, the load current steps at a clock edge; the
  output's one-period moving average is what the averaged model predicts
  (:func:`loopkit.timeresponse.step_response`), overlaid, with the same figures (peak
  deviation, settling into a band).
* :func:`loop_gain`: a small sine in series between the output and the feedback path, as
  a bench network analyser injects it; after settling, over whole injection periods
  that are also whole switching periods (the frequency is snapped to ``fsw p/q``), the
  single-bin Fourier integrals of both sides give ``T = -Y/X`` (``Y`` the output, ``X``
  the feedback side).  Compared with the averaged loop gain, the first frequency at which
  they part by more than 1 dB or 5 deg is the averaged model's limit for this design.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from functools import partial

import numpy as np

from ..errors import DesignError
from .engine import Record
from .setup import Setup

__all__ = [
    "LIMIT_DB",
    "LIMIT_DEG",
    "LoopGain",
    "SteadyState",
    "SwitchingStep",
    "injection_windows",
    "load_step",
    "loop_gain",
    "model_limit_hz",
    "snap_frequencies",
    "steady_state",
]

#: Where the averaged model and the switching loop gain are said to part.
LIMIT_DB, LIMIT_DEG = 1.0, 5.0
_NEWTON = 30
_WARM = 3


@dataclass(frozen=True, eq=False)
class SteadyState:
    """Periodic steady state per corner (arrays (corners,)).

    ``vout_v`` output mean; ``ripple_pp_v`` output peak-to-peak in a period; ``il_peak_a``,
    ``il_valley_a``, ``il_avg_a`` inductor current (flyback: magnetising, primary);
    ``duty``; ``dcm`` the current stopped at zero in the period; ``settled`` the state repeats
    after one period to ``residual`` (relative), stays there, and is stable; ``z`` the state at a
    clock edge; ``multipliers`` (corners, states) the eigenvalues of the one-period map there, largest
    magnitude first (the periodic orbit's Floquet multipliers: one of magnitude 1 or more means the
    orbit is unstable; near or below -1, subharmonic oscillation, as in peak current mode without
    enough slope above D = 0.5).
    """

    vout_v: np.ndarray
    ripple_pp_v: np.ndarray
    il_peak_a: np.ndarray
    il_valley_a: np.ndarray
    il_avg_a: np.ndarray
    duty: np.ndarray
    dcm: np.ndarray
    settled: np.ndarray
    residual: np.ndarray
    z: np.ndarray
    corners: np.ndarray
    multipliers: np.ndarray
    #: A digital loop's watch for hunting (:class:`loopkit.switching.digital.LimitCycle`); None for analog loops.
    limit_cycle: object = None


def _scales(setup: Setup, corners) -> np.ndarray:
    st = setup.stage
    n, m = setup.engine.n, setup.engine.m
    s = np.ones((corners.size, n))
    s[:, 0] = np.maximum(np.abs(st.i_peak[corners]), 1e-3)
    s[:, 1:m] = abs(setup.design.operating.vout)
    if n > m:  # controller states: their own size, at least 1 % of the largest (rounding in the modal
        # transforms is relative to the largest state) and 1e-3 of the control voltage
        zc = np.abs(setup.z0[corners, m:])
        floor = np.maximum(1e-2 * zc.max(axis=1), 1e-3 * np.nan_to_num(np.abs(setup.vc0[corners]), nan=1.0))
        s[:, m:] = np.maximum(np.maximum(zc, floor[:, None]), 1e-9)
    return s


def periodic_state(setup: Setup, corners=None, progress=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The state at a clock edge that repeats one period later (shooting), its relative residual, and the
    eigenvalues of the one-period map's Jacobian there (the orbit's Floquet multipliers), largest first.

    Newton's method on ``P(z) - z`` (``P`` one period), the Jacobian by finite differences
    (one lane per state, all corners together); a step that does not lower a corner's
    residual is shortened (quartered) from the last accepted point, so a step that would
    change the switching pattern (duty at a limit, DCM) and more than doubles a corner's
    residual is walked back.
    """
    eng = setup.engine
    corners = np.arange(setup.n_corners) if corners is None else np.atleast_1d(np.asarray(corners, int))
    k, n = corners.size, eng.n
    lanes = eng.lanes(corners)
    z_try = eng.run(lanes, setup.z0[corners].copy(), _WARM)
    scale = _scales(setup, corners)
    rep = eng.lanes(np.repeat(corners, n + 1))
    t0 = np.zeros(rep.n)
    eye = np.eye(n)
    z_best, z_acc = z_try.copy(), z_try.copy()
    r_best, r_acc = np.full(k, np.inf), np.full(k, np.inf)
    jac_best = np.zeros((k, n, n))
    step = np.zeros((k, n))
    lam = np.ones(k)
    for it in range(_NEWTON):
        delta = 1e-7 * scale
        zz = np.repeat(z_try, n + 1, axis=0).reshape(k, n + 1, n)
        zz[:, 1:, :] += delta[:, None, :] * eye[None, :, :]
        out = eng.period(rep, zz.reshape(-1, n), t0).reshape(k, n + 1, n)
        base = out[:, 0, :]
        jac = np.transpose((out[:, 1:, :] - base[:, None, :]) / delta[:, :, None], (0, 2, 1))
        f = base - z_try
        r_try = np.max(np.abs(f) / scale, axis=1)
        r_try = np.where(np.isfinite(r_try), r_try, np.inf)
        better = r_try <= 2.0 * r_acc  # Newton may raise the residual a little on its way; not by much
        for i in np.nonzero(better)[0]:
            z_acc[i], r_acc[i] = z_try[i], r_try[i]
            s_i = np.linalg.lstsq(jac[i] - eye, f[i], rcond=None)[0]
            step[i] = np.where(np.isfinite(s_i), s_i, 0.0)
        keep = r_try < r_best
        z_best[keep], r_best[keep], jac_best[keep] = z_try[keep], r_try[keep], jac[keep]
        lam = np.where(better, 1.0, lam / 4.0)
        if progress is not None and progress(it + 1, _NEWTON) is False:
            from .engine import Cancelled

            raise Cancelled()
        done = r_best < 1e-10
        if np.all(done | (lam < 1e-6)):
            break
        z_try = np.where(done[:, None], z_best, z_acc - lam[:, None] * step)
    eig = np.linalg.eigvals(jac_best)
    order = np.argsort(-np.abs(eig), axis=1)
    return z_best, r_best, np.take_along_axis(eig, order, axis=1)


def steady_state(setup: Setup, corners=None, check_periods: int = 20, progress=None) -> SteadyState:
    """Periodic steady state of the corners (default all), measured over the last period of a check run.

    ``settled`` is False where the one-period map has no stable fixed point the run stays at
    (e.g. subharmonic oscillation of peak current mode without enough slope): the
    measured values are then those of the last period of the check run.
    """
    if setup.digital is not None:  # a sampled controller's state is not in z: settled by running, not shooting
        from .digital import steady_state as sampled_steady_state

        return sampled_steady_state(setup, corners, progress)
    eng = setup.engine
    corners = np.arange(setup.n_corners) if corners is None else np.atleast_1d(np.asarray(corners, int))
    z, resid, multipliers = periodic_state(setup, corners, progress)
    lanes = eng.lanes(corners)
    rec = Record()
    old = eng.panels
    eng.panels = 32
    try:
        z_end = eng.run(lanes, z, check_periods, record=rec)
    finally:
        eng.panels = old
    a = rec.arrays()
    scale = _scales(setup, corners)
    drift = np.max(np.abs(z_end - z) / scale, axis=1)
    vo = a["vo_avg"]
    settled = ((resid < 1e-6) & (drift < 1e-4) & (np.abs(vo[:, -1] - vo[:, 0]) <= 1e-5 * np.abs(vo[:, -1]))
               & (np.abs(multipliers[:, 0]) < 1.0))
    ts = eng.ts
    dcm = np.any(a["t_zero"] < ts * (1 - 1e-6), axis=1) & eng.dcm_capable[corners]
    return SteadyState(
        vout_v=vo[:, -1], ripple_pp_v=a["vo_max"][:, -1] - a["vo_min"][:, -1], il_peak_a=a["il_peak"][:, -1],
        il_valley_a=a["il_start"][:, -1], il_avg_a=a["il_avg"][:, -1], duty=a["t_off"][:, -1] / ts, dcm=dcm,
        settled=settled, residual=resid, z=z, corners=corners, multipliers=multipliers)


# ---------------------------------------------------------------------------- load step
@dataclass(frozen=True, eq=False)
class SwitchingStep:
    """A load step simulated cycle by cycle, with the averaged model's answer on the same corners.

    ``t_s`` (points,) from the step; ``vo_v`` (corners, points) the output deviation from the
    steady state before the step, instantaneous; ``vo_avg_v`` its one-period moving average;
    ``peak_v``, ``settle_s`` the figures of the moving average (as
    :func:`loopkit.timeresponse.step_figures`); ``averaged`` the
    :class:`loopkit.timeresponse.StepResponse` of the same step; ``peak_ratio`` the switching peak
    over the averaged one.
    """

    amplitude_a: float
    t_s: np.ndarray
    vo_v: np.ndarray
    vo_avg_v: np.ndarray
    peak_v: np.ndarray
    settle_s: np.ndarray
    band_v: float
    averaged: object
    peak_ratio: np.ndarray
    corners: np.ndarray


def _moving_average(t: np.ndarray, y: np.ndarray, width: float) -> np.ndarray:
    """One-period moving average (trailing window) of samples ``y`` (corners, points) on ``t``."""
    cum = np.concatenate([np.zeros((y.shape[0], 1)), np.cumsum(0.5 * (y[:, 1:] + y[:, :-1]) * np.diff(t), axis=1)],
                         axis=1)
    back = np.array([np.interp(t - width, t, row) for row in cum])
    return (cum - back) / width


def load_step(setup: Setup, amplitude_a: float, periods: int | None = None, band_v: float | None = None,
              corners=None, progress=None) -> SwitchingStep:
    """A load step of ``amplitude_a`` (A, a rise of the load's magnitude; negative for a fall).

    The step lands on a clock edge after the periodic steady state; ``periods`` after it
    (default: the span the averaged response uses, at most 60 periods of the lowest crossover
    and 5000 switching periods).  ``band_v``: settling band (default 1 % of |vout|).  Needs a
    closed-loop setup.
    """
    from ..timeresponse import step_response

    if setup.result is None:
        raise DesignError("loop", "open loop", "a load step needs the designed loop")
    if not (np.isfinite(amplitude_a) and amplitude_a != 0):
        raise DesignError("load step", amplitude_a, "must be a nonzero current (A)")
    eng, design = setup.engine, setup.design
    corners = np.arange(setup.n_corners) if corners is None else np.atleast_1d(np.asarray(corners, int))
    avg = step_response(setup.result, "load", amplitude_a, band_v=band_v)
    ts = eng.ts
    if periods is None:  # the averaged span, at most 60 crossover periods of the slowest corner (and 5000)
        fc = setup.result.margins.fc_hz[corners] if setup.result.margins is not None else np.array([np.nan])
        fc_min = np.nanmin(fc) if np.any(np.isfinite(fc)) else 1.0 / avg.t_s[-1]
        periods = int(min(math.ceil(avg.t_s[-1] / ts), math.ceil(60.0 / (fc_min * ts)), 5000))
    before = 2
    sign = 1.0 if design.operating.vout > 0 else -1.0
    rec = Record()
    if setup.digital is not None:  # the controller as built, settled by running (its state is not in z)
        from .digital import settle

        sampler, z, _, _ = settle(setup, corners)
        lanes, runner = sampler.lanes, sampler.run
        first = sampler.periods_run
    else:
        ss = steady_state(setup, corners, check_periods=2)
        lanes = eng.lanes(corners)
        z, runner, first = ss.z, partial(eng.run, lanes), 0
    z = runner(z, before, first_period=first - before, record=rec, waveform=True)
    eng.set_load(lanes, sign * amplitude_a)
    runner(z, periods, first_period=first, record=rec, waveform=True, progress=progress)
    a = rec.arrays()
    t = a["wave_t"][0] - first * ts
    v0 = np.mean(a["vo_avg"][:, :before], axis=1)
    dev = a["wave_vo"] - v0[:, None]
    mov = _moving_average(t, dev, ts)
    keep = t >= 0
    t, dev, mov = t[keep], dev[:, keep], mov[:, keep]
    from ..timeresponse import step_figures

    band = avg.band_v
    final = np.mean(a["vo_avg"][:, -2:], axis=1) - v0
    fig = step_figures(t, mov, final, band, disturbance=True)
    ratio = np.abs(fig["peak"]) / np.abs(avg.peak_v[corners])
    return SwitchingStep(float(amplitude_a), t, dev, mov, fig["peak"], fig["settle_s"], band, avg, ratio, corners)


# ---------------------------------------------------------------------------- loop gain
@dataclass(frozen=True, eq=False)
class LoopGain:
    """Loop gain measured by injection, against the averaged model (arrays (corners, frequencies)).

    ``f_hz`` the frequencies measured (snapped to ``fsw p/q``); ``t_switching`` and
    ``t_averaged`` complex loop gains; ``diff_db``, ``diff_deg`` switching minus averaged;
    ``limit_hz`` (corners,) the first measured frequency at which they part by more than
    :data:`LIMIT_DB` or :data:`LIMIT_DEG` (NaN: none); ``amplitude_v`` the injected sines.
    """

    f_hz: np.ndarray
    t_switching: np.ndarray
    t_averaged: np.ndarray
    diff_db: np.ndarray
    diff_deg: np.ndarray
    limit_hz: np.ndarray
    amplitude_v: np.ndarray
    corners: np.ndarray


def snap_frequencies(f_hz, fsw_hz: float, max_den: int = 400) -> np.ndarray:
    """Each frequency as the nearest ``fsw p/q`` with q <= max_den (whole periods of both in q periods)."""
    out = []
    for f in np.atleast_1d(np.asarray(f_hz, float)):
        if not (np.isfinite(f) and 0 < f < fsw_hz / 2):
            raise DesignError("frequency", f, f"must be > 0 and below fsw/2 ({fsw_hz / 2:g} Hz)")
        fr = Fraction(f / fsw_hz).limit_denominator(max_den)
        if fr == 0:
            fr = Fraction(1, max_den)
        out.append(fsw_hz * fr.numerator / fr.denominator)
    return np.array(out)


def injection_windows(f_hz: np.ndarray, fsw_hz: float, min_window: int) -> tuple[np.ndarray, np.ndarray]:
    """Per snapped frequency ``fsw p/q``: the measuring window (whole periods of both, at least ``min_window``
    switching periods) and the periods the injected sine needs before it (two of its own periods, at least 1)."""
    windows, settles = [], []
    for fi in np.atleast_1d(f_hz):
        fr = Fraction(float(fi) / fsw_hz).limit_denominator(400)
        q, p = fr.denominator, fr.numerator
        windows.append(q * math.ceil(min_window / q))
        settles.append(max(2 * q / p, 1))
    return np.array(windows), np.array(settles)


def model_limit_hz(f_hz: np.ndarray, diff_db: np.ndarray, diff_deg: np.ndarray) -> np.ndarray:
    """First frequency (per row) where ``|diff_db| > LIMIT_DB`` or ``|diff_deg| > LIMIT_DEG``; NaN if none."""
    order = np.argsort(f_hz)
    bad = (np.abs(diff_db[:, order]) > LIMIT_DB) | (np.abs(diff_deg[:, order]) > LIMIT_DEG)
    first = np.argmax(bad, axis=1)
    return np.where(bad.any(axis=1), f_hz[order][first], np.nan)


def loop_gain(setup: Setup, f_hz, amplitude_v=None, corners=None, min_window: int = 32, progress=None) -> LoopGain:
    """The loop gain measured by a series injection at ``f_hz`` for the corners (default all).

    ``amplitude_v``: the injected sine's amplitude (default per frequency: 1 % of |vout|, less
    where the error-amplifier path would move the duty by more than 3 %).
    """
    if setup.result is None:
        raise DesignError("loop", "open loop", "a loop gain needs the designed loop")
    if setup.digital is not None:  # injected in the controller, on the sampled loop
        from .digital import loop_gain as sampled_loop_gain

        return sampled_loop_gain(setup, f_hz, amplitude_v, corners, min_window, progress)
    eng, design, result = setup.engine, setup.design, setup.result
    corners = np.arange(setup.n_corners) if corners is None else np.atleast_1d(np.asarray(corners, int))
    fsw = design.stage.fsw
    f = snap_frequencies(f_hz, fsw)
    nf, k = f.size, corners.size
    ss = steady_state(setup, corners, check_periods=2)
    from .setup import controller_of

    ctrl = controller_of(result)
    s = 2j * np.pi * f
    path = np.array([ctrl.c @ np.linalg.solve(si * np.eye(ctrl.a.shape[0]) - ctrl.a, ctrl.b) + ctrl.d for si in s])
    if amplitude_v is None:
        amp = np.minimum(0.01 * abs(design.operating.vout),
                         0.03 * setup.vc_per_duty[corners][:, None] / np.abs(path)[None, :])
    else:
        amp = np.broadcast_to(np.asarray(amplitude_v, float), (k, nf)).copy()
    fc = result.margins.fc_hz[corners] if result.margins is not None else np.full(k, np.nan)
    fc = np.where(np.isfinite(fc), fc, np.nanmin(f))
    windows, settles = injection_windows(f, fsw, min_window)
    settle = np.maximum(np.ceil(8.0 * fsw / fc)[:, None], settles[None, :])
    settle = np.minimum(settle, 4000).astype(int)
    lanes = eng.lanes(np.repeat(corners, nf), inj_amp=amp.reshape(-1), inj_f_hz=np.tile(f, k))
    start = settle.reshape(-1)
    stop = start + np.tile(windows, k)
    total = int(stop.max())
    z = np.repeat(ss.z, nf, axis=0)
    y = np.zeros(lanes.n, complex)
    x = np.zeros(lanes.n, complex)
    for j in range(total):
        rec = Record()
        z = eng.period(lanes, z, np.full(lanes.n, j * eng.ts), rec)
        on = (j >= start) & (j < stop)
        y += np.where(on, rec.dft_vo[0], 0)
        x += np.where(on, rec.dft_vo[0] + rec.dft_inj[0], 0)
        if progress is not None and progress(j + 1, total) is False:
            from .engine import Cancelled

            raise Cancelled()
    t_sw = (-y / x).reshape(k, nf)
    t_avg = result.loop.response(f)[corners]
    ratio = t_sw / t_avg
    diff_db = 20 * np.log10(np.abs(ratio))
    diff_deg = np.degrees(np.angle(ratio))
    return LoopGain(f, t_sw, t_avg, diff_db, diff_deg, model_limit_hz(f, diff_db, diff_deg), amp, corners)
