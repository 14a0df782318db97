"""Measured responses: reading bench CSV files, margins of sampled data, overlay and fit.

The "bench" here is outside loopkit: the control-to-output response comes from the independent
state-space-averaged model in tests/reference/ssa.py (R. D. Middlebrook, S. Cuk, "A general
unified approach to modelling switching-converter power stages", IEEE PESC 1976), which never
calls loopkit's stage code, evaluated with KNOWN stage parameters that differ from the design
file's (the capacitance derated, the ESR and inductance off); the compensator of a loop
measurement comes from the independent nodal analysis in tests/reference/net_mna.py (Ho,
Ruehli, Brennan, "The modified nodal approach to network analysis", IEEE Trans. CAS 22(6),
1975).  The fit must recover the known parameters.
"""

from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from reference import net_mna, ssa

from loopkit import analyse_stage, load_design
from loopkit.cli import main
from loopkit.errors import DesignError, DesignFileError
from loopkit.loop import design_loop
from loopkit.margins import loop_margins
from loopkit.measured import LAYOUTS, MAX_FILE_BYTES, Measurement, format_measurement, parse_columns, read_measurement
from loopkit.measured_fit import compare, fit_stage, measured_margins

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).resolve().parent / "data"
BUCK = ROOT / "sample_designs" / "buck_24v_3v3.toml"
BOOST = ROOT / "sample_designs" / "boost_liion_5v.toml"

#: The bench's stage against the design file's: ceramics derated by DC bias, ESR and inductance off.
#: (Invented demo values: they are the known truth the fit must find, not check values from elsewhere.)
TRUTH = {"c": 0.7, "esr": 2.0, "l": 0.85, "ramp": 1.1}


def _true_stage(stage, truth=TRUTH):
    banks = tuple(replace(b, capacitance=b.capacitance * truth["c"], esr=b.esr * truth["esr"]) for b in stage.output_caps)
    return replace(stage, inductance=stage.inductance * truth["l"], output_caps=banks)


def bench_plant(design, corner: int, f_hz, truth=TRUTH) -> np.ndarray:
    """Control-to-output Fm Gvd of the bench stage from the state-space-averaged reference (voltage mode)."""
    vin, load = design.operating.corners()
    pt = ssa.solve(ssa.params_from_stage(_true_stage(design.stage, truth)), float(vin[corner]),
                   design.operating.vout, float(load[corner]))
    return ssa.responses(pt, f_hz)["gvd"] / (design.modulator.ramp * truth["ramp"])


def bench_loop(design, parts: dict, corner: int, f_hz, truth=TRUTH) -> np.ndarray:
    """Loop gain T = -Fm Gvd Gc: the plant above times the Type III network by nodal analysis."""
    amp = design.compensator.opamp
    gain = net_mna.one_pole_opamp(10 ** (amp.gain_db / 20), amp.gbw)
    p = parts
    gc = net_mna.transfer(f_hz, net_mna.inverting_type3(p["R1"], p["R2"], p["R3"], p["C1"], p["C2"], p["C3"],
                                                        p.get("Rb"), gain))
    return -bench_plant(design, corner, f_hz, truth) * gc


# ---------------------------------------------------------------------------- reading and writing
@pytest.mark.parametrize("layout", sorted(LAYOUTS))
def test_every_layout_round_trips(layout, tmp_path):
    d = load_design(BUCK)
    f = np.geomspace(50.0, 200e3, 60)
    m = Measurement(f, bench_plant(d, 5, f), "plant")
    path = tmp_path / f"{layout}.csv"
    path.write_text(format_measurement(m, layout, comment="round trip"), encoding="utf-8")
    back = read_measurement(path, "plant")
    assert_allclose(back.f_hz, f, rtol=1e-11)
    assert_allclose(back.response, m.response, rtol=1e-10)  # 12 significant digits written
    assert back.source == str(path) and back.kind == "plant"
    assert back.f_range_hz == (pytest.approx(50.0), pytest.approx(200e3))


@pytest.mark.parametrize("header, sep, decimal, scale, form", [
    ("Frequency (Hz),Gain dB,Phase(deg)", ",", ".", 1.0, "db-deg"),
    ("freq[kHz];Mag(dB);Phase(deg)", ";", ",", 1e3, "db-deg"),
    ("Frequency/Hz\tMagnitude (V/V)\tPhase [rad]", "\t", ".", 1.0, "lin-rad"),
    ("Index;Frequency (Hz);Re;Im", ";", ",", 1.0, "re-im"),
    ("Freq (MHz),Trace 1 Gain (dB),Phase (°),Gain margin (dB)", ",", ".", 1e6, "db-deg"),
])
def test_header_guesses(header, sep, decimal, scale, form, tmp_path):
    """Columns are found from their names and units; numbers read with the file's decimal mark."""
    f = np.geomspace(100.0, 100e3, 8)
    h = 3.0 * np.exp(-1j * np.linspace(0.1, 2.5, 8)) / np.sqrt(1 + (f / 5e3) ** 2)
    lines = [header]
    for i in range(f.size):
        if form == "db-deg":
            cells = [f[i] / scale, 20 * np.log10(abs(h[i])), np.degrees(np.angle(h[i]))]
        elif form == "lin-rad":
            cells = [f[i] / scale, abs(h[i]), np.angle(h[i])]
        else:
            cells = [i, f[i], h[i].real, h[i].imag]
        if header.endswith("Gain margin (dB)"):
            cells.append(12.0)
        text = [format(float(c), ".12g") for c in cells]
        lines.append(sep.join(t.replace(".", decimal) for t in text))
    path = tmp_path / "m.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    m = read_measurement(path)
    assert_allclose(m.f_hz, f, rtol=1e-11)
    assert_allclose(m.response, h, rtol=1e-10)


def test_preamble_quotes_and_trailing_separators(tmp_path):
    """An instrument's preamble before the header is skipped; quoted names may hold the separator."""
    path = tmp_path / "m.csv"
    rows = "".join(f'"{100 * 2**i}","{-i}","{-10 * i}",\n' for i in range(6))
    path.write_text('Frequency sweep: log, 6 points\nDate,2026-12-03\n"Frequency, Hz (Hz)","Gain (dB)","Phase (deg)",\n' + rows)
    m = read_measurement(path)
    assert_allclose(m.f_hz, 100 * 2.0 ** np.arange(6))
    assert_allclose(m.phase_deg, -10 * np.arange(6.0))


def test_ambiguous_header_needs_a_mapping(tmp_path):
    path = tmp_path / "m.csv"
    path.write_text("f,ch1 (dB),Gain,Phase\n" + "".join(f"{100 * 2**i},0,{-i},{-10 * i}\n" for i in range(6)))
    with pytest.raises(DesignFileError, match=r"m\.csv: line 1 = .*Gain.*unit of this gain column is not stated"):
        read_measurement(path)
    m = read_measurement(path, columns=parse_columns("f_hz=0,gain_db=2,phase_deg=3"))
    assert_allclose(m.mag_db, -np.arange(6.0))
    assert_allclose(m.phase_deg, -10 * np.arange(6.0))
    m = read_measurement(path, columns={"f_hz": "f", "gain_db": "Gain", "phase_deg": 3})
    assert_allclose(m.mag_db, -np.arange(6.0))
    path.write_text("freq[kHz];ch1 (dB);Gain;Phase\n" + "".join(f"{2**i};0;{-i};{-10 * i}\n" for i in range(6)))
    m = read_measurement(path, columns={"f": 0, "gain_db": 2, "phase_deg": 3})  # "f": the header's unit
    assert_allclose(m.f_hz, 1e3 * 2.0 ** np.arange(6))
    with pytest.raises(DesignError, match="--columns"):
        parse_columns("freq=0")


def test_downward_sweep_is_reversed(tmp_path):
    path = tmp_path / "m.csv"
    path.write_text("Frequency (Hz),Gain (dB),Phase (deg)\n" + "".join(f"{10**(5 - i)},{i},{-i}\n" for i in range(6)))
    m = read_measurement(path)
    assert_allclose(m.f_hz, 10.0 ** np.arange(6))
    assert_allclose(m.mag_db, np.arange(6.0)[::-1])


GOOD = ["Frequency (Hz),Gain (dB),Phase (deg)"] + [f"{100 * 2**i},{20 - 3 * i},{-30 * i}" for i in range(8)]


@pytest.mark.parametrize("case, edit, expected", [
    ("truncated", lambda ls: ls[:4] + ["800,11"] + ls[5:], r"line 5 = 800,11: truncated row: 2 fields, the header has 3"),
    ("text in number", lambda ls: ls[:3] + ["400,14.2dB,-60"] + ls[4:], r"line 4 = 14\.2dB: column Gain \(dB\): not a number"),
    ("not finite", lambda ls: ls[:3] + ["400,nan,-60"] + ls[4:], r"line 4 = nan: .*must be a finite number"),
    ("non-monotonic", lambda ls: ls[:4] + ["150,11,-90"] + ls[5:], r"line 5 = 150: frequency is out of order after 400"),
    ("duplicate", lambda ls: ls[:4] + ["400,11,-90"] + ls[5:], r"line 5 = 400: frequency repeats 400 \(line 4\)"),
    ("too few", lambda ls: ls[:4], r"rows = 3: a sweep needs at least 5"),
    ("zero frequency", lambda ls: [ls[0], "0,20,0"] + ls[2:], r"line 2 = 0: frequency must be > 0"),
    ("empty", lambda ls: ["# nothing"], r"line 1 = \(empty\): no data"),
    ("no header", lambda ls: ls[1:], r"line 1 = .*no header line: map the columns"),
])
def test_malformed_files_are_refused_naming_line_and_token(case, edit, expected, tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("\n".join(edit(list(GOOD))) + "\n")
    with pytest.raises(DesignFileError, match=expected) as info:
        read_measurement(path)
    assert str(info.value).startswith(f"{path}: ")


def test_huge_file_is_refused_before_reading(tmp_path):
    path = tmp_path / "huge.csv"
    with open(path, "wb") as fh:  # sparse: the size is what counts, nothing is read
        fh.write(("\n".join(GOOD) + "\n").encode())
        fh.truncate(MAX_FILE_BYTES + 1)
    with pytest.raises(DesignFileError, match=rf"size = {MAX_FILE_BYTES + 1} bytes: at most {MAX_FILE_BYTES} bytes"):
        read_measurement(path)


# ---------------------------------------------------------------------------- margins
@pytest.mark.parametrize("sample, corner", [(BOOST, 2), (BOOST, 5), (BUCK, 6)])
def test_measured_margins_match_loopkits_margins(sample, corner):
    """On noise-free sampled data (loopkit's own T at 400 points per the sweep), the interpolated
    margins agree with the exact-root margins of loopkit.margins within 0.3 % in fc, 0.2 deg, 0.1 dB
    (tolerance: the error of linear interpolation in ln f at 400 points over 4 decades; stated here)."""
    r = design_loop(load_design(sample))
    f = np.geomspace(10.0, r.design.stage.fsw / 2, 400)
    m = Measurement(f, r.loop.take([corner]).response(f)[0], "loop")
    got = measured_margins(m)
    ref = loop_margins(r.loop.take([corner]), f, model_limit_hz=r.design.stage.fsw / 2)
    assert_allclose(got.fc_hz, ref.fc_hz[0], rtol=3e-3)
    assert abs(got.pm_deg - ref.pm_deg[0]) < 0.2
    if np.isfinite(ref.gm_db[0]):
        assert abs(got.gm_db - ref.gm_db[0]) < 0.1
        assert_allclose(got.f180_hz, ref.f180_hz[0], rtol=3e-3)
    else:
        assert np.isnan(got.gm_db) and any("gain margin: outside the measured range" in n for n in got.notes)
    assert (got.f_min_hz, got.f_max_hz) == (pytest.approx(10.0), pytest.approx(r.design.stage.fsw / 2))


def test_crossings_outside_the_range_are_not_extrapolated():
    r = design_loop(load_design(BOOST))
    fc = r.margins.fc_hz[2]
    f = np.geomspace(10.0, fc / 3, 100)  # stops below the crossover
    got = measured_margins(Measurement(f, r.loop.take([2]).response(f)[0]))
    assert np.isnan(got.fc_hz) and np.isnan(got.pm_deg) and np.isnan(got.gm_db)
    assert any("gain crossover: outside the measured range" in n and "stays above 0 dB" in n for n in got.notes)


# ---------------------------------------------------------------------------- overlay
def test_overlay_of_the_design_stage_is_within_the_reference_agreement():
    """With the bench's stage equal to the design's, the plant differs from the prediction only by the
    model agreement of tests/test_stage_ssa.py (0.01 dB, 0.1 deg); with the derated stage it does not."""
    d = load_design(BUCK)
    r = design_loop(d)
    f = np.geomspace(10.0, 200e3, 120)
    same = {"c": 1.0, "esr": 1.0, "l": 1.0, "ramp": 1.0}
    cmp = compare(Measurement(f, bench_plant(d, 5, f, same), "plant"), r, 5)
    assert np.max(np.abs(cmp.diff_db)) < 0.01 and np.max(np.abs(cmp.diff_deg)) < 0.1
    cmp = compare(Measurement(f, bench_plant(d, 5, f), "plant"), r, 5)
    assert np.max(np.abs(cmp.diff_db)) > 1.0  # the resonance moved


def test_overlay_of_a_compensator_and_a_loop_measurement():
    """The network measured (here: nodal analysis of the parts to build) matches the prediction within
    the network tests' tolerance (0.05 dB, 0.5 deg, tests/test_networks_opamp.py); so does the loop
    of the design's own stage; the kind and corner are checked."""
    d = load_design(BOOST)
    r = design_loop(d)
    f = np.geomspace(10.0, 500e3, 100)
    gc = -bench_loop(d, r.parts, 5, f) / bench_plant(d, 5, f)
    cmp = compare(Measurement(f, gc, "compensator"), r, 5)
    assert np.max(np.abs(cmp.diff_db)) < 0.05 and np.max(np.abs(cmp.diff_deg)) < 0.5
    same = {"c": 1.0, "esr": 1.0, "l": 1.0, "ramp": 1.0}
    cmp = compare(Measurement(f, bench_loop(d, r.parts, 5, f, same), "loop"), r, 5)
    assert np.max(np.abs(cmp.diff_db)) < 0.05 and np.max(np.abs(cmp.diff_deg)) < 0.5
    with pytest.raises(DesignError, match="corner = 9: must be a corner index from 0 to 8"):
        compare(Measurement(f, gc, "compensator"), r, 9)
    with pytest.raises(DesignError, match="kind = bode"):
        Measurement(f, gc, "bode")


# ---------------------------------------------------------------------------- fit
FIT_CASES = [  # (design, corner, kind); noise-free tolerance 1e-4 relative (the models agree to ~1e-3 dB)
    (BUCK, 5, "plant"),
    (BUCK, 8, "loop"),
    (BOOST, 2, "plant"),
    (BOOST, 5, "loop"),
]


def _truth_values(design):
    st = _true_stage(design.stage)
    return {"c": st.c_total, "esr": st.output_caps[0].esr_total,
            "l": st.inductance, "gain": 1.0 / (design.modulator.ramp * TRUTH["ramp"])}


@pytest.mark.parametrize("sample, corner, kind", FIT_CASES)
def test_fit_recovers_the_bench_parameters_noise_free(sample, corner, kind):
    d = load_design(sample)
    assert len(d.stage.output_caps) == 1  # the ESR truth below is for one bank
    r = design_loop(d)
    f = np.geomspace(50.0, d.stage.fsw / 2, 150)
    h = bench_plant(d, corner, f) if kind == "plant" else bench_loop(d, r.parts, corner, f)
    fit = fit_stage(d, Measurement(f, h, kind), corner, result=r)
    truth = _truth_values(d)
    assert fit.success
    for p in fit.parameters:
        assert_allclose(p.value, truth[p.name], rtol=1e-4, err_msg=p.name)
    assert fit.rms_db < 0.01 and fit.rms_deg < 0.1
    st = analyse_stage(fit.design)  # the changed design runs through the model
    assert_allclose(fit.design.stage.c_total, truth["c"], rtol=1e-4)
    assert st.n_corners == d.operating.n_corners


@pytest.mark.parametrize("sample, corner", [(BUCK, 5), (BOOST, 2)])
def test_fit_with_noise_lies_within_its_uncertainty(sample, corner):
    """Gaussian noise of 0.05 dB and 0.3 deg (a stated bench-like level): every parameter within
    3 reported standard uncertainties of the truth, and the uncertainties under 5 %."""
    d = load_design(sample)
    f = np.geomspace(50.0, d.stage.fsw / 2, 200)
    rng = np.random.default_rng(13)
    noise = rng.normal(0, 0.05 / 20 * np.log(10), f.size) + 1j * rng.normal(0, np.radians(0.3), f.size)
    h = bench_plant(d, corner, f) * np.exp(noise)
    fit = fit_stage(d, Measurement(f, h, "plant"), corner)
    truth = _truth_values(d)
    for p in fit.parameters:
        assert abs(p.value - truth[p.name]) < 3 * p.sigma, (p.name, p.value, truth[p.name], p.sigma)
        assert p.sigma < 0.05 * p.value, p.name
    assert 0.03 < fit.rms_db < 0.08 and 0.2 < fit.rms_deg < 0.4  # the residual is the noise


def test_fit_leaves_out_points_above_half_the_switching_frequency():
    d = load_design(BUCK)
    f = np.geomspace(50.0, d.stage.fsw, 100)
    fit = fit_stage(d, Measurement(f, bench_plant(d, 5, f), "plant"), 5)
    assert fit.n_points == np.count_nonzero(f <= d.stage.fsw / 2)
    assert fit.notes and fit.notes[0].startswith(f"{100 - fit.n_points} points above half the switching frequency")


def test_fit_without_noise_gives_a_wrong_answer_for_a_wrong_model():
    """The fit can fail: fitting only C to data whose L is also off leaves a large residual."""
    d = load_design(BUCK)
    f = np.geomspace(50.0, 200e3, 100)
    fit = fit_stage(d, Measurement(f, bench_plant(d, 5, f), "plant"), 5, params=("c",))
    assert fit.rms_db > 0.1


@pytest.mark.ngspice
def test_fit_recovers_an_ngspice_averaged_buck(tmp_path):
    """The bench as an ngspice AC analysis of the averaged synchronous buck (a behavioural switch
    node d vg - i (d Ron + d' Rr), Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed.,
    ch. 3 and 7, the averaged switch with conduction losses), with the known C, ESR and L of
    TRUTH, written as a tab file (Hz, linear gain, radians) and read back: the fit finds them."""
    from loopkit.networks.spice import ac_deck, run_ac
    from loopkit.networks.spice import spice_number as sn

    d = load_design(BUCK)
    st, vin, load = d.stage, 24.0, 3.0
    vout, ron, rr, dcr = d.operating.vout, st.r_switch, st.r_rectifier, st.dcr
    duty = (vout + load * (rr + dcr)) / (vin - load * (ron - rr))  # the buck's dc balance with losses (ch. 3)
    true = _true_stage(st)
    bank = true.output_caps[0]
    deck = ac_deck("averaged buck", [
        f"Vg vg 0 DC {sn(vin)}",
        f"Bsw sw 0 V = V(in)*V(vg) - i(Vsense)*(V(in)*{sn(ron)} + (1-V(in))*{sn(rr)})",
        "Vsense sw a DC 0", f"L1 a b {sn(true.inductance)}", f"Rdcr b out {sn(dcr)}",
        f"C1 out c {sn(bank.c_total)}", f"Resr c 0 {sn(bank.esr_total)}", f"Rload out 0 {sn(vout / load)}",
    ], v_in_dc=duty, f_start_hz=50.0, f_stop_hz=200e3, points_per_decade=40)
    ac = run_ac(deck)
    corner = 5  # 24 V, 3 A
    assert d.operating.corners()[0][corner] == vin and d.operating.corners()[1][corner] == load
    m = Measurement(ac.f_hz, ac.response / (d.modulator.ramp * TRUTH["ramp"]), "plant")
    path = tmp_path / "ngspice.tsv"
    path.write_text(format_measurement(m, "tab-hz-linear-rad"))
    fit = fit_stage(d, read_measurement(path, "plant"), corner)
    truth = _truth_values(d)
    for p in fit.parameters:
        assert_allclose(p.value, truth[p.name], rtol=1e-4, err_msg=p.name)


SAMPLES = sorted((ROOT / "sample_designs").glob("*.toml"))


@pytest.mark.slow
@pytest.mark.parametrize("sample", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_fit_works_for_every_topology_and_scheme(sample):
    """Self-consistency (not an outside check: the data is loopkit's own model with known changes):
    at a CCM corner of every sample, voltage and peak current mode, the fit finds the changes."""
    from loopkit.measured_fit import _model, _with_scales, one_corner_design

    d = load_design(sample)
    corner = int(np.argmax(~analyse_stage(d).dcm))
    names, scales = ("c", "esr", "l", "gain"), np.array([0.7, 2.0, 0.85, 1 / 1.1])
    f = np.geomspace(20.0, d.stage.fsw / 2, 150)
    h = _model(_with_scales(one_corner_design(d, corner), names, scales), "plant", f, None)
    fit = fit_stage(d, Measurement(f, h, "plant"), corner)
    for p in fit.parameters:
        assert_allclose(p.value / p.design_value, scales[names.index(p.name)], rtol=1e-5, err_msg=p.name)
    assert not fit.notes


def test_fit_in_current_mode_dcm_tells_inductance_by_the_charge_delay():
    """Peak current mode in DCM: the programmed peak sets the energy per cycle, so the inductance and the
    sense gain act together on the dc gain (Erickson & Maksimovic, 2nd ed., ch. 12, from memory); but the
    output's charge packet arrives (D + D2) Ts / 2 after the period starts (derived and checked against
    ngspice in tests/test_pcm_ngspice.py), and D and D2 scale with L alone, so noise-free data over a wide
    range tell L apart: the fit recovers all four parameters, and fitting without L keeps finite sigmas."""
    from loopkit.measured_fit import _model, _with_scales, one_corner_design

    d = load_design(ROOT / "sample_designs" / "boost_pcm_12v_24v.toml")
    corner = 0
    assert analyse_stage(d).dcm[corner]
    names = ("c", "esr", "l", "gain")
    truth = np.array([0.7, 2.0, 0.85, 1 / 1.1])
    f = np.geomspace(20.0, d.stage.fsw / 2, 150)
    h = _model(_with_scales(one_corner_design(d, corner), names, truth), "plant", f, None)
    fit = fit_stage(d, Measurement(f, h, "plant"), corner)
    got = {p.name: p.value / p.design_value for p in fit.parameters}
    for name, want in zip(names, truth):
        assert got[name] == pytest.approx(want, rel=1e-4), name
    fit = fit_stage(d, Measurement(f, h, "plant"), corner, params=("c", "esr", "gain"))  # l left at the design's
    assert all(np.isfinite(p.sigma) for p in fit.parameters)


# ---------------------------------------------------------------------------- command line
def _write(tmp_path, m, layout="comma-hz-db-deg"):
    path = tmp_path / "bench.csv"
    path.write_text(format_measurement(m, layout))
    return path


def test_cli_prints_measured_margins_difference_and_fit(capsys, tmp_path):
    d = load_design(BOOST)
    r = design_loop(d)
    f = np.geomspace(50.0, d.stage.fsw / 2, 150)
    m = Measurement(f, bench_loop(d, r.parts, 5, f), "loop")
    path = _write(tmp_path, m, "semicolon-khz-db-deg")
    out_csv, out_toml = tmp_path / "overlay.csv", tmp_path / "fitted.toml"
    code = main(["measured", str(BOOST), str(path), "--corner", "5", "--fit", "--csv", str(out_csv),
                 "--save-fit", str(out_toml)])
    out = capsys.readouterr().out
    assert code == 0
    mm = measured_margins(read_measurement(path))
    assert f"PM {mm.pm_deg:.1f} deg" in out and f"GM {mm.gm_db:.1f} dB" in out
    assert "Fitted stage parameters" in out and "Caution" in out
    lines = out_csv.read_text().splitlines()
    assert lines[0].startswith("f_hz,measured_mag_db") and len(lines) == 151
    fitted = load_design(out_toml)
    assert_allclose(fitted.stage.inductance, d.stage.inductance * TRUTH["l"], rtol=1e-3)


def test_cli_bad_file_exits_2_with_line_and_token(capsys, tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("\n".join(GOOD[:3] + ["400,1.2.3,-60"] + GOOD[4:]) + "\n")
    assert main(["measured", str(BUCK), str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "line 4 = 1.2.3" in err and str(path) in err


@pytest.mark.parametrize("extra, expected", [
    (["--fit", "--fit-params", "c,x"], "--fit-params = c,x: a list from c, esr, l, gain"),
    (["--columns", "freq=0"], "--columns = freq=0: must be KEY=COLUMN"),
    (["--columns", "f_hz=0,gain_db=1,phase_deg=7"], "columns.phase_deg = 7: must be a column from 0 to 2"),
    (["--corner", "9"], "--corner = 9: must be a corner index from 0 to 8"),
    (["--csv", str(DATA / "boost_loop_3v6_0a75.csv")], "is the measurement itself"),
    (["--kind", "compensator", "--fit"], "kind = compensator: a fit needs a plant or loop measurement"),
])
def test_cli_bad_options_exit_2(capsys, extra, expected):
    assert main(["measured", str(BOOST), str(DATA / "boost_loop_3v6_0a75.csv"), *extra]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and expected in err


def test_cli_invert_turns_a_minus_t_measurement_round(capsys, tmp_path):
    """An analyser that shows -T: the note says so, and --invert gives the margins of T."""
    d = load_design(BOOST)
    r = design_loop(d)
    f = np.geomspace(50.0, d.stage.fsw / 2, 150)
    t = bench_loop(d, r.parts, 5, f)
    path = _write(tmp_path, Measurement(f, -t, "loop"))
    assert main(["measured", str(BOOST), str(path), "--corner", "5"]) == 0
    assert "give --invert" in capsys.readouterr().out.replace("\n", " ")
    assert main(["measured", str(BOOST), str(path), "--corner", "5", "--invert"]) == 0
    out = capsys.readouterr().out
    mm = measured_margins(Measurement(f, t, "loop"))
    assert f"PM {mm.pm_deg:.1f} deg" in out and "--invert" not in out


# ---------------------------------------------------------------------------- example files
EXAMPLES = {  # file -> (design, corner, kind, layout)
    "buck_plant_24v_3a.csv": (BUCK, 5, "plant", "comma-hz-db-deg"),
    "boost_loop_3v6_0a75.csv": (BOOST, 4, "loop", "semicolon-khz-db-deg"),
}


def example_text(name: str) -> str:
    sample, corner, kind, layout = EXAMPLES[name]
    d = load_design(sample)
    f = np.geomspace(50.0, d.stage.fsw / 2, 60)
    h = bench_plant(d, corner, f) if kind == "plant" else bench_loop(d, design_loop(d).parts, corner, f)
    note = (f"Example {kind} measurement, made by tests/test_measured.py (example_text) from the"
            f" state-space-averaged reference\nmodel (tests/reference/ssa.py) of {sample.name}, corner {corner},"
            f" with C x{TRUTH['c']}, ESR x{TRUTH['esr']}, L x{TRUTH['l']}, ramp x{TRUTH['ramp']}: not a real bench.")
    return format_measurement(Measurement(f, h, kind), layout, note)


@pytest.mark.parametrize("name", sorted(EXAMPLES))
def test_example_files_are_what_the_generator_makes(name):
    assert (DATA / name).read_text() == example_text(name)


if __name__ == "__main__":  # regenerate the example files: python tests/test_measured.py
    DATA.mkdir(exist_ok=True)
    for name in EXAMPLES:
        (DATA / name).write_text(example_text(name))
        print("wrote", os.path.relpath(DATA / name))
