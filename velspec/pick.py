"""The pick stage: a velocity function through each coherence panel, and picks along it.

A continuous stacking-velocity function is traced through the panel by dynamic programming:
the path through a coarse grid of time nodes that maximises the summed coherence. The
constraints act while the path is traced, not afterwards: the velocity stays inside bounds that
may vary with time (a corridor, a table of bounds, a guide function with a band around it),
rises or falls only at bounded rates, and never steps to a velocity that would imply, by Dix's
relation, an interval velocity outside the physical range. Picks are then put at the coherence
maxima along that path, refined to sub-grid velocity by a parabola, given an uncertainty from
the shape of their peak, and checked pairwise against Dix so that no two picks imply a
non-physical layer.

Coherent events much slower than the traced function at the same t0 are recorded as likely
multiples: a primary trend at that time is faster, so a slower event there has spent longer in
slow (shallow) rock than any primary could. They are returned with a flag and never used.

References
----------
Bellman, R., 1957, Dynamic Programming: Princeton University Press (the optimal-path recursion).
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from .params import PickParams

MAX_NODE_INTERVAL = 0.25  # s: longer steps would blur events closer than this
MAX_PASSES = 3            # tracings of one panel: the first, and up to two with multiples blanked

# Why a pick is doubtful or left out (bits of /picks/flags). EXCLUDED ones never enter a field.
LOW_COHERENCE = 1      # coherence below PickParams.doubtful_coherence: used, but doubtful
MULTIPLE = 2           # much slower than the traced primary trend at its t0: a likely multiple
AT_BOUND = 4           # the peak lay beyond a velocity bound or the scan range; picked at the edge
DIX = 8                # with a stronger neighbour it implied an impossible interval velocity
OUTLIER = 16           # rejected by the lateral regularisation of the line pass
EDITED = 32            # put there by a person (a pick CSV in replace mode)
OUTSIDE_GUIDE = 64     # outside the band around a person's guide function (revise, guide mode)
WIDE = 128             # uncertainty above PickParams.doubtful_sigma of the velocity
REPLACED = 256         # an automatic pick at a CMP whose picks a person replaced
EXCLUDED = MULTIPLE | DIX | OUTLIER | OUTSIDE_GUIDE | REPLACED

FLAG_NAMES = {LOW_COHERENCE: "low_coherence", MULTIPLE: "likely_multiple", AT_BOUND: "at_bound",
              DIX: "impossible_interval_velocity", OUTLIER: "lateral_outlier", EDITED: "edited",
              OUTSIDE_GUIDE: "outside_guide", WIDE: "wide_peak", REPLACED: "replaced"}

# The two factors of peak_sigma, set once by maximum likelihood so that the stated sigma matches
# the scatter of picks about exact stacking velocities on generated lines (96 traces per CMP,
# S/N 0.5-4, seeds 3, 9, 17; default scan and smoothing); tests/test_uncertainty.py checks them
# on other seeds.
SIGMA_NOISE = 0.13
SIGMA_MODEL = 0.001


@dataclass
class PickResult:
    """Picks (and recognised multiples) of one CMP, and its traced function.

    Attributes
    ----------
    t0 : float64 (npick,)
        Pick times, s, ascending.
    velocity : float32 (npick,)
        Picked stacking velocities, m/s.
    coherence : float32 (npick,)
        Panel value at each pick.
    sigma : float32 (npick,)
        Velocity uncertainty of each pick (one standard deviation), m/s.
    flags : uint16 (npick,)
        Bits of :data:`FLAG_NAMES`; picks with any :data:`EXCLUDED` bit are not used.
    path : float32 (nt,)
        The traced velocity function on every t0 sample, m/s.
    """

    t0: np.ndarray
    velocity: np.ndarray
    coherence: np.ndarray
    sigma: np.ndarray
    flags: np.ndarray
    path: np.ndarray

    @property
    def used(self) -> np.ndarray:
        """Mask of the picks that enter the velocity fields."""
        return (self.flags & EXCLUDED) == 0

    def subset(self, mask: np.ndarray) -> "PickResult":
        return PickResult(self.t0[mask], self.velocity[mask], self.coherence[mask], self.sigma[mask],
                          self.flags[mask], self.path)


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


@njit(cache=True, nogil=True)
def _range_maxima(panel, lo, hi):
    """Row of the largest panel value in rows lo[j]..hi[j] of each column j, and that value
    (row -1 and value 0 where the range is empty)."""
    nv, nt = panel.shape
    rows = np.full(nt, -1, dtype=np.int64)
    values = np.zeros(nt, dtype=np.float64)
    for j in range(nt):
        a = max(lo[j], 0)
        b = min(hi[j], nv - 1)
        if a > b:
            continue
        best = a
        for r in range(a + 1, b + 1):
            if panel[r, j] > panel[best, j]:   # first maximum wins, as argmax
                best = r
        rows[j] = best
        values[j] = panel[best, j]
    return rows, values


@njit(cache=True, nogil=True)
def _range_maxima_wide(panel, lo, hi):
    """:func:`_range_maxima` for wide ranges: row by row, reading the panel in memory order."""
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


def corridor(t0: np.ndarray, params: PickParams, vmin: float, vmax: float) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper velocity bounds at each time, m/s: linear from the top to the bottom values."""
    top_lo = params.vmin_top or vmin
    top_hi = params.vmax_top or vmax
    bot_lo = params.vmin_bottom or vmin
    bot_hi = params.vmax_bottom or vmax
    frac = (t0 - t0[0]) / max(t0[-1] - t0[0], 1e-12)
    return top_lo + frac * (bot_lo - top_lo), top_hi + frac * (bot_hi - top_hi)


def regional_trend(t0: np.ndarray, v0: float, gradient: float) -> np.ndarray:
    """Stacking (RMS) velocity of an earth whose velocity rises linearly with depth, m/s.

    For v(z) = v0 + k z the one-way time to depth z is ln(1 + k z / v0) / k, so the velocity at
    two-way time t is v0 exp(k t / 2) and the RMS velocity (Dix, 1955) down to t is

        V(t) = v0 sqrt((exp(k t) - 1) / (k t)),   V(0) = v0.

    Parameters
    ----------
    t0 : ndarray
        Two-way times, s.
    v0 : float
        Velocity at the datum, m/s.
    gradient : float
        k, the rise of velocity with depth, 1/s ((m/s) per m); 0 gives a constant v0.
    """
    t = np.maximum(np.asarray(t0, dtype=np.float64), 0.0)
    kt = gradient * t
    # expm1(x)/x -> 1 as x -> 0; written so that a zero gradient or zero time is exact
    ratio = np.where(kt > 1e-12, np.expm1(kt) / np.where(kt > 1e-12, kt, 1.0), 1.0 + 0.5 * kt)
    return v0 * np.sqrt(ratio)


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


def pick_panel(panel: np.ndarray, velocities: np.ndarray, t0: np.ndarray, params: PickParams,
               search: int = 4, offsets: np.ndarray | None = None,
               stretch_limit: float | None = None,
               vint_bounds: tuple[float, float] | None = None,
               guide: np.ndarray | None = None) -> PickResult:
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
        is looked for (never beyond the velocity bounds).
    offsets, stretch_limit : optional
        The gather's offsets (m) and the scan's stretch limit. When given, a maximum is picked
        only where at least ``params.min_live`` traces pass the stretch mute: with a handful of
        traces, noise alone reaches high coherence.
    vint_bounds : (vmin, vmax), optional
        Physical interval-velocity range, m/s: held by the path between nodes, and between
        picks (the weaker of two picks implying a velocity outside it is flagged DIX).
    guide : ndarray (nt,), optional
        Guide stacking-velocity function, m/s, with the band of ``params.guide_below`` /
        ``guide_above`` around it.

    Returns
    -------
    PickResult
        Picks and likely multiples, ascending in t0, with flags.
    """
    nv, nt = panel.shape
    bounds = velocity_bounds(t0, params, velocities[0], velocities[-1], guide)
    reach = None
    if offsets is not None and stretch_limit is not None:
        # Live when x <= v t0 sqrt((1+s)^2 - 1): the stretch mute of velspec.scan.moveout.
        factor = np.sqrt((1.0 + stretch_limit) ** 2 - 1.0)
        ranked = np.sort(np.abs(offsets))
        reach = lambda j, v: np.searchsorted(ranked, v * np.maximum(t0[j], 0.0) * factor, side="right")  # noqa: E731
    picks, path = _pick_along_path(panel, velocities, t0, params, bounds, vint_bounds, search, reach)
    slow = _as_arrays(_slow_events(panel, velocities, t0, path, reach, params))
    known = _classify_multiples(picks, slow, params)
    blank = panel
    for _ in range(MAX_PASSES - 1):
        from_path = np.isin(known[0], picks[0]) & ((known[4] & MULTIPLE) != 0)
        if params.multiple_margin <= 0 or not from_path.any():
            break
        # A pick along the traced function was a multiple: trace again with the recognised
        # multiples blanked out of the panel, so that they neither pull the function nor hide
        # the primaries beside them. A new pass can show multiples the last one hid.
        blank = _blank_events(blank, velocities, t0, known, params)
        picks, path = _pick_along_path(blank, velocities, t0, params, bounds, vint_bounds, search, reach)
        again = _as_arrays(_slow_events(blank, velocities, t0, path, reach, params))
        prior = [a[(known[4] & MULTIPLE) != 0] for a in known]
        known = _classify_multiples(picks, [np.concatenate([a, b]) for a, b in zip(prior, again)], params)
    mult = (known[4] & MULTIPLE) != 0
    picks = [a[~mult] for a in known]
    if vint_bounds is not None:
        keep = consistent_picks(picks[0], picks[1], picks[2], vint_bounds)
        picks[4][~keep] |= DIX
    picks[4][picks[2] < params.doubtful_coherence] |= LOW_COHERENCE
    picks[4][picks[3] > params.doubtful_sigma * picks[1]] |= WIDE
    merged = [np.concatenate([a, b[mult]]) for a, b in zip(picks, known)]
    order = np.lexsort((merged[1], merged[0]))
    return PickResult(t0=merged[0][order], velocity=merged[1][order].astype(np.float32),
                      coherence=merged[2][order].astype(np.float32), sigma=merged[3][order].astype(np.float32),
                      flags=merged[4][order].astype(np.uint16), path=path.astype(np.float32))


def _pick_along_path(panel, velocities, t0, params, bounds, vint_bounds, search, reach):
    """Trace the function and pick the prominent maxima near it: ([t0, v, c, sigma, flags], path)."""
    nv, nt = panel.shape
    path = trace_function(panel, velocities, t0, params, bounds, vint_bounds)
    grid = np.arange(nv, dtype=np.float64)
    centre = np.clip(np.rint(np.interp(path, velocities, grid)), 0, nv - 1).astype(np.int64)
    lo_row = np.ceil(np.interp(bounds[0], velocities, grid) - 1e-6).astype(np.int64)
    hi_row = np.floor(np.interp(bounds[1], velocities, grid) + 1e-6).astype(np.int64)
    # the nearest row stays open where the bounds are narrower than the axis sampling
    lo_row, hi_row = np.minimum(lo_row, centre), np.maximum(hi_row, centre)
    peak_row, along = _range_maxima(panel, np.maximum(centre - search, lo_row),
                                    np.minimum(centre + search, hi_row))
    dt = t0[1] - t0[0] if nt > 1 else 1.0
    entries = []   # (t0, v, coherence, sigma, flags)
    for j in _event_columns(along, t0, dt, params):
        if reach is not None and reach(j, path[j]) < params.min_live:
            continue
        r = int(peak_row[j])
        column = panel[:, j]
        flags = 0
        true_peak = (r == 0 or column[r - 1] <= column[r]) and (r == nv - 1 or column[r + 1] <= column[r])
        if not true_peak:
            # The column still rises beyond the row: at a velocity bound the pick is forced
            # there; elsewhere it is the flank of something off the path, not an event.
            if not ((r == lo_row[j] and r > 0 and column[r - 1] > column[r])
                    or (r == hi_row[j] and r < nv - 1 and column[r + 1] > column[r])):
                continue
            v, c = float(velocities[r]), float(column[r])
            flags |= AT_BOUND
        else:
            v, c = _refine(column, velocities, r)
            if r == 0 or r == nv - 1:
                flags |= AT_BOUND   # at the end of the scanned range: the peak may lie beyond it
        entries.append((t0[j], v, c, peak_sigma(column, velocities, r, v, c), flags))
    return _as_arrays(entries), path


def _classify_multiples(picks, slow, params):
    """Picks and slow events together, time-ordered, with MULTIPLE set on the likely multiples.

    Flat layers make every surface-related multiple a sum of primary legs: events a and b
    combine into one at t0 = t_a + t_b whose stacking velocity is the RMS over the whole path,
    V^2 = (t_a V_a^2 + t_b V_b^2) / (t_a + t_b) (Dix, 1955). Walking down in time, a pick that
    an earlier pair of events (a primary and a primary or recognised multiple) predicts within
    ``multiple_time_tolerance`` and ``multiple_velocity_tolerance`` is a likely multiple; so
    are the slow events, which no primary trend explains, and the weaker maxima on a recognised
    multiple's smear. A sea floor that no pick holds (:func:`_sea_floor`) joins the predictions.
    """
    events = [np.concatenate([a, b]) for a, b in zip(picks, slow)]
    order = np.argsort(events[0], kind="stable")
    events = [a[order] for a in events]
    t, v, flags = events[0], events[1], events[4]
    if params.multiple_margin <= 0:
        return events
    c = events[2]
    floor = _sea_floor(t, v, flags, params)
    if floor is not None:
        # an unseen sea floor still makes multiples: it takes part in the predictions only
        t, v, c = (np.concatenate(([x], a)) for x, a in zip(floor + (1.0,), (t, v, c)))
        flags = np.concatenate((np.zeros(1, flags.dtype), flags))
    _mark_multiples(t, v, c, flags, params.multiple_time_tolerance, params.multiple_velocity_tolerance,
                    params.min_separation, MULTIPLE)
    if floor is not None:
        events[4][:] = flags[1:]
    return events


def _sea_floor(t, v, flags, params):
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


def _blank_events(panel, velocities, t0, events, params):
    """A copy of the panel with each recognised multiple's peak set to the column's median.

    In each column within ``min_separation`` of the multiple, the peak is cleared from the
    multiple's velocity down both flanks to the valley next to it (where a neighbouring event
    begins) or to within 5 % of the background."""
    out = np.array(panel, dtype=np.float32, copy=True)
    nv, nt = out.shape
    dt = t0[1] - t0[0] if nt > 1 else 1.0
    half_t = max(int(round(params.min_separation / dt)), 1)
    mult = (events[4] & MULTIPLE) != 0
    cols = np.rint((events[0][mult] - t0[0]) / dt).astype(np.int64)
    rows = np.clip(np.rint(np.interp(events[1][mult], velocities, np.arange(nv))), 0, nv - 1).astype(np.int64)
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


def _event_columns(along: np.ndarray, t0: np.ndarray, dt: float, params: PickParams):
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


def _slow_events(panel, velocities, t0, path, reach, params):
    """Coherence events slower than ``(1 - multiple_margin)`` times the traced function."""
    if params.multiple_margin <= 0:
        return []
    nv = velocities.size
    grid = np.arange(nv, dtype=np.float64)
    top = np.floor(np.interp(path * (1.0 - params.multiple_margin), velocities, grid, left=-1.0)).astype(np.int64)
    rows, values = _range_maxima_wide(np.ascontiguousarray(panel, dtype=np.float32), np.zeros_like(top), top)
    out = []
    for j in _event_columns(values, t0, t0[1] - t0[0] if t0.size > 1 else 1.0, params):
        r = int(rows[j])
        if r < 0 or (reach is not None and reach(j, velocities[r]) < params.min_live):
            continue
        column = panel[:, j]
        if not (0 < r < nv - 1 and column[r - 1] <= column[r] and column[r + 1] <= column[r]):
            continue   # the flank of the primary's peak or the axis edge, not an event of its own
        v, c = _refine(column, velocities, r)
        out.append((t0[j], v, c, peak_sigma(column, velocities, r, v, c), MULTIPLE))
    return out


def _as_arrays(entries):
    if not entries:
        return [np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0, dtype=np.uint16)]
    cols = list(zip(*entries))
    return [np.asarray(cols[k], dtype=np.float64) for k in range(4)] + [np.asarray(cols[4], dtype=np.uint16)]


def consistent_picks(t0: np.ndarray, v: np.ndarray, coherence: np.ndarray,
                     vint_bounds: tuple[float, float]) -> np.ndarray:
    """Mask of picks kept so that no two neighbours imply an interval velocity outside the range.

    Dix (1955): v_int^2 = (t2 V2^2 - t1 V1^2) / (t2 - t1) between neighbouring picks. While some interval falls outside ``vint_bounds``, the
    weakest pick bordering an offending interval is dropped. Dropping a pick merges two
    intervals into one whose squared velocity is their time-weighted mean, so the kept picks
    stay consistent whatever is dropped later.
    """
    lo2, hi2 = vint_bounds[0] ** 2, vint_bounds[1] ** 2
    keep = np.ones(t0.size, dtype=bool)
    while True:
        idx = np.flatnonzero(keep)
        if idx.size < 2:
            return keep
        b = t0[idx] * v[idx].astype(np.float64) ** 2
        u = np.diff(b) / np.diff(t0[idx])
        bad = np.flatnonzero((u < lo2) | (u > hi2))
        if not bad.size:
            return keep
        # Drop the weakest offender first: removing it may make its neighbours consistent.
        candidates = np.unique(np.concatenate([idx[bad], idx[bad + 1]]))
        keep[candidates[np.argmin(coherence[candidates])]] = False


def _refine(column: np.ndarray, velocities: np.ndarray, r: int) -> tuple[float, float]:
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
