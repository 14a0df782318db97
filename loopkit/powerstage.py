"""Operating point and small-signal power-stage model at every corner.

:func:`analyse_stage` is the first step of the one path from a design to its
results: for every corner (input voltage x load) it gives the duty cycle with
conduction losses, the inductor current and ripple, CCM or DCM (and the load at
the boundary), and the control-to-output Gvd, line-to-output Gvg and open-loop
output impedance Zout as :class:`~loopkit.rational.Rational` arrays, with the
salient features read off them (dc gain, double pole and Q, ESR zeros, RHP
zero, DCM poles).
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass

import numpy as np

from .design import Design
from .errors import DesignError, Finding
from .loss_model import ccm_point, losses_operating_inputs
from .rational import TWO_PI, Rational
from .stages import dcm_full, groups, topology_module
from .stages.base import (
    ccm_gid,
    ccm_gig_gii,
    ccm_slopes,
    ccm_transfer_functions,
    dcm_slopes,
    dcm_transfer_functions,
)
from .units import format_value

__all__ = ["StageResult", "analyse_stage", "corner_label"]


@dataclass(frozen=True, eq=False)
class StageResult:
    """Power stage at every corner; arrays are shaped (corners,).

    Attributes
    ----------
    vin, load : ndarray
        Input voltage (V) and load current (A) of each corner.
    duty : ndarray
        Duty cycle of the controlled switch, conduction losses included.
    dcm : ndarray of bool
        True where the corner runs in discontinuous conduction.
    submode : ndarray of str
        Four-switch: "buck", "boost" or "transition"; "" otherwise.
    i_l, ripple_pp, i_peak : ndarray
        Average inductor current, its peak-to-peak ripple and peak, A
        (flyback: magnetising current seen from the primary).
    load_boundary : ndarray
        Load current at the CCM/DCM boundary at this input voltage, A.
    gd0 : ndarray
        Gvd at dc, V per unit duty.
    f0_hz, q : ndarray
        Double-pole frequency and quality factor (CCM; NaN in DCM).
    fp_hz, f_hf_hz : ndarray
        DCM: dominant output pole and high-frequency pole (NaN in CCM), the
        poles of the full-order model (:mod:`loopkit.stages.dcm_full`).
    f_esr_hz : ndarray (corners, banks)
        ESR zero of each capacitor bank (NaN where ESR = 0).
    f_rhp_hz : ndarray
        Right-half-plane zero of Gvd (NaN where there is none; in DCM the
        boost-type stages' zero derived in :mod:`loopkit.stages.dcm_full`).
    gvd, gvg, zout : Rational
        Control-to-output, line-to-output and output impedance (load included).
    findings : tuple of Finding
    gid : Rational
        Control-to-inductor-current (vg = 0), A per unit duty (flyback: the
        magnetising current seen from the primary, which the primary switch
        carries while on).  CCM from the averaged equations; DCM from the
        full-order model (see :mod:`loopkit.stages.dcm_full`).
    gig, gii : Rational
        Line-to-inductor-current (A/V) and output-current-injection-to-inductor-
        current (A/A), d = 0: what current mode needs for its closed-loop
        line-to-output and output impedance.
    sn_a_per_s, sf_a_per_s : ndarray
        Inductor current slope while the switch is on and while it is off, A/s,
        both positive (flyback: seen from the primary).  DCM: the rise and the
        fall of the current triangle.
    slope_sensitivity_per_h : ndarray (corners, 2, 2)
        ``[[dsn/dvg, dsn/dv], [dsf/dvg, dsf/dv]]`` in A/s per V (1/H), v the
        signed output voltage: what the feedforward and feedback gains of peak
        current-mode control are made of.
    fsw_hz : float
        Switching frequency (:attr:`ts_s` is its period).
    zout_static : Rational
        DCM corners: the output impedance of the reduced-order averaged switch
        model (Erickson & Maksimovic, 2nd ed., ch. 11), ``1/(Y_o + 1/r2)``, whose
        switch-network conductance 1/r2 has no inductor lag: the plant the
        current-programmed DCM model builds on (the inductor holds no energy
        from one period to the next).  CCM corners: ``zout``.
    """

    vin: np.ndarray
    load: np.ndarray
    vout: float
    duty: np.ndarray
    dcm: np.ndarray
    submode: np.ndarray
    i_l: np.ndarray
    ripple_pp: np.ndarray
    i_peak: np.ndarray
    load_boundary: np.ndarray
    gd0: np.ndarray
    f0_hz: np.ndarray
    q: np.ndarray
    fp_hz: np.ndarray
    f_hf_hz: np.ndarray
    f_esr_hz: np.ndarray
    f_rhp_hz: np.ndarray
    gvd: Rational
    gvg: Rational
    zout: Rational
    findings: tuple
    gid: Rational
    gig: Rational
    gii: Rational
    sn_a_per_s: np.ndarray
    sf_a_per_s: np.ndarray
    slope_sensitivity_per_h: np.ndarray
    fsw_hz: float
    zout_static: Rational | None = None

    @property
    def n_corners(self) -> int:
        return self.vin.shape[0]

    @property
    def ts_s(self) -> float:
        """Switching period, s."""
        return 1.0 / self.fsw_hz

    @property
    def mode(self) -> np.ndarray:
        return np.where(self.dcm, "DCM", "CCM")


def corner_label(vin: float, load: float) -> str:
    """Short name of a corner, e.g. ``"12V 1.5A"``."""
    return f"{format_value(vin, 'V')} {format_value(load, 'A')}"


def _range_check(design: Design, vin: np.ndarray) -> None:
    stage, vout = design.stage, design.operating.vout
    module = topology_module(stage.topology)
    bad = module.range_problem(stage, np.asarray(design.operating.vin), vout)
    if bad is not None:
        v = design.operating.vin[bad]
        raise DesignError(
            f"operating.vin[{bad}]",
            format_value(v, "V"),
            f"a {stage.topology} cannot make {format_value(vout, 'V')} from {format_value(v, 'V')}"
            f" (a {stage.topology} needs vin {'above' if stage.topology == 'buck' else 'below'} vout)",
        )


def _check_dcm_point(design: Design, dp, vin: np.ndarray, load: np.ndarray) -> None:
    """Refuse a DCM operating point that does not exist (losses above the input, no duty in 0 .. 1)."""
    duty, d2, ipk = (np.asarray(x, float) for x in (dp.duty, dp.d2, dp.i_peak))
    bad = ~(np.isfinite(duty) & np.isfinite(d2) & np.isfinite(ipk) & (duty > 0) & (duty < 1) & (d2 > 0))
    if np.any(bad):
        k = int(np.nonzero(bad)[0][0])
        stage = design.stage
        lh = np.asarray(stage.inductance, float)  # an array over rows in a tolerance study
        shown = format_value(float(lh), "H") if lh.ndim == 0 else (
            f"{format_value(float(lh.min()), 'H')} .. {format_value(float(lh.max()), 'H')} (the draws)")
        raise DesignError(
            "stage.inductance",
            shown,
            f"at {corner_label(vin[k], load[k])} the {stage.topology} in DCM has no operating point: the current"
            " pulse through this inductance drops more across the resistances than the input gives; raise the"
            " inductance (or fsw), or lower the resistances",
        )


@contextlib.contextmanager
def _numerics(design: Design, vin: np.ndarray, load: np.ndarray, mode: str):
    """Turn a numerical failure of a small-signal model into a DesignError naming the corners."""
    try:
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            yield
    except DesignError:
        raise
    except (ArithmeticError, ValueError, np.linalg.LinAlgError) as exc:
        corners = ", ".join(corner_label(v, i) for v, i in zip(np.atleast_1d(vin)[:3], np.atleast_1d(load)[:3]))
        raise DesignError(
            "stage",
            f"{design.stage.topology} in {mode} at {corners}",
            f"its small-signal model cannot be computed ({type(exc).__name__}): the values are too far apart for"
            " double precision; check the inductance, capacitances and loads for a slipped prefix",
        ) from None


def _double_pole(poles_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """f0 and Q from the two lowest poles of each row (complex pair or two real)."""
    p = np.where(np.isfinite(poles_hz), poles_hz, np.nan)
    order = np.argsort(np.where(np.isnan(p), np.inf, np.abs(p)), axis=1)
    p = np.take_along_axis(p, order, axis=1)
    p1, p2 = p[:, 0], p[:, 1] if p.shape[1] > 1 else np.full(p.shape[0], np.nan)
    f0 = np.sqrt(np.abs(p1 * p2))
    q = f0 / np.abs(p1.real + p2.real)
    return f0, q


def _rows_of(st, k: np.ndarray):
    """The stage with part values that are arrays over the rows (a tolerance study) cut to rows ``k``.

    A stage of scalar values is returned as it is.
    """
    from dataclasses import fields, replace

    def cut(x):
        return np.asarray(x)[k] if np.ndim(x) == 1 else x

    changes = {f.name: cut(getattr(st, f.name)) for f in fields(st) if np.ndim(getattr(st, f.name)) == 1
               and f.name != "output_caps"}
    banks = tuple(replace(b, capacitance=cut(b.capacitance), esr=cut(b.esr)) for b in st.output_caps)
    if not changes and all(np.ndim(b.capacitance) == 0 and np.ndim(b.esr) == 0 for b in st.output_caps):
        return st
    return replace(st, output_caps=banks, **changes)


def _slope_sensitivity(module, st) -> np.ndarray:
    """The topology's slope sensitivities; with the inductance an array over rows, each row's own.

    Every topology's sensitivities are a fixed matrix over the inductance (see their
    ``slope_sensitivity``), so a row array divides that matrix row by row.
    """
    lh = np.asarray(st.inductance)
    if lh.ndim == 0:
        return module.slope_sensitivity(st)
    from dataclasses import replace

    return module.slope_sensitivity(replace(st, inductance=1.0))[None, :, :] / lh[:, None, None]


def analyse_stage(design: Design, findings: bool = True) -> StageResult:
    """Operating point and small-signal model of the power stage at every corner.

    Parameters
    ----------
    design : Design

    findings : bool
        False leaves out the per-corner findings (a tolerance study's many rows).

    Returns
    -------
    StageResult

    Raises
    ------
    DesignError
        If the stage cannot make the output at some corner (wrong conversion
        direction, or conduction losses too high for any duty).

    Notes
    -----
    A corner is in DCM when the stage may run so (``stage.light_load = "dcm"``)
    and half the CCM ripple exceeds the average inductor current, which is the
    condition K < Kcrit of Erickson & Maksimovic ch. 5 written with losses.
    DCM corners use the full-order DCM model of Sun et al. (2001)
    (:mod:`loopkit.stages.dcm_full`), never the CCM one.
    """
    stage, op = design.stage, design.operating
    vin, load = op.corners()
    vout = op.vout
    _range_check(design, vin)
    n = vin.shape[0]
    r_load = abs(vout) / load
    out = {
        name: np.full(n, np.nan)
        for name in (
            "duty",
            "i_l",
            "ripple_pp",
            "i_peak",
            "load_boundary",
            "f0_hz",
            "q",
            "fp_hz",
            "f_hf_hz",
            "f_rhp_hz",
            "sn",
            "sf",
        )
    }
    sens = np.full((n, 2, 2), np.nan)
    parts_id, parts_ig, parts_ii = [], [], []
    dcm_mask = np.zeros(n, bool)
    submode = np.full(n, "", dtype=object)
    parts_vd, parts_vg, parts_zo, order = [], [], [], []
    want_findings = findings
    parts_zs = []
    findings: list[Finding] = []
    # [losses]: the losses that change the duty (dead time; core in DCM), see loopkit.loss_model
    vin_op, load_op = losses_operating_inputs(design, vin, load)
    for idx, st, module, label in groups(stage, vin, load, vout):
        submode[idx] = label
        cp = ccm_point(module, st, vin[idx], vin_op[idx], load[idx], vout)
        if np.any(~np.isfinite(cp.duty) | (cp.duty >= 1.0) | (cp.duty <= 0.0)):
            k = idx[np.nonzero(~np.isfinite(cp.duty) | (cp.duty >= 1.0) | (cp.duty <= 0.0))[0][0]]
            raise DesignError(
                "operating.load",
                format_value(load[k], "A"),
                f"the {stage.topology} cannot deliver {format_value(vout, 'V')} at {format_value(vin[k], 'V')} in"
                f" with this load: conduction losses need a duty of 100 % or more (lower the load or the resistances)",
            )
        in_dcm = (st.light_load_mode == "dcm") & (cp.ripple / 2.0 > cp.i_l)
        out["load_boundary"][idx] = cp.out_per_il * cp.ripple / 2.0
        ccm_idx, dcm_idx = np.nonzero(~in_dcm)[0], np.nonzero(in_dcm)[0]
        full = st
        if ccm_idx.size:
            st = _rows_of(full, idx[ccm_idx])
            sel = _select(cp, ccm_idx)
            with _numerics(design, vin[idx][ccm_idx], load[idx][ccm_idx], "CCM"):
                gvd, gvg, zo = ccm_transfer_functions(st, sel, r_load[idx][ccm_idx])
            k = idx[ccm_idx]
            out["duty"][k] = sel.duty
            out["i_l"][k] = sel.i_l
            out["ripple_pp"][k] = sel.ripple
            out["i_peak"][k] = sel.i_l + sel.ripple / 2.0
            out["f0_hz"][k], out["q"][k] = _double_pole(gvd.poles_hz())
            with np.errstate(invalid="ignore", divide="ignore"):
                rhp = -(sel.b_i * sel.e + sel.b_d * sel.r_series) / (sel.b_d * sel.l_h) / TWO_PI
                out["f_rhp_hz"][k] = np.where((sel.b_d != 0) & (rhp > 0), rhp, np.nan)
            parts_vd.append(gvd), parts_vg.append(gvg), parts_zo.append(zo), order.append(k)
            parts_zs.append(zo)
            parts_id.append(ccm_gid(st, sel, r_load[idx][ccm_idx]))
            gig, gii = ccm_gig_gii(st, sel, r_load[idx][ccm_idx])
            parts_ig.append(gig), parts_ii.append(gii)
            out["sn"][k], out["sf"][k] = ccm_slopes(sel, st.fsw)
            sens[k] = _slope_sensitivity(module, st)
        if dcm_idx.size:
            k = idx[dcm_idx]
            st = _rows_of(full, k)
            with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
                dp = module.dcm(st, vin[k], load_op[k], vout)
            _check_dcm_point(design, dp, vin[k], load[k])
            sens[k] = _slope_sensitivity(module, st)
            with _numerics(design, vin[k], load[k], "DCM"):
                gvd, gvg, zo = dcm_full.transfer_functions(st, dp, r_load[k], sens[k])
                gid, gig, gii = dcm_full.current_transfer_functions(st, dp, r_load[k], sens[k])
                zo_static = dcm_transfer_functions(st, dp, r_load[k])[2]
            out["duty"][k] = dp.duty
            out["i_l"][k] = dp.i_peak * (dp.duty + dp.d2) / 2.0
            out["ripple_pp"][k] = dp.i_peak
            out["i_peak"][k] = dp.i_peak
            out["f_hf_hz"][k] = dcm_full.hf_pole_hz(gvd, dp, st.fsw)
            out["f_rhp_hz"][k] = dcm_full.rhp_zero_hz(gvd)
            poles = zo.poles_hz()
            finite = np.where(np.isfinite(poles), np.abs(poles), np.inf)
            out["fp_hz"][k] = np.min(finite, axis=1)
            dcm_mask[k] = True
            parts_vd.append(gvd), parts_vg.append(gvg), parts_zo.append(zo), order.append(k)
            parts_zs.append(zo_static)
            out["sn"][k], out["sf"][k] = dcm_slopes(dp, st.fsw)
            parts_id.append(gid), parts_ig.append(gig), parts_ii.append(gii)
    order_all = np.concatenate(order)
    gvd = Rational.stack(parts_vd, order_all)
    gvg = Rational.stack(parts_vg, order_all)
    zout = Rational.stack(parts_zo, order_all)
    with np.errstate(divide="ignore"):  # a bank's values may be arrays over the rows
        f_esr = np.stack([np.broadcast_to(np.where(np.asarray(b.esr) > 0, 1.0 / (TWO_PI * np.asarray(b.esr_total * b.c_total, float)),
                                                   np.nan), (n,)) for b in stage.output_caps], axis=1)
    if want_findings:
        findings.extend(_stage_findings(design, vin, load, out, dcm_mask, submode))
    return StageResult(
        vin=vin,
        load=load,
        vout=vout,
        duty=out["duty"],
        dcm=dcm_mask,
        submode=submode.astype(str),
        i_l=out["i_l"],
        ripple_pp=out["ripple_pp"],
        i_peak=out["i_peak"],
        load_boundary=out["load_boundary"],
        gd0=gvd.dc_gain(),
        f0_hz=out["f0_hz"],
        q=out["q"],
        fp_hz=out["fp_hz"],
        f_hf_hz=out["f_hf_hz"],
        f_esr_hz=f_esr.copy(),
        f_rhp_hz=out["f_rhp_hz"],
        gvd=gvd,
        gvg=gvg,
        zout=zout,
        findings=tuple(findings),
        gid=Rational.stack(parts_id, order_all),
        gig=Rational.stack(parts_ig, order_all),
        gii=Rational.stack(parts_ii, order_all),
        sn_a_per_s=out["sn"],
        sf_a_per_s=out["sf"],
        slope_sensitivity_per_h=sens,
        fsw_hz=float(stage.fsw),
        zout_static=Rational.stack(parts_zs, order_all),
    )


def _select(cp, idx):
    return type(cp)(**{k: np.asarray(v)[idx] for k, v in cp.__dict__.items()})


def _stage_findings(design, vin, load, out, dcm_mask, submode) -> list[Finding]:
    found = []
    dmax = design.modulator.max_duty
    for k in np.nonzero(out["duty"] > dmax)[0]:
        found.append(
            Finding(
                "duty-limit",
                f"duty {out['duty'][k]:.1%} at {corner_label(vin[k], load[k])} exceeds modulator.max_duty {dmax:.0%}:"
                " the output will fall out of regulation there",
                int(k),
            )
        )
    for k in np.nonzero(dcm_mask)[0]:
        found.append(
            Finding(
                "dcm",
                f"{corner_label(vin[k], load[k])} runs in DCM (boundary at {format_value(out['load_boundary'][k], 'A')}):"
                " modelled with the DCM averaged model",
                int(k),
                "note",
            )
        )
    for k in np.nonzero(submode == "transition")[0]:
        found.append(
            Finding(
                "transition-band",
                f"{corner_label(vin[k], load[k])} is in the four-switch transition band (buck duty above "
                f"{design.stage.buck_max_duty:.0%}, boost duty below {design.stage.boost_min_duty:.0%}): modelled in "
                "the pure mode that can regulate; a real controller blends modes here, so verify on the bench",
                int(k),
            )
        )
    return found
