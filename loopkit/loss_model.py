"""Losses of a power stage at every corner from its operating point: the formulas, vectorised.

The operating point (duty, inductor current and ripple, CCM or DCM) comes from
the topology modules (:mod:`loopkit.stages`); from it follow the piecewise-
linear currents of every element and their losses.

Currents
--------
With D the duty, I the average inductor current and dI its peak-to-peak
ripple (CCM), the inductor current rises from ``I - dI/2`` to ``I + dI/2``
during D Ts and falls back during D' Ts; in DCM it rises from 0 to Ipk during
D Ts and falls to 0 during D2 Ts.  Mean squares over a period of the part of
the current an element carries (a trapezoid or a triangle; e.g. Erickson &
Maksimovic, Fundamentals of Power Electronics, 2nd ed., 2001, appendix A, rms
values of commonly observed waveforms):

* during D (switch): ``D (I^2 + dI^2/12)``; DCM ``D Ipk^2 / 3``;
* during D' (rectifier): ``D' (I^2 + dI^2/12)``; DCM ``D2 Ipk^2 / 3``.

Conduction losses are these times each element's resistance, plus a diode's
drop times its mean current.  Capacitor ESR losses: the ripple part of the
current into the output node (the inductor current for a buck, the
rectifier's pulses otherwise) splits between the banks and the load by their
admittances at each harmonic of fsw (the shares from a 256-point FFT of the
waveform, the total from the exact mean square above); the input capacitor
carries the ripple part of the input current (the source gives the mean,
common practice, no source).

Switching (one "leg" per switch pair that commutates; the controlled switch
turns on at the valley current and off at the peak, against the voltage V
the leg commutates):

* voltage/current overlap, clamped inductive load with linear transitions:
  ``W = V I t / 2`` per transition (Erickson & Maksimovic, 2nd ed., section
  4.6.1, from memory), ``P = V (I_valley t_on + I_peak t_off) fsw / 2``; no
  turn-on overlap where the current is zero (DCM) or negative (forced CCM);
* output capacitances charged and discharged each period:
  ``P = (Coss_switch + Coss_rectifier) V^2 fsw / 2`` (section 4.6.3, from memory;
  an energy-equivalent capacitance, because Coss depends on voltage); none
  where a synchronous stage's valley current is negative (forced CCM at light
  load): the reverse current swings the switch node before the switch turns
  on, so the energy is returned (soft switching; assumed to complete within
  the dead time, common practice, no source);
* diode reverse recovery, where the rectifier still conducts when the switch
  turns on (CCM with a positive valley): ``P = Qrr V fsw`` (section 4.6.2,
  from memory; the extra overlap the recovery current causes is left out);
* dead time of a synchronous rectifier, body diode conducting the current at
  each edge: ``P = Vbd t_dead (|I_peak| + |I_valley|) fsw`` (DCM: the peak edge
  only; common practice, no source);
* gate drive: ``P = Qg Vdrv fsw`` per switching transistor (common practice, no source).

Core loss by Steinmetz's equation, ``P = Ve k f^alpha Bpk^beta`` with
``Bpk = L dI / (2 N Ae)`` (the flux swing's peak of the ripple, DCM: of Ipk),
C. P. Steinmetz, "On the law of hysteresis", Trans. AIEE 9, 1892, in the form
with the frequency exponent used by core makers; strictly for sinusoidal
flux (the triangular flux of a converter is not corrected for here).

Operating point with these losses
---------------------------------
The topology modules solve the duty from the averaged inductor loop (CCM)
or the energy balance of each current pulse (DCM), with the conduction
losses in it.  Of the other losses only those the inductor's loop itself
supplies change the duty:

* the dead time: the body diode's drop replaces the rectifier's during the
  two dead times, a drop on the switch node that the duty must make up (CCM
  and DCM);
* in DCM the core loss too: it takes part of the energy each pulse stores.

Overlap, output capacitances, reverse recovery (the charge flows from the
input through the switch into the rectifier), the gate drive and the
controller draw their power from the input without changing the inductor's
volt-second balance at the mid-transition duty: to first order they raise
the input current, not the duty (Erickson & Maksimovic, 2nd ed., section
4.6: the switching loss is supplied by the source during the transitions;
from memory).  Neither does the core loss in CCM (its current averages to
zero over the volt-second balanced period), nor the ripple's own conduction
loss (the ``dI^2/12`` terms, left out of the duty by the stage modules too).

The duty-changing loss Px enters the power balance the stage modules solve:
in CCM the module runs at the input voltage ``Vg - Px / Iin`` (Iin the mean
current the power path draws), which is a drop of ``Px / I`` in the inductor
loop over the whole period and adds exactly Px to the input power at the
same output; in DCM at the load ``Io + Px / |V|``.  A few fixed-point steps
settle it (Px depends on the point).  The inductor's ripple is then taken at
the real input voltage.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from types import SimpleNamespace

import numpy as np

from .stages import boost, four_switch, groups, inverting_buck_boost

__all__ = [
    "FEEDBACK_ITERATIONS",
    "LOSS_FIELDS",
    "CornerPoint",
    "buck_boost_mode",
    "ccm_point",
    "corner_points",
    "loss_terms",
    "losses_operating_inputs",
]

#: Fixed-point steps of the operating point with the duty-changing losses (each step moves
#: the duty by about the losses' share of the power times the previous step's error).
FEEDBACK_ITERATIONS = 6

#: Loss terms in watts, in the order reports show them.
LOSS_FIELDS = (
    "switch_w",
    "held_switch_w",
    "rectifier_w",
    "diode_w",
    "inductor_dcr_w",
    "output_esr_w",
    "input_esr_w",
    "overlap_w",
    "coss_w",
    "recovery_w",
    "dead_time_w",
    "gate_w",
    "core_w",
    "quiescent_w",
)

#: Terms that change the duty (see the module notes): in CCM, and in DCM.
DUTY_FIELDS_CCM = ("dead_time_w",)
DUTY_FIELDS_DCM = ("dead_time_w", "core_w")


@dataclass(frozen=True)
class CornerPoint:
    """Operating point of every corner with what the loss formulas need; arrays (corners,).

    ``kind`` names the circuit that runs the corner: ``buck``, ``boost``, ``inverting``,
    ``flyback``, ``fs-buck``, ``fs-boost``, ``fs-buck-boost`` (four-switch modes).
    """

    vin: np.ndarray
    load: np.ndarray
    duty: np.ndarray
    d2: np.ndarray
    i_l: np.ndarray
    ripple: np.ndarray
    i_peak: np.ndarray
    dcm: np.ndarray
    kind: np.ndarray
    label: np.ndarray


def _bb_ccm(stage, vin, load, vout):
    return inverting_buck_boost.ccm(_bb_stage(stage), vin, load, -abs(float(vout)))


def _bb_dcm(stage, vin, load, vout):
    return inverting_buck_boost.dcm(_bb_stage(stage), vin, load, -abs(float(vout)))


def _bb_stage(stage):
    """Four-switch in buck-boost mode: Q1+Q3 conduct during D, Q2+Q4 during D' (the inverting
    buck-boost's averaged equations with two switches in each path, positive output)."""
    return replace(stage, topology="inverting-buck-boost", r_switch=2 * stage.r_switch,
                   r_rectifier=2 * stage.r_rectifier, diode_drop=2 * stage.diode_drop)


#: Four-switch buck-boost mode (all four switches every period) as a topology module.
buck_boost_mode = SimpleNamespace(ccm=_bb_ccm, dcm=_bb_dcm)


def _kind(topology: str, module) -> str:
    if topology != "four-switch-buck-boost":
        return {"inverting-buck-boost": "inverting"}.get(topology, topology)
    if module is four_switch.buck_mode:
        return "fs-buck"
    if module is boost:
        return "fs-boost"
    return "fs-buck-boost"


def ccm_point(module, stage, vin, vin_op, load, vout):
    """The module's CCM point at the input ``vin_op`` (losses drawn), ripple and ``e`` at the real ``vin``.

    The duty and the currents are those of ``vin_op`` (the loss is a constant drop in the inductor
    loop); what the switch node actually applies is the real input: every topology's ripple is
    ``(vg - drops) D / (L fsw)``, so moving vg back adds ``(vin - vin_op) D / (L fsw)``, and the
    duty's coefficient ``e`` in the inductor loop holds vg with a unit coefficient except in the
    boost (``e = V + VD - ...``), so it gets ``vin - vin_op`` back (the drop does not vary with d).
    """
    cp = module.ccm(stage, vin_op, load, vout)
    if np.array_equal(vin, vin_op):
        return cp
    back = vin - vin_op
    e = cp.e if module is boost else cp.e + back
    return replace(cp, ripple=cp.ripple + back * cp.duty / (stage.inductance * stage.fsw), e=e)


def _points(design, parts, vin, load, vin_op, load_op) -> CornerPoint:
    """Operating points of ``parts`` (groups: indices, stage as run, module, label)."""
    n = vin.shape[0]
    out = {k: np.full(n, np.nan) for k in ("duty", "d2", "i_l", "ripple", "i_peak")}
    dcm = np.zeros(n, bool)
    kind = np.full(n, "", dtype=object)
    label = np.full(n, "", dtype=object)
    vout = design.operating.vout
    for idx, st, module, lab in parts:
        kind[idx], label[idx] = _kind(design.stage.topology, module), lab
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            cp = ccm_point(module, st, vin[idx], vin_op[idx], load[idx], vout)
        in_dcm = (st.light_load_mode == "dcm") & (cp.ripple / 2.0 > cp.i_l)
        c, d = idx[~in_dcm], idx[in_dcm]
        out["duty"][c], out["i_l"][c], out["ripple"][c] = cp.duty[~in_dcm], cp.i_l[~in_dcm], cp.ripple[~in_dcm]
        out["d2"][c] = 1.0 - cp.duty[~in_dcm]
        out["i_peak"][c] = cp.i_l[~in_dcm] + cp.ripple[~in_dcm] / 2.0
        if d.size:
            with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
                dp = module.dcm(st, vin_op[d], load_op[d], vout)
            out["duty"][d], out["d2"][d], out["i_peak"][d] = dp.duty, dp.d2, dp.i_peak
            out["i_l"][d] = dp.i_peak * (dp.duty + dp.d2) / 2.0
            out["ripple"][d] = dp.i_peak
            dcm[d] = True
    return CornerPoint(vin=vin, load=load, duty=out["duty"], d2=out["d2"], i_l=out["i_l"], ripple=out["ripple"],
                       i_peak=out["i_peak"], dcm=dcm, kind=kind.astype(str), label=label.astype(str))


def _waveform_stats(p: CornerPoint):
    """Mean squares and means of the inductor current during D and during D2 (per period)."""
    d, d2, i, dl, ipk = p.duty, p.d2, p.i_l, p.ripple, p.i_peak
    ms_c = i * i + dl * dl / 12.0
    ms_on = np.where(p.dcm, d * ipk**2 / 3.0, d * ms_c)
    ms_off = np.where(p.dcm, d2 * ipk**2 / 3.0, (1.0 - d) * ms_c)
    avg_on = np.where(p.dcm, d * ipk / 2.0, d * i)
    avg_off = np.where(p.dcm, d2 * ipk / 2.0, (1.0 - d) * i)
    i_valley = np.where(p.dcm, 0.0, i - dl / 2.0)
    return ms_on, ms_off, avg_on, avg_off, i_valley


def _input_draws_on_only(kind: np.ndarray) -> np.ndarray:
    """True where the input current flows only while the controlled switch is on."""
    return ~np.isin(kind, ("boost", "fs-boost"))


def _output_pulsed(kind: np.ndarray) -> np.ndarray:
    """True where the output node gets the current only during D' (not a buck's inductor)."""
    return ~np.isin(kind, ("buck", "fs-buck"))


def _node_waveform(p: CornerPoint, pulsed: np.ndarray, n_samples: int) -> np.ndarray:
    """The output node's current over one period (corners, samples): the inductor current, or
    (``pulsed``) only its falling part, while the rectifier conducts."""
    t = (np.arange(n_samples) + 0.5) / n_samples
    d, d2 = p.duty[:, None], p.d2[:, None]
    lo = np.where(p.dcm, 0.0, p.i_l - p.ripple / 2.0)[:, None]
    hi = p.i_peak[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        wave = np.where(t < d, np.where(pulsed[:, None], 0.0, lo + (hi - lo) * t / d),
                        np.where(t < d + d2, hi - (hi - lo) * (t - d) / d2, 0.0))
    return np.where(np.isfinite(wave), wave, 0.0)


#: Samples per period of the output node's current for the ESR split (harmonics up to 128 fsw).
ESR_SAMPLES = 256


def _esr_share(design, p: CornerPoint, pulsed: np.ndarray, n_samples: int = ESR_SAMPLES) -> np.ndarray:
    """Each bank's share (corners, banks) of the ripple's mean square as ESR loss per ohm of ESR.

    Returns ``esr_k * (mean square of bank k's current)`` divided by the total ac mean square of
    the node current, from the harmonic currents split by admittance (bank: ESR + 1/(jwC);
    load: R).
    """
    st = design.stage
    n = p.duty.shape[0]
    banks = [(b.esr_total, b.c_total) for b in st.output_caps]
    out = np.zeros((n, len(banks)))
    if all(esr == 0 for esr, _ in banks):
        return out
    f = st.fsw * np.arange(1, n_samples // 2 + 1)
    w = 2 * np.pi * f
    ys = np.stack([1.0 / (esr + 1.0 / (1j * w * c)) for esr, c in banks])  # (banks, harmonics)
    r_load = abs(design.operating.vout) / p.load
    y_tot = ys.sum(axis=0)[None, :] + 1.0 / r_load[:, None]  # (corners, harmonics)
    spec = np.fft.rfft(_node_waveform(p, pulsed, n_samples), axis=1)[:, 1:] / n_samples
    power = 2.0 * np.abs(spec) ** 2  # mean square of each harmonic
    if n_samples % 2 == 0:
        power[:, -1] /= 2.0
    total = power.sum(axis=1)
    for k, (esr, _) in enumerate(banks):
        if esr == 0:
            continue
        share = np.abs(ys[k][None, :] / y_tot) ** 2
        with np.errstate(invalid="ignore", divide="ignore"):
            out[:, k] = esr * np.sum(power * share, axis=1) / total
    return np.where(np.isfinite(out), out, 0.0)


def loss_terms(design, p: CornerPoint, esr: bool = True) -> dict[str, np.ndarray]:
    """Every loss term (:data:`LOSS_FIELDS`) at every corner, W, from the operating point ``p``.

    Parameters
    ----------
    design : Design
        The stage's resistances and drops, and ``design.losses``.
    p : CornerPoint
    esr : bool
        False: leave the output capacitors' ESR loss at zero (it does not change the duty, and its
        harmonic split is the costly part; the fixed point skips it).

    Returns
    -------
    dict of str -> ndarray (corners,)
        Zero where a figure is not given or does not apply.

    Notes
    -----
    Formulas and their sources in the module notes.
    """
    st, lo = design.stage, design.losses
    kind = p.kind
    n = p.duty.shape[0]
    v = abs(design.operating.vout)
    vd = st.vf
    ms_on, ms_off, avg_on, avg_off, i_valley = _waveform_stats(p)
    ms_all = ms_on + ms_off
    zero = np.zeros(n)
    fly = kind == "flyback"
    nt = st.turns_ratio if st.topology == "flyback" else 1.0
    fs_buck, fs_boost, fs_bb = kind == "fs-buck", kind == "fs-boost", kind == "fs-buck-boost"
    two = np.where(fs_bb, 2.0, 1.0)  # buck-boost mode: two switches in each path
    out = {name: zero.copy() for name in LOSS_FIELDS}
    out["switch_w"] = two * st.r_switch * ms_on
    out["rectifier_w"] = two * st.r_rectifier * nt**2 * ms_off
    out["diode_w"] = two * vd * nt * avg_off + np.where(fs_buck, vd * (avg_on + avg_off), 0.0)
    out["inductor_dcr_w"] = st.dcr * np.where(fly, ms_on, ms_all)
    out["held_switch_w"] = np.where(fs_buck, st.r_rectifier * ms_all, np.where(fs_boost, st.r_switch * ms_all, 0.0))
    # capacitor ESR: ac part of the output node's current (pulsed: the rectifier's, n times for a flyback)
    pulsed = _output_pulsed(kind)
    ms_node = np.where(pulsed, nt**2 * ms_off, ms_all)
    mean_node = np.where(pulsed, nt * avg_off, avg_on + avg_off)
    ac_node = np.maximum(ms_node - mean_node**2, 0.0)
    if esr:
        out["output_esr_w"] = ac_node * _esr_share(design, p, pulsed).sum(axis=1)
    on_only = _input_draws_on_only(kind)
    ms_in = np.where(on_only, ms_on, ms_all)
    mean_in = np.where(on_only, avg_on, avg_on + avg_off)
    if lo.input_esr_ohm is not None:
        out["input_esr_w"] = lo.input_esr_ohm * np.maximum(ms_in - mean_in**2, 0.0)
    # switching, per commutating leg: (voltage, legs) per kind
    vg = p.vin
    legs = []
    v_buck_leg = vg + vd
    v_boost_leg = v + vd
    legs.append(np.select([np.isin(kind, ("buck", "fs-buck", "fs-buck-boost")), kind == "boost", kind == "fs-boost",
                           kind == "inverting", fly],
                          [v_buck_leg, v_boost_leg, v_boost_leg, vg + v + vd, vg + nt * (v + vd)], np.nan))
    legs.append(np.where(fs_bb, v_boost_leg, 0.0))
    f = st.fsw
    times = lo.transition_times()
    ccm_on = ~p.dcm & (i_valley > 0)
    for v_leg in legs:
        v_leg = np.where(np.isfinite(v_leg), v_leg, 0.0)
        active = v_leg > 0
        if times is not None:
            t_on, t_off = times
            out["overlap_w"] += 0.5 * v_leg * (np.maximum(i_valley, 0.0) * t_on + np.maximum(p.i_peak, 0.0) * t_off) * f
        if lo.coss_switch_f is not None or lo.coss_rectifier_f is not None:
            c_sw = lo.coss_switch_f or 0.0
            c_r = lo.coss_rectifier_f or 0.0
            hard = ~(st.synchronous & ~p.dcm & (i_valley < 0))
            out["coss_w"] += np.where(hard, 0.5 * (c_sw * v_leg**2 + c_r * (v_leg / nt) ** 2) * f, 0.0)
        if lo.recovery_charge_c is not None:
            out["recovery_w"] += np.where(ccm_on, lo.recovery_charge_c * v_leg / nt * f, 0.0)
        if lo.dead_time_s is not None and st.synchronous:
            edges = np.abs(p.i_peak) + np.where(p.dcm, 0.0, np.abs(i_valley))
            out["dead_time_w"] += np.where(active, lo.body_diode_v * lo.dead_time_s * nt * edges * f, 0.0)
        if lo.gate_charge_c is not None:
            transistors = 2.0 if st.synchronous else 1.0
            out["gate_w"] += np.where(active, transistors * lo.gate_charge_c * lo.gate_voltage_v * f, 0.0)
    if lo.core_k is not None:
        b_pk = st.inductance * p.ripple / (2.0 * lo.core_turns * lo.core_area_m2)
        out["core_w"] = steinmetz_w(lo.core_k, lo.core_alpha, lo.core_beta, f, b_pk, lo.core_volume_m3)
    if lo.quiescent_w is not None:
        out["quiescent_w"] = np.full(n, lo.quiescent_w)
    return out


def steinmetz_w(k: float, alpha: float, beta: float, f_hz, b_pk_t, volume_m3: float):
    """Core loss by Steinmetz's equation, W: ``volume k f^alpha B^beta``.

    Parameters
    ----------
    k, alpha, beta : float
        Coefficients in SI (loss per volume in W/m^3 with f in Hz and B in T).
    f_hz : float or ndarray
        Frequency of the flux swing, Hz.
    b_pk_t : float or ndarray
        Peak flux density of the swing (half its peak-to-peak), T.
    volume_m3 : float
        Effective core volume, m^3.

    Notes
    -----
    C. P. Steinmetz, "On the law of hysteresis", Trans. AIEE 9, 1892 (B^1.6 for
    hysteresis); the frequency exponent alpha is the form core makers fit.
    """
    return volume_m3 * k * np.asarray(f_hz, float) ** alpha * np.abs(np.asarray(b_pk_t, float)) ** beta


def _input_current(p: CornerPoint) -> np.ndarray:
    """Mean current the power path draws from the input, A."""
    _, _, avg_on, avg_off, _ = _waveform_stats(p)
    return np.where(_input_draws_on_only(p.kind), avg_on, avg_on + avg_off)


def corner_points(design, vin, load, parts=None) -> tuple[CornerPoint, dict[str, np.ndarray]]:
    """Operating points with the duty-changing losses fed back, and every loss term.

    Parameters
    ----------
    design : Design
    vin, load : ndarray (corners,)
        Corners' input voltage (V) and load (A).
    parts : list of (indices, stage, module, label), optional
        Which circuit runs which corners (default: the stage's own rule,
        :func:`loopkit.stages.groups`; the four-switch mode comparison passes one mode).

    Returns
    -------
    (CornerPoint, dict)
        The point (duty with the losses in it) and :func:`loss_terms` at it.
    """
    p, terms, _, _ = _solve(design, vin, load, parts)
    return p, terms


def _solve(design, vin, load, parts=None, esr: bool = True):
    """The fixed point: (point, terms, input voltage and load the modules ran at)."""
    vin, load = np.asarray(vin, float), np.asarray(load, float)
    if parts is None:
        parts = groups(design.stage, vin, load, design.operating.vout)
    vin_op, load_op = vin, load
    p = _points(design, parts, vin, load, vin_op, load_op)
    if not _feeds_back(design):
        return p, loss_terms(design, p, esr), vin_op, load_op
    terms = loss_terms(design, p, esr=False)
    v = abs(design.operating.vout)
    for _ in range(FEEDBACK_ITERATIONS):
        px = _duty_losses(p, terms)
        with np.errstate(invalid="ignore", divide="ignore"):
            vin_op = np.where(p.dcm, vin, vin - px / _input_current(p))
        load_op = np.where(p.dcm, load + px / v, load)
        vin_op = np.where(np.isfinite(vin_op), vin_op, vin)
        p = _points(design, parts, vin, load, vin_op, load_op)
        terms = loss_terms(design, p, esr=False)
    return p, loss_terms(design, p, esr), vin_op, load_op


def _duty_losses(p: CornerPoint, terms) -> np.ndarray:
    """The losses that change the duty at each corner, W."""
    ccm = sum(terms[k] for k in DUTY_FIELDS_CCM)
    dcm = sum(terms[k] for k in DUTY_FIELDS_DCM)
    return np.where(p.dcm, dcm, ccm)


def _feeds_back(design) -> bool:
    lo = design.losses
    return (lo.dead_time_s is not None and design.stage.synchronous) or lo.core_k is not None


def losses_operating_inputs(design, vin, load) -> tuple[np.ndarray, np.ndarray]:
    """(input voltage, load) at which the topology modules run each corner so that the duty carries
    the losses that change it (CCM: ``Vg - Px/Iin``; DCM: ``Io + Px/|V|``); the corners' own values
    when ``[losses]`` gives none of those figures (dead time, core).  :func:`loopkit.powerstage.analyse_stage` uses it,
    so its duty is the one :func:`corner_points` reports.
    """
    vin, load = np.asarray(vin, float), np.asarray(load, float)
    if not _feeds_back(design):
        return vin, load
    _, _, vin_op, load_op = _solve(design, vin, load, esr=False)
    return vin_op, load_op
