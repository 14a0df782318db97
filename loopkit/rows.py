"""One row axis for corners and draws: the loop and its margins for many part values at once.

A *row* is one operating corner of one *draw* (a set of part values).  Rows are laid out draw
by draw: row ``d * n_corners + c`` is corner ``c`` of draw ``d``.  :func:`row_margins` runs the
one path of :mod:`loopkit.loop` -- stage, control scheme, network, ``T = -Tu Gc``, margins -- with
every varied part value an array over the rows, so corners x draws is one vectorised
computation, in chunks of draws sized from a memory budget.

The varied quantities are :class:`loopkit.tolerances.Quantity` objects; a draw is one value of
each.  :func:`draw_design` turns one draw into an ordinary, validated :class:`Design` (the
reference a batch is checked against: every draw's margins equal a one-design run with that
draw's values).

How it stays one path: the row design is the design's own dataclasses with the varied fields
holding arrays (subclasses that skip the scalar validation; the draws' limits were validated as
quantities), and the stage, scheme and network code broadcast over them.  Where that does not
hold yet -- the four-switch stage (its modes split the corners), a varied current-sense gain,
the gm and optocoupler networks -- each draw of the chunk runs through :func:`draw_design` and
the ordinary path, and the loops are stacked before the margins, which are always vectorised.

A digital design (``control.scheme = "digital"``) has no network: what stays fixed over the rows is
its controller ``C(z)`` (:func:`fixed_controller`: the fixed-point controller firmware runs, or the
exact one where no realisation exists), passed as ``controller``.  Each row's loop is
``Tu_row(z) C(z)`` with the sampled plant of :mod:`loopkit.schemes.digital` evaluated over the rows,
and its margins come from :func:`loopkit.discrete_margins.discrete_loop_margins` (the grid must end
at fs/2).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from .design import CapacitorBank, Control, Design, Modulator, OpAmp, Operating, Stage
from .discrete import Discrete
from .discrete_margins import discrete_loop_margins
from .errors import DesignError
from .margins import Margins, loop_margins
from .networks import network_module
from .powerstage import analyse_stage
from .rational import Rational
from .result import OpenLoop
from .schemes import scheme_module

__all__ = [
    "MEMORY_BUDGET_BYTES",
    "RowMargins",
    "bytes_per_row_point",
    "draw_design",
    "draws_per_chunk",
    "fixed_controller",
    "is_digital",
    "row_loop",
    "row_margins",
    "row_open_loop",
    "row_stage",
    "vectorised",
]

#: Working memory one chunk may take (bytes); chunks of draws are sized from it.
MEMORY_BUDGET_BYTES = 128 * 2**20

#: Bytes one row takes per grid frequency while its loop is evaluated and its margins found
#: (complex responses and phases of the plant, network and loop plus the margins' temporaries).
#: tracemalloc's peak over one chunk, December, 112-141 points: 125 B (voltage-mode buck), 157 B
#: (inverting buck-boost), 224 B (peak current mode boost); rounded up with room to spare.
BYTES_PER_ROW_POINT = 400

#: The same for a digital design's rows (``Tu(z) C(z)`` carries more factors: the sampled plant's
#: delay poles and the controller's).  tracemalloc's peak over a chunk of 100 draws, December, 100-107
#: points: 327 B (the DSP buck sample), 410 B (the microcontroller inverting sample); doubled.
BYTES_PER_ROW_POINT_DIGITAL = 800

_STAGE_KEYS = ("inductance", "dcr", "r_switch", "r_rectifier")


# ------------------------------------------------------------------ the design's dataclasses over rows
class _RowStage(Stage):
    def __post_init__(self):  # values validated as quantities; here they may be arrays
        pass


class _RowModulator(Modulator):
    def __post_init__(self):
        pass


class _RowControl(Control):
    def __post_init__(self):
        pass


class _RowOpAmp(OpAmp):
    def __post_init__(self):
        pass

    @property
    def ideal(self) -> bool:
        return bool(np.all(np.asarray(self.gain_db) == 0) and np.all(np.asarray(self.gbw) == 0))


@dataclass(frozen=True)
class _RowOperating(Operating):
    draws: int = 1

    def __post_init__(self):
        pass

    def corners(self) -> tuple[np.ndarray, np.ndarray]:
        vin, load = Operating.corners(self)
        return np.tile(vin, self.draws), np.tile(load, self.draws)


class _RowDesign(Design):
    def __post_init__(self):
        pass


@dataclass(frozen=True)
class RowMargins:
    """Margins of every row, shaped (draws, corners).

    Attributes
    ----------
    fc_hz, pm_deg, gm_db : ndarray
        Crossover (Hz), phase margin (deg), gain margin (dB; inf where the phase never crosses
        -180 deg below the model's limit).
    n_crossovers : ndarray of int
    stable : ndarray of bool
        Closed loop stable (roots of 1 + T).
    gm_beyond_model : ndarray of bool
        A -180 deg crossing above half the switching frequency with too little margin there.
    dcm : ndarray of bool
        The row's corner runs in DCM (its crossover is not held to the band).
    """

    fc_hz: np.ndarray
    pm_deg: np.ndarray
    gm_db: np.ndarray
    n_crossovers: np.ndarray
    stable: np.ndarray
    gm_beyond_model: np.ndarray
    dcm: np.ndarray

    @property
    def n_draws(self) -> int:
        return self.pm_deg.shape[0]

    @staticmethod
    def concatenate(parts: list[RowMargins]) -> RowMargins:
        return RowMargins(**{k: np.concatenate([getattr(p, k) for p in parts]) for k in RowMargins.__annotations__})


def vectorised(design: Design, keys) -> bool:
    """Whether the batch path broadcasts for this design and these varied quantities."""
    net = design.compensator.network
    return (design.stage.topology != "four-switch-buck-boost" and net in ("type1", "type2", "type3")
            and "sense_gain" not in keys)


def _split(qs, values: np.ndarray) -> dict:
    return {q.key: values[:, j] for j, q in enumerate(qs)}


def draw_design(design: Design, qs, values) -> Design:
    """One draw as an ordinary, validated design (part values as given, parts in the compensator).

    Parameters
    ----------
    design : Design
        With the compensator's parts (the ones the draws vary about).
    qs : list of Quantity
    values : sequence of float
        One value per quantity.
    """
    v = {q.key: float(x) for q, x in zip(qs, values)}
    stage = design.stage
    banks = list(stage.output_caps)
    for i, b in enumerate(banks):
        changes = {k: v[f"output_caps[{i}].{k}"] for k in ("capacitance", "esr") if f"output_caps[{i}].{k}" in v}
        banks[i] = replace(b, **changes)
    stage = replace(stage, output_caps=tuple(banks), **{k: v[k] for k in _STAGE_KEYS if k in v})
    comp = design.compensator
    parts = {**comp.parts, **{k[6:]: x for k, x in v.items() if k.startswith("parts.")}}
    opamp = replace(comp.opamp, gbw=v["gbw"]) if "gbw" in v else comp.opamp
    opto = {**comp.opto, **{k: v[k] for k in ("ctr", "c_opto") if k in v}}
    out = replace(design, stage=stage, compensator=replace(comp, parts=parts, opamp=opamp, opto=opto))
    if "ramp" in v:
        out = replace(out, modulator=replace(design.modulator, ramp=v["ramp"]))
    if "sense_gain" in v:
        out = replace(out, control=replace(design.control, sense_gain=v["sense_gain"]))
    return out


def _row_design(design: Design, qs, values: np.ndarray, per_row: bool = True) -> tuple[Design, dict]:
    """The design over rows (each varied field an array over draw x corner) and the network's parts.

    ``per_row`` False: arrays over the draws only (what the network needs).
    """
    n_c, n_d = design.operating.n_corners, values.shape[0]
    v = {k: np.repeat(x, n_c) if per_row else x for k, x in _split(qs, values).items()}
    stage = design.stage
    banks = []
    for i, b in enumerate(stage.output_caps):
        banks.append(CapacitorBank(v.get(f"output_caps[{i}].capacitance", b.capacitance),
                                   v.get(f"output_caps[{i}].esr", b.esr), b.count))
    fields = {f: getattr(stage, f) for f in Stage.__dataclass_fields__}
    fields.update(output_caps=tuple(banks), **{k: v[k] for k in _STAGE_KEYS if k in v})
    op = design.operating
    comp = design.compensator
    parts = {**comp.parts, **{k[6:]: x for k, x in v.items() if k.startswith("parts.")}}
    opamp = comp.opamp
    if "gbw" in v:
        opamp = _RowOpAmp(gain_db=opamp.gain_db, gbw=v["gbw"], gm=opamp.gm, r_out=opamp.r_out)
    opto = {**comp.opto, **{k: v[k] for k in ("ctr", "c_opto") if k in v}}
    mod = design.modulator
    row = _RowDesign(**{
        **{f: getattr(design, f) for f in Design.__dataclass_fields__},  # every table the rows do not vary
        "stage": _RowStage(**fields),
        "operating": _RowOperating(op.vout, op.vin, op.load, op.vin_nominal, draws=n_d),
        "modulator": _RowModulator(v.get("ramp", mod.ramp), mod.max_duty, mod.feedforward),
        "compensator": replace(comp, opamp=opamp, opto=opto) if ("gbw" in v or opto != comp.opto) else comp,
    })
    return row, parts


def row_stage(design: Design, qs, values: np.ndarray):
    """The power stage at every row of some draws (:class:`~loopkit.powerstage.StageResult` over rows).

    The batch path's stage (not for the four-switch stage, whose modes split the corners).
    """
    values = np.atleast_2d(np.asarray(values, float))
    row, _ = _row_design(design, qs, values)
    return analyse_stage(row, findings=False)


def _loop_one(design: Design, f_hz: np.ndarray):
    from .loop import network_context

    stage = analyse_stage(design, findings=False)
    tu = scheme_module(design.control.scheme).uncompensated(design, stage, loop_only=True).tu
    gc = network_module(design.compensator.network).transfer(design.compensator.parts, network_context(design))
    open_loop = OpenLoop(tu, tu.response(f_hz), tu.phase_deg(f_hz), stage.gvg, stage.zout)
    loop, _, resp, phase = open_loop.with_network(gc, f_hz)
    return loop, resp, phase, stage.dcm


def row_open_loop(design: Design, qs, values: np.ndarray, f_hz: np.ndarray) -> tuple[OpenLoop, np.ndarray]:
    """The uncompensated loop Tu of every row (on the grid too) and the rows' DCM flags; the network's
    quantities in ``qs`` play no part here (robust synthesis varies the plant and searches the network)."""
    if is_digital(design):
        raise DesignError("control.scheme", "digital", "an analog loop (the network's plant Tu(s)); a digital"
                          " design's rows: row_loop with its controller")
    values = np.atleast_2d(np.asarray(values, float))
    keys = [q.key for q in qs]
    if design.stage.topology != "four-switch-buck-boost" and "sense_gain" not in keys:  # the plant broadcasts
        row, _ = _row_design(design, qs, values)
        stage = analyse_stage(row, findings=False)
        tu = scheme_module(design.control.scheme).uncompensated(row, stage, loop_only=True).tu
        dcm = stage.dcm
    else:
        tus, dcms = [], []
        for v in values:
            one = draw_design(design, qs, v)
            st = analyse_stage(one, findings=False)
            tus.append(scheme_module(one.control.scheme).uncompensated(one, st, loop_only=True).tu)
            dcms.append(st.dcm)
        tu, dcm = Rational.stack(tus), np.concatenate(dcms)
    return OpenLoop(tu, tu.response(f_hz), tu.phase_deg(f_hz), tu, tu), dcm


def is_digital(design: Design) -> bool:
    """Whether the design's loop is sampled (a digital controller instead of a network)."""
    return design.control.scheme == "digital"


def fixed_controller(result) -> tuple[Discrete, str]:
    """The controller a digital result's rows keep fixed, and a line saying which it is.

    The fixed-point controller's ``C(z)`` with its integer coefficients
    (:meth:`loopkit.fixedpoint.FixedPointController.quantised`, what firmware runs) where the
    realisation exists; else the exact ``C(z)`` the synthesis gave.
    """
    dig = getattr(result, "digital", None)
    if dig is None:
        raise DesignError("control.scheme", result.design.control.scheme, "a digital result (\"digital\")")
    real = dig.realisation
    if real is not None and real.fixed is not None:
        f = real.fixed
        return f.quantised(), (f"the fixed-point controller as firmware runs it (Q{f.b_frac_bits}/Q{f.a_frac_bits},"
                               f" {f.word_bits}-bit words)")
    return dig.controller, "the exact controller (no fixed-point realisation)"


def _digital_loop(design: Design, qs, values: np.ndarray, f_hz: np.ndarray, controller):
    """``Tu_row(z) C(z)`` over the rows: the sampled plant per row, the controller fixed."""
    if not isinstance(controller, Discrete) or controller.n_corners != 1:
        raise DesignError("controller", type(controller).__name__,
                          "a digital design's rows need its controller C(z), one Discrete (fixed_controller)")
    scheme = scheme_module(design.control.scheme)
    if design.stage.topology != "four-switch-buck-boost":  # the sampled plant broadcasts over the rows
        row, _ = _row_design(design, qs, values)
        stage = analyse_stage(row, findings=False)
        tu, dcm = scheme.uncompensated(row, stage).sampled, stage.dcm
    else:
        tus, dcms = [], []
        for v in values:
            one = draw_design(design, qs, v)
            st = analyse_stage(one, findings=False)
            tus.append(scheme.uncompensated(one, st).sampled)
            dcms.append(st.dcm)
        tu, dcm = Discrete.stack(tus), np.concatenate(dcms)
    loop = tu * controller
    return loop, loop.response(f_hz), loop.phase_deg(f_hz), dcm


def row_loop(design: Design, qs, values: np.ndarray, f_hz: np.ndarray, controller=None):
    """Loop gain of every row of some draws: (T, T on the grid, its continuous phase, DCM per row).

    Parameters
    ----------
    design : Design
        With the compensator's parts; peak current mode with its slope given (a fixed part).
    qs : list of Quantity
    values : ndarray (draws, quantities)
    f_hz : ndarray
        Analysis grid, Hz.
    controller : Discrete, optional
        A digital design's fixed ``C(z)`` (required for one, ignored otherwise); T is then a
        :class:`~loopkit.discrete.Discrete`.
    """
    values = np.atleast_2d(np.asarray(values, float))
    if is_digital(design):
        return _digital_loop(design, qs, values, f_hz, controller)
    if not vectorised(design, [q.key for q in qs]):
        loops = [_loop_one(draw_design(design, qs, row), f_hz) for row in values]
        return (Rational.stack([x[0] for x in loops]), np.concatenate([x[1] for x in loops]),
                np.concatenate([x[2] for x in loops]), np.concatenate([x[3] for x in loops]))
    from .loop import network_context

    n_c, n_d = design.operating.n_corners, values.shape[0]
    row, _ = _row_design(design, qs, values)
    stage = analyse_stage(row, findings=False)
    tu = scheme_module(design.control.scheme).uncompensated(row, stage, loop_only=True).tu
    # the network depends on the draw, not the corner: once per draw, then repeated over its corners
    per_draw, parts = _row_design(design, qs, values, per_row=False)
    gc = network_module(design.compensator.network).transfer(parts, network_context(per_draw))
    gc_grid = (gc.response(f_hz), gc.phase_deg(f_hz))
    if gc.n_corners > 1:
        rows = np.repeat(np.arange(n_d), n_c)
        gc, gc_grid = gc.take(rows), (gc_grid[0][rows], gc_grid[1][rows])
    open_loop = OpenLoop(tu, tu.response(f_hz), tu.phase_deg(f_hz), stage.gvg, stage.zout)
    loop, _, resp, phase = open_loop.with_network(gc, f_hz, gc_on_grid=gc_grid)
    return loop, resp, phase, stage.dcm


def draws_per_chunk(n_corners: int, n_freq: int, budget_bytes: int = MEMORY_BUDGET_BYTES,
                    per_point: int = BYTES_PER_ROW_POINT) -> int:
    """Draws per chunk so that one chunk's rows stay within ``budget_bytes`` (``per_point``: bytes per row and
    grid point, :func:`bytes_per_row_point`)."""
    return max(1, int(budget_bytes // (per_point * n_freq * n_corners)))


def bytes_per_row_point(design: Design) -> int:
    """Working memory of one row per grid point for this design's loop (analog or digital), bytes."""
    return BYTES_PER_ROW_POINT_DIGITAL if is_digital(design) else BYTES_PER_ROW_POINT


def _as_row_margins(m: Margins, dcm: np.ndarray, n_draws: int) -> RowMargins:
    def shape(x):
        return np.asarray(x).reshape(n_draws, -1)

    return RowMargins(shape(m.fc_hz), shape(m.pm_deg), shape(m.gm_db), shape(m.n_crossovers), shape(m.stable),
                      shape(m.gm_beyond_model), shape(dcm))


def row_margins(design: Design, qs, values: np.ndarray, f_hz: np.ndarray, budget_bytes: int = MEMORY_BUDGET_BYTES,
                progress=None, controller=None) -> RowMargins:
    """Margins at every corner of every draw, chunk by chunk.

    Parameters
    ----------
    design : Design
        With the compensator's parts (see :func:`row_loop`).
    qs : list of Quantity
    values : ndarray (draws, quantities)
    f_hz : ndarray
        Analysis grid, Hz (the same for every row).
    budget_bytes : int
        Working memory of one chunk (:func:`draws_per_chunk`).
    progress : callable, optional
        Called with the number of draws finished after each chunk; raising
        ``KeyboardInterrupt`` there (or anywhere) ends the run: what finished is lost only
        in this function; :func:`loopkit.montecarlo.monte_carlo` keeps it.
    controller : Discrete, optional
        A digital design's fixed ``C(z)`` (:func:`row_loop`).

    Returns
    -------
    RowMargins
        Arrays shaped (draws, corners).

    Notes
    -----
    The margins are :func:`loopkit.margins.loop_margins` of ``T = -Tu Gc`` per row: crossovers
    bracketed on the grid and refined on the exact factored loop, PM = 180 deg + phase(T) at
    the crossover, GM = -20 log10 |T| at the -180 deg crossing (Erickson & Maksimovic, 2nd ed.,
    sec. 9.4), stability from the roots of 1 + T.  A digital design's rows:
    :func:`loopkit.discrete_margins.discrete_loop_margins` of ``Tu_row(z) C(z)`` on the unit circle
    (``f_hz`` ending at fs/2), stability from the z-plane roots of 1 + T.
    """
    values = np.atleast_2d(np.asarray(values, float))
    f_hz = np.asarray(f_hz, float)
    step = draws_per_chunk(design.operating.n_corners, f_hz.size, budget_bytes, bytes_per_row_point(design))
    out = []
    for start in range(0, values.shape[0], step):
        out.append(chunk_margins(design, qs, values[start:start + step], f_hz, controller))
        if progress is not None:
            progress(min(start + step, values.shape[0]))
    return RowMargins.concatenate(out)


def chunk_margins(design: Design, qs, values: np.ndarray, f_hz: np.ndarray, controller=None) -> RowMargins:
    """Margins of one chunk of draws: a pure function of (design, quantities, draws, grid[, controller])."""
    loop, resp, phase, dcm = row_loop(design, qs, values, f_hz, controller)
    if is_digital(design):
        m = discrete_loop_margins(loop, f_hz, resp, phase)
    else:
        m = loop_margins(loop, f_hz, resp, phase, design.stage.fsw / 2)
    return _as_row_margins(m, dcm, values.shape[0])
