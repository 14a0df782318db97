"""The ``[losses]`` design-file section: what the stage's conduction model leaves out.

The power stage (``[stage]``) already carries the conduction losses: switch and
rectifier on-resistances, the inductor's DCR, the diode drop, the capacitor
banks' ESR.  ``[losses]`` adds, all optional, the figures the efficiency per
corner needs beyond them (:mod:`loopkit.efficiency` turns them into watts)::

    [losses]
    turn_on_time = "12n"         # s, voltage/current overlap of the controlled switch at turn-on
    turn_off_time = "8n"         # s, ... at turn-off
    # or, instead of the two times: each transition lasts switching_charge / gate_current
    switching_charge = "4n"      # C (gate charge from threshold to the end of the plateau)
    gate_current = "1"           # A (gate driver's source and sink current)
    gate_charge = "12n"          # C, total gate charge of each switching transistor
    gate_voltage = "5"           # V, gate-drive voltage
    coss_switch = "400p"         # F, output capacitance (energy-equivalent) of each controlled switch
    coss_rectifier = "400p"      # F, of each rectifier switch (a diode: its junction capacitance)
    recovery_charge = "20n"      # C, reverse-recovery charge of the diode (or the synchronous switch's body diode)
    dead_time = "20n"            # s, each of the two dead times per period (synchronous rectifier)
    body_diode_drop = "0.7"      # V, body-diode drop during the dead time
    core_k = 3.2                 # Steinmetz coefficients, SI: P/V = k f^alpha B^beta, W/m^3, f in Hz, B in T
    core_alpha = 1.46
    core_beta = 2.75
    core_volume = "1.1u"         # m^3 (1.1 cm^3)
    core_area = "20u"            # m^2 (20 mm^2), effective cross-section
    core_turns = 9               # turns of the winding whose inductance is stage.inductance
    input_esr = "5m"             # ohm, input capacitor bank's ESR (it carries the input's ripple current)
    quiescent_power = "30m"      # W, controller (and its regulator) drawn from the input

A figure left out counts as zero and the efficiency report says which ones it
omits.  Groups must be complete: the two overlap times together (or the
switching charge with the gate current, not both), the gate charge with its
voltage, the dead time with the body-diode drop, and all six core figures.
The dead time applies to a synchronous rectifier only: with a diode it is
not counted (the efficiency report says so), so switching a design's
rectifier keeps it valid.  The Steinmetz coefficients are the user's
own fit to a datasheet's loss curves; loopkit ships no vendor data.

Ranges are in :data:`loopkit.bounds.BOUNDS` (``losses.*``).
"""

from __future__ import annotations

from dataclasses import dataclass, fields

from . import bounds
from .errors import DesignError
from .units import parse_value

__all__ = ["LOSS_GROUPS", "LOSS_KEYS", "Losses", "losses_from_table", "losses_to_table"]

#: Design-file key -> (field of :class:`Losses`, unit accepted after the number; None: a plain number).
LOSS_KEYS: dict[str, tuple[str, str | None]] = {
    "turn_on_time": ("turn_on_s", "s"),
    "turn_off_time": ("turn_off_s", "s"),
    "switching_charge": ("switching_charge_c", "C"),
    "gate_current": ("gate_current_a", "A"),
    "gate_charge": ("gate_charge_c", "C"),
    "gate_voltage": ("gate_voltage_v", "V"),
    "coss_switch": ("coss_switch_f", "F"),
    "coss_rectifier": ("coss_rectifier_f", "F"),
    "recovery_charge": ("recovery_charge_c", "C"),
    "dead_time": ("dead_time_s", "s"),
    "body_diode_drop": ("body_diode_v", "V"),
    "core_k": ("core_k", None),
    "core_alpha": ("core_alpha", None),
    "core_beta": ("core_beta", None),
    "core_volume": ("core_volume_m3", None),
    "core_area": ("core_area_m2", None),
    "core_turns": ("core_turns", None),
    "input_esr": ("input_esr_ohm", "ohm"),
    "quiescent_power": ("quiescent_w", "W"),
}

#: Keys that only mean something together (design-file keys).
LOSS_GROUPS: tuple[tuple[str, ...], ...] = (
    ("turn_on_time", "turn_off_time"),
    ("switching_charge", "gate_current"),
    ("gate_charge", "gate_voltage"),
    ("dead_time", "body_diode_drop"),
    ("core_k", "core_alpha", "core_beta", "core_volume", "core_area", "core_turns"),
)

_FIELD_KEY = {f: k for k, (f, _) in LOSS_KEYS.items()}


@dataclass(frozen=True)
class Losses:
    """Loss figures beyond conduction; None = not given (counted as zero, and reported as omitted).

    Attributes
    ----------
    turn_on_s, turn_off_s : float or None
        Duration of the voltage/current overlap of each controlled switch at turn-on and at
        turn-off, s.
    switching_charge_c, gate_current_a : float or None
        Instead of the two times: the switching charge (C) moved by the gate current (A); each
        transition lasts ``switching_charge_c / gate_current_a``.
    gate_charge_c, gate_voltage_v : float or None
        Total gate charge of each switching transistor (C) and the drive voltage (V).
    coss_switch_f, coss_rectifier_f : float or None
        Energy-equivalent output capacitance of each controlled switch and of each rectifier
        (synchronous switch, or a diode's junction capacitance), F.
    recovery_charge_c : float or None
        Reverse-recovery charge of the rectifier diode (synchronous: of the body diode), C.
    dead_time_s, body_diode_v : float or None
        Each dead time (two per period) and the body-diode drop during it (synchronous only).
    core_k, core_alpha, core_beta : float or None
        Steinmetz coefficients in SI units: loss per volume ``k f^alpha B^beta`` in W/m^3 with
        f in Hz and the peak flux density swing B in T.
    core_volume_m3, core_area_m2, core_turns : float or None
        Effective core volume (m^3) and cross-section (m^2), and the turns of the winding whose
        inductance is ``stage.inductance``.
    input_esr_ohm : float or None
        ESR of the input capacitor bank, ohm.
    quiescent_w : float or None
        Controller quiescent power drawn from the input, W.
    """

    turn_on_s: float | None = None
    turn_off_s: float | None = None
    switching_charge_c: float | None = None
    gate_current_a: float | None = None
    gate_charge_c: float | None = None
    gate_voltage_v: float | None = None
    coss_switch_f: float | None = None
    coss_rectifier_f: float | None = None
    recovery_charge_c: float | None = None
    dead_time_s: float | None = None
    body_diode_v: float | None = None
    core_k: float | None = None
    core_alpha: float | None = None
    core_beta: float | None = None
    core_volume_m3: float | None = None
    core_area_m2: float | None = None
    core_turns: float | None = None
    input_esr_ohm: float | None = None
    quiescent_w: float | None = None

    def __post_init__(self):
        for f in fields(self):
            value = getattr(self, f.name)
            if value is not None:
                bounds.check(f"losses.{_FIELD_KEY[f.name]}", value)
        given = {k for k, (f, _) in LOSS_KEYS.items() if getattr(self, f) is not None}
        for group in LOSS_GROUPS:
            have = [k for k in group if k in given]
            if have and len(have) < len(group):
                missing = [k for k in group if k not in given]
                raise DesignError(f"losses.{missing[0]}", "(missing)",
                                  f"give it with {', '.join(have)} ({', '.join(group)} go together)")
        if "turn_on_time" in given and "switching_charge" in given:
            raise DesignError("losses.switching_charge", self.switching_charge_c,
                              "give either turn_on_time/turn_off_time or switching_charge/gate_current, not both")

    @property
    def given(self) -> bool:
        """True when any figure is given."""
        return any(getattr(self, f.name) is not None for f in fields(self))

    def transition_times(self) -> tuple[float, float] | None:
        """(turn-on, turn-off) overlap durations, s, or None when neither form is given."""
        if self.turn_on_s is not None:
            return self.turn_on_s, self.turn_off_s
        if self.switching_charge_c is not None:
            t = self.switching_charge_c / self.gate_current_a
            return t, t
        return None

def losses_from_table(table: dict, where: str = "losses") -> Losses:
    """Build :class:`Losses` from the ``[losses]`` TOML table (numbers or engineering text).

    Raises
    ------
    DesignError
        Unknown key, a value that is not a number in its unit, a value outside its bound
        (:data:`loopkit.bounds.BOUNDS`), or an incomplete group.
    """
    if not isinstance(table, dict):
        raise DesignError(where, table, "must be a table ([losses])")
    kwargs = {}
    for key, value in table.items():
        if key not in LOSS_KEYS:
            raise DesignError(f"{where}.{key}", value, f"unknown key; allowed here: {', '.join(sorted(LOSS_KEYS))}")
        name, unit = LOSS_KEYS[key]
        kwargs[name] = parse_value(value, f"{where}.{key}", unit)
    return Losses(**kwargs)


def losses_to_table(losses: Losses) -> dict:
    """The ``[losses]`` table of a design file (given figures only, SI values)."""
    return {k: getattr(losses, f) for k, (f, _) in LOSS_KEYS.items() if getattr(losses, f) is not None}
