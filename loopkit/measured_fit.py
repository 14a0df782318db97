"""What a measurement tells: its margins, its difference to the prediction, the stage parameters.

:func:`measured_margins` reads crossover, phase and gain margin off a sampled loop gain by
interpolating ln|T| and the unwrapped phase linearly in ln f between the measured points, with
the same definitions as :func:`loopkit.margins.loop_margins`; a crossing that the data does not
bracket is reported as outside the measured range, never extrapolated.  :func:`compare` gives
the difference between a measurement and the predicted response of one corner.

:func:`fit_stage` fits the stage parameters that datasheets get wrong to a measured plant or
loop response.
The effective output capacitance (DC-bias derating), its ESR, the inductance (saturation,
tolerance) and the modulator gain (ramp amplitude, or the current-sense gain in peak current
mode) are estimated by bounded least squares on the complex logarithm of the response, through
the same model as every other result: each trial rebuilds the design with the trial values and
calls :func:`loopkit.powerstage.analyse_stage` and the control scheme for the one measured
corner, so every topology, CCM and DCM, voltage and current mode is fitted alike.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from .design import Design
from .errors import DesignError
from .measured import KINDS, Measurement
from .powerstage import analyse_stage
from .schemes import scheme_module
from .units import format_value

__all__ = [
    "FIT_PARAMETERS",
    "Comparison",
    "FitParameter",
    "FitResult",
    "MeasuredMargins",
    "compare",
    "fit_stage",
    "measured_margins",
    "one_corner_design",
    "predicted_response",
]


@dataclass(frozen=True)
class MeasuredMargins:
    """Margins read off a measured loop gain; NaN where the crossing is not in the measured range.

    Attributes
    ----------
    fc_hz, pm_deg : float
        Lowest gain crossover and the smallest phase margin over the crossovers.
    gm_db, f180_hz : float
        Gain margin at the phase crossover with |T| < 1 that gives the smallest margin.
    crossovers_hz : tuple of float
    f_min_hz, f_max_hz : float
        The measured range.
    notes : tuple of str
        What could not be read inside the measured range, in plain words.
    """

    fc_hz: float
    pm_deg: float
    gm_db: float
    f180_hz: float
    crossovers_hz: tuple
    f_min_hz: float
    f_max_hz: float
    notes: tuple = ()


def _crossings(lnf: np.ndarray, y: np.ndarray, level: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(index, ln f) where ``y - level`` changes sign between points index and index + 1 (linear in ln f)."""
    g = y - level
    k = np.nonzero(np.sign(g[:-1]) * np.sign(g[1:]) < 0)[0]
    t = g[k] / (g[k] - g[k + 1])
    return k, lnf[k] + t * (lnf[k + 1] - lnf[k])


def measured_margins(m: Measurement) -> MeasuredMargins:
    """Crossover, phase margin and gain margin of a measured loop gain (1 + T convention).

    Notes
    -----
    Same definitions as :func:`loopkit.margins.loop_margins` (Erickson & Maksimovic,
    Fundamentals of Power Electronics, 2nd ed., sec. 9.4): PM = 180 deg + phase(T) at |T| = 1,
    wrapped to (-180, 180]; GM = -20 log10 |T| where the phase is -180 deg + k 360 deg.  Between
    measured points ln|T| and the unwrapped phase are taken as linear in ln f.
    """
    if m.kind != "loop":
        raise DesignError("kind", m.kind, "margins are read off a loop-gain measurement (kind loop)")
    lnf = np.log(m.f_hz)
    ln_mag = np.log(np.abs(m.response))
    phase = m.phase_deg
    lo, hi = m.f_range_hz
    rng = f"the measured range ({format_value(lo, 'Hz')} to {format_value(hi, 'Hz')})"
    notes = []

    def at(x, y):
        return np.interp(x, lnf, y)

    _, xc = _crossings(lnf, ln_mag, np.zeros_like(ln_mag))
    if xc.size:
        pm_all = np.mod(at(xc, phase) + 360.0, 360.0) - 180.0
        pm_all = np.where(pm_all == -180.0, 180.0, pm_all)
        fc, pm = float(np.exp(xc[0])), float(pm_all.min())
        if ln_mag[0] < 0:
            notes.append(f"|T| is below 0 dB at the lowest measured frequency: a lower crossover may lie below {rng}")
        if ln_mag[-1] > 0:
            notes.append(f"|T| is above 0 dB at the highest measured frequency: a crossover lies above {rng}")
    else:
        fc = pm = float("nan")
        side = "above" if ln_mag[-1] > 0 else "below"
        notes.append(f"gain crossover: outside {rng} (|T| stays {side} 0 dB)")
    # phase crossovers at -180 + 360 k
    u = np.floor((phase + 180.0) / 360.0)
    k = np.nonzero(u[:-1] != u[1:])[0]
    level = 360.0 * np.maximum(u[k], u[k + 1]) - 180.0
    gm, f180 = float("nan"), float("nan")
    if k.size:
        t = (phase[k] - level) / (phase[k] - phase[k + 1])
        x180 = lnf[k] + t * (lnf[k + 1] - lnf[k])
        mag180 = at(x180, ln_mag)
        below = mag180 < 0
        if np.any(below):
            j = np.argmax(np.where(below, mag180, -np.inf))
            gm, f180 = float(-20.0 * mag180[j] / np.log(10.0)), float(np.exp(x180[j]))
    if not np.isfinite(gm):
        notes.append(f"gain margin: outside {rng} (no phase crossover with |T| below 0 dB in it)")
    return MeasuredMargins(fc, pm, gm, f180, tuple(float(np.exp(x)) for x in xc), lo, hi, tuple(notes))


def predicted_response(result, kind: str, corner: int, f_hz: np.ndarray) -> np.ndarray:
    """loopkit's prediction of what the bench measures, at one corner of a ``LoopResult``.

    ``"loop"``: the loop gain T with the parts to build; ``"plant"``: control-to-output, from
    the error amplifier's output (the modulator's control voltage) to the converter's output,
    ``Tu / H`` (voltage mode: ``Fm Gvd``); ``"compensator"``: the network with the parts to build.
    """
    from .networks.sensing import sensing_transfer

    f_hz = np.asarray(f_hz, float)
    n = result.stage.n_corners
    if not (isinstance(corner, (int, np.integer)) and 0 <= corner < n):
        raise DesignError("corner", corner, f"must be a corner index from 0 to {n - 1}")
    if kind == "plant":
        tu = result.open_loop.tu.take([corner])
        return (tu.response(f_hz) / sensing_transfer(result.design).response(f_hz))[0]
    if result.loop is None:
        raise DesignError("compensator.parts", "none", f"a {kind} prediction needs parts: the targets cannot be met")
    if kind == "loop":
        return result.loop.take([corner]).response(f_hz)[0]
    if kind == "compensator":
        return result.compensator.response(f_hz)[0]
    raise DesignError("kind", kind, f"must be one of {', '.join(KINDS)}")


@dataclass(frozen=True, eq=False)
class Comparison:
    """A measurement against the prediction of one corner, on the measured frequencies.

    ``diff_db`` = 20 log10 |measured / predicted|; ``diff_deg`` its angle, wrapped to (-180, 180].
    """

    f_hz: np.ndarray
    measured: np.ndarray
    predicted: np.ndarray
    diff_db: np.ndarray
    diff_deg: np.ndarray
    kind: str
    corner: int


def compare(m: Measurement, result, corner: int) -> Comparison:
    """Difference between measurement ``m`` and the prediction of ``corner`` of ``result`` (a ``LoopResult``)."""
    pred = predicted_response(result, m.kind, corner, m.f_hz)
    ratio = m.response / pred
    deg = np.degrees(np.angle(ratio))
    return Comparison(m.f_hz, m.response, pred, 20.0 * np.log10(np.abs(ratio)),
                      np.where(deg == -180.0, 180.0, deg), m.kind, int(corner))


#: Parameters that can be fitted: name -> (what it is, unit).
FIT_PARAMETERS = {
    "c": ("effective output capacitance (all banks scaled together)", "F"),
    "esr": ("output capacitor ESR (all banks scaled together)", "Ω"),
    "l": ("inductance", "H"),
    "gain": ("modulator gain (1/ramp, or 1/current-sense gain in peak current mode)", ""),
}
#: Each parameter stays within this factor of the design's value (the search's bounds).
FIT_RANGE = 10.0


@dataclass(frozen=True)
class FitParameter:
    """One fitted parameter: the design's value, the fitted one and its standard uncertainty (1 sigma)."""

    name: str
    description: str
    unit: str
    design_value: float
    value: float
    sigma: float
    at_bound: bool


@dataclass(frozen=True, eq=False)
class FitResult:
    """What the fit found and the design with it (accept it by using ``design``).

    ``rms_db`` and ``rms_deg`` are the residuals' root mean squares in gain and phase; ``notes``
    say in plain words what the fit could not determine (parameters the data cannot tell apart get
    an infinite ``sigma``) or where it hit the search's limits.
    """

    design: Design
    parameters: tuple
    corner: int
    kind: str
    rms_db: float
    rms_deg: float
    n_points: int
    success: bool
    message: str
    notes: tuple = ()


def one_corner_design(design: Design, corner: int) -> Design:
    """The design reduced to one corner, with every quantity that depends on the other corners
    (the feed-forward's nominal input, an automatic or relative slope) fixed at its full-design value.
    """
    n = design.operating.n_corners
    if not (isinstance(corner, (int, np.integer)) and 0 <= corner < n):
        raise DesignError("corner", corner, f"must be a corner index from 0 to {n - 1}")
    vin, load = design.operating.corners()
    op = design.operating
    nominal = op.vin_nominal or float(np.median(op.vin))
    ctrl = design.control
    if ctrl.scheme == "peak-current":
        from .schemes.peak_current import slope_of

        se = slope_of(design, analyse_stage(design))
        ctrl = replace(ctrl, slope=float(se), slope_amplitude=None, slope_ratio=None)
    return replace(design, operating=replace(op, vin=(float(vin[corner]),), load=(float(load[corner]),),
                                             vin_nominal=nominal),
                   compensator=replace(design.compensator, design_corner=None), control=ctrl)


def _with_scales(design: Design, names: tuple, scales: np.ndarray) -> Design:
    s = dict(zip(names, scales))
    st = design.stage
    banks = tuple(replace(b, capacitance=b.capacitance * s.get("c", 1.0), esr=b.esr * s.get("esr", 1.0))
                  for b in st.output_caps)
    out = replace(design, stage=replace(st, output_caps=banks, inductance=st.inductance * s.get("l", 1.0)))
    g = s.get("gain", 1.0)
    if g != 1.0:
        if design.control.scheme == "peak-current":
            out = replace(out, control=replace(out.control, sense_gain=out.control.sense_gain / g))
        else:
            out = replace(out, modulator=replace(out.modulator, ramp=out.modulator.ramp / g))
    return out


def _model(design: Design, kind: str, f_hz: np.ndarray, gc: np.ndarray | None) -> np.ndarray:
    """The predicted response of a one-corner design: control-to-output or the loop gain."""
    from .networks.sensing import sensing_transfer

    stage = analyse_stage(design)
    tu = scheme_module(design.control.scheme).uncompensated(design, stage).tu.response(f_hz)[0]
    if kind == "plant":
        return tu / sensing_transfer(design).response(f_hz)[0]
    return -tu * gc


def fit_stage(design: Design, m: Measurement, corner: int, params=("c", "esr", "l", "gain"),
              result=None) -> FitResult:
    """Estimate stage parameters from a measured plant (control-to-output) or loop response.

    Parameters
    ----------
    design : Design
        The design as built; its values are the starting point.
    m : Measurement
        ``kind`` ``"plant"`` (control voltage to output) or ``"loop"`` (loop gain T).
    corner : int
        The operating corner the measurement was taken at.
    params : sequence of str
        Names from :data:`FIT_PARAMETERS`.  ESR is left out when every bank's ESR is 0.
    result : LoopResult, optional
        For a loop measurement: the network as built (``result.compensator``); without it the
        design is run through :func:`loopkit.loop.design_loop`.

    Returns
    -------
    FitResult

    Notes
    -----
    Each parameter p is the design's value times exp(x); x is bounded to +-ln(10) and solved by
    ``scipy.optimize.least_squares`` (trust-region reflective) on the residuals
    ``[Re, Im] of ln(H_model / H_measured)``: the gain error in nepers and the phase error in
    radians.  The standard uncertainties come from the Jacobian at the solution,
    ``cov = s^2 (J^T J)^-1`` with ``s^2 = sum r^2 / (2 n - k)`` (the Gauss-Newton covariance;
    Press et al., Numerical Recipes, 3rd ed., sec. 15.5), propagated to the parameter as
    ``sigma_p = p sigma_x``.  It assumes the model is right and the errors are independent;
    a model error shows as a large residual (``rms_db``, ``rms_deg``).  Points above half the
    switching frequency are left out (the averaged model ends there) and a note says so.
    """
    from scipy.optimize import least_squares

    if m.kind not in ("plant", "loop"):
        raise DesignError("kind", m.kind, "a fit needs a plant or loop measurement")
    names = tuple(params)
    for p in names:
        if p not in FIT_PARAMETERS:
            raise DesignError("fit parameter", p, f"must be one of {', '.join(FIT_PARAMETERS)}")
    if "esr" in names and all(b.esr == 0 for b in design.stage.output_caps):
        names = tuple(p for p in names if p != "esr")
    if not names:
        raise DesignError("fit parameter", ", ".join(params), "nothing to fit")
    limit = design.stage.fsw / 2.0
    used = m.f_hz <= limit * (1 + 1e-9)  # the averaged model ends at half the switching frequency
    left_out = int(np.count_nonzero(~used))
    f_hz, meas = m.f_hz[used], m.response[used]
    if 2 * f_hz.size <= len(names):
        raise DesignError("measurement", f"{f_hz.size} points below fsw/2",
                          f"too few points to fit {len(names)} parameters")
    base = one_corner_design(design, corner)
    gc = None
    if m.kind == "loop":
        if result is None:
            from .loop import design_loop

            result = design_loop(design)
        if result.compensator is None:
            raise DesignError("compensator.parts", "none", "a loop fit needs the network's parts")
        gc = result.compensator.response(f_hz)[0]
    log_meas = np.log(meas)

    def residual(x):
        try:
            pred = _model(_with_scales(base, names, np.exp(x)), m.kind, f_hz, gc)
        except DesignError:
            return np.full(2 * f_hz.size, 1e3)  # a trial the stage cannot run: far from the data
        r = np.log(pred) - log_meas
        r = r.real + 1j * (np.mod(r.imag + np.pi, 2 * np.pi) - np.pi)
        return np.concatenate([r.real, r.imag])

    bound = np.log(FIT_RANGE)
    sol = least_squares(residual, np.zeros(len(names)), bounds=(-bound, bound), method="trf",
                        x_scale=1.0, diff_step=1e-6, xtol=1e-12, ftol=1e-12, gtol=1e-12, max_nfev=400)
    r = sol.fun
    dof = max(r.size - len(names), 1)
    s2 = float(r @ r) / dof
    sig_x, tied = _uncertainty(sol.jac, s2)
    notes = []
    if left_out:
        notes.append(f"{left_out} points above half the switching frequency ({format_value(limit, 'Hz')}) left out:"
                     " the averaged model ends there")
    if np.any(tied):
        notes.append(f"the data cannot tell {', '.join(n for n, t in zip(names, tied) if t)} apart (they change the"
                     " response together at this corner): their values are one of many that fit; fit fewer parameters")
    fitted = _with_scales(design, names, np.exp(sol.x))
    at_bound = np.abs(sol.x) > bound * (1 - 1e-6)
    if np.any(at_bound):
        notes.append(f"{', '.join(n for n, b in zip(names, at_bound) if b)} reached the search's limit (x{FIT_RANGE:g}"
                     " or /{FIT_RANGE:g} of the design's value): the model may not describe this measurement")
    out = []
    for i, p in enumerate(names):
        before, after = _value(design, p), _value(fitted, p)
        out.append(FitParameter(p, FIT_PARAMETERS[p][0], FIT_PARAMETERS[p][1], float(before), float(after),
                                abs(float(after)) * float(sig_x[i]), bool(at_bound[i])))
    n = f_hz.size
    return FitResult(fitted, tuple(out), int(corner), m.kind,
                     float(np.sqrt(np.mean(r[:n] ** 2))) * 20.0 / np.log(10.0),
                     float(np.degrees(np.sqrt(np.mean(r[n:] ** 2)))), n, bool(sol.success), str(sol.message),
                     tuple(notes))


#: A direction of the parameters whose singular value is below this fraction of the largest is not
#: determined by the data (the finite-difference Jacobian is good to about 1e-8 relative).
TIED_RATIO = 1e-5


def _uncertainty(jac: np.ndarray, s2: float) -> tuple[np.ndarray, np.ndarray]:
    """Standard uncertainties of the fitted log-scales, and which parameters the data leaves undetermined.

    ``cov = s^2 (J^T J)^-1`` through the singular values of J; a parameter with a share (> 0.01) in
    a direction of singular value below :data:`TIED_RATIO` of the largest gets an infinite
    uncertainty.
    """
    _, sv, vt = np.linalg.svd(jac, full_matrices=False)
    strong = sv > TIED_RATIO * sv[0] if sv.size and sv[0] > 0 else np.zeros(sv.size, bool)
    cov = (vt[strong].T / sv[strong] ** 2) @ vt[strong] * s2
    sig = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    tied = np.any(np.abs(vt[~strong]) > 0.01, axis=0) if np.any(~strong) else np.zeros(jac.shape[1], bool)
    return np.where(tied, np.inf, sig), tied


def _value(design: Design, name: str) -> float:
    st = design.stage
    if name == "c":
        return st.c_total
    if name == "esr":  # the banks in parallel, at dc-free high frequency: 1 / sum(1/ESR_k)
        g = sum(1.0 / b.esr_total for b in st.output_caps if b.esr > 0)
        return 1.0 / g if g > 0 else 0.0
    if name == "l":
        return st.inductance
    if design.control.scheme == "peak-current":
        return 1.0 / design.control.sense_gain
    return 1.0 / design.modulator.ramp
