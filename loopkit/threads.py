"""One BLAS thread for the command line and the app: loopkit's matrices are small.

loopkit works on many small matrices (a corner's state space is a few states; a row of a sweep
or a tolerance study is one of thousands), for which a multithreaded BLAS spends more time
waking its threads than computing: measured on the 2-core machine, ``loopkit sweep`` of the
inverting microcontroller sample takes 11.2 s with OpenBLAS's default threads and 4.4 s with
one (``scipy.linalg.expm`` of 4x4 matrices dominates).  :func:`limit_blas_threads` sets one
thread with threadpoolctl (the BLAS libraries numpy and scipy loaded), unless the user chose a
count with the usual environment variables.  The library itself leaves the threads alone: a
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
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # an install without it runs, only slower
        return False
    import numpy.linalg  # noqa: F401  the BLAS libraries must be loaded to be limited: numpy's and scipy's
    import scipy.linalg  # noqa: F401
    _LIMITER = threadpool_limits(limits=1, user_api="blas")
    return True
