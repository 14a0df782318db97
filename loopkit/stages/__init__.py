"""Power-stage topologies: one module each, registered here by design-file name.

A topology module provides ``ccm(stage, vin, load, vout) -> CcmPoint``,
``dcm(stage, vin, load, vout) -> DcmPoint``, ``ideal_ratio(duty)`` and
``range_problem(stage, vin, vout)``; a composite one (four-switch) provides
``split(...)`` returning groups of corners and the module that runs each.
"""

from __future__ import annotations

from types import ModuleType

from . import boost, buck, flyback, four_switch, inverting_buck_boost

__all__ = ["TOPOLOGY_MODULES", "groups", "topology_module"]

TOPOLOGY_MODULES: dict[str, ModuleType] = {
    "buck": buck,
    "boost": boost,
    "inverting-buck-boost": inverting_buck_boost,
    "four-switch-buck-boost": four_switch,
    "flyback": flyback,
}


def topology_module(name: str) -> ModuleType:
    return TOPOLOGY_MODULES[name]


def groups(stage, vin, load, vout):
    """Corners grouped by the module that models them: (indices, stage, module, label)."""
    import numpy as np

    module = TOPOLOGY_MODULES[stage.topology]
    if hasattr(module, "split"):
        return module.split(stage, vin, load, vout)
    return [(np.arange(len(vin)), stage, module, "")]
