"""Shared by the tests: the sample designs and their loops (computed once per process), and the margins of a
loop against python-control's ``stability_margins`` (the outside reference several test files use).

Margins: python-control 0.10 ``stability_margins`` on the loop's ``to_control(k)`` (continuous or
discrete), and the closed loop's stability from ``feedback(T, 1).poles()``.
"""

from __future__ import annotations

import functools
import warnings

import numpy as np

import loopkit
from loopkit.loop import LoopSession
from loopkit.rational import TWO_PI

__all__ = ["assert_margins_equal_control", "sample_design", "sample_result"]


@functools.cache
def sample_design(name: str):
    """``sample_designs/<name>.toml``, loaded once."""
    return loopkit.load_design(f"sample_designs/{name}.toml")


@functools.cache
def sample_result(name: str):
    """The sample's designed loop at its own targets, computed once."""
    return LoopSession(sample_design(name)).run()


def assert_margins_equal_control(margins, loop, corners=None, f180: bool = True) -> None:
    """``margins`` (a :class:`loopkit.margins.Margins`) against python-control on ``loop.to_control(k)``: the
    crossover (1e-6 relative), PM and GM (1e-4 deg / dB), the phase crossover when ``f180`` and the closed
    loop's stability (poles inside the unit circle; ``loop`` discrete)."""
    import control

    for k in range(loop.n_corners) if corners is None else corners:
        ref = loop.to_control(k)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            gm, pm, _, wpc, wgc, _ = control.stability_margins(ref)
        np.testing.assert_allclose(margins.fc_hz[k], wgc / TWO_PI, rtol=1e-6)
        np.testing.assert_allclose(margins.pm_deg[k], pm, atol=1e-4)
        if np.isfinite(gm) and gm > 1:
            np.testing.assert_allclose(margins.gm_db[k], 20 * np.log10(gm), atol=1e-4)
            if f180:
                np.testing.assert_allclose(margins.f180_hz[k], wpc / TWO_PI, rtol=1e-6)
        assert margins.stable[k] == bool(np.all(np.abs(control.feedback(ref, 1).poles()) < 1))
