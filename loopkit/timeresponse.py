"""The closed loop in time: load, input-voltage and reference steps at every corner.

From a :class:`~loopkit.loop.LoopResult` the closed-loop transfers of every
corner are built as factored :class:`~loopkit.rational.Rational` functions and
simulated exactly for a step whose rise is a straight ramp (a load current's
slew rate, a reference's soft change).

Closed-loop relations (sign convention of :mod:`loopkit.loop`: ``Tu = H Fm Gvd``,
``T = -Tu Gc``, the network ``Gc`` inverting; ``H`` the sensing, ``H0`` its dc
gain).  Around the operating point::

    v = Gvd d + Gvg vg + Zout i_inj          i_inj = -sign(Vout) (load current rise)
    d = Fm vc,   vc = Gc (H v - H0 r)         (voltage mode)

with ``r`` the output set-point change in volts (``H0 r`` at the comparison
node).  Eliminating ``d``::

    v / i_load = -sign(Vout) Zout / (1 + T)  (:func:`loopkit.loop.closed_loop` "zout")
    v / vg     =  Gvg / (1 + T)              (:func:`loopkit.loop.closed_loop` "gvg")
    v / r      =  T / (1 + T) * H0 / H

and, in voltage mode, the duty and the inductor current::

    d = Fm Gc H v             (load and line steps)
    d = -Fm Gc H0 r / (1 + T) (reference step)
    i = Gid d + Gig vg + Gii i_inj

(a load on a negative output draws its current out of ground into the output
node, so there a rise of the load's magnitude injects current: the output
moves toward zero, its magnitude drops as on a positive rail).

(Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed., 2001,
ch. 9: closed-loop output impedance and line-to-output as the open-loop
figures over ``1 + T``; the duty and current follow from the same block
diagram.)  In peak current mode ``Zout``, ``Gvg`` are the stage's with the
current loop closed (:mod:`loopkit.schemes.peak_current`), so the output
voltage follows for every scheme; the duty and inductor current are given
for voltage mode only (current mode would need the modulator's feedback
gains and sampling gain inside the duty; not modelled here).

The reference step is the idealised summing junction: an op-amp network's
reference also reaches the amplifier output through its non-inverting gain,
which for a network whose input element is the divider resistor R1 adds
``vref`` itself to ``vc`` (a term ``Fm Gvd vref / (1 + T)`` not modelled; it
vanishes at dc, so the final value is exact).

Exact simulation: every transfer is realised as a cascade of real first- and
second-order sections built from its factors (conjugate pairs together;
well-scaled, so multiple and complex poles need no partial fractions), and
stepped with the matrix exponential of the section matrix augmented by the
input and its slope (exact for a piecewise-linear input, to rounding), for all
corners at once.  python-control's ``forced_response`` on the same systems is
the check (tests/test_timeresponse.py).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from .errors import DesignError, Finding
from .loop import LoopResult, closed_loop
from .powerstage import corner_label
from .rational import Rational
from .units import format_value

__all__ = [
    "KINDS",
    "StateSpace",
    "StepResponse",
    "closed_loop_transfers",
    "deviation_rule_of_thumb",
    "ramp_step",
    "realise",
    "sizing",
    "step_figures",
    "step_response",
    "time_grid",
]

#: Step kinds: load current, input voltage, output set point.
KINDS = ("load", "line", "reference")

#: Points per second of the fastest crossover in the fine part of the default grid (1/fc / 100).
_POINTS_PER_PERIOD = 100
#: Most points of the default grid.
_MAX_POINTS = 6000


# ---------------------------------------------------------------------------- realisation
@dataclass(frozen=True, eq=False)
class StateSpace:
    """Single-input single-output state space per corner, padded to one size.

    ``a`` (n, m, m), ``b`` (n, m), ``c`` (n, m), ``d`` (n,); s in rad/s.  Corners
    with fewer states carry decoupled dummy states (a = -1, b = c = 0).
    """

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray


def _poly(factors) -> np.ndarray:
    """Ascending real coefficients of a product of factors ``a0 + a1 s``."""
    p = np.array([1.0 + 0j])
    for a0, a1 in factors:
        p = np.convolve(p, np.array([a0, a1]))
    return p.real


def _logf(f) -> float:
    """log10 of a factor's root magnitude (rad/s); the origin counts as very low."""
    return float(np.log10(max(abs(f[0] / f[1]), 1e-30)))


def _split(factors: np.ndarray) -> tuple[list, list]:
    """Active factors as (conjugate pairs, real factors)."""
    active = [f for f in factors if not (f[1] == 0 and f[0] == 1)]
    cplx = [f for f in active if abs(f[1].imag) > 1e-12 * abs(f[1])]
    real = [np.array([f[0].real, f[1].real]) for f in active if abs(f[1].imag) <= 1e-12 * abs(f[1])]
    pairs = []
    while cplx:
        f = cplx.pop(0)
        j = int(np.argmin([abs(g[1] - np.conj(f[1])) + abs(g[0] - np.conj(f[0])) for g in cplx]))
        pairs.append([f, cplx.pop(j)])
    return pairs, real


def _pairing(num: np.ndarray, den: np.ndarray) -> list[tuple[list, list]]:
    """Sections as (zero factors, pole factors), each zero next to the nearest pole in frequency.

    Pairing a zero with a far-away pole makes a section whose gain changes by
    decades, and the cascade then subtracts large numbers; nearest pairing
    (the idea of scipy.signal.zpk2sos's "nearest") keeps each section near unit gain.
    """
    zp, zr = _split(num)
    pp, pr = _split(den)
    sections = [([], list(p)) for p in pp] + [([], [p]) for p in pr]

    def nearest(f, need):
        free = [j for j, (z, p) in enumerate(sections) if len(p) - len(z) >= need]
        if not free:
            return None
        return min(free, key=lambda j: abs(np.mean([_logf(x) for x in sections[j][1]]) - _logf(f)))

    for pair in sorted(zp, key=lambda q: _logf(q[0])):
        j = nearest(pair[0], 2)
        if j is None:  # merge the two real-pole sections nearest to the pair
            singles = sorted((j for j, (z, p) in enumerate(sections) if len(p) == 1 and not z),
                             key=lambda j: abs(_logf(sections[j][1][0]) - _logf(pair[0])))
            if len(singles) < 2:
                raise _improper()
            a, b = sorted(singles[:2])
            sections[a] = ([], sections[a][1] + sections[b][1])
            del sections[b]
            j = a
        sections[j][0].extend(pair)
    for f in sorted(zr, key=_logf):
        j = nearest(f, 1)
        if j is None:
            raise _improper()
        sections[j][0].append(f)
    return sections


def _improper() -> DesignError:
    return DesignError("closed loop", "more zeros than poles",
                       "a time response needs a proper transfer function (no more zeros than poles)")


def _section(num: np.ndarray, den: np.ndarray):
    """(A, B, C, D) of ``num/den`` (den of degree 1 or 2), states scaled by the section's frequency."""
    lead = den[-1]
    den, num = den / lead, np.pad(num / lead, (0, len(den) - len(num)))
    if len(den) == 2:
        a0 = den[0]
        w = abs(a0) if a0 != 0 else 1.0
        b0, b1 = num
        return np.array([[-a0]]), np.array([w]), np.array([(b0 - b1 * a0) / w]), b1
    a0, a1 = den[0], den[1]
    w = np.sqrt(abs(a0)) if a0 != 0 else (abs(a1) if a1 != 0 else 1.0)
    b0, b1, b2 = num
    a = np.array([[0.0, w], [-a0 / w, -a1]])
    return a, np.array([0.0, w]), np.array([(b0 - b2 * a0) / w**2, (b1 - b2 * a1) / w]), b2


def _realise_one(gain: float, num: np.ndarray, den: np.ndarray):
    a, b, c, d = np.zeros((0, 0)), np.zeros(0), np.zeros(0), 1.0
    for zeros, poles in _pairing(num, den):
        ai, bi, ci, di = _section(_poly(zeros), _poly(poles))
        m, mi = a.shape[0], ai.shape[0]
        a = np.block([[a, np.zeros((m, mi))], [np.outer(bi, c), ai]])
        b, c, d = np.r_[b, bi * d], np.r_[di * c, ci], di * d
    return a, b, c * gain, d * gain


def realise(tf: Rational) -> StateSpace:
    """State space of every corner of ``tf``, a cascade of real first- and second-order sections.

    Parameters
    ----------
    tf : Rational
        Proper, without delay.

    Returns
    -------
    StateSpace

    Notes
    -----
    Each section ``(b0 + b1 s + b2 s^2)/(s^2 + a1 s + a0)`` is realised with
    states scaled by ``w = sqrt|a0|``: ``x1' = w x2``, ``x2' = -(a0/w) x1 - a1 x2
    + w u``, so ``x1/u = w^2/den`` (unit dc gain for the normalised factors),
    ``y = b2 u + (b0 - b2 a0)/w^2 x1 + (b1 - b2 a1)/w x2``; sections in series
    (the standard series connection of state-space systems), then balanced by a
    diagonal similarity (``scipy.linalg.matrix_balance``, powers of 2, exact) so
    the matrix exponential does not lose digits to the couplings.  Conjugate and
    repeated roots stay inside one real section, so no partial fraction is
    formed.
    """
    if np.any(tf.delay_s):
        raise DesignError("closed loop", "a delay", "time responses are computed for rational transfers only")
    parts = [_realise_one(float(tf.gain[k]), tf.num[k], tf.den[k]) for k in range(tf.n_corners)]
    m = max(1, max(p[0].shape[0] for p in parts))
    n = tf.n_corners
    a = np.zeros((n, m, m))
    b, c, d = np.zeros((n, m)), np.zeros((n, m)), np.zeros(n)
    for k, (ak, bk, ck, dk) in enumerate(parts):
        mk = ak.shape[0]
        if mk:  # diagonal similarity by powers of 2: the cascade's couplings can span decades
            _, (scale, _) = scipy.linalg.matrix_balance(ak, permute=False, separate=True)
            ak, bk, ck = ak * scale[None, :] / scale[:, None], bk / scale, ck * scale
        a[k, :mk, :mk], b[k, :mk], c[k, :mk], d[k] = ak, bk, ck, dk
        a[k, np.arange(mk, m), np.arange(mk, m)] = -1.0
    return StateSpace(a, b, c, d)


# ---------------------------------------------------------------------------- simulation
def time_grid(span_s: float, rise_s: float = 0.0, fine_dt_s: float | None = None,
              max_points: int = _MAX_POINTS) -> tuple[np.ndarray, list[tuple[float, int]]]:
    """Time points from 0 to ``span_s`` with the end of the rise on the grid.

    Returns ``(t_s, steps)``: ``steps`` lists (dt, count) segments; ``t_s`` has
    ``1 + sum(count)`` points.  The rise is split into equal steps of at most
    ``fine_dt_s``; after it, steps of ``fine_dt_s`` up to a tenth of the span
    past the rise, then longer equal steps so the total stays under ``max_points``.
    """
    if not (np.isfinite(span_s) and span_s > 0):
        raise DesignError("span", span_s, "must be a time > 0 s")
    if not (np.isfinite(rise_s) and 0 <= rise_s < span_s):
        raise DesignError("rise", format_value(rise_s, "s"), f"must be >= 0 and below the span ({format_value(span_s, 's')})")
    fine = span_s / max_points if fine_dt_s is None else min(fine_dt_s, span_s / 50)
    steps = []
    if rise_s > 0:
        n = max(int(np.ceil(rise_s / fine)), 10)
        steps.append((rise_s / n, n))
    rest = span_s - rise_s
    used = sum(c for _, c in steps)
    n_fine = int(min(np.ceil(rest / fine), max(max_points // 2 - used, 10)))
    t_fine = min(rest, n_fine * fine)
    n_fine = max(int(np.ceil(t_fine / fine)), 1)
    steps.append((t_fine / n_fine, n_fine))
    if rest - t_fine > 1e-12 * span_s:
        n = max(max_points - used - n_fine, 10)
        steps.append(((rest - t_fine) / n, n))
    return _times(steps), steps


def _times(steps: list[tuple[float, int]]) -> np.ndarray:
    """The time points of (dt, count) segments, from 0."""
    offsets = np.cumsum([0.0] + [dt * c for dt, c in steps])
    return np.concatenate([[0.0]] + [o + dt * np.arange(1, c + 1) for o, (dt, c) in zip(offsets, steps)])


def ramp_step(ss: StateSpace, amplitude, rise_s: float, steps: list[tuple[float, int]]) -> np.ndarray:
    """Exact response of every corner to ``u = amplitude min(t / rise_s, 1)`` (a plain step when 0).

    Parameters
    ----------
    ss : StateSpace
    amplitude : float or ndarray (corners,)
    rise_s : float
        Rise time of the input, s; it must end on a step boundary (see :func:`time_grid`).
    steps : list of (dt, count)

    Returns
    -------
    ndarray (corners, points), starting at t = 0 (before any state has moved).

    Notes
    -----
    The augmented state ``z = (x, u, u')`` obeys ``z' = M z`` with
    ``M = [[A, B, 0], [0, 0, 1], [0, 0, 0]]`` while the input is a ramp, so
    ``z(t + dt) = expm(M dt) z(t)`` exactly (C. Van Loan, "Computing integrals
    involving the matrix exponential", IEEE Trans. Automatic Control 23(3),
    1978; the same construction as a first-order hold).  At the end of the rise
    the slope is set to zero.  One ``scipy.linalg.expm`` per corner and segment
    (Al-Mohy and Higham's scaling and squaring, robust for the strongly
    non-normal cascade matrices); the powers of
    it by repeated squaring, so a segment of N steps costs log2(N) batched
    matrix products.
    """
    n, m = ss.b.shape
    amp = np.broadcast_to(np.asarray(amplitude, float), (n,))
    big = np.zeros((n, m + 2, m + 2))
    big[:, :m, :m] = ss.a
    big[:, :m, m] = ss.b
    big[:, m, m + 1] = 1.0
    z = np.zeros((n, m + 2))
    if rise_s > 0:
        z[:, m + 1] = amp / rise_s
    else:
        z[:, m] = amp
    if rise_s > 0 and not np.isclose(steps[0][0] * steps[0][1], rise_s, rtol=1e-9, atol=0):
        raise DesignError("rise", format_value(rise_s, "s"), "must end the first segment of the time grid (time_grid)")
    states = [z[:, :, None]]
    for j, (dt, count) in enumerate(steps):
        phi = np.stack([scipy.linalg.expm(m_k * dt) for m_k in big])
        seg = _powers_times(phi, z, count)  # (n, m + 2, count): after 1 .. count steps
        states.append(seg)
        z = seg[:, :, -1].copy()
        if j == 0 and rise_s > 0:  # the ramp ends here
            z[:, m], z[:, m + 1] = amp, 0.0
            seg[:, m, -1] = amp
    zz = np.concatenate(states, axis=2)
    return np.einsum("ni,nik->nk", ss.c, zz[:, :m, :]) + ss.d[:, None] * zz[:, m, :]


def _powers_times(phi: np.ndarray, z: np.ndarray, count: int) -> np.ndarray:
    """``[phi z, phi^2 z, ..., phi^count z]`` per corner, (n, m, count), by doubling (log2(count) products)."""
    block = z[:, :, None]
    power = phi
    while block.shape[2] < count + 1:
        block = np.concatenate([block, power @ block], axis=2)
        power = power @ power
    return block[:, :, 1 : count + 1]


# ---------------------------------------------------------------------------- closed-loop transfers
def _sensitivity(result: LoopResult) -> Rational:
    """``1 / (1 + T)`` per corner as ``D / (D + N)``, exactly as :func:`loopkit.loop.closed_loop` builds it."""
    num, den = result.loop.polys()
    k = max(num.shape[1], den.shape[1])
    char = np.zeros((result.loop.n_corners, k))
    char[:, : num.shape[1]] += num
    char[:, : den.shape[1]] += den
    return Rational.from_polys(den, char)


def _load_sign(design) -> float:
    """Injected current per unit rise of the load current's magnitude: -1 for a positive output, +1 for a
    negative one (the load then draws its current out of ground into the output node)."""
    return -1.0 if design.operating.vout > 0 else 1.0


def closed_loop_transfers(result: LoopResult, kind: str) -> dict[str, Rational | None]:
    """Closed-loop transfers of a step ``kind`` per corner: ``{"v": ..., "d": ..., "i": ...}``.

    ``v`` output voltage (V per A of load rise, V/V of input step, V/V of set-point step),
    ``d`` duty (per unit of input), ``i`` inductor current; ``d`` and ``i`` are None
    outside voltage mode.  See the module notes for the relations.
    """
    if kind not in KINDS:
        raise DesignError("kind", kind, f"must be one of {', '.join(KINDS)}")
    if result.loop is None:
        raise DesignError("compensator", "no parts", "the targets are infeasible: no closed loop to simulate")
    if getattr(result, "digital", None) is not None:
        raise DesignError("result", "a digital loop", "an analog loop (a sampled loop's steps: step_response)")
    from .networks.sensing import sensing_transfer
    from .schemes.voltage_mode import modulator_transfer

    design, stage = result.design, result.stage
    h = sensing_transfer(design)
    h0 = float(h.dc_gain()[0])
    sens = _sensitivity(result)
    if kind == "load":
        v = closed_loop(result, "zout") * _load_sign(design)
    elif kind == "line":
        v = closed_loop(result, "gvg")
    else:
        v = (result.loop * sens * (h.inverse() * h0)).cancel()
    out = {"v": v, "d": None, "i": None}
    if design.control.scheme != "voltage-mode":
        return out
    fm_gc = modulator_transfer(design, stage.vin) * result.compensator
    if kind == "reference":
        d = (fm_gc * sens * -h0).cancel()
        i = stage.gid * d
    else:
        d = (fm_gc * h * v).cancel()  # Gc's integrator cancels the zero at the origin of 1/(1 + T)
        i = stage.gid * d + (stage.gii * _load_sign(design) if kind == "load" else stage.gig)
    out["d"], out["i"] = d, i
    return out


# ---------------------------------------------------------------------------- figures
def step_figures(t_s: np.ndarray, y: np.ndarray, final: np.ndarray, band, disturbance: bool) -> dict:
    """Peak, overshoot and settling of waveforms ``y`` (corners, points) that start at 0.

    Parameters
    ----------
    t_s : ndarray (points,)
    y : ndarray (corners, points)
        Deviation from the value before the step.
    final : ndarray (corners,)
        Final deviation (the transfer's dc gain times the step).
    band : float or ndarray (corners,)
        Half-width of the settling band, same unit as ``y`` (> 0).
    disturbance : bool
        True for a load or input step: the overshoot is the largest excursion past the final
        value on the side opposite to the peak, in % of the peak; False for a set-point step:
        the classical overshoot, past the final value in % of the final value.

    Returns
    -------
    dict of ndarray (corners,)
        ``peak`` (signed value of largest magnitude), ``t_peak_s``, ``overshoot_pct``,
        ``settle_s`` (time after which ``|y - final| <= band`` to the end of the span; 0 when
        never outside; NaN when still outside at the end), ``settled_at_end`` (bool).

    Notes
    -----
    Read on the time grid; the settling instant is interpolated linearly between the last
    point outside the band and the next.
    """
    n = y.shape[0]
    rows = np.arange(n)
    k_peak = np.argmax(np.abs(y), axis=1)
    peak = y[rows, k_peak]
    err = y - final[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        if disturbance:
            past = np.max(-np.sign(peak)[:, None] * err, axis=1)
            overshoot = 100.0 * np.maximum(past, 0.0) / np.abs(peak)
        else:
            past = np.max(np.sign(final)[:, None] * err, axis=1)
            overshoot = np.where(final != 0, 100.0 * np.maximum(past, 0.0) / np.abs(final), np.nan)
    band = np.broadcast_to(np.asarray(band, float), (n,))
    outside = np.abs(err) > band[:, None]
    last = y.shape[1] - 1 - np.argmax(outside[:, ::-1], axis=1)
    settle = np.zeros(n)
    ended_out = outside[:, -1]
    for k in np.nonzero(outside.any(axis=1) & ~ended_out)[0]:
        j = last[k]
        e0, e1 = abs(err[k, j]), abs(err[k, j + 1])
        frac = (e0 - band[k]) / (e0 - e1) if e0 != e1 else 0.0
        settle[k] = t_s[j] + frac * (t_s[j + 1] - t_s[j])
    settle[ended_out] = np.nan
    return {"peak": peak, "t_peak_s": t_s[k_peak], "overshoot_pct": overshoot, "settle_s": settle,
            "settled_at_end": ~ended_out}


def deviation_rule_of_thumb(delta_i_a, fc_hz, c_f):
    """Load-step deviation ``dI / (2 pi fc C)``, V (common practice, no source; a well-damped loop)."""
    return np.asarray(delta_i_a, float) / (2.0 * np.pi * np.asarray(fc_hz, float) * np.asarray(c_f, float))


def sizing(delta_i_a: float, delta_v_v: float, fc_hz, c_f) -> dict:
    """Crossover and output capacitance that keep a load step ``delta_i_a`` within ``delta_v_v``.

    From ``dV ~ dI / (2 pi fc C)`` (common practice, no source; see /REFERENCES.md):
    ``fc_needed = dI / (2 pi C dV)`` with today's capacitance and ``c_needed = dI / (2 pi fc dV)``
    with today's crossover (per corner).  Returns ndarrays (corners,) ``fc_needed_hz``,
    ``c_needed_f`` and ``estimate_v`` (the rule's deviation for the current design).
    """
    if not (np.isfinite(delta_i_a) and delta_i_a != 0):
        raise DesignError("load step", format_value(delta_i_a, "A"), "must be a nonzero current")
    if not (np.isfinite(delta_v_v) and delta_v_v > 0):
        raise DesignError("allowed deviation", format_value(delta_v_v, "V"), "must be > 0 V")
    fc = np.asarray(fc_hz, float)
    di = abs(delta_i_a)
    return {"fc_needed_hz": di / (2 * np.pi * c_f * delta_v_v) * np.ones_like(fc),
            "c_needed_f": di / (2 * np.pi * fc * delta_v_v),
            "estimate_v": deviation_rule_of_thumb(di, fc, c_f)}


# ---------------------------------------------------------------------------- the response
@dataclass(frozen=True, eq=False)
class StepResponse:
    """A step at every corner: waveforms (corners, points) and the figures a specification asks for.

    ``v`` is the output deviation, V; ``i`` the inductor current and ``duty`` the duty cycle
    (totals, operating point included; None outside voltage mode); ``i0``, ``duty0`` the
    operating point.  Figures (corners,): ``peak_v``, ``peak_pct`` (of |Vout|), ``t_peak_s``,
    ``final_v``, ``overshoot_pct`` (see :func:`step_figures`), ``settle_s``, ``band_v``,
    ``duty_min``, ``duty_max``, ``saturates`` (the duty leaves [0, max_duty]).
    """

    kind: str
    amplitude: float
    rise_s: float
    t_s: np.ndarray
    v: np.ndarray
    i: np.ndarray | None
    duty: np.ndarray | None
    i0: np.ndarray
    duty0: np.ndarray
    vout: float
    peak_v: np.ndarray
    peak_pct: np.ndarray
    t_peak_s: np.ndarray
    final_v: np.ndarray
    overshoot_pct: np.ndarray
    settle_s: np.ndarray
    band_v: float
    duty_min: np.ndarray
    duty_max: np.ndarray
    saturates: np.ndarray
    findings: tuple
    #: What computed it, for the reports' notes.
    model: str = "averaged small-signal model"


def _default_span(result: LoopResult, v: Rational, rise_s: float) -> tuple[float, float]:
    """(span, fine step) from the crossovers and the closed-loop poles."""
    fc = result.margins.fc_hz if result.margins is not None else np.array([np.nan])
    poles = v.poles_hz()
    re = np.abs(poles.real[np.isfinite(poles)])
    re = re[re > 0]
    fc_lo = np.nanmin(fc) if np.any(np.isfinite(fc)) else (re.min() if re.size else 1.0)
    fc_hi = np.nanmax(fc) if np.any(np.isfinite(fc)) else fc_lo
    slow = 8.0 / (2 * np.pi * re.min()) if re.size else 20.0 / fc_lo
    span = rise_s + float(np.clip(slow, 20.0 / fc_lo, 400.0 / fc_lo))
    return span, 1.0 / (_POINTS_PER_PERIOD * fc_hi)


def step_response(result: LoopResult, kind: str, amplitude: float, rise_s: float = 0.0, band_v: float | None = None,
                  span_s: float | None = None, steps: list | None = None) -> StepResponse:
    """Response of every corner to a load, input-voltage or set-point step.

    Parameters
    ----------
    result : LoopResult
        A feasible loop; the corners are its linearisation points.
    kind : {"load", "line", "reference"}
    amplitude : float
        Load-current rise (A; a fall is negative), input-voltage change (V) or set-point change (V).
    rise_s : float
        Rise time of the step (a straight ramp), s; 0 for an ideal step.
    band_v : float, optional
        Half-width of the settling band, V (default 1 % of |Vout|).
    span_s : float, optional
        Simulated time, s (default from the crossovers and the slowest closed-loop pole).
    steps : list of (dt, count), optional
        The time grid (see :func:`time_grid`); overrides ``span_s``.

    Returns
    -------
    StepResponse

    Notes
    -----
    Small-signal: the corner's operating point is the linearisation point for the whole
    step.  A digital loop (``result.digital`` set) is simulated as the sampled-data system it is
    (:func:`loopkit.digital_step.digital_step_response`; ``steps`` does not apply).  A duty that would leave [0, max_duty] is flagged (``duty-saturates``): the real
    converter then runs open loop for a while and this answer is wrong.
    """
    if not np.isfinite(amplitude) or amplitude == 0:
        raise DesignError("step", amplitude, "must be a nonzero, finite step")
    if not (np.isfinite(rise_s) and rise_s >= 0):
        raise DesignError("rise", rise_s, "must be a time >= 0 s")
    if getattr(result, "digital", None) is not None:  # a sampled loop: exact between samples too
        from .digital_step import digital_step_response

        if steps is not None:
            raise DesignError("steps", "a time grid", "a digital loop is read on its own grid (sample periods);"
                              " give span_s instead")
        return digital_step_response(result, kind, amplitude, rise_s, band_v, span_s)
    tfs = closed_loop_transfers(result, kind)
    stage, design = result.stage, result.design
    vout = abs(design.operating.vout)
    band = 0.01 * vout if band_v is None else float(band_v)
    if not (np.isfinite(band) and band > 0):
        raise DesignError("band", band_v, "must be a voltage > 0")
    if steps is None:
        span, fine = _default_span(result, tfs["v"], rise_s)
        _, steps = time_grid(span if span_s is None else span_s, rise_s, fine)
    t = _times(steps)
    with np.errstate(over="ignore", invalid="ignore"):  # an unstable corner grows without bound: flagged below
        v = ramp_step(realise(tfs["v"]), amplitude, rise_s, steps)
    final = tfs["v"].dc_gain() * amplitude
    fig = step_figures(t, v, final, band, disturbance=kind != "reference")
    n = stage.n_corners
    i = duty = None
    dmin = dmax = np.full(n, np.nan)
    sat = np.zeros(n, bool)
    if tfs["d"] is not None:
        with np.errstate(over="ignore", invalid="ignore"):
            duty = stage.duty[:, None] + ramp_step(realise(tfs["d"]), amplitude, rise_s, steps)
            i = stage.i_l[:, None] + ramp_step(realise(tfs["i"]), amplitude, rise_s, steps)
        dmin, dmax = duty.min(axis=1), duty.max(axis=1)
        sat = (dmin < 0) | (dmax > design.modulator.max_duty)
    findings = []
    stable = result.margins.stable if result.margins is not None else np.ones(n, bool)
    for k in range(n):
        where = corner_label(stage.vin[k], stage.load[k])
        if not stable[k]:
            findings.append(Finding("step-unstable", f"{where}: the closed loop is unstable: no step figures", k, "error"))
        elif not fig["settled_at_end"][k]:
            findings.append(Finding("step-not-settled", f"{where}: not inside ±{format_value(band, 'V')} at the end"
                                    f" of the span ({format_value(t[-1], 's')}): simulate longer", k))
        if sat[k]:
            findings.append(Finding(
                "duty-saturates", f"{where}: the duty would swing {dmin[k]:.1%} to {dmax[k]:.1%}, outside 0 to"
                f" {design.modulator.max_duty:.0%}: the loop saturates and this small-signal answer is wrong"
                " (smaller or slower step, or a large-signal check)", k))
    bad = ~stable
    nan = np.where(bad, np.nan, 1.0)
    return StepResponse(
        kind=kind, amplitude=float(amplitude), rise_s=float(rise_s), t_s=t, v=v, i=i, duty=duty,
        i0=stage.i_l.copy(), duty0=stage.duty.copy(), vout=vout, peak_v=fig["peak"] * nan,
        peak_pct=100.0 * np.abs(fig["peak"]) / vout * nan, t_peak_s=fig["t_peak_s"] * nan, final_v=final * nan,
        overshoot_pct=fig["overshoot_pct"] * nan, settle_s=fig["settle_s"] * nan, band_v=band,
        duty_min=dmin, duty_max=dmax, saturates=sat, findings=tuple(findings))
