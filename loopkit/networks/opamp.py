"""Shared algebra of the inverting op-amp networks (Type I, II, III).

An inverting network is three admittances around the op-amp's inverting input
``inv`` (the non-inverting input sits at the reference, an AC ground):

- ``Yi`` from the network input ``in`` to ``inv`` (R1, and R3-C3 for Type III),
- ``Yf`` from ``inv`` to the output ``out`` (C1, or R2-C1 with C2 across),
- ``Yg`` from ``inv`` to ground: the divider's bottom resistor Rb.

Each admittance is a pair of ascending polynomials in s (rad/s),
``Y = num(s) / den(s)``.  Kirchhoff's current law at ``inv`` with
``V(out) = -A(s) V(inv)`` gives::

    H = V(out)/V(in) = -Yi / (Yf + (Yi + Yf + Yg) / A)
                     = -(Zf/Zi) / (1 + (1 + Zf/Zi + Zf/Zg) / A)

``1 + Zf/Zi + Zf/Zg`` is the noise gain: the open-loop gain the network needs
from the amplifier.  With an ideal amplifier (A -> inf) Rb drops out and
``H = -Zf/Zi``; with a finite one Rb matters, most at low frequency, where the
dc gain of an integrating network becomes ``-A0 Rb / (R1 + Rb)``.

The amplifier (:class:`~loopkit.design.OpAmp`) is either ideal, a constant
gain A0, a pure gain-bandwidth integrator ``2 pi GBW / s``, or the one-pole
model ``A(s) = A0 / (1 + s A0 / (2 pi GBW))``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import polynomial as P

from ..design import OpAmp
from ..errors import DesignError, Finding
from ..rational import TWO_PI, Rational
from ..units import format_value
from . import spice

__all__ = [
    "GainNeed",
    "InvertingNetwork",
    "bottom_resistor",
    "check_frequencies",
    "check_parts",
    "check_targets",
    "dc_limit_hz",
    "divider_parts",
    "factor_rows",
    "fixed_r1",
    "gain_checks",
    "gain_need",
    "gain_need_finding",
    "inverting_netlist",
    "inverting_transfer",
    "noise_gain",
    "open_loop_gain",
    "open_loop_gain_polys",
    "shunt_of",
    "y_capacitor",
    "y_resistor",
    "y_series_rc",
    "y_sum",
]

Poly = np.ndarray
Admittance = tuple[Poly, Poly]

_NONE: Admittance = (np.array([0.0]), np.array([1.0]))


# ---------------------------------------------------------------------- admittances
def _coeffs(*values) -> Poly:
    """Ascending coefficients from values that are scalars (shape (k,)) or arrays over rows ((rows, k))."""
    return np.stack(np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in values)), axis=-1)


def _pmul(a: Poly, b: Poly) -> Poly:
    """Product of ascending polynomials, (k,) or (rows, k) each (numpy's polymul, row by row)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    if a.ndim == 1 and b.ndim == 1:
        return P.polymul(a, b)
    a, b = np.atleast_2d(a), np.atleast_2d(b)
    out = np.zeros((max(a.shape[0], b.shape[0]), a.shape[1] + b.shape[1] - 1))
    for i in range(a.shape[1]):
        out[:, i : i + b.shape[1]] += a[:, i : i + 1] * b
    return out


def _padd(a: Poly, b: Poly) -> Poly:
    """Sum of ascending polynomials, (k,) or (rows, k) each."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    if a.ndim == 1 and b.ndim == 1:
        return P.polyadd(a, b)
    a, b = np.atleast_2d(a), np.atleast_2d(b)
    k = max(a.shape[1], b.shape[1])
    return np.pad(a, ((0, 0), (0, k - a.shape[1]))) + np.pad(b, ((0, 0), (0, k - b.shape[1])))


def factor_rows(pairs) -> np.ndarray:
    """Factors ``[(a0, a1), ...]`` whose values are scalars or arrays over rows, as (k, 2) or (rows, k, 2)."""
    cols = [np.stack(np.broadcast_arrays(np.asarray(a0, float), np.asarray(a1, float)), axis=-1) for a0, a1 in pairs]
    return np.stack(np.broadcast_arrays(*cols), axis=-2)


def y_resistor(r_ohm: float) -> Admittance:
    """Admittance of a resistor, ``1 / R`` (values may be arrays over rows, as everywhere here)."""
    return _coeffs(np.ones_like(np.asarray(r_ohm, float))), _coeffs(r_ohm)


def y_capacitor(c_f: float) -> Admittance:
    """Admittance of a capacitor, ``s C``."""
    return _coeffs(0.0 * np.asarray(c_f, float), c_f), np.array([1.0])


def y_series_rc(r_ohm: float, c_f: float) -> Admittance:
    """Admittance of R in series with C, ``s C / (1 + s R C)``."""
    rc = np.asarray(r_ohm, float) * np.asarray(c_f, float)
    return _coeffs(0.0 * rc, c_f), _coeffs(np.ones_like(rc), rc)


def y_sum(*ys: Admittance) -> Admittance:
    """Parallel connection: the sum of admittances, over a common denominator."""
    num, den = np.array([0.0]), np.array([1.0])
    for n, d in ys:
        num = _padd(_pmul(num, d), _pmul(n, den))
        den = _pmul(den, d)
    return num, den


@dataclass(frozen=True, eq=False)
class InvertingNetwork:
    """The three admittances of an inverting op-amp network (see the module notes).

    Attributes
    ----------
    yi, yf, yg : tuple of ndarray
        ``(num, den)`` ascending polynomials in s (rad/s), admittances in S:
        input (in -> inv), feedback (inv -> out), shunt (inv -> ground).
    """

    yi: Admittance
    yf: Admittance
    yg: Admittance = _NONE

    def evaluate(self, f_hz) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``Yi, Yf, Yg`` at ``f_hz`` (complex arrays)."""
        s = 1j * TWO_PI * np.asarray(f_hz, dtype=float)

        def ev(y):
            return P.polyval(s, y[0]) / P.polyval(s, y[1])

        return ev(self.yi), ev(self.yf), ev(self.yg)


# ---------------------------------------------------------------------- the amplifier
def open_loop_gain_polys(opamp: OpAmp | None) -> tuple[Poly, Poly] | None:
    """``A(s) = an(s) / ad(s)`` as ascending polynomials, or None when ideal.

    Parameters
    ----------
    opamp : OpAmp or None
        ``gain_db`` (dc open-loop gain A0, dB; 0 = infinite) and ``gbw``
        (gain-bandwidth product, Hz; 0 = infinite).

    Returns
    -------
    tuple of ndarray or None
        ``(an, ad)``: ``(A0, 1 + s A0/(2 pi GBW))``, ``(A0, 1)`` without GBW,
        ``(2 pi GBW, s)`` without dc gain; None for an ideal amplifier.
    """
    if opamp is None or opamp.ideal:
        return None
    wt = TWO_PI * np.asarray(opamp.gbw, float)  # gbw may be an array over rows (a tolerance study)
    if opamp.gain_db > 0:
        a0 = 10.0 ** (opamp.gain_db / 20.0)
        if np.all(wt > 0):
            return np.array([a0]), _coeffs(np.ones_like(wt), a0 / wt)
        return np.array([a0]), np.array([1.0])
    return _coeffs(wt), np.array([0.0, 1.0])


def open_loop_gain(opamp: OpAmp | None, f_hz) -> np.ndarray:
    """Complex open-loop gain ``A(j 2 pi f)``; ``inf`` everywhere when ideal."""
    f = np.asarray(f_hz, dtype=float)
    polys = open_loop_gain_polys(opamp)
    if polys is None:
        return np.full(f.shape, np.inf + 0j)
    s = 1j * TWO_PI * f
    with np.errstate(divide="ignore"):
        return P.polyval(s, polys[0]) / P.polyval(s, polys[1])


# ---------------------------------------------------------------------- transfer
def inverting_transfer(net: InvertingNetwork, opamp: OpAmp | None = None) -> Rational:
    """V(out)/V(in) of an inverting network as a one-corner :class:`Rational`.

    Parameters
    ----------
    net : InvertingNetwork
        The network's admittances.
    opamp : OpAmp or None
        Amplifier; None or ideal gives ``-Yi/Yf`` (Rb has no effect).

    Returns
    -------
    Rational

    Notes
    -----
    With ``Yk = nk/dk`` and ``A = an/ad``, multiplying through by
    ``di df dg``::

        H = -an ni df dg / (an nf di dg + ad (ni df dg + nf di dg + ng di df))

    (the module notes give the nodal equation it comes from).
    """
    (ni, di), (nf, df), (ng, dg) = net.yi, net.yf, net.yg
    polys = open_loop_gain_polys(opamp)
    if polys is None:
        return Rational.from_polys(-_pmul(ni, df), _pmul(di, nf))
    an, ad = polys
    num = -_pmul(an, _pmul(ni, _pmul(df, dg)))
    total = _padd(_padd(_pmul(ni, _pmul(df, dg)), _pmul(nf, _pmul(di, dg))), _pmul(ng, _pmul(di, df)))
    den = _padd(_pmul(an, _pmul(nf, _pmul(di, dg))), _pmul(ad, total))
    return Rational.from_polys(_trim(num), _trim(den))


def _trim(p: Poly) -> Poly:
    """Drop highest-order coefficients that are exactly zero (in every row; keep at least one)."""
    p = np.asarray(p, dtype=float)
    if p.ndim == 1:
        p = np.trim_zeros(p, "b")
        return p if p.size else np.array([0.0])
    nonzero = np.nonzero(np.any(p != 0, axis=0))[0]
    return p[:, : nonzero[-1] + 1] if nonzero.size else p[:, :1]


def noise_gain(net: InvertingNetwork, f_hz) -> np.ndarray:
    """Complex noise gain ``1 + Zf/Zi + Zf/Zg = (Yi + Yf + Yg) / Yf`` at ``f_hz``."""
    yi, yf, yg = net.evaluate(f_hz)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (yi + yf + yg) / yf


@dataclass(frozen=True, eq=False)
class GainNeed:
    """Open-loop gain the network needs vs what the op-amp has, on a grid.

    Attributes
    ----------
    f_hz : ndarray (nf,)
        Frequencies, Hz.
    needed_db : ndarray (nf,)
        ``|1 + Zf/Zi + Zf/Zg|`` (noise gain) in dB.  The response is the ideal
        one times ``1 / (1 + NG/A)``: where ``|A|`` falls to ``|NG|`` it is off
        by up to 6 dB, and it is set by the op-amp rather than by the parts.
    available_db : ndarray (nf,)
        ``|A(j 2 pi f)|`` in dB (``inf`` for an ideal amplifier).
    dc_region_hz : float
        Below this frequency a shortfall only limits the network's dc gain
        (see :func:`gain_need`) and is not counted in :attr:`short`.
    gbw_hz : float
        The op-amp's gain-bandwidth (inf when not given): at and above it the
        op-amp has no gain to spare for any circuit (every network's noise
        gain tends to 1 at high frequency), so it bounds :attr:`short`.
    """

    f_hz: np.ndarray
    needed_db: np.ndarray
    available_db: np.ndarray
    dc_region_hz: float = 0.0
    gbw_hz: float = np.inf

    @property
    def shortfall_db(self) -> np.ndarray:
        """``needed_db - available_db`` (positive where the op-amp falls short)."""
        return self.needed_db - self.available_db

    @property
    def short(self) -> np.ndarray:
        """Boolean (nf,): between :attr:`dc_region_hz` and :attr:`gbw_hz`, the network needs more gain than the op-amp has."""
        return (self.needed_db > self.available_db) & (self.f_hz >= self.dc_region_hz) & (self.f_hz < self.gbw_hz)

    def first_short_hz(self) -> float | None:
        """Lowest frequency of :attr:`short`, Hz, or None when the op-amp has enough gain."""
        short = self.short
        return float(self.f_hz[short].min()) if np.any(short) else None


def dc_limit_hz(net: InvertingNetwork, opamp: OpAmp | None) -> float:
    """Where an integrating network's low-frequency noise gain reaches the op-amp's dc gain.

    At low frequency an integrating network has ``NG ~ G0 / (s Cf)`` with
    ``G0 = Yi(0) + Yg(0)`` and ``Cf = dYf/ds (0)``; it equals A0 at
    ``G0 / (2 pi Cf A0)``.  Returns 0 for a non-integrating network or an
    amplifier without a finite dc gain.
    """
    polys = open_loop_gain_polys(opamp)
    (ni, di), (nf, df), (ng, dg) = net.yi, net.yf, net.yg
    if polys is None or opamp.gain_db <= 0 or nf[0] != 0 or nf.size < 2:
        return 0.0
    a0 = 10.0 ** (opamp.gain_db / 20.0)
    g0 = ni[0] / di[0] + ng[0] / dg[0]
    cf = nf[1] / df[0]
    return float(g0 / (TWO_PI * cf * a0))


def gain_need(net: InvertingNetwork, opamp: OpAmp | None, f_hz, lowest_zero_hz: float = np.inf) -> GainNeed:
    """Compare the network's noise gain with the op-amp's open-loop gain.

    Parameters
    ----------
    net : InvertingNetwork
    opamp : OpAmp or None
    f_hz : array_like
        Frequencies to check, Hz.
    lowest_zero_hz : float
        The network's lowest zero (Hz); the dc region never extends above it.

    Returns
    -------
    GainNeed
        With ``dc_region_hz = min(10 f_dc, lowest_zero_hz)``, ``f_dc`` from
        :func:`dc_limit_hz`, and ``gbw_hz`` the op-amp's gain-bandwidth.

    Notes
    -----
    An integrating network needs unbounded gain as f -> 0, so with a finite
    A0 it is always short at low frequency: the loop's dc gain is then finite
    (about ``A0 Rb/(R1 + Rb)`` for the network) rather than infinite, which
    sets dc accuracy, not stability.  Up to ten times the frequency where the
    noise gain meets A0 (there NG = A0/10 and the response is within 0.9 dB
    of the ideal; our choice, no source) such a shortfall is not reported.
    Above it, a shortfall means the op-amp, not the parts, sets the response
    (common practice, no source: the op-amp's gain should exceed the noise
    gain wherever the loop's phase matters).  At and above the gain-bandwidth
    product the op-amp has no gain left for any circuit; the finite-gain
    transfer function (:func:`inverting_transfer`) still shows its effect.
    """
    f = np.asarray(f_hz, dtype=float)
    with np.errstate(divide="ignore"):
        needed = 20.0 * np.log10(np.abs(noise_gain(net, f)))
        available = 20.0 * np.log10(np.abs(open_loop_gain(opamp, f)))
    region = min(10.0 * dc_limit_hz(net, opamp), float(lowest_zero_hz))
    gbw = opamp.gbw if opamp is not None and opamp.gbw > 0 else np.inf
    return GainNeed(f, needed, available, region, float(gbw))


def gain_need_finding(need: GainNeed, corner: int | None = None) -> Finding | None:
    """A warning naming the frequency of the worst shortfall, or None when there is none."""
    if not np.any(need.short):
        return None
    i = int(np.argmax(np.where(need.short, need.shortfall_db, -np.inf)))
    band = need.f_hz[need.short]
    return Finding(
        code="opamp-gain-short",
        message=(
            f"the network needs {need.needed_db[i]:.1f} dB of open-loop gain at "
            f"{format_value(need.f_hz[i], 'Hz')} but the op-amp has {need.available_db[i]:.1f} dB "
            f"(short from {format_value(band.min(), 'Hz')} to {format_value(band.max(), 'Hz')}): "
            "use an op-amp with more gain-bandwidth or lower the network's high-frequency gain"
        ),
        corner=corner,
    )


# ---------------------------------------------------------------------- parts
def check_parts(parts: dict, needed: tuple[str, ...], network: str) -> dict:
    """Validated float values of the designators in ``needed``.

    Raises
    ------
    DesignError
        A part is missing, not a number, not finite or not > 0.
    """
    out = {}
    for name in needed:
        if name not in parts:
            raise DesignError(f"compensator.parts.{name}", "missing", f"{network} needs {', '.join(needed)}")
        value = parts[name]
        if isinstance(value, np.ndarray) and value.ndim == 1:  # values over rows (a tolerance study)
            if not np.all(np.isfinite(value) & (value > 0)):
                raise DesignError(f"compensator.parts.{name}", format_value(float(np.min(value))),
                                  "must be a finite value > 0 in every row")
            out[name] = value.astype(float)
            continue
        try:
            v = float(value)
        except (TypeError, ValueError):
            raise DesignError(f"compensator.parts.{name}", value, "must be a number") from None
        if not (math.isfinite(v) and v > 0):
            raise DesignError(f"compensator.parts.{name}", value, "must be a finite value > 0")
        out[name] = v
    return out


def bottom_resistor(r1_ohm: float, vref: float, v_sensed: float) -> float | None:
    """Divider bottom resistor ``Rb = R1 vref / (v_sensed - vref)``, or None.

    None when ``v_sensed`` equals ``vref`` (within 1e-9 relative): the input
    already sits at the reference (e.g. a differential amplifier's output)
    and no bottom resistor is needed.

    Raises
    ------
    DesignError
        ``v_sensed`` is below ``vref``: a divider cannot raise a voltage.
    """
    if abs(v_sensed - vref) <= 1e-9 * abs(vref):
        return None
    if v_sensed < vref:
        raise DesignError(
            "sensing.reference",
            format_value(vref, "V"),
            f"must not exceed the sensed voltage {format_value(v_sensed, 'V')}: a divider cannot raise a voltage",
        )
    return r1_ohm * vref / (v_sensed - vref)


def divider_parts(r1_ohm: float, ctx) -> dict:
    """``{"Rb": ...}`` for the context's divider, or ``{}`` when none is needed."""
    rb = bottom_resistor(r1_ohm, ctx.vref, ctx.v_sensed)
    return {} if rb is None else {"Rb": rb}


def shunt_of(parts: dict, ctx) -> Admittance:
    """``Yg`` of the network: Rb from ``parts``, else computed from the context."""
    if "Rb" in parts:
        return y_resistor(check_parts(parts, ("Rb",), "the divider")["Rb"])
    rb = bottom_resistor(check_parts(parts, ("R1",), "the divider")["R1"], ctx.vref, ctx.v_sensed)
    return _NONE if rb is None else y_resistor(rb)


def inverting_netlist(elements: list[str], parts: dict, ctx, title: str, comments: list[str] = ()) -> str:
    """Deck of an inverting network: adds Rb, the reference and the op-amp U1.

    ``elements`` use nodes ``in``, ``inv`` (inverting input) and ``out``.
    """
    lines = list(elements)
    rb = parts.get("Rb")
    if rb is None:
        rb = bottom_resistor(float(parts["R1"]), ctx.vref, ctx.v_sensed)
    if rb is not None:
        lines.append(f"Rb inv 0 {spice.spice_number(rb)}")
    lines.append(f"Vref ref 0 DC {spice.spice_number(ctx.vref)}")
    lines.append(f"XU1 ref inv out {spice.OPAMP_SUBCKT}")
    op = ctx.opamp
    note = (
        f"ideal op-amp (VCVS of gain {spice.IDEAL_GAIN:g})"
        if op.ideal
        else f"op-amp: {op.gain_db:g} dB open-loop gain, GBW {op.gbw:g} Hz"
    )
    return spice.ac_deck(
        title,
        lines,
        v_in_dc=ctx.v_sensed,
        subcircuits=spice.opamp_subcircuit(op),
        comments=list(comments) + [note],
    )


# ---------------------------------------------------------------------- synthesis inputs
def check_targets(network: str, fc_hz: float, gain_at_fc: float) -> tuple[float, float]:
    """Validated crossover (Hz) and required gain magnitude at it (V/V)."""
    fc, g = float(fc_hz), float(gain_at_fc)
    if not (math.isfinite(fc) and fc > 0):
        raise DesignError("compensator.fc", fc_hz, f"{network}: must be a finite frequency > 0 Hz")
    if not (math.isfinite(g) and g > 0):
        raise DesignError(
            "compensator.placement.gain", gain_at_fc, f"{network}: gain at fc must be finite and > 0 (V/V)"
        )
    return fc, g


def check_frequencies(network: str, values, names: tuple[str, ...], kind: str) -> tuple[float, ...]:
    """``values`` as floats, one per name, each finite and > 0 Hz."""
    vals = tuple(values)
    if len(vals) != len(names):
        raise DesignError(
            f"compensator.placement.{kind}", vals, f"{network} places {len(names)} {kind}: {', '.join(names)}"
        )
    out = []
    for name, v in zip(names, vals):
        try:
            f = float(v)
        except (TypeError, ValueError):
            raise DesignError(f"compensator.placement.{name}", v, "must be a frequency in Hz") from None
        if not (math.isfinite(f) and f > 0):
            raise DesignError(f"compensator.placement.{name}", v, f"{network}: must be a finite frequency > 0 Hz")
        out.append(f)
    return tuple(out)


def fixed_r1(network: str, fixed: dict) -> float:
    """The designer's input resistor R1 from ``fixed`` (required)."""
    if fixed is None or "R1" not in fixed:
        raise DesignError(
            "compensator.parts.R1", "missing", f"{network} synthesis needs R1 (the divider's top resistor) fixed"
        )
    return check_parts(fixed, ("R1",), network)["R1"]


def gain_checks(inverting_network, poles_zeros):
    """``gain_need`` and ``gain_shortfall`` functions of an inverting network module.

    ``gain_need(parts, ctx, f_hz)`` compares the network's noise gain with the
    op-amp's gain (see :func:`gain_need`); ``gain_shortfall(parts, ctx, f_hz)``
    is the lowest frequency (Hz) at which the network needs more gain than the
    op-amp has, or None.  The low-frequency band where an integrator merely
    meets the op-amp's dc gain is not counted; it ends at the network's lowest
    zero at the latest.
    """

    def need(parts: dict, ctx, f_hz):
        zeros = poles_zeros(parts, ctx)[0]
        return gain_need(inverting_network(parts, ctx), ctx.opamp, f_hz, min(zeros) if zeros else np.inf)

    def shortfall(parts: dict, ctx, f_hz) -> float | None:
        return need(parts, ctx, f_hz).first_short_hz()

    need.__doc__ = "Noise gain vs op-amp gain on ``f_hz`` (see :func:`loopkit.networks.opamp.gain_need`)."
    shortfall.__doc__ = "Lowest frequency (Hz) where the network needs more gain than the op-amp has, or None."
    return need, shortfall
