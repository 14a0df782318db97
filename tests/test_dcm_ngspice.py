"""The full-order DCM model's Gvd against the switched circuit in ngspice, by duty perturbation.

For every topology (the four-switch stage in each mode) at a DCM corner, the
switched circuit of :mod:`reference.pcm_spice` runs as a voltage-mode PWM
(:mod:`reference.duty_spice`: current-sense gain 0, a 1 V ramp) at the duty
loopkit computes for the corner; a small sine on the duty and single-bin
Fourier integrals of the output give Gvd at frequencies from fsw/100 to fsw/3,
which must agree with loopkit's full-order Gvd (loopkit/stages/dcm_full.py)
within 0.5 dB and 3 deg (issue 11, section 3).

The designs are the samples with a smaller output capacitance (a single bank)
and without ``[losses]`` figures (the circuit has conduction losses only),
so the DCM output pole sits near fsw/300 and a run settles in a few hundred
periods (the samples' poles of 3 to 400 Hz would need thousands).  The boost
is the 1 MHz Li-ion sample at 3.6 V and 0.1 A, where the reduced-order model
(Erickson & Maksimovic ch. 11 with the pole 2 fsw/D2) was measured 13 deg and
0.9 dB off at fsw/3; :func:`test_reduced_order_misses_at_fsw3` keeps that
difference as proof that the comparison can fail.

Reference accuracy: the duty perturbation is 0.2 % of Ts (up to 0.5 % above
the output pole); on the lossless boost of the second case a quarter of that
(0.05 %) reads the same within 0.01 dB / 0.07 deg up to fsw/5 and 0.09 dB /
0.7 deg higher in phase at fsw/3 (0.125 % against 0.5 % there: the larger swing
is no longer small, measured), with the model within 0.02 dB / 0.25 deg of the
smaller one; the solver runs at reltol 10^-6.  Sources: ngspice (Debian package
``ngspice``, version 39); J. Sun et al., "Averaged modeling of PWM converters
operating in discontinuous conduction mode", IEEE TPEL 16(4), 2001 (the model
under test, from memory).

Runtime: 6 cases x 5 frequencies, 7 ngspice runs per case: 6 minutes on the
shared 2-core machine (measured), about 20 s per case when it is idle.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from reference import duty_spice, pcm_spice  # tests/ is on sys.path (pytest rootdir conftest)

import loopkit
from loopkit.design import CapacitorBank
from loopkit.losses import Losses
from loopkit.stages import base, groups

pytestmark = [pytest.mark.ngspice, pytest.mark.slow]

SAMPLES = Path(__file__).resolve().parents[1] / "sample_designs"
TOL_DB, TOL_DEG = 0.5, 3.0  # issue 11, section 3: up to fsw/3
F_REL = (0.01, 0.03, 0.1, 0.2, 1.0 / 3.0)  # of fsw


@pytest.fixture(scope="session")
def cache_dir(tmp_path_factory):
    return str(tmp_path_factory.mktemp("duty_spice"))


def _design(name, vin, load, cap, **stage):
    d = loopkit.load_design(SAMPLES / f"{name}.toml")
    op = dataclasses.replace(d.operating, vin=(vin,), load=(load,), vin_nominal=None)
    st = dataclasses.replace(d.stage, output_caps=(CapacitorBank(*cap, 1),), **stage)
    # the circuit has conduction losses only: no [losses] figures (dead time, switching, core)
    return dataclasses.replace(d, stage=st, operating=op, losses=Losses())


# (id, sample, vin, load, (C, ESR) of the single bank, stage overrides)
CASES = [
    ("buck-diode-12V-0.05A", "buck_diode_12v_5v", 12.0, 0.05, (2.2e-6, 0.003), {}),
    ("boost-1MHz-3.6V-0.1A", "boost_liion_5v", 3.6, 0.1, (4.7e-6, 0.004), {}),
    ("inv-12V-0.03A", "inverting_minus15v", 12.0, 0.03, (1e-6, 0.005), {}),
    ("flyback-48V-0.2A", "flyback_48v_12v", 48.0, 0.2, (10e-6, 0.01), {}),
    ("4sw-buck-14V-0.1A", "fourswitch_automotive_9v", 14.0, 0.1, (10e-6, 0.003), {"light_load": "dcm"}),
    ("4sw-boost-6V-0.1A", "fourswitch_automotive_9v", 6.0, 0.1, (10e-6, 0.003), {"light_load": "dcm"}),
]
IDS = [c[0] for c in CASES]


def reference_case(design, result, k=0):
    """The reference's plain-number circuit for corner ``k`` (the design's data only)."""
    st = design.stage
    topo = st.topology if st.topology != "four-switch-buck-boost" else f"four-switch-{result.submode[k]}"
    return pcm_spice.PcmCase(
        topology=topo,
        fsw_hz=st.fsw,
        l_h=st.inductance,
        caps=tuple((b.c_total, b.esr_total) for b in st.output_caps),
        vin_v=float(result.vin[k]),
        vout_v=design.operating.vout,
        r_load_ohm=abs(design.operating.vout) / float(result.load[k]),
        sense_gain_ohm=0.0,
        dcr_ohm=st.dcr,
        r_switch_ohm=st.r_switch,
        r_rect_ohm=st.r_rectifier,
        diode_drop_v=st.diode_drop,
        rectifier=st.rectifier,
        diode_emulation=st.rectifier == "synchronous" and st.light_load_mode == "dcm",
        turns_ratio=st.turns_ratio,
    )


_MEASURED = {}


def measured(row, cache_dir):
    """(design, loopkit result, ngspice response) of a case, measured once per session."""
    if row[0] not in _MEASURED:
        _id, name, vin, load, cap, over = row
        design = _design(name, vin, load, cap, **over)
        result = loopkit.analyse_stage(design)
        assert result.dcm[0], f"{row[0]} is not in DCM"
        fsw = design.stage.fsw
        res = duty_spice.duty_to_output(
            reference_case(design, result),
            float(result.duty[0]),
            np.array(F_REL) * fsw,
            fp_hz=float(result.fp_hz[0]),
            cache_dir=cache_dir,
        )
        _MEASURED[row[0]] = (design, result, res)
    return _MEASURED[row[0]]


def _errors(model, res):
    err = res.gvd / model
    return 20.0 * np.log10(np.abs(err)), np.degrees(np.angle(err))


@pytest.mark.parametrize("row", CASES, ids=IDS)
def test_full_order_gvd_matches_the_switched_circuit(row, cache_dir):
    """loopkit's DCM Gvd within 0.5 dB / 3 deg of ngspice from fsw/100 to fsw/3."""
    design, result, res = measured(row, cache_dir)
    assert res.dcm, "the simulated inductor current must stay at zero for part of the period"
    assert abs(res.duty - result.duty[0]) < 1e-4
    # the averaged operating point against the circuit at the same duty (tests/test_stage_ngspice.py
    # bounds it per case; 0.5 % covers these)
    assert abs(res.vout_v / design.operating.vout - 1.0) < 5e-3
    db, deg = _errors(result.gvd.response(res.f_hz)[0], res)
    table = "  ".join(f"{f / design.stage.fsw:.3f}fsw {a:+.2f}dB {b:+.2f}deg" for f, a, b in zip(res.f_hz, db, deg))
    print(f"\n{row[0]}: {table}")
    assert np.all(np.abs(db) < TOL_DB), table
    assert np.all(np.abs(deg) < TOL_DEG), table


def test_reduced_order_misses_at_fsw3(cache_dir):
    """The reduced-order model (kept for comparison) is more than 3 deg off at fsw/3 on the 1 MHz boost:
    the comparison above tells the two models apart."""
    design, result, res = measured(CASES[1], cache_dir)
    _idx, st, module, _label = groups(design.stage, result.vin, result.load, design.operating.vout)[0]
    dp = module.dcm(st, result.vin, result.load, design.operating.vout)
    reduced = base.dcm_transfer_functions(st, dp, abs(design.operating.vout) / result.load)[0]
    _db, deg = _errors(reduced.response(res.f_hz)[0], res)
    assert abs(deg[-1]) > TOL_DEG
