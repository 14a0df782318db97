"""The built-in switching simulator against ngspice transients of the same circuits.

Open loop (every topology, CCM and DCM): loopkit.switching driven at a fixed duty against
tests/reference/switching.py (the switched circuit in ngspice at the same duty, its
periodic steady state found by shooting).  Closed loop (:data:`CLOSED`): the designed
network's own circuit around the switched converter in ngspice
(tests/reference/closed_loop_spice.py) against loopkit.switching with the network's
transfer function: steady state, a load step, and the loop gain by series injection.  One
case per control scheme (voltage-mode buck, peak-current boost), then one per further
topology and one in DCM: the inverting buck-boost (voltage mode, Type III behind the
differential sensing amplifier, which ngspice gets as a VCVS with its pole), the
four-switch stage in boost mode (voltage mode, Type III), the flyback (peak current mode
with the optocoupler Type II; in ngspice an ideal transformer, VCVS and CCCS with
n = Np/Ns, with the magnetising inductance on the primary and the DCR in series with the
primary terminal: the perfectly coupled winding pair the simulator's single magnetising
current describes) and the peak-current boost at light load in DCM (diode emulation).
ngspice starts its integrator where its own circuit needs it
(:func:`reference.closed_loop_spice.settled_vc`; the averaged control voltage only as the
first guess): the inverting sample's Type III zero at 25 Hz otherwise leaves a drift over
thousands of periods (3e-4 V per 50 periods), ten times the steady-state tolerance.

Sources: ngspice (Debian package ``ngspice``, version 39); the comparator and latch of peak
current mode as in R. B. Ridley, "A new, continuous-time model for current-mode control",
IEEE Trans. Power Electronics 6(2), 1991 (and voltage mode as the same comparator with the
PWM ramp, Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed., sec. 7.6).

Tolerances (both sides simulate the same ideal switched circuit; what differs is numerics)
-------------------------------------------------------------------------------------------
* Open-loop output voltage: ``|V| (EDGE / min(D, D') + 5e-5)``: the reference's switch flips
  inside a PULSE edge of EDGE = 1e-5 Ts, so its on-time is exact to EDGE, and V (prop. to D
  or 1/D') to EDGE/min(D, D'); 5e-5 for its solver (reltol 1e-5) and its steady-state
  drift limit (2e-5).  loopkit's side is exact to rounding (shooting residual 1e-10).
* Inductor ripple and peak: ``EDGE / min(D, D') + 2e-4`` relative (the extremes fall on
  switching instants, which are solver time points; 2e-4 for reltol on the current).
* Output ripple (peak-to-peak of the output node in a period): 1 %: the reference samples at
  its solver points (largest step Ts/100), loopkit at 32 panels per switch interval; a
  parabolic extremum sampled at a step h is low by about (h/T)^2/2 of the ripple.
* Closed loop, output voltage: 3e-4 relative: the comparator resolves 1e-5 Ts (pcm_spice's
  notes), reltol 1e-4, and the ngspice run is still settling (its drift over the last 20
  periods is added to the tolerance).  Peak current 1e-3 relative: ngspice's switch opens
  one latch delay after the comparator trips (the latch falls from 1 to the switch's 0.4
  with time constant Ts/2000: about 4.6e-4 Ts), while the current still rises at Sn
  (flyback: 4e-4 of the peak), plus reltol 1e-4 on the current; measured 8.3e-4 (flyback)
  and 9.0e-4 (DCM boost), under 1e-4 for the voltage-mode cases.  Output ripple 2 %
  (solver points at most Ts/50 apart).
* Load step: peak deviation of the one-period moving average 3 %, settling time into the
  band 5 % plus one period (the moving average is read at solver points / simulator panels;
  the band crossing of a ringing response moves by a ringing period when the last peak just
  grazes the band).
* Loop gain: 0.3 dB and 2 deg: ngspice's comparator timing (1e-5 Ts) and its solver step
  (Ts/20 in these runs) bound the switching instants' small-signal motion to about 1 % of
  the perturbed duty at the injection amplitudes used (1 % of vout), i.e. ~0.1 dB; the
  rest is the Fourier window's leakage of the settling transient.  The solver step is the
  referee's main error where the loop gain is steep: on the four-switch boost at fc/2 (its
  LC resonance, 21.5 dB) ngspice with Ts/10 read 0.25 dB / 0.69 deg off the simulator,
  with Ts/20 0.06 dB / 0.32 deg and with Ts/100 0.06 dB / 0.17 deg (converging on the
  simulator, which is exact); the other new cases agree within 0.02 dB and 0.04 deg.
* Load step, measured: peak within 0.15 % (inverting), 0.07 % (four-switch), 0.03 %
  (flyback), 0.14 % (DCM boost); settling times within 0.1 period (four-switch, flyback, DCM
  boost; the band is crossed steeply there).
"""

from __future__ import annotations

import dataclasses
import math
import os
from concurrent.futures import ThreadPoolExecutor
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from reference import closed_loop_spice, pcm_spice, switching

import loopkit
from loopkit import switching as sw
from loopkit.loop import design_loop, network_context
from loopkit.networks import network_module
from loopkit.timeresponse import step_response

pytestmark = [pytest.mark.ngspice, pytest.mark.slow]

SAMPLES = Path(__file__).resolve().parents[1] / "sample_designs"
EDGE = switching.EDGE


def _sample(name):
    return lambda: loopkit.load_design(SAMPLES / f"{name}.toml")


def _diode_buck():
    """The 24 V -> 3.3 V sample with a 0.45 V, 20 mohm diode (a scenario, not a check value)."""
    d = loopkit.load_design(SAMPLES / "buck_24v_3v3.toml")
    return dataclasses.replace(d, stage=dataclasses.replace(d.stage, rectifier="diode", diode_drop=0.45,
                                                            r_rectifier=0.02, light_load=""))


# (case id, design, vin, load, expected mode, four-switch mode or None): every topology in CCM and DCM
OPEN_CASES = [
    ("buck-sync-24V-1.5A", _sample("buck_24v_3v3"), 24.0, 1.5, "CCM", None),
    ("buck-sync-32V-0.3A-reverse", _sample("buck_24v_3v3"), 32.0, 0.3, "CCM", None),
    ("buck-diode-32V-0.3A", _diode_buck, 32.0, 0.3, "DCM", None),
    ("boost-2.8V-1.5A", _sample("boost_liion_5v"), 2.8, 1.5, "CCM", None),
    ("boost-3.6V-0.1A", _sample("boost_liion_5v"), 3.6, 0.1, "DCM", None),
    ("inv-9V-0.3A", _sample("inverting_minus15v"), 9.0, 0.3, "CCM", None),
    ("inv-12V-0.03A", _sample("inverting_minus15v"), 12.0, 0.03, "DCM", None),
    ("flyback-36V-2A", _sample("flyback_48v_12v"), 36.0, 2.0, "CCM", None),
    ("flyback-48V-0.2A", _sample("flyback_48v_12v"), 48.0, 0.2, "DCM", None),
    ("4sw-boost-6V-2A", _sample("fourswitch_automotive_9v"), 6.0, 2.0, "CCM", "boost"),
    ("4sw-buck-18V-2A", _sample("fourswitch_automotive_9v"), 18.0, 2.0, "CCM", "buck"),
]
OPEN_IDS = [c[0] for c in OPEN_CASES]


def _corner(stage, vin, load):
    hit = np.nonzero(np.isclose(stage.vin, vin) & np.isclose(stage.load, load))[0]
    assert hit.size == 1
    return int(hit[0])


def _open_case(case):
    _name, make, vin, load, _expected, mode = case
    design = make()
    setup = sw.open_loop_setup(design)
    k = _corner(setup.stage, vin, load)
    duty = float(setup.stage.duty[k])
    ref = switching.simulate(design, vin, load, duty, mode=mode, workers=1)
    mine = sw.steady_state(setup, [k])
    return design, setup, k, duty, ref, mine


@pytest.fixture(scope="module")
def open_runs():
    with ThreadPoolExecutor(max_workers=os.cpu_count() or 2) as pool:
        return dict(zip(OPEN_IDS, pool.map(_open_case, OPEN_CASES)))


@pytest.mark.parametrize("case", OPEN_CASES, ids=OPEN_IDS)
def test_open_loop_against_ngspice(open_runs, case):
    _design, _setup, _k, duty, ref, mine = open_runs[case[0]]
    timing = EDGE / min(duty, 1.0 - duty)
    vout = abs(ref.vout_v)
    assert mine.settled[0]
    assert abs(mine.vout_v[0] - ref.vout_v) <= vout * (timing + 5e-5)
    assert mine.il_peak_a[0] == pytest.approx(ref.il_max_a, rel=timing + 2e-4)
    ripple = mine.il_peak_a[0] - mine.il_valley_a[0] if not mine.dcm[0] else mine.il_peak_a[0]
    assert ripple == pytest.approx(ref.ripple_pp_a, rel=timing + 2e-4)
    assert mine.ripple_pp_v[0] == pytest.approx(ref.vout_pp_v, rel=1e-2)
    assert bool(mine.dcm[0]) == ref.dcm == (case[4] == "DCM")


def test_open_loop_detects_a_duty_error(open_runs):
    """The comparison can fail: 0.1 % more duty moves the buck's output by more than the tolerance."""
    design, setup, k, duty, ref, _ = open_runs["buck-sync-24V-1.5A"]
    off = sw.steady_state(sw.open_loop_setup(design, np.full(setup.n_corners, duty * 1.001)), [k])
    assert abs(off.vout_v[0] - ref.vout_v) > abs(ref.vout_v) * (EDGE / min(duty, 1 - duty) + 5e-5)


# ---------------------------------------------------------------------------- closed loop
def _pcm_case(design, result, k, ri, se, topology=None):
    st = design.stage
    topo = topology or st.topology
    return pcm_spice.PcmCase(
        topo, st.fsw, st.inductance, tuple((b.c_total, b.esr_total) for b in st.output_caps), float(result.stage.vin[k]),
        float(design.operating.vout), abs(design.operating.vout) / float(result.stage.load[k]), ri, se,
        dcr_ohm=st.dcr, r_switch_ohm=st.r_switch, r_rect_ohm=st.r_rectifier, diode_drop_v=st.diode_drop,
        rectifier=st.rectifier, diode_emulation=st.rectifier == "synchronous" and st.light_load_mode == "dcm",
        turns_ratio=st.turns_ratio, max_duty=design.modulator.max_duty)


def _closed(name, vin, load):
    """The designed loop of a sample around its switched converter at one corner, for both sides.

    The four-switch stage runs in the mode the simulator gives the corner (its circuit's
    topology, from :func:`loopkit.stages.four_switch.split`); a differential sensing amplifier
    (``sensing.kind = "differential"``) is put between the injection and the network in ngspice
    with its gain ``vref/vout`` and its pole.  ngspice starts from the simulator's start state
    (the averaged operating point: valley current, zero in DCM, the output on every bank).
    """
    design = loopkit.load_design(SAMPLES / f"{name}.toml")
    result = design_loop(design)
    setup = sw.closed_loop_setup(result)
    k = _corner(result.stage, vin, load)
    ts = 1.0 / design.stage.fsw
    if design.control.scheme == "voltage-mode":
        ri, se = 0.0, float(setup.vc_per_duty[k]) / ts
    else:
        from loopkit.schemes.peak_current import slope_of

        ri, se = design.control.sense_gain, slope_of(design, result.stage)
    topo = design.stage.topology
    if topo == "four-switch-buck-boost":
        topo = f"four-switch-{setup.engine.plants[k].topology}"
    case = _pcm_case(design, result, k, ri, se, topo)
    deck = network_module(result.network).netlist(result.parts, network_context(design), "network")
    m = setup.engine.m
    assert m == 1 + len(design.stage.output_caps)  # every bank has its ESR: the states are the banks
    state0 = tuple(float(x) for x in setup.z0[k, :m])
    sense = None
    if design.sensing.kind == "differential":
        from loopkit.networks.sensing import sensing_transfer

        sense = (float(sensing_transfer(design).gain[0]), design.sensing.diff_bandwidth)
    return {"design": design, "result": result, "setup": setup, "k": k, "case": case, "deck": deck,
            "vc0": float(setup.vc0[k]), "state0": state0, "ts": ts, "sense": sense}


# (sample, vin, load, settling band as a fraction of the averaged peak, load-step span in periods or None for
# load_step's default): one case per control scheme, then one per further topology and one in DCM.  The band sits
# where the moving average crosses it steeply (inverting: its Type III zero at 25 Hz leaves a slow tail near a
# quarter of the peak, where a 1 % difference moves the crossing by tens of periods); the spans cover the settling
# several times over (the default, 60 crossover periods, is 4000-5000 periods for the last two).
CLOSED = {
    "voltage-mode": ("buck_24v_3v3", 24.0, 1.5, 0.25, None),
    "peak-current": ("boost_pcm_12v_24v", 12.0, 0.75, 0.25, None),
    "inverting-vm": ("inverting_minus15v", 12.0, 0.3, 0.5, 400),
    "four-switch-boost-vm": ("fourswitch_automotive_9v", 6.0, 2.0, 0.25, None),
    "flyback-pcm": ("flyback_pcm_48v_12v", 48.0, 2.0, 0.25, 600),
    "boost-pcm-dcm": ("boost_pcm_12v_24v", 12.0, 0.1, 0.25, 600),
}
SETTLE = 600  # periods before measuring in ngspice (several closed-loop time constants here)


@pytest.fixture(scope="module", params=list(CLOSED), ids=list(CLOSED))
def closed(request):
    name, vin, load, band_frac, span = CLOSED[request.param]
    c = _closed(name, vin, load)
    # ngspice's own start for the integrator (the averaged vc0 only as the first guess; see settled_vc)
    dv = 1e-3 * float(c["setup"].vc_per_duty[c["k"]])
    vc, _ = closed_loop_spice.settled_vc(c["case"], c["deck"], c["vc0"], c["state0"], dv=dv, sense=c["sense"])
    return {**c, "vc0": vc, "band_frac": band_frac, "span": span}


def test_closed_loop_steady_state(closed):
    c = closed
    ts = c["ts"]
    res = closed_loop_spice.run(c["case"], c["deck"], c["vc0"], c["state0"], SETTLE, t_keep_s=(SETTLE - 40) * ts,
                                max_step_frac=0.02, sense=c["sense"])
    t, v = res["t"], res["v"]
    v_last = pcm_spice._mean(t, v, (SETTLE - 10) * ts, SETTLE * ts)
    v_before = pcm_spice._mean(t, v, (SETTLE - 30) * ts, (SETTLE - 20) * ts)
    last = t >= (SETTLE - 1) * ts - 1e-15
    mine = sw.steady_state(c["setup"], [c["k"]])
    drift = abs(v_last - v_before)
    assert mine.settled[0]
    assert abs(mine.vout_v[0] - v_last) <= 3e-4 * abs(v_last) + drift
    assert mine.il_peak_a[0] == pytest.approx(res["il"][last].max(), rel=1e-3)
    assert mine.ripple_pp_v[0] == pytest.approx(np.ptp(v[last]), rel=2e-2)


def test_closed_loop_load_step(closed):
    c = closed
    ts, k = c["ts"], c["k"]
    amp = 0.5 * float(c["result"].stage.load[k])
    # a band a fraction of the averaged peak, so that the settling time is a real figure here
    band = c["band_frac"] * abs(float(step_response(c["result"], "load", amp).peak_v[k]))
    mine = sw.load_step(c["setup"], amp, periods=c["span"], corners=[k], band_v=band)
    after = math.ceil(mine.t_s[-1] / ts)
    sign = 1.0 if c["design"].operating.vout > 0 else -1.0  # a heavier load draws from a positive output
    res = closed_loop_spice.run(c["case"], c["deck"], c["vc0"], c["state0"], SETTLE + after,
                                t_keep_s=(SETTLE - 3) * ts, step=(SETTLE * ts, sign * amp), max_step_frac=0.05,
                                sense=c["sense"])
    t, v = res["t"], res["v"]
    v0 = pcm_spice._mean(t, v, (SETTLE - 2) * ts, SETTLE * ts)
    mov = closed_loop_spice.moving_average(t, v - v0, ts)
    keep = t >= SETTLE * ts
    ts_rel = t[keep] - SETTLE * ts
    peak_ref = mov[keep][np.argmax(np.abs(mov[keep]))]
    assert mine.peak_v[0] == pytest.approx(peak_ref, rel=0.03)
    final = np.mean(mov[keep][ts_rel > ts_rel[-1] - 5 * ts])
    outside = np.nonzero(np.abs(mov[keep] - final) > mine.band_v)[0]
    settle_ref = ts_rel[outside[-1]] if outside.size else 0.0
    assert abs(mine.settle_s[0] - settle_ref) <= 0.05 * settle_ref + ts


def _ngspice_loop_gain(c, f_hz, amp):
    ts = c["ts"]
    fr = Fraction(f_hz * ts).limit_denominator(400)
    q = fr.denominator
    window = q * math.ceil(32 / q)
    periods = SETTLE + window
    res = closed_loop_spice.run(c["case"], c["deck"], c["vc0"], c["state0"], periods,
                                t_keep_s=(SETTLE - 1) * ts, inject=(amp, f_hz), max_step_frac=0.05,
                                sense=c["sense"])
    t_a, t_b = SETTLE * ts, periods * ts
    y = closed_loop_spice.fourier(res["t"], res["v"], f_hz, t_a, t_b)
    x = closed_loop_spice.fourier(res["t"], res["fb"], f_hz, t_a, t_b)
    return -y / x


def test_closed_loop_gain_against_ngspice_injection(closed):
    c = closed
    k = c["k"]
    fc = float(c["result"].margins.fc_hz[k])
    f = sw.snap_frequencies([fc / 2, fc, 2 * fc], c["design"].stage.fsw)
    mine = sw.loop_gain(c["setup"], f, corners=[k])
    with ThreadPoolExecutor(max_workers=2) as pool:
        ref = np.array(list(pool.map(lambda j: _ngspice_loop_gain(c, f[j], mine.amplitude_v[0, j]), range(f.size))))
    diff = mine.t_switching[0] / ref
    assert np.all(np.abs(20 * np.log10(np.abs(diff))) <= 0.3)
    assert np.all(np.abs(np.degrees(np.angle(diff))) <= 2.0)
