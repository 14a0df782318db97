"""The switching engine's event functions in closed form, and Newton's iteration for a lane alone.

Split from :mod:`loopkit.switching.engine` (which owns the exact modal solution, the lanes and the
periods); see its module notes.  Per interval, an event function (the comparator or the rectifier
current) is put once into a closed form in the modes, so that each evaluation during the search
is one exponential per mode and a dot product: numpy's per-call cost, not arithmetic, is what a
single corner's run spends its time on.  :func:`newton_one` is ``Engine._newton``'s iteration on
floats for one lane, step for step.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["SURE", "EventFunction", "LaneEvent", "e_pair", "newton_one", "phi1"]

#: Newton stops without another evaluation when its error bound is below this part of the tolerance.
SURE = 1e-3


def phi1(x):
    """``(e^x - 1)/x`` (broadcast), its series near 0."""
    small = np.abs(x) < 1e-5
    safe = np.where(small, 1.0, x)
    return np.where(small, 1.0 + x / 2.0 + x * x / 6.0, np.expm1(safe) / safe)


def e_pair(lam, w, t):
    """``E(lam, jw, t)``, ``E(lam, -jw, t)`` and ``e^{jwt}`` (broadcast; ``w``, ``t`` real): the same two forms
    as :func:`loopkit.switching.engine._e`, with ``e^{lam t}`` and ``e^{jwt}`` computed once for both."""
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        elt = np.exp(lam * t)
        rot = np.exp(1j * (w * t))
        out = []
        for e_nu, nu in ((rot, 1j * w), (np.conj(rot), -1j * w)):
            d = nu - lam
            x = d * t
            near = np.abs(x) < 0.5
            a = elt * t * phi1(np.where(near, x, 0.0))
            b = (e_nu - elt) / np.where(near, 1.0, d)
            out.append(np.where(near, a, b))
    return out[0], out[1], rot


class EventFunction:
    """One interval's event function for some lanes, in closed form on the exact modal solution.

    With ``q(t) = q0 + expm1(lam t) (q0 + b0/lam) + b0 t [lam = 0]`` (+ the injected terms) and the
    event row ``r`` (comparator or inductor current), ``f(t) = r q(t) + const - slope (t_in_cycle + t)``
    is regrouped once per interval into::

        f(t)  = f0 + Re(sum_j alpha_j expm1(lam_j t)) + gamma t     alpha = r (q0 + b0/lam)
        f'(t) = Re(sum_j lam_j alpha_j e^{lam_j t}) + gamma

    (the same sums as ``r q(t)``, so no new cancellation), and with the injected sine
    ``+ Re(sum_j rho_j (a E(lam_j, jw, t) + a* E(lam_j, -jw, t)))`` and its derivative
    ``dE/dt = lam E + e^{nu t}``, plus the comparator's own share of the sine.
    """

    __slots__ = ("alpha", "amp", "f0", "gamma", "inj", "lam", "lam_alpha", "rho_m", "rho_p", "sine", "t0", "w")

    def __init__(self, lanes, s, kind, q0, t0_abs, t_in_cycle, sub):
        p = lanes.pre[s]
        full = sub.size == lanes.n

        def take(a):
            return a if full else a[sub]

        row = take(p["r_g"] if kind == "g" else p["r_il"])
        q0 = take(q0)
        self.lam = take(p["lam"])
        self.alpha = row * (q0 + take(p["shift"]))
        self.lam_alpha = self.lam * self.alpha
        f0 = np.sum(row * q0, axis=1).real
        if kind == "g":
            self.f0 = f0 + take(p["const_g"]) - take(p["slope"]) * take(t_in_cycle)
            self.gamma = take(p["gamma_g"])
        else:
            self.f0, self.gamma = f0, take(p["gamma_il"])
        self.inj = lanes.inj
        if self.inj:
            self.w, self.t0, self.amp = take(lanes.inj_w), take(t0_abs), take(lanes.inj_amp)
            amp = self.amp * np.exp(1j * self.w * self.t0) / 2j
            rho = row * take(p["bi"])
            self.rho_p, self.rho_m = rho * amp[:, None], rho * np.conj(amp)[:, None]
            self.sine = take(p["ginj"]) * self.amp if kind == "g" else np.zeros(self.amp.size)

    def take(self, rows) -> EventFunction:
        if rows.size == self.f0.size:  # every lane, in order (np.nonzero gives sorted indices)
            return self
        ev = object.__new__(EventFunction)
        for nm in self.__slots__:
            v = getattr(self, nm, None)
            setattr(ev, nm, v[rows] if isinstance(v, np.ndarray) else v)
        return ev

    def value(self, t):
        """``f`` at times ``t`` (lanes, m)."""
        tt = t[:, :, None]
        lam = self.lam[:, None, :]
        f = self.f0[:, None] + np.matmul(np.expm1(lam * tt), self.alpha[:, :, None])[:, :, 0].real + self.gamma[:, None] * t
        if self.inj:
            w = self.w[:, None, None]
            ep, en, _ = e_pair(lam, w, tt)
            part = np.matmul(ep, self.rho_p[:, :, None]) + np.matmul(en, self.rho_m[:, :, None])
            f = f + part[:, :, 0].real + self.sine[:, None] * np.sin(self.w[:, None] * (self.t0[:, None] + t))
        return f

    def value_slope(self, t):
        """``f`` and ``f'`` at one time per lane ``t`` (lanes,)."""
        em = np.expm1(self.lam * t[:, None])
        f = self.f0 + np.sum(em * self.alpha, axis=1).real + self.gamma * t
        df = np.sum((em + 1.0) * self.lam_alpha, axis=1).real + self.gamma
        if self.inj:
            lam, tt, w = self.lam, t[:, None], self.w[:, None]
            ep, en, rot = e_pair(lam, w, tt)
            f = f + np.sum(ep * self.rho_p + en * self.rho_m, axis=1).real
            df = df + np.sum((lam * ep + rot) * self.rho_p + (lam * en + np.conj(rot)) * self.rho_m, axis=1).real
            arg = self.w * (self.t0 + t)
            f = f + self.sine * np.sin(arg)
            df = df + self.sine * self.w * np.cos(arg)
        return f, df

    def value_slope_one(self, t: float) -> tuple[float, float]:
        """:meth:`value_slope` of a single lane at the time ``t`` (s), as floats."""
        if self.inj:
            f, df = self.value_slope(np.array([t]))
            return float(f[0]), float(df[0])
        em = np.expm1(self.lam[0] * t)
        return (float(self.f0[0] + (em @ self.alpha[0]).real + self.gamma[0] * t),
                float(((em + 1.0) @ self.lam_alpha[0]).real + self.gamma[0]))

    def curvature(self, t_hi):
        """A bound on ``|f''|`` over ``[0, t_hi]``: ``sum_j |alpha_j| |lam_j|^2 max(1, e^{Re(lam_j) t_hi})``
        (each term's modulus); infinite (no bound used) for a lane with an injected sine."""
        k = np.sum(np.abs(self.alpha) * np.abs(self.lam) ** 2 * np.exp(np.maximum(self.lam.real, 0.0) * t_hi[:, None]),
                   axis=1)
        if self.inj:
            k = np.where(self.amp != 0, np.inf, k)
        return k


class LaneEvent:
    """:class:`EventFunction` of a single lane without an injected sine, on 1-D arrays and floats."""

    __slots__ = ("alpha", "f0", "gamma", "lam", "lam_alpha", "size")

    def __init__(self, p, kind, q0, t_in_cycle):
        row = p["r_g"][0] if kind == "g" else p["r_il"][0]
        self.lam = p["lam"][0]
        self.alpha = row * (q0 + p["shift"][0])
        self.lam_alpha = self.lam * self.alpha
        f0 = float((row @ q0).real)
        if kind == "g":
            self.f0 = f0 + float(p["const_g"][0]) - float(p["slope"][0]) * t_in_cycle
            self.gamma = float(p["gamma_g"][0])
        else:
            self.f0, self.gamma = f0, float(p["gamma_il"][0])
        # |f''| <= sum_j |alpha_j| |lam_j|^2 on [0, t] when no mode grows (else :meth:`EventFunction.curvature`)
        self.size = None if p["grows"][0] else float(np.abs(self.alpha) @ p["lam2"][0])

    def value(self, t):
        """``f`` at the times ``t`` (m,), as a list."""
        return ((np.expm1(np.multiply.outer(t, self.lam)) @ self.alpha).real + (self.f0 + self.gamma * t)).tolist()

    def value_slope_one(self, t: float) -> tuple[float, float]:
        em = np.expm1(self.lam * t)
        return (self.f0 + float((em @ self.alpha).real) + self.gamma * t,
                float(((em + 1.0) @ self.lam_alpha).real) + self.gamma)

    def curvature_one(self, t_hi: float) -> float:
        if self.size is not None:
            return self.size
        grow = np.exp(np.maximum(self.lam.real, 0.0) * t_hi)
        return float(np.abs(self.alpha) @ (np.abs(self.lam) ** 2 * grow))


def newton_one(ev: EventFunction | LaneEvent, lo: float, hi: float, t: float, curv: float, tol: float,
               steps: int) -> float:
    """:meth:`loopkit.switching.engine.Engine._newton`'s iteration for a single lane, step for step, in Python floats (a lane alone
    pays numpy's per-call cost on every scalar; this is the single-corner run's inner loop)."""
    for _ in range(steps):
        f, df = ev.value_slope_one(t)
        if f == 0:
            break
        if f > 0:
            lo = t
        else:
            hi = t
        step = f / df if df != 0 else math.inf
        new = t - step
        bad = not math.isfinite(new) or ((new <= lo or new >= hi) and not abs(step) < tol)
        if bad:
            new = 0.5 * (lo + hi)
        m = abs(df) - curv * (hi - lo)
        sure = not bad and m > 0 and curv * step * step < 2.0 * SURE * tol * m
        done = abs(new - t) < tol or hi - lo < tol or sure
        t = new
        if done:
            break
    return t
