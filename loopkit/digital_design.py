"""Digital controllers from crossover and phase-margin targets: designed in z, or analog then discretised.

The three forms (:data:`loopkit.design.DIGITAL_FORMS`) are an integrator with lead:

- ``pi``:    ``C = k (z - z1) / (z - 1)``;
- ``pid``:   ``C = k (z - z1)^2 / ((z - 1)(z - p1))`` (the derivative's filter pole p1);
- ``type3``: ``C = k (z - z1)^2 / ((z - 1)(z - p1)^2)`` (the digital Type III).

Placement by one number K, as in Venable's K factor (H. D. Venable, "The K factor: a new
mathematical tool for stability analysis and synthesis", Powercon 10, 1983; REFERENCES.md
[V83]): one zero at ``fc / K``, or a pair at ``fc / sqrt(K)`` with the poles at ``fc sqrt(K)``.  The phase the controller gives at fc
grows monotonically with K, so K is found by bisection (in ln K) on the exact phase, and the
gain k puts ``|T(fc)| = 1``:

- :func:`direct_design`: in z.  A zero or pole at frequency f lies at ``z = exp(-2 pi f Ts)``
  (the matched mapping of a real root), and K and k are solved on the exact sampled loop
  ``Tu(z) C(z)`` at the design corner, so the sampling and every delay are in the design (direct
  digital design, L. Corradini, D. Maksimovic, P. Mattavelli, R. Zane, Digital Control of
  High-Frequency Switched-Mode Power Converters, 2015, from memory).
- :func:`analog_design`: the same form in s, ``k (1 + s/wz)^nz / (s (1 + s/wp)^np)``, designed on
  the continuous chain with the delay ``exp(-s tau)`` (the loop delay to the modulated edge: the
  sampled model's low-frequency limit, :mod:`loopkit.sampled`; close far below fs/2 only);
  :func:`loopkit.digital_control.tustin` (prewarped at fc) and
  :func:`loopkit.digital_control.matched` turn it into the comparison controllers.

Where no K up to :data:`K_MAX` gives the phase, :class:`~loopkit.errors.InfeasibleDesign` says
how much phase the form can give at fc.  Where K = 1 already gives more than asked, K = 1 is
kept (the margin is then above the target).
"""

from __future__ import annotations

import numpy as np

from .discrete import Discrete
from .errors import InfeasibleDesign
from .rational import TWO_PI, Rational

__all__ = ["K_MAX", "SHAPE", "analog_design", "direct_design", "required_phase_deg"]

#: (zeros, poles other than the integrator) of each form.
SHAPE = {"pi": (1, 0), "pid": (2, 1), "type3": (2, 2)}

#: Largest K tried: a pair of zeros at fc / 100 and poles at 100 fc (at z = 0 in practice), one zero at fc / 1e4.
K_MAX = 1e4

_BISECTIONS = 80


def required_phase_deg(plant_phase_deg: float, pm_deg: float) -> float:
    """The controller phase at fc, deg, in [-270, 90), that gives ``pm_deg`` with a plant of this phase.

    PM = 180 + phase(Tu) + phase(C) (mod 360) for the loop ``1 + Tu C``.
    """
    return float(np.mod(pm_deg - 180.0 - plant_phase_deg + 270.0, 360.0) - 270.0)


def _spread(form: str, k_factor: float) -> float:
    """How far the zeros lie below fc and the poles above: K for one zero, sqrt(K) for a pair ([V83])."""
    return k_factor if SHAPE[form][0] == 1 else np.sqrt(k_factor)


def _z_shape(form: str, k_factor: float, fc_hz: float, ts_s: float) -> Discrete:
    nz, npl = SHAPE[form]
    zero = np.exp(-TWO_PI * fc_hz / _spread(form, k_factor) * ts_s)
    pole = np.exp(-TWO_PI * fc_hz * _spread(form, k_factor) * ts_s)
    return Discrete.from_roots(1.0, [zero] * nz, [1.0] + [pole] * npl, ts_s)


def _s_shape(form: str, k_factor: float, fc_hz: float) -> Rational:
    nz, npl = SHAPE[form]
    wz, wp = TWO_PI * fc_hz / _spread(form, k_factor), TWO_PI * fc_hz * _spread(form, k_factor)
    return Rational.from_factors(1.0, [(1.0, 1.0 / wz)] * nz, [(0.0, 1.0)] + [(1.0, 1.0 / wp)] * npl)


def _solve(shape, plant, form: str, fc_hz: float, pm_deg: float):
    """(controller, K): bisection on K for the phase, then the gain for |T(fc)| = 1."""
    f = np.array([fc_hz])
    need = required_phase_deg(float(plant.phase_deg(f)[0, 0]), pm_deg)

    def phase(k):
        return float(shape(k).phase_deg(f)[0, 0])

    if phase(K_MAX) < need:
        best = 180.0 + float(plant.phase_deg(f)[0, 0]) + phase(K_MAX)
        best = float(np.mod(best + 180.0, 360.0) - 180.0)
        raise InfeasibleDesign("compensator.pm", f"{pm_deg:g} deg",
                               f"a {form} controller reaches at most {best:.1f} deg of phase margin at this"
                               " crossover (the loop delay and the plant's phase take the rest)",
                               ("lower fc" + (", use type3" if form != "type3" else "") + ", or shorten the loop"
                                " delay (update = \"immediate\", less computation time)",))
    if phase(1.0) >= need:
        k_factor = 1.0
    else:
        lo, hi = 0.0, np.log(K_MAX)
        for _ in range(_BISECTIONS):
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if phase(np.exp(mid)) < need else (lo, mid)
        k_factor = float(np.exp(hi))
    unit = shape(k_factor)
    gain = 1.0 / abs(complex(plant.response(f)[0, 0] * unit.response(f)[0, 0]))
    return unit * gain, k_factor


def direct_design(form: str, plant: Discrete, fc_hz: float, pm_deg: float) -> tuple[Discrete, float]:
    """The controller ``C(z)`` of ``form`` that puts the sampled loop ``plant C`` at fc with ``pm_deg``.

    Parameters
    ----------
    form : {"pi", "pid", "type3"}
    plant : Discrete
        ``Tu(z)`` at the design corner (one corner; positive dc gain).
    fc_hz, pm_deg : float
        Crossover, Hz (below fs/2), and phase margin, deg.

    Returns
    -------
    (Discrete, float)
        The controller (one corner) and its K.

    Raises
    ------
    InfeasibleDesign
        No K up to :data:`K_MAX` gives the phase.

    Notes
    -----
    Zeros at ``exp(-2 pi fc/K Ts)``, poles at 1 and ``exp(-2 pi fc K Ts)``; K by bisection on the
    exact phase of ``plant C`` at fc, the gain for ``|T(fc)| = 1`` (module notes).
    """
    return _solve(lambda k: _z_shape(form, k, fc_hz, plant.ts_s), plant, form, fc_hz, pm_deg)


def analog_design(form: str, plant: Rational, fc_hz: float, pm_deg: float) -> tuple[Rational, float]:
    """The analog controller ``C(s)`` of ``form`` for the continuous ``plant`` (its delay included).

    ``plant`` is the continuous chain with the delay ``tau`` (one corner).  Returns the
    controller (one corner, for :func:`~loopkit.digital_control.tustin` or
    :func:`~loopkit.digital_control.matched`) and its K.
    """
    return _solve(lambda k: _s_shape(form, k, fc_hz), plant, form, fc_hz, pm_deg)
