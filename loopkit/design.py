"""The design: validated data describing one converter and its loop.

A :class:`Design` is what a design file holds (see :mod:`loopkit.designfile` for
the TOML form).  Every value is in SI units.  Construction validates every field
and raises :class:`~loopkit.errors.DesignError` naming the field, the value and
what is allowed.  Designs are frozen; use :func:`dataclasses.replace` (or
:func:`with_changes`) to make a changed copy.
"""

from __future__ import annotations

import numbers
from dataclasses import dataclass, field, fields, replace

import numpy as np

from . import bounds
from .errors import DesignError
from .eseries import SERIES_NAMES
from .losses import Losses
from .networks import NETWORKS
from .tolerances import Tolerances
from .units import format_value

__all__ = [
    "FILE_KEYS",
    "METHODS",
    "NETWORKS",
    "SCHEMES",
    "TOPOLOGIES",
    "CapacitorBank",
    "Compensator",
    "Control",
    "Design",
    "Digital",
    "Modulator",
    "OpAmp",
    "Operating",
    "Sensing",
    "Stage",
    "with_changes",
]

#: Topology names accepted in ``stage.topology``.
TOPOLOGIES = ("buck", "boost", "inverting-buck-boost", "four-switch-buck-boost", "flyback")

#: Fields whose design-file key differs from the field's name (the file keeps the trade's short words).
FILE_KEYS = {"fc_hz": "fc", "pm_deg": "pm"}

#: Synthesis methods accepted in ``compensator.method``.
METHODS = ("auto", "k-factor", "placement")


#: Smallest ideal duty (and 1 minus the largest) a turns ratio may ask for: below it the
#: switch would conduct for a few nanoseconds at the highest fsw (common practice, no source).
_MIN_DUTY = 1e-3


@dataclass(frozen=True)
class CapacitorBank:
    """``count`` identical capacitors in parallel, each ``capacitance`` with ``esr``."""

    capacitance: float
    esr: float = 0.0
    count: int = 1

    def check(self, where: str) -> None:
        bounds.check(f"{where}.capacitance", self.capacitance)
        bounds.check(f"{where}.esr", self.esr)
        if not isinstance(self.count, (int, np.integer)) or isinstance(self.count, bool) or self.count < 1:
            raise DesignError(f"{where}.count", self.count, "must be a whole number >= 1")
        bounds.check(f"{where}.count", int(self.count))

    @property
    def c_total(self) -> float:
        return self.capacitance * self.count

    @property
    def esr_total(self) -> float:
        return self.esr / self.count


@dataclass(frozen=True)
class Stage:
    """The power stage.

    Attributes
    ----------
    topology : str
        One of :data:`TOPOLOGIES`.
    fsw : float
        Switching frequency, Hz.
    inductance : float
        Inductor, H (flyback: magnetising inductance seen from the primary).
    dcr : float
        Inductor winding resistance, ohm (flyback: primary side).
    r_switch : float
        On-resistance of the controlled switch, ohm (four-switch: each switch).
    rectifier : str
        ``"synchronous"`` (a switch, ``r_rectifier`` on-resistance) or ``"diode"``
        (``diode_drop`` plus ``r_rectifier`` series resistance).
    r_rectifier : float
        Synchronous rectifier on-resistance or diode series resistance, ohm.
    diode_drop : float
        Diode forward drop, V (ignored for synchronous rectification).
    light_load : str
        ``"dcm"``: the inductor current stops at zero at light load (diode, or
        synchronous with diode emulation); ``"forced-ccm"``: the current reverses
        and the stage stays in CCM; ``""`` (left out): dcm for a diode,
        forced-ccm for a synchronous rectifier (see :attr:`light_load_mode`).
    turns_ratio : float
        Flyback primary to secondary turns, Np/Ns.
    buck_max_duty : float
        Four-switch: buck mode runs while its duty stays at or below this.
    boost_min_duty : float
        Four-switch: boost mode runs once its duty reaches this; in between is the
        transition band.
    output_caps : tuple of CapacitorBank
        Output capacitor banks in parallel (e.g. ceramic and polymer).
    """

    topology: str
    fsw: float
    inductance: float
    output_caps: tuple[CapacitorBank, ...]
    dcr: float = 0.0
    r_switch: float = 0.0
    rectifier: str = "diode"
    r_rectifier: float = 0.0
    diode_drop: float = 0.0
    light_load: str = ""
    turns_ratio: float = 1.0
    buck_max_duty: float = 0.9
    boost_min_duty: float = 0.1

    def __post_init__(self):
        if self.topology not in TOPOLOGIES:
            raise DesignError("stage.topology", self.topology, f"must be one of {', '.join(TOPOLOGIES)}")
        for name in ("fsw", "inductance", "dcr", "r_switch", "r_rectifier", "diode_drop"):
            bounds.check(f"stage.{name}", getattr(self, name))
        if self.rectifier not in ("synchronous", "diode"):
            raise DesignError("stage.rectifier", self.rectifier, "must be synchronous or diode")
        if self.light_load not in ("", "dcm", "forced-ccm"):
            raise DesignError("stage.light_load", self.light_load, "must be dcm or forced-ccm (or left out)")
        if self.rectifier == "diode" and self.light_load == "forced-ccm":
            raise DesignError("stage.light_load", self.light_load, "a diode cannot conduct backwards: use dcm")
        for name in ("turns_ratio", "buck_max_duty", "boost_min_duty"):
            bounds.check(f"stage.{name}", getattr(self, name))
        if not self.output_caps:
            raise DesignError("stage.output_caps", "[]", "needs at least one capacitor bank")
        object.__setattr__(self, "output_caps", tuple(self.output_caps))
        for i, bank in enumerate(self.output_caps):
            bank.check(f"stage.output_caps[{i}]")

    @property
    def c_total(self) -> float:
        return sum(b.c_total for b in self.output_caps)

    @property
    def light_load_mode(self) -> str:
        """``light_load`` as it applies: left out, dcm for a diode, forced-ccm for a synchronous rectifier."""
        if self.light_load:
            return self.light_load
        return "forced-ccm" if self.rectifier == "synchronous" else "dcm"

    @property
    def synchronous(self) -> bool:
        return self.rectifier == "synchronous"

    @property
    def vf(self) -> float:
        """Forward drop of the rectifier: 0 for a synchronous switch."""
        return 0.0 if self.synchronous else self.diode_drop


@dataclass(frozen=True)
class Operating:
    """Operating range: output voltage, input voltages and loads (the corners).

    Corners are every pair of ``vin`` and ``load``, input voltage outermost:
    corner ``i`` has ``vin[i // len(load)]`` and ``load[i % len(load)]``.
    """

    vout: float
    vin: tuple[float, ...]
    load: tuple[float, ...]
    vin_nominal: float | None = None

    def __post_init__(self):
        if not isinstance(self.vout, numbers.Real) or self.vout == 0 or not np.isfinite(self.vout):
            raise DesignError("operating.vout", self.vout, "must be a nonzero voltage")
        bounds.check("operating.vout", self.vout, magnitude=True)
        for name in ("vin", "load"):
            values = getattr(self, name)
            for i, v in enumerate(values):
                if not isinstance(v, numbers.Real) or isinstance(v, bool):
                    raise DesignError(f"operating.{name}[{i}]", v, "must be a number")
            object.__setattr__(self, name, tuple(float(v) for v in values))
        if not self.vin:
            raise DesignError("operating.vin", "[]", "needs at least one input voltage")
        if not self.load:
            raise DesignError("operating.load", "[]", "needs at least one load current")
        n = len(self.vin) * len(self.load)
        if n > bounds.MAX_CORNERS:
            raise DesignError(
                "operating",
                f"{len(self.vin)} input voltages x {len(self.load)} loads = {n} corners",
                f"at most {bounds.MAX_CORNERS} corners; sweep more in chunks (one design per block of input"
                " voltages, as the app's dense sweep does)",
            )
        for i, v in enumerate(self.vin):
            bounds.check(f"operating.vin[{i}]", v)
        for i, v in enumerate(self.load):
            bounds.check(f"operating.load[{i}]", v)
        if self.vin_nominal is not None:
            bounds.check("operating.vin_nominal", self.vin_nominal)

    @property
    def n_corners(self) -> int:
        return len(self.vin) * len(self.load)

    def corners(self) -> tuple[np.ndarray, np.ndarray]:
        """(vin, load) arrays, one entry per corner."""
        vin = np.repeat(np.asarray(self.vin), len(self.load))
        load = np.tile(np.asarray(self.load), len(self.vin))
        return vin, load


@dataclass(frozen=True)
class Sensing:
    """How the output reaches the error amplifier.

    ``kind = "divider"``: a resistor divider, top resistor ``r_top`` (R1, the
    input element of an op-amp network), bottom resistor chosen for the
    reference.  ``kind = "differential"``: a differential amplifier of gain
    ``reference / |vout|`` turns a (negative) output into a positive signal for
    the error amplifier; ``diff_bandwidth`` is its -3 dB frequency (0 = ideal).
    """

    kind: str = "divider"
    reference: float = 0.8
    r_top: float = 0.0
    divider_current: float = 100e-6
    diff_bandwidth: float = 0.0

    def __post_init__(self):
        if self.kind not in ("divider", "differential"):
            raise DesignError("sensing.kind", self.kind, "must be divider or differential")
        for name in ("reference", "r_top", "divider_current", "diff_bandwidth"):
            bounds.check(f"sensing.{name}", getattr(self, name))


@dataclass(frozen=True)
class Modulator:
    """PWM modulator: ramp peak-to-peak amplitude and duty limit.

    With ``feedforward`` the ramp is ``ramp * vin / vin_nominal`` (input-voltage
    feed-forward), so the modulator gain falls as the input rises.
    """

    ramp: float = 1.0
    max_duty: float = 0.9
    feedforward: bool = False

    def __post_init__(self):
        bounds.check("modulator.ramp", self.ramp)
        bounds.check("modulator.max_duty", self.max_duty)


#: The error amplifier a design gets when it names none: a typical general-purpose op-amp of
#: 100 dB open-loop gain and 10 MHz gain-bandwidth (common practice, no source).  A design file
#: asks for an ideal amplifier explicitly with ``ideal = true`` in ``[compensator.opamp]``.
TYPICAL_OPAMP_GAIN_DB = 100.0
TYPICAL_OPAMP_GBW_HZ = 10e6


@dataclass(frozen=True)
class OpAmp:
    """Error amplifier non-idealities (0 = unlimited; both 0 = the ideal amplifier).

    ``gain_db`` (dc open-loop gain, dB) and ``gbw`` (Hz) describe an op-amp; ``gm`` (S) and
    ``r_out`` (ohm) the transconductance amplifier of ``gm-type2``.  :meth:`typical` is the
    part a design gets when it names none.
    """

    gain_db: float = 0.0
    gbw: float = 0.0
    gm: float = 0.0
    r_out: float = 0.0

    def __post_init__(self):
        for name in ("gain_db", "gbw", "gm", "r_out"):
            bounds.check(f"compensator.opamp.{name}", getattr(self, name))

    @classmethod
    def typical(cls) -> OpAmp:
        """A typical general-purpose op-amp (:data:`TYPICAL_OPAMP_GAIN_DB`, :data:`TYPICAL_OPAMP_GBW_HZ`)."""
        return cls(gain_db=TYPICAL_OPAMP_GAIN_DB, gbw=TYPICAL_OPAMP_GBW_HZ)

    @property
    def ideal(self) -> bool:
        return self.gain_db == 0 and self.gbw == 0


@dataclass(frozen=True)
class Compensator:
    """Targets and (once designed) parts of the error-amplifier network.

    Attributes
    ----------
    network : str
        One of :data:`NETWORKS`.
    fc_hz : float
        Target crossover, Hz (design-file key ``fc``).
    pm_deg : float
        Target phase margin, deg (design-file key ``pm``).
    design_corner : int or None
        Corner index to design at; None = the worst corner.
    gm_db : float
        Target gain margin, dB (default 6 dB, common practice, no source).
    fc_band : float
        Every CCM corner's crossover must lie within ``fc / fc_band`` to ``fc * fc_band``
        (default 2: an octave either side); DCM corners cross lower by nature and are
        judged on phase and gain margin only.
    method : str
        ``"auto"`` (Venable's K-factor, then, where a corner misses the targets, a search of
        the poles and zeros for the worst corner), ``"k-factor"`` (Venable only) or
        ``"placement"`` (explicit poles and zeros).
    boost_split : float
        Type III: fraction of the phase boost taken by the zero pair (0.5 = even).
    resistor_series, capacitor_series : str
        IEC 60063 series the parts are snapped to.
    parts : dict
        Designator -> value in ohms or farads (and ``CTR`` etc. for the opto
        network).  Empty until designed; given parts are analysed as they are.
    placement : dict
        For ``method = "placement"``: frequencies in Hz, keys ``fz1``, ``fz2``,
        ``fp1``, ``fp2`` (Type III) or ``fz``, ``fp`` (Type II); the gain is always
        the one that puts the crossover at ``fc``.
    """

    network: str = "type2"
    fc_hz: float = 0.0
    pm_deg: float = 60.0
    design_corner: int | None = None
    method: str = "auto"
    gm_db: float = 6.0
    fc_band: float = 2.0
    boost_split: float = 0.5
    resistor_series: str = "E96"
    capacitor_series: str = "E12"
    parts: dict = field(default_factory=dict)
    placement: dict = field(default_factory=dict)
    opamp: OpAmp = field(default_factory=OpAmp.typical)
    opto: dict = field(default_factory=dict)

    def __post_init__(self):
        if self.network not in NETWORKS:
            raise DesignError("compensator.network", self.network, f"must be one of {', '.join(NETWORKS)}")
        bounds.check("compensator.fc", self.fc_hz)
        bounds.check("compensator.pm", self.pm_deg)
        if self.method not in METHODS:
            raise DesignError("compensator.method", self.method, f"must be one of {', '.join(METHODS)}")
        bounds.check("compensator.gm_db", self.gm_db)
        bounds.check("compensator.fc_band", self.fc_band)
        bounds.check("compensator.boost_split", self.boost_split)
        for name in ("resistor_series", "capacitor_series"):
            value = getattr(self, name)
            if value not in SERIES_NAMES:
                raise DesignError(f"compensator.{name}", value, f"must be one of {', '.join(SERIES_NAMES)}")
        for key, value in self.parts.items():
            if bounds.bound_for(f"compensator.parts.{key}") is not None:
                bounds.check(f"compensator.parts.{key}", value)
            elif not (isinstance(value, float) and value > 0):
                raise DesignError(f"compensator.parts.{key}", value, "must be > 0")
        for key, value in self.placement.items():
            bounds.check(f"compensator.placement.{key}", value)
        for key, value in self.opto.items():
            if bounds.bound_for(f"compensator.opto.{key}") is not None:
                bounds.check(f"compensator.opto.{key}", value)
        if self.design_corner is not None and self.design_corner < 0:
            raise DesignError("compensator.design_corner", self.design_corner, "must be a corner index >= 0 or 'worst'")


#: Control schemes accepted in ``control.scheme`` (one module each in :mod:`loopkit.schemes`).
SCHEMES = ("voltage-mode", "peak-current", "digital")


@dataclass(frozen=True)
class Control:
    """The control scheme and, for peak current mode, its current sensing and slope.

    Attributes
    ----------
    scheme : str
        One of :data:`SCHEMES`.
    sense_gain : float
        Peak current mode: current-sense transresistance Ri, ohm (V at the comparator per A of
        inductor current; sense resistor times amplifier gain; flyback: primary current).
    slope : float or None
        External slope-compensation ramp at the comparator, V/s (0 = none).
    slope_amplitude : float or None
        The external ramp as its amplitude over one switching period, V, instead of ``slope``.
    slope_ratio : float or None
        The external slope as a multiple of the steepest down-slope at the comparator (Ri times
        the off-time slope) over the CCM corners.  With none of ``slope``, ``slope_amplitude``
        and ``slope_ratio`` the slope is chosen automatically
        (:func:`loopkit.schemes.peak_current.auto_slope`: Qp = 1 at the worst CCM corner).
    current_limit : float
        Peak inductor current limit, A (0 = not checked).
    """

    scheme: str = "voltage-mode"
    sense_gain: float = 0.0
    slope: float | None = None
    slope_amplitude: float | None = None
    slope_ratio: float | None = None
    current_limit: float = 0.0

    def __post_init__(self):
        if self.scheme not in SCHEMES:
            raise DesignError("control.scheme", self.scheme, f"must be one of {', '.join(SCHEMES)}")
        bounds.check("control.sense_gain", self.sense_gain)
        bounds.check("control.current_limit", self.current_limit)
        if self.scheme == "peak-current" and not self.sense_gain > 0:
            raise DesignError("control.sense_gain", format_value(self.sense_gain, "Ω"),
                              "peak current mode needs the current-sense gain (> 0 ohm)")
        given = [k for k in ("slope", "slope_amplitude", "slope_ratio") if getattr(self, k) is not None]
        if len(given) > 1:
            raise DesignError(f"control.{given[1]}", getattr(self, given[1]),
                              f"give one of slope, slope_amplitude, slope_ratio (also given: {given[0]})")
        for name in ("slope", "slope_amplitude", "slope_ratio"):
            if getattr(self, name) is not None:
                bounds.check(f"control.{name}", getattr(self, name))


#: Digital controller forms (``digital.form``) and how the controller is designed (``digital.method``).
DIGITAL_FORMS = ("pi", "pid", "type3")
DIGITAL_METHODS = ("direct", "tustin", "matched")
#: PWM carriers (``digital.carrier``), as :data:`loopkit.sampled.MODULATORS`, and duty-update instants.
DIGITAL_CARRIERS = ("trailing-edge", "leading-edge", "symmetric")
DIGITAL_UPDATES = ("next-period", "immediate")
#: Fewest PWM counts per switching period a digital design may have (common practice, no source).
MIN_PWM_COUNTS = 16


@dataclass(frozen=True)
class Digital:
    """The digital controller's hardware and form (``[digital]``; used with ``control.scheme = "digital"``).

    Attributes
    ----------
    sample_ratio : int
        Samples (and duty updates) per switching period: fs = sample_ratio * fsw.
    adc_bits : int
        ADC resolution, bits.
    adc_range : float
        ADC full-scale input, V (the sensed output times the sensing gain must lie inside it).
    anti_alias : float
        Anti-alias filter pole before the ADC, Hz (0 = none).
    computation_delay : float
        Time from the ADC sample to the new duty being written, s.
    update : str
        ``"next-period"``: the PWM loads the new duty at the start of the next sample period (a shadow
        register); ``"immediate"``: it acts as soon as written (edges later in the same period move).
    carrier : str
        ``"trailing-edge"``, ``"leading-edge"`` or ``"symmetric"`` (triangle) PWM.
    pwm_clock : float
        PWM counter clock, Hz (high-resolution PWM: its effective step rate); counts per period are
        ``pwm_clock / fsw``.
    dither_bits : int
        Extra duty resolution from dithering, bits (0 = none).
    word_length, frac_bits : int or None
        The controller's fixed-point word length and fractional bits (None = chosen from the
        coefficients).
    form : str
        ``"pi"``, ``"pid"`` or ``"type3"`` (an integrator, two zeros, two poles).
    method : str
        ``"direct"`` (designed in z on the exact sampled loop), ``"tustin"`` (an analog design of the
        same form, Tustin-prewarped at fc) or ``"matched"`` (the analog design, matched pole-zero).
    """

    sample_ratio: int = 1
    adc_bits: int = 12
    adc_range: float = 3.3
    anti_alias: float = 0.0
    computation_delay: float = 0.0
    update: str = "next-period"
    carrier: str = "trailing-edge"
    pwm_clock: float = 0.0
    dither_bits: int = 0
    word_length: int | None = None
    frac_bits: int | None = None
    form: str = "type3"
    method: str = "direct"

    def __post_init__(self):
        for name in ("sample_ratio", "adc_bits", "dither_bits", "word_length", "frac_bits"):
            value = getattr(self, name)
            if value is None and name in ("word_length", "frac_bits"):
                continue
            if isinstance(value, bool) or not isinstance(value, numbers.Real) or value != int(value):
                raise DesignError(f"digital.{name}", value, "must be a whole number")
            object.__setattr__(self, name, int(value))
            bounds.check(f"digital.{name}", int(value))
        for name in ("adc_range", "anti_alias", "computation_delay", "pwm_clock"):
            bounds.check(f"digital.{name}", getattr(self, name))
        for name, allowed in (("update", DIGITAL_UPDATES), ("carrier", DIGITAL_CARRIERS), ("form", DIGITAL_FORMS),
                              ("method", DIGITAL_METHODS)):
            if getattr(self, name) not in allowed:
                raise DesignError(f"digital.{name}", getattr(self, name), f"must be one of {', '.join(allowed)}")
        if self.word_length is not None and self.frac_bits is not None and self.frac_bits >= self.word_length:
            raise DesignError("digital.frac_bits", self.frac_bits,
                              f"must be below the word length ({self.word_length} bits): one bit is the sign")

    def check_with(self, design: Design) -> None:
        """Checks where the digital fields meet the sensing (scheme ``digital`` only); the PWM counts per
        period, which depend on fsw, are checked where the loop is analysed (:mod:`loopkit.schemes.digital`)."""
        if not self.pwm_clock > 0:
            raise DesignError("digital.pwm_clock", format_value(self.pwm_clock, "Hz"),
                              "a digital design needs the PWM counter clock (> 0 Hz)")
        if design.sensing.reference >= self.adc_range:
            raise DesignError("sensing.reference", format_value(design.sensing.reference, "V"),
                              f"the sensed output must lie inside the ADC range (below digital.adc_range ="
                              f" {format_value(self.adc_range, 'V')})")


@dataclass(frozen=True)
class Design:
    """One converter and its loop: the content of a design file."""

    stage: Stage
    operating: Operating
    sensing: Sensing = field(default_factory=Sensing)
    modulator: Modulator = field(default_factory=Modulator)
    compensator: Compensator = field(default_factory=Compensator)
    title: str = ""
    control: Control = field(default_factory=Control)
    tolerances: Tolerances = field(default_factory=Tolerances)
    #: Loss figures beyond conduction (``[losses]``, :mod:`loopkit.losses`); all optional.
    losses: Losses = field(default_factory=Losses)
    digital: Digital = field(default_factory=Digital)

    def __post_init__(self):
        vout = self.operating.vout
        topo = self.stage.topology
        if topo == "inverting-buck-boost" and vout > 0:
            raise DesignError("operating.vout", format_value(vout, "V"), "an inverting buck-boost makes a negative output: give vout < 0")
        if topo != "inverting-buck-boost" and vout < 0:
            raise DesignError("operating.vout", format_value(vout, "V"), f"a {topo} makes a positive output: give vout > 0")
        if self.design_corner_out_of_range():
            raise DesignError(
                "compensator.design_corner", self.compensator.design_corner, f"must be below {self.operating.n_corners}"
            )
        if vout < 0 and self.sensing.kind != "differential":
            raise DesignError("sensing.kind", self.sensing.kind, "a negative output needs differential sensing")
        self._check_where_fields_meet()
        if len(self.tolerances.banks) > len(self.stage.output_caps):  # [tolerances] (loopkit.tolerances)
            raise DesignError("tolerances.output_caps", f"({len(self.tolerances.banks)} tables)",
                              f"at most one per capacitor bank of the stage ({len(self.stage.output_caps)})")
        if self.control.scheme == "digital":
            self.digital.check_with(self)

    def _check_where_fields_meet(self) -> None:
        """Consistency where fields meet: divider current and R1, turns ratio and duty.

        (The crossover target against fsw is checked where the targets are used,
        :meth:`loopkit.loop.LoopSession.run`: there it is a reason the targets
        cannot be met, also when the app's slider asks for it.)
        """
        s, vout = self.sensing, abs(self.operating.vout)
        if s.kind == "divider" and s.r_top == 0 and vout > s.reference:
            r1 = (vout - s.reference) / s.divider_current
            bound = bounds.bound_for("compensator.parts.R1")
            if not bound.contains(r1):
                raise DesignError(
                    "sensing.divider_current",
                    format_value(s.divider_current, "A"),
                    f"gives a divider top resistor R1 = {format_value(r1, 'Ω')}, outside {bound.allowed()}:"
                    " change divider_current or give r_top",
                )
        if self.stage.topology == "flyback":
            n = self.stage.turns_ratio
            for v in (min(self.operating.vin), max(self.operating.vin)):
                duty = n * vout / (v + n * vout)  # ideal flyback, M = D / (n (1 - D)) (Erickson & Maksimovic, 2001)
                if not _MIN_DUTY <= duty <= 1 - _MIN_DUTY:
                    raise DesignError(
                        "stage.turns_ratio",
                        f"{n:g}",
                        f"gives a duty of {duty:.3g} at {format_value(v, 'V')} in (ideal: n vout / (vin + n vout));"
                        f" choose Np/Ns so that it lies between {_MIN_DUTY:g} and {1 - _MIN_DUTY:g}",
                    )

    def design_corner_out_of_range(self) -> bool:
        c = self.compensator.design_corner
        return c is not None and c >= self.operating.n_corners


def with_changes(design: Design, section: str, **changes) -> Design:
    """A copy of ``design`` with fields of one section changed (validated again)."""
    if section == "design":
        return replace(design, **changes)
    part = replace(getattr(design, section), **changes)
    return replace(design, **{section: part})


def section_fields(cls) -> list[str]:
    return [f.name for f in fields(cls)]
