"""NMO correction of a CMP gather with a velocity function of t0, stretch mute, and the CMP stack.

A sample of the corrected gather at zero-offset time t0 is read from the input trace at the
moveout time of the velocity at that t0, by linear interpolation between the two nearest samples
(the same interpolation as the coherence scan). The stretch mute is the scan's rule
(:mod:`velspec.scan.moveout`): a sample is live while (t - t0) / t0 <= stretch_limit, i.e.
x^2 / v^2 <= ((1 + s)^2 - 1) t0^2, and while its moveout time lies inside the trace. The stack
is the sum of the live samples divided by their number (the live fold), so the mute does not dim
the shallow part of the section.

References
----------
Yilmaz, O., 2001, Seismic Data Analysis, SEG, chapter 3 (NMO correction t(x) = sqrt(t0^2 +
x^2 / v^2), stretch mute, CMP stacking).
Alkhalifah, T., and Tsvankin, I., 1995, Velocity analysis for transversely isotropic media:
Geophysics 60, 1550-1566 (the nonhyperbolic moveout with the anellipticity eta).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

__all__ = ["nmo_correct", "stack_traces", "nmo_stack", "mute_factor"]


def mute_factor(stretch_limit: float) -> np.float32:
    """(1 + s)^2 - 1 in float32: a sample is live when x^2 / v^2 <= this times t0^2.

    The same float32 constant as the coherence scan's (``velspec.scan.scan_gather``), so that
    both mute the same samples.
    """
    return np.float32((1.0 + stretch_limit) ** 2 - 1.0)


@njit(cache=True, nogil=True, inline="always")
def _nmo_trace(i, data, q_unit, slow2, eta2, tau2, mute_c, tau_first, hyperbolic, out, live):
    ns = data.shape[1]
    nt = tau2.shape[0]
    last = np.float32(ns - 1)
    reach0 = (last + tau_first) * (last + tau_first)
    tiny = np.float32(1e-30)
    one = np.float32(1.0)
    trace = data[i]
    for j in range(nt):
        q = q_unit[i] * slow2[j]
        t2 = tau2[j]
        # the scan's mute (velspec.scan.moveout.hyperbolic_span): t2 >= q / mute_c, in float32
        ok = t2 >= max(q / mute_c, tiny)
        p = np.float32(-1.0)
        if ok and hyperbolic:
            if t2 <= reach0 - q:
                p = math.sqrt(t2 + q) - tau_first
        elif ok:
            e = eta2[j]
            p = math.sqrt(t2 + q - e * q * q / (t2 + (one + e) * q)) - tau_first
        if p >= 0 and p <= last:
            k = np.uint32(p)
            if k >= ns - 1:
                k = np.uint32(ns - 2)
            f = p - np.float32(k)
            a0 = trace[k]
            out[i, j] = a0 + f * (trace[k + np.uint32(1)] - a0)
            live[i, j] = 1
        else:
            out[i, j] = 0
            live[i, j] = 0


@njit(cache=True, nogil=True, parallel=True)
def _nmo_parallel(data, q_unit, slow2, eta2, tau2, mute_c, tau_first, hyperbolic, out, live):
    # One trace per thread, samples in order: the bits do not depend on the thread count.
    for i in prange(data.shape[0]):
        _nmo_trace(i, data, q_unit, slow2, eta2, tau2, mute_c, tau_first, hyperbolic, out, live)


@njit(cache=True, nogil=True)
def _nmo_serial(data, q_unit, slow2, eta2, tau2, mute_c, tau_first, hyperbolic, out, live):
    for i in range(data.shape[0]):
        _nmo_trace(i, data, q_unit, slow2, eta2, tau2, mute_c, tau_first, hyperbolic, out, live)


# Below this many samples a gather is corrected on one thread: waking the pool costs more than
# the work (a 24 x 500 gather takes ~0.1 ms alone; the wake-up ~0.05 ms idle, ms on a busy host).
PARALLEL_SAMPLES = 1 << 18


def nmo_correct(data: np.ndarray, offsets: np.ndarray, dt: float, t_first: float, velocity: np.ndarray, *,
                stretch_limit: float = 0.5, eta: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """NMO-correct a CMP gather with a stacking-velocity function of t0.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces (converted to C-contiguous float32).
    offsets : ndarray (ntr,)
        Source-receiver offsets, m (sign ignored).
    dt : float
        Sample interval, s.
    t_first : float
        Time of the first sample, s (delay recording time). The output lies on the same sample
        times, t0_j = t_first + j dt.
    velocity : ndarray (ns,)
        NMO (stacking) velocity at each output t0, m/s, > 0.
    stretch_limit : float
        Stretch mute: samples with (t - t0) / t0 above this are muted (default 0.5, the scan's
        default; give the result's ``scan.stretch_limit``).
    eta : ndarray (ns,), optional
        Anellipticity at each t0 (nonhyperbolic moveout); None for the hyperbola.

    Returns
    -------
    corrected : float32 (ntr, ns)
        The NMO-corrected gather, 0 where muted.
    live : uint8 (ntr, ns)
        1 where a sample passed the stretch mute and lay inside the trace.

    References
    ----------
    Yilmaz, O., 2001, Seismic Data Analysis, SEG: t(x) = sqrt(t0^2 + x^2 / v^2).
    Alkhalifah, T., and Tsvankin, I., 1995, Geophysics 60, 1550-1566 (eta).
    """
    data = np.ascontiguousarray(data, dtype=np.float32)
    ntr, ns = data.shape
    if ns < 2:
        raise ValueError("traces need at least two samples")
    velocity = np.asarray(velocity, dtype=np.float64)
    if velocity.shape != (ns,) or not np.all(velocity > 0):
        raise ValueError(f"velocity must hold {ns} positive values (m/s), one per sample")
    x = np.abs(np.asarray(offsets, dtype=np.float64))
    if x.shape != (ntr,):
        raise ValueError(f"offsets must hold {ntr} values, one per trace")
    # sample units, as the scan: tau = t0 / dt, q = x^2 / (v^2 dt^2) = q_unit * slow2
    q_unit = (x * x / (dt * dt)).astype(np.float32)
    slow2 = (1.0 / velocity**2).astype(np.float32)
    t0 = t_first + dt * np.arange(ns)
    tau2 = np.where(t0 > 0, (t0 / dt) ** 2, -1.0).astype(np.float32)
    eta2 = np.zeros(ns, np.float32) if eta is None else (2.0 * np.asarray(eta, dtype=np.float64)).astype(np.float32)
    out = np.empty((ntr, ns), dtype=np.float32)
    live = np.empty((ntr, ns), dtype=np.uint8)
    kernel = _nmo_parallel if ntr * ns >= PARALLEL_SAMPLES else _nmo_serial
    kernel(data, q_unit, slow2, eta2, tau2, mute_factor(stretch_limit), np.float32(t_first / dt), eta is None,
           out, live)
    return out, live


def stack_traces(corrected: np.ndarray, live: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Stack an NMO-corrected gather, normalised by the live fold of each sample.

    Parameters
    ----------
    corrected : ndarray (ntr, ns)
        NMO-corrected traces, 0 where muted.
    live : ndarray (ntr, ns)
        1 where a sample is live.

    Returns
    -------
    trace : float32 (ns,)
        Sum of the live samples over their number; 0 where none is live.
    fold : int32 (ns,)
        Live traces at each sample.

    References
    ----------
    Yilmaz, O., 2001, Seismic Data Analysis, SEG, chapter 3 (CMP stacking).
    """
    live = np.asarray(live) != 0
    fold = live.sum(axis=0, dtype=np.int32)
    total = np.where(live, corrected, 0).sum(axis=0, dtype=np.float64)   # numpy: one fixed order
    trace = np.divide(total, fold, out=np.zeros(total.shape), where=fold > 0)
    return trace.astype(np.float32), fold


def nmo_stack(data: np.ndarray, offsets: np.ndarray, dt: float, t_first: float, velocity: np.ndarray, *,
              stretch_limit: float = 0.5, eta: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """NMO-correct a gather (:func:`nmo_correct`) and stack it (:func:`stack_traces`).

    Returns
    -------
    trace : float32 (ns,)
        The CMP stack on the gather's own sample times.
    fold : int32 (ns,)
        Live fold of each sample.
    """
    corrected, live = nmo_correct(data, offsets, dt, t_first, velocity, stretch_limit=stretch_limit, eta=eta)
    return stack_traces(corrected, live)
