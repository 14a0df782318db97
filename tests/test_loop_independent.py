"""The whole loop recomputed independently: margins at every CCM corner.

The loop gain T = -H Fm Gvd Gc is rebuilt here from independent pieces only:
Gvd from the state-space-averaged reference model of tests/reference/ssa.py
(Middlebrook & Cuk, "A general unified approach to modelling switching-converter
power stages", IEEE PESC 1976), the network from the nodal analysis of
tests/reference/net_mna.py (Ho, Ruehli, Brennan, IEEE TCAS 22(6), 1975), the
modulator 1/Vramp and the differential amplifier as an inverting amplifier of
gain vref/|vout| with one pole.  Margins are then read off a dense grid (40 000
points, linear interpolation of log|T| and of the unwrapped phase) and must
equal loopkit's root-refined margins with the parts to build.
"""

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from reference import net_mna, ssa

from loopkit import load_design
from loopkit.design import OpAmp
from loopkit.loop import design_loop

SAMPLES = Path(__file__).resolve().parents[1] / "sample_designs"
OPAMP_SAMPLES = ["buck_24v_3v3", "boost_liion_5v", "fourswitch_automotive_9v", "inverting_minus15v"]


def _network(parts, network):
    """Nodal-analysis elements of the op-amp network from its parts (ideal op-amp)."""
    rb = parts.get("Rb")
    if network == "type2":
        return net_mna.inverting_type2(parts["R1"], parts["R2"], parts["C1"], parts["C2"], rb)
    if network == "type3":
        return net_mna.inverting_type3(parts["R1"], parts["R2"], parts["R3"], parts["C1"], parts["C2"],
                                       parts["C3"], rb)
    return net_mna.inverting_type1(parts["R1"], parts["C1"], rb)


def _plant(design, vin, load, submode):
    stage = design.stage
    mode = ""
    if stage.topology == "four-switch-buck-boost":
        mode, _ = ssa.four_switch_mode(stage, vin, design.operating.vout, load)
    point = ssa.solve(ssa.params_from_stage(stage, mode), vin, design.operating.vout, load)
    return point


def _margins_from_grid(f, t):
    log_mag = np.log(np.abs(t))
    phase = np.degrees(np.unwrap(np.angle(t)))
    phase -= 360.0 * np.round((phase[0] + 90.0) / 360.0)  # integrating loop: about -90 deg at low f
    cross = np.nonzero(np.sign(log_mag[:-1]) != np.sign(log_mag[1:]))[0]
    fcs, pms = [], []
    for i in cross:
        w = log_mag[i] / (log_mag[i] - log_mag[i + 1])
        lf = np.log(f[i]) + w * (np.log(f[i + 1]) - np.log(f[i]))
        fcs.append(np.exp(lf))
        ph = phase[i] + w * (phase[i + 1] - phase[i])
        pms.append((180.0 + ph + 180.0) % 360.0 - 180.0)
    return np.array(fcs), np.array(pms)


@pytest.mark.parametrize("name", OPAMP_SAMPLES)
def test_margins_match_an_independent_loop(name):
    design = load_design(SAMPLES / f"{name}.toml")
    # the reference network below is the ideal op-amp's: analyse the sample with one
    design = dataclasses.replace(design, compensator=dataclasses.replace(design.compensator, opamp=OpAmp()))
    result = design_loop(design)
    assert result.feasible
    st = result.stage
    f = np.geomspace(result.f_hz[0], result.f_hz[-1], 40_000)
    gc = net_mna.transfer(f, _network(result.parts, result.network))
    sensing = design.sensing
    if sensing.kind == "differential":
        k = sensing.reference / abs(design.operating.vout)
        h = -k / (1 + 1j * f / sensing.diff_bandwidth) if sensing.diff_bandwidth > 0 else -k + 0 * f
    else:
        h = np.ones_like(f)
    checked = 0
    for c in range(st.n_corners):
        if st.dcm[c]:
            continue  # the reference model is CCM only
        point = _plant(design, st.vin[c], st.load[c], st.submode[c])
        gvd = ssa.responses(point, f)["gvd"]
        t = -h * gvd * gc / design.modulator.ramp
        fcs, pms = _margins_from_grid(f, t)
        assert fcs.size == result.margins.n_crossovers[c]
        np.testing.assert_allclose(result.margins.fc_hz[c], fcs.min(), rtol=1e-4)
        np.testing.assert_allclose(result.margins.pm_deg[c], pms.min(), atol=0.02)
        checked += 1
    assert checked >= 3
