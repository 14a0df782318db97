"""``loopkit simulate``: prints the library's own numbers, the caution, and one-line errors for bad input."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import loopkit
from loopkit import switching as sw
from loopkit.cautions import CAUTION
from loopkit.cli import _fmt, main
from loopkit.loop import design_loop

BUCK = str(Path(__file__).resolve().parents[1] / "sample_designs" / "buck_24v_3v3.toml")


def test_steady_state_table_shows_the_library_values(capsys):
    status = main(["simulate", BUCK, "--only", "4", "--no-progress"])
    out = capsys.readouterr().out
    assert status == 0
    ss = sw.steady_state(sw.closed_loop_setup(design_loop(loopkit.load_design(BUCK))), [4])
    for text in (_fmt(ss.vout_v[0], "V", 5), _fmt(ss.ripple_pp_v[0], "V"), _fmt(ss.il_peak_a[0], "A"),
                 f"{ss.duty[0]:.2%}"):
        assert text in out
    assert " CCM " in out
    assert CAUTION.split()[0] in out and "bench" in out


@pytest.mark.parametrize("argv, field", [
    (["--only", "99"], "--only"),
    (["--only", "4", "--load-step", "0"], "load step"),
    (["--only", "4", "--loop-gain", "1M"], "frequency"),
    (["--only", "4", "--loop-gain", "fast"], "--loop-gain"),
])
def test_bad_input_is_one_line_and_status_2(capsys, argv, field):
    status = main(["simulate", BUCK, "--no-progress", *argv])
    err = capsys.readouterr().err
    assert status == 2
    assert len(err.strip().splitlines()) == 1 and field in err


def test_frequencies_auto_span_fc_to_fsw_over_3():
    from loopkit.switching.command import _frequencies

    result = design_loop(loopkit.load_design(BUCK))
    f = _frequencies("auto", result, np.array([4]), 400e3)
    assert f.min() == pytest.approx(result.margins.fc_hz[4] / 4) and f.max() == pytest.approx(400e3 / 3)
