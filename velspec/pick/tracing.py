"""The velocity function traced through a coherence panel by dynamic programming.

The path through a coarse grid of time nodes that maximises the summed coherence. The
constraints act while the path is traced, not afterwards: the velocity stays inside bounds that
may vary with time (a corridor, a table of bounds, a guide function with a band around it),
rises or falls only at bounded rates, and never steps to a velocity that would imply, by Dix's
relation, an interval velocity outside the physical range.

References
----------
Bellman, R., 1957, Dynamic Programming: Princeton University Press (the optimal-path recursion).
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
"""

from __future__ import annotations

import functools

import numpy as np
from numba import njit, prange

from ..params import PickParams

MAX_NODE_INTERVAL = 0.25  # s: longer steps would blur events closer than this


@njit(cache=True, nogil=True)
def _best_path(score, lo, hi, penalty=0.0):
    """Index path maximising sum score[n, path[n]] - penalty * |path[n] - path[n-1]|, with
    path[n] in lo[n, path[n-1]]..hi[n, path[n-1]].

    score : float64 (nnode, nv), -inf where a velocity is outside the bounds.
    lo, hi : int64 (nnode, nv), inclusive range of indices reachable at node n from each index
        at node n-1 (row 0 unused).
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
            for b in range(lo[n, a], hi[n, a] + 1):
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


@njit(cache=True, nogil=True, parallel=True)
def _node_scores(panel, edges):
    """Mean coherence over each node's samples: (nnode, nv) float64 from a (nv, nt) panel."""
    nv = panel.shape[0]
    nnode = edges.shape[0] - 1
    out = np.empty((nnode, nv))
    for v in prange(nv):   # one thread per velocity: the same bits for any thread count
        for n in range(nnode):
            acc = 0.0
            for j in range(edges[n], edges[n + 1]):
                acc += panel[v, j]
            out[n, v] = acc / (edges[n + 1] - edges[n])
    return out


def corridor(t0: np.ndarray, params: PickParams, vmin: float, vmax: float) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper velocity bounds at each time, m/s: linear from the top to the bottom values."""
    top_lo = params.vmin_top or vmin
    top_hi = params.vmax_top or vmax
    bot_lo = params.vmin_bottom or vmin
    bot_hi = params.vmax_bottom or vmax
    frac = (t0 - t0[0]) / max(t0[-1] - t0[0], 1e-12)
    return top_lo + frac * (bot_lo - top_lo), top_hi + frac * (bot_hi - top_hi)



def velocity_bounds(t0: np.ndarray, params: PickParams, vmin: float, vmax: float,
                    guide: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper stacking-velocity bounds at each t0, m/s, from every constraint given.

    The scan range, the linear corridor (``vmin_top`` .. ``vmax_bottom``), the table
    ``params.bounds`` of (t0, vmin, vmax) rows (linear between rows, held beyond the ends) and,
    when ``guide`` (m/s on ``t0``) is given, the band ``guide * (1 - guide_below)`` ..
    ``guide * (1 + guide_above)``; the tightest of them wins at each time.
    """
    lo, hi = corridor(t0, params, vmin, vmax)
    if params.bounds:
        table = np.asarray(params.bounds, dtype=np.float64)
        lo = np.maximum(lo, np.interp(t0, table[:, 0], table[:, 1]))
        hi = np.minimum(hi, np.interp(t0, table[:, 0], table[:, 2]))
    if guide is not None:
        lo = np.maximum(lo, guide * (1.0 - params.guide_below))
        hi = np.minimum(hi, guide * (1.0 + params.guide_above))
    return lo, hi


def _node_grid(velocities: np.ndarray, t0: np.ndarray, params: PickParams) -> np.ndarray:
    """Edges (sample indices) of the path's time nodes."""
    nt = t0.size
    dt = t0[1] - t0[0] if nt > 1 else 1.0
    # Lengthen the node step until the slower nonzero rate allows one velocity sample per step;
    # rounding a fraction of a sample down would forbid that direction altogether.
    node = params.node_interval
    widest = float(np.max(np.diff(velocities))) if velocities.size > 1 else 0.0
    for rate in (params.max_increase, params.max_decrease):
        if rate > 0:
            node = max(node, widest / rate)
    node = min(node, MAX_NODE_INTERVAL)
    step = max(int(np.ceil(node / dt - 1e-9)), 1)
    return np.unique(np.minimum(np.arange(0, nt + step, step), nt)).astype(np.int64)


def _transitions(velocities: np.ndarray, node_t: np.ndarray, params: PickParams,
                 vint_bounds: tuple[float, float] | None) -> tuple[np.ndarray, np.ndarray]:
    """Reachable index ranges (nnode, nv) between successive nodes: the rate limits and, with
    ``vint_bounds``, Dix's relation V2^2 t2 = V1^2 t1 + vint^2 (t2 - t1) for vint in the bounds.

    Bounds are rounded to the nearest velocity sample (a stricter rounding would forbid slow but
    allowed changes on a coarse axis); staying at the same velocity is always allowed.
    """
    nv = velocities.size
    nnode = node_t.size
    v1 = velocities[None, :]
    t1 = node_t[:-1, None]
    t2 = node_t[1:, None]
    dtn = t2 - t1
    up = v1 + params.max_increase * dtn
    down = v1 - params.max_decrease * dtn
    if vint_bounds is not None:
        tt = np.maximum(t1, 0.0)
        t2p = np.maximum(t2, 1e-9)
        up = np.minimum(up, np.sqrt((tt * v1 * v1 + vint_bounds[1] ** 2 * dtn) / t2p))
        down = np.maximum(down, np.sqrt((tt * v1 * v1 + vint_bounds[0] ** 2 * dtn) / t2p))
    grid = np.arange(nv, dtype=np.float64)
    hi = np.rint(np.interp(up, velocities, grid)).astype(np.int64)
    lo = np.rint(np.interp(down, velocities, grid)).astype(np.int64)
    idx = np.arange(nv)[None, :]
    hi = np.maximum(hi, idx)
    lo = np.minimum(lo, idx)
    out_lo = np.zeros((nnode, nv), dtype=np.int64)
    out_hi = np.zeros((nnode, nv), dtype=np.int64)
    out_lo[1:], out_hi[1:] = lo, hi
    return out_lo, out_hi


@functools.lru_cache(maxsize=8)
def _cached_transitions(velocities: bytes, node_t: bytes, params: PickParams, vint_bounds):
    # every CMP of a line shares its axes and parameters: work the ranges out once
    return _transitions(np.frombuffer(velocities), np.frombuffer(node_t), params, vint_bounds)


def trace_function(panel: np.ndarray, velocities: np.ndarray, t0: np.ndarray, params: PickParams,
                   bounds: tuple[np.ndarray, np.ndarray] | None = None,
                   vint_bounds: tuple[float, float] | None = None) -> np.ndarray:
    """The dynamic-programming velocity function on every t0 sample, m/s (float64).

    Parameters
    ----------
    panel : ndarray (nv, nt)
        Coherence panel.
    velocities : ndarray (nv,)
        Trial velocities, m/s, ascending.
    t0 : ndarray (nt,)
        Times, s.
    params : PickParams
        Rates, node interval, smoothness, corridor.
    bounds : (lo, hi) ndarrays (nt,), optional
        Velocity bounds at each t0, m/s (default: :func:`velocity_bounds` without a guide).
    vint_bounds : (vmin, vmax), optional
        Physical interval-velocity range, m/s, held between successive nodes through Dix.
    """
    nv, nt = panel.shape
    edges = _node_grid(velocities, t0, params)
    score = _node_scores(np.ascontiguousarray(panel, dtype=np.float32), edges)
    node_t = 0.5 * (t0[edges[:-1]] + t0[edges[1:] - 1])
    if bounds is None:
        bounds = velocity_bounds(t0, params, velocities[0], velocities[-1])
    lo_v = np.interp(node_t, t0, bounds[0])
    hi_v = np.interp(node_t, t0, bounds[1])
    outside = (velocities[None, :] < lo_v[:, None]) | (velocities[None, :] > hi_v[:, None])
    # Keep at least the nearest velocity open so that bounds narrower than the axis still work.
    nearest = np.abs(velocities[None, :] - 0.5 * (lo_v + hi_v)[:, None]).argmin(axis=1)
    outside[np.arange(len(node_t)), nearest] = False
    score[outside] = -np.inf
    lo, hi = _cached_transitions(np.ascontiguousarray(velocities, dtype=np.float64).tobytes(),
                                 np.ascontiguousarray(node_t, dtype=np.float64).tobytes(), params,
                                 None if vint_bounds is None else tuple(map(float, vint_bounds)))
    path = _best_path(score, lo, hi, params.smoothness)
    return np.interp(t0, node_t, velocities[path])


