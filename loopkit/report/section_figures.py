"""Plots of the report's optional sections as SVG text (matplotlib, imported only when a report is made).

Only drawing, in the style of :mod:`loopkit.report.figures`: the efficiency curves come from
:func:`loopkit.efficiency.efficiency_curves`, the phase margins from the Monte Carlo run of
:mod:`loopkit.montecarlo`.
"""

from __future__ import annotations

import numpy as np

from ..units import format_value
from .figures import _ACCENT, _INK, _STYLE, _figure, _matplotlib, _svg

__all__ = ["efficiency_svg", "pm_histogram_svg"]


def efficiency_svg(curves, eff=None) -> str:
    """Efficiency (%) against load, one curve per input voltage; the corners of ``eff`` as markers."""
    from matplotlib.colors import LinearSegmentedColormap

    cmap = LinearSegmentedColormap.from_list("vin", ["#1d4e89", "#7a4f9a", "#c8512a"])
    vin = np.asarray(curves.vin, float)
    lo, hi = float(np.min(vin)), float(np.max(vin))
    with _matplotlib().rc_context(_STYLE):
        fig, (ax,) = _figure(7.2, 3.4, 1)
        for i, v in enumerate(vin):
            colour = cmap(0.5 if hi == lo else (v - lo) / (hi - lo))
            ax.plot(curves.load, 100 * curves.efficiency[i], lw=1.3, color=colour,
                    label=f"Vin {format_value(float(v), 'V', 4)}")
            if eff is not None:
                k = np.isclose(eff.vin, v)
                ax.plot(eff.load[k], 100 * eff.efficiency[k], ls="none", marker="o", ms=3.5, color=colour)
        shown = 100 * curves.efficiency[np.isfinite(curves.efficiency)]
        if shown.size:
            ax.set_ylim(max(0.0, float(shown.min()) - 2.0), min(100.0, float(shown.max()) + 1.0))
        ax.set_xlim(float(np.min(curves.load)), float(np.max(curves.load)))
        ax.grid(True)
        ax.set_xlabel("load (A)")
        ax.set_ylabel("efficiency (%)")
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), title="input voltage", title_fontsize=7.5)
        return _svg(fig, "efficiency")


def pm_histogram_svg(pm_deg, target_deg: float, nominal_deg: float, worst_case_deg: float | None = None) -> str:
    """Histogram of the worst-corner PM over the draws, with the target, the nominal PM and the worst case."""
    pm = np.asarray(pm_deg, float)
    pm = pm[np.isfinite(pm)]
    with _matplotlib().rc_context(_STYLE):
        fig, (ax,) = _figure(7.2, 2.9, 1)
        if pm.size:
            bins = max(8, min(40, int(np.sqrt(pm.size)) + 1))
            below = pm < target_deg
            edges = np.histogram_bin_edges(np.concatenate([pm, [target_deg]]), bins=bins)
            ax.hist(pm[~below], bins=edges, color="#5f7f96", label="meets the PM target")
            if below.any():
                ax.hist(pm[below], bins=edges, color=_ACCENT, label="below the PM target")
        ax.axvline(target_deg, color=_INK, lw=1.0, ls=(0, (4, 3)), label=f"target {target_deg:g} deg")
        ax.axvline(nominal_deg, color="#2f7d4f", lw=1.2, label=f"nominal values {nominal_deg:.1f} deg")
        if worst_case_deg is not None and np.isfinite(worst_case_deg):
            ax.axvline(worst_case_deg, color=_ACCENT, lw=1.2, ls=":", label=f"worst case {worst_case_deg:.1f} deg")
        ax.grid(True, axis="y")
        ax.set_xlabel("worst-corner phase margin of a draw (deg)")
        ax.set_ylabel("draws")
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
        return _svg(fig, "pmhist")
