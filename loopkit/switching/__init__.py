"""The built-in cycle-by-cycle switching simulator (numpy and scipy only; no circuit simulator inside).

Each switch state of each topology is a linear circuit (:mod:`.circuit`); the designed
controller is the network's transfer function realised as a state space (:mod:`.setup`);
the engine (:mod:`.engine`) advances every corner exactly between events (comparator,
rectifier zero current, clock); :mod:`.analysis` gives the steady state, a load step
beside the averaged model and the loop gain measured by injection.
"""

from .analysis import (
    LIMIT_DB,
    LIMIT_DEG,
    LoopGain,
    SteadyState,
    SwitchingStep,
    load_step,
    loop_gain,
    model_limit_hz,
    snap_frequencies,
    steady_state,
)
from .engine import Cancelled
from .setup import SCHEMES_SIMULATED, Setup, closed_loop_setup, open_loop_setup

__all__ = [
    "LIMIT_DB",
    "LIMIT_DEG",
    "SCHEMES_SIMULATED",
    "Cancelled",
    "LoopGain",
    "Setup",
    "SteadyState",
    "SwitchingStep",
    "closed_loop_setup",
    "load_step",
    "loop_gain",
    "model_limit_hz",
    "open_loop_setup",
    "snap_frequencies",
    "steady_state",
]
