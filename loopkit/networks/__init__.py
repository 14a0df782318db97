"""Compensator networks: one module per network, registered by design-file name.

Every network module provides (``ctx`` is a :class:`NetworkContext`):

``NAME``, ``TITLE``, ``SHORT_TITLE``
    Its design-file name (``compensator.network``) and how it is called, e.g.
    ``"type3"``, ``"Type III, op-amp"``, ``"Type III"``.
``AMPLIFIER``
    ``"op-amp"``, ``"transconductance"`` or ``"optocoupler"``: which of
    ``[compensator.opamp]`` (gain_db, gbw or gm, r_out) and ``[compensator.opto]`` apply.
``HARD_BOOST_DEG``, ``PRACTICAL_BOOST_DEG``
    The phase boost its zero-pole pairs can give at most, and in practice.

``DESIGNATORS``
    tuple of the designators of the parts it needs, e.g. ``("R1", "R2", "C1", "C2")``;
    a designator starting with R is a resistor (ohm), with C a capacitor (F).
    Other parameters (CTR, gm...) come from the context, not from parts.
``OPTIONAL_DESIGNATORS``
    parts it accepts but can do without (e.g. the divider's bottom resistor
    ``Rb``, computed from R1 and the reference when absent).
``transfer(parts, ctx) -> Rational``
    The signed transfer function V(out)/V(in) of the network as one corner,
    V(in) being the voltage it senses (converter output, or the differential
    amplifier's output) and V(out) the error-amplifier output that drives the
    modulator.  Op-amp finite gain and bandwidth are included when
    ``ctx.opamp`` gives them.
``synthesise(fc_hz, gain_at_fc, zeros_hz, poles_hz, ctx, fixed) -> dict``
    Exact parts that put the network's zeros and poles (ideal amplifier) at the
    given frequencies and make ``|H(j 2 pi fc)| = gain_at_fc``; ``fixed`` holds
    parts the designer fixed (at least ``R1`` where the network has one).
    Raises :class:`~loopkit.errors.InfeasibleDesign` when no parts can do it.
``poles_zeros(parts, ctx) -> (zeros_hz, poles_hz)``
    Zeros and poles in Hz (positive numbers for left-half-plane roots; an
    integrator is a pole at 0) of the ideal-amplifier network.
``netlist(parts, ctx, title) -> str``
    An ngspice-runnable deck: an AC source drives node ``in``, the output is
    node ``out``, so V(out)/V(in) equals :func:`transfer`.
``ZEROS``, ``POLES``
    How many zeros and (non-origin) poles :func:`synthesise` places.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass, field
from types import ModuleType
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # the design imports the registry; the context needs the op-amp only when built
    from ..design import OpAmp

__all__ = ["NETWORKS", "NETWORK_MODULE_NAMES", "NetworkContext", "network_module", "network_title"]

NETWORK_MODULE_NAMES = {
    "type1": "type1",
    "type2": "type2",
    "type3": "type3",
    "gm-type2": "gm_type2",
    "opto-type2": "opto_type2",
}

#: Network names accepted in ``compensator.network``.
NETWORKS = tuple(NETWORK_MODULE_NAMES)


def _ideal_opamp():
    from ..design import OpAmp

    return OpAmp()


@dataclass(frozen=True)
class NetworkContext:
    """What a network needs besides its parts.

    Attributes
    ----------
    opamp : OpAmp
        Error amplifier: open-loop gain (dB) and gain-bandwidth (Hz) of an
        op-amp (0 = ideal), or transconductance (S) and output resistance (ohm)
        of a gm amplifier.
    vref : float
        Reference voltage of the error amplifier, V.
    v_sensed : float
        DC voltage at the network input (|vout|, or the differential amplifier
        output), V; with ``vref`` it sets the divider's bottom resistor.
    opto : dict
        Optocoupler network parameters: ``ctr`` (current-transfer ratio),
        ``r_pull`` (pull-up, ohm), ``r_led`` (LED series resistor, ohm),
        ``c_opto`` (the optocoupler's own collector capacitance, F).
    """

    opamp: OpAmp = field(default_factory=_ideal_opamp)
    vref: float = 0.8
    v_sensed: float = 3.3
    opto: dict = field(default_factory=dict)

    @property
    def divider_ratio(self) -> float:
        return self.vref / self.v_sensed


def network_module(name: str) -> ModuleType:
    """The module implementing network ``name`` (one of :data:`NETWORKS`)."""
    return importlib.import_module(f".{NETWORK_MODULE_NAMES[name]}", __name__)


def network_title(name: str) -> str:
    """The network's title, e.g. ``"Type III, op-amp"``."""
    return network_module(name).TITLE
