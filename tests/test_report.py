"""The design-review report, checked as a reader would check it.

- The numbers in the report's tables are the CLI's: every corner's fc, PM and GM (with the parts to
  build and with the computed parts) and every part value, against ``loopkit design --json``; in the
  HTML for every sample, and in the PDF's text (pdftotext) for three samples.
- The margins the report shows are those of python-control's ``stability_margins`` on the same loop
  (an outside reference; margins as defined in Erickson & Maksimovic, Fundamentals of Power
  Electronics, 2nd ed., 2001, sec. 9.4).
- A measurement made from python-control's frequency response of a corner's loop reads back that
  corner's fc and PM through the overlay (interpolation between 400 points: 0.5 % and 0.3 deg,
  common practice, no source), with a difference of zero to the prediction.
- The page stands alone (no address or file it loads), carries the caution at the top and the end,
  and ``loopkit design`` never imports matplotlib (only a report does).
- Headless Chromium (Debian's ``chromium``; slow) renders every sample's page to PNG and prints
  the PDF; pdftoppm turns it into pages.  The images were looked at when this was written; the
  tests check what can be checked without eyes (not blank, caution band on the first screen).
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from loopkit import DesignError, format_value, load_design
from loopkit.cautions import CAUTION
from loopkit.cli import main
from loopkit.loop import design_loop
from loopkit.measured import Measurement
from loopkit.measured_overlay import measured_overlay
from loopkit.report import ExtraSection, Table, check_self_contained, report_html
from loopkit.report.content import corner_table, parts_table

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = __import__("conftest").SAMPLES
BY_NAME = {p.stem: p for p in SAMPLES}
PDF_SAMPLES = ("buck_24v_3v3", "fourswitch_automotive_9v", "flyback_pcm_48v_12v")

_HAVE_CHROMIUM = bool(os.environ.get("LOOPKIT_CHROMIUM") or shutil.which("chromium") or shutil.which("chromium-browser"))
needs_chromium = pytest.mark.skipif(
    not _HAVE_CHROMIUM and not os.environ.get("CI"),
    reason="headless Chromium not installed (apt-get install chromium poppler-utils; .ci/run installs them)")
needs_poppler = pytest.mark.skipif(
    shutil.which("pdftotext") is None and not os.environ.get("CI"),
    reason="poppler-utils (pdftotext, pdftoppm) not installed (.ci/run installs them)")


def cli_json(path) -> dict:
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main(["design", str(path), "--json"])
    assert code in (0, 1)
    return json.loads(buf.getvalue())


def _gm_text(state: str, gm) -> str:
    return {"number": None, "none": "none", "beyond-model": ">fsw/2"}[state] or f"{gm:.1f}"


def expected_corner_cells(doc: dict, k: int, given: bool) -> list[str]:
    """fc, PM, GM with the parts to build (then with the computed parts) as the JSON gives them."""
    c = doc["corners"][k]
    cells = [format_value(c["fc_hz"]) if c["fc_hz"] is not None else "—",
             f"{c['pm_deg']:.1f}" if c["pm_deg"] is not None else "—", _gm_text(c["gm_state"], c["gm_db"])]
    if not given:
        x = c["exact_parts"]
        cells += [format_value(x["fc_hz"]) if x["fc_hz"] is not None else "—",
                  f"{x['pm_deg']:.1f}" if x["pm_deg"] is not None else "—", _gm_text(x["gm_state"], x["gm_db"])]
    return cells


def expected_part_cells(doc: dict) -> dict:
    """designator -> (computed, to build) text from the JSON's parts."""
    out = {}
    for name, value in doc["parts"].items():
        unit = "Ω" if name.startswith("R") else "F" if name.startswith("C") else ""
        out[name] = (format_value(doc["parts_exact"].get(name, value), unit, 4), format_value(value, unit, 4))
    return out


# ----------------------------------------------------------------------------- tables = the CLI's JSON
def test_tables_carry_the_cli_json_numbers(sample_path):
    doc = cli_json(sample_path)
    result = design_loop(load_design(sample_path))
    if not doc["feasible"]:
        pytest.skip("no parts: the sample's targets are infeasible")
    given = result.placement is None
    table = corner_table(result)
    assert len(table.rows) == len(doc["corners"])
    for k, row in enumerate(table.rows):
        fc_to_pm = [row[4], row[5], row[6]] + ([row[9], row[10], row[11]] if not given else [])
        assert fc_to_pm == expected_corner_cells(doc, k, given), f"corner {k}"
        assert row[0].split()[0] == str(k)
    parts = {row[0]: (row[1], row[2]) for row in parts_table(result).rows}
    for name, cells in expected_part_cells(doc).items():
        assert parts[name] == cells, name


def test_shown_margins_agree_with_python_control():
    """PM and fc of every corner (as the report writes them) against control.stability_margins."""
    control = pytest.importorskip("control")
    result = design_loop(load_design(BY_NAME["buck_24v_3v3"]))
    table = corner_table(result)
    for k in range(result.stage.n_corners):
        tf = result.loop.to_control(k)
        _, pm, _, _, wgc, _ = control.stability_margins(tf)
        assert float(table.rows[k][5]) == pytest.approx(pm, abs=0.051), f"corner {k}"
        fc_text = table.rows[k][4]
        assert float(re.sub(r"[a-zA-Zµ]", "", fc_text)) * (1e3 if fc_text.endswith("k") else 1.0) == \
            pytest.approx(wgc / (2 * np.pi), rel=6e-3), f"corner {k}"


# ----------------------------------------------------------------------------- measured overlay
def test_overlay_of_a_python_control_response_reads_back_the_corner():
    control = pytest.importorskip("control")
    result = design_loop(load_design(BY_NAME["boost_liion_5v"]))
    k = 4
    tf = result.loop.to_control(k)
    f = np.geomspace(100.0, 400e3, 400)
    resp = control.frequency_response(tf, 2 * np.pi * f)
    m = Measurement(f, np.asarray(resp.complex).ravel(), "loop", "made from python-control")
    ov = measured_overlay(result, m, k)
    _, pm, _, _, wgc, _ = control.stability_margins(tf)
    assert ov.measured.fc_hz == pytest.approx(wgc / (2 * np.pi), rel=5e-3)
    assert ov.measured.pm_deg == pytest.approx(pm, abs=0.3)
    np.testing.assert_allclose(ov.diff_db, 0.0, atol=1e-6)
    np.testing.assert_allclose(ov.diff_deg, 0.0, atol=1e-5)
    # the measured phase is put beside the prediction (same turn), not 360 deg away
    pred_at_f = np.interp(np.log(f), np.log(ov.f_pred_hz), ov.pred_phase_deg)
    assert np.max(np.abs(ov.meas_phase_deg - pred_at_f)) < 1.0
    assert ov.f_range_hz == (100.0, 400e3)
    assert "100Hz to 400kHz" in " ".join(ov.summary_lines())


def test_overlay_refuses_a_corner_that_does_not_exist():
    result = design_loop(load_design(BY_NAME["boost_liion_5v"]))
    m = Measurement(np.geomspace(10, 1e5, 20), np.ones(20), "plant")
    with pytest.raises(DesignError, match="corner"):
        measured_overlay(result, m, result.stage.n_corners)


# ----------------------------------------------------------------------------- the page
@pytest.fixture(scope="module")
def boost_page():
    result = design_loop(load_design(BY_NAME["boost_liion_5v"]))
    extra = ExtraSection("Tolerance study", ("Made elsewhere.",),
                         (Table(("Corner", "PM min (deg)"), (("#4", "61.3"),), "Worst case"),),
                         '<svg xmlns="http://www.w3.org/2000/svg" width="10" height="10"><rect width="10" height="10"/></svg>')
    return result, report_html(result, path="boost_liion_5v.toml", extra_sections=[extra], date="2026-12-03")


def test_page_stands_alone(boost_page):
    _, text = boost_page
    assert check_self_contained(text) == []
    assert "src=" not in text and "<link" not in text and "@import" not in text
    # every "http" is an XML namespace name (not fetched), none an address the page loads
    for m in re.finditer(r"http", text):
        before = text[max(0, m.start() - 30):m.start()]
        assert re.search(r'xmlns(:\w+)?="$', before), before
    assert check_self_contained('<img src="plot.png">') and check_self_contained("url(http://x/y.css)")


def test_page_has_the_caution_at_top_and_end_and_every_section(boost_page):
    result, text = boost_page
    assert text.count(CAUTION.split(":", 1)[1].strip()[:60]) == 2
    first_section = text.index("<section")
    assert text.index("Caution") < first_section and text.rindex("Caution") > text.index('id="limits"')
    for anchor in ("design", "network", "bode", "corners", "step", "findings", "limits", "extra-0"):
        assert f'id="{anchor}"' in text, anchor
    assert text.index('id="extra-0"') < text.index('id="findings"')
    assert "Tolerance study" in text and "61.3" in text and "Worst case" in text
    for f in result.findings:  # every finding, with what to change
        assert re.sub(r"\s+", " ", f.message.replace("'", "&#x27;").replace(">", "&gt;")) in text


def test_extra_section_refuses_external_references():
    with pytest.raises(DesignError, match="must not refer"):
        ExtraSection("Efficiency", html='<img src="https://example.org/plot.png">')
    with pytest.raises(DesignError, match="title"):
        ExtraSection(" ")
    with pytest.raises(DesignError, match="Table"):
        ExtraSection("Efficiency", tables=([["a"]],))


def test_design_command_does_not_import_matplotlib():
    code = ("import sys, io, contextlib\nimport loopkit.report, loopkit.measured_overlay\nfrom loopkit.cli import main\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            f"    code = main(['design', {str(BY_NAME['buck_24v_3v3'])!r}])\n"
            "print(code, sorted(m for m in sys.modules if m.split('.')[0] in ('matplotlib', 'schemdraw')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, timeout=120,
                         check=False)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split(None, 1) == ["0", "[]\n"]


# ----------------------------------------------------------------------------- command line
def test_cli_report_bad_input_is_one_line(capsys, tmp_path, monkeypatch):
    sample = str(BY_NAME["buck_24v_3v3"])
    assert main(["report", sample]) == 2
    assert "give the HTML file" in capsys.readouterr().err
    assert main(["report", sample, "-o", str(tmp_path / "r.html"), "--load-step", "3"]) == 2
    assert "--load-step" in capsys.readouterr().err
    monkeypatch.setenv("LOOPKIT_CHROMIUM", str(tmp_path / "no-such-chromium"))
    assert main(["report", sample, "--pdf", str(tmp_path / "r.pdf")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "chromium" in err and "apt-get install chromium" in err
    assert not (tmp_path / "r.pdf").exists()


@pytest.mark.slow
def test_cli_report_with_a_measurement(capsys, tmp_path):
    out = tmp_path / "r.html"
    code = main(["report", str(BY_NAME["buck_24v_3v3"]), "-o", str(out), "--measured",
                 str(ROOT / "tests" / "data" / "buck_plant_24v_3a.csv"), "--kind", "plant", "--corner", "5"])
    assert code == 0
    text = out.read_text(encoding="utf-8")
    assert "Measured plant against the prediction" in text and "corner #5 (24V in, 3A load)" in text
    assert CAUTION.split(":")[0] in capsys.readouterr().out


# ----------------------------------------------------------------------------- Chromium: PNG and PDF
def _not_blank_with_caution_band(png: bytes, height: int) -> None:
    from PIL import Image

    im = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)
    assert im.shape[0] == height
    ink = np.mean(np.all(im < 128, axis=2))
    assert 0.003 < ink < 0.5  # text and lines on white: neither empty nor a black page
    band = np.all(np.abs(im[:500] - np.array([0xFF, 0xF5, 0xE0])) <= 3, axis=2)  # the caution's background
    assert band.sum() > 5000


@pytest.mark.slow
@needs_chromium
def test_every_sample_renders_in_chromium(sample_path, tmp_path):
    from loopkit.report import html_to_png

    result = design_loop(load_design(sample_path))
    text = report_html(result, path=sample_path.name, date="2026-12-03")
    png = html_to_png(text, tmp_path / "shot.png", 1100, 1800)
    _not_blank_with_caution_band(png, 1800)


@pytest.mark.slow
@needs_chromium
@needs_poppler
@pytest.mark.parametrize("name", PDF_SAMPLES)
def test_pdf_text_has_every_table_number_of_the_cli_json(name, tmp_path):
    path = BY_NAME[name]
    doc = cli_json(path)
    pdf = tmp_path / "r.pdf"
    assert main(["report", str(path), "--pdf", str(pdf)]) in (0, 1)
    text = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True, text=True,
                          check=True).stdout
    flat = re.sub(r"\s+", " ", text)
    assert flat.count(re.sub(r"\s+", " ", CAUTION.split(":", 1)[1].strip())) == 2
    given = "parts as given" in flat
    lines = text.splitlines()
    start = next(i for i, ln in enumerate(lines) if "Margins at every corner" in ln)
    # a row starts with the corner's index ("*" marks the worst corner; pdftotext may join it to the index)
    rows = [[ln.split()[0].rstrip("*")] + [t for t in ln.split()[1:] if t != "*"]
            for ln in lines[start:] if ln.split() and re.fullmatch(r"\d+\*?", ln.split()[0])]
    for k in range(len(doc["corners"])):
        row = next((r for r in rows if r[0] == str(k) and ("yes" in r or "NO" in r)), None)
        assert row is not None, f"{name} corner {k} not found in {rows}"
        i = row.index("yes") if "yes" in row else row.index("NO")
        shown = row[i - 4:i - 1] + ([] if given else row[i + 1:i + 4])
        assert shown == expected_corner_cells(doc, k, given), f"{name} corner {k}: {row}"
    for part, (computed, built) in expected_part_cells(doc).items():
        row = next(ln.split() for ln in lines if ln.split()[:1] == [part])
        assert row[1:3] == [computed, built], f"{name} {part}: {row}"
    pages = subprocess.run(["pdftoppm", "-r", "30", "-png", str(pdf), str(tmp_path / "page")], check=True)
    assert pages.returncode == 0
    shots = sorted(tmp_path.glob("page-*.png"))
    assert len(shots) >= 3
    from PIL import Image

    for shot in shots:
        im = np.asarray(Image.open(shot).convert("L"))
        assert np.mean(im < 128) > 0.002, shot.name  # no blank page


def test_infeasible_targets_still_give_a_report_that_says_why():
    from dataclasses import replace

    from loopkit.loop import Targets

    design = load_design(BY_NAME["boost_liion_5v"])
    result = design_loop(design, replace(Targets.from_design(design), fc_hz=400e3, pm_deg=80.0))
    assert not result.feasible
    text = report_html(result, path="boost.toml", date="2026-12-03")
    assert "Does not meet its targets: the targets cannot be met" in text and "No parts" in text
    assert re.findall(r'<section id="([^"]+)"', text) == ["design", "network", "findings", "limits"]
    why = next(f for f in result.findings if f.severity == "error")
    assert why.message.split(":")[0].replace("'", "&#x27;") in text
    assert text.count("licensed practice") == 2 and check_self_contained(text) == []
