"""The review report's efficiency, tolerance and switching-check sections, checked against the CLI.

- Efficiency: every cell of the section (per-corner efficiency, losses, every loss term, the
  four-switch modes) equals ``loopkit efficiency --json`` of the same file, formatted as the
  report formats numbers; the efficiency is output over output plus losses (the definition;
  Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed., 2001, sec. 3.1).
- Tolerances: the yield, its intervals, the sensitivity ranking and the worst case equal
  ``loopkit tolerance --json`` with the same draws and random state; the two intervals equal
  scipy's ``binomtest(...).proportion_ci`` with ``wilson`` and ``exact`` (Wilson 1927;
  Clopper & Pearson 1934; compared in L. D. Brown, T. T. Cai, A. DasGupta, "Interval estimation
  for a binomial proportion", Statistical Science 16(2), 2001).
- Switching check: the steady state and the injected loop gain equal ``loopkit simulate --only K
  --loop-gain`` of the same design corner (the simulator itself is checked against ngspice in
  test_switching_ngspice.py).
- The sections are absent when not asked for; bad requests are one-line errors.
- Headless Chromium (slow): the PDF of a report with every section holds the efficiency and yield
  numbers (pdftotext).  Its pages were rendered (pdftoppm) and looked at when this was written.
"""

from __future__ import annotations

import contextlib
import io
import json
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import binomtest

from loopkit import DesignError, load_design
from loopkit.cli import main
from loopkit.loop import design_loop
from loopkit.report.content import EMPTY, num
from loopkit.report.sections import efficiency_section, review_sections, switching_section, tolerance_section
from loopkit.units import parse_value

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_designs"
_test_report = pytest.importorskip("test_report")
needs_chromium, needs_poppler = _test_report.needs_chromium, _test_report.needs_poppler


def run_cli(args) -> tuple[int, str]:
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main([str(a) for a in args])
    return code, buf.getvalue()


def pct(x, digits=2) -> str:
    return EMPTY if x is None else f"{100 * x:.{digits}f}"


def watts(x) -> str:
    return "0" if x == 0 else num(x, "W")


@pytest.fixture(scope="module")
def tolerance_file(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("tol") / "buck_tol.toml"
    path.write_text((SAMPLES / "buck_24v_3v3.toml").read_text(encoding="utf-8")
                    + '\n[tolerances]\ninductance = "20%"\ndcr = "15%"\n', encoding="utf-8")
    return path


# ------------------------------------------------------------------ efficiency
@pytest.mark.parametrize("name", ["buck_24v_3v3", "fourswitch_automotive_9v", "boost_liion_5v"])
def test_efficiency_section_equals_the_efficiency_command_json(name):
    path = SAMPLES / f"{name}.toml"
    code, out = run_cli(["efficiency", path, "--json"])
    assert code == 0
    doc = json.loads(out)
    c = doc["corners"]
    s = efficiency_section(load_design(path))
    tables = {t.caption: t for t in s.tables}
    summary = tables["Efficiency at every corner"]
    assert len(summary.rows) == len(c["vin"])
    for k, row in enumerate(summary.rows):
        assert row[1] == num(c["vin"][k], "V") and row[2] == num(c["load"][k], "A") and row[3] == c["mode"][k]
        assert row[5] == num(c["p_out_w"][k], "W") and row[6] == num(c["p_loss_w"][k], "W")
        assert row[7] == pct(c["efficiency"][k])
        # efficiency = Pout / (Pout + losses), its definition (Erickson & Maksimovic, 2001, sec. 3.1)
        assert c["efficiency"][k] == pytest.approx(c["p_out_w"][k] / (c["p_out_w"][k] + c["p_loss_w"][k]), rel=1e-9)
    breakdown = [t for cap, t in tables.items() if "losses per corner" in cap]
    seen = 0
    for t in breakdown:
        for j, title in enumerate(t.columns[1:], start=1):
            field = next(f for f, v in _loss_titles().items() if f"{v} (W)" == title)
            assert [row[j] for row in t.rows] == [watts(x) for x in c[field]]
            seen += 1
    assert seen == sum(1 for f in _loss_titles() if any(x != 0 for x in c[f]))  # every non-zero term shown
    modes = [t for cap, t in tables.items() if "four-switch mode" in cap]
    if doc["modes"] is None:
        assert not modes
    else:
        (t,) = modes
        m = doc["modes"]
        for k, row in enumerate(t.rows):
            assert row[3] == m["rule"][k] and row[-2] == m["best"][k] and row[-1] == f"{m['cost_points'][k]:.2f}"
            assert list(row[4:4 + len(m["modes"])]) == [pct(x) if x is not None else EMPTY for x in m["efficiency"][k]]
    assert "<svg" in s.html and s.html.count("Vin ") >= len(doc["curves"]["vin"])


def _loss_titles():
    from loopkit.efficiency import LOSS_TITLES

    return LOSS_TITLES


def test_efficiency_section_says_conduction_only_without_a_losses_table():
    d = load_design(SAMPLES / "boost_liion_5v.toml")
    assert not d.losses.given
    assert any(p.startswith("Conduction losses only") for p in efficiency_section(d).paragraphs)
    d = load_design(SAMPLES / "buck_24v_3v3.toml")
    assert d.losses.given and not any(p.startswith("Conduction losses only") for p in efficiency_section(d).paragraphs)


# ------------------------------------------------------------------ absent when not asked for
def test_only_the_efficiency_section_by_default_and_none_when_turned_off():
    d = load_design(SAMPLES / "buck_24v_3v3.toml")
    r = design_loop(d)
    assert [s.title for s in review_sections(d, r)] == ["Efficiency"]
    assert review_sections(d, r, efficiency=False) == []


def test_bad_section_requests_are_refused_with_a_design_error(tmp_path, capsys):
    d = load_design(SAMPLES / "buck_24v_3v3.toml")
    with pytest.raises(DesignError, match=r"\[tolerances\]"):
        tolerance_section(d, 10)
    out = tmp_path / "r.html"
    assert main(["report", str(SAMPLES / "buck_24v_3v3.toml"), "-o", str(out), "--tolerance-draws", "5"]) == 2
    err = capsys.readouterr().err
    assert "--tolerance-draws" in err and "[tolerances]" in err and err.count("\n") == 1
    assert main(["report", str(SAMPLES / "buck_24v_3v3.toml"), "-o", str(out), "--robust"]) == 2
    assert "--robust" in capsys.readouterr().err and not out.exists()


# ------------------------------------------------------------------ tolerances
@pytest.mark.slow
def test_tolerance_section_equals_the_tolerance_command_json(tolerance_file, tmp_path):
    draws, state = 60, 7
    out = tmp_path / "study.json"
    code, _ = run_cli(["tolerance", tolerance_file, "--draws", draws, "--random-state", state, "--worst-case",
                       "--json", out, "--no-progress"])
    assert code in (0, 1)
    doc = json.loads(out.read_text(encoding="utf-8"))
    mc = doc["monte_carlo"]
    s = tolerance_section(load_design(tolerance_file), draws, state)
    tables = {t.caption: t for t in s.tables}
    (row,) = tables["Yield with its 95 % intervals"].rows
    passed = sum(mc["passed"])
    assert row[1:] == (str(draws), str(passed), pct(mc["yield"], 1), pct(mc["wilson"][0], 1), pct(mc["wilson"][1], 1),
                       pct(mc["clopper_pearson"][0], 1), pct(mc["clopper_pearson"][1], 1))
    # the intervals against scipy (Brown, Cai & DasGupta 2001): Wilson score and Clopper-Pearson ("exact")
    for method, key in (("wilson", "wilson"), ("exact", "clopper_pearson")):
        ci = binomtest(passed, draws).proportion_ci(0.95, method)
        assert mc[key] == pytest.approx([ci.low, ci.high], abs=1e-9)
    worst = tables["Worst corner of each draw: percentiles over the draws"].rows[0]
    pm = np.array(mc["worst_pm_deg"], float)
    assert worst[1:] == tuple(f"{np.percentile(pm, p):.1f}" for p in (0, 1, 5, 50, 95, 100))
    sens = tables["Sensitivity of the worst-corner PM, largest effect first"].rows
    assert [r[0] for r in sens] == [x["key"] for x in doc["sensitivity"]["ranking"]]
    assert [r[3] for r in sens] == [f"{x['drop_deg']:.2f}" for x in doc["sensitivity"]["ranking"]]
    (wc,) = tables["Extreme-value worst case"].rows
    assert wc[1] == f"{doc['worst_case']['pm_deg']:.1f}"
    assert f"Yield {pct(mc['yield'], 1)} %" in " ".join(s.paragraphs)
    assert "pmhist" in s.html


# ------------------------------------------------------------------ switching check
def _floats(cells) -> list[float]:
    return [parse_value(c.rstrip("%"), "cell", None) for c in cells]


@pytest.mark.slow
def test_switching_section_equals_the_simulate_command():
    path = SAMPLES / "buck_24v_3v3.toml"
    d = load_design(path)
    r = design_loop(d)
    k0 = r.design_corner
    code, out = run_cli(["simulate", path, "--only", k0, "--loop-gain", "--no-progress"])
    assert code == 0
    s = switching_section(r)
    steady, lg = s.tables
    lines = [ln.split() for ln in out.splitlines()]
    cli_row = next(ln for ln in lines if ln and ln[0] == str(k0) and len(ln) == 10)  # '#', corner (2 words), ...
    row = steady.rows[k0]
    assert row[2] == cli_row[3]  # CCM/DCM
    assert _floats(row[3:7]) == pytest.approx(_floats(cli_row[4:8]), rel=2e-3)  # vout, ripple, peak, averaged peak
    assert _floats(row[7:9]) == pytest.approx(_floats(cli_row[8:10]), abs=0.006)  # duty, % (2 decimals)
    cli_lg = [ln for ln in lines if ln and ln[0] == str(k0) and len(ln) == 8]
    assert len(cli_lg) == len(lg.rows)
    for mine, theirs in zip(lg.rows, cli_lg):
        assert mine[1:] == tuple(theirs[2:])  # dB and degrees as the CLI prints them
        assert parse_value(mine[0], "f", "Hz") == pytest.approx(parse_value(theirs[1], "f", "Hz"), rel=2e-3)
    limit = re.search(rf"#{k0}: (.*)", out).group(1)
    assert ("within 1 dB and 5 deg" in limit) == ("within 1 dB and 5 deg" in s.paragraphs[2])
    assert len(s.paragraphs) == 3  # every corner regulates: no corner note


@pytest.mark.slow
def test_switching_section_names_the_corners_that_do_not_regulate():
    """The four-switch sample at 9.5 V runs into the modulator's duty limit in the switching model.

    There the output is the buck conversion ratio times the input, M(D) = D (Erickson &
    Maksimovic, Fundamentals of Power Electronics, 2nd ed., 2001, sec. 2.3), less the conduction
    drops: within 2 % of max_duty * vin (the drops: common practice, no source).
    """
    d = load_design(SAMPLES / "fourswitch_automotive_9v.toml")
    r = design_loop(d)
    s = switching_section(r)
    steady = s.tables[0]
    notes = [p for p in s.paragraphs if "from the set point" in p]
    flagged = {int(re.match(r"Corner #(\d+)", p).group(1)) for p in notes}
    assert flagged  # this sample has such corners
    for k in flagged:
        vin = float(r.stage.vin[k])
        vout = parse_value(steady.rows[k][3], "vout", "V")
        assert vout == pytest.approx(d.modulator.max_duty * vin, rel=0.02)
        assert "modulator's limit" in next(p for p in notes if p.startswith(f"Corner #{k} "))
    for k, row in enumerate(steady.rows):
        if k not in flagged:
            assert parse_value(row[3], "vout", "V") == pytest.approx(parse_value(steady.rows[0][3], "v", "V"), rel=0.01)


# ------------------------------------------------------------------ the PDF a reader gets
@pytest.mark.slow
@needs_chromium
@needs_poppler
def test_pdf_with_every_section_holds_the_efficiency_and_yield_numbers(tolerance_file, tmp_path):
    pdf = tmp_path / "review.pdf"
    code, _ = run_cli(["report", tolerance_file, "--pdf", pdf, "--tolerance-draws", 40, "--random-state", 3,
                       "--switching"])
    assert code in (0, 1)
    text = subprocess.run([shutil.which("pdftotext") or "pdftotext", "-layout", str(pdf), "-"], check=True,
                          capture_output=True, text=True).stdout
    for title in ("Efficiency", "Tolerances and yield", "Switching check", "Robust"):
        assert (title in text) == (title != "Robust")
    code, out = run_cli(["efficiency", tolerance_file, "--json"])
    c = json.loads(out)["corners"]
    flat = " ".join(text.split())
    for k in range(len(c["vin"])):
        assert f"{num(c['p_loss_w'][k], 'W')} {pct(c['efficiency'][k])}" in flat
    js = tmp_path / "study.json"
    run_cli(["tolerance", tolerance_file, "--draws", 40, "--random-state", 3, "--json", js, "--no-progress"])
    mc = json.loads(js.read_text(encoding="utf-8"))["monte_carlo"]
    assert f"Yield {pct(mc['yield'], 1)} % ({sum(mc['passed'])} of 40 draws" in flat
    assert (f"Wilson score {pct(mc['wilson'][0], 1)} to {pct(mc['wilson'][1], 1)} %, Clopper-Pearson"
            f" {pct(mc['clopper_pearson'][0], 1)} to {pct(mc['clopper_pearson'][1], 1)} %") in flat
