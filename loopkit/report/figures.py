"""The report's plots as SVG text, drawn with matplotlib (imported here only, when a report is made).

Only drawing: every curve is computed by the library (the loop result's responses, the
overlay of :mod:`loopkit.measured_overlay`, the step responses of :mod:`loopkit.timeresponse`).
Figures are made with ``matplotlib.figure.Figure`` (no pyplot, no global state), their text
kept as text, their element ids fixed, so the same design gives the same SVG.
"""

from __future__ import annotations

import io
import re

import numpy as np

from ..units import format_value

__all__ = ["bode_svg", "overlay_svg", "step_svg"]

_INK = "#1f2a33"
_GRID = "#d9dee3"
_ACCENT = "#b04a00"
_STYLE = {
    "svg.fonttype": "none",  # text stays text: searchable in the page and the PDF
    "svg.hashsalt": "loopkit-report",  # fixed element ids
    "font.family": "DejaVu Sans",
    "font.size": 8.5,
    "axes.edgecolor": "#7a868f",
    "axes.labelcolor": _INK,
    "axes.linewidth": 0.8,
    "xtick.color": _INK,
    "ytick.color": _INK,
    "grid.color": _GRID,
    "grid.linewidth": 0.6,
    "legend.frameon": False,
    "legend.fontsize": 7.5,
}


def _matplotlib():
    import matplotlib

    return matplotlib


def _figure(width_in: float, height_in: float, rows: int, height_ratios=None):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    axes = fig.subplots(rows, 1, sharex=True, gridspec_kw={"height_ratios": height_ratios} if height_ratios else None)
    return fig, np.atleast_1d(axes)


def _svg(fig, prefix: str) -> str:
    """The figure as inline SVG: no prolog or metadata, element ids prefixed (several SVGs share one page)."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": "loopkit"})
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"<metadata>.*?</metadata>", "", text, flags=re.DOTALL)
    text = re.sub(r'\bid="([^"]+)"', rf'id="{prefix}-\1"', text)
    text = re.sub(r'href="#([^"]+)"', rf'href="#{prefix}-\1"', text)
    return re.sub(r"url\(#([^)]+)\)", rf"url(#{prefix}-\1)", text)


def _hz_ticks(ax) -> None:
    from matplotlib.ticker import FuncFormatter, LogLocator

    ax.set_xscale("log")
    ax.xaxis.set_major_locator(LogLocator(base=10.0))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda x, _: format_value(x, "Hz", 3)))
    ax.grid(True, which="major")
    ax.grid(True, which="minor", alpha=0.45)


def _corner_styles(stage):
    """Colour by input voltage (low = dark blue to high = orange), line style by load (highest solid)."""
    from matplotlib.colors import LinearSegmentedColormap

    cmap = LinearSegmentedColormap.from_list("vin", ["#1d4e89", "#7a4f9a", "#c8512a"])
    vmin, vmax = float(np.min(stage.vin)), float(np.max(stage.vin))
    loads = sorted({float(x) for x in stage.load}, reverse=True)
    dashes = ["-", "--", ":", "-."]
    out = []
    for k in range(stage.n_corners):
        u = 0.5 if vmax == vmin else (float(stage.vin[k]) - vmin) / (vmax - vmin)
        out.append({"color": cmap(u), "linestyle": dashes[loads.index(float(stage.load[k])) % 4]})
    return out


def bode_svg(result) -> str:
    """Loop gain of every corner with the parts to build: magnitude and phase, crossover target, fsw/2."""
    with _matplotlib().rc_context(_STYLE):
        fig, (mag, ph) = _figure(7.2, 5.4, 2)
        f = result.f_hz
        styles = _corner_styles(result.stage)
        for k, label in enumerate(result.corner_labels):
            mag.plot(f, result.loop_mag_db[k], lw=1.1, label=f"#{k} {label}", **styles[k])
            ph.plot(f, result.loop_phase_deg[k], lw=1.1, **styles[k])
        half = result.design.stage.fsw / 2
        for ax in (mag, ph):
            _hz_ticks(ax)
            ax.axvline(result.targets.fc_hz, color=_ACCENT, lw=0.9, ls=(0, (4, 3)))
            if half < f[-1]:
                ax.axvspan(half, f[-1], color="#eef0f2", zorder=0)
            ax.set_xlim(f[0], f[-1])
        mag.axhline(0.0, color=_INK, lw=0.8)
        ph.axhline(-180.0, color=_INK, lw=0.8)
        mag.set_ylabel("|T| (dB)")
        ph.set_ylabel("phase of T (deg)")
        ph.set_xlabel("frequency")
        lo = np.nanmin(result.loop_phase_deg)
        ph.set_ylim(max(lo - 10, -360), min(np.nanmax(result.loop_phase_deg) + 10, 180))
        ph.set_yticks(np.arange(-360, 181, 45))
        ph.set_ylim(max(lo - 10, -360), min(np.nanmax(result.loop_phase_deg) + 10, 180))
        mag.text(result.targets.fc_hz, mag.get_ylim()[1], " target fc", color=_ACCENT, va="top", fontsize=7.5)
        mag.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), ncols=1 if result.stage.n_corners <= 14 else 2,
                   title="corner (Vin, load)", title_fontsize=7.5)
        return _svg(fig, "bode")


def overlay_svg(ov, prefix: str = "overlay") -> str:
    """A measurement (points) on the prediction of its corner (line), and their difference below."""
    from ..measured_overlay import KIND_TITLES

    with _matplotlib().rc_context(_STYLE):
        fig, (mag, ph, diff) = _figure(7.2, 6.2, 3, height_ratios=(3, 3, 2))
        mag.plot(ov.f_pred_hz, ov.pred_mag_db, color=_INK, lw=1.2, label="predicted")
        mag.plot(ov.f_hz, ov.meas_mag_db, ls="none", marker="o", ms=2.6, color=_ACCENT, label="measured")
        ph.plot(ov.f_pred_hz, ov.pred_phase_deg, color=_INK, lw=1.2)
        ph.plot(ov.f_hz, ov.meas_phase_deg, ls="none", marker="o", ms=2.6, color=_ACCENT)
        diff.plot(ov.f_hz, ov.diff_db, color=_ACCENT, lw=1.1, label="gain (dB)")
        twin = diff.twinx()
        twin.plot(ov.f_hz, ov.diff_deg, color="#3b6e8f", lw=1.1, ls="--", label="phase (deg)")
        for ax in (mag, ph, diff):
            _hz_ticks(ax)
            ax.axvspan(*ov.f_range_hz, color="#f3efe6", zorder=0)
        if ov.kind == "loop":
            mag.axhline(0.0, color=_INK, lw=0.8)
            ph.axhline(-180.0, color=_INK, lw=0.8)
        diff.axhline(0.0, color=_INK, lw=0.8)
        mag.set_ylabel("gain (dB)")
        ph.set_ylabel("phase (deg)")
        diff.set_ylabel("difference (dB)")
        twin.set_ylabel("difference (deg)")
        diff.set_xlabel("frequency (shaded: the measured range)")
        mag.set_title(f"{KIND_TITLES[ov.kind]}, {ov.corner_label}", fontsize=8.5, loc="left")
        lines = diff.get_legend_handles_labels()
        tl = twin.get_legend_handles_labels()
        diff.legend(lines[0] + tl[0], lines[1] + tl[1], loc="best", ncols=2)
        mag.legend(loc="best")
        return _svg(fig, prefix)


def _visible_range(v, t, t_end, band_v) -> tuple[float, float]:
    """y limits (mV) holding every curve up to ``t_end`` and the settling band."""
    shown = v[:, t <= t_end]
    shown = shown[np.isfinite(shown)]
    lo = min(float(shown.min()) if shown.size else 0.0, -band_v) * 1e3
    hi = max(float(shown.max()) if shown.size else 0.0, band_v) * 1e3
    pad = 0.06 * (hi - lo)
    return lo - pad, hi + pad


def step_svg(step, result, title: str) -> str:
    """Output deviation against time at every corner of a step response.

    The time axis ends past the latest peak and settling (the slow tail of a well-damped loop
    says nothing more); the table beside it holds the figures of the whole span.
    """
    t = step.t_s
    ends = np.concatenate([5.0 * step.t_peak_s, 2.0 * step.settle_s])
    ends = ends[np.isfinite(ends) & (ends > 0)]
    t_end = float(np.clip(ends.max(), 20.0 * (t[1] - t[0]), t[-1])) if ends.size else float(t[-1])
    scale, prefix = (1e3, "ms") if t_end >= 1e-3 else (1e6, "µs")
    with _matplotlib().rc_context(_STYLE):
        fig, (ax,) = _figure(7.2, 3.2, 1)
        styles = _corner_styles(result.stage)
        for k, label in enumerate(result.corner_labels):
            ax.plot(t * scale, step.v[k] * 1e3, lw=1.1, label=f"#{k} {label}", **styles[k])
        ax.axhspan(-step.band_v * 1e3, step.band_v * 1e3, color="#eef0f2", zorder=0)
        ax.axhline(0.0, color=_INK, lw=0.6)
        ax.grid(True)
        ax.set_xlim(t[0] * scale, t_end * scale)
        ax.set_ylim(*_visible_range(step.v, t, t_end, step.band_v))
        ax.set_xlabel(f"time ({prefix})")
        ax.set_ylabel("output deviation (mV)")
        ax.set_title(title + " (shaded: the settling band)", fontsize=8.5, loc="left")
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), title="corner (Vin, load)", title_fontsize=7.5)
        return _svg(fig, "step")
