"""What every topology module provides, and the small-signal algebra they share.

A topology module turns (stage, vin, load, vout) arrays into

* a :class:`CcmPoint`: the CCM operating point with conduction losses and the
  coefficients of the two averaged small-signal equations every PWM converter
  in this package reduces to (inductor loop and output node)::

      (s L + r_series) i  = a_g vg + a_v v + e d                 (1)
      Y_o(s) v            = b_i i  + b_d d + i_inj               (2)

  where ``Y_o`` is the load conductance plus the output capacitor banks.
  Eliminating ``i`` gives ``v (Y_o Z_s - a_v b_i) = b_i a_g vg + (b_i e + b_d Z_s) d
  + Z_s i_inj`` with ``Z_s = s L + r_series``; so Gvd, Gvg and Zout follow
  for any number of capacitor banks.  With ideal parts it reduces to the
  canonical models of Erickson & Maksimovic, Fundamentals of Power
  Electronics, 2nd ed., Table 8.2.

  Equation (1) is the state-space average of Middlebrook and Cuk, "A general
  unified approach to modelling switching-converter power stages", IEEE PESC
  1976, not the naive average of the switched circuit: where the output node
  receives a pulsed current (boost, buck-boost, flyback: ``delta i`` in one
  interval, nothing in the other) and every capacitor bank has ESR, the
  output-node voltage the inductor sees jumps by ``delta i Rp`` between the
  intervals, with ``Rp = R || ESR_1 || ESR_2 ...``.  Averaging the switched
  equations exactly gives the extra series resistance ``D D' k^2 Rp`` in (1)
  (k the current ratio: 1, or n for the flyback) and, because it depends on
  the duty, ``-(1 - 2D) k^2 Rp I`` in ``e``; see :func:`pulsed_esr_resistance`.
  The buck's output current is not pulsed, so it has no such term.

* a :class:`DcmPoint`: the DCM operating point and the parameters of the
  reduced-order averaged switch model of Erickson & Maksimovic ch. 11: the
  output port is a current ``i2 = g2 vg + j2 d - v/r2`` into the output node
  (:func:`dcm_transfer_functions` adds the high-frequency pole ``w2 = 2 fsw / D2``;
  kept for comparison and for current mode's static output impedance).  The
  transfer functions loopkit uses in DCM are those of the full-order model of
  Sun, Mitchell, Greuel, Krein and Bass, "Averaged modeling of PWM converters
  operating in discontinuous conduction mode", IEEE TPEL 16(4), 2001, in
  :mod:`.dcm_full` (the inductor current kept as a state, ``d2`` eliminated
  through the current constraint), whose dc limit is this model.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..design import Stage
from ..rational import TWO_PI, Rational, _roots_as_factors, poly_roots_inverse

#: Fixed-point steps of the DCM operating point with conduction losses: the
#: resistive drops shift the peak current by a fraction of a per cent, so the
#: iteration settles to rounding in a few steps.
DCM_ITERATIONS = 8

__all__ = [
    "DCM_ITERATIONS",
    "CcmPoint",
    "DcmPoint",
    "ccm_gid",
    "ccm_gig_gii",
    "ccm_slopes",
    "ccm_transfer_functions",
    "dcm_gid",
    "dcm_gig_gii",
    "dcm_slopes",
    "dcm_transfer_functions",
    "output_admittance",
    "pulsed_esr_resistance",
    "solve_quadratic_dprime",
]


@dataclass(frozen=True)
class CcmPoint:
    """CCM operating point and small-signal coefficients, one entry per corner.

    All arrays have the corners' shape.  ``i_l`` is the average inductor current
    (flyback: magnetising current seen from the primary); ``ripple`` the
    inductor current's peak-to-peak ripple; ``out_per_il`` the ratio of output
    current to inductor current (1 for a buck, D' for a boost...), used for the
    load at the CCM/DCM boundary.
    """

    duty: np.ndarray
    i_l: np.ndarray
    ripple: np.ndarray
    out_per_il: np.ndarray
    l_h: np.ndarray
    r_series: np.ndarray
    a_g: np.ndarray
    a_v: np.ndarray
    b_i: np.ndarray
    b_d: np.ndarray
    e: np.ndarray


@dataclass(frozen=True)
class DcmPoint:
    """DCM operating point and averaged-switch parameters, one entry per corner.

    ``sign`` is -1 for an inverting output (the switch network's current leaves
    the output node).  ``d2`` is the rectifier conduction interval as a fraction
    of the period; ``i_peak`` the inductor peak current.  ``turns`` is the
    output current per inductor current while the rectifier conducts (the
    flyback's n), ``fed_while_on`` True where the inductor feeds the output in
    both intervals (buck-type); both used by the full-order model
    (:mod:`.dcm_full`).
    """

    duty: np.ndarray
    d2: np.ndarray
    i_peak: np.ndarray
    j2: np.ndarray
    g2: np.ndarray
    r2: np.ndarray
    sign: float
    turns: float = 1.0
    fed_while_on: bool = False


def solve_quadratic_dprime(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Physical root x = D' of ``-a x^2 + b x - c = 0`` (the larger one); NaN if none.

    Boost, buck-boost and flyback steady state with conduction losses take this
    form (derived in each topology module); with no losses ``c = 0`` and
    ``x = b / a``, the ideal ratio.
    """
    disc = b * b - 4.0 * a * c
    with np.errstate(invalid="ignore"):
        return np.where(disc >= 0, (b + np.sqrt(np.maximum(disc, 0.0))) / (2.0 * a), np.nan)


def pulsed_esr_resistance(stage: Stage, r_load: np.ndarray) -> np.ndarray:
    """``Rp = R || ESR_1 || ESR_2 ...``: what a pulsed output-node current sees, ohm.

    Zero when any bank has no ESR (that bank holds the node voltage).  A stage
    that feeds the output node ``k i`` during D' Ts only adds ``D D' k^2 Rp`` to
    its averaged series resistance (Middlebrook and Cuk, 1976: the boost with
    capacitor ESR; derived in the notes of this module).
    """
    r_load = np.asarray(r_load, float)
    # part values may be scalars or arrays over the rows (corner x draw): a bank without ESR
    # gives 1/0 = inf in the sum, hence Rp = 0 row by row
    with np.errstate(divide="ignore"):
        g = 1.0 / r_load + sum(1.0 / np.asarray(b.esr_total, float) for b in stage.output_caps)
        return np.zeros_like(r_load) + 1.0 / g


def output_admittance(stage: Stage, r_load: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Polynomials of ``Y_o(s) = 1/R + sum_k s C_k / (1 + s ESR_k C_k)``.

    Returns ascending coefficients ``(num, den)`` in s (rad/s): ``num`` is
    (corners, nb+1), ``den`` (1, nb+1), nb the number of banks.
    """
    # part values may be scalars or arrays over the rows: polynomials are (1 or rows, k)
    taus = [np.atleast_1d(np.asarray(b.esr_total * b.c_total, float))[:, None] for b in stage.output_caps]

    def times_linear(p, tau):  # p (1 + s tau), row by row
        out = np.zeros(np.broadcast_shapes(p.shape[:-1], tau.shape[:-1]) + (p.shape[-1] + 1,))
        out[:, :-1] += p
        out[:, 1:] += p * tau
        return out

    den = np.ones((1, 1))
    for tau in taus:
        den = times_linear(den, tau)
    caps = np.zeros((1, len(taus) + 1))
    for k, bank in enumerate(stage.output_caps):
        c = np.atleast_1d(np.asarray(bank.c_total, float))[:, None]
        term = np.concatenate([np.zeros_like(c), c], axis=1)
        for j, tau in enumerate(taus):
            if j != k:
                term = times_linear(term, tau)
        caps = caps + np.pad(term, ((0, 0), (0, caps.shape[1] - term.shape[1])))
    num = den / np.asarray(r_load, float)[:, None] + caps
    return num, den


def _bank_factors(stage: Stage, n: int) -> np.ndarray:
    """ESR-zero factors ``1 + s ESR C`` of every bank, (n, nb, 2)."""
    f = np.zeros((n, len(stage.output_caps), 2), dtype=complex)
    f[..., 0] = 1.0
    for k, b in enumerate(stage.output_caps):  # a bank's values may be arrays over the rows
        f[:, k, 1] = b.esr_total * b.c_total
    return f


#: The last characteristic polynomial's roots: Gvd, Gvg, Zout, Gid, Gig and Gii of a stage share it,
#: and a tolerance study's many rows make its eigenvalues the stage's largest cost.  Keyed on the
#: exact coefficients, so a hit returns exactly what the computation would.
_LAST_CHAR: list = [None]


def _char_roots(char: np.ndarray) -> np.ndarray:
    key = (char.shape, char.tobytes())
    last = _LAST_CHAR[0]
    if last is not None and last[0] == key:
        return last[1]
    w = poly_roots_inverse(char)
    w.flags.writeable = False
    _LAST_CHAR[0] = (key, w)  # one assignment: safe when several threads compute stages
    return w


def _over_char(gain: np.ndarray, num_factors: np.ndarray, char: np.ndarray) -> Rational:
    """``gain * prod(num factors) / char(s)`` with the characteristic polynomial's roots."""
    w = _char_roots(np.ascontiguousarray(char, dtype=float))
    den = np.stack([np.ones_like(w), -w], axis=-1)
    return Rational.from_factors(gain / char[:, 0], num_factors, den)


def ccm_transfer_functions(stage: Stage, op: CcmPoint, r_load: np.ndarray) -> tuple[Rational, Rational, Rational]:
    """Gvd, Gvg and Zout of CCM corners from equations (1) and (2)."""
    n = op.duty.shape[0]
    _, _, char = _ccm_characteristic(stage, op, r_load)
    banks = _bank_factors(stage, n)
    # control: (b_i e + b_d Req) + s b_d L: carries the RHP zero of boost-type stages
    lin = np.stack([op.b_i * op.e + op.b_d * op.r_series, op.b_d * op.l_h], axis=1).astype(complex)
    lead = lin[:, 0].real
    lin_norm = np.stack([np.ones(n), lin[:, 1] / lead], axis=1)[:, None, :]
    gvd = _over_char(lead, np.concatenate([lin_norm, banks], axis=1), char)
    gvg = _over_char(op.b_i * op.a_g, banks, char)
    zs_f = np.stack([np.ones(n), op.l_h / op.r_series], axis=1) if np.all(op.r_series > 0) else None
    if zs_f is not None:
        zout = _over_char(op.r_series, np.concatenate([zs_f[:, None, :].astype(complex), banks], axis=1), char)
    else:  # lossless inductor path: Zs = s L has a zero at the origin
        zs_raw = np.stack([op.r_series, op.l_h], axis=1)[:, None, :].astype(complex)
        zout = _over_char(np.ones(n), np.concatenate([zs_raw, banks], axis=1), char)
    return gvd, gvg, zout


def dcm_transfer_functions(stage: Stage, op: DcmPoint, r_load: np.ndarray) -> tuple[Rational, Rational, Rational]:
    """Gvd, Gvg and Zout of DCM corners, reduced order (averaged switch model plus HF pole).

    Kept for comparison only: :func:`loopkit.powerstage.analyse_stage` uses the
    full-order model of :mod:`.dcm_full`, whose low-frequency limit this is.
    """
    n = op.duty.shape[0]
    ny, dy = output_admittance(stage, r_load)
    char = ny + dy / op.r2[:, None]
    banks = _bank_factors(stage, n)
    w2 = 2.0 * stage.fsw / op.d2  # rad/s
    hf = np.stack([np.ones(n), 1.0 / w2], axis=1)[:, None, :].astype(complex)
    base_gvd = _over_char(op.sign * op.j2, banks, char)
    base_gvg = _over_char(op.sign * op.g2, banks, char)
    zout = _over_char(np.ones(n), banks, char)
    pole = Rational.from_factors(np.ones(n), (), hf)
    return base_gvd * pole, base_gvg * pole, zout


def hf_pole_hz(stage: Stage, op: DcmPoint) -> np.ndarray:
    """The DCM high-frequency pole 2 fsw / D2 (rad/s) expressed in Hz."""
    return 2.0 * stage.fsw / op.d2 / TWO_PI


# ---------------------------------------------------------------------------- current-mode quantities
def ccm_gid(stage: Stage, op: CcmPoint, r_load: np.ndarray) -> Rational:
    """Control-to-inductor-current ``Gid = i/d`` of CCM corners (vg = 0), A per unit duty.

    Notes
    -----
    From equations (1) and (2) with ``Y_o = ny/dy``: ``v = (b_i i + b_d d) dy/ny``
    into (1) gives ``i (Z_s ny - a_v b_i dy) = (e ny + a_v b_d dy) d``: the same
    characteristic polynomial as Gvd over the numerator ``e ny + a_v b_d dy``
    (degree = number of capacitor banks).  Ideal buck: ``Gid = (V/(D R))
    (1 + s R C)/(1 + s L/R + s^2 L C)`` (Erickson & Maksimovic, 2nd ed., ch. 12,
    the inductor-current transfer function of the CCM model).  Flyback: ``i`` is
    the magnetising current seen from the primary, the current the primary switch
    carries while on.
    """
    ny, dy, char = _ccm_characteristic(stage, op, r_load)
    num = op.e[:, None] * ny + (op.a_v * op.b_d)[:, None] * dy
    gain, factors = _roots_as_factors(num)
    return _over_char(gain, factors, char)


def _ccm_characteristic(stage: Stage, op: CcmPoint, r_load: np.ndarray):
    """Output admittance ``ny/dy`` and Gvd's characteristic polynomial ``Z_s ny - a_v b_i dy`` (ascending in s)."""
    n = op.duty.shape[0]
    ny, dy = output_admittance(stage, r_load)
    zs = np.stack([op.r_series, op.l_h], axis=1)  # Req + s L
    char = np.zeros((n, ny.shape[1] + 1))
    for k in range(ny.shape[1]):
        char[:, k] += ny[:, k] * zs[:, 0]
        char[:, k + 1] += ny[:, k] * zs[:, 1]
    char[:, : dy.shape[1]] -= (op.a_v * op.b_i)[:, None] * dy
    return ny, dy, char


def ccm_gig_gii(stage: Stage, op: CcmPoint, r_load: np.ndarray) -> tuple[Rational, Rational]:
    """Line-to-inductor-current ``Gig = i/vg`` (A/V) and output-injection-to-inductor-current
    ``Gii = i/i_inj`` (A/A) of CCM corners, d = 0.

    Notes
    -----
    From equations (1) and (2): ``i (Z_s ny - a_v b_i dy) = a_g ny vg + a_v dy i_inj``,
    so ``Gig = a_g ny / char`` and ``Gii = a_v dy / char`` over Gvd's
    characteristic polynomial.  Peak current mode needs them for its closed
    current loop's line-to-output and output impedance.
    """
    ny, dy, char = _ccm_characteristic(stage, op, r_load)
    g_ny, f_ny = _roots_as_factors(ny)
    banks = _bank_factors(stage, op.duty.shape[0])  # dy = prod(1 + s ESR_k C_k)
    gig = _over_char(op.a_g * g_ny, f_ny, char)
    gii = _over_char(op.a_v * dy[:, 0], banks, char)
    return gig, gii


def ccm_slopes(op: CcmPoint, fsw: float) -> tuple[np.ndarray, np.ndarray]:
    """On- and off-time inductor current slopes (magnitudes, A/s) of CCM corners.

    The on-slope is the inductor voltage while the switch is on (conduction drops
    at the average current, as in ``op.ripple = sn D Ts``) over L; the off-slope
    follows from the volt-second balance of the averaged steady state,
    ``D sn = D' sf``, so it carries every loss the duty carries.  Flyback: the
    magnetising current seen from the primary (the secondary current referred
    to the primary while off).
    """
    sn = op.ripple * fsw / op.duty
    return sn, sn * op.duty / (1.0 - op.duty)


def dcm_slopes(op: DcmPoint, fsw: float) -> tuple[np.ndarray, np.ndarray]:
    """Rising and falling inductor current slopes (A/s) of DCM corners: ipk/(D Ts), ipk/(D2 Ts)."""
    return op.i_peak * fsw / op.duty, op.i_peak * fsw / op.d2


def dcm_gid(stage: Stage, op: DcmPoint, gvd: Rational, slope_sensitivity: np.ndarray, i_l: np.ndarray) -> Rational:
    """Control-to-average-inductor-current of DCM corners (vg = 0), A per unit duty, reduced order.

    For comparison only; :mod:`.dcm_full` gives the one loopkit uses.

    Notes
    -----
    In DCM the inductor current is not a state of the reduced-order model
    (Erickson & Maksimovic, 2nd ed., ch. 11): its average over a period,
    ``iL = ipk (D + D2)/2 = Ts d^2 sn (sn + sf) / (2 sf)`` with ``ipk = sn d Ts``
    and ``D2 = sn d / sf``, follows d at once and v through the slopes:
    ``Gid = (2 iL / D) H_hf + (d iL/d v) Gvd``, with
    ``d ln iL / dv = sn_v/sn + (sn_v + sf_v)/(sn + sf) - sf_v/sf`` (``sn_v``,
    ``sf_v``: the slopes' sensitivities to v).  ``H_hf`` is the
    high-frequency pole 2 fsw/D2 of Sun et al. (2001), the lag of the inductor
    current in the full-order model; approximate above about fsw/10.
    """
    n = op.duty.shape[0]
    sn, sf = dcm_slopes(op, stage.fsw)
    sn_v, sf_v = slope_sensitivity[:, 0, 1], slope_sensitivity[:, 1, 1]
    dil_dv = i_l * (sn_v / sn + (sn_v + sf_v) / (sn + sf) - sf_v / sf)
    w2 = 2.0 * stage.fsw / op.d2
    hf = Rational.from_factors(2.0 * i_l / op.duty, (), np.stack([np.ones(n), 1.0 / w2], axis=1)[:, None, :])
    return hf + gvd * dil_dv


def dcm_gig_gii(
    stage: Stage, op: DcmPoint, gvg: Rational, zout: Rational, slope_sensitivity: np.ndarray, i_l: np.ndarray
) -> tuple[Rational, Rational]:
    """Line-to-inductor-current and output-injection-to-inductor-current of DCM corners (d = 0), reduced order.

    For comparison only; :mod:`.dcm_full` gives the ones loopkit uses.

    Notes
    -----
    As in :func:`dcm_gid`: ``iL = Ts d^2 sn (sn + sf)/(2 sf)`` moves with vg and v
    through the slopes, ``Gig = diL/dvg + (diL/dv) Gvg`` and
    ``Gii = (diL/dv) Zout`` (reduced-order model; the vg term carries the
    high-frequency pole of Sun et al. 2001 like Gvg does).
    """
    n = op.duty.shape[0]
    sn, sf = dcm_slopes(op, stage.fsw)

    def dlog(k):
        a, b = slope_sensitivity[:, 0, k], slope_sensitivity[:, 1, k]
        return i_l * (a / sn + (a + b) / (sn + sf) - b / sf)

    w2 = 2.0 * stage.fsw / op.d2
    direct = Rational.from_factors(dlog(0), (), np.stack([np.ones(n), 1.0 / w2], axis=1)[:, None, :])
    return direct + gvg * dlog(1), zout * dlog(1)
