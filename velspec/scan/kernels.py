"""Coherence kernels: one numba function per measure, parallel over trial moveouts.

Every kernel has the same signature and the same skeleton:

    for each trial (velocity, eta)            # prange: trials are independent, so the bits
        for each trace                        # do not depend on the thread count
            [j0, j1) = moveout.positions(...) # fractional sample of the event at each t0
            accumulate the measure's per-t0 sums over the live span
        sum those over the sliding window and form the measure

Kernels know nothing of files, options or progress bars; they take float32 arrays and return
a float32 panel of shape (ntrial, nt).
"""

import math

import numpy as np
from numba import njit, prange

from .moveout import positions


@njit(cache=True, nogil=True, inline="always")
def _interp(trace, p):
    # p >= 0 and p <= len - 1 (guaranteed by positions), so truncation is floor.
    k = np.uint32(p)
    if k >= trace.shape[0] - 1:
        k = np.uint32(trace.shape[0] - 2)
    f = p - np.float32(k)
    a0 = trace[k]
    return a0 + f * (trace[k + np.uint32(1)] - a0)


@njit(cache=True, nogil=True)
def _window_ratio(num, den, half, out):
    """out[j] = sum num[j-h..j+h] / sum den[j-h..j+h], 0 where the denominator is 0.

    Prefix sums in float64 keep the running window exact enough at any panel length.
    """
    nt = num.shape[0]
    cn = np.zeros(nt + 1)
    cd = np.zeros(nt + 1)
    for j in range(nt):
        cn[j + 1] = cn[j] + num[j]
        cd[j + 1] = cd[j] + den[j]
    for j in range(nt):
        lo = max(j - half, 0)
        hi = min(j + half + 1, nt)
        d = cd[hi] - cd[lo]
        out[j] = np.float32((cn[hi] - cn[lo]) / d) if d > 0.0 else np.float32(0.0)


@njit(cache=True, parallel=True, nogil=True)
def semblance(data, q_unit, trials, law, tau2, mute_c, tau_first, half):
    """Semblance panel of one gather.

    S(t0) = sum_W (sum_i a_i)^2 / sum_W (N sum_i a_i^2), with a_i the sample of trace i on the
    trial moveout, N the number of traces live at that t0 (after the stretch mute) and W the
    sliding window. Samples with fewer than two live traces contribute nothing.

    Parameters
    ----------
    data : float32 (ntr, ns)
        Traces.
    q_unit : float32 (ntr,)
        x^2 / dt^2 for each trace; times the trial slowness squared it is the moveout term q.
    trials : float32 (ntrial, 2)
        (1 / v^2, eta) of each trial.
    law : int
        Moveout law (see :mod:`velspec.scan.moveout`).
    tau2 : float32 (nt,)
        (t0 / dt)^2 of each output sample, -1 where t0 <= 0.
    mute_c : float32
        (1 + stretch_limit)^2 - 1.
    tau_first : float32
        t_first / dt.
    half : int
        Half window length in samples.

    Returns
    -------
    float32 (ntrial, nt)

    References
    ----------
    Neidell, N. S., and Taner, M. T., 1971, Semblance and other coherency measures for
    multichannel data: Geophysics 36, 482-497.
    """
    ntr, ns = data.shape
    nt = tau2.shape[0]
    out = np.empty((trials.shape[0], nt), dtype=np.float32)
    last = np.float32(ns - 1)
    for m in prange(trials.shape[0]):
        stack = np.zeros(nt, dtype=np.float32)
        energy = np.zeros(nt, dtype=np.float32)
        live = np.zeros(nt + 1, dtype=np.int32)
        pos = np.empty(nt, dtype=np.float32)
        s2 = trials[m, 0]
        eta = trials[m, 1]
        for i in range(ntr):
            j0, j1 = positions(law, tau2, q_unit[i] * s2, eta, mute_c, tau_first, last, pos)
            if j1 <= j0:
                continue
            trace = data[i]
            for j in range(j0, j1):
                a = _interp(trace, pos[j])
                stack[j] += a
                energy[j] += a * a
            live[j0] += 1
            live[j1] -= 1
        num = np.empty(nt, dtype=np.float64)
        den = np.empty(nt, dtype=np.float64)
        n = 0
        for j in range(nt):
            n += live[j]
            if n >= 2:
                num[j] = np.float64(stack[j]) * stack[j]
                den[j] = np.float64(n) * energy[j]
            else:
                num[j] = 0.0
                den[j] = 0.0
        _window_ratio(num, den, half, out[m])
    return out


@njit(cache=True, parallel=True, nogil=True)
def live_count(q_unit, trials, law, tau2, mute_c, tau_first, ns):
    """Number of live traces (inside the stretch mute and the trace) per trial and t0, int32."""
    ntr = q_unit.shape[0]
    nt = tau2.shape[0]
    out = np.zeros((trials.shape[0], nt), dtype=np.int32)
    last = np.float32(ns - 1)
    for m in prange(trials.shape[0]):
        pos = np.empty(nt, dtype=np.float32)
        live = np.zeros(nt + 1, dtype=np.int32)
        for i in range(ntr):
            j0, j1 = positions(law, tau2, q_unit[i] * trials[m, 0], trials[m, 1], mute_c, tau_first, last, pos)
            if j1 > j0:
                live[j0] += 1
                live[j1] -= 1
        n = 0
        for j in range(nt):
            n += live[j]
            out[m, j] = n
    return out
