"""The design: validated data describing one converter and its loop.

A :class:`Design` is what a design file holds (see :mod:`loopkit.designfile` for
the TOML form).  Every value is in SI units.  Construction validates every field
and raises :class:`~loopkit.errors.DesignError` naming the field, the value and
what is allowed.  Designs are frozen; use :func:`dataclasses.replace` (or
:func:`with_changes`) to make a changed copy.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace

import numpy as np

from .errors import DesignError
from .eseries import SERIES_NAMES
from .networks import NETWORKS
from .units import format_value

__all__ = [
    "METHODS",
    "NETWORKS",
    "SCHEMES",
    "TOPOLOGIES",
    "CapacitorBank",
    "Compensator",
    "Control",
    "Design",
    "Modulator",
    "OpAmp",
    "Operating",
    "Sensing",
    "Stage",
    "with_changes",
]

#: Topology names accepted in ``stage.topology``.
TOPOLOGIES = ("buck", "boost", "inverting-buck-boost", "four-switch-buck-boost", "flyback")

#: Synthesis methods accepted in ``compensator.method``.
METHODS = ("auto", "k-factor", "placement")



def _positive(name: str, value: float, unit: str = "") -> None:
    if not (value > 0):
        raise DesignError(name, format_value(value, unit), "must be > 0")


def _non_negative(name: str, value: float, unit: str = "") -> None:
    if not (value >= 0):
        raise DesignError(name, format_value(value, unit), "must be >= 0")


def _between(name: str, value: float, lo: float, hi: float, what: str) -> None:
    if not (lo < value < hi):
        raise DesignError(name, format_value(value), f"must be between {what}")


@dataclass(frozen=True)
class CapacitorBank:
    """``count`` identical capacitors in parallel, each ``capacitance`` with ``esr``."""

    capacitance: float
    esr: float = 0.0
    count: int = 1

    def check(self, where: str) -> None:
        _positive(f"{where}.capacitance", self.capacitance, "F")
        _non_negative(f"{where}.esr", self.esr, "Ω")
        if not isinstance(self.count, (int, np.integer)) or self.count < 1:
            raise DesignError(f"{where}.count", self.count, "must be a whole number >= 1")

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
        _positive("stage.fsw", self.fsw, "Hz")
        _positive("stage.inductance", self.inductance, "H")
        for name in ("dcr", "r_switch", "r_rectifier"):
            _non_negative(f"stage.{name}", getattr(self, name), "Ω")
        _non_negative("stage.diode_drop", self.diode_drop, "V")
        if self.rectifier not in ("synchronous", "diode"):
            raise DesignError("stage.rectifier", self.rectifier, "must be synchronous or diode")
        if self.light_load not in ("", "dcm", "forced-ccm"):
            raise DesignError("stage.light_load", self.light_load, "must be dcm or forced-ccm (or left out)")
        if self.rectifier == "diode" and self.light_load == "forced-ccm":
            raise DesignError("stage.light_load", self.light_load, "a diode cannot conduct backwards: use dcm")
        _positive("stage.turns_ratio", self.turns_ratio)
        _between("stage.buck_max_duty", self.buck_max_duty, 0.0, 1.0, "0 and 1")
        _between("stage.boost_min_duty", self.boost_min_duty, 0.0, 1.0, "0 and 1")
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
        if self.vout == 0 or not np.isfinite(self.vout):
            raise DesignError("operating.vout", self.vout, "must be a nonzero voltage")
        object.__setattr__(self, "vin", tuple(float(v) for v in self.vin))
        object.__setattr__(self, "load", tuple(float(v) for v in self.load))
        if not self.vin:
            raise DesignError("operating.vin", "[]", "needs at least one input voltage")
        if not self.load:
            raise DesignError("operating.load", "[]", "needs at least one load current")
        for i, v in enumerate(self.vin):
            _positive(f"operating.vin[{i}]", v, "V")
        for i, v in enumerate(self.load):
            _positive(f"operating.load[{i}]", v, "A")
        if self.vin_nominal is not None:
            _positive("operating.vin_nominal", self.vin_nominal, "V")

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
        _positive("sensing.reference", self.reference, "V")
        _non_negative("sensing.r_top", self.r_top, "Ω")
        _positive("sensing.divider_current", self.divider_current, "A")
        _non_negative("sensing.diff_bandwidth", self.diff_bandwidth, "Hz")


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
        _positive("modulator.ramp", self.ramp, "V")
        _between("modulator.max_duty", self.max_duty, 0.0, 1.0, "0 and 1")


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
        _non_negative("compensator.opamp.gain_db", self.gain_db)
        _non_negative("compensator.opamp.gbw", self.gbw, "Hz")
        _non_negative("compensator.opamp.gm", self.gm, "S")
        _non_negative("compensator.opamp.r_out", self.r_out, "Ω")

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
    fc : float
        Target crossover, Hz.
    pm : float
        Target phase margin, deg.
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
        ``fp1``, ``fp2`` (Type III) or ``fz``, ``fp`` (Type II) and ``gain``.
    """

    network: str = "type2"
    fc: float = 0.0
    pm: float = 60.0
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
        _non_negative("compensator.fc", self.fc, "Hz")
        _between("compensator.pm", self.pm, 0.0, 180.0, "0 and 180 deg")
        if self.method not in METHODS:
            raise DesignError("compensator.method", self.method, f"must be one of {', '.join(METHODS)}")
        _between("compensator.gm_db", self.gm_db, 0.0, 60.0, "0 and 60 dB")
        if not (1.0 < self.fc_band <= 100.0):
            raise DesignError("compensator.fc_band", self.fc_band, "must be above 1 and at most 100 (a factor)")
        _between("compensator.boost_split", self.boost_split, 0.0, 1.0, "0 and 1")
        for name in ("resistor_series", "capacitor_series"):
            value = getattr(self, name)
            if value not in SERIES_NAMES:
                raise DesignError(f"compensator.{name}", value, f"must be one of {', '.join(SERIES_NAMES)}")
        for key, value in self.parts.items():
            if not (isinstance(value, float) and value > 0):
                raise DesignError(f"compensator.parts.{key}", value, "must be > 0")
        if self.design_corner is not None and self.design_corner < 0:
            raise DesignError("compensator.design_corner", self.design_corner, "must be a corner index >= 0 or 'worst'")


#: Control schemes accepted in ``control.scheme`` (one module each in :mod:`loopkit.schemes`).
SCHEMES = ("voltage-mode", "peak-current")


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
        _non_negative("control.sense_gain", self.sense_gain, "Ω")
        _non_negative("control.current_limit", self.current_limit, "A")
        if self.scheme == "peak-current" and not self.sense_gain > 0:
            raise DesignError("control.sense_gain", format_value(self.sense_gain, "Ω"),
                              "peak current mode needs the current-sense gain (> 0 ohm)")
        given = [k for k in ("slope", "slope_amplitude", "slope_ratio") if getattr(self, k) is not None]
        if len(given) > 1:
            raise DesignError(f"control.{given[1]}", getattr(self, given[1]),
                              f"give one of slope, slope_amplitude, slope_ratio (also given: {given[0]})")
        if self.slope is not None:
            _non_negative("control.slope", self.slope, "V/s")
        if self.slope_amplitude is not None:
            _non_negative("control.slope_amplitude", self.slope_amplitude, "V")
        if self.slope_ratio is not None:
            _between("control.slope_ratio", self.slope_ratio, -1e-12, 100.0, "0 and 100")


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
