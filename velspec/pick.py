"""The pick stage: a velocity function through each coherence panel, and picks along it.

A continuous stacking-velocity function is traced through the panel by dynamic programming:
the path through a coarse grid of time nodes that maximises the summed coherence, with the
velocity allowed to rise or fall only at bounded rates and kept inside a corridor that may vary
with time. Picks are then put at the coherence maxima along that path and refined to sub-grid
velocity by a parabola through the three panel values around the maximum.

References
----------
Bellman, R., 1957, Dynamic Programming: Princeton University Press (the optimal-path recursion).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy.signal import find_peaks, peak_widths

from .params import PickParams


MAX_NODE_INTERVAL = 0.25  # s: longer steps would blur events closer than this


@dataclass
class PickResult:
    """Picks and the traced function of one CMP.

    Attributes
    ----------
    t0 : float64 (npick,)
        Pick times, s, ascending.
    velocity : float32 (npick,)
        Picked stacking velocities, m/s.
    coherence : float32 (npick,)
        Panel value at each pick.
    path : float32 (nt,)
        The traced velocity function on every t0 sample, m/s.
    """

    t0: np.ndarray
    velocity: np.ndarray
    coherence: np.ndarray
    path: np.ndarray


@njit(cache=True, nogil=True)
def _best_path(score, lo, hi, penalty=0.0):
    """Index path maximising sum score[n, path[n]] - penalty * |path[n] - path[n-1]|, with
    path[n] in lo[path[n-1]]..hi[path[n-1]].

    score : float64 (nnode, nv), -inf where a velocity is outside the corridor.
    lo, hi : int64 (nv,), inclusive range of indices reachable from each index at the next node.
    penalty : float, cost of one velocity sample of change between nodes (keeps the path still
        where no event pulls it).
    """
    nnode, nv = score.shape
    acc = np.full((nnode, nv), -np.inf)
    back = np.zeros((nnode, nv), dtype=np.int64)
    acc[0] = score[0]
    for n in range(1, nnode):
        for a in range(nv):
            if acc[n - 1, a] == -np.inf:
                continue
            for b in range(lo[a], hi[a] + 1):
                cand = acc[n - 1, a] + score[n, b] - penalty * abs(b - a)
                # Ties go to the lower previous index, so the path does not depend on loop order.
                if cand > acc[n, b]:
                    acc[n, b] = cand
                    back[n, b] = a
    path = np.empty(nnode, dtype=np.int64)
    best = 0
    for b in range(nv):
        if acc[nnode - 1, b] > acc[nnode - 1, best]:
            best = b
    path[nnode - 1] = best
    for n in range(nnode - 1, 0, -1):
        path[n - 1] = back[n, path[n]]
    return path


@njit(cache=True, nogil=True)
def _node_scores(panel, edges):
    """Mean coherence over each node's samples: (nnode, nv) float64 from a (nv, nt) panel."""
    nv = panel.shape[0]
    nnode = edges.shape[0] - 1
    out = np.empty((nnode, nv))
    for v in range(nv):
        for n in range(nnode):
            acc = 0.0
            for j in range(edges[n], edges[n + 1]):
                acc += panel[v, j]
            out[n, v] = acc / (edges[n + 1] - edges[n])
    return out


@njit(cache=True, nogil=True)
def _near_path_maxima(panel, centre, search):
    """Row of the largest panel value within +-search rows of the path, and that value, per t0."""
    nv, nt = panel.shape
    rows = np.empty(nt, dtype=np.int64)
    values = np.empty(nt, dtype=np.float64)
    for j in range(nt):
        lo = max(centre[j] - search, 0)
        hi = min(centre[j] + search, nv - 1)
        best = lo
        for r in range(lo + 1, hi + 1):
            if panel[r, j] > panel[best, j]:   # first maximum wins, as argmax
                best = r
        rows[j] = best
        values[j] = panel[best, j]
    return rows, values


def corridor(t0: np.ndarray, params: PickParams, vmin: float, vmax: float) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper velocity bounds at each time, m/s: linear from the top to the bottom values."""
    top_lo = params.vmin_top or vmin
    top_hi = params.vmax_top or vmax
    bot_lo = params.vmin_bottom or vmin
    bot_hi = params.vmax_bottom or vmax
    frac = (t0 - t0[0]) / max(t0[-1] - t0[0], 1e-12)
    return top_lo + frac * (bot_lo - top_lo), top_hi + frac * (bot_hi - top_hi)


def trace_function(panel: np.ndarray, velocities: np.ndarray, t0: np.ndarray,
                   params: PickParams) -> np.ndarray:
    """The dynamic-programming velocity function on every t0 sample, m/s (float64)."""
    nv, nt = panel.shape
    dt = t0[1] - t0[0] if nt > 1 else 1.0
    # Lengthen the node step until the slower nonzero rate allows one velocity sample per step;
    # rounding a fraction of a sample down would forbid that direction altogether.
    node = params.node_interval
    widest = float(np.max(np.diff(velocities))) if nv > 1 else 0.0
    for rate in (params.max_increase, params.max_decrease):
        if rate > 0:
            node = max(node, widest / rate)
    node = min(node, MAX_NODE_INTERVAL)
    step = max(int(np.ceil(node / dt - 1e-9)), 1)
    edges = np.arange(0, nt + step, step)
    edges[-1] = min(edges[-1], nt)
    edges = np.unique(np.minimum(edges, nt))
    score = _node_scores(np.ascontiguousarray(panel, dtype=np.float32), edges.astype(np.int64))
    node_t = 0.5 * (t0[edges[:-1]] + t0[edges[1:] - 1])
    lo_v, hi_v = corridor(node_t, params, velocities[0], velocities[-1])
    outside = (velocities[None, :] < lo_v[:, None]) | (velocities[None, :] > hi_v[:, None])
    # Keep at least the nearest velocity open so that a corridor narrower than the axis still works.
    nearest = np.abs(velocities[None, :] - 0.5 * (lo_v + hi_v)[:, None]).argmin(axis=1)
    outside[np.arange(len(node_t)), nearest] = False
    score[outside] = -np.inf
    dtn = step * dt
    up = np.searchsorted(velocities, velocities + params.max_increase * dtn, side="right") - 1
    down = np.searchsorted(velocities, velocities - params.max_decrease * dtn, side="left")
    idx = np.arange(nv)
    hi = np.maximum(up, idx).astype(np.int64)
    lo = np.minimum(down, idx).astype(np.int64)
    path = _best_path(score, lo, hi, params.smoothness)
    return np.interp(t0, node_t, velocities[path])


def pick_panel(panel: np.ndarray, velocities: np.ndarray, t0: np.ndarray, params: PickParams,
               search: int = 4, offsets: np.ndarray | None = None,
               stretch_limit: float | None = None,
               vint_bounds: tuple[float, float] | None = None) -> PickResult:
    """Trace the velocity function and pick the coherence maxima along it.

    Parameters
    ----------
    panel : ndarray (nv, nt)
        Coherence panel (for instance from :func:`velspec.scan.scan_gather`).
    velocities : ndarray (nv,)
        Its trial velocities, m/s, ascending.
    t0 : ndarray (nt,)
        Its t0 axis, s.
    params : PickParams
        Path constraints and pick thresholds.
    search : int
        Half width, in velocity samples, of the neighbourhood of the path where a pick's peak
        is looked for.
    offsets, stretch_limit : optional
        The gather's offsets (m) and the scan's stretch limit. When given, a maximum is picked
        only where at least ``params.min_live`` traces pass the stretch mute: with a handful of
        traces, noise alone reaches high coherence.

    Returns
    -------
    PickResult
    """
    nv, nt = panel.shape
    path = trace_function(panel, velocities, t0, params)
    centre = np.clip(np.searchsorted(velocities, path), 0, nv - 1)
    peak_row, along = _near_path_maxima(panel, centre.astype(np.int64), search)

    dt = t0[1] - t0[0] if nt > 1 else 1.0
    sep = max(int(round(params.min_separation / dt)), 1)
    peaks, _ = find_peaks(along, height=params.min_coherence, prominence=params.min_prominence, distance=sep)
    peaks = peaks[t0[peaks] >= params.tmin]
    times, vels, cohs = [], [], []
    if peaks.size:
        # Semblance of a zero-phase wavelet is a plateau about the event: its centre (where the
        # plateau falls to half its prominence on either side) is steadier than its noisy maximum.
        _, _, left, right = peak_widths(along, peaks, rel_height=0.5)
        centres = np.clip(np.rint(0.5 * (left + right)).astype(np.int64), 0, nt - 1)
        if offsets is not None and stretch_limit is not None:
            # Live when x <= v t0 sqrt((1+s)^2 - 1): the stretch mute of velspec.scan.moveout.
            reach = path * np.clip(t0, 0, None) * np.sqrt((1.0 + stretch_limit) ** 2 - 1.0)
            live = np.searchsorted(np.sort(np.abs(offsets)), reach, side="right")
            centres = centres[live[centres] >= params.min_live]
        for j in np.unique(centres):
            r = int(peak_row[j])
            column = panel[:, j]
            # Not a maximum along velocity too: the flank of something off the path, not an event.
            if 0 < r < nv - 1 and not (column[r - 1] <= column[r] >= column[r + 1]):
                continue
            v, c = _refine(column, velocities, r)
            times.append(t0[j])
            vels.append(v)
            cohs.append(c)
    times, vels, cohs = (np.asarray(a, dtype=np.float64) for a in (times, vels, cohs))
    if vint_bounds is not None and times.size > 1:
        keep = consistent_picks(times, vels, cohs, vint_bounds, params.consistency_ratio)
        times, vels, cohs = times[keep], vels[keep], cohs[keep]
    return PickResult(t0=times, velocity=vels.astype(np.float32), coherence=cohs.astype(np.float32),
                      path=path.astype(np.float32))


def consistent_picks(t0: np.ndarray, v: np.ndarray, coherence: np.ndarray, vint_bounds: tuple[float, float],
                     ratio: float) -> np.ndarray:
    """Mask of picks kept after dropping weak picks that make Dix's interval velocity impossible.

    Dix (1955): v_int^2 = (t2 V2^2 - t1 V1^2) / (t2 - t1) between neighbouring picks. While some
    interval falls outside ``vint_bounds`` and the weaker of its two picks has less than
    ``ratio`` times the stronger one's coherence, that weaker pick is dropped.
    """
    lo2, hi2 = vint_bounds[0] ** 2, vint_bounds[1] ** 2
    keep = np.ones(t0.size, dtype=bool)
    while True:
        idx = np.flatnonzero(keep)
        b = t0[idx] * v[idx] ** 2
        u = np.diff(b) / np.diff(t0[idx])
        bad = np.flatnonzero((u < lo2) | (u > hi2))
        weak = np.where(coherence[idx[bad]] < coherence[idx[bad + 1]], idx[bad], idx[bad + 1])
        strong = np.where(weak == idx[bad], idx[bad + 1], idx[bad])
        droppable = weak[coherence[weak] < ratio * coherence[strong]]
        # Drop the weakest offender first: removing it may make its neighbours consistent.
        drop = droppable[np.argmin(coherence[droppable])] if droppable.size else None
        if drop is None:
            return keep
        keep[drop] = False


def _refine(column: np.ndarray, velocities: np.ndarray, r: int) -> tuple[float, float]:
    """Sub-sample peak by a parabola through (r-1, r, r+1); the vertex mapped back to velocity."""
    if r == 0 or r == len(column) - 1:
        return float(velocities[r]), float(column[r])
    a, b, c = (float(x) for x in column[r - 1: r + 2])
    curv = a - 2.0 * b + c
    shift = 0.5 * (a - c) / curv if curv < 0 else 0.0
    shift = float(np.clip(shift, -0.5, 0.5))
    v = float(np.interp(r + shift, np.arange(len(velocities)), velocities))
    # Every measure is at most 1 (perfect coherence); the parabola may overshoot it by a hair.
    return v, min(b - 0.25 * (a - c) * shift, 1.0)
