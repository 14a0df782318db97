"""Shared ngspice deck writing for the compensator networks.

Every network's :func:`netlist` returns a deck built by :func:`ac_deck`: an AC
source of 1 V (with the sensed dc voltage as its dc value) drives node ``in``,
the error-amplifier output is node ``out``, and a ``.control`` block runs a
logarithmic AC sweep and writes ``frequency vr(out) vi(out)`` with ``wrdata``
to :data:`AC_OUTPUT_FILE` in the working directory.  ``ngspice -b deck.cir``
therefore produces the network's V(out)/V(in) with its sign.

An op-amp is the subcircuit :data:`OPAMP_SUBCKT` (pins: non-inverting input,
inverting input, output) from :func:`opamp_subcircuit`: a voltage-controlled
voltage source of gain :data:`IDEAL_GAIN` for an ideal amplifier, or the
finite-gain / gain-bandwidth model ``A(s) = A0 / (1 + s A0 / (2 pi GBW))``
(a gain stage, an RC pole, a unity buffer) when :class:`~loopkit.design.OpAmp`
gives it.

Public API (stable; other network modules use it):

- :func:`spice_number` -- a float as a SPICE number, 12 significant digits.
- :func:`opamp_subcircuit` -- the ``.subckt`` lines of the error op-amp.
- :func:`ac_deck` -- a whole deck from element lines.
- :func:`run_ac` -- run a deck in ngspice (batch mode) and read the response.
"""

from __future__ import annotations

import math
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..design import OpAmp

__all__ = [
    "AC_OUTPUT_FILE",
    "IDEAL_GAIN",
    "OPAMP_SUBCKT",
    "AcResult",
    "ac_deck",
    "opamp_subcircuit",
    "run_ac",
    "spice_number",
]

#: File the deck's ``wrdata`` writes, relative to ngspice's working directory.
AC_OUTPUT_FILE = "loopkit_ac.txt"

#: Gain of the behavioural source standing in for an ideal op-amp.  The deck's
#: response is the ideal one times ``1 / (1 + NG / IDEAL_GAIN)`` (NG the noise
#: gain); integrating networks reach NG ~ 1e4 at 10 Hz, which costs 0.6 deg
#: with a gain of 1e6 and 6e-4 deg with 1e9.
IDEAL_GAIN = 1e9

#: Name of the op-amp subcircuit written by :func:`opamp_subcircuit`.
OPAMP_SUBCKT = "loopkit_opamp"

#: Resistance (ohm) that gives a gain-bandwidth-only op-amp (no dc gain given)
#: a dc path: the model's dc gain is then this many V/V, i.e. 240 dB.
_GBW_ONLY_DC_GAIN = 1e12


def spice_number(x: float) -> str:
    """``x`` as a SPICE number with 12 significant digits (no unit suffix).

    Parameters
    ----------
    x : float
        Any finite real value (ohm, F, V, Hz...).

    Returns
    -------
    str
        E.g. ``"4.99e+04"``; SPICE suffixes are avoided on purpose (``m`` vs
        ``meg``).
    """
    x = float(x)
    if not math.isfinite(x):
        raise ValueError(f"SPICE value must be finite, got {x!r}")
    return f"{x:.12g}"


def opamp_subcircuit(opamp: OpAmp | None = None) -> list[str]:
    """Lines of the ``.subckt`` modelling the error op-amp.

    Parameters
    ----------
    opamp : OpAmp or None
        ``gain_db`` (open-loop dc gain, dB) and ``gbw`` (gain-bandwidth, Hz);
        0 means ideal for each.  None or an ideal op-amp gives a plain VCVS of
        gain :data:`IDEAL_GAIN`.

    Returns
    -------
    list of str
        ``.subckt loopkit_opamp inp inn out`` ... ``.ends``; instantiate with
        ``XU1 <non-inverting> <inverting> <output> loopkit_opamp``.

    Notes
    -----
    Finite model: ``E`` of gain A0 drives a 1 kohm / C pole at
    ``fa = GBW / A0`` followed by a unity buffer, so
    ``A(s) = A0 / (1 + s A0 / (2 pi GBW))``.  Only ``gbw``: A0 = 1e12 (the
    pole then sits far below any frequency of interest).  Only ``gain_db``:
    a frequency-independent gain A0.
    """
    head = f".subckt {OPAMP_SUBCKT} inp inn out"
    if opamp is None or opamp.ideal:
        return [head, f"Eamp out 0 inp inn {spice_number(IDEAL_GAIN)}", ".ends"]
    a0 = 10.0 ** (opamp.gain_db / 20.0) if opamp.gain_db > 0 else _GBW_ONLY_DC_GAIN
    if opamp.gbw <= 0:
        return [head, f"Eamp out 0 inp inn {spice_number(a0)}", ".ends"]
    r_pole = 1e3
    fa_hz = opamp.gbw / a0
    c_pole = 1.0 / (2.0 * math.pi * fa_hz * r_pole)
    return [
        head,
        f"Egain ng 0 inp inn {spice_number(a0)}",
        f"Rpole ng np {spice_number(r_pole)}",
        f"Cpole np 0 {spice_number(c_pole)}",
        "Ebuf out 0 np 0 1",
        ".ends",
    ]


def ac_deck(
    title: str,
    elements: list[str],
    *,
    v_in_dc: float = 0.0,
    subcircuits: list[str] = (),
    f_start_hz: float = 10.0,
    f_stop_hz: float = 1e6,
    points_per_decade: int = 50,
    comments: list[str] = (),
) -> str:
    """A complete ngspice deck for the AC response V(out)/V(in).

    Parameters
    ----------
    title : str
        First line of the deck (SPICE treats it as the title; newlines removed).
    elements : list of str
        Element lines of the network, using node ``in`` (driven here) and
        ``out`` (probed here); ground is ``0``.
    v_in_dc : float
        DC value of the source at ``in`` (the sensed voltage), V; it sets the
        operating point only and does not change the AC result.
    subcircuits : list of str
        Lines of ``.subckt`` definitions (e.g. :func:`opamp_subcircuit`).
    f_start_hz, f_stop_hz : float
        Sweep limits, Hz.
    points_per_decade : int
        Sweep density.
    comments : list of str
        Lines written as ``*`` comments after the title.

    Returns
    -------
    str
        The deck, ending with ``.end`` and a newline.
    """
    lines = [" ".join(str(title).split()) or "loopkit network"]
    lines += [f"* {c}" for c in comments]
    lines.append(f"* V(out)/V(in) is the network transfer function; ngspice -b writes {AC_OUTPUT_FILE}")
    lines.append(f"Vin in 0 DC {spice_number(v_in_dc)} AC 1")
    lines += list(elements)
    lines += list(subcircuits)
    lines += [
        ".control",
        "set wr_singlescale",
        "set wr_vecnames",
        f"ac dec {int(points_per_decade)} {spice_number(f_start_hz)} {spice_number(f_stop_hz)}",
        f"wrdata {AC_OUTPUT_FILE} vr(out) vi(out)",
        "quit",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


@dataclass(frozen=True, eq=False)
class AcResult:
    """AC sweep read back from ngspice.

    Attributes
    ----------
    f_hz : ndarray (nf,)
        Frequencies, Hz.
    response : ndarray (nf,) complex
        V(out)/V(in) (the source is 1 V AC).
    """

    f_hz: np.ndarray
    response: np.ndarray


def run_ac(deck: str, *, timeout_s: float = 60.0, ngspice: str | None = None) -> AcResult:
    """Run a deck from :func:`ac_deck` in ngspice batch mode and read its output.

    Parameters
    ----------
    deck : str
        The netlist text.
    timeout_s : float
        Give up after this many seconds.
    ngspice : str or None
        Path of the ngspice executable; default: found on ``PATH``.

    Returns
    -------
    AcResult

    Raises
    ------
    RuntimeError
        ngspice is missing, fails, or writes no data (the message carries
        ngspice's own output).
    """
    exe = ngspice or shutil.which("ngspice")
    if exe is None:
        raise RuntimeError("ngspice not found on PATH")
    with tempfile.TemporaryDirectory(prefix="loopkit_ngspice_") as tmp:
        path = Path(tmp) / "deck.cir"
        path.write_text(deck)
        proc = subprocess.run(
            [exe, "-b", str(path)],
            check=False,
            cwd=tmp,
            capture_output=True,
            text=True,
            timeout=timeout_s,
            stdin=subprocess.DEVNULL,
        )
        out = Path(tmp) / AC_OUTPUT_FILE
        if proc.returncode != 0 or not out.exists():
            raise RuntimeError(
                f"ngspice failed (exit {proc.returncode}):\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}"
            )
        data = np.loadtxt(out, skiprows=1, ndmin=2)
    if data.shape[0] == 0 or data.shape[1] < 3:
        raise RuntimeError(f"ngspice wrote no AC data ({data.shape})")
    return AcResult(data[:, 0].copy(), data[:, 1] + 1j * data[:, 2])
