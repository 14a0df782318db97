"""Closed-loop switching transients in ngspice: the converter, its comparator and the real network.

An independent reference for loopkit's built-in switching simulator
(:mod:`loopkit.switching`): the power stage, clock, latch and comparator are the deck of
:mod:`tests.reference.pcm_spice` (peak current mode: ``Ri i_L + Se t`` against the control
voltage; voltage mode is the same comparator with ``Ri = 0`` and the PWM ramp
``Se = Vramp / Ts``), and in place of its fixed control voltage the error amplifier is the
network's own circuit: the element lines of the network's ngspice deck (resistors,
capacitors, the divider's bottom resistor, the reference and the op-amp subcircuit with its
finite gain and gain-bandwidth; the same deck tests/test_netlist_ngspice.py checks against
its AC response), with its input on the converter output through an injection source and
its output driving the comparator.  loopkit's switching simulator instead realises the
network's transfer function as a state space: the two meet only in the network's parts.

Start: the inductor, the output capacitors and every network capacitor start at the
averaged operating point (given by the test: the duty's control voltage and the output),
so the loop settles in a few hundred periods; measurements start after that.

* ``ISTEP out 0 PWL(...)``: a load-current step drawn from the output at a clock edge.
* ``VINJ fb out SIN(0 a f)``: the series injection of a network analyser; ``v(fb)`` is the
  network side X, ``v(out)`` the output side Y, T = -Y/X from single-bin Fourier integrals
  over whole injection periods (exact for the piecewise-linear interpolant of the solver's
  own time points, as in :mod:`tests.reference.pcm_spice`).

Source: ngspice (Debian package ``ngspice``, version 39), ``ngspice -b``.
"""

from __future__ import annotations

import re

import numpy as np

from . import pcm_spice

__all__ = ["dc_voltages", "fourier", "moving_average", "network_lines", "run", "sense_lines", "settled_vc"]


def network_lines(deck: str, vc0: float, vout: float, input_node: str = "fb") -> list[str]:
    """Element and subcircuit lines of a network's AC deck, rewired and given initial conditions.

    Nodes: ``in`` becomes ``input_node`` (``fb``, after the injection source, or the sensing
    amplifier's output), ``out`` becomes ``vc`` (the comparator's control voltage), every
    other node gets a ``n_`` prefix; element names get an ``N`` suffix.  Capacitors get
    ``ic=`` from the network's dc solution with the input at ``vout`` and the output at
    ``vc0`` (:func:`dc_voltages`); the op-amp subcircuit's pole capacitor starts at its
    output's voltage.
    """
    lines = deck.splitlines()
    start = next(i for i, ln in enumerate(lines) if ln.upper().startswith("VIN "))
    stop = next(i for i, ln in enumerate(lines) if ln.strip().lower() == ".control")
    body = lines[start + 1:stop]
    elements, subckt, inside = [], [], False
    for ln in body:
        if ln.lower().startswith(".subckt"):
            inside = True
        (subckt if inside else elements).append(ln)
        if ln.lower().startswith(".ends"):
            inside = False

    def rename(node):
        return {"in": input_node, "out": "vc", "0": "0"}.get(node, f"n_{node}")

    parsed = []
    for ln in elements:
        tok = ln.split()
        name = tok[0]
        kind = name[0].upper()
        if kind in "RCV":
            nodes, rest = tok[1:3], tok[3:]
        elif kind == "F":  # F n+ n- Vcontrol gain: the controlling source is renamed too
            nodes, rest = tok[1:3], [f"{tok[3]}N", *tok[4:]]
        elif kind == "X":
            nodes, rest = tok[1:-1], tok[-1:]
        else:
            raise ValueError(f"unexpected network element {ln!r}")
        parsed.append((name, kind, [rename(n) for n in nodes], rest))
    volts = dc_voltages(parsed, {input_node: vout}, {"vc": vc0})
    out, amp_out = [], None
    for name, kind, nodes, rest in parsed:
        line = " ".join([f"{name}N", *nodes, *rest])
        if kind == "C":
            line += f" ic={volts[nodes[0]] - volts[nodes[1]]:.12g}"
        if kind == "X":
            amp_out = volts[nodes[2]]
        out.append(line)
    for ln in subckt:
        if ln.split()[0].lower() == "cpole":
            ln += f" ic={amp_out:.12g}"
        out.append(ln)
    return out


def dc_voltages(parsed, driven: dict, held: dict) -> dict:
    """Node voltages of the network at dc: capacitors open, op-amps ideal (inputs equal).

    Modified nodal analysis: Kirchhoff's current law at every node; a voltage source (and
    every ``driven`` node, fed by a source) adds its branch current as an unknown; an
    op-amp adds ``v+ = v-`` and its output current; a CCCS ``F`` adds ``gain I(Vcontrol)``.
    ``held`` nodes (the comparator's input: no current flows into it) add ``v = value``
    without a branch current, which leaves the equations one more than the unknowns: they
    are consistent when ``driven`` is the output the network regulates to (the dc of an
    integrating network), and solved by least squares otherwise.
    """
    nodes = sorted({n for _, _, ns, _ in parsed for n in ns} | set(driven) | set(held) - {"0"})
    nodes = [n for n in nodes if n != "0"]
    idx = {n: i for i, n in enumerate(nodes)}
    branches = [name for name, kind, _, _ in parsed if kind in "VX"] + [f"drive_{n}" for n in driven]
    bidx = {b: len(nodes) + i for i, b in enumerate(branches)}
    n_unk = len(nodes) + len(branches)
    rows, rhs = [], []
    kcl = np.zeros((len(nodes), n_unk))

    def stamp(node, col, val):
        if node != "0":
            kcl[idx[node], col] += val

    for name, kind, (a, b, *more), rest in parsed:
        if kind == "R":
            g = 1.0 / float(rest[0])
            for p, q, sgn in ((a, a, 1), (a, b, -1), (b, b, 1), (b, a, -1)):
                if p != "0" and q != "0":
                    kcl[idx[p], idx[q]] += sgn * g
        elif kind == "V":  # current from a through the source to b leaves a
            stamp(a, bidx[name], 1.0)
            stamp(b, bidx[name], -1.0)
            row = np.zeros(n_unk)
            if a != "0":
                row[idx[a]] += 1
            if b != "0":
                row[idx[b]] -= 1
            rows.append(row)
            rhs.append(float(rest[-1]))
        elif kind == "F":
            ctrl = next(n for n, k, _, _ in parsed if f"{n}N" == rest[0])
            stamp(a, bidx[ctrl], float(rest[1]))
            stamp(b, bidx[ctrl], -float(rest[1]))
        elif kind == "X":  # inp = a, inn = b, output more[0]: its current enters the output node
            stamp(more[0], bidx[name], -1.0)
            row = np.zeros(n_unk)
            row[idx[a]] += 1
            row[idx[b]] -= 1
            rows.append(row)
            rhs.append(0.0)
    for n, v in driven.items():
        stamp(n, bidx[f"drive_{n}"], -1.0)
        row = np.zeros(n_unk)
        row[idx[n]] = 1
        rows.append(row)
        rhs.append(v)
    for n, v in held.items():
        row = np.zeros(n_unk)
        row[idx[n]] = 1
        rows.append(row)
        rhs.append(v)
    mat = np.vstack([kcl, np.array(rows)])
    vec = np.concatenate([np.zeros(len(nodes)), rhs])
    sol = np.linalg.lstsq(mat, vec, rcond=None)[0]
    return {"0": 0.0, **{n: float(sol[i]) for n, i in idx.items()}}


def sense_lines(gain: float, bandwidth_hz: float, vout: float) -> list[str]:
    """A differential sensing amplifier from ``fb`` to ``sns``: ``gain v(fb)`` through one pole.

    A VCVS into an RC (1 kohm, the pole at ``bandwidth_hz``; none when 0) and a unity buffer;
    the capacitor starts at ``gain vout``.
    """
    v0 = gain * vout
    if bandwidth_hz <= 0:
        return [f"EDIF sns 0 fb 0 {gain:.12g}"]
    c = 1.0 / (2.0 * np.pi * 1e3 * bandwidth_hz)
    return [f"EDIF n_dx 0 fb 0 {gain:.12g}", "RDIF n_dx n_dy 1k", f"CDIF n_dy 0 {c:.12g} ic={v0:.12g}",
            "EDIFB sns 0 n_dy 0 1"]


def run(case: pcm_spice.PcmCase, net_deck: str, vc0: float, state0, periods: int, *, t_keep_s: float = 0.0,
        step=None, inject=None, max_step_frac: float = 0.1, sense=None) -> dict:
    """Run the closed loop for ``periods`` switching periods; data from ``t_keep_s`` on.

    ``step``: (time s, amplitude A) of a load-current step drawn from the output;
    ``inject``: (amplitude V, frequency Hz) of the series injection; ``max_step_frac``: the
    solver's largest time step in periods (the ripple's extremes need small steps: with Ts/10
    a parabolic ripple's peak is missed by about 1 %); ``sense``: (gain, bandwidth Hz) of a
    differential sensing amplifier between the injection and the network (:func:`sense_lines`;
    default none: the network's input is the output itself).  The network's capacitors start
    at its dc solution with its input at the first bank's start voltage ``state0[1]`` (through
    the sensing gain) and its output at ``vc0``.
    Returns ``{"t", "v", "fb", "il"}`` at the solver's own time points.
    """
    text = pcm_spice.netlist(case, vc0, state0, periods, t_start_s=t_keep_s)
    lines = [ln for ln in text.splitlines() if not ln.startswith("VC vc 0")]
    lines = [re.sub(r"^wrdata out.txt .*$", "wrdata out.txt v(out) v(fb) i(VSL)", ln) for ln in lines]
    lines = [f"{ln.rsplit(' ', 2)[0]} {max_step_frac * case.ts_s:.9g} uic" if ln.startswith(".tran") else ln
             for ln in lines]
    amp, f = inject if inject is not None else (0.0, 0.0)
    extra = [f"VINJ fb out SIN(0 {amp:.12g} {f:.12g})" if inject is not None else "VINJ fb out DC 0"]
    if step is not None:
        t1, di = step
        e = pcm_spice._EDGE * case.ts_s
        extra.append(f"ISTEP out 0 PWL(0 0 {t1:.12g} 0 {t1 + e:.12g} {di:.12g})")
    v_start = float(state0[1])
    if sense is None:
        extra += network_lines(net_deck, vc0, v_start)
    else:
        extra += sense_lines(sense[0], sense[1], v_start)
        extra += network_lines(net_deck, vc0, sense[0] * v_start, input_node="sns")
    end = lines.index(".options reltol=1e-4 abstol=1e-10 vntol=1e-8 itl4=50")
    deck = "\n".join(lines[:end] + extra + lines[end:]) + "\n"
    data = pcm_spice._run(deck, periods * case.ts_s)
    return {"t": data[:, 0], "v": data[:, 1], "fb": data[:, 2], "il": data[:, 3], "deck": deck}


def fourier(t, y, f_hz, t_a, t_b) -> complex:
    """``int y e^{-j w t} dt`` over [t_a, t_b] for the piecewise-linear interpolant of (t, y)."""
    return pcm_spice._fourier(t, y, f_hz, t_a, t_b)


def moving_average(t, y, width):
    """One-period trailing moving average of the piecewise-linear (t, y), at the points t."""
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(t))])
    return (cum - np.interp(t - width, t, cum)) / width


def settled_vc(case: pcm_spice.PcmCase, net_deck: str, vc0: float, state0, *, dv: float, periods: int = 300,
               sense=None, max_step_frac: float = 0.05) -> tuple[float, float]:
    """The start control voltage that leaves the ngspice closed loop without a slow drift.

    An integrating network's slowest closed-loop mode (the pole near its low-frequency zero)
    is set off by any mismatch between the integrator's start and the state the switched
    circuit in ngspice needs (the latch's turn-on and turn-off delays alone, about 3e-4 Ts,
    are a duty offset the integrator must absorb); with a zero at 25 Hz and fsw = 500 kHz it
    decays over thousands of periods.  The circuit is linear in the start state for a fixed
    switching sequence, so the drift of the output after ``periods`` (its mean over the last
    50 periods minus that over the 50 before) is affine in the start control voltage: two
    runs (``vc0`` and ``vc0 + dv``, in parallel) and one secant step zero it.  Only the
    integrator's start changes; the answer is ngspice's own (nothing of loopkit enters but
    the first guess ``vc0``).

    Returns
    -------
    (vc_v, drift_v) : the start control voltage and the drift of the first run (V per 50 periods).
    """
    from concurrent.futures import ThreadPoolExecutor

    ts = case.ts_s

    def drift(vc):
        res = run(case, net_deck, vc, state0, periods, t_keep_s=(periods - 101) * ts, sense=sense,
                  max_step_frac=max_step_frac)
        t, v = res["t"], res["v"]
        return pcm_spice._mean(t, v, (periods - 50) * ts, periods * ts) - pcm_spice._mean(
            t, v, (periods - 100) * ts, (periods - 50) * ts)

    with ThreadPoolExecutor(max_workers=2) as pool:
        d0, d1 = pool.map(drift, [vc0, vc0 + dv])
    if d1 == d0:
        return vc0, d0
    return vc0 - d0 * dv / (d1 - d0), d0
