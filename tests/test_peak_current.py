"""Peak current-mode control: the plant's current-mode quantities and the model, against outside references.

References (tags as in ../shared/REFERENCES.md):

* [MC] Middlebrook & Cuk, IEEE PESC 1976: the independent state-space-averaged
  model in tests/reference/ssa.py (never calls loopkit's stage code) for Gid
  and the inductor slopes.
* [R91] R. B. Ridley, "A new, continuous-time model for current-mode control",
  IEEE TPEL 6(2), 1991 (from memory): Fm, He(s), Qp = 1/(pi (mc D' - 0.5)), the
  buck's closed-form control-to-output (dc gain, dominant pole wp, Qp), Qp
  unbounded at mc = 1, D = 0.5, Qp = 2/pi with Se equal to the down-slope.
* [EM] Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed.: ch. 11
  DCM steady state (M per topology); ch. 12 current-programmed control, its DCM
  section (from memory): the buck-boost's output port a power source, pole
  2/(R C).
* The comparator law itself (the switch turns off when Ri i + Se t = vc), solved
  cycle by cycle in this file: steady states for the dc gains and the
  cycle-to-cycle perturbation ratio (common practice, no source, for the
  |ratio| >= 1 verdict).
* python-control: every inner-loop algebra result (parallel, feedback).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from reference import ssa  # tests/ is on sys.path (pytest rootdir conftest)
from scipy.optimize import brentq
from test_stage_ssa import TOPOLOGIES, random_design

from loopkit import analyse_stage, load_design
from loopkit.design import CapacitorBank, Design, Operating, Sensing, Stage
from loopkit.errors import DesignError
from loopkit.rational import TWO_PI
from loopkit.schemes import peak_current as pc

SAMPLES = sorted((Path(__file__).resolve().parents[1] / "sample_designs").glob("*.toml"))
MAX_DB, MAX_DEG = 0.01, 0.1  # the stage models' agreement with [MC] (issue 2, section 6)


def ideal_design(topology, vin, vout, load, *, l_h=10e-6, c_f=100e-6, esr=0.0, fsw=200e3, turns=1.0, dcm=False):
    """A lossless stage (our own numbers, not check values)."""
    stage = Stage(
        topology=topology,
        fsw=fsw,
        inductance=l_h,
        output_caps=(CapacitorBank(c_f, esr),),
        rectifier="diode" if dcm else "synchronous",
        light_load="dcm" if dcm else "forced-ccm",
        turns_ratio=turns,
    )
    vin = tuple(np.atleast_1d(vin).tolist())
    load = tuple(np.atleast_1d(load).tolist())
    sensing = Sensing(kind="differential") if vout < 0 else Sensing()
    return Design(stage=stage, operating=Operating(vout=vout, vin=vin, load=load), sensing=sensing)


def _grid(fsw):
    return np.logspace(1.0, np.log10(fsw / 2.0), 200)


# ---------------------------------------------------------------------------- the plant
def _check_gid_and_slopes(design):
    r = analyse_stage(design)
    st, vout = design.stage, design.operating.vout
    compared = 0
    for k in np.nonzero(~r.dcm)[0]:
        mode = ""
        if st.topology == "four-switch-buck-boost":
            mode, _ = ssa.four_switch_mode(st, float(r.vin[k]), vout, float(r.load[k]))
        pt = ssa.solve(ssa.params_from_stage(st, mode), float(r.vin[k]), vout, float(r.load[k]))
        f = _grid(st.fsw)
        ref = ssa.responses(pt, f)
        where = f"{design.title or st.topology} corner {k}"
        for name in ("gid", "gig", "gii"):
            ratio = getattr(r, name).take(int(k)).response(f)[0] / ref[name]
            assert np.max(np.abs(20 * np.log10(np.abs(ratio)))) < MAX_DB, f"{where} {name}"
            assert np.max(np.abs(np.degrees(np.angle(ratio)))) < MAX_DEG, f"{where} {name}"
        sn, sf = ssa.slopes(pt)
        assert r.sn_a_per_s[k] == pytest.approx(sn, rel=1e-9), where
        assert r.sf_a_per_s[k] == pytest.approx(sf, rel=1e-9), where
        compared += 1
    assert r.fsw_hz == st.fsw and r.ts_s == pytest.approx(1.0 / st.fsw, rel=1e-15)
    return compared


def test_gid_and_slopes_of_sample_designs(sample_path):
    """Gid, Gig and Gii within 0.01 dB / 0.1 deg of [MC] from 10 Hz to fsw/2; slopes equal the switched circuit's."""
    assert _check_gid_and_slopes(load_design(sample_path)) > 0


@pytest.mark.parametrize("topology", TOPOLOGIES)
def test_gid_and_slopes_of_random_stages(topology):
    """Every parasitic drawn at random (DCR, switch and rectifier resistance, diode drop, ESR of each bank)."""
    rng = np.random.default_rng(9090 + TOPOLOGIES.index(topology))
    assert sum(_check_gid_and_slopes(random_design(rng, topology)) for _ in range(6)) >= 8


def test_gid_reference_can_fail():
    """A Gid missing the output capacitor's ESR differs from [MC] beyond the tolerance."""
    design = ideal_design("buck", 12.0, 5.0, 2.0, esr=0.02)
    r = analyse_stage(design)
    wrong = ideal_design("buck", 12.0, 5.0, 2.0, esr=0.0)
    pt = ssa.solve(ssa.params_from_stage(wrong.stage), 12.0, 5.0, 2.0)
    f = _grid(design.stage.fsw)
    ratio = r.gid.response(f)[0] / ssa.responses(pt, f)["gid"]
    assert np.max(np.abs(20 * np.log10(np.abs(ratio)))) > MAX_DB


IDEAL_SLOPES = [
    # topology, vin, vout, turns: on- and off-slopes of the ideal stage times L ([EM] ch. 2 inductor voltages)
    ("buck", 12.0, 5.0, 1.0, 12.0 - 5.0, 5.0),
    ("boost", 5.0, 12.0, 1.0, 5.0, 12.0 - 5.0),
    ("inverting-buck-boost", 12.0, -15.0, 1.0, 12.0, 15.0),
    ("flyback", 48.0, 12.0, 2.0, 48.0, 2.0 * 12.0),  # off: n V seen from the primary
]


@pytest.mark.parametrize(("topology", "vin", "vout", "turns", "on", "off"), IDEAL_SLOPES)
def test_ideal_slopes_and_their_sensitivities(topology, vin, vout, turns, on, off):
    """sn = v_on/L, sf = v_off/L of the lossless stage; the sensitivities by finite difference of those."""
    l_h = 10e-6
    r = analyse_stage(ideal_design(topology, vin, vout, 1.0, l_h=l_h, turns=turns))
    assert r.sn_a_per_s[0] == pytest.approx(on / l_h, rel=1e-12)
    assert r.sf_a_per_s[0] == pytest.approx(off / l_h, rel=1e-12)
    # d(slope)/d(vg) and d(slope)/d(v) of the same textbook expressions, v signed
    s = np.sign(vout)

    def slopes(vg, v):
        av = abs(v)
        return {
            "buck": (vg - v, v),
            "boost": (vg, v - vg),
            "inverting-buck-boost": (vg, av),
            "flyback": (vg, turns * av),
        }[topology]

    h = 1e-3
    sn_g = (slopes(vin + h, vout)[0] - slopes(vin - h, vout)[0]) / (2 * h)
    sf_g = (slopes(vin + h, vout)[1] - slopes(vin - h, vout)[1]) / (2 * h)
    sn_v = (slopes(vin, vout + s * h)[0] - slopes(vin, vout - s * h)[0]) / (2 * s * h)
    sf_v = (slopes(vin, vout + s * h)[1] - slopes(vin, vout - s * h)[1]) / (2 * s * h)
    np.testing.assert_allclose(r.slope_sensitivity_per_h[0] * l_h, [[sn_g, sn_v], [sf_g, sf_v]], atol=1e-9)


def _dcm_average_current(topology, vg, duty, k):
    """Average inductor current of the ideal DCM stage (R = 1), from M of [EM] ch. 11 (REFERENCES.md)."""
    ts, l_h = 1.0, k / 2.0  # K = 2 L/(R Ts) with R = 1, Ts = 1
    if topology == "buck":
        m = 2.0 / (1.0 + np.sqrt(1.0 + 4.0 * k / duty**2))
        return m * vg  # all of the inductor current goes to R = 1
    if topology == "boost":
        m = (1.0 + np.sqrt(1.0 + 4.0 * duty**2 / k)) / 2.0
        ipk = vg * duty * ts / l_h
        d2 = duty / (m - 1.0)
        return ipk * (duty + d2) / 2.0
    m = duty / np.sqrt(k)  # buck-boost
    ipk = vg * duty * ts / l_h
    return ipk * (duty + duty / m) / 2.0


@pytest.mark.parametrize(
    ("topology", "vin", "vout"), [("buck", 12.0, 5.0), ("boost", 5.0, 12.0), ("inverting-buck-boost", 12.0, -9.0)]
)
def test_dcm_gid_dc_gain_against_the_dcm_steady_state(topology, vin, vout):
    """Gid(0) and Gig(0) at a DCM corner equal d<iL>/dD and d<iL>/dVg of the ideal DCM steady state ([EM]
    ch. 11 M, finite differences)."""
    design = ideal_design(topology, vin, vout, 0.05, l_h=2e-6, dcm=True)
    r = analyse_stage(design)
    assert r.dcm[0]
    fsw, l_h, rl = design.stage.fsw, design.stage.inductance, abs(vout) / 0.05
    k = 2 * l_h * fsw / rl
    d = r.duty[0]
    h = 1e-6
    # scale: R = 1 and Ts = 1 in the helper, so currents scale by 1/R
    slope = (_dcm_average_current(topology, vin, d + h, k) - _dcm_average_current(topology, vin, d - h, k)) / (2 * h)
    assert r.gid.dc_gain()[0] == pytest.approx(slope / rl, rel=1e-6)
    g = 1e-6 * vin  # and Gig(0): d<iL>/dVg at fixed D
    line = (_dcm_average_current(topology, vin + g, d, k) - _dcm_average_current(topology, vin - g, d, k)) / (2 * g)
    assert r.gig.dc_gain()[0] == pytest.approx(line / rl, rel=1e-6)
    assert r.i_l[0] == pytest.approx(_dcm_average_current(topology, vin, d, k) / rl, rel=1e-9)


# ---------------------------------------------------------------------------- Ridley's buck
def _ridley_buck(vg, vo, r_load, l_h, c_f, esr, fsw, ri, se):
    """[R91] closed form (REFERENCES.md): dc gain, wp (rad/s), Qp, wn."""
    ts, d = 1.0 / fsw, vo / vg
    sn = ri * (vg - vo) / l_h
    mc = 1.0 + se / sn
    x = mc * (1.0 - d) - 0.5
    dc = (r_load / ri) / (1.0 + r_load * ts * x / l_h)
    wp = 1.0 / (c_f * r_load) + ts * x / (l_h * c_f)
    return dc, wp, 1.0 / (np.pi * x), np.pi / ts


def _pole_split(h, k=0):
    """(the real pole of least magnitude, the complex pair's Q, its |p|) of corner k, rad/s."""
    p = h.poles_hz()[k] * TWO_PI
    p = p[np.isfinite(p)]
    real = p[np.abs(p.imag) <= 1e-9 * np.abs(p)]
    pair = p[p.imag > 1e-9 * np.abs(p)]
    assert pair.size == 1, p
    return float(np.min(np.abs(real))), float(np.abs(pair[0]) / (-2.0 * pair[0].real)), float(np.abs(pair[0]))


BUCK_CASES = [
    # vg, vo, R, L, C, ESR, fsw, Ri, Se (V/s): our own numbers
    (12.0, 5.0, 2.5, 10e-6, 100e-6, 0.0, 200e3, 0.1, 0.0),
    (12.0, 5.0, 2.5, 10e-6, 100e-6, 0.01, 200e3, 0.1, 2e4),
    (24.0, 3.3, 1.1, 4.7e-6, 220e-6, 0.005, 400e3, 0.05, 1e4),
    (12.0, 8.0, 4.0, 22e-6, 47e-6, 0.02, 300e3, 0.2, 4e4),  # D = 0.67 with slope
    (48.0, 12.0, 6.0, 47e-6, 100e-6, 0.03, 150e3, 0.25, 0.0),
]


@pytest.mark.parametrize("case", BUCK_CASES)
def test_buck_against_ridleys_closed_form(case):
    """[R91]: dc gain exactly (both describe the same averaged dc), the dominant pole wp and Qp of the
    double pole at wn = pi/Ts to within the closed form's own approximation (it separates the poles
    assuming wp << wn: allow 3 wp/wn, at most a few per cent here), and the ESR zero 1/(ESR C)."""
    vg, vo, rl, l_h, c_f, esr, fsw, ri, se = case
    r = analyse_stage(ideal_design("buck", vg, vo, vo / rl, l_h=l_h, c_f=c_f, esr=esr, fsw=fsw))
    h = pc.control_to_output(r, ri, se)
    dc, wp, qp, wn = _ridley_buck(vg, vo, rl, l_h, c_f, esr, fsw, ri, se)
    assert h.dc_gain()[0] == pytest.approx(dc, rel=1e-9)
    p_low, q_pair, w_pair = _pole_split(h)
    tol = 3.0 * wp / wn
    assert p_low == pytest.approx(wp, rel=tol)
    assert q_pair == pytest.approx(qp, rel=tol)
    assert w_pair == pytest.approx(wn, rel=tol)
    assert pc.figures(r, ri, se)["qp"][0] == pytest.approx(qp, rel=1e-12)
    z = h.zeros_hz()[0]
    z = z[np.isfinite(z)]
    if esr > 0:
        assert z.size == 1 and -z[0].real * TWO_PI == pytest.approx(1.0 / (esr * c_f), rel=1e-9)
    else:
        assert z.size == 0


def test_buck_qp_unbounded_at_mc_1_and_half_duty():
    """[R91]: mc = 1 (no ramp) at D = 0.5 puts the sampling double pole on the imaginary axis."""
    r = analyse_stage(ideal_design("buck", 10.0, 5.0, 2.0))
    assert r.duty[0] == 0.5
    assert np.isinf(pc.figures(r, 0.1, 0.0)["qp"][0])
    _, q_pair, _ = _pole_split(pc.control_to_output(r, 0.1, 0.0))
    # the closed form's Q is infinite; the full model's pair sits on the axis too (to rounding)
    assert abs(1.0 / q_pair) < 1e-9
    assert any(f.code == "subharmonic" for f in pc.findings(r, 0.1, 0.0))
    # and a whisker of ramp makes it finite and stable
    assert np.isfinite(pc.figures(r, 0.1, 1e3)["qp"][0]) and pc.figures(r, 0.1, 1e3)["qp"][0] > 0


@pytest.mark.parametrize("vin", [20.0, 10.0, 7.0, 5.6])
def test_se_equal_to_down_slope_gives_qp_2_over_pi(vin):
    """[R91]: Se = Sf gives Qp = 2/pi at every duty (D = 0.25 ... 0.9); the model's pair agrees."""
    ri = 0.1
    r = analyse_stage(ideal_design("buck", vin, 5.0, 2.0))
    se = ri * r.sf_a_per_s[0]
    assert pc.figures(r, ri, se)["qp"][0] == pytest.approx(2.0 / np.pi, rel=1e-12)
    assert pc.figures(r, ri, se)["ratio"][0] == 0.0
    assert pc.auto_slope(r, ri, "down-slope") == pytest.approx(se, rel=1e-12)
    _, q_pair, _ = _pole_split(pc.control_to_output(r, ri, se))
    _, wp, _, wn = _ridley_buck(vin, 5.0, 2.5, 10e-6, 100e-6, 0.0, 200e3, ri, se)
    assert q_pair == pytest.approx(2.0 / np.pi, rel=3.0 * wp / wn)  # the closed form's order-wp/wn approximation


@pytest.mark.parametrize(("topology", "vin", "vout", "turns"), [(t, v, o, n) for t, v, o, n, *_ in IDEAL_SLOPES])
def test_fm_from_the_comparator_slopes(topology, vin, vout, turns):
    """Fm = 1/((Sn + Se) Ts) with Sn = Ri v_on/L [R91]; flyback sensed on the primary (Sn = Ri Vg/Lm)."""
    l_h, ri, se, fsw = 10e-6, 0.2, 3e4, 200e3
    r = analyse_stage(ideal_design(topology, vin, vout, 1.0, l_h=l_h, turns=turns, fsw=fsw))
    on = {t: o for t, _, _, _, o, _ in IDEAL_SLOPES}[topology]
    sn = ri * on / l_h
    fig = pc.figures(r, ri, se)
    assert fig["fm"][0] == pytest.approx(fsw / (sn + se), rel=1e-12)
    assert fig["mc"][0] == pytest.approx(1.0 + se / sn, rel=1e-12)


# ---------------------------------------------------------------------------- dc gain, every topology
def _pcm_ccm_vc(topology, vg, v, r_load, l_h, ts, ri, se, turns, i_inj=0.0):
    """Control voltage for which the ideal CCM stage sits at output v (comparator law at the peak);
    ``i_inj`` is a current injected into the output node (the stage then supplies |v|/R - i_inj)."""
    av = abs(v)
    io = av / r_load - np.sign(v) * i_inj
    if topology == "buck":
        d, il, sn = v / vg, io, (vg - v) / l_h
    elif topology == "boost":
        d, il, sn = 1 - vg / v, io * v / vg, vg / l_h
    elif topology == "inverting-buck-boost":
        d = av / (vg + av)
        il, sn = io / (1 - d), vg / l_h
    else:  # flyback, magnetising current seen from the primary
        d = turns * av / (vg + turns * av)
        il, sn = io / (turns * (1 - d)), vg / l_h
    ipk = il + sn * d * ts / 2.0
    return ri * ipk + se * d * ts


@pytest.mark.parametrize(("topology", "vin", "vout", "turns"), [(t, v, o, n) for t, v, o, n, *_ in IDEAL_SLOPES])
@pytest.mark.parametrize("se", [0.0, 4e4])
def test_dc_gain_equals_the_comparator_steady_state(topology, vin, vout, turns, se):
    """vo/vc at dc equals dV/dvc of the ideal CCM steady state under the comparator law (finite
    difference): checks Fm, kr and Gid together, for every topology."""
    l_h, fsw, ri, load = 10e-6, 200e3, 0.2, 2.0
    r = analyse_stage(ideal_design(topology, vin, vout, load, l_h=l_h, turns=turns, fsw=fsw))
    h = pc.control_to_output(r, ri, se)
    rl, dv = abs(vout) / load, 1e-4 * abs(vout)
    s = np.sign(vout)
    dvc = _pcm_ccm_vc(topology, vin, vout + s * dv, rl, l_h, 1 / fsw, ri, se, turns) - _pcm_ccm_vc(
        topology, vin, vout - s * dv, rl, l_h, 1 / fsw, ri, se, turns
    )
    assert h.dc_gain()[0] == pytest.approx(2 * s * dv / dvc, rel=1e-6)


@pytest.mark.parametrize(("topology", "vin", "vout", "turns"), [(t, v, o, n) for t, v, o, n, *_ in IDEAL_SLOPES])
@pytest.mark.parametrize("se", [0.0, 4e4])
def test_line_and_output_impedance_at_dc_against_the_comparator_steady_state(topology, vin, vout, turns, se):
    """With vc held: dV/dVg and dV/dI_inj of the ideal CCM steady state under the comparator law (finite
    differences of vc(V, Vg, I_inj)) equal the dc values of line_to_output and output_impedance: checks
    kf, kr, Gig and Gii together, for every topology."""
    l_h, fsw, ri, load = 10e-6, 200e3, 0.2, 2.0
    r = analyse_stage(ideal_design(topology, vin, vout, load, l_h=l_h, turns=turns, fsw=fsw))
    rl, ts = abs(vout) / load, 1 / fsw

    def vc(v=vout, vg=vin, ii=0.0):
        return _pcm_ccm_vc(topology, vg, v, rl, l_h, ts, ri, se, turns, ii)

    hv, hg, hi = 1e-5 * abs(vout), 1e-5 * vin, 1e-5 * load
    dvc_dv = (vc(v=vout + hv) - vc(v=vout - hv)) / (2 * hv)
    dvc_dg = (vc(vg=vin + hg) - vc(vg=vin - hg)) / (2 * hg)
    dvc_di = (vc(ii=hi) - vc(ii=-hi)) / (2 * hi)
    line = pc.line_to_output(r, ri, se).dc_gain()[0]
    zout = pc.output_impedance(r, ri, se).dc_gain()[0]
    assert line == pytest.approx(-dvc_dg / dvc_dv, rel=1e-5, abs=1e-9)
    assert zout == pytest.approx(-dvc_di / dvc_dv, rel=1e-5)


def test_four_switch_modes_and_transition_band():
    """The four-switch stage in buck mode is the buck, in boost mode the boost (same numbers, same dc gain);
    a transition-band corner is modelled approximately and says so."""
    stage = Stage(
        topology="four-switch-buck-boost",
        fsw=200e3,
        inductance=10e-6,
        output_caps=(CapacitorBank(100e-6, 0.0),),
        rectifier="synchronous",
        light_load="forced-ccm",
        buck_max_duty=0.85,
        boost_min_duty=0.12,
    )
    design = Design(stage=stage, operating=Operating(vout=9.0, vin=(6.0, 9.2, 18.0), load=(2.0,)))
    r = analyse_stage(design)
    assert list(r.submode) == ["boost", "transition", "buck"]
    h = pc.control_to_output(r, 0.1, 2e4)
    for k, topo in ((0, "boost"), (2, "buck")):
        twin = analyse_stage(ideal_design(topo, r.vin[k], 9.0, 2.0, l_h=10e-6, c_f=100e-6, fsw=200e3))
        f = _grid(200e3)
        np.testing.assert_allclose(h.take(k).response(f), pc.control_to_output(twin, 0.1, 2e4).response(f), rtol=1e-9)
    found = pc.findings(r, 0.1, 2e4)
    assert [f.corner for f in found if f.code == "pcm-transition-band"] == [1]


# ---------------------------------------------------------------------------- python-control
@pytest.mark.parametrize("sampling", pc.SAMPLING)
@pytest.mark.parametrize("sample", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_inner_loop_algebra_against_python_control(sample, sampling):
    """vo/vc = Gvd Fm / (1 + Fm (Ri He Gid - kr Gvd)), and the closed current loop's line-to-output and
    output impedance, built by python-control (parallel, feedback, series) from the plant's own transfer
    functions equal the module's, at every CCM corner of every sample."""
    control = pytest.importorskip("control")
    r = analyse_stage(load_design(sample))
    ri = 0.05
    se = pc.auto_slope(r, ri)
    h = pc.control_to_output(r, ri, se, sampling=sampling)
    line_h = pc.line_to_output(r, ri, se, sampling=sampling)
    out_h = pc.output_impedance(r, ri, se, sampling=sampling)
    fig = pc.figures(r, ri, se)
    f = np.logspace(1, np.log10(r.fsw_hz / 2), 60)
    s = 1j * TWO_PI * f
    he = pc.sampling_gain(r.ts_s, 1, sampling).to_control(0)
    for k in np.nonzero(~r.dcm)[0]:
        gvd, gid = r.gvd.to_control(int(k)), r.gid.to_control(int(k))
        inner = control.parallel(ri * he * gid, -fig["kr"][k] * gvd)
        d_per_vc = control.feedback(control.tf([fig["fm"][k]], [1.0]), inner)
        ref = gvd * d_per_vc
        np.testing.assert_allclose(h.take(int(k)).response(f)[0], ref(s), rtol=1e-6)
        gvg, gig, gii = (getattr(r, x).to_control(int(k)) for x in ("gvg", "gig", "gii"))
        zout = r.zout.to_control(int(k))
        line = control.parallel(
            gvg,
            gvd * d_per_vc * control.parallel(fig["kr"][k] * gvg, -ri * he * gig, control.tf([fig["kf"][k]], [1.0])),
        )
        out = control.parallel(zout, gvd * d_per_vc * control.parallel(fig["kr"][k] * zout, -ri * he * gii))
        np.testing.assert_allclose(line_h.take(int(k)).response(f)[0], line(s), rtol=1e-6)
        np.testing.assert_allclose(out_h.take(int(k)).response(f)[0], out(s), rtol=1e-6)


def test_pade_sampling_gain_against_the_exact_one():
    """The (4, 4) Pade form is within 0.001 dB / 0.03 deg of s Ts/(exp(s Ts) - 1) [R91] up to fsw/2; the
    quadratic equals it at wn = pi/Ts exactly ([R91]: the quadratic is matched there)."""
    ts = 1 / 250e3
    f = np.linspace(1e3, 125e3, 200)
    x = 1j * TWO_PI * f * ts
    exact = x / np.expm1(x)
    ratio = pc.sampling_gain(ts, 1, "pade").response(f)[0] / exact
    assert np.max(np.abs(20 * np.log10(np.abs(ratio)))) < 1e-3
    assert np.max(np.abs(np.degrees(np.angle(ratio)))) < 0.03
    quad = pc.sampling_gain(ts, 1, "quadratic").response(np.array([125e3]))[0, 0]
    assert quad == pytest.approx(1j * np.pi / np.expm1(1j * np.pi), rel=1e-12)


# ---------------------------------------------------------------------------- discrete-time check
def _cycle_ratio(sn, sf, ri, se, ts, vc):
    """Iterate the comparator law cycle by cycle from a perturbed valley current; the per-cycle factor."""

    def next_valley(i0):
        t_on = np.clip((vc - ri * i0) / (ri * sn + se), 0.0, ts)
        return i0 + sn * t_on - sf * (ts - t_on)

    # steady state: the on-time that returns the current to its start, sn t = sf (Ts - t)
    t_ss = sf * ts / (sn + sf)
    i_ss = (vc - (ri * sn + se) * t_ss) / ri
    assert next_valley(i_ss) == pytest.approx(i_ss, rel=1e-12, abs=1e-12)
    delta = 1e-6 * max(abs(i_ss), 1.0)
    first = (next_valley(i_ss + delta) - i_ss) / delta
    # six more cycles: the perturbation grows or dies as first**6 (the map is linear near i_ss)
    i = i_ss + delta
    for _ in range(6):
        i = next_valley(i)
    assert (i - i_ss) == pytest.approx(delta * first**6, rel=1e-3, abs=1e-6 * delta)
    return float(first)


@pytest.mark.parametrize("vin", [20.0, 12.0, 9.0, 7.5, 6.5, 5.8])
@pytest.mark.parametrize("se_fraction", [0.0, 0.2, 0.45, 0.55, 1.0])
def test_cycle_by_cycle_ratio_and_subharmonic_verdict(vin, se_fraction):
    """The per-cycle factor of a peak-current perturbation from an iteration of the comparator law equals
    -(Sf - Se)/(Sn + Se); |factor| >= 1 exactly where the module flags subharmonic instability, where
    Qp <= 0, and where vo/vc has right-half-plane poles."""
    ri, fsw = 0.1, 200e3
    r = analyse_stage(ideal_design("buck", vin, 5.0, 3.0, fsw=fsw))
    sn, sf = r.sn_a_per_s[0], r.sf_a_per_s[0]
    se = se_fraction * ri * sf
    fig = pc.figures(r, ri, se)
    vc = ri * (r.i_peak[0]) + se * r.duty[0] / fsw
    ratio = _cycle_ratio(sn, sf, ri, se, 1 / fsw, vc)
    assert ratio == pytest.approx(fig["ratio"][0], rel=1e-6, abs=1e-9)
    if abs(abs(ratio) - 1.0) < 0.02:
        pytest.skip("at the boundary")
    unstable = abs(ratio) >= 1.0
    assert any(f.code == "subharmonic" for f in pc.findings(r, ri, se)) == unstable
    assert (fig["qp"][0] <= 0) == unstable
    poles = pc.control_to_output(r, ri, se).poles_hz()[0]
    assert bool(np.any(poles[np.isfinite(poles)].real > 0)) == unstable


def test_subharmonic_finding_names_a_slope_that_fixes_it():
    """The slope the finding suggests (Qp = 1) removes the finding and gives Qp = 1 at that corner."""
    ri = 0.1
    r = analyse_stage(ideal_design("buck", 6.5, 5.0, 3.0))
    (found,) = [f for f in pc.findings(r, ri, 0.0) if f.code == "subharmonic"]
    assert "Qp = 1" in found.message and "D = 76.9%" in found.message
    se = pc.auto_slope(r, ri)
    assert pc.figures(r, ri, se)["qp"][0] == pytest.approx(1.0, rel=1e-12)
    assert not [f for f in pc.findings(r, ri, se) if f.code == "subharmonic"]


# ---------------------------------------------------------------------------- DCM
def test_dcm_buck_boost_is_a_power_source():
    """[EM] ch. 12 DCM (from memory): the buck-boost without ramp has its output pole at 2/(R C)
    and dc gain V/(Ri Ipk) (P = L Ipk^2 fsw/2 into R)."""
    vout, load, c_f = -9.0, 0.05, 100e-6
    r = analyse_stage(ideal_design("inverting-buck-boost", 12.0, vout, load, l_h=2e-6, c_f=c_f, dcm=True))
    assert r.dcm[0]
    ri = 0.1
    h = pc.control_to_output(r, ri, 0.0)
    rl = abs(vout) / load
    assert h.dc_gain()[0] == pytest.approx(vout / (ri * r.i_peak[0]), rel=1e-9)
    p = h.poles_hz()[0]
    p = p[np.isfinite(p)]
    # besides the charge packet's delay (its (2, 2) Pade poles at |s| = sqrt(12)/tau, far above), one pole
    p = p[np.abs(p) < 0.1 * r.fsw_hz]
    assert p.size == 1 and -p[0].real * TWO_PI == pytest.approx(2.0 / (rl * c_f), rel=1e-9)


def _dcm_pcm_output(topology, vg, vc, r_load, l_h, fsw, ri, se, v_near, i_inj=0.0):
    """Output of the ideal DCM stage whose peak is set by Ri ipk + Se D Ts = vc (energy / charge balance)."""

    def err(v):
        sn = (vg - v) / l_h if topology == "buck" else vg / l_h
        ipk = vc / (ri + se / sn)  # from Ri ipk + Se ipk/sn = vc
        if topology == "buck":
            i2 = 0.5 * l_h * fsw * ipk**2 * vg / (v * (vg - v))
        else:  # boost: only the falling part reaches the output
            i2 = 0.5 * l_h * fsw * ipk**2 / (v - vg)
        return i2 + i_inj - v / r_load

    # the buck's i2(v) has a minimum, so two solutions may exist: bracket the one near the design point
    return brentq(err, 0.95 * v_near, 1.05 * v_near, xtol=1e-13)


@pytest.mark.parametrize(
    ("topology", "vin", "vout"), [("buck", 12.0, 5.0), ("buck", 12.0, 7.0), ("buck", 12.0, 9.0), ("boost", 5.0, 12.0)]
)
@pytest.mark.parametrize("se", [0.0, 5e4])
def test_dcm_dc_gain_against_the_comparator_steady_state(topology, vin, vout, se):
    """The DCM current-programmed dc gain equals dV/dvc of the ideal DCM steady state under the comparator
    law (finite difference), with and without ramp.  Without ramp the buck's switch network has a negative
    output conductance above M = 1/2 ([EM] ch. 12, from memory), i2 rising with v; where its slope
    exceeds the load's 1/R (here M > 2/3: d i2/dv = (v/R)(2v - vg)/(v (vg - v)) from the same
    steady state) the operating point is unstable and the model has a right-half-plane pole."""
    l_h, fsw, ri, load = 2e-6, 200e3, 0.1, 0.05
    r = analyse_stage(ideal_design(topology, vin, vout, load, l_h=l_h, fsw=fsw, dcm=True))
    assert r.dcm[0]
    rl = vout / load
    vc = ri * r.i_peak[0] + se * r.duty[0] / fsw
    h = pc.control_to_output(r, ri, se)
    assert _dcm_pcm_output(topology, vin, vc, rl, l_h, fsw, ri, se, vout) == pytest.approx(vout, rel=1e-9)
    p = h.poles_hz()[0]
    p = p[np.isfinite(p)]
    dvc = 1e-6 * vc
    up = _dcm_pcm_output(topology, vin, vc + dvc, rl, l_h, fsw, ri, se, vout)
    down = _dcm_pcm_output(topology, vin, vc - dvc, rl, l_h, fsw, ri, se, vout)
    assert h.dc_gain()[0] == pytest.approx((up - down) / (2 * dvc), rel=1e-5)
    # line-to-output and output impedance with vc held: the same steady state moved by Vg and by a
    # current injected into the output (the load then takes the stage's current plus the injection)
    dg, di = 1e-6 * vin, 1e-6 * load
    line = (
        _dcm_pcm_output(topology, vin + dg, vc, rl, l_h, fsw, ri, se, vout)
        - _dcm_pcm_output(topology, vin - dg, vc, rl, l_h, fsw, ri, se, vout)
    ) / (2 * dg)
    zo = (
        _dcm_pcm_output(topology, vin, vc, rl, l_h, fsw, ri, se, vout, di)
        - _dcm_pcm_output(topology, vin, vc, rl, l_h, fsw, ri, se, vout, -di)
    ) / (2 * di)
    assert pc.line_to_output(r, ri, se).dc_gain()[0] == pytest.approx(line, rel=1e-5)
    assert pc.output_impedance(r, ri, se).dc_gain()[0] == pytest.approx(zo, rel=1e-5)
    unstable = topology == "buck" and se == 0.0 and vout / vin > 2.0 / 3.0
    assert bool(np.any(p.real > 0)) == unstable


def test_dcm_corners_never_use_the_ccm_model():
    """A stage with CCM and DCM corners: the DCM rows equal the DCM model computed on their own."""
    design = ideal_design("boost", 5.0, 12.0, (0.02, 2.0), l_h=4.7e-6, dcm=True)
    r = analyse_stage(design)
    assert list(r.dcm) == [True, False]
    h = pc.control_to_output(r, 0.1, 1e4)
    alone = pc.control_to_output(analyse_stage(ideal_design("boost", 5.0, 12.0, 0.02, l_h=4.7e-6, dcm=True)), 0.1, 1e4)
    f = _grid(200e3)
    np.testing.assert_allclose(h.take(0).response(f), alone.response(f), rtol=1e-12)
    fig = pc.figures(r, 0.1, 1e4)
    assert np.isnan(fig["qp"][0]) and np.isnan(fig["fm"][0]) and fig["ratio"][0] == 0.0
    assert np.isfinite(fig["qp"][1]) and np.isfinite(fig["fm"][1])
    assert [f.code for f in pc.findings(r, 0.1, 1e4) if f.corner == 0] == ["pcm-dcm"]


# ---------------------------------------------------------------------------- rules, limits, bad input
def test_auto_slope_rules():
    """qp1 gives Qp = 1 at the worst corner and <= 1 elsewhere ([R91], from memory); half-down-slope is
    half the steepest sensed down-slope (common practice, no source); no slope for an all-DCM stage."""
    ri = 0.1
    r = analyse_stage(ideal_design("buck", (6.0, 8.0, 12.0), 5.0, (1.0, 3.0)))
    se = pc.auto_slope(r, ri, "qp1")
    qp = pc.figures(r, ri, se)["qp"]
    assert np.max(qp) == pytest.approx(1.0, rel=1e-12) and np.all(qp > 0)
    assert pc.auto_slope(r, ri, "half-down-slope") == pytest.approx(0.5 * ri * np.max(r.sf_a_per_s), rel=1e-12)
    low_d = analyse_stage(ideal_design("buck", 40.0, 5.0, 3.0))  # Qp < 1 with no ramp at D = 0.125
    assert pc.auto_slope(low_d, ri) == 0.0
    dcm_only = analyse_stage(ideal_design("buck", 12.0, 5.0, 0.02, l_h=2e-6, dcm=True))
    assert dcm_only.dcm.all() and pc.auto_slope(dcm_only, ri) == 0.0


def test_slope_excess_and_peak_current_findings():
    ri = 0.1
    r = analyse_stage(ideal_design("buck", 12.0, 5.0, 3.0))
    sn = ri * r.sn_a_per_s[0]
    codes = {f.code for f in pc.findings(r, ri, 5 * sn, peak_limit_a=2.0)}
    assert codes == {"slope-excess", "peak-current"}  # mc = 6 > 5; peak 3 A + ripple/2 > 2 A
    assert not pc.findings(r, ri, 0.5 * sn, peak_limit_a=10.0)


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"sense_gain_ohm": 0.0}, "sense_gain_ohm"),
        ({"sense_gain_ohm": float("nan")}, "sense_gain_ohm"),
        ({"sense_gain_ohm": "abc"}, "sense_gain_ohm"),
        ({"slope_v_per_s": -1.0}, "slope_v_per_s"),
        ({"slope_v_per_s": float("inf")}, "slope_v_per_s"),
        ({"slope_v_per_s": [1.0, 2.0, 3.0]}, "slope_v_per_s"),
        ({"sampling": "exact"}, "sampling"),
    ],
)
def test_bad_input_names_the_field(kwargs, field):
    r = analyse_stage(ideal_design("buck", (12.0, 20.0), 5.0, 1.0))
    args = {"sense_gain_ohm": 0.1, "slope_v_per_s": 0.0, **kwargs}
    with pytest.raises(DesignError) as err:
        pc.control_to_output(r, args.pop("sense_gain_ohm"), args.pop("slope_v_per_s"), **args)
    assert err.value.field == field
    with pytest.raises(DesignError):
        pc.auto_slope(r, 0.1, rule="steepest")
    with pytest.raises(DesignError):
        pc.findings(r, 0.1, 0.0, peak_limit_a=-1.0)


def test_slope_per_corner_equals_one_slope_at_a_time():
    """A ramp given per corner gives, at each corner, what that single ramp gives there."""
    r = analyse_stage(ideal_design("boost", (4.0, 6.0), 12.0, (0.5, 2.0)))
    slopes = np.array([0.0, 1e4, 3e4, 6e4])
    h = pc.control_to_output(r, 0.1, slopes)
    fig = pc.figures(r, 0.1, slopes)
    f = _grid(200e3)
    for k, se in enumerate(slopes):
        np.testing.assert_allclose(
            h.take(k).response(f), pc.control_to_output(r, 0.1, se).take(k).response(f), rtol=1e-12
        )
        assert fig["qp"][k] == pc.figures(r, 0.1, se)["qp"][k]
