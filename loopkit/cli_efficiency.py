"""``loopkit efficiency``: losses and efficiency per corner, the four-switch modes, curves against load.

Formatting only: every number comes from :mod:`loopkit.efficiency`.  Text tables
(80 columns), ``--csv`` efficiency against load per input voltage for plotting,
``--json`` one document with all of it.
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np

from .cautions import CAUTION
from .designfile import load_design
from .efficiency import LOSS_TITLES, efficiency, efficiency_curves, mode_efficiency
from .loss_model import LOSS_FIELDS
from .tables import EMPTY, Column, format_table, wrap_note

__all__ = ["add_efficiency_command", "curves_csv", "efficiency_document", "efficiency_text"]

#: Notes on what the figures leave out, always printed (the model's limits).
MODEL_NOTES = (
    "Losses from the averaged operating point with piecewise-linear currents; the duty carries the dead"
    " time's body-diode drop (and the core loss in DCM); overlap, Coss, recovery, gate drive and controller"
    " raise the input current at the same duty. Switching-loss expressions: Erickson &"
    " Maksimovic, Fundamentals of Power Electronics, 2nd ed., section 4.6 (linear transitions,"
    " energy-equivalent Coss); core loss by Steinmetz's equation at fsw (sinusoidal-flux form, no"
    " correction for the triangular flux). Not modelled: leakage inductance and snubbers, ringing, the"
    " windings' ac resistance, temperature."
)


def _cli():
    from . import cli

    return cli


def _fmt(value, unit=""):
    return _cli()._fmt(value, unit)


def _pct(value) -> str:
    return EMPTY if value is None or not np.isfinite(value) else f"{100.0 * value:.2f}"


def _watts(value) -> str:
    if value is None or not np.isfinite(value):
        return EMPTY
    return "0" if value == 0 else _fmt(value, "")


def efficiency_text(design, eff, modes=None, path: str = "") -> str:
    """The ``loopkit efficiency`` report: per-corner summary, the loss breakdown, modes, notes, caution."""
    cli = _cli()
    out = cli._design_header(design, path) + [""] if path or design.title else []
    n = eff.vin.shape[0]
    rows = []
    for k in range(n):
        worst = max(LOSS_FIELDS, key=lambda f: getattr(eff, f)[k])
        rows.append([str(k), _fmt(eff.vin[k]), _fmt(eff.load[k]), eff.mode[k], f"{100 * eff.duty[k]:.1f}",
                     _fmt(eff.p_out_w[k]), _fmt(eff.p_loss_w[k]), _pct(eff.efficiency[k]), LOSS_TITLES[worst]])
    cols = [Column("#", "", "<"), Column("Vin", "V"), Column("Load", "A"), Column("Mode", "", "<"),
            Column("Duty", "%"), Column("Pout", "W"), Column("Losses", "W"), Column("Eff", "%"),
            Column("largest", "", "<")]
    out.append(format_table(cols, rows))
    used = [f for f in LOSS_FIELDS if np.any(getattr(eff, f) != 0)]
    for title, names in (("Conduction losses, W", LOSS_FIELDS[:7]), ("Switching and other losses, W",
                                                                      LOSS_FIELDS[7:])):
        shown = [f for f in names if f in used]
        if not shown:
            continue
        table = [[str(k)] + [_watts(getattr(eff, f)[k]) for f in shown] for k in range(n)]
        out += ["", title + ":", format_table([Column("#", "", "<")] + [Column(LOSS_TITLES[f]) for f in shown],
                                               table)]
    if modes is not None:
        table = []
        for k in range(n):
            table.append([str(k), _fmt(modes.vin[k]), _fmt(modes.load[k]), modes.rule[k]]
                         + [_pct(modes.efficiency[k, j]) for j in range(len(modes.modes))]
                         + [modes.best[k], f"{modes.cost_points[k]:.2f}"])
        cols = ([Column("#", "", "<"), Column("Vin", "V"), Column("Load", "A"), Column("rule", "", "<")]
                + [Column(m, "%") for m in modes.modes] + [Column("best", "", "<"), Column("cost", "points")])
        out += ["", wrap_note("Each mode at the same input and load (four-switch stage; buck-boost: all four switches"
                              " every period). cost: efficiency points the rule's mode gives away to the best."),
                format_table(cols, table)]
    out.append("")
    if eff.omitted:
        out.append(wrap_note("Not given in [losses], counted as zero: " + "; ".join(eff.omitted) + ".",
                             first="note: "))
    out.append(wrap_note(MODEL_NOTES, first="note: "))
    out += ["", wrap_note(CAUTION)]
    return "\n".join(out)


def curves_csv(curves) -> str:
    """Efficiency against load, one column per input voltage (first line: the caution as a comment)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([f"# {CAUTION}"])
    names = [f"efficiency vin={_cli().format_value(float(v), 'V', 4, True)}" for v in curves.vin]
    w.writerow(["load_a"] + names)
    for i, load in enumerate(curves.load):
        w.writerow([f"{load:.6g}"] + [EMPTY if not np.isfinite(e) else f"{e:.6f}" for e in curves.efficiency[:, i]])
    return buf.getvalue()


def _plain_list(a):
    return [None if not np.isfinite(x) else float(x) for x in np.ravel(a)]


def efficiency_document(eff, modes, curves) -> dict:
    """The ``--json`` document: corners (every loss term), modes (four-switch) and curves."""
    doc = {"caution": CAUTION, "corners": eff.as_dict(), "modes": None,
           "curves": {"vin": _plain_list(curves.vin), "load": _plain_list(curves.load),
                      "efficiency": [_plain_list(row) for row in curves.efficiency]}}
    if modes is not None:
        doc["modes"] = {"modes": list(modes.modes), "rule": modes.rule.tolist(), "best": modes.best.tolist(),
                        "efficiency": [_plain_list(row) for row in modes.efficiency],
                        "rule_efficiency": _plain_list(modes.rule_efficiency),
                        "cost_points": _plain_list(modes.cost_points)}
    return doc


def _cmd_efficiency(args) -> int:
    cli = _cli()
    design = load_design(args.file)
    if args.csv and args.csv != "-":
        cli._check_outputs(args.file, [("--csv", args.csv, None)])
    load_min = cli.parse_value(args.load_min, "--load-min", "A") if args.load_min is not None else None
    eff = efficiency(design)
    modes = mode_efficiency(design) if design.stage.topology == "four-switch-buck-boost" else None
    curves = efficiency_curves(design, args.points, load_min)
    if args.json:
        print(json.dumps(efficiency_document(eff, modes, curves), indent=2, allow_nan=False))
    elif args.csv == "-":
        print(curves_csv(curves), end="")
        return 0
    else:
        text = efficiency_text(design, eff, modes, args.file)
        if args.csv:
            cli._write_text(args.csv, curves_csv(curves))
            text += "\n" + wrap_note(f"wrote {args.csv}: efficiency at {curves.load.size} loads for each of"
                                     f" {curves.vin.size} input voltages")
        print(text)
    if args.csv and args.csv != "-" and args.json:
        cli._write_text(args.csv, curves_csv(curves))
    return 0


def add_efficiency_command(sub) -> None:
    """Register ``loopkit efficiency`` on the CLI's subparsers."""
    p = sub.add_parser("efficiency", help="losses and efficiency per corner; four-switch modes; curves against load")
    p.add_argument("file", metavar="FILE", help="design file (TOML)")
    p.add_argument("--csv", metavar="OUT", help="write efficiency against load per input voltage ('-': standard"
                                                " output, no tables)")
    p.add_argument("--json", action="store_true", help="print one JSON document instead of tables")
    p.add_argument("--points", type=int, default=25, help="loads per curve in --csv/--json (default 25)")
    p.add_argument("--load-min", help="lightest load of the curves, A (default: the design's lightest)")
    p.set_defaults(run=_cmd_efficiency)
