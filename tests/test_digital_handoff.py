"""A digital design's hand-off: the C header from ``loopkit export``, its integers in the JSON, and the
ADC/PWM resolution limits in the verdict.

References
----------
- A. V. Peterchev, S. R. Sanders, "Quantization resolution and limit cycling in digitally
  controlled PWM converters", IEEE Trans. Power Electronics 18(1), 2003: no limit cycle needs the
  output step of one duty step finer than the ADC step referred to the output (condition (a), from
  memory; :mod:`loopkit.quantisation` has the worked checks) and integral action (condition (b)).
- R. W. Erickson, D. Maksimovic, Fundamentals of Power Electronics, 2nd ed., 2001, Table 6.1: the
  inverting buck-boost's conversion ratio M(D) = -D/(1 - D), so dVo/dD = Vg/(1 - D)^2 (ideal parts).
- The C header against loopkit's own integer model is bit-exact (the compiler is gcc, outside the
  project); the model itself is checked against the float filter in tests/test_fixedpoint.py.
"""

from __future__ import annotations

import json
import shutil
import subprocess
from dataclasses import replace

import numpy as np
import pytest

from loopkit.cli import main
from loopkit.designfile import load_design
from loopkit.loop import design_loop

SAMPLE = "sample_designs/inverting_mcu_minus12v.toml"
GCC = shutil.which("gcc")

DRIVER = r"""#include <stdio.h>
#include "ctrl.h"
int main(void)
{
    loopkit_ctrl_state_t s;
    long e;
    loopkit_ctrl_init(&s, 0);
    while (scanf("%ld", &e) == 1) {
        printf("%ld\n", (long)loopkit_ctrl_step(&s, (int32_t)e));
    }
    return 0;
}
"""


@pytest.fixture(scope="module")
def result():
    return design_loop(load_design(SAMPLE))


@pytest.mark.skipif(GCC is None, reason="gcc not installed (.ci/run installs it with apt-get)")
def test_exported_header_runs_bit_exact_with_the_model(tmp_path, result, capsys):
    header = tmp_path / "ctrl.h"
    assert main(["export", SAMPLE, "--c-header", str(header)]) == 0
    text = header.read_text()
    assert "Caution" in text and "#include <stdint.h>" in text
    (tmp_path / "driver.c").write_text(DRIVER)
    exe = tmp_path / "driver"
    subprocess.run([GCC, "-std=c99", "-Wall", "-Wextra", "-Werror", "-O2", "-fsanitize=undefined",
                    "-fno-sanitize-recover=all", str(tmp_path / "driver.c"), "-o", str(exe)],
                   check=True, capture_output=True, text=True)
    fixed = result.digital.realisation.fixed
    rng = np.random.default_rng(20261203)
    errors = np.concatenate([rng.integers(-30, 31, 2000), np.full(300, fixed.e_max), np.full(300, -fixed.e_max),
                             rng.integers(-2 * fixed.e_max, 2 * fixed.e_max, 500), rng.integers(-2, 3, 1000)])
    done = subprocess.run([str(exe)], input="\n".join(map(str, errors)) + "\n", capture_output=True, text=True,
                          check=True, timeout=60)
    from_c = np.array(done.stdout.split(), dtype=np.int64)
    np.testing.assert_array_equal(from_c, np.asarray(fixed.run(errors), dtype=np.int64))
    assert from_c.min() == fixed.u_min and from_c.max() == fixed.u_max  # both limits reached: saturation ran


def test_json_carries_the_integers_and_their_formats(tmp_path, result):
    out = tmp_path / "r.json"
    assert main(["export", SAMPLE, "--json", str(out)]) == 0
    fp = json.loads(out.read_text())["digital"]["fixed_point"]
    dig = result.digital
    np.testing.assert_array_equal(fp["b_int"], np.round(dig.b * 2.0 ** fp["b_frac_bits"]))
    # the a integers keep the integrator exact (they sum to -2^Q), so they may differ by one from plain rounding
    assert np.max(np.abs(np.array(fp["a_int"]) - dig.a[1:] * 2.0 ** fp["a_frac_bits"])) <= 1.0
    assert sum(fp["a_int"]) == -(2 ** fp["a_frac_bits"])
    assert len(fp["pm_deg"]) == result.stage.n_corners
    assert min(fp["pm_deg"]) == pytest.approx(np.nanmin(result.margins.pm_deg), abs=0.05)


def test_c_header_refused_for_an_analog_design(tmp_path, capsys):
    assert main(["export", "sample_designs/buck_24v_3v3.toml", "--c-header", str(tmp_path / "x.h")]) == 2
    err = capsys.readouterr().err
    assert "--c-header" in err and "digital" in err and not (tmp_path / "x.h").exists()


def test_resolution_limit_breaks_the_verdict_and_names_the_fix(result):
    """Without dither, 256 counts at 250 kHz move the -12 V output ~0.2 V a step: far coarser than the
    10-bit ADC's 3.22 mV / 0.125 = 25.8 mV at the output, so every corner breaks condition (a)."""
    assert result.met and not [f for f in result.findings if f.code == "pwm-coarser-than-adc"]
    design = load_design(SAMPLE)
    coarse = design_loop(replace(design, digital=replace(design.digital, dither_bits=0)))
    hit = [f for f in coarse.findings if f.code == "pwm-coarser-than-adc"]
    assert not coarse.met and sorted(f.corner for f in hit) == list(range(coarse.stage.n_corners))
    res = coarse.digital.realisation.resolution
    st = coarse.stage
    np.testing.assert_allclose(res.dv_pwm_v, np.abs(st.gvd.dc_gain()) / 256.0, rtol=1e-12)  # the stage's dc Gvd
    # [EM] Table 6.1 with the corner's duty: the stage's 55 mOhm of series resistance moves it by up to 3.5 % at 1 A
    np.testing.assert_allclose(res.dv_pwm_v, st.vin / (1.0 - st.duty) ** 2 / 256.0, rtol=0.05)
    np.testing.assert_allclose(res.dv_adc_v, 3.3 / 1024 / 0.125, rtol=1e-12)
    assert all("dither bit" in f.message for f in hit)


def test_slider_preview_leaves_the_handoff_to_the_full_run():
    """A preview (slider drag) skips the fixed-point realisation; the full run that ends the drag has it, and
    the preview's margins are the full run's (the realisation does not change the exact loop)."""
    from loopkit.loop import LoopSession
    from loopkit.result import Targets

    design = load_design(SAMPLE)
    session = LoopSession(design)
    targets = Targets.from_design(design)
    full = session.run(targets)
    preview = session.run(targets, preview=True)
    assert full.digital.realisation is not None and preview.digital.realisation is None
    np.testing.assert_array_equal(preview.margins.pm_deg, full.margins.pm_deg)
