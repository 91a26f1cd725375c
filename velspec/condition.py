"""The condition stage: trace editing, band-pass, top mute, gain and supergathers of CMP gathers.

Public functions take and return numpy arrays (traces float32 ``(ntr, ns)`` sorted by absolute
offset, offsets in m, times in s). :func:`condition_gather` runs the steps of a
:class:`velspec.params.ConditionParams` on one gather in a fixed order (edit, band-pass, mute,
gain) and returns the gather with a :class:`ConditionReport` of what it left out;
:func:`supergather` combines neighbouring CMPs by offset bin. Every result is the same bits on
any machine load or thread count.

The per-sample loops (spike test, first breaks, mute, AGC) are small serial numba kernels beside
their public callers: each takes well under a millisecond per gather, less than starting threads
would cost, and runs on the thread of its caller. The band-pass is scipy's.

References
----------
Butterworth, S., 1930, On the theory of filter amplifiers, Experimental Wireless and the Wireless
Engineer 7, 536-541 (the maximally flat band-pass; applied forward and backward for zero phase).

Coppens, F., 1985, First arrival picking on common-offset trace collections for automatic
estimation of static corrections, Geophysical Prospecting 33, 1212-1231 (the ratio of the energy
in a window after a sample to the energy before it, used for the first breaks); Wong, J., Han,
L., Bancroft, J. C. & Stewart, R. R., 2009, Automatic time-picking of first arrivals on noisy
microseismic data, CSEG conference abstract (the ratio times the sample's magnitude; from memory).

Newman, P., 1973, Divergence effects in a layered earth, Geophysics 38, 481-488 (amplitude of a
normal-incidence primary falls as 1 / (t V_rms^2); from memory).

Theil, H., 1950, A rank-invariant method of linear and polynomial regression analysis,
Indagationes Mathematicae 12, 85-91; Sen, P. K., 1968, Estimates of the regression coefficient
based on Kendall's tau, Journal of the American Statistical Association 63, 1379-1389 (the
median of pairwise slopes that fits the first breaks across the gather).

van Herk, M., 1992, A fast algorithm for local minimum and maximum filters on rectangular and
octagonal kernels, Pattern Recognition Letters 13, 517-521; Gil, J. & Werman, M., 1993,
Computing 2-D min, median, and max filters, IEEE Transactions on Pattern Analysis and Machine
Intelligence 15, 504-507 (the running maximum of the spike test; from memory).

Ayer, M., Brunk, H. D., Ewing, G. M., Reid, W. T. & Silverman, E., 1955, An empirical
distribution function for sampling with incomplete information, Annals of Mathematical
Statistics 26, 641-647 (pooling adjacent violators: the least-squares non-decreasing fit).

Hampel, F. R., 1974, The influence curve and its role in robust estimation, Journal of the
American Statistical Association 69, 383-393 (median absolute deviation, 1.4826 MAD as a
standard deviation).
"""

from __future__ import annotations

import functools
from collections.abc import Sequence
from dataclasses import asdict, dataclass

import numpy as np
from numba import njit
from scipy import signal

from .errors import InputError, ParameterError
from .params import ConditionParams

__all__ = [
    "ConditionReport",
    "condition_gather",
    "clip_spikes",
    "running_max_abs",
    "trace_outliers",
    "bandpass_sos",
    "bandpass",
    "first_breaks",
    "fit_first_breaks",
    "linear_mute_times",
    "table_mute_times",
    "apply_top_mute",
    "spherical_divergence_gain",
    "agc",
    "supergather",
    "MAD_TO_SIGMA",
    "SPIKE_NEIGHBOURS",
]

MAD_TO_SIGMA = 1.4826
"""Median absolute deviation times this is the standard deviation of Gaussian data (Hampel, 1974)."""
SPIKE_NEIGHBOURS = 2
"""Traces on each side, in offset order, whose amplitudes protect a sample from being a spike."""
_FIRST_BREAK_STABILISER = 1e-6  # of the mean window energy: finite in exact silence, nothing more
_AGC_FLOOR = 1e-6  # of the trace's largest window RMS: silence is left silent, not blown up


@dataclass(frozen=True)
class ConditionReport:
    """What :func:`condition_gather` did to one gather, as counts for the QC record.

    Attributes
    ----------
    traces_in : int
        Traces given.
    traces_clipped : int
        Traces that had at least one spike clipped.
    samples_clipped : int
        Samples clipped, over all traces.
    noisy : int
        Traces left out as noisy.
    dead : int
        Traces left out as dead (all zero, non-finite samples, or far weaker than their
        neighbours).
    """

    traces_in: int = 0
    traces_clipped: int = 0
    samples_clipped: int = 0
    noisy: int = 0
    dead: int = 0

    def to_dict(self) -> dict:
        return asdict(self)


# ------------------------------------------------------------------------------------ editing

def clip_spikes(data: np.ndarray, dt: float, *, sigmas: float = 12.0, neighbour_ratio: float = 4.0,
                window: float = 0.2, usable: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Clip isolated spikes: samples far outside their trace's spread that no neighbour shares.

    A sample ``a[i, j]`` is a spike when both

    - ``|a[i, j] - m_i| > sigmas * s_i``, with ``m_i`` the median of trace i and ``s_i`` its
      robust standard deviation, 1.4826 times the median absolute deviation (Hampel, 1974); and
    - ``|a[i, j]| > neighbour_ratio * n[i, j]``, with ``n[i, j]`` the largest magnitude on the
      :data:`SPIKE_NEIGHBOURS` traces either side of trace i (in offset order) within
      ``window`` centred on sample j (cut at the trace ends).

    The first test alone would clip the direct wave or the sea floor of a trace that is
    otherwise quiet, since seismic amplitudes are far from Gaussian; the second spares every
    event that its neighbours share within the window, which spans their moveout. A spike is
    clipped to ``m_i +- sigmas * s_i``. A gather of one usable trace has no neighbours and is
    left as it is.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces, sorted by absolute offset.
    dt : float
        Sample interval, s.
    sigmas : float
        Threshold in robust standard deviations (default 12).
    neighbour_ratio : float
        How many times the neighbours' largest magnitude a spike must exceed (default 4).
    window : float
        Length of the window on the neighbours, s (default 0.2).
    usable : ndarray of bool (ntr,), optional
        Traces that may serve as neighbours and be clipped (default all); others pass unchanged.

    Returns
    -------
    data : ndarray, float32 (ntr, ns)
        A copy with the spikes clipped; every other sample has its input bits.
    clipped : ndarray, int64 (ntr,)
        Samples clipped on each trace.
    """
    out = np.array(data, dtype=np.float32, order="C")
    ntr, ns = out.shape
    clipped = np.zeros(ntr, dtype=np.int64)
    usable = np.ones(ntr, bool) if usable is None else np.asarray(usable, bool)
    rows = np.flatnonzero(usable)
    if rows.size < 2 or ns == 0 or not np.isfinite(out[rows]).all():
        return out, clipped
    every = rows.size == ntr
    a = out if every else np.ascontiguousarray(out[rows])
    envelope = running_max_abs(a, max(int(round(window / dt)) // 2, 0))
    fixed, counts = _clip_kernel(a, envelope, np.float64(sigmas), np.float32(neighbour_ratio), SPIKE_NEIGHBOURS)
    if not counts.any():
        return out, clipped
    if every:
        return fixed, counts
    out[rows] = fixed
    clipped[rows] = counts
    return out, clipped


def running_max_abs(data: np.ndarray, half: int) -> np.ndarray:
    """Largest magnitude of each trace within ``half`` samples either side of each sample.

    The window is cut at the trace ends (the same as ``scipy.ndimage.maximum_filter1d`` of the
    magnitudes with ``size = 2 half + 1`` and ``mode="nearest"``).

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces.
    half : int
        Half width of the window, samples (>= 0).

    Returns
    -------
    ndarray, float32 (ntr, ns)

    References
    ----------
    van Herk, 1992; Gil & Werman, 1993 (see the module docstring).
    """
    if half < 0:
        raise ValueError("half must be >= 0 samples")
    return _running_max_abs(np.ascontiguousarray(data, dtype=np.float32), int(half))


@njit(cache=True, nogil=True)
def _running_max_abs(a, half):
    """Largest |a| over [j - half, j + half] of each trace, cut at its ends.

    Block prefix and suffix maxima (van Herk, 1992; Gil & Werman, 1993): three passes whatever
    the window length.
    """
    ntr, ns = a.shape
    width = 2 * half + 1
    n = ns + 2 * half
    padded = np.zeros(n, np.float32)  # |a| >= 0, so zero padding is the same as a window cut at the ends
    prefix = np.empty(n, np.float32)
    suffix = np.empty(n, np.float32)
    out = np.empty_like(a)
    for i in range(ntr):
        for j in range(ns):
            padded[half + j] = abs(a[i, j])
        for b0 in range(0, n, width):
            b1 = min(b0 + width, n)
            prefix[b0] = padded[b0]
            for k in range(b0 + 1, b1):
                prefix[k] = max(prefix[k - 1], padded[k])
            suffix[b1 - 1] = padded[b1 - 1]
            for k in range(b1 - 2, b0 - 1, -1):
                suffix[k] = max(suffix[k + 1], padded[k])
        for j in range(ns):  # window [j, j + width) of the padded trace
            out[i, j] = max(suffix[j], prefix[j + width - 1])
    return out


@njit(cache=True, nogil=True)
def _clip_kernel(a, envelope, sigmas, ratio, neighbours):
    """Clip samples that no neighbouring trace's envelope matches and that lie beyond ``sigmas``
    robust deviations; the medians are found only on traces that have such samples."""
    ntr, ns = a.shape
    out = a.copy()
    counts = np.zeros(ntr, np.int64)
    alone = np.zeros(ns, np.bool_)
    near = np.empty(ns, np.float32)
    for i in range(ntr):
        near[:] = 0.0
        for k in range(max(i - neighbours, 0), min(i + neighbours, ntr - 1) + 1):
            if k != i:
                for j in range(ns):
                    near[j] = max(near[j], envelope[k, j])
        found = 0
        for j in range(ns):
            alone[j] = abs(a[i, j]) > ratio * near[j]
            found += alone[j]
        if found == 0:
            continue
        med = np.median(a[i])
        limit = np.float32(sigmas * 1.4826 * np.median(np.abs(a[i] - med)))
        lo, hi = med - limit, med + limit
        for j in range(ns):
            if alone[j] and abs(a[i, j] - med) > limit:
                out[i, j] = min(max(a[i, j], lo), hi)
                counts[i] += 1
    return out, counts


def trace_outliers(data: np.ndarray, *, ntraces: int = 11, noisy_sigmas: float = 5.0,
                   noisy_ratio: float = 4.0, dead_ratio: float = 0.01) -> tuple[np.ndarray, np.ndarray]:
    """Noisy and dead traces, by each trace's RMS against its neighbours in offset.

    The reference of trace i is the median RMS of the ``ntraces`` traces nearest it in offset
    order (the window is shifted, not shrunk, at the ends of the gather), all-zero and
    non-finite traces left out. With ``r_i`` the natural log of RMS over reference and ``s``
    1.4826 times the median absolute deviation of ``r`` over the gather (Hampel, 1974):

    - noisy: ``r_i - median(r) > noisy_sigmas * s`` and RMS > ``noisy_ratio`` x reference;
    - dead: all zero, any non-finite sample, or RMS < ``dead_ratio`` x reference.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces, sorted by absolute offset.
    ntraces : int
        Odd length of the neighbour window, traces (default 11).
    noisy_sigmas, noisy_ratio : float
        Both must be exceeded for a trace to be noisy (defaults 5 and 4).
    dead_ratio : float
        Fraction of the reference below which a trace is dead (default 0.01).

    Returns
    -------
    noisy, dead : ndarray of bool (ntr,)
    """
    a = np.asarray(data)
    ntr = a.shape[0]
    finite = np.isfinite(a).all(axis=1)
    rms = np.zeros(ntr)
    if finite.any():
        rms[finite] = np.sqrt(np.mean(np.square(a[finite], dtype=np.float64), axis=1))
    live = finite & (rms > 0)
    noisy = np.zeros(ntr, bool)
    dead = ~live
    if live.sum() < 2:
        return noisy, dead
    n = min(ntraces, ntr)
    start = np.clip(np.arange(ntr) - n // 2, 0, ntr - n)
    window = start[:, None] + np.arange(n)[None, :]
    values = np.where(live, rms, np.nan)[window]
    has = np.isfinite(values).any(axis=1)
    ref = np.full(ntr, np.nan)
    ref[has] = np.nanmedian(values[has], axis=1)
    judged = live & has
    dead |= judged & (rms < dead_ratio * np.where(has, ref, 0.0))
    judged &= ~dead
    if judged.sum() < 2:
        return noisy, dead
    r = np.log(rms[judged] / ref[judged])
    centre = np.median(r)
    spread = MAD_TO_SIGMA * np.median(np.abs(r - centre))
    loud = (r - centre > noisy_sigmas * spread) & (rms[judged] > noisy_ratio * ref[judged])
    noisy[np.flatnonzero(judged)[loud]] = True
    return noisy, dead


# ---------------------------------------------------------------------------------- band-pass

@functools.lru_cache(maxsize=32)
def _design(dt: float, low: float, high: float, order: int) -> np.ndarray:
    if low > 0 and high > 0:
        return signal.butter(order, [low, high], btype="bandpass", fs=1.0 / dt, output="sos")
    if low > 0:
        return signal.butter(order, low, btype="highpass", fs=1.0 / dt, output="sos")
    return signal.butter(order, high, btype="lowpass", fs=1.0 / dt, output="sos")


def bandpass_sos(dt: float, low: float, high: float, order: int = 4) -> np.ndarray:
    """Butterworth design, as second-order sections, for :func:`bandpass`.

    Parameters
    ----------
    dt : float
        Sample interval, s.
    low, high : float
        Corner frequencies, Hz, where one pass has gain 1/sqrt(2); 0 leaves that side open
        (``high = 0``: high-pass, ``low = 0``: low-pass).
    order : int
        Order of one pass (default 4).

    Returns
    -------
    sos : ndarray (nsections, 6)
        As from ``scipy.signal.butter(..., output="sos")``.

    Raises
    ------
    ParameterError
        When a corner is not below the Nyquist frequency of ``dt``.

    References
    ----------
    Butterworth, S., 1930, On the theory of filter amplifiers.
    """
    nyquist = 0.5 / dt
    for name, f in (("bandpass_low", low), ("bandpass_high", high)):
        if f >= nyquist:
            raise ParameterError(f"{name} ({f:g} Hz) must be below the Nyquist frequency {nyquist:g} Hz of "
                                 f"this data (sample interval {dt * 1000:g} ms); lower it, or set it to 0")
    if not (low > 0 or high > 0):
        raise ParameterError("the band-pass needs bandpass_low or bandpass_high above 0 Hz")
    return _design(float(dt), float(low), float(high), int(order)).copy()  # designed once per setting


def bandpass(data: np.ndarray, dt: float, low: float = 4.0, high: float = 60.0, order: int = 4) -> np.ndarray:
    """Zero-phase Butterworth band-pass of every trace.

    The filter of :func:`bandpass_sos` is run forward and backward (``scipy.signal.sosfiltfilt``,
    odd extension at the trace ends), so the phase cancels: events keep their times and a
    symmetric wavelet stays symmetric. The amplitude response is the square of one pass's:
    1/2 (-6 dB) at the corners.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces.
    dt : float
        Sample interval, s.
    low, high : float
        Corner frequencies, Hz (defaults 4 and 60); 0 leaves that side open.
    order : int
        Order of one pass (default 4).

    Returns
    -------
    ndarray, float32 (ntr, ns)

    References
    ----------
    Butterworth, S., 1930, On the theory of filter amplifiers; scipy.signal.sosfiltfilt.
    """
    a = np.asarray(data)
    sos = bandpass_sos(dt, low, high, order)
    if a.size == 0:
        return np.array(a, dtype=np.float32)
    # scipy's default edge padding, shortened for traces shorter than it
    ntaps = 2 * len(sos) + 1 - min(int((sos[:, 2] == 0).sum()), int((sos[:, 5] == 0).sum()))
    padlen = min(3 * ntaps, a.shape[-1] - 1)
    out = signal.sosfiltfilt(sos, a.astype(np.float64), axis=-1, padlen=padlen)
    return np.ascontiguousarray(out, dtype=np.float32)


# --------------------------------------------------------------------------------------- mute

def first_breaks(data: np.ndarray, dt: float, t_first: float = 0.0, window: float = 0.03) -> np.ndarray:
    """First-arrival time of each trace, from the ratio of the energy after a sample to that before.

    For sample i, ``R(i) = E[i, i + L) / (E[0, i) + beta)``: the energy in the L samples from
    i on over all the energy before i (Coppens, 1985), with ``beta`` a millionth of the trace's
    mean energy in L samples so that exact silence ahead of the first arrival does not divide
    by zero (any noise outweighs it). Ahead of an onset in noise the ratio is nearly flat for up
    to L samples, so the pick is then moved, within L of the maximum, to the maximum of
    ``R(i) |a(i)|``, the modified energy ratio of Wong et al. (2009), which falls on the first
    large sample of the arrival.
    Because the denominator holds everything before i, the ratio favours the first strong energy
    over a later reflection; the first break is its maximum. The search starts at i = L, so that
    the sum before i spans a window at least: a break cannot be found in the first L samples.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces.
    dt : float
        Sample interval, s.
    t_first : float
        Time of the first sample, s (default 0).
    window : float
        Length L of the window after the sample, s (default 0.03, about a period).

    Returns
    -------
    ndarray, float64 (ntr,)
        First-break times, s; ``t_first`` for an all-zero trace.

    References
    ----------
    Coppens, F., 1985, First arrival picking on common-offset trace collections for automatic
    estimation of static corrections, Geophysical Prospecting 33, 1212-1231.

    Wong, J., Han, L., Bancroft, J. C. & Stewart, R. R., 2009, Automatic time-picking of first
    arrivals on noisy microseismic data, CSEG conference abstract (from memory).
    """
    a = np.ascontiguousarray(data, dtype=np.float32)
    ntr, ns = a.shape
    length = min(max(int(round(window / dt)), 1), ns)
    if ns < 2 * length:
        return np.full(ntr, t_first + dt * min(length, ns - 1))
    return t_first + dt * _first_break_kernel(a, length, _FIRST_BREAK_STABILISER)


@njit(cache=True, nogil=True)
def _first_break_kernel(a, length, stabiliser):
    """Sample of the first break of each trace: energy ratio maximum, then R |a| within L of it."""
    ntr, ns = a.shape
    picks = np.empty(ntr, np.int64)
    last = ns - length  # largest i whose window [i, i + L) fits
    for i in range(ntr):
        energy = np.zeros(ns + 1)  # energy[k] = sum of a^2 over samples 0 .. k-1
        for j in range(ns):
            energy[j + 1] = energy[j] + np.float64(a[i, j]) * a[i, j]
        beta = stabiliser * energy[ns] * length / ns
        if beta <= 0:
            beta = 1.0
        best, coarse = -1.0, length
        for j in range(length, last + 1):  # from L on: fewer samples before j would flatter early noise
            r = (energy[j + length] - energy[j]) / (energy[j] + beta)
            if r > best:
                best, coarse = r, j
        best, pick = -1.0, coarse
        for j in range(max(coarse - length, length), min(coarse + length, last) + 1):
            r = (energy[j + length] - energy[j]) / (energy[j] + beta) * abs(a[i, j])
            if r > best:
                best, pick = r, j
        picks[i] = pick
    return picks


def fit_first_breaks(offsets: np.ndarray, times: np.ndarray, ntraces: int = 7,
                     tolerance: float = 0.008) -> np.ndarray:
    """Robust fit of first-break times across a gather: local straight lines, then non-decreasing.

    First arrivals of a flat earth are piecewise linear in offset (direct wave, then head
    waves), so the fit is made of local lines, in three steps:

    1. wrong picks are found: about one straight line through all picks (slope the median of
       the pairwise slopes, Theil, 1950; Sen, 1968), the residuals minus their running median
       over ``ntraces`` traces are compared with 3 robust standard deviations (1.4826 MAD,
       Hampel, 1974), but never less than ``tolerance``; picks beyond are left out;
    2. each trace gets the value at its offset of the robust line (Theil-Sen slope, median
       intercept) through the ``ntraces`` kept picks nearest it in offset (window shifted, not
       shrunk, at the ends), so a left-out pick is bridged, or extended at an end, by its
       neighbours' line;
    3. the result is made non-decreasing in absolute offset by pooling adjacent violators
       (Ayer et al., 1955).

    Parameters
    ----------
    offsets : ndarray (ntr,)
        Offsets, m, sorted by absolute value.
    times : ndarray (ntr,)
        First-break picks, s (:func:`first_breaks`).
    ntraces : int
        Odd window length, traces (default 7); 1 makes the picks non-decreasing only.
    tolerance : float
        Smallest misfit that marks a pick as wrong, s (default 0.008, two samples of 4 ms).

    Returns
    -------
    ndarray, float64 (ntr,)
        Fitted first-break times, s.

    References
    ----------
    Theil, 1950; Sen, 1968; Hampel, 1974; Ayer et al., 1955 (see the module docstring).
    """
    x = np.abs(np.asarray(offsets, dtype=np.float64))
    t = np.asarray(times, dtype=np.float64)
    ntr = t.size
    if ntr < 3 or ntraces < 3:
        return _non_decreasing(t)
    n = min(ntraces, ntr)
    slope = _median_slope(x[None, :], t[None, :])[0]
    trend = t - slope * x
    start = np.clip(np.arange(ntr) - n // 2, 0, ntr - n)
    local = trend - np.median(trend[start[:, None] + np.arange(n)[None, :]], axis=1)
    spread = MAD_TO_SIGMA * np.median(np.abs(local - np.median(local)))
    good = np.abs(local - np.median(local)) <= max(3.0 * spread, tolerance)
    if good.sum() < 2:
        good[:] = True
    xg, tg = x[good], t[good]
    n = min(n, xg.size)
    start = np.clip(np.searchsorted(xg, x) - n // 2, 0, xg.size - n)
    idx = start[:, None] + np.arange(n)[None, :]
    xw, tw = xg[idx], tg[idx]
    slopes = _median_slope(xw, tw)
    fitted = np.median(tw + slopes[:, None] * (x[:, None] - xw), axis=1)
    return _non_decreasing(fitted)


def _median_slope(x: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Theil-Sen slope of each row of (x, t): the median of the pairwise slopes (0 if none)."""
    return _median_slope_kernel(np.ascontiguousarray(x, dtype=np.float64), np.ascontiguousarray(t, dtype=np.float64))


@njit(cache=True, nogil=True)
def _median_slope_kernel(x, t):
    rows, n = x.shape
    out = np.zeros(rows)
    pairwise = np.empty(n * (n - 1) // 2)
    for r in range(rows):
        m = 0
        for i in range(n):
            for j in range(i + 1, n):
                dx = x[r, j] - x[r, i]
                if dx != 0:  # equal offsets (split spreads) give no slope
                    pairwise[m] = (t[r, j] - t[r, i]) / dx
                    m += 1
        if m:
            out[r] = np.median(pairwise[:m])
    return out


def _non_decreasing(y: np.ndarray) -> np.ndarray:
    """Least-squares non-decreasing fit by pooling adjacent violators (Ayer et al., 1955)."""
    means: list[float] = []
    counts: list[int] = []
    for value in y:
        means.append(float(value))
        counts.append(1)
        while len(means) > 1 and means[-2] > means[-1]:
            c = counts[-2] + counts[-1]
            means[-2] = (means[-2] * counts[-2] + means[-1] * counts[-1]) / c
            counts[-2] = c
            means.pop()
            counts.pop()
    return np.repeat(np.array(means), counts)


def linear_mute_times(offsets: np.ndarray, intercept: float, velocity: float) -> np.ndarray:
    """Mute times of a linear moveout, ``t = intercept + |x| / velocity``, s.

    Parameters
    ----------
    offsets : ndarray (ntr,)
        Offsets, m.
    intercept : float
        Time at zero offset, s.
    velocity : float
        Apparent velocity, m/s.
    """
    return intercept + np.abs(np.asarray(offsets, dtype=np.float64)) / velocity


def table_mute_times(offsets: np.ndarray, table) -> np.ndarray:
    """Mute times from a table of (offset m, time s) rows, linear between, held beyond the ends.

    Parameters
    ----------
    offsets : ndarray (ntr,)
        Offsets, m (sign ignored).
    table : sequence of (offset, time) rows
        Offsets increasing.
    """
    rows = np.asarray(table, dtype=np.float64).reshape(-1, 2)
    return np.interp(np.abs(np.asarray(offsets, dtype=np.float64)), rows[:, 0], rows[:, 1])


def apply_top_mute(data: np.ndarray, dt: float, t_first: float, times: np.ndarray,
                   taper: float = 0.03) -> np.ndarray:
    """Zero each trace above its mute time, with a cosine taper below it.

    The weight at sample time t of trace i is 0 for ``t <= times[i]``, rises as
    ``(1 - cos(pi (t - times[i]) / taper)) / 2`` over the taper, and is 1 beyond it, where the
    samples keep their input bits.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces.
    dt, t_first : float
        Sample interval and time of the first sample, s.
    times : ndarray (ntr,)
        Mute time of each trace, s.
    taper : float
        Taper length, s (default 0.03); 0 for a hard mute.

    Returns
    -------
    ndarray, float32 (ntr, ns)
    """
    out = np.array(data, dtype=np.float32, order="C")
    start = (np.asarray(times, dtype=np.float64) - t_first) / dt  # mute line in samples
    _mute_kernel(out, np.ascontiguousarray(start), taper / dt)
    return out


@njit(cache=True, nogil=True)
def _mute_kernel(a, start, taper):
    """In place: zero samples at or above ``start`` (in samples), cosine taper over ``taper`` samples."""
    ntr, ns = a.shape
    for i in range(ntr):
        for j in range(ns):
            late = j - start[i]
            if late <= 0:
                a[i, j] = 0.0
            elif late < taper:
                a[i, j] = np.float32(a[i, j] * (0.5 * (1.0 - np.cos(np.pi * late / taper))))
            else:
                break


# --------------------------------------------------------------------------------------- gain

def spherical_divergence_gain(ns: int, dt: float, t_first: float, velocity_table) -> np.ndarray:
    """Gain that undoes spherical divergence: ``g(t) = t v(t)^2 / v0^2``.

    A primary's amplitude falls as 1 / (t V_rms(t)^2) in a layered earth (Newman, 1973), so
    this gain, with ``v`` the RMS velocity function and ``v0`` its first value, makes it
    constant. ``g`` is in seconds (1 at t = 1 s where v = v0); samples at or before t = 0 get 0.

    Parameters
    ----------
    ns : int
        Samples per trace.
    dt, t_first : float
        Sample interval and time of the first sample, s.
    velocity_table : sequence of (time, velocity) rows
        RMS velocity function, s and m/s, linear between the rows and held beyond them.

    Returns
    -------
    ndarray, float64 (ns,)
        Multiply each trace by it.

    References
    ----------
    Newman, P., 1973, Divergence effects in a layered earth, Geophysics 38, 481-488 (from memory).
    """
    rows = np.asarray(velocity_table, dtype=np.float64).reshape(-1, 2)
    t = t_first + dt * np.arange(ns)
    v = np.interp(t, rows[:, 0], rows[:, 1])
    return np.maximum(t, 0.0) * (v / rows[0, 1]) ** 2


def agc(data: np.ndarray, dt: float, window: float = 0.5) -> np.ndarray:
    """Automatic gain control: each sample divided by the RMS of its trace in a window around it.

    The window is centred on the sample, an odd number of samples long, and cut short at the
    trace ends (the RMS is then over the samples it holds). Where the RMS is below a millionth
    of the trace's largest, as in a muted zone, the output is 0: silence stays silent.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces.
    dt : float
        Sample interval, s.
    window : float
        Window length, s (default 0.5).

    Returns
    -------
    ndarray, float32 (ntr, ns)
        Traces with RMS 1 in each window (where the amplitude level is steady over it).

    References
    ----------
    Automatic gain control, common practice, no source.
    """
    a = np.ascontiguousarray(data, dtype=np.float32)
    half = max(int(round(window / dt)) // 2, 0)
    return _agc_kernel(a, half, _AGC_FLOOR)


@njit(cache=True, nogil=True)
def _agc_kernel(a, half, floor):
    """Each sample over the RMS of its trace in [j - half, j + half], cut at the ends; 0 in silence."""
    ntr, ns = a.shape
    out = np.zeros_like(a)
    for i in range(ntr):
        energy = np.zeros(ns + 1)
        for j in range(ns):
            energy[j + 1] = energy[j] + np.float64(a[i, j]) * a[i, j]
        rms = np.empty(ns)
        for j in range(ns):
            lo, hi = max(j - half, 0), min(j + half + 1, ns)
            rms[j] = np.sqrt(max(energy[hi] - energy[lo], 0.0) / (hi - lo))
        least = floor * rms.max()
        for j in range(ns):
            if rms[j] > least and rms[j] > 0:
                out[i, j] = np.float32(a[i, j] / rms[j])
    return out


# -------------------------------------------------------------------------------- supergather

def supergather(gathers: Sequence[tuple[np.ndarray, np.ndarray]], bin_width: float = 0.0
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Combine neighbouring CMP gathers into one by offset bin.

    All traces of all gathers are put in offset bins of ``bin_width`` whose centres are the
    smallest absolute offset plus whole multiples of the width; the traces of a bin are averaged
    into one trace at the mean of their absolute offsets. Averaging traces whose offsets differ
    smears steep moveout, so the bin should stay near the gathers' own offset step.

    Parameters
    ----------
    gathers : sequence of (data, offsets)
        ``data`` (ntr_k, ns), the same ns for all, and ``offsets`` (ntr_k,) in m; conditioned
        first, so that no noisy trace enters a bin.
    bin_width : float
        Offset bin width, m; 0 (default) for the median step between the distinct absolute
        offsets of the central gather (``gathers[len(gathers) // 2]``).

    Returns
    -------
    data : ndarray, float32 (nbin, ns)
        One trace per occupied bin, sorted by offset.
    offsets : ndarray, float32 (nbin,)
        Mean absolute offset of each bin's traces, m.
    fold : ndarray, int64 (nbin,)
        Traces averaged into each.

    Raises
    ------
    InputError
        When the gathers differ in trace length or none has a trace.
    ParameterError
        When ``bin_width`` is negative, or 0 and the central gather has one distinct offset.
    """
    if not gathers:
        raise InputError("supergather needs at least one gather")
    lengths = {np.shape(d)[1] for d, _ in gathers}
    if len(lengths) != 1:
        raise InputError(f"gathers of a supergather must have the same samples per trace, got {sorted(lengths)}")
    ns = lengths.pop()
    data = np.concatenate([np.asarray(d, dtype=np.float64).reshape(-1, ns) for d, _ in gathers])
    x = np.abs(np.concatenate([np.asarray(o, dtype=np.float64).ravel() for _, o in gathers]))
    if x.size == 0:
        raise InputError("the gathers of a supergather hold no traces")
    if x.size != data.shape[0]:
        raise InputError("each gather of a supergather needs one offset per trace")
    if not (bin_width >= 0 and np.isfinite(bin_width)):
        raise ParameterError(f"supergather bin width must be >= 0 m, got {bin_width}")
    if bin_width == 0:
        centre = np.unique(np.abs(np.asarray(gathers[len(gathers) // 2][1], dtype=np.float64)))
        if centre.size < 2:
            raise ParameterError("the central gather has a single offset; give supergather_bin in m")
        bin_width = float(np.median(np.diff(centre)))
    index = np.floor((x - x.min()) / bin_width + 0.5).astype(np.int64)
    bins, inverse, fold = np.unique(index, return_inverse=True, return_counts=True)
    sums = np.zeros((bins.size, data.shape[1]))
    np.add.at(sums, inverse, data)  # sequential: the same bits every run
    mean_x = np.bincount(inverse, weights=x, minlength=bins.size) / fold
    return (np.ascontiguousarray(sums / fold[:, None], dtype=np.float32), mean_x.astype(np.float32),
            fold.astype(np.int64))


# ----------------------------------------------------------------------------- the whole stage

def condition_gather(data: np.ndarray, offsets: np.ndarray, dt: float, t_first: float,
                     params: ConditionParams | None = None) -> tuple[np.ndarray, np.ndarray, ConditionReport]:
    """Condition one CMP gather: edit, band-pass, top mute and gain, as ``params`` says.

    Order and why: editing first, so that a spike or a noise burst is not spread by the filter;
    the band-pass before the first breaks are found (cleaner picks) and before the mute (its
    ringing would otherwise refill the muted zone); the gain last, so that the AGC sees the
    muted gather. Supergathers are not made here: see :func:`supergather`. A trace holding a
    non-finite sample is always left out (and counted dead), editing on or off, since no step
    can use it.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces, sorted by absolute offset (converted to float32).
    offsets : ndarray (ntr,)
        Offsets, m.
    dt : float
        Sample interval, s.
    t_first : float
        Time of the first sample, s.
    params : ConditionParams, optional
        The steps and their settings (default ``ConditionParams()``); a ``RunParams`` is
        accepted too, for its ``condition`` field.

    Returns
    -------
    data : ndarray, float32 (ntr_kept, ns)
        The conditioned traces that were kept, in their input order.
    offsets : ndarray (ntr_kept,)
        Their offsets, the input's dtype.
    report : ConditionReport
        Counts of clipped samples and traces left out.

    Raises
    ------
    ParameterError
        When a band-pass corner is not below the data's Nyquist frequency.
    """
    p = getattr(params, "condition", params) or ConditionParams()
    a = np.array(data, dtype=np.float32, order="C")
    x = np.asarray(offsets)
    if a.ndim != 2 or x.shape != (a.shape[0],):
        raise InputError(f"a gather needs data (ntr, ns) and offsets (ntr,), got {a.shape} and {x.shape}")
    ntr = a.shape[0]
    clipped = np.zeros(ntr, dtype=np.int64)
    noisy = np.zeros(ntr, bool)
    dead = ~np.isfinite(a).all(axis=1)
    if p.edit and ntr:
        dead |= ~(a != 0).any(axis=1)
        a, clipped = clip_spikes(a, dt, sigmas=p.spike_sigmas, neighbour_ratio=p.spike_neighbour_ratio,
                                 window=p.spike_window, usable=~dead)
        noisy, dead_rms = trace_outliers(a, ntraces=p.edit_traces, noisy_sigmas=p.noisy_sigmas,
                                         noisy_ratio=p.noisy_ratio, dead_ratio=p.dead_ratio)
        dead |= dead_rms
    keep = ~(noisy | dead)
    report = ConditionReport(traces_in=ntr, traces_clipped=int((clipped[keep] > 0).sum()),
                             samples_clipped=int(clipped[keep].sum()), noisy=int(noisy.sum()),
                             dead=int(dead.sum()))
    if not keep.all():
        a, x = np.ascontiguousarray(a[keep]), x[keep]
    if a.shape[0] == 0 or a.shape[1] == 0:
        return a, x, report
    if p.bandpass:
        a = bandpass(a, dt, p.bandpass_low, p.bandpass_high, p.bandpass_order)
    if p.mute != "off":
        if p.mute == "auto":
            picks = first_breaks(a, dt, t_first, p.first_break_window)
            # never later than the direct wave at mute_velocity: where a reflection is the first
            # arrival (no direct or head wave recorded) the mute must not eat into it
            times = np.minimum(fit_first_breaks(x, picks, p.first_break_traces, tolerance=2 * dt),
                               np.abs(x) / p.mute_velocity) + p.mute_after
        elif p.mute == "linear":
            times = linear_mute_times(x, p.mute_intercept, p.mute_velocity)
        else:
            times = table_mute_times(x, p.mute_table)
        a = apply_top_mute(a, dt, t_first, times, p.mute_taper)
    if p.gain == "spherical":
        a = np.ascontiguousarray(a * spherical_divergence_gain(a.shape[1], dt, t_first, p.gain_velocity)[None, :],
                                 dtype=np.float32)
    elif p.gain == "agc":
        a = agc(a, dt, p.agc_window)
    return a, x, report
