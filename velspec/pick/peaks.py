"""Coherence peaks: where a series of maxima has an event, the sub-grid peak, its uncertainty.

References
----------
Neidell, N. S., and Taner, M. T., 1971, Semblance and other coherency measures for
multichannel data: Geophysics 36, 482-497 (semblance as the coherent share of the energy).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ..params import PickParams
from ..result import empty_picks

# The two factors of peak_sigma, set once by maximum likelihood so that the stated sigma matches
# the scatter of picks about exact stacking velocities on generated lines (96 traces per CMP,
# S/N 0.5-4, seeds 3, 9, 17; default scan and smoothing); tests/test_uncertainty.py checks them
# on other seeds.
SIGMA_NOISE = 0.13
SIGMA_MODEL = 0.001

def peak_sigma(column: np.ndarray, velocities: np.ndarray, r: int, v: float, c: float) -> float:
    """Velocity uncertainty (one standard deviation, m/s) of a pick from its peak's shape.

    ``sqrt((SIGMA_NOISE * w * sqrt((1 - c) / c))^2 + (SIGMA_MODEL * v)^2)``: ``w`` is the half
    width of the peak at half its height above the column's background (its median), in m/s;
    ``c`` the coherence at the peak. For semblance, c is the share of the energy that stacks
    coherently (Neidell & Taner, 1971), so (1 - c) / c is the noise-to-signal power ratio of the
    event: a narrow peak of a clean event is sure, a broad or weak one is not. The second term is
    what no peak shape shows: a coherence maximum and the least-squares hyperbola through the
    event's times differ by about 0.1 % of the velocity.

    References
    ----------
    Neidell, N. S., and Taner, M. T., 1971, Semblance and other coherency measures for
    multichannel data: Geophysics 36, 482-497.
    """
    return float(_peak_sigma(np.ascontiguousarray(column, dtype=np.float32),
                             np.ascontiguousarray(velocities, dtype=np.float64), int(r), float(v), float(c),
                             SIGMA_NOISE, SIGMA_MODEL))


@njit(cache=True, nogil=True)
def _peak_sigma(column, velocities, r, v, c, k_noise, k_model):
    nv = column.size
    b = np.median(column)
    half = 0.5 * (c + b)
    i = r
    while i > 0 and column[i - 1] > half:
        i -= 1
    left = 0.0 if i == 0 else i - (column[i] - half) / max(column[i] - column[i - 1], 1e-12)
    i = r
    while i < nv - 1 and column[i + 1] > half:
        i += 1
    right = nv - 1.0 if i == nv - 1 else i + (column[i] - half) / max(column[i] - column[i + 1], 1e-12)
    grid = np.arange(nv).astype(np.float64)
    width = 0.5 * (np.interp(right, grid, velocities) - np.interp(left, grid, velocities))
    cc = min(max(c, 1e-3), 0.999)
    noise = k_noise * width * np.sqrt((1.0 - cc) / cc)
    return np.sqrt(noise * noise + (k_model * v) ** 2)



def event_columns(along: np.ndarray, t0: np.ndarray, dt: float, params: PickParams):
    """Columns where a series of coherence maxima has an event: prominent peaks, each moved to
    the centre of its plateau, ascending and unique."""
    sep = max(int(round(params.min_separation / dt)), 1)
    peaks, left, right = _prominent_peaks(np.ascontiguousarray(along, dtype=np.float64), float(params.min_coherence),
                                          float(params.min_prominence), sep, float(t0[0]), float(dt),
                                          float(params.tmin))
    if not peaks.size:
        return []
    # Semblance of a zero-phase wavelet is a plateau about the event: its centre (where the
    # plateau falls to half its prominence on either side) is steadier than its noisy maximum.
    centres = np.clip(np.rint(0.5 * (left + right)).astype(np.int64), 0, t0.size - 1)
    return [int(j) for j in np.unique(centres)]


@njit(cache=True, nogil=True)
def _prominent_peaks(x, hmin, pmin, distance, t_first, dt, tmin):
    """Peaks of ``x`` as ``scipy.signal.find_peaks(x, height=hmin, prominence=pmin,
    distance=distance)`` selects them, those at t >= tmin, with the interpolated positions where
    each falls to half its prominence (``scipy.signal.peak_widths(..., rel_height=0.5)``)."""
    n = x.size
    # local maxima; a flat top counts once, at its middle
    cand = np.empty(n // 2 + 1, dtype=np.int64)
    m = 0
    i = 1
    while i < n - 1:
        if x[i - 1] < x[i]:
            ahead = i + 1
            while ahead < n - 1 and x[ahead] == x[i]:
                ahead += 1
            if x[ahead] < x[i]:
                cand[m] = (i + ahead - 1) // 2
                m += 1
                i = ahead
        i += 1
    peaks = np.empty(m, dtype=np.int64)
    k = 0
    for q in range(m):
        if x[cand[q]] >= hmin:
            peaks[k] = cand[q]
            k += 1
    peaks = peaks[:k]
    # distance: higher peaks first, each removes lower ones closer than `distance`
    keep = np.ones(k, dtype=np.bool_)
    order = np.argsort(x[peaks], kind="mergesort")
    for q in range(k - 1, -1, -1):
        j = order[q]
        if not keep[j]:
            continue
        a = j - 1
        while a >= 0 and peaks[j] - peaks[a] < distance:
            keep[a] = False
            a -= 1
        a = j + 1
        while a < k and peaks[a] - peaks[j] < distance:
            keep[a] = False
            a += 1
    peaks = peaks[keep]
    out = np.empty(peaks.size, dtype=np.int64)
    lefts = np.empty(peaks.size)
    rights = np.empty(peaks.size)
    c = 0
    for p in peaks:
        top = x[p]
        # prominence: down each side until a higher sample or the end, the lowest point
        lo_min, lo_base = top, p
        i = p
        while i >= 0 and x[i] <= top:
            if x[i] < lo_min:
                lo_min, lo_base = x[i], i
            i -= 1
        hi_min, hi_base = top, p
        i = p
        while i <= n - 1 and x[i] <= top:
            if x[i] < hi_min:
                hi_min, hi_base = x[i], i
            i += 1
        prominence = top - max(lo_min, hi_min)
        if prominence < pmin or t_first + p * dt < tmin:
            continue
        height = top - 0.5 * prominence
        i = p
        while lo_base < i and height < x[i]:
            i -= 1
        left = float(i)
        if x[i] < height:
            left += (height - x[i]) / (x[i + 1] - x[i])
        i = p
        while i < hi_base and height < x[i]:
            i += 1
        right = float(i)
        if x[i] < height:
            right -= (height - x[i]) / (x[i - 1] - x[i])
        out[c] = p
        lefts[c] = left
        rights[c] = right
        c += 1
    return out[:c], lefts[:c], rights[:c]



def refine_peak(column: np.ndarray, velocities: np.ndarray, r: int) -> tuple[float, float]:
    """Sub-sample peak by a parabola through (r-1, r, r+1); the vertex mapped back to velocity."""
    if r == 0 or r == len(column) - 1:
        return float(velocities[r]), float(column[r])
    a, b, c = float(column[r - 1]), float(column[r]), float(column[r + 1])
    curv = a - 2.0 * b + c
    shift = 0.5 * (a - c) / curv if curv < 0 else 0.0
    shift = min(max(shift, -0.5), 0.5)
    # linear between the trial velocities on the side the vertex lies
    k = r if shift >= 0 else r - 1
    v = float(velocities[k]) + (r + shift - k) * float(velocities[k + 1] - velocities[k])
    # Every measure is at most 1 (perfect coherence); the parabola may overshoot it by a hair.
    return v, min(b - 0.25 * (a - c) * shift, 1.0)


CANDIDATE_DTYPE = np.dtype([("t0", np.float64), ("vrms", np.float64), ("coherence", np.float64),
                            ("sigma", np.float64), ("flags", np.uint16)])
"""A pick while the picker works on it: float64 throughout, converted to the pick table at the end."""


def candidate_table(entries: list) -> np.ndarray:
    """A :data:`CANDIDATE_DTYPE` table from ``(t0, v, coherence, sigma, flags)`` tuples."""
    return np.array([tuple(e) for e in entries], dtype=CANDIDATE_DTYPE)


def as_pick_table(candidates: np.ndarray) -> np.ndarray:
    """Candidates as rows of the result's pick table (:data:`velspec.result.PICK_DTYPE`)."""
    table = empty_picks(candidates.size)
    for name in CANDIDATE_DTYPE.names:
        table[name] = candidates[name]
    table["eta"] = 0.0
    return table
