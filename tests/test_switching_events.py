"""The switching engine's event search against scipy's brentq on the exact solution, on many random states.

The engine finds each switching instant (the comparator ending the on-time, the rectifier current
reaching zero in DCM) by a scan of the event function and a bracketed Newton iteration on its closed
form, warm-started at the lane's previous instant, stopped by Newton's own error bound, and run in
Python floats for a lane alone (``loopkit/switching/engine.py``, ``events.py``).  Every one of those
shortcuts must leave the instant where it was.  Reference, per random state: the event function
evaluated from the engine's modal solution ``Engine._modal`` (which tests/test_switching.py checks
against ``scipy.linalg.expm``), its first sign change on a grid of 4001 points, and
``scipy.optimize.brentq`` there (R. P. Brent, Algorithms for Minimization without Derivatives,
Prentice-Hall 1973, ch. 4) to scipy's smallest tolerance.  The engine's instants (all lanes together,
each lane alone, and with good and arbitrary previous instants as warm starts) must agree with it to
1e-12 Ts, the engine's stated tolerance, plus the zero's own rounding spread ``16 eps S / |f'|`` (``S``
the sum of the moduli of the event function's terms: measured about 1e-13 Ts in most draws, up to
3e-10 Ts in the peak-current boost's draws where modal terms of the split double pole cancel, where
the engine and the reference were seen 4e-12 Ts apart); intervals without a crossing must end at
their limit in both.  And ``Engine.run``'s shortcut for a lane alone must give
``Engine.period``'s numbers bit for bit.
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np
import pytest
import scipy.optimize

import loopkit
from loopkit import switching as sw
from loopkit.loop import design_loop
from loopkit.switching.circuit import OFF, ON

SAMPLES = Path(__file__).resolve().parents[1] / "sample_designs"
DRAWS = 48
TOL_TS = 1e-12


@functools.cache
def _setup(name):
    setup = sw.closed_loop_setup(design_loop(loopkit.load_design(SAMPLES / f"{name}.toml")))
    return setup, sw.steady_state(setup).z


def _reference(eng, lanes, i, s, kind, z0, t0, t_max, t_in_cycle):
    """First zero of the event function of lane ``i`` in ``[0, t_max]`` by a fine grid and brentq (or t_max),
    and how far rounding alone moves it: ``16 eps S / |f'|``, ``S`` the sum of the moduli of the event
    function's terms at the zero (large where modal terms cancel, e.g. the split double pole of a Type III
    network: there every evaluation order of the same exact solution gives a slightly different zero)."""
    one = eng.lanes(lanes.corner[[i]], lanes.i_x[[i]], lanes.inj_amp[[i]], lanes.inj_w[[i]] / (2 * np.pi))
    k = lanes.corner[i]

    def f(t, size=False):
        t = np.atleast_1d(np.asarray(t, float))
        q = eng._modal(one, s, z0[None, i], np.array([t0[i]]), t[None, :])[0]
        row = eng.r_il[k, s] if kind == "il" else eng.r_g[k, s]
        terms = [(q @ row).real]
        if kind == "g":
            terms += [eng.d_g[k, s] + eng.d_g_ix[k, s] * one.i_x[0] + 0 * t, -eng.law.slope[k] * (t_in_cycle[i] + t),
                      eng.g_inj_coef[k] * one.inj_amp[0] * np.sin(one.inj_w[0] * (t0[i] + t))]
        if size:
            return (np.abs(q * row)).sum(axis=1) + sum(np.abs(x) for x in terms[1:])
        return sum(terms)

    grid = np.linspace(0.0, t_max[i], 4001)
    vals = f(grid)
    below = np.nonzero(vals <= 0.0)[0]
    if below.size == 0:
        return t_max[i], 0.0
    j = below[0]
    if j == 0:
        return 0.0, 0.0
    root = scipy.optimize.brentq(lambda t: f(t)[0], grid[j - 1], grid[j], xtol=1e-15 * eng.ts, rtol=1e-15)
    h = 1e-7 * eng.ts
    slope = (f(root + h)[0] - f(root - h)[0]) / (2 * h)
    return root, 16 * np.finfo(float).eps * f(root, size=True)[0] / abs(slope)


CASES = [("buck_24v_3v3", ON, "g"), ("boost_pcm_12v_24v", ON, "g"), ("boost_pcm_12v_24v", OFF, "il"),
         ("buck_diode_12v_5v", OFF, "il")]


@pytest.mark.parametrize("inject", [False, True], ids=["plain", "injected"])
@pytest.mark.parametrize("name, s, kind", CASES, ids=[f"{c[0]}-{c[2]}" for c in CASES])
def test_event_instants_match_brentq(name, s, kind, inject):
    setup, z_ss = _setup(name)
    eng = setup.engine
    ts = eng.ts
    rng = np.random.default_rng(11)
    corners = rng.integers(0, setup.n_corners, DRAWS)
    # random states around each corner's periodic state: +-10 % on every state, a load change of up
    # to +-20 % of the corner's load, and (injected) a sine of up to 2 % of the output at fsw/50..fsw/3
    z = z_ss[corners] * (1.0 + 0.1 * rng.uniform(-1.0, 1.0, (DRAWS, eng.n)))
    i_x = 0.2 * setup.stage.load[corners] * rng.uniform(-1.0, 1.0, DRAWS)
    amp = (0.02 * abs(setup.design.operating.vout) * rng.uniform(0.0, 1.0, DRAWS)) if inject else np.zeros(DRAWS)
    f_inj = rng.uniform(1.0 / 50.0, 1.0 / 3.0, DRAWS) / ts
    t0 = rng.uniform(0.0, 100.0, DRAWS) * ts
    lanes = eng.lanes(corners, i_x, amp, f_inj)
    zero = np.zeros(DRAWS)
    d_on, z1 = eng._interval(lanes, ON, z, t0, np.full(DRAWS, eng.law.max_duty * ts), "g", zero, np.ones(DRAWS, bool))
    if s == ON:
        start, t_start, t_max, t_in, active = z, t0, np.full(DRAWS, eng.law.max_duty * ts), zero, np.ones(DRAWS, bool)
    else:
        start, t_start, t_max, t_in = z1, t0 + d_on, ts - d_on, d_on
        active = eng.dcm_capable[corners] & (z1[:, 0] > 0)

    def engine_instants(idx, hint=None):
        one = eng.lanes(corners[idx], i_x[idx], amp[idx], f_inj[idx])
        if hint is not None:
            one.last[(s, kind)] = hint[idx]
        return eng._interval(one, s, start[idx], t_start[idx], t_max[idx], kind, t_in[idx], active[idx])[0]

    every = np.arange(DRAWS)
    together = engine_instants(every)
    alone = np.array([engine_instants(np.array([i]))[0] for i in range(DRAWS)])
    warm = engine_instants(every, together + ts * rng.uniform(-1e-3, 1e-3, DRAWS))
    wild_hint = rng.uniform(0.0, 1.0, DRAWS) * t_max
    wild = engine_instants(every, wild_hint)
    wild_alone = np.array([engine_instants(np.array([i]), wild_hint)[0] for i in range(DRAWS)])
    ref, slack = np.array([_reference(eng, lanes, i, s, kind, start, t_start, t_max, t_in) if active[i]
                           else (t_max[i], 0.0) for i in range(DRAWS)]).T
    inner = active & (ref > 0) & (ref < t_max)
    assert np.sum(inner) >= DRAWS // 4  # most draws do cross inside the interval: the check is not vacuous
    for nm, got in zip(("together", "alone", "warm", "wild", "wild_alone"), (together, alone, warm, wild, wild_alone)):
        assert np.all(np.abs(got - ref) <= TOL_TS * ts + slack), nm


@pytest.mark.parametrize("name", ["buck_24v_3v3", "boost_pcm_12v_24v", "buck_diode_12v_5v"])
def test_single_lane_run_is_period_by_period(name):
    """``Engine.run`` of a lane alone takes a scalar shortcut past ``Engine.period``; it must give the same
    numbers bit for bit, in CCM and DCM corners (the samples have both), through a load step."""
    setup, _ = _setup(name)
    eng = setup.engine
    for k in range(setup.n_corners):
        fast_lanes, slow_lanes = eng.lanes([k]), eng.lanes([k])
        fast = eng.run(fast_lanes, setup.z0[[k]].copy(), 30)
        slow = setup.z0[[k]].copy()
        for j in range(30):
            slow = eng.period(slow_lanes, slow, np.full(1, j * eng.ts))
        np.testing.assert_array_equal(fast, slow)
        step = 0.3 * setup.stage.load[k]
        eng.set_load(fast_lanes, step)
        eng.set_load(slow_lanes, step)
        fast = eng.run(fast_lanes, fast, 20, first_period=30)
        for j in range(20):
            slow = eng.period(slow_lanes, slow, np.full(1, (30 + j) * eng.ts))
        np.testing.assert_array_equal(fast, slow)
        assert fast_lanes.last.keys() == slow_lanes.last.keys()
