"""One BLAS thread inside the numerical design calls, restored afterwards.

The design and block-size searches solve many tiny linear-algebra problems.  On the 2-core machines this
project is measured on, multi-threaded OpenBLAS spin-waits between such calls: a decoy design called from
Python took 88 ms (hoeffding) and 175 ms (exact) with the default threads against 8 ms and 23 ms with one
(our measurement; DEVELOPERS.md).  :func:`one_blas_thread` limits every loaded BLAS library to one thread for
the duration of a call and then restores the previous settings, so the caller's own numpy code is untouched.
"""

from __future__ import annotations

import contextlib
import functools

from threadpoolctl import threadpool_limits

__all__ = ["one_blas_thread", "with_one_blas_thread"]


@contextlib.contextmanager
def one_blas_thread():
    """Context manager: BLAS libraries use one thread inside the block; the previous limits come back after.

    Yields
    ------
    None

    Notes
    -----
    A thin wrapper over ``threadpoolctl.threadpool_limits(limits=1, user_api="blas")``; entering it inspects
    the loaded libraries (about 1-3 ms), so it is used around whole design calls, not inner loops.
    """
    with threadpool_limits(limits=1, user_api="blas"):
        yield


def with_one_blas_thread(fn):
    """Decorator: run ``fn`` inside :func:`one_blas_thread` (the signature and docstring are kept).

    Parameters
    ----------
    fn : callable
        A design, block-size or reach entry point.

    Returns
    -------
    callable
    """

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with one_blas_thread():
            return fn(*args, **kwargs)

    return wrapper
