"""Control schemes: one module per scheme, registered by design-file name.

Every scheme module provides ``NAME``, ``TITLE`` and
``uncompensated(design, stage) -> SchemeLoop`` (see :mod:`loopkit.schemes.base`).
Adding a scheme means its module, its tests and one line in :data:`SCHEME_MODULE_NAMES`.
"""

from __future__ import annotations

import importlib
from types import ModuleType

from .base import SchemeLoop

__all__ = ["SCHEME_MODULE_NAMES", "SchemeLoop", "scheme_module"]

SCHEME_MODULE_NAMES = {
    "voltage-mode": "voltage_mode",
    "peak-current": "peak_current",
    "digital": "digital",
}


def scheme_module(name: str) -> ModuleType:
    """The module of the control scheme ``name`` (a key of :data:`SCHEME_MODULE_NAMES`)."""
    return importlib.import_module(f"{__name__}.{SCHEME_MODULE_NAMES[name]}")
