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

__all__ = ["fourier", "moving_average", "network_lines", "run"]


def network_lines(deck: str, vc0: float, vout: float) -> list[str]:
    """Element and subcircuit lines of a network's AC deck, rewired and given initial conditions.

    Nodes: ``in`` becomes ``fb`` (after the injection source), ``out`` becomes ``vc`` (the
    comparator's control voltage), every other node gets a ``n_`` prefix.  Capacitors get
    ``ic=`` from the dc node voltages: fb = vout, the reference and the inverting input at the
    reference, vc = vc0, other nodes the voltage of a node a resistor ties them to (no dc
    current flows into a capacitor).
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
        return {"in": "fb", "out": "vc", "0": "0"}.get(node, f"n_{node}")

    parsed = []
    for ln in elements:
        tok = ln.split()
        name = tok[0]
        kind = name[0].upper()
        if kind in "RCV":
            nodes, rest = tok[1:3], tok[3:]
        elif kind == "X":
            nodes, rest = tok[1:-1], tok[-1:]
        else:
            raise ValueError(f"unexpected network element {ln!r}")
        parsed.append((name, kind, [rename(n) for n in nodes], rest))
    volts = {"0": 0.0, "fb": vout, "vc": vc0}
    for name, kind, nodes, rest in parsed:
        if kind == "V":  # the reference: Vref ref 0 DC x
            volts[nodes[0]] = float(rest[-1])
    for name, kind, nodes, rest in parsed:  # the op-amp holds its inverting input at the reference
        if kind == "X":
            volts.setdefault(nodes[1], volts.get(nodes[0], 0.0))
    for _ in range(len(parsed)):
        for name, kind, nodes, rest in parsed:
            if kind == "R":
                a, b = nodes
                if a in volts and b not in volts:
                    volts[b] = volts[a]
                elif b in volts and a not in volts:
                    volts[a] = volts[b]
    out = []
    for name, kind, nodes, rest in parsed:
        line = " ".join([f"{name}N", *nodes, *rest])
        if kind == "C":
            line += f" ic={volts.get(nodes[0], 0.0) - volts.get(nodes[1], 0.0):.12g}"
        out.append(line)
    for ln in subckt:
        if ln.split()[0].lower() == "cpole":
            ln += f" ic={vc0:.12g}"
        out.append(ln)
    return out


def run(case: pcm_spice.PcmCase, net_deck: str, vc0: float, state0, periods: int, *, t_keep_s: float = 0.0,
        step=None, inject=None, max_step_frac: float = 0.1) -> dict:
    """Run the closed loop for ``periods`` switching periods; data from ``t_keep_s`` on.

    ``step``: (time s, amplitude A) of a load-current step drawn from the output;
    ``inject``: (amplitude V, frequency Hz) of the series injection; ``max_step_frac``: the
    solver's largest time step in periods (the ripple's extremes need small steps: with Ts/10
    a parabolic ripple's peak is missed by about 1 %).
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
    extra += network_lines(net_deck, vc0, case.vout_v)
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
