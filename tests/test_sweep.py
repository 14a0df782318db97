"""The dense input-voltage sweep in the library: the corner table's numbers, linear blocks, cancel."""

import numpy as np
import pytest

from loopkit.designfile import load_design
from loopkit.loop import design_loop
from loopkit.sweep import vin_sweep


@pytest.mark.parametrize("name", ["buck_24v_3v3.toml", "boost_pcm_12v_24v.toml", "flyback_48v_12v.toml"])
def test_sweep_gives_the_corner_table_at_the_design_corners(name):
    """At the design's own input voltages the sweep's margins are LoopResult's (same parts, slope, grid)."""
    d = load_design("sample_designs/" + name)
    r = design_loop(d)
    vin = np.unique(np.r_[np.linspace(min(d.operating.vin), max(d.operating.vin), 7), d.operating.vin])
    s = vin_sweep(d, r, vin, budget_bytes=2**20)  # small blocks: several of them
    assert s.vin.size == vin.size * len(d.operating.load) and not s.cancelled
    for k in range(r.stage.n_corners):
        j = np.nonzero((s.vin == r.stage.vin[k]) & (s.load == r.stage.load[k]))[0][0]
        assert s.pm_deg[j] == pytest.approx(r.margins.pm_deg[k], abs=1e-9)
        assert s.fc_hz[j] == pytest.approx(r.margins.fc_hz[k], rel=1e-12)


def test_sweep_cancel_keeps_finished_blocks():
    d = load_design("sample_designs/buck_24v_3v3.toml")
    r = design_loop(d)
    calls = []
    s = vin_sweep(d, r, np.linspace(18, 32, 40), progress=lambda done, total: calls.append(done),
                  cancelled=lambda: len(calls) >= 2, budget_bytes=2**20)
    assert s.cancelled and s.vin.size == calls[-1] * len(d.operating.load) < 40 * len(d.operating.load)


def test_cli_sweep_prints_the_library_values(tmp_path, capsys):
    from loopkit.cli import main

    out = tmp_path / "s.csv"
    assert main(["sweep", "sample_designs/buck_24v_3v3.toml", "--points", "30", "--csv", str(out),
                 "--no-progress"]) == 0
    printed = capsys.readouterr().out
    d = load_design("sample_designs/buck_24v_3v3.toml")
    s = vin_sweep(d, design_loop(d), np.linspace(min(d.operating.vin), max(d.operating.vin), 30))
    k = s.load == d.operating.load[0]
    assert f"{np.min(s.pm_deg[k]):.1f}" in printed.splitlines()[5]
    lines = out.read_text().splitlines()
    assert lines[0] == "vin_v,load_a,fc_hz,pm_deg,gm_db,stable" and len(lines) == 1 + 30 * len(d.operating.load)
    assert all(len(line) <= 80 for line in printed.splitlines())
    assert main(["sweep", "sample_designs/buck_24v_3v3.toml", "--points", "1"]) == 2
