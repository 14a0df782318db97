"""The built-in cycle-by-cycle switching simulator (numpy and scipy only; no circuit simulator inside).

Each switch state of each topology is a linear circuit (:mod:`.circuit`); the designed
controller is the network's transfer function realised as a state space (:mod:`.setup`);
the engine (:mod:`.engine`) advances every corner exactly between events (comparator,
rectifier zero current, clock); :mod:`.analysis` gives the steady state, a load step
beside the averaged model and the loop gain measured by injection.
"""

import importlib

#: Where each public name lives: imported on first use, so that the command line (which registers
#: ``loopkit simulate`` from :mod:`.command`) does not load the simulator for every other command.
_HOMES = {
    **dict.fromkeys(("LIMIT_DB", "LIMIT_DEG", "LoopGain", "SteadyState", "SwitchingStep", "load_step", "loop_gain",
                     "model_limit_hz", "snap_frequencies", "steady_state"), "analysis"),
    "Cancelled": "engine",
    **dict.fromkeys(("SCHEMES_SIMULATED", "Setup", "closed_loop_setup", "open_loop_setup"), "setup"),
}


def __getattr__(name: str):
    if name in _HOMES:
        return getattr(importlib.import_module(f".{_HOMES[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


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
