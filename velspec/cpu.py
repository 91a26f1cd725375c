"""The machine the kernels run on: how many threads they use."""

from __future__ import annotations


def set_threads(threads: int) -> int:
    """Use ``threads`` threads in the numba kernels (0: all cores); returns the number set.

    The output bits do not depend on it: every kernel computes each output value on one thread.
    """
    import numba

    most = numba.config.NUMBA_NUM_THREADS
    n = min(threads, most) if threads > 0 else most
    numba.set_num_threads(n)
    return n
