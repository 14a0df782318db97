"""Independent AC nodal analysis of op-amp networks, for the tests.

Modified nodal analysis (MNA) written from Kirchhoff's current law with the
usual element stamps (e.g. C.-W. Ho, A. E. Ruehli, P. A. Brennan, "The modified
nodal approach to network analysis", IEEE Trans. Circuits and Systems 22(6),
1975).  Nothing from ``loopkit`` is imported: the circuits are described here
from their diagrams and solved with ``numpy.linalg.solve`` frequency by
frequency.

Elements (node names are strings; ``"0"`` is ground):

``("R", a, b, ohm)``, ``("C", a, b, farad)``
    Two-terminal admittances ``1/R`` and ``s C``.
``("OPAMP", plus, minus, out, gain)``
    Op-amp whose output is an ideal voltage source to ground:
    ``V(out) = A(s) (V(plus) - V(minus))`` with ``gain`` a callable of s
    (rad/s) or None for an ideal amplifier (then ``V(plus) = V(minus)``, the
    output current free: a nullor).

A 1 V AC source drives node ``in``; :func:`transfer` returns V(out)/V(in).
"""

from __future__ import annotations

import numpy as np

__all__ = ["inverting_type1", "inverting_type2", "inverting_type3", "one_pole_opamp", "transfer"]


def one_pole_opamp(a0: float | None, gbw_hz: float | None):
    """Open-loop gain ``A(s)`` of a one-pole op-amp as a callable; None if ideal.

    ``a0`` (V/V) None = infinite dc gain; ``gbw_hz`` None = infinite bandwidth.
    ``A = a0 / (1 + s a0 / (2 pi gbw))``; with only ``gbw``: ``2 pi gbw / s``.
    """
    if a0 is None and gbw_hz is None:
        return None
    if gbw_hz is None:
        return lambda s: a0 + 0 * s
    wt = 2 * np.pi * gbw_hz
    if a0 is None:
        return lambda s: wt / s
    return lambda s: a0 / (1 + s * a0 / wt)


def transfer(f_hz, elements, out: str = "out") -> np.ndarray:
    """V(out)/V(in) at each frequency (complex), 1 V AC at node ``in``."""
    nodes = sorted({n for e in elements for n in e[1:] if isinstance(n, str)} - {"0"} | {"in"})
    index = {n: i for i, n in enumerate(nodes)}
    n_v = len(nodes)
    opamps = [e for e in elements if e[0] == "OPAMP"]
    size = n_v + 1 + len(opamps)  # node voltages, source current, op-amp output currents
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    h = np.empty(f.size, dtype=complex)
    for k, fk in enumerate(f):
        s = 2j * np.pi * fk
        m = np.zeros((size, size), dtype=complex)
        rhs = np.zeros(size, dtype=complex)

        def node(name):
            return None if name == "0" else index[name]

        for e in elements:
            if e[0] in ("R", "C"):
                a, b = node(e[1]), node(e[2])
                y = 1.0 / e[3] if e[0] == "R" else s * e[3]
                for i, j, v in ((a, a, y), (b, b, y), (a, b, -y), (b, a, -y)):
                    if i is not None and j is not None:
                        m[i, j] += v
        # voltage source at "in": current j_src leaves the source into node "in"
        src = n_v
        m[index["in"], src] += -1.0  # KCL rows: sum of currents leaving = 0; source injects j_src
        m[src, index["in"]] = 1.0
        rhs[src] = 1.0
        for q, (_, plus, minus, o, gain) in enumerate(opamps):
            row = n_v + 1 + q
            m[node(o), row] += -1.0  # op-amp output current injected into node o
            p, n_, oo = node(plus), node(minus), node(o)
            if gain is None:  # nullor: V(plus) - V(minus) = 0
                if p is not None:
                    m[row, p] += 1.0
                if n_ is not None:
                    m[row, n_] -= 1.0
            else:  # V(o) - A (V(plus) - V(minus)) = 0
                a_s = gain(s)
                m[row, oo] += 1.0
                if p is not None:
                    m[row, p] -= a_s
                if n_ is not None:
                    m[row, n_] += a_s
        x = np.linalg.solve(m, rhs)
        h[k] = x[index[out]]
    return h


def _common(r1, rb, gain):
    el = [("R", "in", "inv", r1), ("OPAMP", "0", "inv", "out", gain)]
    if rb is not None:
        el.append(("R", "inv", "0", rb))
    return el


def inverting_type1(r1, c1, rb=None, gain=None):
    """Type I: R1 in -> inv, C1 inv -> out, optional Rb inv -> ground."""
    return _common(r1, rb, gain) + [("C", "inv", "out", c1)]


def inverting_type2(r1, r2, c1, c2, rb=None, gain=None):
    """Type II: R1 input; R2 in series with C1 and C2 across both, inv -> out."""
    return _common(r1, rb, gain) + [("R", "inv", "x2", r2), ("C", "x2", "out", c1), ("C", "inv", "out", c2)]


def inverting_type3(r1, r2, r3, c1, c2, c3, rb=None, gain=None):
    """Type III: Type II plus R3 in series with C3 across R1."""
    return inverting_type2(r1, r2, c1, c2, rb, gain) + [("R", "in", "x3", r3), ("C", "x3", "inv", c3)]
