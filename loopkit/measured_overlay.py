"""A measurement laid over the prediction of one corner: the curves, the difference, the margins.

What the app's measured-data window and the design-review report draw, computed once here so
neither holds a formula: the predicted response of the chosen corner on a dense grid covering
the measurement (and the loop's own grid), the measured points, their difference to the
prediction (:func:`loopkit.measured_fit.compare`), and, for a loop-gain measurement, the
measured crossover, phase margin and gain margin (:func:`loopkit.measured_fit.measured_margins`,
on the interpolated data) beside the predicted ones, with the measured frequency range stated.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import DesignError
from .margins import GM_WORDS, gm_state
from .measured import Measurement
from .measured_fit import MeasuredMargins, compare, measured_margins, predicted_response
from .units import format_value

__all__ = ["KIND_TITLES", "Overlay", "measured_overlay"]

#: What each kind of measurement is, in words (plot titles, report captions).
KIND_TITLES = {"loop": "loop gain T", "plant": "control to output (plant)", "compensator": "compensator network"}


@dataclass(frozen=True, eq=False)
class Overlay:
    """A measurement and the prediction of one corner, ready to draw.

    Attributes
    ----------
    kind : str
        ``loop``, ``plant`` or ``compensator``.
    corner : int
        The corner predicted.
    corner_label : str
        The corner in words (input voltage and load).
    f_pred_hz, pred_mag_db, pred_phase_deg : ndarray
        The prediction on a dense log grid over the measured range and the loop's own grid.
    f_hz, meas_mag_db, meas_phase_deg : ndarray
        The measured points; the phase unwrapped and moved by whole turns to lie beside the
        prediction's (a phase is defined only to a multiple of 360 deg).
    diff_db, diff_deg : ndarray
        ``measured / predicted`` at the measured points: gain in dB, angle in (-180, 180] deg.
    measured : MeasuredMargins or None
        Measured margins (loop-gain measurements only).
    predicted : dict or None
        The corner's predicted ``fc_hz``, ``pm_deg``, ``gm_db`` and ``gm_text`` (loop only).
    f_range_hz : tuple of float
        The measured range, Hz.
    source : str
        The measurement's file.
    """

    kind: str
    corner: int
    corner_label: str
    f_pred_hz: np.ndarray
    pred_mag_db: np.ndarray
    pred_phase_deg: np.ndarray
    f_hz: np.ndarray
    meas_mag_db: np.ndarray
    meas_phase_deg: np.ndarray
    diff_db: np.ndarray
    diff_deg: np.ndarray
    measured: MeasuredMargins | None
    predicted: dict | None
    f_range_hz: tuple
    source: str = ""

    @property
    def range_text(self) -> str:
        """The measured range in words, e.g. ``"50 Hz to 150 kHz"``."""
        return f"{format_value(self.f_range_hz[0], 'Hz')} to {format_value(self.f_range_hz[1], 'Hz')}"

    def summary_lines(self) -> list[str]:
        """The margins measured and predicted, and what could not be read, as sentences."""
        title = KIND_TITLES[self.kind]
        lines = [(f"{title[0].upper() + title[1:]} measured from {self.range_text} ({self.f_hz.size} points),"
                 f" against the prediction at {self.corner_label}.")]
        if self.measured is not None:
            mm, p = self.measured, self.predicted
            lines.append(f"Measured: fc {_hz(mm.fc_hz)}, PM {_deg(mm.pm_deg)}, GM {_db(mm.gm_db)}"
                         f" (read on the interpolated data inside {self.range_text}).")
            lines.append(f"Predicted: fc {_hz(p['fc_hz'])}, PM {_deg(p['pm_deg'])}, GM {p['gm_text']}.")
            lines += [note[0].upper() + note[1:] + "." for note in mm.notes]
        worst = int(np.argmax(np.abs(self.diff_db)))
        lines.append(f"Largest gain difference {self.diff_db[worst]:+.2f} dB at {_hz(self.f_hz[worst])};"
                     f" largest phase difference {self.diff_deg[np.argmax(np.abs(self.diff_deg))]:+.1f} deg.")
        return lines


def _hz(x: float) -> str:
    return format_value(float(x), "Hz") if np.isfinite(x) else "not in the measured range"


def _deg(x: float) -> str:
    return f"{x:.1f} deg" if np.isfinite(x) else "not in the measured range"


def _db(x: float) -> str:
    return f"{x:.1f} dB" if np.isfinite(x) else "not in the measured range"


def _phase_near(phase_deg: np.ndarray, ref_deg: float) -> np.ndarray:
    """``phase_deg`` moved by whole turns so its first value lies within 180 deg of ``ref_deg``."""
    turns = np.round((ref_deg - phase_deg[0]) / 360.0)
    return phase_deg + 360.0 * turns


def measured_overlay(result, m: Measurement, corner: int, points: int = 600) -> Overlay:
    """The overlay of measurement ``m`` on the prediction of ``corner`` of ``result`` (a ``LoopResult``).

    Parameters
    ----------
    result : LoopResult
        The design's loop (its parts to build are the prediction for ``loop`` and ``compensator``).
    m : Measurement
    corner : int
        Corner index the measurement was taken at.
    points : int
        Points of the dense prediction grid.

    Returns
    -------
    Overlay

    Notes
    -----
    The difference and the measured margins are those of :mod:`loopkit.measured_fit` (margins as in
    Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed., 2001, sec. 9.4, read between
    measured points by interpolation in ln f); nothing is extrapolated beyond the measured range.
    """
    n = result.stage.n_corners
    if not (isinstance(corner, (int, np.integer)) and 0 <= corner < n):
        raise DesignError("corner", corner, f"must be a corner index from 0 to {n - 1}")
    if not 20 <= points <= 100_000:
        raise DesignError("points", points, "must be from 20 to 100000")
    cmp = compare(m, result, corner)  # raises DesignError when a loop or compensator has no parts
    lo = min(m.f_hz[0], result.f_hz[0])
    hi = max(m.f_hz[-1], result.f_hz[-1])
    f_pred = np.geomspace(lo, hi, points)
    pred = predicted_response(result, m.kind, corner, f_pred)
    if m.kind == "loop":
        pred_phase = result.loop.take([corner]).phase_deg(f_pred)[0]
    elif m.kind == "compensator":
        pred_phase = result.compensator.phase_deg(f_pred)[0]
    else:
        pred_phase = np.degrees(np.unwrap(np.angle(pred)))
    ref = float(np.interp(np.log(m.f_hz[0]), np.log(f_pred), pred_phase))
    meas_phase = _phase_near(m.phase_deg, ref)
    measured = predicted = None
    if m.kind == "loop":
        measured = measured_margins(m)
        pm = result.margins
        state = gm_state(pm)[corner]
        gm_text = f"{pm.gm_db[corner]:.1f} dB" if state == "number" else GM_WORDS[state]
        predicted = {"fc_hz": float(pm.fc_hz[corner]), "pm_deg": float(pm.pm_deg[corner]),
                     "gm_db": float(pm.gm_db[corner]), "gm_text": gm_text}
    st = result.stage
    label = f"{format_value(float(st.vin[corner]), 'V')} in, {format_value(float(st.load[corner]), 'A')} load"
    return Overlay(kind=m.kind, corner=int(corner), corner_label=f"corner #{corner} ({label})", f_pred_hz=f_pred,
                   pred_mag_db=20.0 * np.log10(np.abs(pred)), pred_phase_deg=pred_phase, f_hz=m.f_hz,
                   meas_mag_db=m.mag_db, meas_phase_deg=meas_phase, diff_db=cmp.diff_db, diff_deg=cmp.diff_deg,
                   measured=measured, predicted=predicted, f_range_hz=m.f_range_hz, source=m.source)

