"""Plain-NumPy semblance: the definition as a careful user writes it, for cross-checks and
speed ratios.

This is not used by any analysis: the tests compare the numba kernels with it, and the
benchmarks (benchmarks/run.py) give the kernel's speed as a multiple of its. float32
throughout, vectorised over traces and samples (one flat ``take`` per interpolation end point),
one trial velocity at a time, no Python loop over samples or traces.
"""

import numpy as np


def semblance_reference(data, offsets, dt, t_first, velocities, window=0.040, stretch_limit=0.5):
    """Semblance panel of one gather, computed with NumPy only (the plain definition).

    S(t0) = sum_W (sum_i a_i)^2 / sum_W (N sum_i a_i^2), with a_i the sample of trace i at
    t = sqrt(t0^2 + x_i^2 / v^2) by linear interpolation (a0 + f (a1 - a0), unfused), N the
    traces live at t0 after the NMO-stretch mute (t - t0) / t0 <= stretch_limit and inside the
    trace, W the sliding window; samples with fewer than two live traces count for nothing.
    The same arguments and panel as :func:`velspec.scan.scan_gather` with
    ``measure="semblance"``; the two agree within float32 rounding.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces (converted to float32).
    offsets : ndarray (ntr,)
        Source-receiver offsets, m (sign ignored).
    dt : float
        Sample interval, s.
    t_first : float
        Time of the first sample, s.
    velocities : ndarray (nv,)
        Trial stacking velocities, m/s.
    window : float
        Sliding window length, s, rounded to 2 half + 1 samples; default 0.040.
    stretch_limit : float
        NMO-stretch mute limit; default 0.5.

    Returns
    -------
    ndarray, float32, (nv, ns)

    References
    ----------
    Neidell, N. S., and Taner, M. T., 1971, Semblance and other coherency measures for
    multichannel data: Geophysics 36, 482-497.
    """
    data = np.ascontiguousarray(data, dtype=np.float32)
    ntr, ns = data.shape
    flat = data.ravel()
    row_start = (np.arange(ntr, dtype=np.intp) * ns)[:, None]
    x2 = (np.abs(np.asarray(offsets, dtype=np.float32)) ** 2)[:, None]
    t0 = (t_first + dt * np.arange(ns, dtype=np.float64)).astype(np.float32)[None, :]
    t02 = t0 * t0
    half = max(int(round(window / dt / 2.0)), 0)
    box = np.ones(2 * half + 1)
    out = np.empty((len(velocities), ns), dtype=np.float32)
    positive = t0 > 0
    safe_t0 = np.where(positive, t0, np.float32(1))
    inv_dt = np.float32(1.0 / dt)
    for iv, v in enumerate(np.asarray(velocities, dtype=np.float32)):
        tx = np.sqrt(t02 + x2 / (v * v))
        pos = (tx - np.float32(t_first)) * inv_dt
        live = positive & ((tx - t0) / safe_t0 <= stretch_limit) & (pos <= ns - 1)
        k = np.clip(np.floor(pos), 0, ns - 2)           # float32
        f = pos - k
        idx = k.astype(np.intp) + row_start
        a0 = flat.take(idx)
        a = a0 + f * (flat.take(idx + 1) - a0)
        a *= live
        n = live.sum(axis=0)
        stack = a.sum(axis=0)
        energy = (a * a).sum(axis=0)
        ok = n >= 2
        num = np.where(ok, stack.astype(np.float64) ** 2, 0.0)
        den = np.where(ok, n * energy.astype(np.float64), 0.0)
        wn = np.convolve(num, box, mode="same")
        wd = np.convolve(den, box, mode="same")
        out[iv] = np.where(wd > 0, wn / np.where(wd > 0, wd, 1), 0).astype(np.float32)
    return out
