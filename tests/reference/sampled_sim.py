"""Brute-force time-domain simulation of a sampled loop, for checking loopkit's z-domain models.

Independent of loopkit's discretisation (never imports loopkit.discrete,
loopkit.sampled, loopkit.digital_control or loopkit.discrete_margins): the
averaged plant is realised by scipy (``scipy.signal.tf2ss``, balanced with
``scipy.linalg.matrix_balance``) and integrated event by event, exactly, with
the matrix exponential of the augmented matrix over each interval where the
plant input is constant.  The controller's difference equation runs literally
on the samples, its output goes through a zero-order hold and reaches the
plant ``delay_s`` later; the output is sampled at ``k Ts``, taking the input in
force at that instant (an input change at exactly ``k Ts`` counts).  With
``hold="edge"`` the output instead moves a PWM edge: sample k's value ``u_k``
becomes a pulse of area ``u_k Ts`` at ``k Ts + delay`` (height ``u_k / eps``,
width ``eps Ts``, ``eps = 1e-5``: the small-signal limit of a pulse-width
change of ``u_k Ts``, to within ``eps`` relative), the plant input being zero
between pulses.  A small
multi-sine perturbation is added to the controller's output and the loop gain
at each tone is ``T = -C / U`` from single-bin DFTs over a whole number of
periods, C the controller's output and U the duty command after the injection
(the series-injection method for loop gain, R. D. Middlebrook, "Measurement of
loop gain in feedback systems", Int. J. Electronics 38(4), 1975, here on
samples; from memory).
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import expm, matrix_balance
from scipy.signal import tf2ss


def plant_matrices(num_desc, den_desc):
    """(A, B, C, D) of num/den (descending powers of s, rad/s), balanced by a diagonal similarity."""
    a, b, c, d = tf2ss(np.asarray(num_desc, float), np.asarray(den_desc, float))
    _, (scale, _perm) = matrix_balance(a, permute=False, separate=True)
    a = a * (1.0 / scale)[:, None] * scale[None, :]
    b = b / scale[:, None]
    c = c * scale[None, :]
    return a, b[:, 0], c[0], float(d[0, 0])


class _Integrator:
    """x(t + h) for constant input v, from expm([[A, B], [0, 0]] h) (cached per h)."""

    def __init__(self, a, b):
        self.a, self.b = a, b
        self.cache = {}

    def step(self, x, v, h):
        key = round(h, 15)
        if key not in self.cache:
            n = self.a.shape[0]
            aug = np.zeros((n + 1, n + 1))
            aug[:n, :n] = self.a
            aug[:n, n] = self.b
            e = expm(aug * h)
            self.cache[key] = (e[:n, :n], e[:n, n])
        phi, gam = self.cache[key]
        return phi @ x + gam * v


#: The edge pulse's width, in sample periods.
EDGE_WIDTH = 1e-5


def simulate(num_desc, den_desc, ts_s, delay_s, ctrl_b, ctrl_a, injection, hold="zoh"):
    """Run the sampled loop for ``len(injection)`` samples from rest.

    Parameters
    ----------
    num_desc, den_desc : array_like
        The averaged plant from duty command to sensed output, descending in s (rad/s).
    ts_s : float
        Sample period, s.
    delay_s : float
        Total delay from the controller's output sample to the plant input, s (> 0).
    ctrl_b, ctrl_a : array_like
        Controller ``sum a_i c[k-i] = sum b_i e[k-i]`` with e = -y (negative feedback), or
        ``None`` for an open loop (c = 0).
    injection : ndarray
        Perturbation added to the controller's output at every sample.
    hold : {"zoh", "edge"}
        A held input, or a pulse at the modulated edge (module notes).

    Returns
    -------
    u, y, c : ndarray
        Duty command (after injection), output sample, controller output, per sample.
    """
    a, b, cm, d = plant_matrices(num_desc, den_desc)
    integ = _Integrator(a, b)
    tau = delay_s / ts_s  # time in units of Ts so that sample instants are exact integers
    if tau <= 0:
        raise ValueError("the literal simulation needs a delay > 0 (no algebraic loop)")
    n = len(injection)
    x = np.zeros(a.shape[0])
    v = 0.0  # plant input now
    t = 0.0
    events = []  # (time in Ts, value), in order
    u, y, c = np.zeros(n), np.zeros(n), np.zeros(n)
    e = np.zeros(n)
    closed = ctrl_b is not None
    if closed:
        cb = np.asarray(ctrl_b, float)
        ca = np.asarray(ctrl_a, float)
    head = 0
    for k in range(n):
        # advance to t = k, applying every input change at a time <= k on the way
        while head < len(events) and events[head][0] <= k:
            te, ve = events[head]
            if te > t:
                x = integ.step(x, v, (te - t) * ts_s)
                t = te
            v = ve
            head += 1
        if k > t:
            x = integ.step(x, v, (k - t) * ts_s)
            t = float(k)
        y[k] = cm @ x + d * v
        if closed:
            e[k] = -y[k]
            acc = 0.0
            for i in range(len(cb)):
                if k - i >= 0:
                    acc += cb[i] * e[k - i]
            for i in range(1, len(ca)):
                if k - i >= 0:
                    acc -= ca[i] * c[k - i]
            c[k] = acc / ca[0]
        u[k] = c[k] + injection[k]
        if hold == "edge":
            events += [(k + tau, u[k] / EDGE_WIDTH), (k + tau + EDGE_WIDTH, 0.0)]
        else:
            events.append((k + tau, u[k]))
    return u, y, c


def multisine(n_samples: int, window: int, bins, amplitude: float = 1e-3) -> np.ndarray:
    """Sum of cosines at DFT ``bins`` of a ``window``-sample period (bin window/2 is fs/2)."""
    k = np.arange(n_samples)
    return amplitude * np.sum([np.cos(2 * np.pi * m * k / window + 0.7 * i) for i, m in enumerate(bins)], axis=0)


def single_bin(x: np.ndarray, m: int) -> complex:
    """DFT of ``x`` (a whole number of periods) at bin ``m``."""
    w = x.size
    return complex(np.sum(x * np.exp(-2j * np.pi * m * np.arange(w) / w)))


def loop_gain(num_desc, den_desc, ts_s, delay_s, ctrl_b, ctrl_a, window=2048,
              bins=(8, 40, 128, 300, 512, 700, 850, 960, 1010, 1024), settle_windows=3, hold="zoh"):
    """Loop gain ``T = -C/U`` at ``bins`` (frequency ``m / (window Ts)``) from the closed-loop simulation.

    Returns (f_hz, T from the last window, T from the window before it): their
    difference shows how settled the loop is.
    """
    total = window * (settle_windows + 2)
    p = multisine(total, window, bins)
    u, _, c = simulate(num_desc, den_desc, ts_s, delay_s, ctrl_b, ctrl_a, p, hold)
    out = []
    for start in (total - window, total - 2 * window):
        seg = slice(start, start + window)
        out.append(np.array([-single_bin(c[seg], m) / single_bin(u[seg], m) for m in bins]))
    f_hz = np.asarray(bins, float) / (window * ts_s)
    return f_hz, out[0], out[1]
