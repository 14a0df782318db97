"""Power-stage models against textbook formulas.

Sources (see ../shared/REFERENCES.md):

* [EM] R. W. Erickson, D. Maksimovic, Fundamentals of Power Electronics, 2nd ed.,
  Kluwer 2001: Table 8.2 (salient features of the CCM small-signal models of
  the buck, boost and buck-boost with ideal parts), ch. 3 (boost with inductor
  winding resistance), ch. 5 (K = 2L/(R Ts), Kcrit), ch. 11 (DCM averaged
  switch model: M, Gd0, wp), 9.5.4 (buck design example).  The table entries
  are recalled, not re-read ("from memory"); each one is also the exact
  small-signal result of the ideal averaged circuit, so the checks are exact.
* [MC] R. D. Middlebrook, S. Cuk, IEEE PESC 1976: boost with capacitor ESR
  (from memory).
* [S01] J. Sun et al., IEEE TPEL 16(4), 2001: full-order DCM model, the
  high-frequency pole and the RHP zero of boost-type stages (from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from loopkit import analyse_stage
from loopkit.design import CapacitorBank, Design, Operating, Sensing, Stage

TWO_PI = 2.0 * np.pi


def make_design(
    topology,
    vg,
    vout,
    r_load,
    l_h,
    c_f,
    fsw=100e3,
    esr=0.0,
    dcr=0.0,
    turns=1.0,
    rectifier="synchronous",
    light_load="forced-ccm",
    vin=None,
    loads=None,
    banks=None,
    **extra,
):
    stage = Stage(
        topology=topology,
        fsw=fsw,
        inductance=l_h,
        output_caps=tuple(banks) if banks else (CapacitorBank(c_f, esr, 1),),
        dcr=dcr,
        rectifier=rectifier,
        light_load=light_load,
        turns_ratio=turns,
        **extra,
    )
    op = Operating(vout=vout, vin=tuple(vin) if vin else (vg,), load=tuple(loads) if loads else (abs(vout) / r_load,))
    sensing = Sensing(kind="differential") if vout < 0 else Sensing()
    return Design(stage=stage, operating=op, sensing=sensing)


def _freqs(fsw):
    return np.logspace(0, np.log10(fsw / 2), 300)


# ------------------------------------------------------------------ [EM] Table 8.2, ideal CCM
def table_8_2(topology, vg, v, r, l_h, c_f):
    """Ideal-parts salient features, [EM] Table 8.2 (from memory). Frequencies in rad/s."""
    if topology == "buck":
        d = v / vg
        return {"d": d, "gg0": d, "gd0": v / d, "w0": 1 / np.sqrt(l_h * c_f), "q": r * np.sqrt(c_f / l_h), "wz": np.inf}
    if topology == "boost":
        dp = vg / v
        return {
            "d": 1 - dp,
            "gg0": 1 / dp,
            "gd0": v / dp,
            "w0": dp / np.sqrt(l_h * c_f),
            "q": dp * r * np.sqrt(c_f / l_h),
            "wz": dp**2 * r / l_h,
        }
    # buck-boost: V = -D Vg / D'
    d = -v / (vg - v)
    dp = 1 - d
    return {
        "d": d,
        "gg0": -d / dp,
        "gd0": v / (d * dp),
        "w0": dp / np.sqrt(l_h * c_f),
        "q": dp * r * np.sqrt(c_f / l_h),
        "wz": dp**2 * r / (d * l_h),
    }


TABLE_CASES = [
    # topology, Vg, V, R, L, C, fsw  (inputs to the formulas; the formulas are the check)
    ("buck", 28.0, 15.0, 3.0, 50e-6, 500e-6, 100e3),  # [EM] 9.5.4 design example
    ("buck", 12.0, 1.2, 0.4, 1.0e-6, 200e-6, 500e3),
    ("boost", 5.0, 12.0, 24.0, 10e-6, 47e-6, 300e3),
    ("boost", 24.0, 48.0, 48.0, 100e-6, 100e-6, 100e3),
    ("inverting-buck-boost", 12.0, -5.0, 10.0, 22e-6, 47e-6, 400e3),
    ("inverting-buck-boost", 9.0, -15.0, 50.0, 47e-6, 22e-6, 250e3),
]


@pytest.mark.parametrize("case", TABLE_CASES, ids=[f"{c[0]}-{c[1]:g}V-{c[2]:g}V" for c in TABLE_CASES])
def test_ccm_salient_features_table_8_2(case):
    topology, vg, v, r, l_h, c_f, fsw = case
    res = analyse_stage(make_design(topology, vg, v, r, l_h, c_f, fsw))
    ref = table_8_2(topology, vg, v, r, l_h, c_f)
    assert not res.dcm[0]
    assert res.duty[0] == pytest.approx(ref["d"], rel=1e-12)
    assert res.gd0[0] == pytest.approx(ref["gd0"], rel=1e-9)
    assert res.gvg.dc_gain()[0] == pytest.approx(ref["gg0"], rel=1e-9)
    assert res.f0_hz[0] == pytest.approx(ref["w0"] / TWO_PI, rel=1e-9)
    assert res.q[0] == pytest.approx(ref["q"], rel=1e-9)
    if np.isinf(ref["wz"]):
        assert np.isnan(res.f_rhp_hz[0])
    else:
        assert res.f_rhp_hz[0] == pytest.approx(ref["wz"] / TWO_PI, rel=1e-9)
    # the whole canonical form Gd0 (1 - s/wz) / (1 + s/(Q w0) + (s/w0)^2) and Gg0 / (same)
    f = _freqs(fsw)
    s = 1j * TWO_PI * f
    den = 1 + s / (ref["q"] * ref["w0"]) + (s / ref["w0"]) ** 2
    np.testing.assert_allclose(res.gvd.response(f)[0], ref["gd0"] * (1 - s / ref["wz"]) / den, rtol=1e-9)
    np.testing.assert_allclose(res.gvg.response(f)[0], ref["gg0"] / den, rtol=1e-9)


def test_em_954_published_numbers():
    """[EM] 9.5.4 (from memory): D = 0.536, f0 ~ 1 kHz, Q0 ~ 9.5 (19.5 dB); Gd0 = V/D = Vg = 28 V."""
    res = analyse_stage(make_design("buck", 28.0, 15.0, 3.0, 50e-6, 500e-6, 100e3))
    assert res.duty[0] == pytest.approx(0.536, abs=5e-4)  # published to 3 digits
    assert res.f0_hz[0] == pytest.approx(1000.0, rel=0.01)  # book rounds 1007 Hz to 1 kHz
    assert res.q[0] == pytest.approx(9.5, rel=0.01)
    assert 20 * np.log10(res.q[0]) == pytest.approx(19.5, abs=0.05)
    assert res.gd0[0] == pytest.approx(28.0, rel=1e-9)


@pytest.mark.parametrize("topology", ["buck", "boost"])
def test_ideal_output_impedance(topology):
    """[EM] ch. 7 canonical circuit (from memory): with vg and d held, the output sees
    R || 1/(sC) || sL/M(D)^2 ... buck: sL; boost: s L / D'^2 (L reflected through 1:D')."""
    vg, v, r, l_h, c_f = (12.0, 3.3, 1.0, 4.7e-6, 100e-6) if topology == "buck" else (5.0, 12.0, 12.0, 10e-6, 47e-6)
    res = analyse_stage(make_design(topology, vg, v, r, l_h, c_f, 300e3))
    f = _freqs(300e3)
    s = 1j * TWO_PI * f
    dp = 1.0 if topology == "buck" else vg / v
    zl = s * l_h / dp**2
    expected = 1 / (1 / r + s * c_f + 1 / zl)
    np.testing.assert_allclose(res.zout.response(f)[0], expected, rtol=1e-9)


# ------------------------------------------------------------------ ESR zero, RHP zero with DCR
def test_esr_zeros_two_banks():
    """ESR zero of each bank at 1/(2 pi ESR C) ([EM] ch. 8 / REFERENCES: 1/(ESR C) rad/s)."""
    banks = (CapacitorBank(22e-6, 3e-3, 4), CapacitorBank(150e-6, 25e-3, 1))
    res = analyse_stage(make_design("buck", 12.0, 5.0, 2.5, 6.8e-6, 0, 300e3, banks=banks))
    expected = np.array([1 / (TWO_PI * 3e-3 / 4 * 88e-6), 1 / (TWO_PI * 25e-3 * 150e-6)])
    np.testing.assert_allclose(res.f_esr_hz[0], expected, rtol=1e-12)
    zeros = res.gvd.zeros_hz()[0]
    zeros = np.sort(zeros[np.isfinite(zeros)].real)
    # zeros_hz are s-plane roots / 2 pi: left-half-plane zeros are negative
    np.testing.assert_allclose(np.sort(-zeros), np.sort(expected), rtol=1e-9)
    # and they are zeros of Gvd and Gvg alike, not of the load: |Gvd| rises 20 dB/dec above both
    zg = res.gvg.zeros_hz()[0]
    np.testing.assert_allclose(np.sort(-zg[np.isfinite(zg)].real), np.sort(expected), rtol=1e-9)


def _boost_duty_with_dcr(vg, v, r, dcr):
    """[EM] ch. 3 (from memory): boost with winding resistance, M = (1/D') / (1 + R_L/(D'^2 R))."""
    return 1 - brentq(lambda dp: (1 / dp) / (1 + dcr / (dp**2 * r)) - v / vg, np.sqrt(dcr / r) + 1e-12, 1.0)


@pytest.mark.parametrize("dcr", [0.01, 0.05, 0.2])
def test_boost_rhp_zero_with_dcr(dcr):
    """RHP zero (R D'^2 - DCR)/L (REFERENCES, CCM with DCR; [EM] ch. 8), duty from [EM] ch. 3."""
    vg, v, r, l_h = 5.0, 12.0, 12.0, 10e-6
    res = analyse_stage(make_design("boost", vg, v, r, l_h, 47e-6, 300e3, dcr=dcr))
    d = _boost_duty_with_dcr(vg, v, r, dcr)
    assert res.duty[0] == pytest.approx(d, rel=1e-9)
    expected = (r * (1 - d) ** 2 - dcr) / l_h / TWO_PI
    assert res.f_rhp_hz[0] == pytest.approx(expected, rel=1e-9)
    z = res.gvd.zeros_hz()[0]
    assert np.any(np.isclose(z, expected, rtol=1e-9)), z
    # it moves down as the load rises and as Vin falls ([EM] Table 8.2: D'^2 R / L)
    res2 = analyse_stage(make_design("boost", vg, v, r, l_h, 47e-6, 300e3, dcr=dcr, vin=(4.0, 5.0), loads=(0.5, 1.0)))
    rhp = res2.f_rhp_hz.reshape(2, 2)
    assert rhp[0, 1] < rhp[0, 0] and rhp[1, 1] < rhp[1, 0]  # heavier load -> lower
    assert rhp[0, 0] < rhp[1, 0] and rhp[0, 1] < rhp[1, 1]  # lower Vin -> lower


def test_boost_dc_gain_with_esr_state_space_averaging():
    """[MC] 1976 boost with capacitor ESR Rc (from memory):
    M = (1/D') / (1 + (R_L + D D' (R || Rc)) / (D'^2 R)); the ESR term is what the
    pulsed diode current through the ESR adds.  Checked through the duty."""
    vg, v, r, dcr, rc = 5.0, 12.0, 6.0, 0.03, 0.05
    res = analyse_stage(make_design("boost", vg, v, r, 10e-6, 47e-6, 300e3, esr=rc, dcr=dcr))
    rp = r * rc / (r + rc)

    def m_of(d):
        dp = 1 - d
        return (1 / dp) / (1 + (dcr + d * dp * rp) / (dp**2 * r))

    assert m_of(res.duty[0]) == pytest.approx(v / vg, rel=1e-9)
    # without the ESR term the duty would differ measurably
    d_no_esr = _boost_duty_with_dcr(vg, v, r, dcr)
    assert abs(d_no_esr - res.duty[0]) > 1e-4


# ------------------------------------------------------------------ flyback = buck-boost referred through n
@pytest.mark.parametrize("n", [0.5, 2.5, 8.0])
def test_flyback_is_buck_boost_referred_through_n(n):
    """[EM] ch. 6 (flyback derived from the buck-boost) and REFERENCES: the flyback with
    magnetising inductance Lm and turns ratio n equals the inverting buck-boost with the
    secondary referred to the primary: V' = n V, R' = n^2 R, C' = C/n^2, ESR' = n^2 ESR,
    Rr' = n^2 Rr, VD' = n VD; then Gvd = -Gvd'/n, Gvg = -Gvg'/n, Zout = Zout'/n^2.
    (Primary DCR set to 0: it conducts in D Ts only, the buck-boost inductor in both.)"""
    vg, v, io, lm, c, esr, ron, rr, vd = 48.0, 12.0, 2.0, 150e-6, 300e-6, 5e-3, 0.06, 0.015, 0.5
    common = {"fsw": 250e3, "rectifier": "diode", "light_load": "dcm"}
    fly = make_design(
        "flyback", vg, v, v / io, lm, c, esr=esr, turns=n, r_switch=ron, r_rectifier=rr, diode_drop=vd, **common
    )
    bb = make_design(
        "inverting-buck-boost",
        vg,
        -n * v,
        n * n * v / io,
        lm,
        c / n**2,
        esr=n * n * esr,
        r_switch=ron,
        r_rectifier=n * n * rr,
        diode_drop=n * vd,
        **common,
    )
    rf, rb = analyse_stage(fly), analyse_stage(bb)
    assert not rf.dcm[0] and not rb.dcm[0]
    assert rf.duty[0] == pytest.approx(rb.duty[0], rel=1e-12)
    assert rf.i_l[0] == pytest.approx(rb.i_l[0], rel=1e-12)
    f = _freqs(250e3)
    np.testing.assert_allclose(rf.gvd.response(f), -rb.gvd.response(f) / n, rtol=1e-9)
    np.testing.assert_allclose(rf.gvg.response(f), -rb.gvg.response(f) / n, rtol=1e-9)
    np.testing.assert_allclose(rf.zout.response(f), rb.zout.response(f) / n**2, rtol=1e-9)
    # ideal parts: V/Vg = D/(n D') and RHP zero D'^2 n^2 R/(D Lm)
    ideal = analyse_stage(make_design("flyback", vg, v, v / io, lm, c, turns=n, fsw=250e3))
    d = ideal.duty[0]
    assert d / (n * (1 - d)) == pytest.approx(v / vg, rel=1e-12)
    assert ideal.f_rhp_hz[0] == pytest.approx((1 - d) ** 2 * n * n * v / io / (d * lm) / TWO_PI, rel=1e-9)


# ------------------------------------------------------------------ DCM, [EM] ch. 5 and ch. 11
def kcrit(topology, d):
    """[EM] ch. 5 (from memory): buck 1-D, boost D(1-D)^2, buck-boost (1-D)^2."""
    return {"buck": 1 - d, "boost": d * (1 - d) ** 2}.get(topology, (1 - d) ** 2)


def dcm_table(topology, d, k, v, r, c_f):
    """[EM] ch. 11 reduced-order DCM (from memory): M, Gd0, wp (rad/s); Gg0 = M since
    M depends on D and K only (so dV/dVg at fixed D is M)."""
    if topology == "buck":
        m = 2 / (1 + np.sqrt(1 + 4 * k / d**2))
        return m, (2 * v / d) * (1 - m) / (2 - m), (2 - m) / ((1 - m) * r * c_f)
    if topology == "boost":
        m = (1 + np.sqrt(1 + 4 * d**2 / k)) / 2
        return m, (2 * v / d) * (m - 1) / (2 * m - 1), (2 * m - 1) / ((m - 1) * r * c_f)
    m = d / np.sqrt(k)  # magnitude; the inverting stage's M is -D/sqrt(K)
    return m, v / d, 2 / (r * c_f)


DCM_CASES = [
    # topology, Vg, V, R, L, C, fsw
    ("buck", 12.0, 5.0, 50.0, 4.7e-6, 47e-6, 300e3),
    ("buck", 24.0, 3.3, 33.0, 2.2e-6, 100e-6, 500e3),
    ("boost", 5.0, 12.0, 240.0, 4.7e-6, 22e-6, 300e3),
    ("boost", 12.0, 15.0, 150.0, 2.2e-6, 47e-6, 500e3),
    ("inverting-buck-boost", 12.0, -15.0, 300.0, 10e-6, 22e-6, 300e3),
    ("flyback", 48.0, 12.0, 120.0, 50e-6, 100e-6, 200e3),
]


@pytest.mark.parametrize("case", DCM_CASES, ids=[f"{c[0]}-{c[1]:g}V-{c[2]:g}V" for c in DCM_CASES])
def test_dcm_reduced_order_chapter_11(case):
    topology, vg, v, r, l_h, c_f, fsw = case
    res = analyse_stage(make_design(topology, vg, v, r, l_h, c_f, fsw, rectifier="diode", light_load="dcm", turns=2.0))
    ts = 1 / fsw
    k = 2 * l_h / (r * ts)
    d = res.duty[0]
    assert res.dcm[0], "expected a DCM corner"
    table_topo = "buck-boost" if topology in ("inverting-buck-boost", "flyback") else topology
    assert k < kcrit(table_topo, d)
    m, gd0, wp = dcm_table(table_topo, d, k, abs(v), r, c_f)
    sign = -1.0 if v < 0 else 1.0
    assert m == pytest.approx(abs(v) / vg, rel=1e-9)
    assert res.gd0[0] == pytest.approx(sign * gd0, rel=1e-9)
    assert res.gvg.dc_gain()[0] == pytest.approx(sign * m, rel=1e-9)
    assert np.isnan(res.f0_hz[0]) and np.isnan(res.q[0])
    # [S01] / [EM] 11.3 (from memory): high-frequency pole f2 = fs / (pi D2), D2 from the
    # volt-second balance of the inductor (buck: D (Vg - V)/V; boost: D Vg/(V - Vg);
    # buck-boost: D Vg/|V|; flyback: D Vg/(n V))
    d2 = {
        "buck": d * (vg - v) / v,
        "boost": d * vg / (v - vg),
        "inverting-buck-boost": d * vg / abs(v),
        "flyback": d * vg / (2.0 * v),
    }[topology]
    # the full-order model (loopkit/stages/dcm_full.py: Sun's pole w2 = 2 fsw/D2 as the pair of
    # w2 + s + s^2/(3 w2), at sqrt(3) w2) couples with the output pole: the characteristic polynomial is
    # (1 + s/w2 + s^2/(3 w2^2))(G + s C) + G2 (G2 = 1/r2 the switch network's output conductance); its
    # roots move from wp (reduced order) and sqrt(3) w2 by about G2/(C w2) relatively (sum and product of
    # the roots), less than wp/w2, which is below 1e-2 here
    w2 = 2.0 * fsw / d2
    assert abs(res.fp_hz[0] / (wp / TWO_PI) - 1.0) <= wp / w2 < 1e-2
    assert abs(res.f_hf_hz[0] / (np.sqrt(3.0) * fsw / (np.pi * d2)) - 1.0) <= wp / w2
    # [S01] full order: boost-type stages have a RHP zero; here (3 fsw/D2)(sqrt(1 + 4 D2/(3 D)) - 1) rad/s
    # (derived in loopkit/stages/dcm_full.py; Sun's fsw/(pi D) as D2/D -> 0)
    if topology == "buck":
        assert np.isnan(res.f_rhp_hz[0])
    else:
        s_z = (3.0 * fsw / d2) * (np.sqrt(1.0 + 4.0 * d2 / (3.0 * d)) - 1.0)
        assert res.f_rhp_hz[0] == pytest.approx(s_z / TWO_PI, rel=1e-9)
    assert d + d2 < 1
    # inductor peak current and average ([EM] ch. 5): ipk = (on-interval voltage) D Ts / L
    v_on = vg - v if topology == "buck" else vg
    assert res.i_peak[0] == pytest.approx(v_on * d * ts / l_h, rel=1e-9)


@pytest.mark.parametrize("topology", ["buck", "boost", "inverting-buck-boost"])
def test_ccm_dcm_boundary_kcrit(topology):
    """[EM] ch. 5: DCM when K < Kcrit(D); at K = Kcrit the DCM M equals the CCM M, so the
    duty is continuous across the boundary load."""
    vg, v, l_h, c_f, fsw = {
        "buck": (12.0, 5.0, 4.7e-6, 47e-6, 300e3),
        "boost": (5.0, 12.0, 4.7e-6, 22e-6, 300e3),
        "inverting-buck-boost": (12.0, -15.0, 10e-6, 22e-6, 300e3),
    }[topology]
    table_topo = "buck-boost" if topology == "inverting-buck-boost" else topology
    d_ccm = table_8_2(topology, vg, v, 1.0, l_h, c_f)["d"]
    ts = 1 / fsw
    r_crit = 2 * l_h / (kcrit(table_topo, d_ccm) * ts)  # K = 2L/(R Ts) = Kcrit
    i_crit = abs(v) / r_crit
    # the formulas themselves agree at the boundary (consistency of [EM] ch. 5 and ch. 11)
    m_dcm = dcm_table(table_topo, d_ccm, kcrit(table_topo, d_ccm), abs(v), r_crit, c_f)[0]
    assert m_dcm == pytest.approx(abs(v) / vg, rel=1e-12)
    eps = 1e-4
    res = analyse_stage(
        make_design(
            topology,
            vg,
            v,
            1.0,
            l_h,
            c_f,
            fsw,
            rectifier="diode",
            light_load="dcm",
            loads=(i_crit * (1 - eps), i_crit * (1 + eps)),
        )
    )
    np.testing.assert_allclose(res.load_boundary, i_crit, rtol=1e-12)
    assert list(res.dcm) == [True, False]
    assert res.duty[0] == pytest.approx(d_ccm, rel=10 * eps)
    assert res.duty[1] == pytest.approx(d_ccm, rel=1e-12)
    # DCM duty is below the CCM duty and approaches it at the boundary
    assert res.duty[0] < d_ccm
