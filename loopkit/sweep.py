"""Dense input-voltage sweep of a design's parts: margins at many input voltages, chunk by chunk.

The sweep fixes the parts a loop result shows (snapped; peak current mode also its slope, a part
built once) in a copy of the design and runs the one path over rows
(:func:`loopkit.rows.chunk_margins`) for blocks of input voltages, every load at each.  Each
block's rows fit a memory budget, so time grows linearly with the number of input voltages and
memory stays flat.  The grid is the result's own, so at the design's own corners the sweep gives
the numbers of the corner table.  The app's sweep dialog and ``loopkit sweep`` call
:func:`vin_sweep`.

A digital design keeps its controller instead of parts (:func:`loopkit.rows.fixed_controller`: the
fixed-point ``C(z)`` firmware runs where the realisation exists, else the exact one; ``VinSweep.controller``
says which), and every swept corner's loop is ``Tu(z) C(z)`` with margins on the unit circle up to fs/2.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from .bounds import MAX_CORNERS
from .design import Design
from .errors import DesignError
from .result import LoopResult, apply_parts
from .rows import MEMORY_BUDGET_BYTES, bytes_per_row_point, chunk_margins, fixed_controller, is_digital

__all__ = ["VinSweep", "sweep_design", "vin_sweep"]


def sweep_design(design: Design, result: LoopResult, vin_values) -> Design:
    """The design with the result's parts fixed and the input voltages replaced by ``vin_values``."""
    fixed = apply_parts(design, result)
    comp = replace(fixed.compensator, design_corner=None)  # parts are given: no design corner needed
    if fixed.control.scheme == "peak-current":  # the slope the result was analysed with, kept for every input
        se = float(result.open_loop.figures["se_v_per_s"][0])
        fixed = replace(fixed, control=replace(fixed.control, slope=se, slope_amplitude=None, slope_ratio=None))
    return replace(fixed, compensator=comp,
                   operating=replace(fixed.operating, vin=tuple(float(v) for v in vin_values)))


@dataclass(frozen=True)
class VinSweep:
    """Margins per (input voltage, load), input voltage outermost; ``cancelled`` when stopped early.

    Arrays ``vin``, ``load`` (V, A), ``fc_hz``, ``pm_deg``, ``gm_db``, ``stable`` have one entry per
    swept corner (fewer than asked for when cancelled).  ``controller``: for a digital design, which
    controller was kept fixed (empty for an analog network's parts).
    """

    vin: np.ndarray
    load: np.ndarray
    fc_hz: np.ndarray
    pm_deg: np.ndarray
    gm_db: np.ndarray
    stable: np.ndarray
    cancelled: bool = False
    controller: str = ""

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in ("vin", "load", "fc_hz", "pm_deg", "gm_db", "stable")}


def vin_sweep(design: Design, result: LoopResult, vin_values, progress=None, cancelled=None,
              budget_bytes: int = MEMORY_BUDGET_BYTES) -> VinSweep:
    """Margins at every input voltage of ``vin_values`` and every load, with the result's parts.

    Parameters
    ----------
    design : Design
    result : LoopResult
        A feasible result (its parts, targets and frequency grid are used).
    vin_values : sequence of float
        Input voltages, V.
    progress : callable, optional
        ``progress(done, total)`` (input voltages) after each block.
    cancelled : callable, optional
        Checked before each block; True stops the sweep with the blocks done so far.
    budget_bytes : int
        Working memory of one block.

    Returns
    -------
    VinSweep
    """
    if not result.feasible:
        raise DesignError("compensator.parts", "(none)", "the sweep needs parts: the design has no feasible result")
    vin_values = np.asarray(vin_values, float)
    if vin_values.ndim != 1 or vin_values.size == 0:
        raise DesignError("vin", vin_values.size, "give at least one input voltage")
    controller, which = fixed_controller(result) if is_digital(design) else (None, "")
    n_load = len(design.operating.load)
    rows = max(1, int(budget_bytes // (bytes_per_row_point(design) * result.f_hz.size)))
    size = max(1, min(rows // n_load, MAX_CORNERS // n_load))
    parts = {k: [] for k in ("vin", "load", "fc_hz", "pm_deg", "gm_db", "stable")}
    stopped = False
    for start in range(0, vin_values.size, size):
        if cancelled is not None and cancelled():
            stopped = True
            break
        block = sweep_design(design, result, vin_values[start:start + size])
        m = chunk_margins(block, [], np.zeros((1, 0)), result.f_hz, controller)
        vin, load = block.operating.corners()
        parts["vin"].append(vin)
        parts["load"].append(load)
        for key in ("fc_hz", "pm_deg", "gm_db", "stable"):
            parts[key].append(getattr(m, key)[0])
        if progress is not None:
            progress(min(start + size, vin_values.size), vin_values.size)
    empty = {"stable": np.zeros(0, bool)}
    out = {k: np.concatenate(v) if v else empty.get(k, np.zeros(0)) for k, v in parts.items()}
    return VinSweep(**out, cancelled=stopped, controller=which)
