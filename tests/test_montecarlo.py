"""Tolerance studies: the batch over rows against one-design runs, distributions, intervals, worst case."""

from dataclasses import replace

import numpy as np
import pytest
from scipy import integrate, stats

from loopkit.designfile import load_design
from loopkit.loop import LoopSession
from loopkit.montecarlo import (
    clopper_pearson_interval,
    meets_targets,
    monte_carlo,
    prepare_study,
    sensitivity,
    wilson_interval,
    worst_case,
    worst_corner,
)
from loopkit.rows import draw_design, row_margins, row_stage, vectorised
from loopkit.tolerances import Quantity, draw_values, parse_tolerances
from loopkit.verdict import verdict_findings

SAMPLES = "sample_designs/"


def _tolerances(design, extra=None):
    table = {"inductance": "20%", "dcr": "30%", "r_switch": "30%",
             "output_caps": [{"capacitance": "20%", "esr": "30%", "derating": 0.8}]}
    if design.control.scheme == "voltage-mode":
        table["ramp"] = "5%"
    if design.compensator.network in ("type1", "type2", "type3") and not design.compensator.opamp.ideal:
        table["gbw"] = "50%"
    if design.compensator.network == "opto-type2":
        table["ctr"] = "30%"
    table.update(extra or {})
    return parse_tolerances(table, len(design.stage.output_caps))


def _variant(name: str, network: str | None = None, ideal: bool = False):
    d = load_design(SAMPLES + name)
    comp = d.compensator
    if network is not None:
        comp = replace(comp, network=network, parts={}, placement={})
    if ideal:
        comp = replace(comp, opamp=replace(comp.opamp, gain_db=0.0, gbw=0.0))
    return replace(d, compensator=comp)


CASES = [  # every topology, every network, both schemes, ideal and finite op-amp
    ("buck_24v_3v3.toml", None, False, 6),
    ("buck_diode_12v_5v.toml", None, False, 6),
    ("boost_pcm_12v_24v.toml", "type2", True, 6),
    ("buck_diode_12v_5v.toml", "type1", False, 6),
    ("boost_liion_5v.toml", None, False, 6),
    ("boost_pcm_12v_24v.toml", None, False, 6),
    ("inverting_minus15v.toml", None, False, 6),
    ("flyback_48v_12v.toml", None, False, 2),
    ("flyback_pcm_48v_12v.toml", None, False, 2),
    ("fourswitch_automotive_9v.toml", None, False, 2),
    ("solar_charger_14v4.toml", None, False, 2),
]


@pytest.mark.parametrize("name, network, ideal, n", CASES)
def test_batch_equals_one_design_run_per_draw(name, network, ideal, n):
    """Every draw's margins from the batch equal LoopSession on that draw's own design (1e-9)."""
    d = _variant(name, network, ideal)
    if network == "type1":  # an integrator alone crosses far below the double pole
        d = replace(d, compensator=replace(d.compensator, fc_hz=300.0, pm_deg=45.0))
    study = prepare_study(replace(d, tolerances=_tolerances(d)))
    values = draw_values(study.quantities, n, np.random.default_rng(3))
    batch = row_margins(study.design, study.quantities, values, study.f_hz)
    for k in range(n):
        one = LoopSession(draw_design(study.design, study.quantities, values[k]), f_hz=study.f_hz).run()
        m = one.margins
        np.testing.assert_allclose(batch.pm_deg[k], m.pm_deg, rtol=0, atol=1e-9, equal_nan=True)
        np.testing.assert_allclose(batch.fc_hz[k], m.fc_hz, rtol=1e-12, atol=0, equal_nan=True)
        np.testing.assert_allclose(batch.gm_db[k], m.gm_db, rtol=0, atol=1e-9, equal_nan=True)
        np.testing.assert_array_equal(batch.stable[k], m.stable)
        np.testing.assert_array_equal(batch.n_crossovers[k], m.n_crossovers)
        # the study's pass rule is the verdict's: no error finding at a corner <=> the corner meets the targets
        missed = {f.corner for f in verdict_findings(m, one.stage, study.targets, d.stage.fsw)}
        meets = meets_targets(replace(batch, **{f: getattr(batch, f)[k:k + 1] for f in
                                                ("fc_hz", "pm_deg", "gm_db", "n_crossovers", "stable",
                                                 "gm_beyond_model", "dcm")}), study.targets)[0]
        assert set(np.nonzero(~meets)[0]) == missed


def test_vectorised_paths_are_the_ones_claimed():
    d = load_design(SAMPLES + "buck_24v_3v3.toml")
    assert vectorised(d, ["inductance"])
    assert not vectorised(load_design(SAMPLES + "fourswitch_automotive_9v.toml"), ["inductance"])
    assert not vectorised(load_design(SAMPLES + "flyback_48v_12v.toml"), ["inductance"])


def _product_of_uniforms_cdf(x, a1, b1, a2, b2):
    """P(L C <= x) for independent L ~ U(a1, b1), C ~ U(a2, b2): the average over L of C's CDF at x / L.

    The product of two continuous random variables (Glen, Leemis and Drew, Computational
    Statistics & Data Analysis 44, 2004, from memory); written out here by quadrature.
    """
    def inner(lh):
        return np.clip((x / lh - a2) / (b2 - a2), 0.0, 1.0)

    return integrate.quad(inner, a1, b1, limit=200)[0] / (b1 - a1)


def test_lc_double_pole_follows_its_analytic_distribution():
    """f0 = 1 / (2 pi sqrt(L C)) of a lossless buck (Erickson & Maksimovic, 2nd ed., Table 8.2) with
    uniform L and C: its CDF is 1 - P(L C <= 1 / (2 pi f)^2); Kolmogorov-Smirnov (scipy.stats.kstest)."""
    d = load_design(SAMPLES + "buck_24v_3v3.toml")
    st = replace(d.stage, dcr=0.0, r_switch=0.0, r_rectifier=0.0,
                 output_caps=(replace(d.stage.output_caps[0], esr=0.0),))
    d = replace(d, stage=st, operating=replace(d.operating, vin=(24.0,), load=(3.0,)))
    c0 = st.output_caps[0].capacitance
    qs = [Quantity("inductance", st.inductance, 0.8 * st.inductance, 1.2 * st.inductance, "uniform", 3.0, "H"),
          Quantity("output_caps[0].capacitance", c0, 0.7 * c0, 1.1 * c0, "uniform", 3.0, "F")]
    values = draw_values(qs, 3000, np.random.default_rng(11))
    f0 = row_stage(d, qs, values).f0_hz
    n = st.output_caps[0].count
    a1, b1, a2, b2 = qs[0].low, qs[0].high, n * qs[1].low, n * qs[1].high

    def cdf(f):
        return np.array([1.0 - _product_of_uniforms_cdf(1.0 / (2 * np.pi * x) ** 2, a1, b1, a2, b2)
                         for x in np.atleast_1d(f)])

    assert stats.kstest(f0, cdf).pvalue > 1e-3
    # and it can fail: the same draws against L alone varying (C fixed at nominal) are rejected
    def wrong(f):
        return np.array([1.0 - np.clip((1.0 / (2 * np.pi * x) ** 2 / (n * c0) - a1) / (b1 - a1), 0, 1)
                         for x in np.atleast_1d(f)])

    assert stats.kstest(f0, wrong).pvalue < 1e-3


@pytest.mark.parametrize("p, n", [(0.9, 200), (0.5, 60), (0.98, 500)])
def test_interval_coverage_on_a_known_probability(p, n):
    """Over 2000 random states, the 95 % Wilson interval covers p about 95 % of the time (Wilson, JASA 22,
    1927; Brown, Cai and DasGupta, Statistical Science 16, 2001, show it stays near nominal, from memory)
    and Clopper-Pearson at least 95 % (Clopper and Pearson, Biometrika 26, 1934: conservative)."""
    rng = np.random.default_rng(5)
    ks = rng.binomial(n, p, size=2000)
    values, counts = np.unique(ks, return_counts=True)
    wil = sum(c for k, c in zip(values, counts) if wilson_interval(int(k), n)[0] <= p <= wilson_interval(int(k), n)[1])
    cp = sum(c for k, c in zip(values, counts)
             if clopper_pearson_interval(int(k), n)[0] <= p <= clopper_pearson_interval(int(k), n)[1])
    wil, cp = wil / ks.size, cp / ks.size
    assert 0.92 <= wil <= 0.98
    assert cp >= 0.94


def test_wilson_interval_formula():
    """Wilson's interval for 8 of 10 at 95 %: (0.4902, 0.9433) (Newcombe, Statistics in Medicine 17, 1998,
    table I, method 3, from memory)."""
    lo, hi = wilson_interval(8, 10)
    assert lo == pytest.approx(0.4902, abs=1e-4) and hi == pytest.approx(0.9433, abs=1e-4)


@pytest.fixture(scope="module")
def buck_study():
    d = load_design(SAMPLES + "buck_24v_3v3.toml")
    return prepare_study(replace(d, tolerances=_tolerances(d)))


def test_monte_carlo_reproducible_and_cancellable(buck_study):
    a = monte_carlo(buck_study, 300, random_state=4)
    b = monte_carlo(buck_study, 300, random_state=4, budget_bytes=2**20)  # other chunks, same draws
    np.testing.assert_array_equal(a.values, b.values)
    np.testing.assert_array_equal(a.margins.pm_deg, b.margins.pm_deg)
    c = monte_carlo(buck_study, 300, random_state=5)
    assert not np.array_equal(a.values, c.values)
    assert a.yield_fraction == np.mean(np.all(a.meets, axis=1))
    lo, hi = a.wilson
    assert lo <= a.yield_fraction <= hi

    calls = []

    def stop(done, total):
        calls.append(done)
        if len(calls) == 2:
            raise KeyboardInterrupt

    cut = monte_carlo(buck_study, 300, random_state=4, progress=stop, budget_bytes=2**20)
    assert cut.cancelled and cut.n == calls[-1] < 300
    np.testing.assert_array_equal(cut.margins.pm_deg, a.margins.pm_deg[: cut.n])  # what finished is kept


def test_worst_case_never_milder_than_monte_carlo_minimum(buck_study):
    mc = monte_carlo(buck_study, 1000, random_state=1)
    wc = worst_case(buck_study)
    assert wc.pm_deg <= mc.worst["pm_deg"].min() + 1e-9
    assert np.all((wc.values >= [q.low for q in buck_study.quantities])
                  & (wc.values <= [q.high for q in buck_study.quantities]))
    again = row_margins(buck_study.design, buck_study.quantities, wc.values[None, :], buck_study.f_hz)
    assert worst_corner(again)["pm_deg"][0] == pytest.approx(wc.pm_deg, abs=1e-9)


def test_sensitivity_ranks_the_output_filter_first(buck_study):
    """Ranking checked by hand: the double pole (L, C) sets the phase at crossover of a voltage-mode buck
    (Erickson & Maksimovic, 2nd ed., sec. 9.5); the reference resistor R1 of the op-amp network only
    scales the divider and hardly moves the PM."""
    mc = monte_carlo(buck_study, 400, random_state=2)
    ranked = sensitivity(buck_study, mc)
    top = {s.key for s in ranked[:2]}
    assert top == {"inductance", "output_caps[0].capacitance"}
    by_key = {s.key: s for s in ranked}
    assert by_key["inductance"].rank_correlation > 0.3  # more L: lower f0, more phase at fc here
    assert ranked[0].effect_deg >= ranked[-1].effect_deg


def test_cli_tolerance_prints_the_library_values(tmp_path, capsys):
    """``loopkit tolerance``: the yield and interval the library computes, the CSV and JSON of the same run."""
    import json
    from pathlib import Path

    from loopkit.cli import main

    text = Path(SAMPLES + "buck_24v_3v3.toml").read_text() + '\n[tolerances]\ninductance = "20%"\n'
    path = tmp_path / "d.toml"
    path.write_text(text)
    out_csv, out_json = tmp_path / "draws.csv", tmp_path / "study.json"
    status = main(["tolerance", str(path), "--draws", "120", "--random-state", "3", "--no-progress",
                   "--csv", str(out_csv), "--json", str(out_json)])
    printed = capsys.readouterr().out
    from loopkit.designfile import load_design as load

    study = prepare_study(load(path))
    mc = monte_carlo(study, 120, random_state=3)
    assert status == 0
    assert f"yield {100 * mc.yield_fraction:.1f} %" in printed
    assert f"Wilson score {100 * mc.wilson[0]:.1f} .. {100 * mc.wilson[1]:.1f} %" in printed
    assert printed.rstrip().endswith("licensed practice.")
    lines = out_csv.read_text().splitlines()
    assert lines[0].startswith("draw,inductance,") and len(lines) == 121
    doc = json.loads(out_json.read_text())
    assert doc["monte_carlo"]["yield"] == pytest.approx(mc.yield_fraction)
    assert doc["monte_carlo"]["values"][5][0] == pytest.approx(mc.values[5, 0])
    assert "caution" in doc
    assert main(["tolerance", str(path), "--draws", "10", "--min-yield", "101%"]) == 2
    assert "--min-yield" in capsys.readouterr().err


def test_loop_envelope_holds_every_draws_own_loop(buck_study):
    """The envelope (chunked) bounds the loop gain of each draw's one-design run at every corner, and touches
    it: its ends are some row's values."""
    from loopkit.montecarlo import loop_envelope

    values = draw_values(buck_study.quantities, 12, np.random.default_rng(9))
    env = loop_envelope(buck_study, values, budget_bytes=2**20)
    f = env["f_hz"]
    mags, phases = [], []
    for v in values:
        r = LoopSession(draw_design(buck_study.design, buck_study.quantities, v), f_hz=f).run()
        mags.append(20 * np.log10(np.abs(r.loop_resp)))
        phases.append(r.loop_phase_deg)
    mags, phases = np.concatenate(mags), np.concatenate(phases)
    np.testing.assert_allclose(env["mag_db_min"], mags.min(axis=0), atol=1e-9)
    np.testing.assert_allclose(env["mag_db_max"], mags.max(axis=0), atol=1e-9)
    np.testing.assert_allclose(env["phase_deg_min"], phases.min(axis=0), atol=1e-9)
    np.testing.assert_allclose(env["phase_deg_max"], phases.max(axis=0), atol=1e-9)


def _dask_run(buck_study, processes: bool):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=processes,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        return monte_carlo(buck_study, 240, random_state=6, client=client, budget_bytes=2**20)


@pytest.mark.slow
def test_dask_cluster_gives_the_single_process_results(buck_study):
    """The same chunks through a local Dask cluster (threads) give exactly the one-process results."""
    ours = monte_carlo(buck_study, 240, random_state=6)
    theirs = _dask_run(buck_study, processes=False)
    np.testing.assert_array_equal(theirs.values, ours.values)
    np.testing.assert_array_equal(theirs.margins.pm_deg, ours.margins.pm_deg)
    np.testing.assert_array_equal(theirs.meets, ours.meets)


@pytest.mark.slow
def test_dask_processes_and_process_pool_give_the_single_process_results(buck_study):
    ours = monte_carlo(buck_study, 240, random_state=6)
    theirs = _dask_run(buck_study, processes=True)
    np.testing.assert_array_equal(theirs.margins.pm_deg, ours.margins.pm_deg)
    pool = monte_carlo(buck_study, 240, random_state=6, workers=2, budget_bytes=2**20)
    np.testing.assert_array_equal(pool.margins.pm_deg, ours.margins.pm_deg)
    np.testing.assert_array_equal(pool.margins.fc_hz, ours.margins.fc_hz)


def test_temperature_corners_are_more_corners_of_each_draw():
    """A draw at a temperature corner is the one-design run of the drawn values times the corner's factors."""
    d = load_design(SAMPLES + "buck_24v_3v3.toml")
    tol = parse_tolerances({"inductance": "20%", "output_caps": [{"capacitance": "10%"}],
                            "temperature": [{"name": "cold", "capacitance": 0.8, "esr": 2.0},
                                            {"name": "hot", "inductance": 0.9}]}, 1)
    study = prepare_study(replace(d, tolerances=tol))
    mc = monte_carlo(study, 5, random_state=2)
    n_c = study.n_corners
    assert mc.margins.pm_deg.shape == (5, 2 * n_c)
    for t in range(2):
        v = mc.values[1] * study.factors[t]
        m = LoopSession(draw_design(study.design, study.quantities, v), f_hz=study.f_hz).run().margins
        np.testing.assert_allclose(mc.margins.pm_deg[1, t * n_c:(t + 1) * n_c], m.pm_deg, atol=1e-9)
    assert study.factors[0, [q.key for q in study.quantities].index("output_caps[0].capacitance")] == 0.8


@pytest.mark.slow
def test_yield_interval_coverage_on_a_study_with_known_probability():
    """End to end: only L varies (uniform +-20 %) and the worst-corner PM rises with L, so a draw passes exactly
    when L is above the L* where the PM meets the target (found by bisection on one-design runs, the reference
    path): p = (L_high - L*) / (L_high - L_low).  Over 200 random states of 30 draws, the 95 % Wilson interval
    of the study's yield covers p about 95 % of the time (Wilson, JASA 22, 1927)."""
    from scipy.optimize import brentq

    from loopkit.loop import apply_parts, design_loop
    from loopkit.tolerances import Tolerances

    d = load_design(SAMPLES + "buck_24v_3v3.toml")
    d = apply_parts(d, design_loop(d))
    d = replace(d, compensator=replace(d.compensator, fc_band=4.0))  # only the phase margin decides
    tol = parse_tolerances({"inductance": "20%", "parts_from_series": False}, 1)
    lh = d.stage.inductance

    def worst_pm(l_h):
        r = LoopSession(replace(d, stage=replace(d.stage, inductance=l_h))).run()
        return float(np.min(r.margins.pm_deg)), r

    pm_lo, r_lo = worst_pm(0.8 * lh)
    pm_hi, r_hi = worst_pm(1.2 * lh)
    assert pm_lo < pm_hi and r_lo.met and r_hi.met  # monotone here; GM, band, stability hold at both ends
    target = 0.5 * (pm_lo + pm_hi)
    l_star = brentq(lambda x: worst_pm(x)[0] - (target - 0.05), 0.8 * lh, 1.2 * lh, xtol=1e-12 * lh)
    p = (1.2 * lh - l_star) / (0.4 * lh)
    design = replace(d, compensator=replace(d.compensator, pm_deg=target), tolerances=tol)
    study = prepare_study(design)
    assert [q.key for q in study.quantities] == ["inductance"] and study.design.tolerances != Tolerances()
    states, n = 200, 30
    values = np.concatenate([draw_values(study.quantities, n, np.random.default_rng(s)) for s in range(states)])
    passed = np.all(meets_targets(row_margins(study.design, study.quantities, values, study.f_hz), study.targets),
                    axis=1)
    np.testing.assert_array_equal(passed, values[:, 0] > l_star)  # the pass rule is the threshold
    covered = [wilson_interval(int(k), n)[0] <= p <= wilson_interval(int(k), n)[1]
               for k in passed.reshape(states, n).sum(axis=1)]
    assert 0.90 <= np.mean(covered) <= 0.99
