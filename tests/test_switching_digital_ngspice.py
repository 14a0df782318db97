"""The digital loop's switching simulation replayed in ngspice.

ngspice has no fixed-point controller, so the check is a replay: loopkit runs the loop as built (ADC,
fixed-point controller, counter PWM) through a load step, and ngspice drives the real switched circuit of
the same stage (tests/reference/switching.py: switches, rectifier, inductor with DCR, every capacitor bank
behind its ESR, the load) with the very gate edges the controller chose, from the same start state, with
the same load step.  If the converter's output at every sampling instant agrees to well under one ADC
code, ngspice's converter would have given the controller the same codes, so the closed loop in ngspice
would have taken the same decisions: the loop is checked through its only input.

Outside reference: ngspice (transient of the switched circuit, PWL gate sources with edges of 1e-5 Ts).
"""

import numpy as np
import pytest

import loopkit
from loopkit.loop import LoopSession
from loopkit.switching import closed_loop_setup
from loopkit.switching.digital import settle
from tests.reference import switching as spice

pytestmark = [pytest.mark.slow, pytest.mark.ngspice]


def _pwl(name: str, edges, ts: float, first_high: bool) -> str:
    """A PWL gate source: 1 from each switch-on to switch-off instant (0 elsewhere), or its complement.

    Each edge ramps over ``EDGE Ts`` from the instant, as the open-loop deck's PULSE does (the switch flips
    half a ramp later: 5e-6 Ts)."""
    tr = spice.EDGE * ts
    hi, lo = (1, 0) if first_high else (0, 1)
    pts = []
    for j, (rise, fall) in enumerate(edges):
        if fall - rise <= 2 * tr:
            continue
        t0 = j * ts
        pts += [(t0 + rise, lo), (t0 + rise + tr, hi), (t0 + fall, hi), (t0 + fall + tr, lo)]
    if not pts or pts[0][0] > 0:
        pts.insert(0, (0.0, lo))
    body = " ".join(f"{t:.12g} {v}" for t, v in pts)
    return f"{name} PWL({body})"


@pytest.mark.parametrize("name,corner,step_a", [("buck_dsp_5v", 1, 1.0), ("inverting_mcu_minus12v", 3, 0.3)])
def test_replay_of_the_built_loop_in_ngspice(name, corner, step_a):
    """300 periods after a load step at a clock edge: the output at every sampling instant within 0.01 of an
    ADC code referred to the output (ngspice's own accuracy here is about 1e-5 of the output: reltol 1e-5,
    steps of Ts/100; the open-loop comparison in tests/test_switching_ngspice.py).  Measured: 2.5 uV against
    a 2.44 mV code (DSP buck, the controller's output moving over 834 PWM steps), 9.5 uV against 25.8 mV
    (MCU inverting)."""
    res = LoopSession(loopkit.load_design(f"sample_designs/{name}.toml")).run()
    setup = closed_loop_setup(res)
    eng, stage = setup.engine, res.stage
    sampler, z, _, _ = settle(setup, [corner])
    sign = 1.0 if res.design.operating.vout > 0 else -1.0
    eng.set_load(sampler.lanes, sign * step_a)
    z0 = z.copy()
    first = sampler.periods_run
    periods = 300
    vo = []
    n_edges = len(sampler.edges)
    for j in range(periods):
        vo.append(float(eng.output(sampler.lanes, z, int(sampler.last_state[0]))[0]))
        z = sampler.period(z, first + j)
    edges = [(float(r[0]), float(f[0])) for r, f in sampler.edges[n_edges:]]
    u = np.array(sampler.outputs[-periods:])[:, 0]
    assert np.ptp(u) > 10  # the controller moved the edges
    ts = eng.ts
    vin, load = float(stage.vin[corner]), float(stage.load[corner])
    text = spice.netlist(res.design, vin, load, 0.5, state0=z0[0, :eng.m], periods=periods)
    lines = [ln for ln in text.splitlines() if not ln.startswith(("VG ", "VGN "))]
    step_line = f"ISTEP out 0 DC {step_a:.9g}" if sign > 0 else f"ISTEP 0 out DC {step_a:.9g}"
    lines[1:1] = [_pwl("VG g 0", edges, ts, True), _pwl("VGN gn 0", edges, ts, False), step_line]
    out = spice._run("\n".join(lines) + "\n", periods * ts)
    t_s = np.arange(periods) * ts
    v_spice = np.interp(t_s, out["t"], out["v"])
    lsb_out = float(res.digital.adc_lsb_out_v[corner])
    err = np.abs(v_spice - np.array(vo))
    assert np.max(err) < 0.01 * lsb_out, (np.max(err), lsb_out)
