"""Losses and efficiency per corner (loopkit.losses, loopkit.loss_model, loopkit.efficiency).

Checks and their sources
------------------------
* Conduction losses against the power balance of an ngspice switching
  simulation of the same circuit (tests/reference/switching.py, which never
  calls loopkit's stage code): input power minus output power minus the
  diode's constant-drop power, averaged over whole periods in the periodic
  steady state, is the loss in every resistance (switches, rectifier, DCR,
  capacitor ESR); loopkit's figures at the same corner and duty agree within
  1 % (CCM: buck, boost, inverting buck-boost, flyback, both four-switch
  modes; DCM: buck, boost, inverting buck-boost).  The diode's drop power
  likewise.  ngspice (Debian package, version 39).
* Switching losses against the expressions of R. W. Erickson, D. Maksimovic,
  Fundamentals of Power Electronics, 2nd ed., Kluwer 2001, section 4.6 (from
  memory): clamped inductive switching with linear transitions, W = V I t / 2
  per transition (4.6.1); diode recovered charge, W = V Qr (4.6.2); a device
  capacitance charged to V, W = C V^2 / 2 (4.6.3).  Gate drive Qg V fsw per
  transistor and the dead-time body-diode conduction: common practice, no
  source.
* Core loss against Steinmetz's equation, P = Ve k f^alpha B^beta (C. P.
  Steinmetz, "On the law of hysteresis", Trans. AIEE 9, 1892, in the form
  with a frequency exponent), with the peak flux density from Faraday's law,
  B = L dI / (2 N Ae).
* The dead time's effect on the duty against the volt-second balance of the
  buck's switch node (Erickson & Maksimovic, 2nd ed., ch. 2): the node sits at
  -Vbd instead of near 0 for two dead times per period, so the duty rises by
  2 Vbd t_dead fsw / Vg.
* The four-switch stage's buck-boost mode against the ideal conversion ratio
  of the (non-inverting) buck-boost, M = D / (1 - D) (Erickson & Maksimovic,
  2nd ed., ch. 6).
* Every bad [losses] input refused naming the field, the value and what is
  allowed.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

import loopkit
from loopkit.cli import main
from loopkit.designfile import dumps_design, loads_design
from loopkit.efficiency import efficiency, efficiency_curves, mode_efficiency
from loopkit.errors import DesignError, DesignFileError
from loopkit.loss_model import steinmetz_w
from loopkit.losses import Losses

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_designs"
RESISTIVE = ("switch_w", "held_switch_w", "rectifier_w", "inductor_dcr_w", "output_esr_w")


def _design(name: str, **losses) -> loopkit.Design:
    """A sample design with exactly the given [losses] figures (SI)."""
    d = loopkit.load_design(SAMPLES / f"{name}.toml")
    return replace(d, losses=Losses(**losses))


# ------------------------------------------------------------------ conduction against ngspice
#: (sample, corner, four-switch mode, DCM): CCM corners of a buck, a boost, the inverting buck-boost
#: and the flyback (diode and synchronous rectifiers), the four-switch stage in both modes (two
#: capacitor banks, whose ESR losses split by admittance), and DCM corners of three of them.
#: About 1-2 s each.
NGSPICE_CASES = [
    ("buck_24v_3v3", 5, None, False),
    ("buck_diode_12v_5v", 5, None, False),
    ("boost_liion_5v", 2, None, False),
    ("inverting_minus15v", 1, None, False),
    ("flyback_48v_12v", 1, None, False),
    ("fourswitch_automotive_9v", 1, "boost", False),
    ("fourswitch_automotive_9v", 11, "buck", False),
    ("solar_charger_14v4", 9, "buck", False),
    ("buck_diode_12v_5v", 0, None, True),
    ("boost_liion_5v", 0, None, True),
    ("inverting_minus15v", 0, None, True),
]


@pytest.mark.ngspice
@pytest.mark.parametrize(("name", "k", "mode", "dcm"), NGSPICE_CASES)
def test_conduction_losses_match_switching_power_balance(name, k, mode, dcm):
    from reference.switching import simulate  # tests/ is on sys.path (pytest rootdir conftest)

    design = _design(name)  # conduction only: the simulated circuit has no switching losses
    stage = loopkit.analyse_stage(design)
    assert stage.dcm[k] == dcm
    eff = efficiency(design, stage)
    sim = simulate(design, float(stage.vin[k]), float(stage.load[k]), float(stage.duty[k]), mode=mode)
    assert sim.dcm == dcm
    resistive = sum(getattr(eff, f)[k] for f in RESISTIVE)
    assert_allclose(resistive, sim.p_resistive_w, rtol=0.01)
    if design.stage.vf > 0:
        assert_allclose(eff.diode_w[k], sim.p_drop_w, rtol=0.01)
    # and the efficiency: with the losses within 1 % and the output power within 0.2 % (the stage's own
    # operating-point accuracy against ngspice), eta = Pout / (Pout + losses) is within 1.2 % of (1 - eta)
    eta = eff.efficiency[k]
    assert abs(sim.p_out_w / sim.p_in_w - eta) <= 0.012 * (1.0 - eta) * eta


# ------------------------------------------------------------------ switching losses (Erickson 4.6)
LOSS_FIGURES = {"turn_on_s": 10e-9, "turn_off_s": 6e-9, "coss_switch_f": 300e-12, "coss_rectifier_f": 500e-12,
                    "recovery_charge_c": 20e-9, "gate_charge_c": 8e-9, "gate_voltage_v": 5.0}


@pytest.mark.parametrize("name", ["buck_24v_3v3", "buck_diode_12v_5v", "boost_liion_5v", "inverting_minus15v",
                                  "flyback_48v_12v"])
def test_switching_losses_follow_textbook_expressions(name):
    design = _design(name, **LOSS_FIGURES)
    st, v = design.stage, abs(design.operating.vout)
    stage = loopkit.analyse_stage(design)
    eff = efficiency(design, stage)
    vg, f = stage.vin, st.fsw
    n = st.turns_ratio if st.topology == "flyback" else 1.0
    # the voltage each topology's switch commutates (Erickson & Maksimovic ch. 4.6: the clamp voltage)
    v_sw = {"buck": vg + st.vf, "boost": v + st.vf + 0 * vg, "inverting-buck-boost": vg + v + st.vf,
            "flyback": vg + n * (v + st.vf)}[st.topology]
    ccm = ~stage.dcm
    valley = np.where(ccm, stage.i_l - stage.ripple_pp / 2, 0.0)
    peak = stage.i_peak
    overlap = 0.5 * v_sw * (np.maximum(valley, 0) * 10e-9 + peak * 6e-9) * f  # W = V I t / 2 per transition
    coss = 0.5 * (300e-12 * v_sw**2 + 500e-12 * (v_sw / n) ** 2) * f  # W = C V^2 / 2 at a hard turn-on
    soft = st.synchronous & ccm & (valley < 0)  # reverse current swings the node first: no loss
    coss = np.where(soft, 0.0, coss)
    recovery = np.where(ccm & (valley > 0), 20e-9 * v_sw / n * f, 0.0)  # W = V Qr, rectifier side
    gate = (2.0 if st.synchronous else 1.0) * 8e-9 * 5.0 * f
    assert_allclose(eff.overlap_w, overlap, rtol=1e-12)
    assert_allclose(eff.coss_w, coss, rtol=1e-12)
    if name == "buck_24v_3v3":
        assert np.any(soft) and np.any(~soft)  # both cases are exercised
    assert_allclose(eff.recovery_w, recovery, rtol=1e-12, atol=0)
    assert_allclose(eff.gate_w, gate, rtol=1e-12)
    # none of these changes the duty (they are drawn from the input during the transitions)
    assert_allclose(stage.duty, loopkit.analyse_stage(_design(name)).duty, rtol=1e-12)


def test_switching_charge_gives_the_transition_time():
    """switching_charge / gate_current is each transition's duration: same losses as the two times."""
    by_charge = efficiency(_design("buck_24v_3v3", switching_charge_c=4e-9, gate_current_a=0.5))
    by_time = efficiency(_design("buck_24v_3v3", turn_on_s=8e-9, turn_off_s=8e-9))
    assert np.all(by_charge.overlap_w > 0)
    assert_allclose(by_charge.overlap_w, by_time.overlap_w, rtol=1e-12)


def test_dead_time_raises_the_buck_duty_by_the_node_volt_seconds():
    vbd, t_dead = 0.8, 40e-9
    base = loopkit.analyse_stage(_design("buck_24v_3v3"))
    design = _design("buck_24v_3v3", dead_time_s=t_dead, body_diode_v=vbd)
    stage = loopkit.analyse_stage(design)
    eff = efficiency(design, stage)
    assert_allclose(eff.duty, stage.duty, rtol=1e-12)  # the report and the loop see one duty
    f = design.stage.fsw
    # volt-second balance of the switch node: 2 dead times at -Vbd per period (both edges, positive current)
    positive = base.i_l - base.ripple_pp / 2 > 0
    expected = 2 * vbd * t_dead * f / stage.vin
    assert_allclose((stage.duty - base.duty)[positive], expected[positive], rtol=0.02)
    # a drop that does not vary with d leaves the buck's Gvd(0) = Vg (Erickson & Maksimovic Table 8.2,
    # with the stage's resistances: to 1e-4 of it)
    assert_allclose(stage.gd0, base.gd0, rtol=1e-4)
    # its loss: Vbd t_dead (|I_peak| + |I_valley|) fsw
    assert_allclose(eff.dead_time_w, vbd * t_dead * f * (np.abs(stage.i_peak) + np.abs(stage.i_l - stage.ripple_pp / 2)),
                    rtol=1e-6)


# ------------------------------------------------------------------ core loss (Steinmetz)
def test_steinmetz_formula_values():
    # P = Ve k f^alpha B^beta: 1 cm^3 at 100 kHz, 0.1 T, k = 4, alpha = 1.4, beta = 2.6
    expected = 1e-6 * 4.0 * 1e5**1.4 * 0.1**2.6
    assert_allclose(steinmetz_w(4.0, 1.4, 2.6, 1e5, 0.1, 1e-6), expected, rtol=1e-12)
    # the exponents: doubling f multiplies by 2^alpha, doubling B by 2^beta
    assert_allclose(steinmetz_w(4.0, 1.4, 2.6, 2e5, 0.1, 1e-6) / expected, 2**1.4, rtol=1e-12)
    assert_allclose(steinmetz_w(4.0, 1.4, 2.6, 1e5, 0.2, 1e-6) / expected, 2**2.6, rtol=1e-12)
    assert math.isclose(expected, 1e-6 * 4.0 * math.exp(1.4 * math.log(1e5) + 2.6 * math.log(0.1)), rel_tol=1e-12)


def test_core_loss_from_the_ripple_flux():
    core = {"core_k": 4.0, "core_alpha": 1.4, "core_beta": 2.6, "core_volume_m3": 0.5e-6, "core_area_m2": 15e-6, "core_turns": 8}
    design = _design("buck_24v_3v3", **core)
    stage = loopkit.analyse_stage(design)
    eff = efficiency(design, stage)
    b_pk = design.stage.inductance * stage.ripple_pp / (2 * 8 * 15e-6)  # Faraday: N Ae dB = L dI
    assert_allclose(eff.core_w, 0.5e-6 * 4.0 * design.stage.fsw**1.4 * b_pk**2.6, rtol=1e-9)
    # in CCM the core loss does not change the duty (its current averages to zero over the period)
    assert_allclose(stage.duty, loopkit.analyse_stage(_design("buck_24v_3v3")).duty, rtol=1e-12)


def test_core_loss_raises_the_dcm_duty_by_the_energy_balance():
    """DCM (diode buck at light load): each pulse must also store the core's loss."""
    core = {"core_k": 4.0, "core_alpha": 1.4, "core_beta": 2.6, "core_volume_m3": 2e-6, "core_area_m2": 15e-6, "core_turns": 6}
    base = loopkit.analyse_stage(_design("buck_diode_12v_5v"))
    design = _design("buck_diode_12v_5v", **core)
    stage = loopkit.analyse_stage(design)
    eff = efficiency(design, stage)
    dcm = stage.dcm
    assert np.any(dcm)
    assert np.all(stage.duty[dcm] > base.duty[dcm])
    # the lossless DCM buck delivers Io = D^2 Ts Vg (Vg - V) / (2 L V) (Erickson & Maksimovic ch. 5);
    # with the core loss the pulse carries Io + Pcore / V: the duty ratio follows sqrt of the load ratio
    ratio = (stage.load + eff.core_w / 5.0) / stage.load
    assert_allclose((stage.duty / base.duty)[dcm], np.sqrt(ratio[dcm]), rtol=0.01)


# ------------------------------------------------------------------ efficiency, modes, curves
def test_efficiency_is_output_over_output_plus_losses():
    eff = efficiency(loopkit.load_design(SAMPLES / "buck_24v_3v3.toml"))
    assert_allclose(eff.p_loss_w, sum(eff.terms().values()), rtol=1e-12)
    assert_allclose(eff.efficiency, eff.p_out_w / (eff.p_out_w + eff.p_loss_w), rtol=1e-12)
    assert_allclose(eff.p_out_w, 3.3 * eff.load, rtol=1e-12)
    assert np.all((eff.efficiency > 0.5) & (eff.efficiency < 1))
    assert eff.omitted == ("dead-time conduction (dead_time, body_diode_drop)",)  # all but the dead time
    bare = efficiency(_design("buck_24v_3v3"))
    assert len(bare.omitted) == 8 and any("quiescent" in o for o in bare.omitted)
    assert np.all(bare.efficiency > eff.efficiency)
    json.dumps(eff.as_dict(), allow_nan=False)


def test_four_switch_buck_boost_mode_has_the_ideal_ratio_and_the_rule_mode_agrees():
    design = loopkit.load_design(SAMPLES / "fourswitch_automotive_9v.toml")
    caps = tuple(replace(b, esr=0.0) for b in design.stage.output_caps)
    lossless = replace(design, stage=replace(design.stage, dcr=0.0, r_switch=0.0, r_rectifier=0.0, output_caps=caps),
                       losses=Losses())
    modes = mode_efficiency(lossless)
    v = 9.0
    assert_allclose(modes.duty[:, 2], v / (v + modes.vin), rtol=1e-9)  # M = D / (1 - D)
    assert_allclose(modes.duty[modes.vin > v, 0], v / modes.vin[modes.vin > v], rtol=1e-9)  # buck: M = D
    real = mode_efficiency(design)
    eff = efficiency(design)
    assert_allclose(real.rule_efficiency, eff.efficiency, rtol=1e-12)
    j = {"buck": 0, "boost": 1}
    for k in range(eff.vin.size):
        assert_allclose(real.efficiency[k, j[real.rule[k]]], eff.efficiency[k], rtol=1e-12)
    # every switch hard-switching each period costs: buck-boost mode below the single-leg mode here
    assert np.all(real.efficiency[:, 2] < real.rule_efficiency)
    assert np.all(np.isnan(real.efficiency[real.vin <= v, 0])) and np.all(np.isnan(real.efficiency[real.vin >= v, 1]))


def test_curves_match_corners():
    design = loopkit.load_design(SAMPLES / "buck_24v_3v3.toml")
    curves = efficiency_curves(design, points=5)
    assert curves.efficiency.shape == (3, 5)
    corners = efficiency(design)
    # the curve's ends are the design's lightest and heaviest loads
    for i, vin in enumerate(design.operating.vin):
        for j_curve, load in ((0, 0.3), (-1, 3.0)):
            k = np.nonzero((corners.vin == vin) & (corners.load == load))[0][0]
            assert_allclose(curves.efficiency[i, j_curve], corners.efficiency[k], rtol=1e-12)


# ------------------------------------------------------------------ design file: round trip and refusals
@pytest.mark.parametrize("name", ["buck_24v_3v3", "fourswitch_automotive_9v", "solar_charger_14v4"])
def test_losses_round_trip(name):
    design = loopkit.load_design(SAMPLES / f"{name}.toml")
    assert design.losses.given
    assert loads_design(dumps_design(design)) == design


BASE = (SAMPLES / "buck_24v_3v3.toml").read_text().split("[losses]")[0]
DIODE = (SAMPLES / "buck_diode_12v_5v.toml").read_text()

BAD = [
    ("turn_on_time = \"6n\"\nturn_off_time = \"1\"", "losses.turn_off_time", "10ps to 10µs"),
    ("turn_on_time = \"-6n\"\nturn_off_time = \"4n\"", "losses.turn_on_time", "> 0"),
    ("turn_on_time = \"6nF\"\nturn_off_time = \"4n\"", "losses.turn_on_time", "expected a value in s"),
    ("turn_on_time = \"fast\"\nturn_off_time = \"4n\"", "losses.turn_on_time", "not a number"),
    ("turn_on_time = \"6n\"", "losses.turn_off_time", "turn_on_time, turn_off_time go together"),
    ("core_k = 4.0", "losses.core_alpha", "go together"),
    ("gate_charge = \"8n\"", "losses.gate_voltage", "go together"),
    ("switching_charge = \"4n\"\ngate_current = \"0.5\"\nturn_on_time = \"6n\"\nturn_off_time = \"4n\"",
     "losses.switching_charge", "not both"),
    ("gate_charge = \"8n\"\ngate_voltage = \"0\"", "losses.gate_voltage", "> 0"),
    ("coss_switch = \"2u\"", "losses.coss_switch", "to 1µF"),
    ("core_k = 4.0\ncore_alpha = 9\ncore_beta = 2.6\ncore_volume = \"1u\"\ncore_area = \"10u\"\ncore_turns = 5",
     "losses.core_alpha", "from 0.5 to 4"),
    ("quiescent_power = \"-1m\"", "losses.quiescent_power", ">= 0"),
    ("input_esr = true", "losses.input_esr", "true/false"),
    ("leakage = \"1u\"", "losses.leakage", "unknown key"),
]


@pytest.mark.parametrize(("table", "field", "allowed"), BAD, ids=[b[1] + str(i) for i, b in enumerate(BAD)])
def test_bad_losses_refused_with_field_value_and_allowed(table, field, allowed):
    text = BASE + "\n[losses]\n" + table + "\n"
    with pytest.raises(DesignFileError) as info:
        loads_design(text, "x.toml")
    err = info.value
    assert err.field == field
    assert allowed in err.allowed, err.allowed
    assert str(err).startswith("x.toml: " + field + " = ")


def test_dead_time_not_counted_with_a_diode_rectifier():
    """A diode rectifier has no dead time: given, it is not counted and the report says so."""
    design = loads_design(DIODE + "\n[losses]\ndead_time = \"20n\"\nbody_diode_drop = \"0.7\"\n", "d.toml")
    eff = efficiency(design)
    assert np.all(eff.dead_time_w == 0)
    assert any("diode (not counted)" in o for o in eff.omitted)
    assert_allclose(eff.duty, loopkit.analyse_stage(_design("buck_diode_12v_5v")).duty, rtol=1e-12)


def test_losses_not_a_table():
    with pytest.raises(DesignError, match="losses"):
        loads_design(BASE.replace("[stage]", "losses = 3\n\n[stage]", 1))


# ------------------------------------------------------------------ the command
def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_cli_prints_the_library_values(capsys):
    path = SAMPLES / "buck_24v_3v3.toml"
    code, out, err = _run(capsys, "efficiency", path)
    assert code == 0 and not err
    eff = efficiency(loopkit.load_design(path))
    lines = out.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("#"))
    rows = [line.split() for line in lines[start + 2: start + 2 + eff.vin.size]]
    assert [float(r[-2]) for r in rows] == [round(100 * e, 2) for e in eff.efficiency]
    assert "Caution" in out and "Switching and other losses" in out
    assert max(len(line) for line in lines) <= 80


def test_cli_four_switch_modes_and_json(capsys):
    path = SAMPLES / "fourswitch_automotive_9v.toml"
    code, out, _ = _run(capsys, "efficiency", path)
    assert code == 0 and "buck-boost" in out and "cost" in out
    code, out, _ = _run(capsys, "efficiency", path, "--json", "--points", "4")
    doc = json.loads(out)
    design = loopkit.load_design(path)
    eff, modes = efficiency(design), mode_efficiency(design)
    assert_allclose(doc["corners"]["efficiency"], eff.efficiency, rtol=1e-12)
    assert_allclose(doc["corners"]["overlap_w"], eff.overlap_w, rtol=1e-12)
    assert doc["modes"]["rule"] == modes.rule.tolist()
    assert len(doc["curves"]["load"]) == 4 and len(doc["curves"]["efficiency"]) == len(design.operating.vin)


def test_cli_csv(capsys, tmp_path):
    path = SAMPLES / "solar_charger_14v4.toml"
    out_csv = tmp_path / "eff.csv"
    code, out, _ = _run(capsys, "efficiency", path, "--csv", out_csv, "--points", "7")
    assert code == 0 and "wrote" in out
    lines = out_csv.read_text().splitlines()
    assert lines[0].startswith('"# Caution')
    header = lines[1].split(",")
    assert header[0] == "load_a" and len(header) == 1 + 5
    data = np.array([[float(x) for x in line.split(",")] for line in lines[2:]])
    curves = efficiency_curves(loopkit.load_design(path), 7)
    assert data.shape == (7, 6)
    assert_allclose(data[:, 1:], curves.efficiency.T, atol=1e-6)


@pytest.mark.parametrize("argv", [("--points", "1"), ("--load-min", "-1"), ("--load-min", "5")])
def test_cli_bad_options_one_line(capsys, argv):
    code, out, err = _run(capsys, "efficiency", SAMPLES / "buck_24v_3v3.toml", *argv)
    assert code == 2 and not out
    assert len(err.strip().splitlines()) == 1 and "error" in err


def test_every_sample_reports(capsys, sample_path):
    code, out, err = _run(capsys, "efficiency", sample_path)
    assert code == 0, err
    assert "Eff" in out
    assert max(len(line) for line in out.splitlines()) <= 80
