"""Property tests (hypothesis) of the power-stage models over random valid stages.

Outside references for the properties:
* ideal conversion ratios: Erickson & Maksimovic, Fundamentals of Power
  Electronics, 2nd ed. 2001, ch. 2 (buck D, boost 1/D', buck-boost -D/D') and
  ch. 6 (flyback D/(n D')) -- from memory;
* CCM/DCM boundary: [EM] ch. 5 -- DCM when the CCM ripple half-amplitude
  exceeds the average inductor current (K < Kcrit); the inductor current and
  ripple of the independent state-space-averaged reference (tests/reference/ssa.py,
  Middlebrook & Cuk, IEEE PESC 1976) decide the expected verdict.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from reference import ssa  # tests/ is on sys.path (pytest rootdir conftest)

from loopkit import DesignError, analyse_stage
from loopkit.design import CapacitorBank, Design, Operating, Sensing, Stage
from loopkit.stages import topology_module

TOPOLOGIES = ("buck", "boost", "inverting-buck-boost", "four-switch-buck-boost", "flyback")
SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def textbook_ratio(topology, duty, n=1.0, mode="buck"):
    """Ideal CCM V/Vg ([EM] ch. 2 and 6, from memory)."""
    if topology == "buck" or (topology == "four-switch-buck-boost" and mode == "buck"):
        return duty
    if topology in ("boost", "four-switch-buck-boost"):
        return 1 / (1 - duty)
    if topology == "inverting-buck-boost":
        return -duty / (1 - duty)
    return duty / (n * (1 - duty))


@st.composite
def designs(draw, topology=None, rectifier=None, light_load=None):
    """A valid design: conversion ratio, parasitics (<= 1 % of the load resistance each,
    1-2 capacitor banks, 2 input voltages x 3 loads."""
    topo = topology or draw(st.sampled_from(TOPOLOGIES))
    fsw = draw(st.floats(50e3, 2e6))
    n = 1.0
    v1 = draw(st.floats(3.0, 60.0))
    spread = draw(st.floats(1.0, 1.6))
    if topo == "buck":
        vin = (v1 * 1.2, v1 * 1.2 * spread)
        vout = v1 * draw(st.floats(0.05, 0.8))
    elif topo == "boost":
        vin = (v1, v1 * spread)
        vout = vin[1] * draw(st.floats(1.1, 2.5))
    elif topo == "inverting-buck-boost":
        vin = (v1, v1 * spread)
        vout = -v1 * draw(st.floats(0.2, 2.5))
    elif topo == "flyback":
        vin = (v1 * 5, v1 * 5 * spread)
        vout = draw(st.floats(3.0, 48.0))
        d_nom = draw(st.floats(0.2, 0.65))
        n = vin[0] * d_nom / ((1 - d_nom) * vout)
        assume(0.01 <= n <= 100.0)  # turns ratios loopkit accepts (loopkit.bounds)
    else:
        vout = v1
        vin = (v1 * draw(st.floats(0.5, 0.95)), v1 * draw(st.floats(1.05, 2.5)))
    i_max = draw(st.floats(0.1, 10.0))
    loads = (i_max * draw(st.floats(0.01, 0.3)), i_max * draw(st.floats(0.3, 0.9)), i_max)
    r_min = abs(vout) / i_max
    l_h = draw(st.floats(0.2, 20.0)) * r_min * n * n / fsw  # around the CCM/DCM boundary over the loads
    assume(1e-9 <= l_h <= 1.0)  # inductances loopkit accepts (loopkit.bounds)
    rect = rectifier or draw(st.sampled_from(["synchronous", "diode"]))
    if light_load is not None:
        ll = light_load
    else:
        ll = "dcm" if rect == "diode" else draw(st.sampled_from(["dcm", "forced-ccm"]))

    def par(primary=False):  # flyback primary-side parts are compared with the load referred, n^2 R
        return r_min * (n * n if primary else 1.0) * draw(st.floats(0.0, 0.01))

    banks = tuple(
        CapacitorBank(
            draw(st.floats(1e-6, 1e-3)), draw(st.sampled_from([0.0, 1e-3, 5e-3, 0.02, 0.08])), draw(st.integers(1, 4))
        )
        for _ in range(draw(st.integers(1, 2)))
    )
    try:  # a valid design: loopkit's bounds (loopkit.bounds) refuse the few draws beyond them
        stage = Stage(
            topology=topo,
            fsw=fsw,
            inductance=l_h,
            output_caps=banks,
            dcr=par(True),
            r_switch=par(True),
            rectifier=rect,
            r_rectifier=par(),
            diode_drop=draw(st.floats(0.0, 0.8)) if rect == "diode" else 0.0,
            light_load=ll,
            turns_ratio=n,
            buck_max_duty=0.85,
            boost_min_duty=0.12,
        )
    except DesignError:
        assume(False)
    sensing = Sensing(kind="differential") if vout < 0 else Sensing()
    return Design(stage=stage, operating=Operating(vout=vout, vin=vin, load=loads), sensing=sensing)


@SETTINGS
@given(designs())
def test_duty_between_zero_and_one(design):
    res = analyse_stage(design)
    assert np.all((res.duty > 0) & (res.duty < 1)), res.duty
    assert res.duty.shape == (design.operating.n_corners,)


@pytest.mark.parametrize("topology", TOPOLOGIES)
@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1))
def test_ratio_tends_to_ideal_as_parasitics_vanish(topology, seed):
    """Scale every parasitic by eps -> 0: V/Vg at the computed duty -> the ideal relation."""
    errors = []
    for eps in (1e-2, 1e-4, 1e-6, 0.0):
        design = _seeded_design(topology, seed, eps)  # the same stage at every eps
        res = analyse_stage(design)
        vin, vout = res.vin, design.operating.vout
        module = topology_module(topology)
        ratio = np.empty_like(res.duty)
        for k in range(res.n_corners):
            if topology == "four-switch-buck-boost":
                mode = _four_switch_mode(design, res, k)
                ratio[k] = module.ideal_ratio(res.duty[k], mode)
                assert ratio[k] == pytest.approx(textbook_ratio(topology, res.duty[k], mode=mode), rel=1e-12)
            elif topology == "flyback":
                ratio[k] = module.ideal_ratio(res.duty[k], design.stage.turns_ratio)
                assert ratio[k] == pytest.approx(
                    textbook_ratio(topology, res.duty[k], n=design.stage.turns_ratio), rel=1e-12
                )
            else:
                ratio[k] = module.ideal_ratio(res.duty[k])
                assert ratio[k] == pytest.approx(textbook_ratio(topology, res.duty[k]), rel=1e-12)
        errors.append(np.max(np.abs(ratio * vin / vout - 1.0)))
    assert errors[-1] < 1e-12, errors  # no parasitics: exactly ideal
    assert errors[2] < 1e-4, errors
    assert errors[2] <= errors[1] <= errors[0] or errors[0] < 1e-12, errors


def _four_switch_mode(design, res, k):
    """Mode actually run at corner k: buck/boost label, or the reference rule in the band."""
    if res.submode[k] in ("buck", "boost"):
        return str(res.submode[k])
    return ssa.four_switch_mode(design.stage, res.vin[k], design.operating.vout, res.load[k])[0]


def _seeded_design(topology, seed, eps):
    """A forced-CCM synchronous design drawn from ``seed``, parasitics scaled by eps."""
    rng = np.random.default_rng(seed)
    fsw = rng.uniform(100e3, 1e6)
    v1 = rng.uniform(3.0, 40.0)
    n = 1.0
    if topology == "buck":
        vin, vout = (v1 * 1.2, v1 * 1.8), v1 * rng.uniform(0.05, 0.8)
    elif topology == "boost":
        vin, vout = (v1, v1 * 1.3), v1 * 1.3 * rng.uniform(1.1, 2.5)
    elif topology == "inverting-buck-boost":
        vin, vout = (v1, v1 * 1.5), -v1 * rng.uniform(0.2, 2.5)
    elif topology == "flyback":
        vin, vout = (v1 * 5, v1 * 8), rng.uniform(3.0, 48.0)
        d_nom = rng.uniform(0.2, 0.6)
        n = vin[0] * d_nom / ((1 - d_nom) * vout)
    else:
        vin, vout = (v1 * 0.6, v1 * 1.6), v1
    i_max = rng.uniform(0.1, 10.0)
    r_min = abs(vout) / i_max
    pars = eps * r_min * rng.uniform(0.0, 0.01, 3) * np.array([n * n, n * n, 1.0])  # primary parts vs n^2 R
    banks = (CapacitorBank(rng.uniform(10e-6, 500e-6), eps * rng.uniform(0, 0.05), 2),)
    stage = Stage(
        topology=topology,
        fsw=fsw,
        inductance=rng.uniform(0.5, 5) * r_min * n * n / fsw,
        output_caps=banks,
        dcr=pars[0],
        r_switch=pars[1],
        rectifier="synchronous",
        r_rectifier=pars[2],
        light_load="forced-ccm",
        turns_ratio=n,
        buck_max_duty=0.85,
        boost_min_duty=0.12,
    )
    sensing = Sensing(kind="differential") if vout < 0 else Sensing()
    return Design(stage=stage, operating=Operating(vout=vout, vin=vin, load=(0.3 * i_max, i_max)), sensing=sensing)


@SETTINGS
@given(designs())
def test_ccm_dcm_verdict_matches_ripple(design):
    """DCM exactly where the CCM ripple half-amplitude exceeds the average inductor current
    ([EM] ch. 5), with current and ripple from the independent reference."""
    res = analyse_stage(design)
    stage = design.stage
    for k in range(res.n_corners):
        vg, io, vout = res.vin[k], res.load[k], design.operating.vout
        mode = _four_switch_mode(design, res, k) if stage.topology.startswith("four") else ""
        pt = ssa.solve(ssa.params_from_stage(stage, mode), vg, vout, io)
        margin = pt.ripple_pp / 2 - pt.i_l
        assume(abs(margin) > 1e-9 * pt.i_l)  # not exactly at the boundary
        expected = stage.light_load == "dcm" and margin > 0
        assert bool(res.dcm[k]) == expected, f"corner {k}: ripple/2 - I_L = {margin:.4g} A"
        if stage.light_load == "dcm":
            assert (io < res.load_boundary[k]) == expected
        if res.dcm[k]:
            # DCM: the current returns to zero within the period, so I_L < ipk/2
            assert res.i_l[k] < res.i_peak[k] / 2
            assert res.ripple_pp[k] == pytest.approx(res.i_peak[k])
        else:
            assert res.i_peak[k] == pytest.approx(res.i_l[k] + res.ripple_pp[k] / 2)
            if stage.light_load == "dcm":
                assert res.ripple_pp[k] / 2 <= res.i_l[k]


@SETTINGS
@given(designs(light_load=None))
def test_dcm_corners_use_the_dcm_model(design):
    """DCM corners: no double pole / Q, an output pole and the HF pole of the full-order model
    (Sun et al. 2001), stable, and the RHP zero of boost-type stages where loopkit/stages/dcm_full.py
    derives it; Zout with the zeros of the inductor current's dynamics w2 + s + s^2/(3 w2) (in the CCM
    model the one zero of s L + r_series); CCM corners the reverse."""
    res = analyse_stage(design)
    nb = len(design.stage.output_caps)
    zz = res.zout.zeros_hz()
    n_zeros = np.sum(np.isfinite(zz), axis=1)
    poles = res.gvd.poles_hz()
    for k in range(res.n_corners):
        if res.dcm[k]:
            assert np.isnan(res.f0_hz[k]) and np.isnan(res.q[k])
            kind = res.submode[k] or design.stage.topology
            if kind == "buck":  # fed in both intervals: no RHP zero
                assert np.isnan(res.f_rhp_hz[k])
            elif kind != "transition":
                d, fsw = res.duty[k], design.stage.fsw
                d2 = res.i_peak[k] * fsw / res.sf_a_per_s[k]
                s_z = (3.0 * fsw / d2) * (np.sqrt(1.0 + 4.0 * d2 / (3.0 * d)) - 1.0)
                assert res.f_rhp_hz[k] == pytest.approx(s_z / (2 * np.pi), rel=1e-6)
            assert np.isfinite(res.fp_hz[k]) and np.isfinite(res.f_hf_hz[k])
            p = poles[k][np.isfinite(poles[k])]
            assert np.all(p.real < 0), p
            assert np.any(np.isclose(np.abs(p), res.f_hf_hz[k], rtol=1e-9))
            assert n_zeros[k] == nb + 2 - sum(b.esr == 0 for b in design.stage.output_caps)
        else:
            assert np.isfinite(res.f0_hz[k]) and np.isfinite(res.q[k])
            assert np.isnan(res.fp_hz[k]) and np.isnan(res.f_hf_hz[k])
            assert n_zeros[k] == nb + 1 - sum(b.esr == 0 for b in design.stage.output_caps)
    codes = [f.code for f in res.findings if f.code == "dcm"]
    assert len(codes) == int(res.dcm.sum())  # every DCM corner is reported


@pytest.mark.parametrize("topology", TOPOLOGIES)
def test_sweep_50_vin_by_5_loads_is_one_call(topology):
    """A 50 x 5 sweep is one analyse_stage call returning (250,) arrays, equal to
    single-corner calls (every third corner)."""
    base = _seeded_design(topology, 12345, 1.0)
    stage = (
        replace(base.stage, rectifier="diode", light_load="dcm", diode_drop=0.4)
        if topology != "four-switch-buck-boost"
        else base.stage
    )
    lo, hi = base.operating.vin
    vin = tuple(np.linspace(lo, hi, 50))
    design = replace(base, stage=stage, operating=replace(base.operating, vin=vin))
    # loads around the CCM/DCM boundary (input choice only; the boundary is checked elsewhere)
    i_b = float(np.median(analyse_stage(design).load_boundary))
    loads = tuple(np.linspace(0.3, 3.0, 5) * i_b)
    design = replace(design, operating=Operating(vout=base.operating.vout, vin=vin, load=loads))
    res = analyse_stage(design)
    assert res.n_corners == 250 and res.duty.shape == (250,) and res.gvd.n_corners == 250
    f = np.logspace(1, np.log10(stage.fsw / 2), 50)
    resp = {name: getattr(res, name).response(f) for name in ("gvd", "gvg", "zout")}
    assert resp["gvd"].shape == (250, 50)
    if stage.light_load == "dcm":
        assert res.dcm.any() and (~res.dcm).any(), "the sweep should cross the CCM/DCM boundary"
    for k in range(0, 250, 3):
        single = analyse_stage(
            replace(design, operating=Operating(vout=design.operating.vout, vin=(vin[k // 5],), load=(loads[k % 5],)))
        )
        assert single.dcm[0] == res.dcm[k] and single.submode[0] == res.submode[k]
        for name in ("duty", "i_l", "ripple_pp", "load_boundary", "gd0"):
            assert getattr(single, name)[0] == pytest.approx(getattr(res, name)[k], rel=1e-12), name
        for name in ("gvd", "gvg", "zout"):
            np.testing.assert_allclose(getattr(single, name).response(f)[0], resp[name][k], rtol=1e-10)
