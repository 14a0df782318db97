"""Robust synthesis: never worse than the nominal design on the scenarios; the draws' plants against
the independent state-space-averaged reference."""

from dataclasses import replace

import numpy as np
import pytest
from reference import ssa  # tests/ is on sys.path (pytest rootdir conftest)

from loopkit.designfile import load_design
from loopkit.loop import LoopSession
from loopkit.montecarlo import prepare_study
from loopkit.robust import robust_synthesis
from loopkit.rows import draw_design, row_stage
from loopkit.tolerances import draw_values, parse_tolerances

SAMPLES = "sample_designs/"


def _study(name):
    d = load_design(SAMPLES + name)
    tol = parse_tolerances({"inductance": "20%", "output_caps": [{"capacitance": "20%", "derating": 0.8}]},
                           len(d.stage.output_caps))
    return prepare_study(replace(d, tolerances=tol))


@pytest.mark.parametrize("name", ["buck_24v_3v3.toml",
                                  *(pytest.param(n, marks=pytest.mark.slow) for n in
                                    ("boost_liion_5v.toml", "boost_pcm_12v_24v.toml", "inverting_minus15v.toml"))])
def test_robust_never_worse_than_nominal(name):
    """Lowest PM over every scenario and corner (exact loop, snapped parts) at least the nominal design's,
    with no more rows missing the gain margin, band or single crossover; and the reported worst PM is
    what a one-design run of the worst scenario gives."""
    study = _study(name)
    r = robust_synthesis(study)
    assert r.worst_pm_deg >= r.nominal_worst_pm_deg - 1e-9
    assert r.misses <= r.nominal_misses
    pms = []
    for v in r.scenarios:
        one = draw_design(study.design, study.quantities, v)
        one = replace(one, compensator=replace(one.compensator, parts=dict(r.parts)))
        m = LoopSession(one, f_hz=study.f_hz).run().margins
        pms.append(np.min(np.where(m.stable & (m.n_crossovers >= 1), m.pm_deg, -180.0)))
    assert min(pms) == pytest.approx(r.worst_pm_deg, abs=1e-9)


@pytest.mark.parametrize("name", ["buck_24v_3v3.toml", "boost_liion_5v.toml", "inverting_minus15v.toml"])
def test_draws_plants_agree_with_state_space_averaging(name):
    """Gvd of drawn rows (the batch stage over rows) against tests/reference/ssa.py built from that draw's own
    stage (Middlebrook and Cuk, IEEE PESC 1976): 0.01 dB and 0.1 deg, as in tests/test_stage_ssa.py."""
    study = _study(name)
    values = draw_values(study.quantities, 3, np.random.default_rng(8))
    stage = row_stage(study.design, study.quantities, values)
    d = study.design
    n_c = d.operating.n_corners
    f = np.logspace(1.0, np.log10(d.stage.fsw / 2.0), 200)
    checked = 0
    for k in range(3):
        one = draw_design(d, study.quantities, values[k])
        params = ssa.params_from_stage(one.stage)
        for c in range(n_c):
            row = k * n_c + c
            if stage.dcm[row]:
                continue
            pt = ssa.solve(params, stage.vin[row], d.operating.vout, stage.load[row])
            ratio = stage.gvd.take(row).response(f)[0] / ssa.responses(pt, f)["gvd"]
            assert np.max(np.abs(20 * np.log10(np.abs(ratio)))) < 0.01
            assert np.max(np.abs(np.degrees(np.angle(ratio)))) < 0.1
            checked += 1
    assert checked >= 3
