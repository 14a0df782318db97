"""The one place where frequency in Hz meets pyqtgraph's log-x view coordinate.

Under ``setLogMode(x=True)`` pyqtgraph places items (InfiniteLine, TargetItem,
text) at ``log10(f)``; curves are given in Hz and converted by pyqtgraph.
Every conversion in the app goes through these two functions.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["hz_to_view", "view_to_hz"]


def hz_to_view(f_hz):
    """View x coordinate (log10 of hertz) of a frequency in Hz; NaN for f <= 0."""
    if np.ndim(f_hz) == 0:
        f = float(f_hz)
        return math.log10(f) if f > 0 and math.isfinite(f) else math.nan
    f = np.asarray(f_hz, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(f > 0, np.log10(np.where(f > 0, f, 1.0)), np.nan)


def view_to_hz(x):
    """Frequency in Hz of a view x coordinate (log10 of hertz)."""
    if np.ndim(x) == 0:
        return 10.0 ** float(x)
    return 10.0 ** np.asarray(x, dtype=float)
