"""Physical bounds of every numeric design field: one table, used at the door and shown in the README.

Each field has a range wide enough for every real converter, from an integrated
100 MHz buck to a kilowatt flyback, with a margin of a decade or more on both
sides; a value outside it is almost always a slip of a prefix (``1.5n`` for
``1.5u``) and, left in, would reach numbers the arithmetic cannot hold.  The
ranges are common practice, no source: each is argued in its ``why`` (what real
parts sit at the ends) and the README's "Limits" table is rendered from
:data:`BOUNDS` (a test checks the two agree).

:func:`check` refuses a value outside its range with a
:class:`~loopkit.errors.DesignError` naming the field, the value and the range.
Size limits (corners, file size) live here too.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

from .errors import DesignError
from .units import format_value

__all__ = [
    "BOUNDS",
    "MAX_CORNERS",
    "MAX_FILE_BYTES",
    "Bound",
    "bound_for",
    "bounds_markdown",
    "check",
]

#: Most operating corners (input voltages x loads) one design may hold.  Each corner
#: carries responses on a 1000-point grid and the roots of 1 + T; 1000 corners take a
#: few hundred MB at most.  More: sweep in chunks (the app's dense sweep does).
MAX_CORNERS = 1000

#: Largest design file read, bytes (a real one is a few kB).
MAX_FILE_BYTES = 1 << 20


@dataclass(frozen=True)
class Bound:
    """The range of one numeric field.

    Attributes
    ----------
    lo, hi : float
        Smallest and largest value allowed (in SI units; for ``operating.vout``
        the magnitude).
    unit : str
        Unit shown with the values.
    why : str
        Why these ends: the real parts near them (common practice, no source).
    zero : str
        If not empty, 0 is allowed too and means this (e.g. ``"ideal"``).
    open_ends : bool
        The ends themselves are excluded (duty-like fractions between 0 and 1).
    """

    lo: float
    hi: float
    unit: str
    why: str
    zero: str = ""
    open_ends: bool = False

    def contains(self, value: float) -> bool:
        if not isinstance(value, numbers.Real) or isinstance(value, bool) or not math.isfinite(value):
            return False
        if self.zero and value == 0:
            return True
        if self.open_ends:
            return self.lo < value < self.hi
        return self.lo <= value <= self.hi

    def show(self, value: float) -> str:
        """``value`` with the unit: engineering notation, plain ``%g`` for counts, dB and degrees."""
        if self.unit in ("", "dB", "deg"):
            return f"{value:g}{' ' + self.unit if self.unit else ''}"
        return format_value(value, self.unit)

    def allowed(self) -> str:
        """The range in words, e.g. ``"from 1nH to 1H"`` or ``"0 (ideal) or from 1kHz to 10GHz"``."""
        lo, hi = self.show(self.lo), self.show(self.hi)
        if self.open_ends:
            return f"between {self.lo:g} and {hi}"
        if self.zero and self.lo == 0:
            return f"from 0 ({self.zero}) to {hi}"
        text = f"from {lo} to {hi}"
        return f"0 ({self.zero}) or {text}" if self.zero else text

    def refusal(self, value: float) -> str:
        """What to say of a value outside: the sign first where it is wrong, then the range."""
        if self.open_ends:
            return f"must be {self.allowed()}"
        if isinstance(value, numbers.Real) and value < 0 and self.lo >= 0:
            return f"must be >= 0 ({self.allowed()})" if self.zero else f"must be > 0 ({self.allowed()})"
        if isinstance(value, numbers.Real) and value == 0 and not self.zero:
            return f"must be > 0 ({self.allowed()})"
        return f"must be {self.allowed()}"


_R_PART = Bound(
    1.0, 100e6, "Ω",
    "compensator resistors: below 1 Ω the op-amp cannot drive the network, above 100 MΩ board leakage is comparable",
)
_C_PART = Bound(
    0.1e-12, 1.0, "F",
    "compensator capacitors: 0.1 pF is below any placed capacitor's stray; 1 F is beyond any compensation part",
)
_F_PLACE = Bound(
    0.01, 1e9, "Hz",
    "placed poles and zeros: from far below any crossover to far above any switching frequency",
)
_RES = "the worst winding or switch resistance of a power stage is a few ohms"

#: Field (dotted, as in the design file; ``[i]`` left out; ``R*``: every R designator) -> its bound.
BOUNDS: dict[str, Bound] = {
    # --- [stage]
    "stage.fsw": Bound(1e3, 100e6, "Hz", "from mains-adjacent kilohertz drives to 100 MHz integrated converters"),
    "stage.inductance": Bound(1e-9, 1.0, "H", "from nanohenry package inductors at tens of MHz to 1 H chokes"),
    "stage.dcr": Bound(0.0, 100.0, "Ω", _RES, zero="ideal"),
    "stage.r_switch": Bound(0.0, 100.0, "Ω", _RES, zero="ideal"),
    "stage.r_rectifier": Bound(0.0, 100.0, "Ω", _RES, zero="ideal"),
    "stage.diode_drop": Bound(0.0, 10.0, "V", "one diode drops under 3 V; 10 V allows a series stack", zero="ideal"),
    "stage.turns_ratio": Bound(
        0.01, 100.0, "", "Np/Ns from 1:100 (step-up to kilovolts) to 100:1 (mains to a few volts)"
    ),
    "stage.buck_max_duty": Bound(0.0, 1.0, "", "a duty cycle", open_ends=True),
    "stage.boost_min_duty": Bound(0.0, 1.0, "", "a duty cycle", open_ends=True),
    "stage.output_caps.capacitance": Bound(
        1e-12, 10.0, "F", "from picofarads at the output of a 100 MHz converter to supercapacitor banks"
    ),
    "stage.output_caps.esr": Bound(0.0, 100.0, "Ω", "a small electrolytic has a few ohms", zero="ideal"),
    "stage.output_caps.count": Bound(1, 1000, "", "capacitors in parallel in one bank"),
    # --- [operating]
    "operating.vout": Bound(
        10e-3, 10e3, "V", "magnitude: from sub-volt core rails to 10 kV supplies (negative for inverting)"
    ),
    "operating.vin": Bound(10e-3, 10e3, "V", "from energy-harvesting millivolts to 10 kV buses"),
    "operating.vin_nominal": Bound(10e-3, 10e3, "V", "as vin"),
    "operating.load": Bound(
        10e-6, 10e3, "A", "from 10 µA standby (keeps the load resistance finite) to 10 kA"
    ),
    # --- [sensing]
    "sensing.reference": Bound(10e-3, 100.0, "V", "error-amplifier references are 0.5 V to 5 V"),
    "sensing.r_top": Bound(1.0, 100e6, "Ω", "as a compensator resistor", zero="chosen from divider_current"),
    "sensing.divider_current": Bound(10e-9, 1.0, "A", "from nanoamp dividers of battery devices to 1 A"),
    "sensing.diff_bandwidth": Bound(100.0, 10e9, "Hz", "a differential amplifier's bandwidth", zero="ideal"),
    # --- [modulator]
    "modulator.ramp": Bound(1e-3, 100.0, "V", "PWM ramps are 0.1 V to 5 V peak to peak"),
    "modulator.max_duty": Bound(0.0, 1.0, "", "a duty cycle", open_ends=True),
    # --- [compensator]
    "compensator.fc": Bound(0.1, 50e6, "Hz", "below half the highest fsw", zero="not set"),
    "compensator.pm": Bound(0.0, 180.0, "deg", "a phase margin", open_ends=True),
    "compensator.boost_split": Bound(0.0, 1.0, "", "a share of the phase boost", open_ends=True),
    "compensator.gm_db": Bound(0.0, 60.0, "dB", "gain-margin targets are 6 dB to 20 dB"),
    "compensator.fc_band": Bound(1.0, 100.0, "", "a factor around fc; 1 itself would ask every corner to cross at fc",
                                 open_ends=True),
    "control.sense_gain": Bound(1e-4, 1e4, "Ω", "sense resistors times amplifier gains span 1 mΩ to a few kΩ",
                                zero="voltage mode"),
    "control.slope": Bound(0.0, 1e12, "V/s", "external ramps of 1 V per period at 100 MHz stay below this"),
    "control.slope_amplitude": Bound(0.0, 100.0, "V", "a ramp's amplitude over one period"),
    "control.slope_ratio": Bound(0.0, 100.0, "", "a multiple of the inductor's down-slope"),
    "control.current_limit": Bound(1e-3, 1e4, "A", "from milliamp converters to kiloamp stages", zero="not checked"),
    "compensator.opamp.gain_db": Bound(20.0, 200.0, "dB", "op-amps have 60 dB to 140 dB open-loop", zero="ideal"),
    "compensator.opamp.gbw": Bound(1e3, 10e9, "Hz", "from micropower op-amps to the fastest", zero="ideal"),
    "compensator.opamp.gm": Bound(
        1e-6, 1.0, "S", "transconductance amplifiers of controllers have 10 µS to 10 mS", zero="not used"
    ),
    "compensator.opamp.r_out": Bound(1e3, 10e9, "Ω", "a gm amplifier's output resistance", zero="ideal"),
    "compensator.opto.ctr": Bound(0.01, 100.0, "", "current-transfer ratio: 1 % to Darlington outputs"),
    "compensator.opto.r_pull": _R_PART,
    "compensator.opto.r_led": _R_PART,
    "compensator.opto.c_opto": Bound(_C_PART.lo, _C_PART.hi, "F", _C_PART.why, zero="neglected"),
    # the optocoupler's dc bias (loopkit.networks.opto_bias; defaults 5 V, 2.5 V, 1.0 V, 2.5 V: common practice, no source)
    "compensator.opto.v_pullup": Bound(0.5, 60.0, "V", "pull-up supplies of controller pins: 1.8 V logic to 15 V bias rails; default 5 V"),
    "compensator.opto.v_pin": Bound(0.1, 60.0, "V", "controller feedback pins work at 0.5 V to 5 V; below v_pullup; default 2.5 V"),
    "compensator.opto.v_led": Bound(0.5, 5.0, "V", "LED forward voltages: 1 V infrared to 3.5 V blue; default 1.0 V"),
    "compensator.opto.v_shunt_min": Bound(0.5, 60.0, "V", "a shunt's least cathode voltage: its reference, 1.24 V to 2.5 V; default 2.5 V"),
    # --- [digital] (control.scheme = "digital")
    "digital.sample_ratio": Bound(1, 16, "", "samples per switching period: once is usual, a few times for multi-sampled PWM"),
    "digital.adc_bits": Bound(4, 24, "", "ADC resolution: 8-bit microcontrollers to 24-bit converters"),
    "digital.adc_range": Bound(0.1, 100.0, "V", "ADC full scale: 1 V to 5 V on microcontrollers and DSPs"),
    "digital.anti_alias": Bound(100.0, 1e9, "Hz", "an RC pole before the ADC", zero="none"),
    "digital.computation_delay": Bound(0.0, 10e-3, "s", "sample to duty written: below a microsecond to a slow"
                                       " 8-bit loop at kilohertz rates", zero="none"),
    "digital.pwm_clock": Bound(1e6, 100e9, "Hz", "PWM counter clocks: 16 MHz counters to the sub-100 ps steps of"
                               " high-resolution PWM", zero="not given"),
    "digital.dither_bits": Bound(0, 8, "", "extra duty bits from dithering over a few periods"),
    "digital.word_length": Bound(8, 64, "", "controller arithmetic from 8-bit to 64-bit words"),
    "digital.frac_bits": Bound(0, 62, "", "fractional bits of the controller's Q format"),
    "compensator.parts.R*": _R_PART,
    "compensator.parts.C*": _C_PART,
    "compensator.placement.*": _F_PLACE,
    # --- [losses] (loopkit.losses; every figure optional)
    "losses.turn_on_time": Bound(10e-12, 10e-6, "s", "overlap times: GaN switches in picoseconds to slow IGBTs"),
    "losses.turn_off_time": Bound(10e-12, 10e-6, "s", "as turn_on_time"),
    "losses.switching_charge": Bound(10e-12, 10e-6, "C", "gate charge over the plateau: small GaN to large IGBTs"),
    "losses.gate_current": Bound(1e-3, 100.0, "A", "gate drivers source and sink milliamps to tens of amps"),
    "losses.gate_charge": Bound(10e-12, 100e-6, "C", "total gate charge: small GaN to paralleled IGBT modules"),
    "losses.gate_voltage": Bound(1.0, 30.0, "V", "gate drives are 5 V to 20 V"),
    "losses.coss_switch": Bound(0.0, 1e-6, "F", "switch output capacitance: picofarads to nanofarads", zero="none"),
    "losses.coss_rectifier": Bound(0.0, 1e-6, "F", "as coss_switch", zero="none"),
    "losses.recovery_charge": Bound(0.0, 100e-6, "C", "Schottky diodes have none; slow rectifiers microcoulombs",
                                    zero="none"),
    "losses.dead_time": Bound(0.0, 10e-6, "s", "dead times are nanoseconds to a microsecond", zero="none"),
    "losses.body_diode_drop": Bound(0.0, 10.0, "V", "body diodes drop 0.5 V to 3 V (GaN reverse conduction)"),
    "losses.core_k": Bound(1e-9, 1e9, "", "Steinmetz k in SI (W/m^3, Hz, T): spans many decades with alpha, beta"),
    "losses.core_alpha": Bound(0.5, 4.0, "", "Steinmetz frequency exponent, typically 1 to 2"),
    "losses.core_beta": Bound(1.0, 5.0, "", "Steinmetz flux exponent, typically 2 to 3"),
    "losses.core_volume": Bound(1e-12, 1e-2, "", "effective core volume, m^3: 1 mm^3 chip cores to 10 dm^3"),
    "losses.core_area": Bound(1e-9, 1e-1, "", "effective core cross-section, m^2: 1 mm^2 to 0.1 m^2"),
    "losses.core_turns": Bound(1, 10000, "", "turns of the winding that has stage.inductance"),
    "losses.input_esr": Bound(0.0, 100.0, "Ω", "as an output bank's ESR", zero="ideal"),
    "losses.quiescent_power": Bound(0.0, 1e3, "W", "controllers draw microwatts to watts", zero="none"),
}


def bound_for(field: str) -> Bound | None:
    """The bound of a dotted field (``stage.output_caps[1].esr``, ``compensator.parts.R2``), or None."""
    key = field
    while "[" in key:
        start = key.index("[")
        key = key[:start] + key[key.index("]", start) + 1:]
    if key in BOUNDS:
        return BOUNDS[key]
    head, _, name = key.rpartition(".")
    if head == "compensator.parts" and name[:1] in ("R", "C"):
        return BOUNDS[f"compensator.parts.{name[0]}*"]
    if head == "compensator.placement":
        return BOUNDS["compensator.placement.*"]
    if head == "operating" and name.endswith(("_min", "_max")):
        return BOUNDS.get(f"operating.{name[:-4]}")
    return None


def check(field: str, value: float, magnitude: bool = False) -> None:
    """Refuse ``value`` of ``field`` when it lies outside the field's bound.

    Parameters
    ----------
    field : str
        Dotted field name (its bound found by :func:`bound_for`).
    value : float
        The value in SI units.
    magnitude : bool
        Check ``abs(value)`` (a signed output voltage).

    Raises
    ------
    DesignError
        Naming the field, the value and the range.
    """
    bound = bound_for(field)
    if bound is None:
        raise KeyError(f"no bound for {field}")
    shown = value
    if isinstance(value, numbers.Real) and not isinstance(value, bool):
        shown = repr(value) if not math.isfinite(value) else f"{value:g}" if bound.unit in ('', 'dB', 'deg') else bound.show(value)
        value = abs(value) if magnitude else value
    if not bound.contains(value):
        text = bound.refusal(value)
        raise DesignError(field, shown, f"magnitude {text}" if magnitude else text)


def bounds_markdown() -> str:
    """The README's table of bounds (Markdown), rendered from :data:`BOUNDS`."""
    lines = ["| field | allowed | why |", "|---|---|---|"]
    for name, bound in BOUNDS.items():
        lines.append(f"| `{name}` | {bound.allowed()} | {bound.why} |")
    return "\n".join(lines) + "\n"
