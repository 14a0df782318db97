"""One BLAS thread for the command line and the app: loopkit's matrices are small.

loopkit works on many small matrices (a corner's state space is a few states; a row of a sweep
or a tolerance study is one of thousands), for which a multithreaded BLAS spends more time
waking its threads than computing: measured on the 2-core machine, ``loopkit sweep`` of the
inverting microcontroller sample takes 11.2 s with OpenBLAS's default threads and 4.4 s with
one (``scipy.linalg.expm`` of 4x4 matrices dominates).  :func:`limit_blas_threads` sets one
thread, unless the user chose a count with the usual environment variables: threadpoolctl limits
the BLAS already loaded (numpy's), and ``OPENBLAS_NUM_THREADS=1`` in this process's environment
starts scipy's own OpenBLAS, loaded on first use, with one thread.  Importing scipy here to limit
it at once cost every command 0.2 s of start-up, scipy-free ones included.  The library itself leaves the threads alone: a
program that imports loopkit keeps its own settings.
"""

from __future__ import annotations

import os

__all__ = ["limit_blas_threads"]

#: Environment variables with which a user sets the BLAS threads: their choice is kept.
_USER_CHOICE = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS")

_LIMITER = None


def limit_blas_threads() -> bool:
    """One BLAS thread for this process unless the environment sets a count; True when it limited."""
    global _LIMITER
    if any(os.environ.get(name) for name in _USER_CHOICE):
        return False
    os.environ["OPENBLAS_NUM_THREADS"] = "1"  # read when a BLAS library loads: scipy's, later
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # an install without it: numpy's BLAS keeps its threads, only slower
        return False
    _LIMITER = threadpool_limits(limits=1, user_api="blas")  # the ones loaded now (numpy's)
    return True
