"""Likely multiples: predicted surface multiples, events slower than the primary trend, smears.

A primary trend at a given t0 is faster than any multiple there: a slower event has spent longer
in slow (shallow) rock than any primary could. Flat layers make every surface-related multiple
a sum of primary legs, so walking down in time each event can be checked against the pairs of
earlier events.

References
----------
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86 (the RMS
velocity of a path made of two legs).
Sheriff, R. E., and Geldart, L. P., 1995, Exploration Seismology, 2nd ed.: Cambridge University
Press (free-surface multiples, water-layer reverberations, peg-legs).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ..flags import Flag
from .peaks import candidate_table, event_columns, peak_sigma, refine_peak

MULTIPLE = int(Flag.likely_multiple)


def classify_multiples(picks: np.ndarray, slow: np.ndarray, params) -> np.ndarray:
    """Picks and slow events together, time-ordered, with ``likely_multiple`` set on the multiples.

    Flat layers make every surface-related multiple a sum of primary legs: events a and b
    combine into one at t0 = t_a + t_b whose stacking velocity is the RMS over the whole path,
    V^2 = (t_a V_a^2 + t_b V_b^2) / (t_a + t_b) (Dix, 1955). Walking down in time, a pick that
    an earlier pair of events (a primary and a primary or recognised multiple) predicts within
    ``multiple_time_tolerance`` and ``multiple_velocity_tolerance`` is a likely multiple; so
    are the slow events, which no primary trend explains, and the weaker maxima on a recognised
    multiple's smear. A sea floor that no pick holds (:func:`sea_floor`) joins the predictions.

    Parameters
    ----------
    picks, slow : candidate tables (:data:`velspec.pick.peaks.CANDIDATE_DTYPE`)
        Maxima along the traced function, and events slower than it.
    params : PickParams

    Returns
    -------
    candidate table, ascending in t0 (stable)
    """
    events = np.concatenate([picks, slow])
    events = events[np.argsort(events["t0"], kind="stable")]
    if params.multiple_margin <= 0:
        return events
    t, v, c = (np.ascontiguousarray(events[k]) for k in ("t0", "vrms", "coherence"))
    flags = np.ascontiguousarray(events["flags"])
    floor = sea_floor(t, v, flags, params)
    if floor is not None:
        # an unseen sea floor still makes multiples: it takes part in the predictions only
        t, v, c = (np.concatenate(([x], a)) for x, a in zip(floor + (1.0,), (t, v, c)))
        flags = np.concatenate((np.zeros(1, flags.dtype), flags))
    _mark_multiples(t, v, c, flags, params.multiple_time_tolerance, params.multiple_velocity_tolerance,
                    params.min_separation, MULTIPLE)
    events["flags"] = flags[1:] if floor is not None else flags
    return events


def sea_floor(t: np.ndarray, v: np.ndarray, flags: np.ndarray, params) -> tuple | None:
    """(t0, v) of a sea floor that no pick holds, or None.

    Given (``water_bottom`` > 0) it is used unless a pick lies there already. Otherwise it is
    inferred from its reverberations: when the earliest pick (t1, V1) has a companion at 1.5 t1
    with the same velocity, the two are the second and third passes of a water layer whose
    floor at t1 / 2 was too shallow to be seen inside the stretch mute, and no primary could
    keep the stacking velocity unchanged over that interval while the earth below the sea
    floor is faster than the water.
    """
    tol_t, tol_v = params.multiple_time_tolerance, params.multiple_velocity_tolerance
    if params.water_bottom > 0:
        near = np.abs(t - params.water_bottom) <= tol_t
        return None if near.any() else (params.water_bottom, params.water_velocity)
    prim = np.flatnonzero((flags & MULTIPLE) == 0)
    if prim.size < 2:
        return None
    t1, v1 = t[prim[0]], v[prim[0]]
    third = (np.abs(t - 1.5 * t1) <= tol_t) & (np.abs(v - v1) <= tol_v * v1)
    return (0.5 * t1, v1) if third.any() else None


@njit(cache=True, nogil=True)
def _mark_multiples(t, v, c, flags, tol_t, tol_v, reach, bit):
    """Set ``bit`` in ``flags`` (in place) on predicted surface multiples and on their tails."""
    n = t.size
    for i in range(n):
        if flags[i] & bit:
            continue
        hit = False
        for a in range(n):                      # any earlier event, primary or multiple ...
            if hit or t[a] >= t[i] - tol_t:
                continue
            for p in range(n):                  # ... combined with an earlier primary
                if t[p] >= t[i] - tol_t or flags[p] & bit:
                    continue
                tp = t[a] + t[p]
                if abs(tp - t[i]) > tol_t:
                    continue
                vp = np.sqrt((t[a] * v[a] * v[a] + t[p] * v[p] * v[p]) / tp)
                if abs(v[i] - vp) <= tol_v * vp:
                    hit = True
                    break
        if hit:
            flags[i] |= bit
    # The coherence of a strong event smears along a diagonal of (t0, v): a later t0 with a
    # higher velocity (or an earlier with a lower) still fits its far offsets. A weaker maximum
    # on that diagonal of a recognised multiple is the multiple's tail, not a primary.
    for i in range(n):
        if flags[i] & bit:
            continue
        for m in range(n):
            if not flags[m] & bit or c[m] <= c[i]:
                continue
            dt_m = t[i] - t[m]
            dv_m = v[i] - v[m]
            if abs(dt_m) <= reach and dt_m * dv_m >= 0 and abs(dv_m) <= 2 * tol_v * v[m]:
                flags[i] |= bit
                break


def blank_events(panel: np.ndarray, velocities: np.ndarray, t0: np.ndarray, events: np.ndarray,
                 params) -> np.ndarray:
    """A copy of the panel with each recognised multiple's peak set to the column's median.

    In each column within ``min_separation`` of the multiple, the peak is cleared from the
    multiple's velocity down both flanks to the valley next to it (where a neighbouring event
    begins) or to within 5 % of the background."""
    out = np.array(panel, dtype=np.float32, copy=True)
    nv, nt = out.shape
    dt = t0[1] - t0[0] if nt > 1 else 1.0
    half_t = max(int(round(params.min_separation / dt)), 1)
    mult = (events["flags"] & MULTIPLE) != 0
    cols = np.rint((events["t0"][mult] - t0[0]) / dt).astype(np.int64)
    rows = np.clip(np.rint(np.interp(events["vrms"][mult], velocities, np.arange(nv))), 0, nv - 1).astype(np.int64)
    _blank(out, np.ascontiguousarray(panel, dtype=np.float32), cols, rows, half_t)
    return out


@njit(cache=True, nogil=True)
def _blank(panel, original, cols, rows, half_t):
    nv, nt = panel.shape
    for e in range(cols.size):
        r0 = rows[e]
        for j in range(max(cols[e] - half_t, 0), min(cols[e] + half_t + 1, nt)):
            floor = np.median(original[:, j])   # the background of the column as scanned
            top = panel[r0, j]
            if top <= floor:
                continue
            # down both flanks to the valley or nearly to the background, whichever comes first
            low = floor + 0.05 * (top - floor)
            lo = r0
            while lo > 0 and low < panel[lo - 1, j] <= panel[lo, j]:
                lo -= 1
            hi = r0
            while hi < nv - 1 and low < panel[hi + 1, j] <= panel[hi, j]:
                hi += 1
            for r in range(lo, hi + 1):
                panel[r, j] = floor


@njit(cache=True, nogil=True)
def _range_maxima_wide(panel, lo, hi):
    """Row of the largest panel value in rows lo[j]..hi[j] of each column j, and that value (row
    -1, value 0 where empty); row by row, reading the panel in memory order, for wide ranges."""
    nv, nt = panel.shape
    rows = np.full(nt, -1, dtype=np.int64)
    values = np.zeros(nt, dtype=np.float64)
    top = 0
    for j in range(nt):
        top = max(top, min(hi[j], nv - 1))
    for r in range(top + 1):
        line = panel[r]
        for j in range(nt):
            if lo[j] <= r <= hi[j] and (rows[j] < 0 or line[j] > values[j]):   # first maximum wins
                rows[j] = r
                values[j] = line[j]
    return rows, values


def slow_events(panel: np.ndarray, velocities: np.ndarray, t0: np.ndarray, path: np.ndarray, reach,
                params) -> np.ndarray:
    """Coherence events slower than ``(1 - multiple_margin)`` times the traced function ``path``,
    as a candidate table flagged ``likely_multiple``; ``reach(j, v)`` counts the live traces."""
    if params.multiple_margin <= 0:
        return candidate_table([])
    nv = velocities.size
    grid = np.arange(nv, dtype=np.float64)
    top = np.floor(np.interp(path * (1.0 - params.multiple_margin), velocities, grid, left=-1.0)).astype(np.int64)
    rows, values = _range_maxima_wide(np.ascontiguousarray(panel, dtype=np.float32), np.zeros_like(top), top)
    out = []
    for j in event_columns(values, t0, t0[1] - t0[0] if t0.size > 1 else 1.0, params):
        r = int(rows[j])
        if r < 0 or (reach is not None and reach(j, velocities[r]) < params.min_live):
            continue
        column = panel[:, j]
        if not (0 < r < nv - 1 and column[r - 1] <= column[r] and column[r + 1] <= column[r]):
            continue   # the flank of the primary's peak or the axis edge, not an event of its own
        v, c = refine_peak(column, velocities, r)
        out.append((t0[j], v, c, peak_sigma(column, velocities, r, v, c), MULTIPLE))
    return candidate_table(out)


