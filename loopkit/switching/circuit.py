"""The switched power stage as one linear circuit per switch state.

Every topology, in every switch state, is a linear circuit ``x' = A x + b`` in the
states ``x = (iL, v0?, v1, ..., vk)``: the inductor current (flyback: the magnetising
current seen from the primary), the voltage of the zero-ESR capacitors merged into one
output-node capacitor ``v0`` (present only when some bank has no ESR), and the voltage
behind the ESR of every other bank.  The output-node voltage ``vo`` is then a state
(``v0``) or an algebraic function of the states (the node equation through the ESRs).

Switch states (index into the arrays):

``ON`` (0)
    The controlled switch conducts.
``OFF`` (1)
    The rectifier conducts (diode with its drop and series resistance, or the
    synchronous switch; in forced CCM the current may reverse).
``IDLE`` (2)
    DCM only: both off, the inductor current is held at zero (its row is ``iL' = -iL``
    from iL = 0, i.e. it stays 0) and the output is fed by the capacitors alone.

Inductor voltage per state, ``vL = a_g vg + a_o vo + a_f - r iL`` (Vf the rectifier's
drop, n = Np/Ns), and the current the switch network feeds into the output node,
``k_n iL``:

=============== =============================== ==============================================
topology        ON                              OFF
=============== =============================== ==============================================
buck            vg - vo - (Ron+DCR) iL;  k_n=1  -vo - Vf - (Rr+DCR) iL;  k_n=1
boost           vg - (Ron+DCR) iL;       k_n=0  vg - vo - Vf - (Rr+DCR) iL;  k_n=1
inverting b-b   vg - (Ron+DCR) iL;       k_n=0  vo - Vf - (Rr+DCR) iL;  k_n=-1 (vo < 0)
flyback         vg - (Ron+DCR) iL;       k_n=0  -n vo - n Vf - n^2 Rr iL;  k_n=n
=============== =============================== ==============================================

(the switched circuits of Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd
ed., 2001, ch. 2 and 6, written with the conduction drops; the flyback's primary DCR
carries current only while the switch is on).  The four-switch stage runs as a buck
(Q4 on: its resistance in the inductor path) or a boost (Q1 on) in the mode
:func:`loopkit.stages.four_switch.split` gives the corner; with diode rectifiers its
buck mode sees D4's drop in both states.  Series resistances below :data:`R_FLOOR` are
raised to it (as an ngspice switch's smallest on-resistance), so no state matrix is
singular.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..design import Design
from ..stages import four_switch

__all__ = ["IDLE", "OFF", "ON", "R_FLOOR", "STATES", "PlantCircuit", "plant_circuits"]

ON, OFF, IDLE = 0, 1, 2
STATES = ("on", "off", "idle")
#: Smallest series resistance in the inductor path, ohm (keeps every state matrix regular).
R_FLOOR = 1e-6


@dataclass(frozen=True, eq=False)
class PlantCircuit:
    """The switched power stage of one corner, per switch state.

    Attributes
    ----------
    a : ndarray (3, m, m)
        State matrices of ON, OFF, IDLE; states ``(iL, caps...)``.
    b : ndarray (3, m)
        Constant forcing at no extra load.
    b_ix : ndarray (3, m)
        Forcing per ampere of extra load current drawn from the output node.
    c_vo : ndarray (3, m), d_vo : ndarray (3,), d_vo_ix : ndarray (3,)
        ``vo = c_vo x + d_vo + d_vo_ix i_x`` in each state.
    dcm_capable : bool
        The rectifier stops at zero current (diode or diode emulation).
    topology : str
        The switched circuit simulated: buck, boost, inverting-buck-boost or flyback.
    vin, load, r_load : float
        The corner: input voltage, load current (A) and the load resistance |vout|/load.
    """

    a: np.ndarray
    b: np.ndarray
    b_ix: np.ndarray
    c_vo: np.ndarray
    d_vo: np.ndarray
    d_vo_ix: np.ndarray
    dcm_capable: bool
    topology: str
    vin: float
    load: float
    r_load: float

    @property
    def n_states(self) -> int:
        return self.a.shape[1]


def _inductor_terms(topology: str, st, vin: float, extra_drop: float):
    """Per state: (a_o, constant a_g vg + a_f, r, k_n) of ``vL = a_o vo + const - r iL``."""
    ron, rr, dcr, vf = st.r_switch, st.r_rectifier, st.dcr, st.vf
    if topology == "buck":
        on = (-1.0, vin - extra_drop, ron + dcr, 1.0)
        off = (-1.0, -vf - extra_drop, rr + dcr, 1.0)
    elif topology == "boost":
        on = (0.0, vin, ron + dcr, 0.0)
        off = (-1.0, vin - vf, rr + dcr, 1.0)
    elif topology == "inverting-buck-boost":
        on = (0.0, vin, ron + dcr, 0.0)
        off = (1.0, -vf, rr + dcr, -1.0)
    elif topology == "flyback":
        n = st.turns_ratio
        on = (0.0, vin, ron + dcr, 0.0)
        off = (-n, -n * vf, n * n * rr, n)
    else:  # pragma: no cover - the design validates topologies
        raise ValueError(topology)
    return on, off


def _one(topology: str, st, vin: float, load: float, vout: float, extra_drop: float) -> PlantCircuit:
    banks = [(b.c_total, b.esr_total) for b in st.output_caps]
    c0 = sum(c for c, esr in banks if esr == 0)
    esr_banks = [(c, esr) for c, esr in banks if esr > 0]
    has_c0 = c0 > 0
    m = 1 + int(has_c0) + len(esr_banks)
    r_load = abs(vout) / load
    on, off = _inductor_terms(topology, st, vin, extra_drop)
    idle = (0.0, 0.0, 0.0, 0.0)
    a = np.zeros((3, m, m))
    b = np.zeros((3, m))
    b_ix = np.zeros((3, m))
    c_vo = np.zeros((3, m))
    d_vo = np.zeros(3)
    d_vo_ix = np.zeros(3)
    lh = st.inductance
    first_esr = 1 + int(has_c0)
    for s, (a_o, const, r, k_n) in enumerate((on, off, idle)):
        # the output node: vo as a state or through the node equation
        if has_c0:
            c_vo[s, 1] = 1.0
        else:
            g = 1.0 / r_load + sum(1.0 / esr for _, esr in esr_banks)
            c_vo[s, 0] = k_n / g
            for j, (_, esr) in enumerate(esr_banks):
                c_vo[s, first_esr + j] = 1.0 / (esr * g)
            d_vo_ix[s] = -1.0 / g
        # inductor
        if s == IDLE:
            a[s, 0, 0] = -1.0  # iL enters at 0 and stays there
        else:
            a[s, 0, :] += a_o * c_vo[s] / lh
            a[s, 0, 0] -= max(r, R_FLOOR) / lh
            b[s, 0] = const / lh
            b_ix[s, 0] = a_o * d_vo_ix[s] / lh
        # capacitors behind their ESR: C v' = (vo - v) / ESR
        for j, (c, esr) in enumerate(esr_banks):
            row = first_esr + j
            a[s, row, :] += c_vo[s] / (esr * c)
            a[s, row, row] -= 1.0 / (esr * c)
            b_ix[s, row] = d_vo_ix[s] / (esr * c)
        if has_c0:  # C0 v0' = k_n iL - v0/R - i_x - sum (v0 - v_j)/ESR_j
            a[s, 1, 0] += k_n / c0
            a[s, 1, 1] -= 1.0 / (r_load * c0)
            for j, (_, esr) in enumerate(esr_banks):
                a[s, 1, 1] -= 1.0 / (esr * c0)
                a[s, 1, first_esr + j] += 1.0 / (esr * c0)
            b_ix[s, 1] = -1.0 / c0
    return PlantCircuit(a, b, b_ix, c_vo, d_vo, d_vo_ix, st.light_load_mode == "dcm", topology, float(vin),
                        float(load), float(r_load))


def plant_circuits(design: Design, vin: np.ndarray, load: np.ndarray) -> list[PlantCircuit]:
    """The switched circuit of every corner (``vin``, ``load`` arrays over corners).

    The four-switch stage gets the mode of :func:`loopkit.stages.four_switch.split`
    (its buck mode as a buck with Q4's resistance in the inductor path, its boost mode
    as a boost with Q1's), as the averaged model runs it.
    """
    st, vout = design.stage, design.operating.vout
    vin = np.asarray(vin, float)
    load = np.asarray(load, float)
    out: list[PlantCircuit | None] = [None] * vin.size
    if st.topology == "four-switch-buck-boost":
        for idx, sub, _module, _label in four_switch.split(st, vin, load, vout):
            topo = sub.topology
            drop = st.vf if topo == "buck" else 0.0
            for k in idx:
                out[k] = _one(topo, sub, vin[k], load[k], vout, drop)
    else:
        for k in range(vin.size):
            out[k] = _one(st.topology, st, vin[k], load[k], vout, 0.0)
    return out
