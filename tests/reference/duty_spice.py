"""Control-to-output of the switched circuit in ngspice, by a small sine on the duty cycle.

An independent reference for loopkit's voltage-mode plant Gvd (it never imports
loopkit).  The circuit is the one of :mod:`reference.pcm_spice` (every topology,
the four-switch stage in each mode, diodes as a drop plus a piecewise-linear
ideal diode, synchronous rectifiers with or without diode emulation, ESR
banks, resistive load) with the current-sense gain set to zero: the comparator
then turns the switch off where the ramp ``Se t`` reaches the control voltage,
i.e. a pulse-width modulator with ``d = vc / (Se Ts)``, and
``Gvd = (vo/vc) Se Ts``.  The same clock, latch and comparator timing
(turn-off within 10^-5 Ts of the exact crossing) and the same single-bin
Fourier integrals over whole perturbation and switching periods on the
solver's own time points (:func:`reference.pcm_spice._fourier`).

Operating point: the circuit is driven open-loop at the duty cycle it is given
(as tests/test_stage_ngspice.py does); one run settles it and measures the
latch's duty, a second run corrects vc for the set pulse's and the latch's
small delay (a few 10^-4 Ts) so the measured duty is the one asked for.

Perturbation: ``amp_rel`` of Ts on the duty below the estimated output pole,
growing with f/fp to at most 2.5 times that above it (the output's response
falls and would otherwise sink towards the solver's tolerance); the solver's
relative tolerance is 10^-6 here (10^-4 in :mod:`reference.pcm_spice`), since
the DCM response near fsw/3 is 10^-5 of the output.

Source: ngspice (Debian package ``ngspice``, version 39), run as ``ngspice -b``.
"""

from __future__ import annotations

import math
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field, replace

import numpy as np

from . import pcm_spice as pcm

__all__ = ["DutyResponse", "duty_to_output"]

_RELTOL = "reltol=1e-6"


@dataclass(frozen=True)
class DutyResponse:
    """Measured control-to-output Gvd = vo/d of one corner.

    Attributes
    ----------
    f_hz : ndarray
        Perturbation frequencies, Hz.
    gvd : ndarray of complex
        vo per unit duty at each frequency, V.
    duty : float
        Measured duty cycle of the unperturbed run.
    vout_v : float
        Output averaged over the last 10 periods of that run, V.
    dcm : bool
        The inductor current stayed at zero for part of the period.
    elapsed_s : float
        Wall time of the whole measurement.
    """

    f_hz: np.ndarray
    gvd: np.ndarray
    duty: float
    vout_v: float
    dcm: bool
    elapsed_s: float
    runs_s: np.ndarray = field(repr=False)


def _deck(case, vc, state, periods, **kw):
    return pcm.netlist(case, vc, state, periods, **kw).replace("reltol=1e-4", _RELTOL)


def _raw(case, vc, state, periods, cache_dir):
    ts = case.ts_s
    data = pcm._run(_deck(case, vc, state, periods, record="raw"), periods * ts, cache_dir)
    t, v, q, il = data[:, 0], data[:, 1], data[:, 3], data[:, 4]
    t_end = periods * ts
    last = t >= t_end - ts * (1 + 1e-9)
    return {
        "vout": pcm._mean(t, v, t_end - 10 * ts, t_end),
        "duty": pcm._mean(t, (q > 0.5).astype(float), t_end - 10 * ts, t_end),
        "state": (float(il[-1]), *(float(c) for c in data[-1, 5:])),
        "dcm": bool(np.min(np.abs(il[last])) < 1e-3 * np.max(np.abs(il[last]))),
    }


def _one(case, vc, state, f_hz, amp_v, settle, min_window, fp_hz, cache_dir):
    ts = case.ts_s
    frac = pcm._ratio(f_hz / case.fsw_hz)
    window = max(1, math.ceil(min_window / frac.denominator)) * frac.denominator
    periods = settle + window
    phase = math.degrees(math.atan(f_hz / fp_hz))  # a single-pole estimate of vo starts at its steady state
    t0 = time.perf_counter()
    text = _deck(case, vc, state, periods, perturb=(amp_v, f_hz, phase), t_start_s=(settle - 1) * ts)
    data = pcm._run(text, periods * ts, cache_dir)
    t, vo, vcs = data[:, 0], data[:, 1], data[:, 2]
    t_a, t_b = settle * ts, periods * ts
    yo = pcm._fourier(t, vo, f_hz, t_a, t_b)
    yc = pcm._fourier(t, vcs, f_hz, t_a, t_b)
    return yo / yc, time.perf_counter() - t0


def duty_to_output(
    case: pcm.PcmCase,
    duty: float,
    f_hz,
    *,
    fp_hz: float,
    amp_rel: float = 2e-3,
    n_settle_tau: float = 4.0,
    min_window: int = 64,
    workers: int = 2,
    cache_dir=None,
) -> DutyResponse:
    """Measure Gvd of the switched circuit at ``duty`` and each frequency (one ngspice run each).

    Parameters
    ----------
    case : reference.pcm_spice.PcmCase
        The circuit; ``sense_gain_ohm`` and ``slope_v_per_s`` are replaced (0 and 1 V per period).
    duty : float
        Duty cycle to drive.
    f_hz : array_like
        Frequencies, rounded to ``fsw p/q`` (q <= 40) or ``fsw/m`` so windows hold whole periods.
    fp_hz : float
        Estimate of the dominant output pole, Hz: sets the settling time (``n_settle_tau``
        time constants, at least 40 periods) and the perturbation's start phase.
    amp_rel : float
        Duty perturbation below the pole, fraction of Ts.
    min_window : int
        Fewest switching periods in the DFT window.

    Returns
    -------
    DutyResponse
    """
    t0 = time.perf_counter()
    ts = case.ts_s
    se = 1.0 / ts  # a 1 V ramp: vc is the duty
    case = replace(case, sense_gain_ohm=0.0, slope_v_per_s=se, max_duty=0.98)
    settle = max(40, math.ceil(n_settle_tau / (2.0 * math.pi * fp_hz * ts)))
    state = (0.0, *([case.vout_v] * len(case.caps)))
    vc = duty
    first = _raw(case, vc, state, 2 * settle, cache_dir)
    vc += duty - first["duty"]
    op = _raw(case, vc, first["state"], settle, cache_dir)
    f = np.array([float(pcm._ratio(x / case.fsw_hz)) * case.fsw_hz for x in np.atleast_1d(f_hz)])
    amps = [amp_rel * min(2.5, max(1.0, x / fp_hz)) for x in f]

    def one(k):
        return _one(case, vc, op["state"], f[k], amps[k], settle, min_window, fp_hz, cache_dir)

    with ThreadPoolExecutor(max_workers=workers) as pool:
        out = list(pool.map(one, range(f.size)))
    return DutyResponse(
        f_hz=f,
        gvd=np.array([o[0] for o in out]),  # vc is the duty (1 V ramp)
        duty=op["duty"],
        vout_v=op["vout"],
        dcm=op["dcm"],
        elapsed_s=time.perf_counter() - t0,
        runs_s=np.array([o[1] for o in out]),
    )
