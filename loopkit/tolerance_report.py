"""``loopkit tolerance``: the tolerance studies as a plain-text report, CSV and JSON.

Formatting only: every number comes from :mod:`loopkit.montecarlo`.  The text fits 80 columns
and ends with the caution; the CSV has one line per draw (its values, worst-corner margins and
whether it passed); the JSON document holds the setup, the yield with both intervals, the
worst-corner distributions, the sensitivity ranking, the worst case and every draw.
"""

from __future__ import annotations

import csv
import io
import json
import sys

import numpy as np

from .cautions import CAUTION
from .montecarlo import MonteCarloResult, Sensitivity, Study, WorstCase, worst_corner
from .tables import Column, format_table, wrap_note
from .units import format_value

__all__ = ["draws_csv", "progress_bar", "robust_text", "study_document", "study_json", "study_text"]

_PERCENTILES = (0.0, 1.0, 5.0, 50.0, 95.0, 100.0)


def _value(x: float, unit: str) -> str:
    return format_value(x, unit if unit != "ohm" else "Ω") if np.isfinite(x) else ("inf" if x > 0 else "-")


def study_text(study: Study, mc: MonteCarloResult | None, sens: list[Sensitivity] | None,
               wc: WorstCase | None, file: str = "") -> str:
    """The report: setup, yield with intervals, worst-corner distributions, sensitivity, worst case."""
    t = study.targets
    lines = [f"tolerance study of {file or study.design.title}",
             wrap_note(f"targets: PM >= {t.pm_deg:g} deg, GM >= {t.gm_db:g} dB, fc {_value(t.fc_hz, 'Hz')}"
                       f" within x{t.fc_band:g} (CCM corners), at each of {study.n_corners} corners"
                       + (f" x {len(study.temperatures)} temperatures" if study.temperatures else "")),
             wrap_note(f"controller kept: {study.controller_note}; the plant varies" if study.controller_note else
                       "parts: " + ", ".join(f"{k} {_value(v, 'Ω' if k.startswith('R') else 'F')}"
                                             for k, v in sorted(study.design.compensator.parts.items()))),
             ""]
    if study.temperatures:
        factors = study.design.tolerances.temperatures
        lines.insert(-1, wrap_note("temperature corners (every draw at each, values times): " + "; ".join(
            f"{c.name}: " + (", ".join(f"{k} x{v:g}" for k, v in c.factors.items()) or "as drawn") for c in factors)))
    rows = [[q.key, _value(q.nominal, q.unit), _value(q.low, q.unit), _value(q.high, q.unit),
             q.distribution if q.distribution == "uniform" else f"normal {q.sigmas:g}s"] for q in study.quantities]
    lines.append(format_table([Column("quantity", align="<"), Column("nominal"), Column("low"), Column("high"),
                               Column("distribution", align="<")], rows))
    nominal_pm = float(worst_corner(study.nominal)["pm_deg"][0])
    lines += ["", f"nominal values: worst-corner PM {nominal_pm:.1f} deg"]
    if mc is not None and mc.n:
        lo, hi = mc.wilson
        cl, ch = mc.clopper_pearson
        passed = int(np.sum(mc.passed))
        lines += ["", f"Monte Carlo: {mc.n} draws (random state {mc.random_state})"
                  + (f", cancelled after {mc.n} of {mc.requested}" if mc.cancelled else ""),
                  f"yield {100 * mc.yield_fraction:.1f} % ({passed} of {mc.n} meet every target at every corner)",
                  (f"  {100 * mc.confidence:g} % interval: Wilson score {100 * lo:.1f} .. {100 * hi:.1f} %,"
                   f" Clopper-Pearson {100 * cl:.1f} .. {100 * ch:.1f} %")]
        w = mc.worst
        rows = []
        for name, key, unit in (("worst PM", "pm_deg", "deg"), ("worst GM", "gm_db", "dB"),
                                ("lowest fc", "fc_min_hz", "Hz"), ("highest fc", "fc_max_hz", "Hz")):
            x = w[key][np.isfinite(w[key])]
            cells = [f"{np.percentile(x, p):.1f}" if unit != "Hz" else _value(np.percentile(x, p), "Hz")
                     for p in _PERCENTILES] if x.size else ["-"] * len(_PERCENTILES)
            rows.append([name, unit if unit != "Hz" else ""] + cells)
        lines += ["", format_table([Column("per draw", align="<"), Column("unit", align="<")]
                                   + [Column("min" if p == 0 else "max" if p == 100 else f"p{p:g}")
                                      for p in _PERCENTILES], rows)]
    if sens:
        rows = [[s.key, f"{s.pm_low_deg:.1f}", f"{s.pm_high_deg:.1f}", f"{s.effect_deg:.2f}",
                 "-" if np.isnan(s.rank_correlation) else f"{s.rank_correlation:+.2f}"] for s in sens]
        lines += ["", "sensitivity (one at a time at the limits; rank correlation with the draws):",
                  format_table([Column("quantity", align="<"), Column("PM at low", "deg"), Column("PM at high", "deg"),
                                Column("drop", "deg"), Column("Spearman")], rows)]
    if wc is not None:
        lines += ["", wrap_note(f"worst case (extreme values: {wc.vertices} vertices, {wc.evaluations} evaluations):"
                                f" worst-corner PM {wc.pm_deg:.1f} deg"
                                + (f"; Monte Carlo minimum {float(np.min(mc.worst['pm_deg'])):.1f} deg"
                                   if mc is not None and mc.n else "")),
                  wrap_note("at " + ", ".join(f"{q.key} {_value(v, q.unit)}" for q, v in zip(study.quantities,
                                                                                           wc.values)))]
    lines += ["", wrap_note(CAUTION)]
    return "\n".join(lines)


def draws_csv(mc: MonteCarloResult) -> str:
    """One line per draw: index, each quantity's value, worst-corner PM, GM, fc range, passed."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    keys = [q.key for q in mc.quantities]
    w.writerow(["draw", *keys, "worst_pm_deg", "worst_gm_db", "fc_min_hz", "fc_max_hz", "passed"])
    worst = mc.worst
    for i in range(mc.n):
        w.writerow([i, *(f"{x:.10g}" for x in mc.values[i]), f"{worst['pm_deg'][i]:.6g}",
                    f"{worst['gm_db'][i]:.6g}", f"{worst['fc_min_hz'][i]:.6g}", f"{worst['fc_max_hz'][i]:.6g}",
                    int(mc.passed[i])])
    return buf.getvalue()


def _num(x):
    x = np.asarray(x, float)
    if x.ndim == 0:
        return float(x) if np.isfinite(x) else None
    return [_num(v) for v in x]


def study_document(study: Study, mc: MonteCarloResult | None, sens: list[Sensitivity] | None,
                   wc: WorstCase | None, robust=None) -> dict:
    """The study as one JSON-ready document (NaN and inf as null); ``robust`` a
    :class:`loopkit.robust.RobustResult` or None."""
    t = study.targets
    doc = {
        "targets": {"pm_deg": t.pm_deg, "gm_db": t.gm_db, "fc_hz": t.fc_hz, "fc_band": t.fc_band},
        "parts": {k: float(v) for k, v in study.design.compensator.parts.items()},
        **({"controller": _controller_doc(study)} if study.controller is not None else {}),
        "quantities": [{"key": q.key, "nominal": q.nominal, "low": q.low, "high": q.high,
                        "distribution": q.distribution, "sigmas": q.sigmas, "unit": q.unit}
                       for q in study.quantities],
        "nominal_worst_pm_deg": _num(worst_corner(study.nominal)["pm_deg"][0]),
        "temperatures": [{"name": c.name, "factors": dict(c.factors)} for c in study.design.tolerances.temperatures],
    }
    if mc is not None:
        w = mc.worst
        doc["monte_carlo"] = {
            "random_state": mc.random_state, "requested": mc.requested, "draws": mc.n, "cancelled": mc.cancelled,
            "yield": _num(mc.yield_fraction), "confidence": mc.confidence,
            "wilson": _num(mc.wilson) if mc.n else None,
            "clopper_pearson": _num(mc.clopper_pearson) if mc.n else None,
            "values": _num(mc.values), "passed": [bool(x) for x in mc.passed],
            "worst_pm_deg": _num(w["pm_deg"]), "worst_gm_db": _num(w["gm_db"]),
            "fc_min_hz": _num(w["fc_min_hz"]), "fc_max_hz": _num(w["fc_max_hz"]),
        }
    if sens is not None:
        doc["sensitivity"] = {"method": "one at a time at the tolerance limits; Spearman rank correlation with the"
                                        " Monte Carlo draws",
                              "ranking": [{"key": s.key, "pm_low_deg": _num(s.pm_low_deg),
                                           "pm_high_deg": _num(s.pm_high_deg), "drop_deg": _num(s.effect_deg),
                                           "spearman": _num(s.rank_correlation)} for s in sens]}
    if wc is not None:
        doc["worst_case"] = {"pm_deg": _num(wc.pm_deg), "values": _num(wc.values), "vertices": wc.vertices,
                             "evaluations": wc.evaluations}
    if robust is not None:
        doc["robust"] = {"parts": {k: float(v) for k, v in robust.parts.items()},
                         "nominal_parts": {k: float(v) for k, v in robust.nominal_parts.items()},
                         "zeros_hz": list(robust.zeros_hz), "poles_hz": list(robust.poles_hz),
                         "scenarios": _num(robust.scenarios), "worst_pm_deg": _num(robust.worst_pm_deg),
                         "nominal_worst_pm_deg": _num(robust.nominal_worst_pm_deg),
                         "pm_at_nominal_deg": _num(robust.pm_at_nominal_deg),
                         "nominal_pm_at_nominal_deg": _num(robust.nominal_pm_at_nominal_deg),
                         "misses": robust.misses, "nominal_misses": robust.nominal_misses,
                         "kept_nominal": robust.kept_nominal}
    doc["caution"] = CAUTION
    return doc


def _controller_doc(study: Study) -> dict:
    """A digital study's fixed controller: which one, Ts and its difference equation (powers of z^-1)."""
    c = study.controller
    b, a = c.difference_equation(0)
    return {"kept": study.controller_note, "ts_s": float(c.ts_s), "b": _num(np.asarray(b, float)),
            "a": _num(np.asarray(a, float))}


def study_json(study: Study, mc, sens, wc, robust=None) -> str:
    return json.dumps(study_document(study, mc, sens, wc, robust), indent=2, allow_nan=False) + "\n"


def progress_bar(total: int, enabled: bool | None = None):
    """A tqdm progress bar on stderr (none when stderr is not a terminal), as a ``progress(done, total)``
    callback, and a function that closes it."""
    if enabled is None:
        enabled = sys.stderr is not None and sys.stderr.isatty()
    if not enabled:
        return None, lambda: None
    from tqdm import tqdm

    bar = tqdm(total=total, unit="draw", file=sys.stderr, leave=False)

    def update(done, _total):
        bar.update(done - bar.n)

    return update, bar.close


def robust_text(r) -> str:
    """Robust synthesis (:class:`loopkit.robust.RobustResult`) beside the nominal network."""
    names = sorted(set(r.parts) | set(r.nominal_parts))

    def unit(k):
        return "Ω" if k.startswith("R") else "F"

    rows = [["worst-corner PM at nominal values", f"{r.nominal_pm_at_nominal_deg:.1f}", f"{r.pm_at_nominal_deg:.1f}"],
            [f"lowest PM over {len(r.scenarios)} plant scenarios", f"{r.nominal_worst_pm_deg:.1f}",
             f"{r.worst_pm_deg:.1f}"],
            ["scenario corners missing GM, band or crossover", str(r.nominal_misses), str(r.misses)]]
    rows += [[k, _value(r.nominal_parts.get(k, np.nan), unit(k)), _value(r.parts.get(k, np.nan), unit(k))]
             for k in names]
    lines = [wrap_note("robust synthesis (the best worst-case PM over the plant's tolerance box; scenario 0"
                       " nominal):"),
             format_table([Column("", align="<"), Column("nominal"), Column("robust")], rows)]
    if r.kept_nominal:
        lines.append(wrap_note("no placement did better on every scenario: the nominal parts are kept"))
    return "\n".join(lines)
