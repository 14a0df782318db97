"""Peak current-mode control with an external slope-compensation ramp.

The switch turns on at the start of every period and off when the sensed
current, times the current-sense gain ``Ri`` (ohm: sense resistance times
amplifier gain, or a transresistance), plus an external ramp ``Se t`` (V/s,
``t`` from the start of the on-time) reaches the control voltage ``vc``::

    Ri i(t) + Se t = vc      ->  switch off

The flyback's current is sensed on the primary: ``Ri`` applies to the primary
(magnetising) current.  Slopes at the comparator, V/s: ``Sn = Ri sn`` (on-time
slope of the sensed current), ``Sf = Ri sf`` (off-time slope), ``Se``.

CCM: Ridley's continuous-time model
-----------------------------------
R. B. Ridley, "A new, continuous-time model for current-mode control", IEEE
Trans. Power Electronics 6(2), 271-280, 1991 (from memory)::

    d = Fm (vc - Ri He(s) iL + kf vg + kr v)
    Fm = 1 / ((Sn + Se) Ts)
    He(s) = 1 + s/(wn Qz) + s^2/wn^2,   wn = pi/Ts,   Qz = -2/pi

With the stage's ``v = Gvd d`` and ``iL = Gid d`` (vg = 0) the inner current
loop closes to::

    vo/vc = Fm Gvd / (1 + Fm (Ri He Gid - kr Gvd))

built with :meth:`Rational.feedback <loopkit.rational.Rational.feedback>`, so
every parasitic of Gvd and Gid (DCR, switch resistances, diode drop, each
capacitor bank's ESR, the pulsed-ESR term) is in it.  ``He`` is Ridley's
quadratic, which is the exact sampling gain ``s Ts / (exp(s Ts) - 1)`` matched
at ``wn``; ``sampling="pade"`` uses instead the (4, 4) Pade approximant of the
exponential in that exact gain, ``(1 - x/2 + 3x^2/28 - x^3/84 + x^4/1680) /
(1 + x^2/42)`` with ``x = s Ts``, within 0.001 dB / 0.03 deg of it up to fsw/2.

The feedforward and feedback gains kf, kr come from the average of the
inductor current under a programmed peak (Erickson & Maksimovic, Fundamentals
of Power Electronics, 2nd ed., ch. 12, the more accurate model):
``<iL> = ipk - (sn d^2 + sf d'^2) Ts/2``; linearised, the slope changes
``sn^, sf^`` caused by vg and v give ``-(Ts/2)(D^2 sn^ + D'^2 sf^)``, and
Ridley's modulator gain ``1/((Sn + Se) Ts)`` (rather than ``1/(Se Ts)``)
carries the extra ``Sn Ts d^``, which at dc is fixed by the volt-second
balance ``D sn = D' sf``: ``d^ = (D' sf^ - D sn^)/(sn + sf)``.  Hence, with
``sn_x = d sn / d x``::

    kf = Ri Ts [sn (D' sf_vg - D sn_vg)/(sn + sf) - (D^2 sn_vg + D'^2 sf_vg)/2]
    kr = Ri Ts [sn (D' sf_v  - D sn_v )/(sn + sf) - (D^2 sn_v  + D'^2 sf_v )/2]

which for the ideal buck is Ridley's ``kf = -(D Ts Ri/L)(1 - D/2)``,
``kr = Ts Ri/(2L)`` (from memory), and which makes the dc gain of vo/vc equal
to the steady state under the comparator law (for the ideal buck Ridley's
``(R/Ri) / (1 + R Ts (mc D' - 1/2)/L)``).  For the other topologies the gains
are derived here by the same rule from their slopes (they are not taken from
Ridley's table); tests/test_peak_current.py checks the dc gain, the line-to-
output and the output impedance at dc against that steady state for every
topology.  The sampled inner loop gives the
double pole at fsw/2 with ``Qp = 1/(pi (mc D' - 1/2))``, ``mc = 1 + Se/Sn``.

DCM: the current-programmed DCM model
-------------------------------------
Erickson & Maksimovic, 2nd ed., ch. 12, current-programmed converters in DCM
(from memory): the current starts from zero every period, so the programmed
peak sets the energy or charge each period directly and the inductor is no
state.  From the comparator, ``Ri ipk + Se D Ts = vc`` with ``ipk = sn D Ts``
gives ``ipk = vc / (Ri mc)``; then ``d = ipk/(sn Ts)`` linearises to::

    d^ = (D/mc) (vc^/(Ri Ipk) - sn^/sn)

and into the stage's reduced-order averaged switch model (``i2 = j2 d + g2 vg
- v/r2``, see :mod:`loopkit.stages.base`, conduction losses included)::

    vo/vc = k1 Zout / (1 + k2 Zout),  k1 = sign j2 D/(mc Ri Ipk),  k2 = sign j2 D sn_v/(mc sn)

``Zout = 1/(Y_o + 1/r2)`` is the stage's DCM output impedance of that reduced-order
model (``StageResult.zout_static``; voltage mode uses the full-order model).  Only the buck
(and the four-switch stage in buck mode) has ``sn_v != 0``: without ramp its
switch network's output conductance is negative above M = 1/2, and above
M = 2/3 it outweighs the load's 1/R, so the model has a right-half-plane pole
there (a ramp removes it), as the steady state under the comparator law says.
Ideal buck-boost without ramp: the output port is a power source, pole
``2/(R C)``, dc gain ``V/(Ri Ipk)``.  No high-frequency pole is added (the voltage-mode DCM model's
2 fsw/D2 pole is the inductor current's lag behind d, which current programming
removes); the sampling effects near fsw/2 are not modelled in DCM.  Boost-type
stages (the output fed only while the inductor empties) get the delay
``(D + D2) Ts / 2`` (as its (2, 2) Pade approximant, so closed loops stay
rational) with which the programmed peak's charge reaches the output
(a charge-packet analysis of the DCM period; tests/test_pcm_ngspice.py derives
it and checks it against ngspice).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from ..errors import DesignError, Finding
from ..powerstage import StageResult, corner_label
from ..rational import TWO_PI, Rational
from ..units import format_value

__all__ = [
    "MC_MAX",
    "NAME",
    "SAMPLING",
    "SLOPE_RULES",
    "TITLE",
    "auto_slope",
    "control_to_output",
    "figures",
    "findings",
    "line_to_output",
    "output_impedance",
    "sampling_gain",
    "slope_of",
    "uncompensated",
]

NAME = "peak-current"
TITLE = "peak current mode"

#: Sampling-gain forms accepted by :func:`control_to_output`.
SAMPLING = ("quadratic", "pade")

#: Rules accepted by :func:`auto_slope`.
SLOPE_RULES = ("qp1", "half-down-slope", "down-slope")

#: Above this mc the loop behaves increasingly like voltage mode (the LC double
#: pole comes back): common practice, no source.
MC_MAX = 5.0

_QP_TARGET = 1.0


# ---------------------------------------------------------------------------- inputs
def _checked(stage: StageResult, sense_gain_ohm, slope_v_per_s) -> tuple[float, np.ndarray]:
    """(Ri, Se per corner) or DesignError naming the argument."""
    try:
        ri = float(sense_gain_ohm)
    except (TypeError, ValueError):
        raise DesignError("sense_gain_ohm", sense_gain_ohm, "must be a number > 0 (ohm)") from None
    if not (np.isfinite(ri) and ri > 0):
        raise DesignError("sense_gain_ohm", format_value(ri, "Ω"), "must be a finite number > 0 (ohm)")
    try:
        se = np.asarray(slope_v_per_s, dtype=float)
    except (TypeError, ValueError):
        raise DesignError("slope_v_per_s", slope_v_per_s, "must be a number >= 0 (V/s)") from None
    if se.ndim > 1 or (se.ndim == 1 and se.shape[0] not in (1, stage.n_corners)):
        raise DesignError(
            "slope_v_per_s",
            f"{se.shape[0] if se.ndim else ''} values",
            f"must be one value or one per corner ({stage.n_corners})",
        )
    if not np.all(np.isfinite(se) & (se >= 0)):
        bad = se.ravel()[~(np.isfinite(se.ravel()) & (se.ravel() >= 0))][0]
        raise DesignError("slope_v_per_s", format_value(float(bad), "V/s"), "must be a finite number >= 0 (V/s)")
    return ri, np.broadcast_to(se, (stage.n_corners,)).astype(float)


def sampling_gain(ts_s: float, n: int = 1, sampling: str = "quadratic") -> Rational:
    """The sampling gain He(s) of the current loop, one copy per corner.

    Parameters
    ----------
    ts_s : float
        Switching period, s.
    n : int
        Number of corners.
    sampling : {"quadratic", "pade"}
        ``"quadratic"``: Ridley's ``1 + s/(wn Qz) + s^2/wn^2``, ``wn = pi/Ts``,
        ``Qz = -2/pi`` (R. B. Ridley, IEEE TPEL 6(2), 1991, from memory);
        ``"pade"``: the (4, 4) Pade approximant of the exponential in the exact
        ``s Ts / (exp(s Ts) - 1)``.

    Returns
    -------
    Rational
    """
    if sampling not in SAMPLING:
        raise DesignError("sampling", sampling, f"must be one of {', '.join(SAMPLING)}")
    return _sampling_gain_one(float(ts_s), sampling).take(np.zeros(int(n), dtype=int))  # fresh arrays


@lru_cache(maxsize=32)
def _sampling_gain_one(t: float, sampling: str) -> Rational:
    if sampling == "quadratic":
        wn, qz = np.pi / t, -2.0 / np.pi
        return Rational.from_polys([[1.0, 1.0 / (wn * qz), 1.0 / wn**2]], [[1.0]])
    num = [1.0, -t / 2.0, 3.0 * t**2 / 28.0, -(t**3) / 84.0, t**4 / 1680.0]
    return Rational.from_polys([num], [[1.0, 0.0, t**2 / 42.0]])


# ---------------------------------------------------------------------------- gains
def _ccm_gains(stage: StageResult, ri: float, se: np.ndarray) -> dict[str, np.ndarray]:
    """Fm, kf, kr, mc (and the comparator slopes) at every corner; CCM formulas."""
    d = stage.duty
    dp = 1.0 - d
    sn, sf = stage.sn_a_per_s, stage.sf_a_per_s
    sens = stage.slope_sensitivity_per_h
    ts = stage.ts_s
    share = sn / (sn + sf)

    def gain(k):  # k = 0: vg, 1: v
        sn_x, sf_x = sens[:, 0, k], sens[:, 1, k]
        return ri * ts * (share * (dp * sf_x - d * sn_x) - 0.5 * (d**2 * sn_x + dp**2 * sf_x))

    big_sn = ri * sn
    return {
        "fm": 1.0 / ((big_sn + se) * ts),
        "kf": gain(0),
        "kr": gain(1),
        "mc": 1.0 + se / big_sn,
        "sn": big_sn,
        "sf": ri * sf,
    }


def control_to_output(
    stage: StageResult, sense_gain_ohm: float, slope_v_per_s, *, sampling: str = "quadratic"
) -> Rational:
    """Control-to-output vo/vc of peak current-mode control at every corner.

    Parameters
    ----------
    stage : StageResult
        The power stage (:func:`loopkit.powerstage.analyse_stage`).
    sense_gain_ohm : float
        Current-sense gain Ri, V at the comparator per A of sensed current
        (flyback: primary current).
    slope_v_per_s : float or array (corners,)
        External ramp Se at the comparator, V/s (0: no slope compensation).
    sampling : {"quadratic", "pade"}
        Form of the sampling gain He(s), see :func:`sampling_gain`.

    Returns
    -------
    Rational
        vo/vc, V per V, one row per corner (negative dc gain for the inverting
        stage).

    Notes
    -----
    CCM corners: Ridley's model; DCM corners: the current-programmed DCM model
    (never the CCM one); see the module notes for both and their sources.
    """
    return _closed_current_loop(stage, sense_gain_ohm, slope_v_per_s, sampling, "control")


def _dcm_control_to_output(stage: StageResult, ri: float, se: np.ndarray, idx: np.ndarray) -> Rational:
    zout, gvd = stage.zout_static.take(idx), stage.gvd.take(idx)
    sign_j2 = gvd.dc_gain() / zout.dc_gain()  # at dc the DCM Gvd is sign j2 times Zout
    d, ipk, sn = stage.duty[idx], stage.i_peak[idx], stage.sn_a_per_s[idx]
    sn_v = stage.slope_sensitivity_per_h[idx, 0, 1]
    mc = 1.0 + se[idx] / (ri * sn)
    k1 = sign_j2 * d / (mc * ri * ipk)
    k2 = sign_j2 * d * sn_v / (mc * sn)
    out = zout.feedback(Rational.constant(k2)) * k1
    # Where the output is fed only while the inductor empties (boost-type stages: the on-time slope does not
    # depend on the output), the programmed peak reaches the output as a triangle of charge after the
    # turn-off: at low frequency a delay of (D + D2) Ts / 2 (charge-packet analysis of the DCM period, derived
    # in tests/test_pcm_ngspice.py and checked there against ngspice).  Buck-type stages feed the output
    # through the whole triangle; no delay is added for them.
    d2 = stage.i_peak[idx] * stage.fsw_hz / stage.sf_a_per_s[idx]  # the fall lasts D2 Ts
    delay = np.where(sn_v == 0, 0.5 * (d + d2) * stage.ts_s, 0.0)
    return out * _delay_pade(delay)


def _delay_pade(delay_s: np.ndarray) -> Rational:
    """exp(-s tau) per corner as its (2, 2) Pade approximant (1 - x/2 + x^2/12) / (1 + x/2 + x^2/12), x = s tau.

    Rational, so the closed loops built from it stay rational (``Rational.feedback``).  Its roots are
    s = (+-3 +- j sqrt 3) / tau; its phase error is below 0.7 deg for omega tau <= pi/2, i.e. up to
    fsw/2 for tau <= Ts/2 (the charge-packet delay (D + D2) Ts / 2 <= Ts/2).  tau = 0 gives 1.
    """
    tau = np.asarray(delay_s, float)
    safe = np.where(tau > 0, tau, 1.0)
    root = (3.0 + 1j * np.sqrt(3.0)) / safe / TWO_PI  # Hz, as Rational.from_roots_hz takes them
    pad = np.full(tau.shape, np.inf + 0j)
    zeros = np.where(tau > 0, root, pad), np.where(tau > 0, np.conj(root), pad)
    poles = np.where(tau > 0, -np.conj(root), pad), np.where(tau > 0, -root, pad)
    return Rational.from_roots_hz(np.ones(tau.shape), np.stack(zeros, axis=1), np.stack(poles, axis=1))


def _closed_current_loop(stage, sense_gain_ohm, slope_v_per_s, sampling, which):
    """vo/vc (``which`` "control"), vo/vg ("line") or the output impedance ("output"), current loop closed."""
    ri, se = _checked(stage, sense_gain_ohm, slope_v_per_s)
    if sampling not in SAMPLING:
        raise DesignError("sampling", sampling, f"must be one of {', '.join(SAMPLING)}")
    parts, order = [], []
    ccm = np.nonzero(~stage.dcm)[0]
    dcm = np.nonzero(stage.dcm)[0]
    if ccm.size:
        g = {k: v[ccm] for k, v in _ccm_gains(stage, ri, se).items()}
        gvd, gid = stage.gvd.take(ccm), stage.gid.take(ccm)
        he = sampling_gain(stage.ts_s, ccm.size, sampling)
        d_per_vc = Rational.constant(g["fm"]).feedback(gid * he * ri - gvd * g["kr"])
        if which == "control":
            parts.append((gvd * d_per_vc).cancel())
        elif which == "line":
            gvg = stage.gvg.take(ccm)
            drive = gvg * g["kr"] - stage.gig.take(ccm) * he * ri + g["kf"]
            parts.append(gvg + (gvd * d_per_vc * drive).cancel())
        else:
            zout = stage.zout.take(ccm)
            drive = zout * g["kr"] - stage.gii.take(ccm) * he * ri
            parts.append(zout + (gvd * d_per_vc * drive).cancel())
        order.append(ccm)
    if dcm.size and which == "control":
        parts.append(_dcm_control_to_output(stage, ri, se, dcm))
        order.append(dcm)
    elif dcm.size:
        zout, gvd, gvg = stage.zout_static.take(dcm), stage.gvd.take(dcm), stage.gvg.take(dcm)
        sign_j2 = gvd.dc_gain() / zout.dc_gain()
        sign_g2 = gvg.dc_gain() / zout.dc_gain()
        d, sn = stage.duty[dcm], stage.sn_a_per_s[dcm]
        mc = 1.0 + se[dcm] / (ri * sn)
        sens = stage.slope_sensitivity_per_h[dcm]
        z_cpm = zout.feedback(Rational.constant(sign_j2 * d * sens[:, 0, 1] / (mc * sn)))
        if which == "line":
            parts.append(z_cpm * (sign_g2 - sign_j2 * d * sens[:, 0, 0] / (mc * sn)))
        else:
            parts.append(z_cpm)
        order.append(dcm)
    return Rational.stack(parts, np.concatenate(order))


def line_to_output(
    stage: StageResult, sense_gain_ohm: float, slope_v_per_s, *, sampling: str = "quadratic"
) -> Rational:
    """Line-to-output vo/vg with the current loop closed and vc held, V/V, per corner.

    Notes
    -----
    CCM ([R91] model, see the module notes): with ``d = Fm (vc - Ri He iL + kf vg
    + kr v)``, ``v = Gvd d + Gvg vg``, ``iL = Gid d + Gig vg``::

        vo/vg = Gvg + Gvd Fm/(1 + Fm (Ri He Gid - kr Gvd)) (kf + kr Gvg - Ri He Gig)

    DCM: ``(sign g2 - sign j2 D sn_vg/(mc sn)) Zout/(1 + k2 Zout)`` from the DCM
    current-programmed model (k2 as in :func:`control_to_output`).  This is the
    plant the voltage loop sees from the input: the closed voltage loop divides
    it by 1 + T.
    """
    return _closed_current_loop(stage, sense_gain_ohm, slope_v_per_s, sampling, "line")


def output_impedance(
    stage: StageResult, sense_gain_ohm: float, slope_v_per_s, *, sampling: str = "quadratic"
) -> Rational:
    """Output impedance with the current loop closed and vc held, ohm, per corner (load included).

    Notes
    -----
    CCM: ``Zout + Gvd Fm/(1 + Fm (Ri He Gid - kr Gvd)) (kr Zout - Ri He Gii)``,
    ``Gii`` the inductor current per current injected into the output node.
    DCM: ``Zout/(1 + k2 Zout)``.
    """
    return _closed_current_loop(stage, sense_gain_ohm, slope_v_per_s, sampling, "output")


# ---------------------------------------------------------------------------- figures
def figures(stage: StageResult, sense_gain_ohm: float, slope_v_per_s) -> dict[str, np.ndarray]:
    """Current-mode figures per corner (arrays shaped (corners,)).

    Returns
    -------
    dict
        ``mc`` = 1 + Se/Sn; ``qp`` = 1/(pi (mc D' - 0.5)) (Ridley 1991; NaN in
        DCM, negative or inf where the sampled current loop is unstable);
        ``fm`` = 1/((Sn + Se) Ts), 1/V (NaN in DCM); ``ratio``: the cycle-to-cycle factor of a
        peak-current perturbation, -(Sf - Se)/(Sn + Se) (0 in DCM, where the
        current starts from zero every period); ``i_peak_a``: peak inductor
        current (flyback: primary); ``kf``, ``kr``: Ridley's feedforward and
        feedback gains (NaN in DCM); ``sn_v_per_s``, ``sf_v_per_s``: the
        comparator slopes Ri sn and Ri sf; ``se_v_per_s``; ``duty``.
    """
    ri, se = _checked(stage, sense_gain_ohm, slope_v_per_s)
    g = _ccm_gains(stage, ri, se)
    dcm = stage.dcm
    with np.errstate(divide="ignore"):
        qp = 1.0 / (np.pi * (g["mc"] * (1.0 - stage.duty) - 0.5))
    ratio = -(g["sf"] - se) / (g["sn"] + se)
    nan = np.full(stage.n_corners, np.nan)
    return {
        "mc": g["mc"],
        "qp": np.where(dcm, np.nan, qp),
        "fm": np.where(dcm, nan, g["fm"]),
        "ratio": np.where(dcm, 0.0, ratio),
        "i_peak_a": stage.i_peak.copy(),
        "kf": np.where(dcm, nan, g["kf"]),
        "kr": np.where(dcm, nan, g["kr"]),
        "sn_v_per_s": g["sn"],
        "sf_v_per_s": g["sf"],
        "se_v_per_s": se.copy(),
        "duty": stage.duty.copy(),
    }


def _slope_for_qp(sn_v_per_s: np.ndarray, duty: np.ndarray, qp: float) -> np.ndarray:
    """Se giving ``Qp = qp``: ``mc D' = 0.5 + 1/(pi qp)`` -> ``Se = Sn (mc - 1)``; may be < 0."""
    mc = (0.5 + 1.0 / (np.pi * qp)) / (1.0 - duty)
    return sn_v_per_s * (mc - 1.0)


def auto_slope(stage: StageResult, sense_gain_ohm: float, rule: str = "qp1") -> float:
    """External ramp slope Se (V/s at the comparator) chosen by a rule over every CCM corner.

    Parameters
    ----------
    stage : StageResult
    sense_gain_ohm : float
    rule : {"qp1", "half-down-slope", "down-slope"}
        ``"qp1"``: the smallest Se giving ``Qp <= 1`` at every CCM corner, i.e.
        ``Qp = 1`` at the worst one: ``mc D' = 0.5 + 1/pi`` (R. B. Ridley, IEEE
        TPEL 6(2), 1991, recommends Qp near 1; from memory).
        ``"half-down-slope"``: Se = Sf/2 at the corner with the steepest
        down-slope (the usual minimum for D > 0.5; common practice, no source).
        ``"down-slope"``: Se = Sf there, which makes the cycle-to-cycle ratio
        -(Sf - Se)/(Sn + Se) zero (Qp = 2/pi at every D for the ideal stage;
        Ridley 1991, from memory).

    Returns
    -------
    float
        Se in V/s, >= 0 (0 when no CCM corner needs any by the rule, or when
        every corner is in DCM).
    """
    if rule not in SLOPE_RULES:
        raise DesignError("rule", rule, f"must be one of {', '.join(SLOPE_RULES)}")
    ri, _ = _checked(stage, sense_gain_ohm, 0.0)
    ccm = ~stage.dcm
    if not np.any(ccm):
        return 0.0
    sn, sf = ri * stage.sn_a_per_s[ccm], ri * stage.sf_a_per_s[ccm]
    if rule == "qp1":
        need = _slope_for_qp(sn, stage.duty[ccm], _QP_TARGET)
    elif rule == "half-down-slope":
        need = 0.5 * sf
    else:
        need = sf
    return float(max(np.max(need), 0.0))


# ---------------------------------------------------------------------------- findings
def findings(
    stage: StageResult,
    sense_gain_ohm: float,
    slope_v_per_s,
    *,
    peak_limit_a: float | None = None,
    mc_max: float = MC_MAX,
) -> tuple[Finding, ...]:
    """What to warn about, per corner, under peak current-mode control.

    Codes: ``subharmonic`` (the sampled current loop is unstable: |ratio| >= 1,
    Qp <= 0 or unbounded; the message gives the slope that fixes it),
    ``slope-excess`` (mc above ``mc_max``: the loop drifts toward voltage-mode
    behaviour; the threshold is common practice, no source), ``peak-current``
    (the peak current above ``peak_limit_a``), ``pcm-transition-band`` (a
    four-switch corner in the transition band: modelled in the pure mode, so the
    current-mode model there is approximate) and ``pcm-dcm`` (a note: the
    corner uses the current-programmed DCM model).
    """
    fig = figures(stage, sense_gain_ohm, slope_v_per_s)
    if peak_limit_a is not None and not (np.isfinite(peak_limit_a) and peak_limit_a > 0):
        raise DesignError("peak_limit_a", peak_limit_a, "must be a finite number > 0 (A), or left out")
    if not (np.isfinite(mc_max) and mc_max > 1):
        raise DesignError("mc_max", mc_max, "must be a finite number > 1")
    out: list[Finding] = []
    for k in range(stage.n_corners):
        where = corner_label(stage.vin[k], stage.load[k])
        if stage.dcm[k]:
            out.append(
                Finding(
                    "pcm-dcm",
                    f"{where} runs in DCM: current mode modelled with the DCM current-programmed model",
                    k,
                    "note",
                )
            )
        else:
            qp, mc, d, ratio = fig["qp"][k], fig["mc"][k], fig["duty"][k], fig["ratio"][k]
            if abs(ratio) >= 1.0 or not (qp > 0) or not np.isfinite(qp):
                se_min = max(0.5 * (fig["sf_v_per_s"][k] - fig["sn_v_per_s"][k]), 0.0)
                se_fix = max(float(_slope_for_qp(fig["sn_v_per_s"][k], d, _QP_TARGET)), 0.0)
                out.append(
                    Finding(
                        "subharmonic",
                        f"{where}: subharmonic instability in peak current mode (D = {d:.1%}, mc = {mc:.3g},"
                        f" Qp = {qp:.3g}): a current perturbation grows {abs(ratio):.2f}x per cycle. The ramp must"
                        f" exceed {format_value(se_min, 'V/s')}; {format_value(se_fix, 'V/s')} gives Qp = 1",
                        k,
                    )
                )
            if mc > mc_max:
                out.append(
                    Finding(
                        "slope-excess",
                        f"{where}: mc = {mc:.3g} (ramp {mc - 1:.3g}x the sensed up-slope): the loop drifts toward"
                        f" voltage-mode behaviour (the LC double pole returns); a rule of thumb keeps mc below"
                        f" {mc_max:.3g}",
                        k,
                    )
                )
        if peak_limit_a is not None and fig["i_peak_a"][k] > peak_limit_a:
            out.append(
                Finding(
                    "peak-current",
                    f"{where}: peak current {format_value(fig['i_peak_a'][k], 'A')} is above the limit"
                    f" {format_value(peak_limit_a, 'A')}",
                    k,
                )
            )
        if stage.submode[k] == "transition":
            out.append(
                Finding(
                    "pcm-transition-band",
                    f"{where} is in the four-switch transition band: the current-mode model of the pure mode used"
                    " there is approximate",
                    k,
                )
            )
    return tuple(out)


# ---------------------------------------------------------------------------- the scheme plug-in
def slope_of(design, stage: StageResult) -> float:
    """The external ramp Se (V/s at the comparator) a design asks for.

    ``control.slope`` as given; ``control.slope_amplitude`` (V per switching period) times fsw;
    ``control.slope_ratio`` times the steepest down-slope ``Ri sf`` over the CCM corners (one
    physical ramp serves every corner); with none of them, :func:`auto_slope` (Qp = 1 at the
    worst CCM corner).
    """
    c = design.control
    ri = c.sense_gain
    if c.slope is not None:
        return float(c.slope)
    if c.slope_amplitude is not None:
        return float(c.slope_amplitude) * design.stage.fsw
    if c.slope_ratio is not None:
        ccm = ~stage.dcm
        sf = float(np.max(stage.sf_a_per_s[ccm])) if np.any(ccm) else 0.0
        return float(c.slope_ratio) * ri * sf
    return auto_slope(stage, ri)


def uncompensated(design, stage: StageResult, loop_only: bool = False):
    """The loop from the error amplifier's output to its input without the network: H x vo/vc.

    The error amplifier's output is the comparator's control voltage ``vc`` (the current-sense
    gain and the ramp are referred to it), so ``Tu = H vo/vc`` with ``H`` the sensing; the
    line-to-output and output impedance have the current loop closed.  ``loop_only`` (a
    tolerance study's many rows): Tu alone, with the plant's own Gvg and Zout, no figures or
    findings.
    """
    from ..networks.sensing import sensing_transfer
    from .base import SchemeLoop

    ri = design.control.sense_gain
    se = slope_of(design, stage)
    if loop_only:
        return SchemeLoop(tu=sensing_transfer(design) * control_to_output(stage, ri, se), gvg=stage.gvg,
                          zout=stage.zout, figures={}, findings=())
    limit = design.control.current_limit or None
    fig = figures(stage, ri, se)
    fig["se_v_per_s"] = np.full(stage.n_corners, se)
    return SchemeLoop(
        tu=sensing_transfer(design) * control_to_output(stage, ri, se),
        gvg=line_to_output(stage, ri, se), zout=output_impedance(stage, ri, se),
        figures=fig, findings=tuple(findings(stage, ri, se, peak_limit_a=limit)),
    )
