"""The digital controller in the switching simulation: ADC, fixed-point controller, counter PWM, cycle by cycle.

What runs, per switching period (``digital.sample_ratio = 1``), at every lane:

1. **ADC.**  At the clock edge the ADC samples its input ``v = H0 vout + F(s) (vo - vout)``: the
   sensing (divider gain, or the differential amplifier with its pole) and the anti-alias pole
   ``F(s)`` (their states run in the engine with the converter's, exactly), ``H0`` its dc gain.
   The output is taken in the switch state just before the edge (the sample precedes the edge's
   ringing: common practice, no source), so the ripple the ADC sees is the real one.  The code is
   ``round(v / LSB)`` clamped to ``0 .. 2^bits - 1`` (a mid-tread converter), and the reference
   code ``r = round(H0 vout / LSB)``: the loop regulates the output to within half an LSB of vout.
2. **Controller.**  ``u = C(r - code)`` in PWM steps, by the integer arithmetic of
   :class:`loopkit.fixedpoint.FixedPointController` (the C header's, bit for bit), with its
   clamp and anti-windup.  ``exact=True`` runs the exact coefficients in floating point on the
   unquantised ADC value with a continuous duty instead: the linear sampled loop ``T(z)``
   describes, for measuring the loop gain.
3. **PWM.**  The new value is loaded into the compare register ``t_load`` after the sample (the
   delay model of :mod:`loopkit.schemes.digital`: the computation delay when ``update =
   "immediate"``, else the next period start).  Each switch edge uses the value the register
   holds when the counter reaches it: an edge that would already have passed when a new value
   arrives mid-period happens at once (counter past compare), one that has passed stays (one edge
   of each kind per period).  Trailing edge: on from 0 to ``D Ts``; leading edge: from
   ``(1 - D) Ts`` to ``Ts``; symmetric: centred on ``Ts/2``.  With dithering the compare value
   in counts alternates between ``floor(u / 2^b)`` and one more, in bit-reversed order over
   ``2^b`` periods, so the average over the pattern is ``u / 2^b`` counts (A. V. Peterchev,
   S. R. Sanders, IEEE TPEL 18(1), 2003, sec. IV, from memory).

The converter between edges is the exact piecewise-linear engine
(:meth:`loopkit.switching.engine.Engine.period_at`).  What it gives:

* :func:`settle`: the loop run from the averaged operating point until it settles, then watched:
  a limit cycle (the PWM value or the ADC code still moving) is the hunting
  :mod:`loopkit.quantisation` predicts when the PWM is coarser than the ADC;
* :func:`loop_gain`: the loop gain by injection in the controller (``x_k = y_k + a sin(w k Ts)``,
  ``T = -Y/X`` over whole periods of the sine), on the exact controller, against ``T(z)``;
* :func:`load_step`: a load step with the controller as built, against the averaged answer.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import DesignError
from .engine import IDLE, OFF, ON, Cancelled, Controller, Record

__all__ = ["LimitCycle", "Sampler", "SamplingPlant", "loop_gain", "sampling_plant", "settle", "steady_state"]

#: Periods watched for a limit cycle after settling (a multiple of every dither pattern up to 9 bits).
WATCH_PERIODS = 512


@dataclass(frozen=True, eq=False)
class SamplingPlant:
    """The digital hardware around the converter, in the simulator's terms.

    Attributes
    ----------
    filter : Controller
        Sensing and anti-alias path from ``vo - vout`` to the ADC input's deviation (its states run in
        the engine; none for a plain divider).
    h_dc, vout_v : float
        dc gain of the sensing (signed), and the output it is set for, V.
    lsb_v : float
        One ADC code at the ADC input, V.
    adc_max : int
        Highest code.
    ref_code : int
        The code the loop regulates to.
    counts : float
        PWM counter counts per period.
    steps : int
        PWM steps per period (counts times ``2^dither_bits``): the controller's output unit.
    dither_bits : int
    carrier : str
    load_periods : int
        Whole periods from a sample to the register load.
    load_offset_s : float
        Time into that period at which the register loads, s.
    fixed : FixedPointController or None
        The controller in integers (None: the exact run only).
    b, a : ndarray
        The exact difference equation.
    u_min, u_max : float
        Output limits, PWM steps.
    u0 : ndarray (corners,)
        PWM steps of the averaged duty at each corner (the start).
    """

    filter: Controller
    h_dc: float
    vout_v: float
    lsb_v: float
    adc_max: int
    ref_code: int
    counts: float
    steps: int
    dither_bits: int
    carrier: str
    load_periods: int
    load_offset_s: float
    fixed: object
    b: np.ndarray
    a: np.ndarray
    u_min: float
    u_max: float
    u0: np.ndarray

    @property
    def lsb_out_v(self) -> float:
        """One ADC code referred to the output, V."""
        return self.lsb_v / abs(self.h_dc)


def sampling_plant(result, ts_s: float) -> SamplingPlant:
    """The digital loop of a :class:`~loopkit.result.LoopResult` (scheme ``digital``) for the simulator."""
    from ..fixedpoint import pwm_limits
    from ..rational import TWO_PI, Rational
    from ..schemes import digital as scheme
    from ..timeresponse import realise

    design, dig = result.design, result.digital
    d = design.digital
    if d.sample_ratio != 1:
        raise DesignError("digital.sample_ratio", d.sample_ratio, "the switching simulation samples once per switching"
                          " period (sample_ratio = 1)")
    path = scheme.sensing_gain(design)
    if d.anti_alias > 0:
        path = path * Rational.from_factors(1.0, (), [(1.0, 1.0 / (TWO_PI * d.anti_alias))])
    h_dc = float(np.real(np.ravel(path.dc_gain())[0]))
    if path.den.shape[1] and np.any(path.den[0, :, 1] != 0):
        ss = realise(path)
        filt = Controller(ss.a[0], ss.b[0], ss.c[0], float(ss.d[0]), float(design.operating.vout))
    else:
        filt = Controller(np.zeros((0, 0)), np.zeros(0), np.zeros(0), h_dc, float(design.operating.vout))
    lsb = dig.adc_lsb_v
    adc_max = 2**dig.adc_bits - 1
    ref = int(np.floor(h_dc * design.operating.vout / lsb + 0.5))
    if not 0 < ref < adc_max:
        raise DesignError("digital.adc_range", d.adc_range, f"the sensed output ({h_dc * design.operating.vout:.4g} V)"
                          " inside the ADC's range")
    steps = round(float(dig.pwm_steps))
    u_min, u_max = pwm_limits(steps, dig.duty_min, dig.duty_max)
    t_load = scheme.load_time_s(design)
    load_periods = int(np.floor(t_load / ts_s + 1e-12))
    offset = max(t_load - load_periods * ts_s, 0.0)
    fixed = dig.realisation.fixed if dig.realisation is not None else None
    u0 = np.clip(np.round(np.asarray(dig.duty, float) * steps), u_min, u_max)
    return SamplingPlant(filt, h_dc, float(design.operating.vout), lsb, adc_max, ref, float(dig.pwm_counts), steps,
                         int(dig.dither_bits), d.carrier, load_periods, offset, fixed, np.asarray(dig.b, float),
                         np.asarray(dig.a, float), float(u_min), float(u_max), u0)


def _bit_reversed(bits: int) -> np.ndarray:
    """0 .. 2^bits - 1 in bit-reversed order: the dither pattern's thresholds, spread evenly over the periods."""
    n = 2**bits
    return np.array([int(format(i, f"0{bits}b")[::-1], 2) if bits else 0 for i in range(n)])


class _FloatController:
    """The exact difference equation in floating point, rows at once, stored outputs clamped like the integer one."""

    def __init__(self, b, a, u_min, u_max, u0):
        self.b, self.a1 = np.asarray(b, float), np.asarray(a, float)[1:]
        self.lo, self.hi = u_min, u_max
        self.e = np.zeros((u0.size, self.b.size))
        self.y = np.repeat(np.asarray(u0, float)[:, None], self.a1.size, axis=1)

    def __call__(self, e):
        self.e[:, 1:] = self.e[:, :-1]
        self.e[:, 0] = e
        u = self.e @ self.b - (self.y @ self.a1 if self.a1.size else 0.0)
        u = np.clip(u, self.lo, self.hi)
        if self.a1.size:
            self.y[:, 1:] = self.y[:, :-1]
            self.y[:, 0] = u
        return u


class Sampler:
    """The sampled loop around the engine for a set of lanes: ADC, controller, register pipeline, PWM edges.

    Parameters
    ----------
    setup : Setup
        A digital closed-loop setup (``setup.digital`` set).
    lanes : Lanes
    exact : bool
        Exact coefficients in floating point, no ADC or PWM quantisation (module notes).
    inject : tuple (amplitude (lanes,), frequency (lanes,), Hz) or None
        A sine added to the ADC value the controller sees, in codes.
    """

    def __init__(self, setup, lanes, exact: bool = False, inject=None):
        dp = setup.digital
        if not exact and dp.fixed is None:
            raise DesignError("digital.word_length", "no fixed-point controller", "a format that realises the"
                              " controller (see the design's findings), or the exact run")
        self.setup, self.dp, self.lanes, self.exact = setup, dp, lanes, exact
        self.inject = inject
        u0 = dp.u0[lanes.corner]
        self.ctrl = _FloatController(dp.b, dp.a, dp.u_min, dp.u_max, u0) if exact else dp.fixed.rows_stepper(u0)
        self.pipe = [u0.copy() for _ in range(dp.load_periods)]  # values computed, not yet loaded
        self.register = u0.astype(float)
        self.pattern = _bit_reversed(0 if exact else dp.dither_bits)
        self.last_state = np.full(lanes.n, ON if dp.carrier == "leading-edge" else OFF)
        self.codes, self.outputs = [], []
        #: Per period run: (switch-on, switch-off) instants from the clock edge, s (lanes,) each.
        self.edges = []
        self.periods_run = 0

    # ---------------------------------------------------------------- one period
    def adc(self, z: np.ndarray) -> np.ndarray:
        """The ADC value of every lane at the clock edge (codes; float in the exact run)."""
        eng, dp = self.setup.engine, self.dp
        vo = np.empty(self.lanes.n)
        for s in (ON, OFF, IDLE):
            here = self.last_state == s
            if np.any(here):
                vo[here] = eng.output(_rows(self.lanes, here), z[here], s)
        f = dp.filter
        v = dp.h_dc * dp.vout_v + z[:, eng.m:] @ f.c + f.d * (vo - dp.vout_v)
        code = v / dp.lsb_v
        return code if self.exact else np.clip(np.floor(code + 0.5), 0, dp.adc_max)

    def _duty(self, u, k: int) -> np.ndarray:
        """Duty of a register value ``u`` (PWM steps) in period ``k`` (dither applied)."""
        dp = self.dp
        if self.exact:
            return u / dp.steps
        q = 2**dp.dither_bits
        whole, frac = np.floor_divide(u, q), np.mod(u, q)
        return (whole + (frac > self.pattern[k % q])) / dp.counts

    def _edges(self, duty: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ts, carrier = self.setup.engine.ts, self.dp.carrier
        if carrier == "trailing-edge":
            return np.zeros_like(duty), duty * ts
        if carrier == "leading-edge":
            return (1.0 - duty) * ts, np.full_like(duty, ts)
        return 0.5 * (1.0 - duty) * ts, 0.5 * (1.0 + duty) * ts

    def period(self, z: np.ndarray, k: int, record: Record | None = None, waveform: bool = False) -> np.ndarray:
        """Period ``k`` (clock edge at ``k Ts``): sample, compute, load and switch; returns the next state."""
        eng, dp, ln = self.setup.engine, self.dp, self.lanes
        ts = eng.ts
        code = self.adc(z)
        x = code
        if self.inject is not None:
            amp, f = self.inject
            x = code + amp * np.sin(2 * np.pi * f * k * ts)
        u = np.asarray(self.ctrl(dp.ref_code - x), float)
        self.codes.append(code)
        self.outputs.append(u)
        self.pipe.append(u)
        new = self.pipe.pop(0)  # the value that loads in this period, at load_offset_s
        old = self.register
        rise_old, fall_old = self._edges(self._duty(old, k))
        rise_new, fall_new = self._edges(self._duty(new, k))
        t_load = dp.load_offset_s
        rise = np.where(rise_old < t_load, rise_old, np.maximum(t_load, rise_new))
        fall = np.where(fall_old < t_load, fall_old, np.maximum(t_load, fall_new))
        fall = np.maximum(fall, rise)
        self.edges.append((rise, fall))
        self.register = new
        self.periods_run = k + 1
        z_next = eng.period_at(ln, z, np.full(ln.n, k * ts), rise, fall, record, waveform)
        on_at_end = (fall >= ts) & (fall > rise)
        stopped = eng.dcm_capable[ln.corner] & (z_next[:, 0] <= 0)
        self.last_state = np.where(on_at_end, ON, np.where(stopped, IDLE, OFF))
        return z_next

    def run(self, z: np.ndarray, periods: int, first_period: int = 0, record: Record | None = None,
            waveform: bool = False, progress=None) -> np.ndarray:
        """``periods`` periods from period ``first_period``; ``progress(done, total)`` returning False cancels."""
        for j in range(int(periods)):
            z = self.period(z, first_period + j, record, waveform)
            if progress is not None and progress(j + 1, periods) is False:
                raise Cancelled()
        return z


def _rows(lanes, mask):
    from .engine import _take

    return _take(lanes, np.nonzero(mask)[0])


@dataclass(frozen=True, eq=False)
class LimitCycle:
    """What the loop does after settling, per lane (arrays (lanes,)), watched over ``periods`` periods.

    ``hunting``: the PWM value or the ADC code still moves (a limit cycle); ``u_span`` and
    ``code_span`` how far (PWM steps, ADC codes); ``vo_span_v`` the span of the output's one-period
    average, V; ``cycle_periods`` the shortest repeat of the PWM sequence, periods (0 when it does not
    repeat within the watch).
    """

    hunting: np.ndarray
    u_span: np.ndarray
    code_span: np.ndarray
    vo_span_v: np.ndarray
    cycle_periods: np.ndarray
    periods: int


def _repeat(row: np.ndarray) -> int:
    """Shortest p with row[i] == row[i + p] over the second half of the watch (0: none)."""
    half = row.size // 2
    tail = row[half:]
    for p in range(1, half):
        if np.array_equal(tail[p:], tail[:-p]):
            return p
    return 0


def settle_periods(setup) -> int:
    """Periods the loop is given to settle: 60 periods of its lowest crossover, 300 .. 6000 switching periods."""
    fc = setup.result.margins.fc_hz
    if not np.any(np.isfinite(fc)):
        return 300
    return int(np.clip(math.ceil(60.0 / (float(np.nanmin(fc)) * setup.engine.ts)), 300, 6000))


def settle(setup, corners=None, i_x=0.0, exact: bool = False, periods: int | None = None, progress=None):
    """Run the loop from the averaged operating point of the corners (default all), with extra load ``i_x``
    (A per lane, e.g. to try several loads), until settled, then watch it for a limit cycle.

    Returns ``(sampler, z, record of the watch, LimitCycle)``.
    """
    eng = setup.engine
    corners = np.arange(setup.n_corners) if corners is None else np.atleast_1d(np.asarray(corners, int))
    lanes = eng.lanes(corners, i_x=i_x)
    sampler = Sampler(setup, lanes, exact=exact)
    n = settle_periods(setup) if periods is None else int(periods)
    total = n + WATCH_PERIODS

    def part(offset):
        if progress is None:
            return None
        return lambda done, _: progress(offset + done, total)

    z = sampler.run(setup.z0[corners].copy(), n, 0, progress=part(0))
    rec = Record()
    n0 = len(sampler.outputs)
    z = sampler.run(z, WATCH_PERIODS, n, record=rec, progress=part(n))
    u = np.array(sampler.outputs[n0:]).T
    codes = np.array(sampler.codes[n0:]).T
    vo = rec.arrays()["vo_avg"]
    u_span, code_span = np.ptp(u, axis=1), np.ptp(codes, axis=1)
    cycle = np.where(u_span > 0, [_repeat(row) for row in u], 0)
    lc = LimitCycle((u_span > 0) | (code_span > 0), u_span, code_span, np.ptp(vo, axis=1), cycle, WATCH_PERIODS)
    return sampler, z, rec, lc


def steady_state(setup, corners=None, progress=None):
    """The loop as built (fixed point, both quantisers) settled at every corner: the figures of its last period
    and whether it hunts (:class:`~loopkit.switching.analysis.SteadyState` with ``limit_cycle``)."""
    from .analysis import SteadyState

    corners = np.arange(setup.n_corners) if corners is None else np.atleast_1d(np.asarray(corners, int))
    _, z, rec, lc = settle(setup, corners, progress=progress)
    a = rec.arrays()
    ts = setup.engine.ts
    dcm = np.any(a["t_zero"] < ts * (1 - 1e-6), axis=1) & setup.engine.dcm_capable[corners]
    nan = np.full(corners.size, np.nan)
    return SteadyState(
        vout_v=np.mean(a["vo_avg"], axis=1), ripple_pp_v=a["vo_max"][:, -1] - a["vo_min"][:, -1],
        il_peak_a=a["il_peak"][:, -1], il_valley_a=a["il_start"][:, -1], il_avg_a=np.mean(a["il_avg"], axis=1),
        duty=np.mean(a["t_off"], axis=1) / ts, dcm=dcm, settled=~lc.hunting, residual=nan, z=z, corners=corners,
        multipliers=np.full((corners.size, 1), np.nan), limit_cycle=lc)


def loop_gain(setup, f_hz, amplitude_codes=None, corners=None, min_window: int = 32, progress=None):
    """The loop gain of the exact controller measured by injection at ``f_hz`` (module notes), against ``T(z)``.

    The sine is added to the ADC value the controller sees (as firmware injects it on the bench), so
    ``T = -Y/X`` (``Y`` the ADC values, ``X`` those plus the sine) is the loop gain ``T(z) = Tu(z) C(z)``
    of the design, at frequencies snapped to ``fsw p/q`` below fs/2, over whole periods of both.
    ``amplitude_codes``: the sine in ADC codes (default per frequency: 0.5 % of the output, less where
    the controller would move the duty by more than 2 %).  Returns a
    :class:`~loopkit.switching.analysis.LoopGain` (``amplitude_v`` referred to the output).
    """
    from .analysis import LoopGain, injection_windows, model_limit_hz, snap_frequencies

    result, dp, eng = setup.result, setup.digital, setup.engine
    corners = np.arange(setup.n_corners) if corners is None else np.atleast_1d(np.asarray(corners, int))
    fsw = setup.design.stage.fsw
    f = snap_frequencies(f_hz, fsw)
    nf, k = f.size, corners.size
    c_mag = np.abs(result.digital.controller.response(f)[0])
    if amplitude_codes is None:
        amp = np.minimum(0.005 * abs(dp.vout_v) / dp.lsb_out_v, 0.02 * dp.steps / c_mag)
        amp = np.broadcast_to(amp, (k, nf))
    else:
        amp = np.broadcast_to(np.asarray(amplitude_codes, float), (k, nf))
    windows, extra = injection_windows(f, fsw, min_window)
    start = settle_periods(setup) + int(np.ceil(np.max(extra)))
    stop = start + np.tile(windows, k)
    total = int(stop.max())
    lanes = eng.lanes(np.repeat(corners, nf))
    f_lane = np.tile(f, k)
    sampler = Sampler(setup, lanes, exact=True, inject=(amp.reshape(-1), f_lane))
    sampler.run(setup.z0[lanes.corner].copy(), total, 0, progress=progress)
    y = np.array(sampler.codes)  # (periods, lanes)
    kk = np.arange(total)[:, None]
    inj = amp.reshape(-1)[None, :] * np.sin(2 * np.pi * f_lane[None, :] * kk * eng.ts)
    on = (kk >= start) & (kk < stop[None, :])
    kern = np.where(on, np.exp(-2j * np.pi * f_lane[None, :] * kk * eng.ts), 0.0)
    big_y = np.sum(kern * y, axis=0)
    big_x = np.sum(kern * (y + inj), axis=0)
    t_sw = (-big_y / big_x).reshape(k, nf)
    t_avg = result.loop.response(f)[corners]
    ratio = t_sw / t_avg
    diff_db, diff_deg = 20 * np.log10(np.abs(ratio)), np.degrees(np.angle(ratio))
    return LoopGain(f, t_sw, t_avg, diff_db, diff_deg, model_limit_hz(f, diff_db, diff_deg), amp * dp.lsb_out_v,
                    corners)

