"""Exact piecewise-linear integration of the switched converter with its controller, cycle by cycle.

The whole state ``z = (plant states, controller states)`` obeys, in each switch state
``s``, a linear equation with constant and sinusoidal forcing::

    z' = A_s z + b_s + g a sin(w t)        (g: the injected sine's way into the controller)

``A_s`` is diagonalised once per corner and state (``A_s = V diag(lam) V^-1``); in modal
coordinates ``q = V^-1 z`` every component is solved exactly::

    q(t) = e^{lam t} q0 + beta0 E(lam, 0, t) + beta+ E(lam, jw, t) + beta- E(lam, -jw, t)
    E(lam, nu, t) = int_0^t e^{lam (t - u)} e^{nu u} du
                  = e^{lam t} t phi1((nu - lam) t)  (|nu - lam| t small;  phi1(x) = (e^x - 1)/x)
                  = (e^{nu t} - e^{lam t}) / (nu - lam)  (otherwise)

(the variation-of-constants formula for a diagonalised linear system, e.g. C. Moler,
C. Van Loan, "Nineteen dubious ways to compute the exponential of a matrix, twenty-five
years later", SIAM Review 45(1), 2003, sec. 1 and 10; the two forms of ``E`` are the
same number, chosen so that neither cancels nor overflows).  So an integrator
(``lam = 0``), a pole at the injected frequency and the fastest ESR mode are all exact.

Events are zeros of linear functionals of ``z`` plus a ramp and the injected sine: the
comparator (voltage mode ``vc - Vramp t/Ts``, peak current mode ``vc - Ri iL - Se t``,
a fixed duty ``D Ts - t``) ends the on-time; the rectifier current reaching zero ends
the off-time in DCM; the clock ends the period.  Each is found by a scan of the exact
solution on a grid, then a bracketed Newton iteration on the exact solution (each
Newton step that leaves the bracket falls back to bisection, as Brent's method does),
to 1e-12 Ts.  For speed (a single corner's run is per-call overhead, not arithmetic):
the event function is put once per interval in a closed form with one exponential per
mode (``events.EventFunction``); Newton starts at the lane's previous instant when that lies in the
scan's bracket (the bracket, not the start, decides which crossing is found) and stops
on its own error bound; a lane alone runs the iteration in Python floats.
``tests/test_switching.py`` and ``tests/test_switching_events.py`` check the instants
against ``scipy.optimize.brentq`` on the same exact solution, on many random states.

Lanes: the engine advances many independent runs together (corners, and copies of
corners with another load step or injected frequency), one switching period at a time,
vectorised over lanes; each lane's events are its own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import DesignError
from .circuit import IDLE, OFF, ON, PlantCircuit
from .events import SURE, EventFunction, LaneEvent, e_pair, newton_one, phi1

_GATHERED = ("lam", "inv", "inv_lam", "zero_lam", "vec", "r_g", "r_il", "d_g", "d_g_ix", "c_vo", "d_vo",
             "d_vo_ix", "g_inj_coef")

__all__ = ["Cancelled", "Controller", "Engine", "Lanes", "Law", "Record"]

#: Points of the scan for the first comparator crossing in an interval.
SCAN_POINTS = 8
#: Simpson panels per switch interval for the recorded averages and Fourier integrals.
PANELS = 8
_NEWTON_STEPS = 60


class Cancelled(Exception):
    """The run was cancelled by its progress callback."""


@dataclass(frozen=True, eq=False)
class Controller:
    """The error amplifier path as one state space: ``xc' = a xc + b e``, ``vc = c xc + d e``.

    ``e = vo + v_inj - v_target``: the converter output (plus the injected sine) minus the
    output the divider is set for.  ``None`` in place of a Controller means open loop.
    """

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: float
    v_target: float


@dataclass(frozen=True, eq=False)
class Law:
    """The on-time comparator per corner: the switch turns off when ``g(t)`` falls to 0::

        g(t) = w_vc vc(t) + w_il iL(t) + const - slope t      (t from the clock edge)

    voltage mode: ``w_vc = 1, w_il = 0, slope = Vramp/Ts``; peak current mode:
    ``w_vc = 1, w_il = -Ri, slope = Se``; a fixed duty: ``w_vc = w_il = 0,
    const = D Ts, slope = 1``.  ``max_duty`` ends the on-time at the latest.
    """

    w_vc: np.ndarray
    w_il: np.ndarray
    const: np.ndarray
    slope: np.ndarray
    max_duty: float


@dataclass
class Lanes:
    """Independent runs advanced together: the corner each runs, its extra load and injected sine."""

    corner: np.ndarray
    i_x: np.ndarray
    inj_amp: np.ndarray
    inj_w: np.ndarray
    beta0: list = field(default_factory=list)
    beta_inj: list = field(default_factory=list)
    g: dict = field(default_factory=dict)
    inj: bool = False
    pre: list = field(default_factory=list)
    last: dict = field(default_factory=dict)

    def __post_init__(self):
        self.inj = bool(np.any(self.inj_amp))

    @property
    def n(self) -> int:
        return self.corner.size


@dataclass
class Record:
    """Per lane and period (arrays (lanes, periods)): on-time end, rectifier-off instant, peak and
    start current, output average, minimum and maximum; optional Fourier integrals and waveforms."""

    t_off: list = field(default_factory=list)
    t_zero: list = field(default_factory=list)
    il_peak: list = field(default_factory=list)
    il_start: list = field(default_factory=list)
    vo_avg: list = field(default_factory=list)
    il_avg: list = field(default_factory=list)
    vo_min: list = field(default_factory=list)
    vo_max: list = field(default_factory=list)
    dft_vo: list = field(default_factory=list)
    dft_inj: list = field(default_factory=list)
    wave_t: list = field(default_factory=list)
    wave_vo: list = field(default_factory=list)
    wave_il: list = field(default_factory=list)

    def arrays(self) -> dict:
        out = {}
        for k, v in self.__dict__.items():
            if v:
                out[k] = np.concatenate(v, axis=1) if k.startswith("wave") else np.stack(v, axis=1)
        return out


def _e(lam, nu, t):
    """``int_0^t e^{lam (t-u)} e^{nu u} du`` (broadcast), without cancellation or overflow."""
    d = nu - lam
    x = d * t
    near = np.abs(x) < 0.5
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        a = np.exp(np.where(near, lam * t, 0.0)) * t * phi1(np.where(near, x, 0.0))
        safe_d = np.where(near, 1.0, d)
        b = (np.exp(nu * t) - np.exp(lam * t)) / safe_d
    return np.where(near, a, b)


_UNIT_GRID = np.linspace(0.0, 1.0, SCAN_POINTS)[None, :]
_ONE = np.zeros(1, int)


def _apply(mat, z):
    """``mat @ z`` per lane: (lanes, n, n) by (lanes, n)."""
    return np.matmul(mat, z[:, :, None])[:, :, 0]


def _per_state(lanes: Lanes, s: int) -> dict:
    """The lanes' gathered quantities of switch state ``s`` that every interval uses, once per load:
    ``shift = b0/lam`` and ``lin = b0 [lam = 0]`` of the modal solution, the event rows, and the event
    functions' constant parts (``const_g``, and ``gamma`` the slope of their part linear in time)."""
    g = lanes.g
    b0 = lanes.beta0[s]
    lin = b0 * g["zero_lam"][:, s]
    r_g = np.ascontiguousarray(g["r_g"][:, s])
    r_il = np.ascontiguousarray(g["r_il"][:, s])
    return {"lam": np.ascontiguousarray(g["lam"][:, s]), "inv": np.ascontiguousarray(g["inv"][:, s]),
            "vec_t": np.ascontiguousarray(np.swapaxes(g["vec"][:, s], 1, 2)), "shift": b0 * g["inv_lam"][:, s],
            "lin": lin, "bi": lanes.beta_inj[s], "r_g": r_g, "r_il": r_il,
            "const_g": g["d_g"][:, s] + g["d_g_ix"][:, s] * lanes.i_x,
            "gamma_g": np.sum(r_g * lin, axis=1).real - g["slope"], "gamma_il": np.sum(r_il * lin, axis=1).real,
            "ginj": g["g_inj_coef"], "slope": g["slope"], "lam2": np.abs(g["lam"][:, s]) ** 2,
            "grows": np.any(g["lam"][:, s].real > 0, axis=1)}


class Engine:
    """The switched converter of every corner with its controller and modulator law.

    Parameters
    ----------
    plants : list of PlantCircuit
        One per corner (:func:`loopkit.switching.circuit.plant_circuits`).
    controller : Controller or None
        The error-amplifier path (None: open loop, the law must be a fixed duty).
    law : Law
    ts_s : float
        Switching period.
    """

    def __init__(self, plants: list[PlantCircuit], controller: Controller | None, law: Law, ts_s: float):
        self.plants, self.ctrl, self.law, self.ts = plants, controller, law, float(ts_s)
        nc = 0 if controller is None else controller.a.shape[0]
        m = plants[0].n_states
        if any(p.n_states != m for p in plants):
            raise DesignError("stage", "corners with different circuits", "one capacitor arrangement for all corners")
        self.m, self.n = m, m + nc
        n, k = self.n, len(plants)
        a = np.zeros((k, 3, n, n))
        b = np.zeros((k, 3, n))
        b_ix = np.zeros((k, 3, n))
        g_inj = np.zeros((k, 3, n))
        self.c_vo = np.zeros((k, 3, n))
        self.d_vo = np.zeros((k, 3))
        self.d_vo_ix = np.zeros((k, 3))
        self.c_g = np.zeros((k, 3, n))  # the comparator functional (used in ON)
        self.d_g = np.zeros((k, 3))
        self.d_g_ix = np.zeros((k, 3))
        self.g_inj_coef = np.zeros(k)
        for j, p in enumerate(plants):
            a[j, :, :m, :m] = p.a
            b[j, :, :m] = p.b
            b_ix[j, :, :m] = p.b_ix
            self.c_vo[j, :, :m] = p.c_vo
            self.d_vo[j], self.d_vo_ix[j] = p.d_vo, p.d_vo_ix
            self.c_g[j, :, 0] = law.w_il[j]
            self.d_g[j] = law.const[j]
            if controller is not None:
                c = controller
                for s in range(3):
                    a[j, s, m:, :m] = np.outer(c.b, p.c_vo[s])
                    a[j, s, m:, m:] = c.a
                    b[j, s, m:] = c.b * (p.d_vo[s] - c.v_target)
                    b_ix[j, s, m:] = c.b * p.d_vo_ix[s]
                    g_inj[j, s, m:] = c.b
                    self.c_g[j, s, :m] += law.w_vc[j] * c.d * p.c_vo[s]
                    self.c_g[j, s, m:] += law.w_vc[j] * c.c
                    self.d_g[j, s] += law.w_vc[j] * c.d * (p.d_vo[s] - c.v_target)
                    self.d_g_ix[j, s] = law.w_vc[j] * c.d * p.d_vo_ix[s]
                self.g_inj_coef[j] = law.w_vc[j] * c.d
        self.a, self.b, self.b_ix, self.g_inj = a, b, b_ix, g_inj
        lam, vec = np.linalg.eig(a)
        cond = np.linalg.cond(vec)
        if np.any(~np.isfinite(cond) | (cond > 1e12)):
            raise DesignError("compensator", "a controller pole on a power-stage pole",
                              "the switching simulation diagonalises each switch state; move a network pole slightly")
        self.lam, self.vec, self.inv = lam, vec, np.linalg.inv(vec)
        self.zero_lam = (lam == 0).astype(float)
        self.inv_lam = np.where(lam == 0, 0.0, 1.0 / np.where(lam == 0, 1.0, lam))
        # functionals in modal coordinates: row @ V
        self.r_vo = np.einsum("ksi,ksij->ksj", self.c_vo, vec)
        self.r_g = np.einsum("ksi,ksij->ksj", self.c_g, vec)
        self.r_il = vec[:, :, 0, :]
        self.dcm_capable = np.array([p.dcm_capable for p in plants])
        self.panels = PANELS

    # ------------------------------------------------------------------ lanes
    def lanes(self, corner, i_x=0.0, inj_amp=0.0, inj_f_hz=0.0) -> Lanes:
        corner = np.atleast_1d(np.asarray(corner, int))
        n = corner.size
        ln = Lanes(corner, np.broadcast_to(np.asarray(i_x, float), (n,)).copy(),
                   np.broadcast_to(np.asarray(inj_amp, float), (n,)).copy(),
                   2 * np.pi * np.broadcast_to(np.asarray(inj_f_hz, float), (n,)).copy())
        ln.g = {nm: getattr(self, nm)[corner] for nm in _GATHERED}
        ln.g["slope"] = self.law.slope[corner]
        self.set_load(ln, ln.i_x)
        return ln

    def set_load(self, lanes: Lanes, i_x) -> None:
        """Change the lanes' extra load current (A drawn from the output node), e.g. a load step."""
        lanes.i_x = np.broadcast_to(np.asarray(i_x, float), (lanes.n,)).copy()
        c = lanes.corner
        lanes.beta0 = [np.einsum("kij,kj->ki", lanes.g["inv"][:, s], self.b[c, s] + lanes.i_x[:, None] * self.b_ix[c, s])
                       for s in range(3)]
        lanes.beta_inj = [np.einsum("kij,kj->ki", lanes.g["inv"][:, s], self.g_inj[c, s]) for s in range(3)]
        lanes.pre = [_per_state(lanes, s) for s in range(3)]

    # ------------------------------------------------------------------ exact solution
    def _modal(self, lanes, s, z0, t0_abs, t, q0=None):
        """Modal state q at relative times ``t`` (lanes, m) of an interval in state ``s`` started at ``z0``
        (``q0``: its modal coordinates, when already known)."""
        p = lanes.pre[s]
        if q0 is None:
            q0 = _apply(p["inv"], z0)
        lam = p["lam"][:, None, :]
        tt = t[:, :, None]
        em = np.expm1(lam * tt)
        # e^{lam t} q0 + b0 (e^{lam t} - 1)/lam, exact also at lam = 0 (then b0 t)
        q = q0[:, None, :] + em * (q0 + p["shift"])[:, None, :] + p["lin"][:, None, :] * tt
        if lanes.inj:
            w = lanes.inj_w[:, None, None]
            amp = (lanes.inj_amp * np.exp(1j * lanes.inj_w * t0_abs) / 2j)[:, None, None]
            bi = p["bi"][:, None, :]
            ep, en, _ = e_pair(lam, w, tt)
            q = q + bi * amp * ep + bi * np.conj(amp) * en
        return q

    def _inj(self, lanes, t_abs):
        return lanes.inj_amp[:, None] * np.sin(lanes.inj_w[:, None] * t_abs)

    def _state(self, lanes, s, q):
        """The states ``V q`` (real part) at every time of ``q`` (lanes, m, n)."""
        return np.matmul(q, lanes.pre[s]["vec_t"]).real

    def _interval(self, lanes, s, z0, t0_abs, t_max, kind, t_in_cycle, active):
        """End of an interval in state ``s``: the first fall of the event function to 0, or ``t_max``.

        Returns (duration (lanes,), state at the end (lanes, n)).
        """
        if lanes.n == 1:
            return self._interval_one(lanes, s, z0, t0_abs, t_max, kind, t_in_cycle, active)
        q0 = _apply(lanes.pre[s]["inv"], z0)
        dur = t_max.copy()
        if kind is not None and np.any(active):
            sub = np.nonzero(active & (t_max > 0))[0]
            if sub.size:
                ev = EventFunction(lanes, s, kind, q0, t0_abs, t_in_cycle, sub)
                grid = t_max[sub, None] * _UNIT_GRID
                f = ev.value(grid)
                below = f <= 0.0
                first = np.argmax(below, axis=1)
                crosses = below.any(axis=1)
                at_start = crosses & (first == 0)
                dur[sub[at_start]] = 0.0
                inner = crosses & (first > 0)
                if np.any(inner):
                    rows = np.nonzero(inner)[0]
                    lo = grid[rows, first[rows] - 1]
                    hi = grid[rows, first[rows]]
                    hint = lanes.last.get((s, kind))
                    dur[sub[rows]] = self._newton(ev.take(rows), lo, hi, f[rows, first[rows] - 1], f[rows, first[rows]],
                                                  None if hint is None else hint[sub[rows]])
            lanes.last[(s, kind)] = dur.copy()
        q = self._modal(lanes, s, z0, t0_abs, dur[:, None], q0=q0)
        return dur, self._state(lanes, s, q)[:, 0, :]

    def _interval_one(self, lanes, s, z0, t0_abs, t_max, kind, t_in_cycle, active):
        """:meth:`_interval` for a single lane (arrays of one), by :meth:`_scalar_interval`."""
        dur, z1 = self._scalar_interval(lanes, s, z0[0], float(t0_abs[0]), float(t_max[0]), kind,
                                        float(t_in_cycle[0]), bool(active[0]))
        return np.array([dur]), z1[None, :]

    def _scalar_interval(self, lanes, s, z0, t0_abs, dur, kind, t_in_cycle, active):
        """:meth:`_interval` of a single lane with Python scalars in the control flow (a single-corner run
        spends its time in numpy's per-call cost, not in arithmetic): state (n,) and floats in, the
        duration and the end state (n,) out."""
        p = lanes.pre[s]
        q0 = p["inv"][0] @ z0
        if kind is not None and active and dur > 0:
            grid = dur * _UNIT_GRID[0]
            if lanes.inj:
                ev = EventFunction(lanes, s, kind, q0[None, :], np.array([t0_abs]), np.array([t_in_cycle]), _ONE)
                f = ev.value(grid[None, :])[0].tolist()
            else:
                ev = LaneEvent(p, kind, q0, t_in_cycle)
                f = ev.value(grid)
            j = next((i for i, v in enumerate(f) if v <= 0.0), None)
            if j == 0:
                dur = 0.0
            elif j is not None:
                lo, hi, f_lo, f_hi = float(grid[j - 1]), float(grid[j]), f[j - 1], f[j]
                t = lo + (hi - lo) * f_lo / (f_lo - f_hi) if f_lo - f_hi > 0 else 0.5 * (lo + hi)
                if not (math.isfinite(t) and lo < t < hi):
                    t = 0.5 * (lo + hi)
                hint = lanes.last.get((s, kind))
                if hint is not None and lo < hint[0] < hi:
                    t = float(hint[0])
                curv = float(ev.curvature(np.array([hi]))[0]) if lanes.inj else ev.curvature_one(hi)
                dur = newton_one(ev, lo, hi, t, curv, 1e-12 * self.ts, _NEWTON_STEPS)
            lanes.last[(s, kind)] = np.array([dur])
        if lanes.inj:
            q = self._modal(lanes, s, z0[None, :], np.array([t0_abs]), np.array([[dur]]), q0=q0[None, :])
            return dur, self._state(lanes, s, q)[0, 0, :]
        q = q0 + np.expm1(p["lam"][0] * dur) * (q0 + p["shift"][0]) + p["lin"][0] * dur
        return dur, (q @ p["vec_t"][0]).real

    def _period_one(self, lanes: Lanes, z: np.ndarray, t0_abs: np.ndarray) -> np.ndarray:
        """:meth:`period` of a single lane without a record: the same intervals and decisions on scalars, so
        the same numbers (``tests/test_switching_events.py`` checks it against :meth:`period`, bit for bit;
        keep the two alike).  ``period``'s own bookkeeping, over arrays of one, was a third of a
        single-corner run."""
        ts, t0 = self.ts, float(t0_abs[0])
        d_on, z1 = self._scalar_interval(lanes, ON, z[0], t0, self.law.max_duty * ts, "g", 0.0, True)
        dcm = bool(self.dcm_capable[lanes.corner[0]])
        positive = bool(z1[0] > 0)
        t_off_max = 0.0 if dcm and not positive else ts - d_on
        d_off, z2 = self._scalar_interval(lanes, OFF, z1, t0 + d_on, t_off_max, "il", d_on, dcm and positive)
        if dcm and d_on + d_off < ts * (1 - 1e-12):
            z2[0] = 0.0
            _, z2 = self._scalar_interval(lanes, IDLE, z2, t0 + d_on + d_off, ts - d_on - d_off, None, 0.0, False)
        return z2[None, :]

    def _newton(self, ev, lo, hi, f_lo, f_hi, hint=None):
        """The zero of the event ``ev`` in ``[lo, hi]`` (``f_lo > 0 >= f_hi``) to ``1e-12 Ts``.

        Newton's method safeguarded by the bracket (a step that leaves it bisects, as Brent's method
        does), started at ``hint`` (the lane's previous event: in steady operation it moves little)
        where that lies inside the bracket, else at the secant.  The bracket comes from the scan, so
        the hint never changes which crossing is found, only how fast.  A lane stops when the step
        (taken even onto the bracket's end) or the bracket is below the tolerance, or when Newton's
        own error bound is below ``SURE`` of it: after a step ``d`` from ``t`` to ``t1``,
        ``f(t1) = f''(xi) d^2 / 2`` (Taylor), and on the bracket ``|f'| >= |f'(t)| - K (hi - lo) = m``
        with ``K >= max |f''|`` (:meth:`EventFunction.curvature`), so when ``m > 0`` the event function is
        monotonic there and ``|t1 - root| <= |f(t1)| / m <= K d^2 / (2 m)`` (the quadratic convergence
        of Newton's method, e.g. J. Stoer, R. Bulirsch, Introduction to Numerical Analysis, 3rd ed.,
        Springer 2002, sec. 5.3, from memory); that saves the last evaluation.  Lanes done stay put
        while the others iterate.  A single lane runs :func:`newton_one`, the same steps on floats.
        """
        with np.errstate(divide="ignore", invalid="ignore"):
            t = lo + (hi - lo) * f_lo / (f_lo - f_hi)
        t = np.where(np.isfinite(t) & (t > lo) & (t < hi), t, 0.5 * (lo + hi))
        if hint is not None:
            t = np.where((hint > lo) & (hint < hi), hint, t)
        tol = 1e-12 * self.ts
        curv = ev.curvature(hi)
        if t.size == 1:
            return np.array([newton_one(ev, float(lo[0]), float(hi[0]), float(t[0]), float(curv[0]), tol, _NEWTON_STEPS)])
        fin = np.zeros(t.size, bool)  # lanes done stay where they are while the others iterate
        for _ in range(_NEWTON_STEPS):
            f, df = ev.value_slope(t)
            pos = f > 0
            lo = np.where(pos, t, lo)
            hi = np.where(pos, hi, t)
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                step = np.where(df != 0, f / df, np.inf)
                new = t - step
                # a step below the tolerance is taken even onto the bracket's end (the root is within it)
                bad = ~np.isfinite(new) | (((new <= lo) | (new >= hi)) & ~(np.abs(step) < tol))
                new = np.where(bad, 0.5 * (lo + hi), new)
                m = np.abs(df) - curv * (hi - lo)
                sure = ~bad & (m > 0) & (curv * step * step < 2.0 * SURE * tol * m)
            exact = f == 0
            done = (np.abs(new - t) < tol) | (hi - lo < tol) | sure | exact
            t = np.where(fin | exact, t, new)
            fin |= done
            if np.all(fin):
                break
        return t

    # ------------------------------------------------------------------ one period
    def period(self, lanes: Lanes, z: np.ndarray, t0_abs: np.ndarray, record: Record | None = None,
               waveform: bool = False, duty: np.ndarray | None = None) -> np.ndarray:
        """Advance every lane by one switching period from a clock edge; returns the new state.

        ``duty`` (lanes,), when given, replaces the comparator for this period (a sampled
        controller's hook: the digital scheme computes the duty from the state at the clock).
        """
        ts = self.ts
        n = lanes.n
        c = lanes.corner
        zero = np.zeros(n)
        t_on_max = np.full(n, self.law.max_duty * ts)
        if duty is None:
            d_on, z1 = self._interval(lanes, ON, z, t0_abs, t_on_max, "g", zero, np.ones(n, bool))
        else:
            d_on = np.clip(np.asarray(duty, float), 0.0, self.law.max_duty) * ts
            d_on, z1 = self._interval(lanes, ON, z, t0_abs, d_on, None, zero, np.zeros(n, bool))
        rest = ts - d_on
        dcm = self.dcm_capable[c]
        positive = z1[:, 0] > 0
        t_off_max = np.where(dcm & ~positive, 0.0, rest)
        d_off, z2 = self._interval(lanes, OFF, z1, t0_abs + d_on, t_off_max, "il", d_on, dcm & positive)
        idle = dcm & (d_on + d_off < ts * (1 - 1e-12))
        z2[idle, 0] = 0.0
        d_idle = np.where(idle, ts - d_on - d_off, 0.0)
        d_off = np.where(idle, d_off, ts - d_on)
        if np.any(idle):
            _, z3 = self._interval(lanes, IDLE, z2, t0_abs + d_on + d_off, d_idle, None, zero, np.zeros(n, bool))
            z3 = np.where(idle[:, None], z3, z2)
        else:
            z3 = z2
        if record is not None:
            self._record(lanes, record, [(ON, z, d_on), (OFF, z1, d_off), (IDLE, z2, d_idle)], t0_abs, waveform,
                         on_s=d_on, conducting_s=d_on + d_off, il_peak=z1[:, 0])
        return z3

    def period_at(self, lanes: Lanes, z: np.ndarray, t0_abs: np.ndarray, t_rise: np.ndarray, t_fall: np.ndarray,
                  record: Record | None = None, waveform: bool = False) -> np.ndarray:
        """Advance every lane by one period with the switch on from ``t_rise`` to ``t_fall`` (lanes,), s after
        the clock edge (``0 <= t_rise <= t_fall <= Ts``): a sampled controller's counter PWM, whose edges are
        set by compare values rather than by a comparator on the state.

        Before ``t_rise`` the previous off-time goes on (a leading-edge or symmetric carrier), with the
        rectifier's zero-current event (DCM) in both off-times, as in :meth:`period`.
        """
        n = lanes.n
        t_rise = np.clip(np.asarray(t_rise, float), 0.0, self.ts)
        t_fall = np.clip(np.asarray(t_fall, float), t_rise, self.ts)
        segments = []
        z_a, idle_a = self._off_time(lanes, z, t0_abs, t_rise, segments)
        d_on = t_fall - t_rise
        _, z_b = self._interval(lanes, ON, z_a, t0_abs + t_rise, d_on, None, np.zeros(n), np.zeros(n, bool))
        segments.append((ON, z_a, d_on))
        z_c, idle_b = self._off_time(lanes, z_b, t0_abs + t_fall, self.ts - t_fall, segments)
        if record is not None:
            self._record(lanes, record, segments, t0_abs, waveform, on_s=d_on, conducting_s=self.ts - idle_a - idle_b,
                         il_peak=z_b[:, 0])
        return z_c

    def _off_time(self, lanes, z, t_abs, span, segments) -> tuple[np.ndarray, np.ndarray]:
        """``span`` (lanes,) with the switch off: the rectifier conducts until its current reaches zero (DCM-capable
        stages), then the idle state; appends both segments; returns the end state and the idle time."""
        n = lanes.n
        dcm = self.dcm_capable[lanes.corner]
        positive = z[:, 0] > 0
        t_max = np.where(dcm & ~positive, 0.0, span)
        d_off, z1 = self._interval(lanes, OFF, z, t_abs, t_max, "il", np.zeros(n), dcm & positive)
        idle = dcm & (d_off < span * (1 - 1e-12))
        z1[idle, 0] = 0.0
        d_idle = np.where(idle, span - d_off, 0.0)
        d_off = np.where(idle, d_off, span)
        segments += [(OFF, z, d_off), (IDLE, z1, d_idle)]
        if not np.any(idle):
            return z1, d_idle
        _, z2 = self._interval(lanes, IDLE, z1, t_abs + d_off, d_idle, None, np.zeros(n), np.zeros(n, bool))
        return np.where(idle[:, None], z2, z1), d_idle

    def output(self, lanes: Lanes, z: np.ndarray, state: int) -> np.ndarray:
        """The output voltage (lanes,) of state ``z`` in switch state ``state`` (ON, OFF or IDLE)."""
        c = lanes.corner
        return (np.einsum("ki,ki->k", self.c_vo[c, state], z) + self.d_vo[c, state]
                + self.d_vo_ix[c, state] * lanes.i_x)

    def _record(self, lanes, rec, segments, t0_abs, waveform, on_s, conducting_s, il_peak):
        """Integrals and extremes over the period's ``segments`` [(switch state, start state, duration), ...] in
        time order; ``on_s`` the on-time, ``conducting_s`` the time before the current stopped (DCM), ``il_peak``
        the current at the end of the on-time."""
        panels = self.panels
        u = np.linspace(0.0, 1.0, panels + 1)
        wts = np.ones(panels + 1)
        wts[1:-1:2], wts[2:-1:2] = 4.0, 2.0
        total = np.zeros(lanes.n)
        il_int = np.zeros(lanes.n)
        vmin = np.full(lanes.n, np.inf)
        vmax = np.full(lanes.n, -np.inf)
        dft_vo = np.zeros(lanes.n, complex)
        dft_inj = np.zeros(lanes.n, complex)
        start = t0_abs.copy()
        wt, wv, wi = [], [], []
        for s, z0, d in segments:
            t = d[:, None] * u[None, :]
            q = self._modal(lanes, s, z0, start, t)
            x = self._state(lanes, s, q)
            vo = np.einsum("ki,kmi->km", lanes.g["c_vo"][:, s], x) + (lanes.g["d_vo"][:, s] + lanes.g["d_vo_ix"][:, s] * lanes.i_x)[:, None]
            il = x[:, :, 0]
            h = (d / (3.0 * panels))[:, None]
            total += np.sum(h * wts * vo, axis=1)
            il_int += np.sum(h * wts * il, axis=1)
            has = d > 0
            vmin = np.where(has, np.minimum(vmin, vo.min(axis=1)), vmin)
            vmax = np.where(has, np.maximum(vmax, vo.max(axis=1)), vmax)
            if lanes.inj:
                kern = np.exp(-1j * lanes.inj_w[:, None] * (start[:, None] + t))
                dft_vo += np.sum(h * wts * vo * kern, axis=1)
                dft_inj += np.sum(h * wts * self._inj(lanes, start[:, None] + t) * kern, axis=1)
            if waveform:
                wt.append(start[:, None] + t), wv.append(vo), wi.append(il)
            start = start + d
        rec.t_off.append(np.array(on_s, float))
        rec.t_zero.append(np.array(conducting_s, float))
        rec.il_peak.append(np.array(il_peak, float))
        rec.il_start.append(segments[0][1][:, 0].copy())
        rec.vo_avg.append(total / self.ts)
        rec.il_avg.append(il_int / self.ts)
        rec.vo_min.append(vmin)
        rec.vo_max.append(vmax)
        if lanes.inj:
            rec.dft_vo.append(dft_vo)
            rec.dft_inj.append(dft_inj)
        if waveform:
            rec.wave_t.append(np.concatenate(wt, axis=1))
            rec.wave_vo.append(np.concatenate(wv, axis=1))
            rec.wave_il.append(np.concatenate(wi, axis=1))

    def run(self, lanes: Lanes, z: np.ndarray, periods: int, first_period: int = 0, record: Record | None = None,
            waveform: bool = False, progress=None) -> np.ndarray:
        """Advance ``periods`` switching periods; ``progress(done, total)`` returning False cancels."""
        alone = lanes.n == 1 and record is None
        for k in range(int(periods)):
            t0 = np.full(lanes.n, (first_period + k) * self.ts)
            z = self._period_one(lanes, z, t0) if alone else self.period(lanes, z, t0, record, waveform)
            if progress is not None and progress(k + 1, periods) is False:
                raise Cancelled()
        return z


def _take(lanes: Lanes, idx) -> Lanes:
    if idx.size == lanes.n:  # every lane, in order (np.nonzero gives sorted indices)
        return lanes
    return Lanes(lanes.corner[idx], lanes.i_x[idx], lanes.inj_amp[idx], lanes.inj_w[idx],
                 [b[idx] for b in lanes.beta0], [b[idx] for b in lanes.beta_inj],
                 {k: v[idx] for k, v in lanes.g.items()}, lanes.inj, [{k: v[idx] for k, v in p.items()} for p in lanes.pre])
