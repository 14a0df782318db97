"""Full-order averaged model of a PWM stage in DCM: the inductor current kept as a state.

The model of Sun et al. (2001) with one more term in the inductor current's
dynamics (derived below from the switched circuit), so it holds to fsw/3.

Every DCM stage here runs three intervals per period Ts: the switch on for
``d Ts`` (inductor voltage ``a``, current rising at ``sn = a/L`` to
``ipk = sn d Ts``), the rectifier on for ``d2 Ts`` (inductor voltage ``-b``,
falling at ``sf = b/L``; flyback: primary-referred), then zero current.  The
full-order model of J. Sun, D. M. Mitchell, M. F. Greuel, P. T. Krein and
R. M. Bass, "Averaged modeling of PWM converters operating in discontinuous
conduction mode", IEEE Trans. Power Electronics 16(4), 482-492, 2001 (from
memory; REFERENCES.md [S01]) keeps the average inductor current ``iL`` as a
state and eliminates ``d2`` through the current constraint
``iL = ipk (d + d2)/2``::

    d2 = 2 L iL / (d Ts a) - d                                         (C)
    L diL/dt = d a - d2 b = d (a + b) - 2 L iL b / (d Ts a)              (I)

and writes the output-node current through ``iL`` (the "corrected" average
current of the rectifier, ``iL d2/(d + d2)``, rather than ``ipk d2/2`` with ipk
from d alone)::

    buck-type (output fed in both intervals):  i_o = iL
    boost-type (fed while the rectifier conducts):
        i_o = sigma k iL d2/(d + d2) = sigma k (iL - d^2 Ts a/(2 L))      (O)

with ``k`` the current ratio (1, or n = Np/Ns for the flyback) and ``sigma = -1``
where the current leaves the output node (inverting buck-boost).  The second
form of (O) follows from (C): ``d/(d + d2) = d^2 Ts a/(2 L iL)``, i.e. the
rectifier's average is the inductor's less the switch's ``d^2 Ts a/(2L)``.

Linearisation (our derivation)
------------------------------
At the operating point (C) gives ``D + D2 = 2 L IL/(D Ts a)`` and the volt-second
balance ``D a = D2 b``.  The partial derivatives of the right side of (I) are
then, divided by L::

    d/diL : -2 b/(D Ts a) = -2/(D2 Ts) = -w2            (the pole 2 fsw/D2, rad/s)
    d/dd  : (a + b) + (D + D2) b/D = 2 (a + b),  so e_d = 2 (sn + sf)
    d/da  : D + (D + D2) b/a = D (D + 2 D2)/D2 = f_a
    d/db  : D - (D + D2) = -D2 = f_b

and ``a``, ``b`` move with vg and v by the slope sensitivities of the topology
module (``L dsn/dvg`` ...): ``e_g = f_a sn_vg + f_b sf_vg``, ``e_v = f_a sn_v +
f_b sf_v`` (A/s per V).  From (O): ``g_i = sigma k``, ``g_d = -sigma k ipk``,
``g_g = -sigma k D^2 Ts sn_vg / 2``, ``g_v = -sigma k D^2 Ts sn_v / 2``; for
buck-type stages ``g_i = 1`` and the others vanish.

The inductor current's dynamics: the second-order term (our addition)
---------------------------------------------------------------------
Sun et al.'s state equation gives the inductor current the lag ``w2/(s + w2)``.
The switched circuit says what that lag stands for: with the current starting
from zero every period, a turn-off delayed by ``dt`` raises the whole fall
interval's current by ``(sn + sf) dt`` for ``D2 Ts`` (a rectangle; boost-type
stages also lose the pulse ``ipk dt`` at the turn-off, the ``g_d`` term).  A
rectangle of length ``D2 Ts`` has the transform ``R = (1 - e^-x)/x``, ``x = s D2 Ts``,
and ``1/R = x/(1 - e^-x) = 1 + x/2 + x^2/12 - x^4/720 ...`` (the Bernoulli
numbers' generating function).  Sun's lag keeps ``1 + x/2``; at fsw/3 with
D2 = 0.46 its magnitude is then 0.8 dB low (measured against ngspice, where this
model is within 0.1 dB / 1 deg).  We keep the next term too, so the inductor
current obeys, instead of ``(s + w2) i``::

    Z(s) i = e_d d + e_g vg + e_v v,    Z(s) = w2 (1 + x/2 + x^2/12)
                                             = w2 + s + s^2/(3 w2)           (1)
    Y_o(s) v = g_i i + g_d d + g_g vg + g_v v + i_inj                        (2)

(the neglected term is ``x^4/720``: 0.01 dB at fsw/3 for D2 = 0.46).  ``Z(0) = w2``
and ``Z'(0) = 1`` are Sun's: the low-frequency limit and the first-order term
are unchanged.  ``Z`` has a pole pair at ``|s| = sqrt(3) w2`` with ``Q = 1/sqrt(3)``.
The vg and v terms act through other shapes of current (ramps in the on- and
fall intervals), for which ``Z`` is the same first-order approximation as
Sun's; they set the output pole and matter little near fsw, where ``Y_o``
dwarfs them.

This is the form of the CCM equations of :mod:`.base` (with ``L = 1`` and ``Z``
for ``s L + r_series``) plus the terms ``g_g`` and ``g_v``.  With ``Y_o = ny/dy``
and ``ny' = ny - g_v dy``, the characteristic polynomial is
``Z ny' - e_v g_i dy`` and::

    Gvd  = (g_i e_d + g_d Z) dy / char
    Gvg  = (g_i e_g + g_g Z) dy / char
    Zout = Z dy / char
    Gid  = (e_d ny' + e_v g_d dy) / char,   Gig = (e_g ny' + e_v g_g dy) / char,
    Gii  = e_v dy / char

The right-half-plane zero.  Buck-type stages have ``g_d = 0``: no zero.  In
boost-type stages Gvd's zeros solve ``g_d Z(s) = -g_i e_d``, i.e.
``Z(s) = 2 (sn + sf)/ipk``; with ``ipk w2 = 2 ipk fsw/D2 = 2 sf`` that is
``s + s^2/(3 w2) = 2 sn/ipk = 2/(D Ts) = zS`` (``zS`` the zero of Sun's model,
where ``Z = s + w2``: ``f = fsw/(pi D)``).  The right-half-plane root is::

    s_z = (3 w2 / 2) (sqrt(1 + 4 zS/(3 w2)) - 1)
        = (3 fsw / D2) (sqrt(1 + 4 D2/(3 D)) - 1)     rad/s

(and a left-half-plane zero at ``-(3 fsw/D2)(sqrt(1 + 4 D2/(3 D)) + 1)``), for
the boost, the inverting buck-boost, the flyback and the four-switch stage in
boost mode, whatever the losses (they enter ``a`` and ``b`` only, and cancel).
As D2/D -> 0 it tends to Sun's ``2 fsw/D``; the rectangle itself puts it where
``x/(1 - e^-x) = 1 + D2/D``.  At light load D is small and the zero lies near or
above fsw, yet it takes 10 to 25 deg of phase at fsw/3, which the reduced-order
model misses.

The low-frequency limit.  At ``s -> 0`` (1) gives ``i = (e_d d + e_g vg + e_v v)/w2``
and (2) becomes the averaged switch model of Erickson & Maksimovic, 2nd ed.,
ch. 11, ``i_o = j2 d + g2 vg - v/r2`` (e.g. the boost: ``g_i e_d/w2 + g_d =
ipk a/b = 2 Io/D = j2``), so the dc gains equal the reduced-order model's
(tests/test_dcm_full.py checks 1e-6 for every topology).

Conduction losses are carried as in the operating point: the resistive drops at
each triangle's mean current (and the output's rise through R || ESR during the
pulse) are held in ``a`` and ``b`` and do not move with the small signals, as in
the reduced-order parameters ``j2, g2, r2`` of the topology modules.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..design import Stage
from ..rational import TWO_PI, Rational, _roots_as_factors
from .base import DcmPoint, _bank_factors, _over_char, dcm_slopes, output_admittance

__all__ = [
    "DcmCoefficients",
    "coefficients",
    "current_transfer_functions",
    "hf_pole_hz",
    "rhp_zero_hz",
    "transfer_functions",
]


@dataclass(frozen=True)
class DcmCoefficients:
    """Coefficients of the full-order DCM equations (1) and (2), one entry per corner.

    ``w2`` in rad/s; ``e_d`` in A/s per unit duty, ``e_g``, ``e_v`` in A/s per V
    (equation (1) is divided by L); ``g_i`` in A/A, ``g_d`` in A per unit duty,
    ``g_g``, ``g_v`` in A/V (siemens).
    """

    w2: np.ndarray
    e_d: np.ndarray
    e_g: np.ndarray
    e_v: np.ndarray
    g_i: np.ndarray
    g_d: np.ndarray
    g_g: np.ndarray
    g_v: np.ndarray


def coefficients(op: DcmPoint, fsw_hz: float, slope_sensitivity: np.ndarray) -> DcmCoefficients:
    """Linearised full-order DCM model of Sun et al. (2001) at each corner.

    Parameters
    ----------
    op : DcmPoint
        DCM operating point (``duty``, ``d2``, ``i_peak``, ``sign``, ``turns``,
        ``fed_while_on``).
    fsw_hz : float
        Switching frequency, Hz.
    slope_sensitivity : ndarray (corners, 2, 2) or (2, 2)
        ``[[dsn/dvg, dsn/dv], [dsf/dvg, dsf/dv]]``, 1/H (the topology module's).

    Returns
    -------
    DcmCoefficients

    Notes
    -----
    Derived in the module notes from the current constraint (C), the inductor
    equation (I) and the output current (O).  ``w2`` is Sun's pole; the
    transfer functions use ``Z(s) = w2 + s + s^2/(3 w2)`` built from it.
    """
    d, d2, ipk = (np.asarray(x, float) for x in (op.duty, op.d2, op.i_peak))
    sens = np.broadcast_to(np.asarray(slope_sensitivity, float), d.shape + (2, 2))
    sn, sf = dcm_slopes(op, fsw_hz)
    ts = 1.0 / fsw_hz
    f_a = d * (d + 2.0 * d2) / d2
    f_b = -d2
    e_g = f_a * sens[:, 0, 0] + f_b * sens[:, 1, 0]
    e_v = f_a * sens[:, 0, 1] + f_b * sens[:, 1, 1]
    gain = op.sign * op.turns
    ones, zeros = np.ones_like(d), np.zeros_like(d)
    if op.fed_while_on:
        g_i, g_d, g_g, g_v = ones, zeros, zeros, zeros
    else:
        g_i = gain * ones
        g_d = -gain * ipk
        g_g = -gain * d**2 * ts * sens[:, 0, 0] / 2.0
        g_v = -gain * d**2 * ts * sens[:, 0, 1] / 2.0
    return DcmCoefficients(
        w2=2.0 * fsw_hz / d2, e_d=2.0 * (sn + sf), e_g=e_g, e_v=e_v, g_i=g_i, g_d=g_d, g_g=g_g, g_v=g_v
    )


def _inductor_poly(c: DcmCoefficients) -> np.ndarray:
    """``Z(s) = w2 + s + s^2/(3 w2)`` (ascending, (corners, 3)): the inductor current's dynamics."""
    return np.stack([c.w2, np.ones_like(c.w2), 1.0 / (3.0 * c.w2)], axis=1)


def _polys(stage: Stage, c: DcmCoefficients, r_load: np.ndarray):
    """(ny', dy, char, Z): the output admittance less g_v, the characteristic polynomial, Z(s)."""
    ny, dy = output_admittance(stage, r_load)
    nyp = ny - c.g_v[:, None] * dy
    z = _inductor_poly(c)
    n, m = nyp.shape
    char = np.zeros((n, m + z.shape[1] - 1))
    for k in range(z.shape[1]):
        char[:, k : k + m] += z[:, k : k + 1] * nyp
    char[:, :m] -= (c.e_v * c.g_i)[:, None] * dy
    return nyp, dy, char, z


def _poly_times_banks(stage: Stage, poly: np.ndarray, char: np.ndarray) -> Rational:
    """``poly(s) prod(1 + s ESR_k C_k) / char``."""
    gain, factors = _roots_as_factors(poly)
    return _over_char(gain, np.concatenate([factors, _bank_factors(stage, poly.shape[0])], axis=1), char)


def transfer_functions(
    stage: Stage, op: DcmPoint, r_load: np.ndarray, slope_sensitivity: np.ndarray
) -> tuple[Rational, Rational, Rational]:
    """Gvd (V per unit duty), Gvg (V/V) and Zout (ohm, load included) of DCM corners, full order.

    Parameters
    ----------
    stage : Stage
    op : DcmPoint
    r_load : ndarray
        Load resistance of each corner, ohm.
    slope_sensitivity : ndarray (corners, 2, 2)
        The topology module's slope sensitivities, 1/H.

    Returns
    -------
    gvd, gvg, zout : Rational

    Notes
    -----
    Sun et al., IEEE TPEL 16(4), 2001, with the second-order term of the
    inductor current's dynamics; the equations and the derivation of the RHP
    zero of boost-type stages are in the module notes.
    """
    c = coefficients(op, stage.fsw, slope_sensitivity)
    _, _, char, z = _polys(stage, c, r_load)
    gvd = _poly_times_banks(stage, c.g_d[:, None] * z + np.pad((c.g_i * c.e_d)[:, None], ((0, 0), (0, 2))), char)
    gvg = _poly_times_banks(stage, c.g_g[:, None] * z + np.pad((c.g_i * c.e_g)[:, None], ((0, 0), (0, 2))), char)
    zout = _poly_times_banks(stage, z, char)
    return gvd, gvg, zout


def current_transfer_functions(
    stage: Stage, op: DcmPoint, r_load: np.ndarray, slope_sensitivity: np.ndarray
) -> tuple[Rational, Rational, Rational]:
    """Gid (A per unit duty), Gig (A/V) and Gii (A/A) of DCM corners, full order.

    The average inductor current (flyback: magnetising, primary side) per duty,
    per input voltage and per current injected into the output node, the other
    two inputs held at zero.

    Notes
    -----
    From equations (1) and (2) of the module notes: ``i char = (e_d ny' + e_v
    g_d dy) d + (e_g ny' + e_v g_g dy) vg + e_v dy i_inj``, ``char = Z ny' - e_v g_i dy``.
    """
    c = coefficients(op, stage.fsw, slope_sensitivity)
    nyp, dy, char, _ = _polys(stage, c, r_load)
    n = c.w2.shape[0]

    def over_char(num):
        gain, factors = _roots_as_factors(num)
        return _over_char(gain, factors, char)

    gid = over_char(c.e_d[:, None] * nyp + (c.e_v * c.g_d)[:, None] * dy)
    gig = over_char(c.e_g[:, None] * nyp + (c.e_v * c.g_g)[:, None] * dy)
    gii = _over_char(c.e_v * dy[:, 0], _bank_factors(stage, n), char)
    return gid, gig, gii


def rhp_zero_hz(gvd: Rational) -> np.ndarray:
    """The right-half-plane zero of each corner's Gvd, Hz (NaN where there is none).

    Read off the model's numerator (a real zero with positive real part); the
    module notes derive it at ``(3 fsw/D2)(sqrt(1 + 4 D2/(3 D)) - 1)`` rad/s for
    boost-type stages.
    """
    z = gvd.zeros_hz()
    real_rhp = np.isfinite(z) & (z.real > 0) & (np.abs(z.imag) <= 1e-9 * np.abs(z))
    return np.where(np.any(real_rhp, axis=1), np.max(np.where(real_rhp, z.real, -np.inf), axis=1), np.nan)


def hf_pole_hz(gvd: Rational, op: DcmPoint, fsw_hz: float) -> np.ndarray:
    """The high-frequency poles of each corner's Gvd, Hz: the magnitude of the pole nearest ``sqrt(3) 2 fsw/D2`` rad/s.

    ``Z(s) = w2 + s + s^2/(3 w2)`` of equation (1) has its pole pair at
    ``|s| = sqrt(3) w2`` (``w2 = 2 fsw/D2``, the single pole of Sun et al.);
    coupled with the output network it moves a little (by about the output
    pole over it, relatively), and this is the model's pole it becomes.
    """
    nominal = np.sqrt(3.0) * 2.0 * fsw_hz / np.asarray(op.d2, float) / TWO_PI
    p = np.abs(gvd.poles_hz())
    dist = np.where(np.isfinite(p), np.abs(np.log(np.where(p > 0, p, 1e-300) / nominal[:, None])), np.inf)
    return np.take_along_axis(p, np.argmin(dist, axis=1)[:, None], axis=1)[:, 0]
