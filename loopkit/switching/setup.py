"""From a design (and its designed loop) to the engine: circuits, controller, modulator law, start state.

The controller is the error-amplifier path ``L(s) = Gc(s) H(s)`` from the output error
``vo - vout`` to the control voltage ``vc``: the network's transfer function as loopkit
computes it (op-amp finite gain and gain-bandwidth included, :mod:`loopkit.networks`)
times the sensing (divider: 1; differential amplifier with its pole), realised as a
state space by :func:`loopkit.timeresponse.realise` (real first- and second-order
sections).  This is a realisation of the network's transfer function, not of its
circuit: it has the same response and the same order, so the loop is the same, but
a network's internal voltages (and an op-amp's output swing) are not modelled.  Repeated
real poles (e.g. Type III's double pole) are split by a relative 1e-4, which changes
the response by about 1e-8 relative, so that every switch state diagonalises.

The large-signal offsets drop out: for every network ``vc = L (vo - vout)`` holds at dc too
(an op-amp network's reference and divider make ``vc = A0 Rb/(R1 + Rb) (vref/Hdiv - vo)``,
which is ``Gc(0) (vo - vout)``; with an integrator the dc level is the integrator's
state).

Control laws: voltage mode compares ``vc`` with the ramp ``Vramp t / Ts`` (valley at 0,
so ``D = vc / Vramp`` as the averaged model's ``Fm = 1/Vramp``; feed-forward scales
Vramp with vin, :func:`loopkit.schemes.voltage_mode.modulator_transfer`); peak current
mode ends the on-time when ``Ri iL + Se t`` reaches ``vc`` (Ri the current-sense gain,
Se the external slope, :func:`loopkit.schemes.peak_current.slope_of`); the open-loop
runs use a fixed duty.  A digital scheme sets the switch edges itself
(:mod:`loopkit.switching.digital`, :meth:`Engine.period_at`); the engine then carries only the
sensing and anti-alias states with the converter's.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from ..errors import DesignError
from ..powerstage import StageResult, analyse_stage
from ..rational import Rational
from .circuit import plant_circuits
from .engine import Controller, Engine, Law

__all__ = ["SCHEMES_SIMULATED", "Setup", "closed_loop_setup", "controller_of", "open_loop_setup", "regulated_output"]

#: Control schemes the simulator runs in closed loop.
SCHEMES_SIMULATED = ("voltage-mode", "peak-current", "digital")
_SPLIT = 1e-4


@dataclass(frozen=True, eq=False)
class Setup:
    """What a switching run needs: the engine and the start state of every corner.

    Attributes
    ----------
    design : Design
    stage : StageResult
        The averaged operating points (start state and comparison).
    engine : Engine
    z0 : ndarray (corners, n)
        Start state: the averaged operating point (valley current, output on every
        capacitor, the controller at the control voltage that gives the averaged duty).
    vc0 : ndarray (corners,)
        That control voltage, V (nan in open loop).
    result : LoopResult or None
        The designed loop (None in open loop).
    vc_per_duty : ndarray (corners,)
        Control voltage per unit duty at the comparator (Vramp, or (Sn + Se) Ts): sizes the
        injected sine.
    """

    design: object
    stage: StageResult
    engine: Engine
    z0: np.ndarray
    vc0: np.ndarray
    result: object
    vc_per_duty: np.ndarray
    #: The digital hardware (:class:`loopkit.switching.digital.SamplingPlant`) when a sampled controller closes
    #: the loop through :meth:`Engine.period_at`; None for the analog schemes.
    digital: object = None

    @property
    def n_corners(self) -> int:
        return self.z0.shape[0]

    @property
    def ts_s(self) -> float:
        return self.engine.ts


def _split_repeated(tf: Rational) -> Rational:
    """Move apart real poles that coincide (relative 1e-9), by +-1e-4 relative."""
    den = tf.den[0].copy()
    for i in range(den.shape[0]):
        for j in range(i + 1, den.shape[0]):
            a, b = den[i], den[j]
            if abs(a[1].imag) > 0 or abs(b[1].imag) > 0 or a[0] == 0 or b[0] == 0:
                continue
            if abs(a[1] - b[1]) <= 1e-9 * abs(a[1]):
                den[i, 1] = a[1] * (1 + _SPLIT)
                den[j, 1] = b[1] * (1 - _SPLIT)
    return Rational.from_factors(tf.gain[:1], tf.num[:1], den[None])


def controller_of(result) -> Controller:
    """The error-amplifier path of a designed loop as a state space (see the module notes)."""
    from ..networks.sensing import sensing_transfer
    from ..timeresponse import realise

    if result.compensator is None:
        raise DesignError("compensator", "no parts", "the targets are infeasible: no loop to simulate")
    path = (result.compensator.take(0) * sensing_transfer(result.design)).cancel()
    ss = realise(_split_repeated(path))
    a, b, c, d = ss.a[0], ss.b[0], ss.c[0], float(ss.d[0])
    # balance states against the input and output too (as a state-space balancing with B and C does), so
    # the states have comparable sizes: the shooting method's finite differences need that
    block = np.block([[a, b[:, None]], [c[None, :], np.array([[d]])]])
    _, (scale, _) = scipy.linalg.matrix_balance(block, permute=False, separate=True)
    sx = scale[:-1] / scale[-1]
    return Controller(a * sx[None, :] / sx[:, None], b / sx, c * sx, d, regulated_output(result))


def regulated_output(result) -> float:
    """The output the built parts regulate to, V: ``vref (R1 + Rb)/Rb`` with a divider's parts (after
    E-series snapping the divider sets the output, not the design's ``vout``), else ``vout``."""
    design, parts = result.design, result.parts
    if design.sensing.kind == "divider" and "R1" in parts and "Rb" in parts:
        return float(design.sensing.reference * (parts["R1"] + parts["Rb"]) / parts["Rb"])
    return float(design.operating.vout)


def _start_plant(engine: Engine, stage: StageResult, vout_v: np.ndarray) -> np.ndarray:
    z = np.zeros((stage.n_corners, engine.n))
    valley = np.where(stage.dcm, 0.0, stage.i_l - stage.ripple_pp / 2.0)
    z[:, 0] = valley
    z[:, 1:engine.m] = vout_v[:, None]
    return z


def open_loop_setup(design, duty=None) -> Setup:
    """The converter driven at a fixed duty (default: the averaged model's duty at each corner)."""
    stage = analyse_stage(design)
    duty = stage.duty if duty is None else np.broadcast_to(np.asarray(duty, float), stage.duty.shape)
    if np.any(~np.isfinite(duty) | (duty < 0) | (duty >= 1)):
        raise DesignError("duty", duty, "must be in 0 .. 1")
    n = stage.n_corners
    ts = 1.0 / design.stage.fsw
    law = Law(np.zeros(n), np.zeros(n), duty * ts, np.ones(n), 1.0)
    engine = Engine(plant_circuits(design, stage.vin, stage.load), None, law, ts)
    z0 = _start_plant(engine, stage, np.full(n, design.operating.vout))
    return Setup(design, stage, engine, z0, np.full(n, np.nan), None, np.ones(n))


def closed_loop_setup(result) -> Setup:
    """The designed loop (a :class:`loopkit.loop.LoopResult`) around the switched converter."""
    design, stage = result.design, result.stage
    scheme = design.control.scheme
    if scheme not in SCHEMES_SIMULATED:
        raise DesignError("control.scheme", scheme, f"the switching simulation runs {', '.join(SCHEMES_SIMULATED)}")
    n = stage.n_corners
    ts = 1.0 / design.stage.fsw
    if scheme == "digital":
        return _digital_setup(result)
    ctrl = controller_of(result)
    if scheme == "voltage-mode":
        from ..schemes.voltage_mode import modulator_transfer

        vramp = 1.0 / modulator_transfer(design, stage.vin).gain
        vramp = np.broadcast_to(vramp, (n,)).astype(float)
        law = Law(np.ones(n), np.zeros(n), np.zeros(n), vramp / ts, design.modulator.max_duty)
        vc0 = stage.duty * vramp
        per_duty = vramp
    else:
        from ..schemes.peak_current import slope_of

        ri = design.control.sense_gain
        se = slope_of(design, stage)
        law = Law(np.ones(n), np.full(n, -ri), np.zeros(n), np.full(n, se), design.modulator.max_duty)
        vc0 = ri * stage.i_peak + se * stage.duty * ts
        per_duty = (ri * stage.sn_a_per_s + se) * ts
    engine = Engine(plant_circuits(design, stage.vin, stage.load), ctrl, law, ts)
    # controller at rest with vc = vc0: [a b; c d] [xc; e] = [0; vc0]
    nc = ctrl.a.shape[0]
    block = np.block([[ctrl.a, ctrl.b[:, None]], [ctrl.c[None, :], np.array([[ctrl.d]])]])
    z0 = np.zeros((n, engine.n))
    errs = np.zeros(n)
    for k in range(n):
        rhs = np.zeros(nc + 1)
        rhs[-1] = vc0[k]
        try:  # exact: the realisation's states can differ by decades in scale (lstsq would drop some)
            sol = np.linalg.solve(block, rhs)
        except np.linalg.LinAlgError:
            sol = np.linalg.lstsq(block, rhs, rcond=None)[0]
        z0[k, engine.m:] = sol[:nc]
        errs[k] = sol[-1]
    z0[:, :engine.m] = _start_plant(engine, stage, ctrl.v_target + errs)[:, :engine.m]
    return Setup(design, stage, engine, z0, vc0, result, per_duty)


def _digital_setup(result) -> Setup:
    """The converter with the sensing and anti-alias states in the engine; the controller runs at the clock edges
    (:class:`loopkit.switching.digital.Sampler`).  The law is unused (the sampler sets the edges)."""
    from .digital import sampling_plant

    design, stage = result.design, result.stage
    n = stage.n_corners
    ts = 1.0 / design.stage.fsw
    dp = sampling_plant(result, ts)
    law = Law(np.zeros(n), np.zeros(n), stage.duty * ts, np.ones(n), design.modulator.max_duty)
    engine = Engine(plant_circuits(design, stage.vin, stage.load), dp.filter, law, ts)
    z0 = _start_plant(engine, stage, np.full(n, design.operating.vout))
    return Setup(design, stage, engine, z0, np.full(n, np.nan), result, np.ones(n), digital=dp)
