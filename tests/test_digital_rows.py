"""``loopkit sweep`` and ``loopkit tolerance`` on digital designs: the controller C(z) fixed, the plant over rows.

Outside references:

- python-control ``stability_margins`` on the discrete loop ``Tu(z) C(z)`` of a swept input voltage, built by
  the ordinary one-design path (G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of Dynamic
  Systems, 3rd ed., 1998, ch. 7: margins on the unit circle; python-control's own implementation);
- the design's own margins (``loopkit design``): at the design's corners the sweep and the study's nominal
  draw must give them (the exact controller's ``LoopResult.margins``, the fixed-point controller's
  ``Realisation.margins_quantised``), since the rows are the same plant with the same controller.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from loopkit import load_design
from loopkit.cli import main
from loopkit.discrete import Discrete
from loopkit.discrete_margins import discrete_loop_margins
from loopkit.errors import DesignError
from loopkit.loop import LoopSession
from loopkit.montecarlo import monte_carlo, prepare_study
from loopkit.powerstage import analyse_stage
from loopkit.robust import robust_synthesis
from loopkit.rows import chunk_margins, draw_design, fixed_controller, row_loop
from loopkit.schemes import digital as scheme
from loopkit.sweep import vin_sweep
from loopkit.tolerances import Spread, Tolerances
from tests.reference.samples import assert_margins_equal_control, sample_design, sample_result

SAMPLES = ["buck_dsp_5v", "inverting_mcu_minus12v"]

#: A plant tolerance table for the studies (demo values, not check values).
PLANT_TOLERANCES = Tolerances(entries={"inductance": Spread(percent=20.0), "dcr": Spread(percent=10.0)},
                              banks=({"capacitance": Spread(percent=10.0), "esr": Spread(percent=30.0)},),
                              parts_from_series=False)


_design, _result = sample_design, sample_result


def _exact(result):
    """The result without its fixed-point realisation: the rows then keep the exact C(z)."""
    return replace(result, digital=replace(result.digital, realisation=None))


def _same(actual, expected):
    for key in ("fc_hz", "pm_deg", "gm_db", "stable"):
        np.testing.assert_array_equal(getattr(actual, key), getattr(expected, key), err_msg=key)


@pytest.mark.parametrize("name", SAMPLES)
def test_sweep_at_the_design_corners_equals_the_design(name):
    """The design's own input voltages swept: every corner's margins equal ``loopkit design``'s, exactly."""
    design, res = _design(name), _result(name)
    assert res.feasible and res.digital.realisation.fixed is not None
    vin = np.asarray(design.operating.vin, float)
    vin_c, load_c = design.operating.corners()
    # the fixed-point controller (the default): the design's margins with the quantised coefficients
    s = vin_sweep(design, res, vin)
    np.testing.assert_array_equal(s.vin, vin_c)
    np.testing.assert_array_equal(s.load, load_c)
    _same(s, res.digital.realisation.margins_quantised)
    assert s.controller.startswith("the fixed-point controller")
    # the exact controller: the design's own margins table
    e = vin_sweep(design, _exact(res), vin)
    _same(e, res.margins)
    assert e.controller.startswith("the exact controller")


@pytest.mark.parametrize("name", SAMPLES)
def test_swept_row_against_python_control(name):
    """A swept input voltage between the design's: python-control's margins of the ordinary path's loop."""
    pytest.importorskip("control")
    design, res = _design(name), _result(name)
    lo, hi = min(design.operating.vin), max(design.operating.vin)
    vin = 0.37 * lo + 0.63 * hi
    s = vin_sweep(design, res, [vin])
    c, _ = fixed_controller(res)
    one = replace(design, operating=replace(design.operating, vin=(vin,)))  # an ordinary, validated design
    stage = analyse_stage(one, findings=False)
    loop = scheme.uncompensated(one, stage).sampled * c
    assert_margins_equal_control(s, loop, f180=False)


def test_sweep_is_vectorised_over_input_voltages():
    """Many input voltages in one block give each voltage's own margins (the rows do not mix)."""
    design, res = _design("buck_dsp_5v"), _result("buck_dsp_5v")
    vin = np.linspace(18.0, 36.0, 7)
    s = vin_sweep(design, res, vin)
    one = vin_sweep(design, res, vin[3:4])
    k = np.nonzero(s.vin == vin[3])[0]
    np.testing.assert_allclose(s.pm_deg[k], one.pm_deg, rtol=1e-9)
    np.testing.assert_allclose(s.fc_hz[k], one.fc_hz, rtol=1e-9)
    assert np.all(s.stable) and s.vin.size == 7 * len(design.operating.load)


def _study_design(name):
    return replace(_design(name), tolerances=PLANT_TOLERANCES)


@pytest.mark.parametrize("name", SAMPLES)
def test_study_nominal_equals_the_design_and_draws_equal_one_design_runs(name):
    """The study keeps the fixed-point C(z); its nominal draw gives the design's quantised margins (the
    study's coarser grid only brackets the crossings, refined on the exact loop); a Monte Carlo runs and
    each draw equals the ordinary one-design path with that draw's values and the same controller."""
    design, res = _study_design(name), _result(name)
    study = prepare_study(design)
    assert study.controller is not None and study.controller_note.startswith("the fixed-point controller")
    assert study.f_hz[-1] == 0.5 / res.digital.ts_s
    ref = res.digital.realisation.margins_quantised
    nom = study.nominal
    np.testing.assert_allclose(nom.pm_deg[0], ref.pm_deg, rtol=1e-7)
    np.testing.assert_allclose(nom.fc_hz[0], ref.fc_hz, rtol=1e-7)
    np.testing.assert_allclose(nom.gm_db[0], ref.gm_db, rtol=1e-7)
    np.testing.assert_array_equal(nom.stable[0], ref.stable)
    mc = monte_carlo(study, 12, random_state=3)
    assert mc.n == 12 and mc.margins.pm_deg.shape == (12, design.operating.n_corners)
    assert np.all(np.isfinite(mc.margins.pm_deg))
    assert len(np.unique(mc.margins.pm_deg[:, 0])) > 1  # the plant varies
    for i in (0, 7):
        one = draw_design(study.design, study.quantities, mc.values[i])
        stage = analyse_stage(one, findings=False)
        loop = scheme.uncompensated(one, stage).sampled * study.controller
        m = discrete_loop_margins(loop, study.f_hz)
        np.testing.assert_allclose(mc.margins.pm_deg[i], m.pm_deg, rtol=1e-9)
        np.testing.assert_allclose(mc.margins.fc_hz[i], m.fc_hz, rtol=1e-9)


def test_row_loop_is_a_discrete_loop_with_the_fixed_controller():
    design, res = _design("buck_dsp_5v"), _result("buck_dsp_5v")
    c, _ = fixed_controller(res)
    loop, resp, _, dcm = row_loop(design, [], np.zeros((1, 0)), res.f_hz, c)
    assert isinstance(loop, Discrete) and loop.n_corners == design.operating.n_corners
    np.testing.assert_allclose(resp, (res.open_loop.tu * c).response(res.f_hz), rtol=1e-12)
    assert not np.any(dcm)


def test_refusals_name_the_field():
    design = _design("buck_dsp_5v")
    with pytest.raises(DesignError, match="tolerances") as e:
        prepare_study(design)  # nothing to vary: no [tolerances], no network parts
    assert "a study needs something to vary" in str(e.value)
    bad = replace(design, tolerances=replace(PLANT_TOLERANCES, parts={"R1": Spread(percent=1.0)}))
    with pytest.raises(DesignError, match=r"tolerances\.parts\.R1.*no network parts"):
        prepare_study(bad)
    with pytest.raises(DesignError, match="--robust"):
        robust_synthesis(prepare_study(_study_design("buck_dsp_5v")))
    with pytest.raises(DesignError, match="controller"):
        chunk_margins(design, [], np.zeros((1, 0)), _result("buck_dsp_5v").f_hz)  # no C(z) given


def test_cli_sweep_and_tolerance_on_a_digital_design(tmp_path, capsys):
    path = "sample_designs/buck_dsp_5v.toml"
    assert main(["sweep", path, "--points", "4", "--no-progress"]) == 0
    out = capsys.readouterr().out
    assert "controller kept: the fixed-point controller" in out and "Caution" in out
    assert main(["tolerance", path, "--draws", "5", "--no-progress"]) == 2  # no [tolerances]: refused
    err = capsys.readouterr().err
    assert "tolerances" in err and "Traceback" not in err
    text = Path(path).read_text() + '\n[tolerances]\ninductance = "20%"\n'
    study_file = tmp_path / "dsp.toml"
    study_file.write_text(text)
    assert main(["tolerance", str(study_file), "--draws", "10", "--no-progress", "--json",
                 str(tmp_path / "s.json")]) == 0
    out = capsys.readouterr().out
    assert "controller kept: the fixed-point controller" in out and "yield" in out
    assert '"controller"' in (tmp_path / "s.json").read_text()
    assert main(["tolerance", str(study_file), "--draws", "10", "--no-progress", "--robust"]) == 2
    assert "--robust" in capsys.readouterr().err


def test_four_switch_digital_rows_run_draw_by_draw():
    """The four-switch stage (its modes split the corners) goes draw by draw; the margins at the design's
    corners still equal the design's (a digital variant of the four-switch sample, low fc: demo values)."""
    from loopkit.design import Digital

    d = load_design("sample_designs/fourswitch_automotive_9v.toml")
    d = replace(d, control=replace(d.control, scheme="digital"),
                digital=Digital(adc_bits=12, adc_range=3.3, pwm_clock=100e6, form="type3"),
                compensator=replace(d.compensator, fc_hz=1e3, pm_deg=40.0, fc_band=5.0))
    res = LoopSession(d).run()
    assert res.feasible
    _same(vin_sweep(d, res, d.operating.vin), res.digital.realisation.margins_quantised)
    study = prepare_study(replace(d, tolerances=Tolerances(entries={"inductance": Spread(percent=20.0)})))
    np.testing.assert_allclose(study.nominal.pm_deg[0], res.digital.realisation.margins_quantised.pm_deg, rtol=1e-7)
    mc = monte_carlo(study, 4, random_state=1)
    assert mc.n == 4 and np.all(np.isfinite(mc.margins.pm_deg))


def test_digital_study_chunks_and_pickles():
    """Chunking (a small memory budget) does not change a digital Monte Carlo, and the study (with its
    controller) pickles, as the process pool and Dask need; the digital rows are budgeted on their own
    figure."""
    import pickle

    from loopkit.rows import BYTES_PER_ROW_POINT_DIGITAL, bytes_per_row_point, draws_per_chunk

    study = prepare_study(_study_design("buck_dsp_5v"))
    assert bytes_per_row_point(study.design) == BYTES_PER_ROW_POINT_DIGITAL
    budget = 2**20
    assert draws_per_chunk(study.n_corners, study.f_hz.size, budget, BYTES_PER_ROW_POINT_DIGITAL) < 9
    whole = monte_carlo(study, 9, random_state=2)
    parts = monte_carlo(study, 9, random_state=2, budget_bytes=budget)
    np.testing.assert_allclose(whole.margins.pm_deg, parts.margins.pm_deg, rtol=1e-12)  # batched rounding only
    again = pickle.loads(pickle.dumps(study))
    np.testing.assert_allclose(monte_carlo(again, 3, random_state=2).margins.pm_deg, whole.margins.pm_deg[:3],
                               rtol=1e-12)


def test_without_a_fixed_point_controller_the_exact_one_is_kept():
    """A given Q format that cannot hold the coefficients: no realisation, so the sweep keeps the exact C(z)
    and says so; its margins at the design's corners are the design's own."""
    d = _design("buck_dsp_5v")
    d = replace(d, digital=replace(d.digital, word_length=16, frac_bits=15))
    res = LoopSession(d).run()
    assert res.feasible and res.digital.realisation.fixed is None
    s = vin_sweep(d, res, d.operating.vin)
    assert s.controller == "the exact controller (no fixed-point realisation)"
    _same(s, res.margins)
