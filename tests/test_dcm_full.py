"""The full-order DCM model (loopkit/stages/dcm_full.py) against outside references, without ngspice.

* Low-frequency limit: the dc gains of Gvd, Gvg and Zout equal those of the
  reduced-order averaged switch model, R. W. Erickson, D. Maksimovic,
  Fundamentals of Power Electronics, 2nd ed., Kluwer 2001, ch. 11 (from memory):
  the switch network's output port ``i2 = j2 d + g2 vg - v/r2`` into the load
  and capacitors, so ``Gd0 = j2 (R || r2)``, ``Gg0 = g2 (R || r2)`` and
  ``Z0 = R || r2``; to 1e-6 for every topology, with conduction losses, a diode
  drop and ESR (the ch. 11 parameters with the effective voltages of the
  topology modules).
* Sun's full-order model, written here from the circuit and linearised
  numerically: J. Sun, D. M. Mitchell, M. F. Greuel, P. T. Krein, R. M. Bass,
  "Averaged modeling of PWM converters operating in discontinuous conduction
  mode", IEEE TPEL 16(4), 2001 (from memory): the state equations
  ``L diL/dt = d a - d2 b`` with ``d2 = 2 L iL/(d Ts a) - d``, and the output
  fed by ``iL`` (buck) or ``iL d2/(d + d2)`` (boost-type).  loopkit's model
  keeps one more term of the inductor current's dynamics, ``s^2/(3 w2)``, so
  the two agree to second order in ``s/w2`` (w2 = 2 fsw/D2): within
  ``(f/f2)^2`` relatively up to f2/30, f2 = w2/(2 pi).  This checks every
  coefficient of the linearisation (duty, line, output-voltage and the output
  current's terms) against an independent numerical Jacobian.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import fsolve
from test_stage_textbook import make_design  # tests/ is on sys.path (pytest rootdir conftest)

from loopkit import analyse_stage
from loopkit.stages import groups

TWO_PI = 2.0 * np.pi

LOSSY = [
    # topology, Vg, V, R, L, C, ESR, fsw, extra stage fields
    ("buck", 12.0, 5.0, 50.0, 4.7e-6, 47e-6, 0.01, 300e3, {"rectifier": "diode", "diode_drop": 0.4}),
    ("boost", 5.0, 12.0, 240.0, 4.7e-6, 22e-6, 0.005, 300e3, {"rectifier": "diode", "diode_drop": 0.4}),
    ("inverting-buck-boost", 12.0, -15.0, 300.0, 10e-6, 22e-6, 0.005, 300e3, {"rectifier": "diode"}),
    ("flyback", 48.0, 12.0, 120.0, 50e-6, 100e-6, 0.02, 200e3, {"rectifier": "diode", "turns_ratio": 2.0}),
    ("four-switch-buck-boost", 14.0, 9.0, 90.0, 6.8e-6, 40e-6, 0.003, 300e3, {"light_load": "dcm"}),
    ("four-switch-buck-boost", 6.0, 9.0, 90.0, 6.8e-6, 40e-6, 0.003, 300e3, {"light_load": "dcm"}),
]


def _lossy_design(row):
    topology, vg, v, r, l_h, c_f, esr, fsw, extra = row
    extra = {"light_load": "dcm", "rectifier": "synchronous", **extra}
    turns = extra.pop("turns_ratio", 1.0)
    return make_design(
        topology, vg, v, r, l_h, c_f, fsw, esr=esr, dcr=0.02, turns=turns, r_switch=0.05, r_rectifier=0.03, **extra
    )


@pytest.mark.parametrize("row", LOSSY, ids=[f"{r[0]}-{r[1]:g}V" for r in LOSSY])
def test_low_frequency_limit_is_the_reduced_order_model(row):
    """[EM] ch. 11: Gd0 = sign j2 (R || r2), Gg0 = sign g2 (R || r2), Z0 = R || r2, to 1e-6."""
    design = _lossy_design(row)
    res = analyse_stage(design)
    assert res.dcm[0]
    ((_idx, st, module, _label),) = groups(design.stage, res.vin, res.load, design.operating.vout)
    dp = module.dcm(st, res.vin, res.load, design.operating.vout)
    r_par = 1.0 / (1.0 / row[3] + 1.0 / dp.r2[0])
    assert res.gvd.dc_gain()[0] == pytest.approx(dp.sign * dp.j2[0] * r_par, rel=1e-6)
    assert res.gvg.dc_gain()[0] == pytest.approx(dp.sign * dp.g2[0] * r_par, rel=1e-6)
    assert res.zout.dc_gain()[0] == pytest.approx(r_par, rel=1e-6)
    assert res.zout_static.dc_gain()[0] == pytest.approx(r_par, rel=1e-6)


# ------------------------------------------------------------------ Sun's model, numerically
SUN = [
    # topology, Vg, V, R, L, C, fsw, turns
    ("buck", 12.0, 5.0, 50.0, 4.7e-6, 47e-6, 300e3, 1.0),
    ("boost", 5.0, 12.0, 240.0, 4.7e-6, 22e-6, 300e3, 1.0),
    ("inverting-buck-boost", 12.0, -15.0, 300.0, 10e-6, 22e-6, 300e3, 1.0),
    ("flyback", 48.0, 12.0, 120.0, 50e-6, 100e-6, 200e3, 2.0),
]


def sun_rhs(topology, x, u, l_h, c_f, r, ts, n):
    """Sun et al. (2001) averaged DCM state equations of the ideal stage: d/dt (iL, v) for inputs (d, vg).

    Inductor voltage ``a`` while the switch is on and ``-b`` while the rectifier
    conducts (flyback: b referred to the primary, n v); ``d2`` from the current
    constraint; the output current ``iL`` (buck) or ``+-k iL d2/(d + d2)``.
    """
    il, v = x
    d, vg = u
    if topology == "buck":
        a, b = vg - v, v
    elif topology == "boost":
        a, b = vg, v - vg
    elif topology == "inverting-buck-boost":
        a, b = vg, -v
    else:
        a, b = vg, n * v
    d2 = 2.0 * l_h * il / (d * ts * a) - d
    if topology == "buck":
        i_out = il
    else:
        i_out = {"boost": 1.0, "inverting-buck-boost": -1.0, "flyback": n}[topology] * il * d2 / (d + d2)
    return np.array([(d * a - d2 * b) / l_h, (i_out - v / r) / c_f])


def _jacobian(fun, z, h_rel=1e-6):
    z = np.asarray(z, float)
    cols = []
    for k in range(z.size):
        h = h_rel * max(abs(z[k]), 1e-3)
        e = np.zeros_like(z)
        e[k] = h
        cols.append((fun(z + e) - fun(z - e)) / (2.0 * h))
    return np.column_stack(cols)


@pytest.mark.parametrize("row", SUN, ids=[r[0] for r in SUN])
def test_matches_sun_model_to_second_order(row):
    """Gvd, Gvg, Zout and Gid against Sun's state equations, linearised numerically, within (f/f2)^2 to f2/30."""
    topology, vg, v, r, l_h, c_f, fsw, n = row
    res = analyse_stage(make_design(topology, vg, v, r, l_h, c_f, fsw, rectifier="diode", light_load="dcm", turns=n))
    assert res.dcm[0]
    ts, d = 1.0 / fsw, float(res.duty[0])

    def rhs(z):  # z = (iL, v, d, vg)
        return sun_rhs(topology, z[:2], z[2:], l_h, c_f, r, ts, n)

    il0 = fsolve(lambda il: rhs([il[0], v, d, vg])[0], [abs(v) / r])[0]
    z0 = np.array([il0, v, d, vg])
    assert np.allclose(rhs(z0), 0.0, atol=1e-9 * max(1.0, abs(v) / (r * c_f)))  # loopkit's duty makes v
    jac = _jacobian(rhs, z0)
    a_m, b_m = jac[:, :2], jac[:, 2:]
    d2 = 2.0 * l_h * il0 / (d * ts * (vg - v if topology == "buck" else vg)) - d
    f2 = 2.0 * fsw / d2 / TWO_PI
    f = np.array([res.fp_hz[0] / 3.0, res.fp_hz[0], 3.0 * res.fp_hz[0], f2 / 100.0, f2 / 30.0])
    # the output impedance: a current injected into the output node enters the v equation as 1/C
    b_inj = np.array([0.0, 1.0 / c_f])
    sun = {"gvd": [], "gvg": [], "zout": [], "gid": []}
    for fk in f:
        m = np.linalg.inv(1j * TWO_PI * fk * np.eye(2) - a_m)
        sun["gvd"].append((m @ b_m[:, 0])[1])
        sun["gvg"].append((m @ b_m[:, 1])[1])
        sun["zout"].append((m @ b_inj)[1])
        sun["gid"].append((m @ b_m[:, 0])[0])
    bound = 2.0 * (f / f2) ** 2 + 1e-7
    for name, model in (("gvd", res.gvd), ("gvg", res.gvg), ("zout", res.zout), ("gid", res.gid)):
        ours = model.response(f)[0]
        rel = np.abs(ours / np.array(sun[name]) - 1.0)
        assert np.all(rel < bound), (name, rel, bound)
