"""The pick stage: a velocity function through each coherence panel, and picks along it.

:func:`pick_panel` traces a continuous stacking-velocity function through the panel by dynamic
programming under physical constraints (:mod:`.tracing`), puts picks at the prominent coherence
maxima along it, refined to sub-grid velocity and given an uncertainty from their peak's shape
(:mod:`.peaks`), recognises likely multiples and traces again with them blanked
(:mod:`.multiples`), and checks pairs of picks against Dix so that no two imply a non-physical
layer (:mod:`.consistency`). Guide functions are built in :mod:`.guide`.

References
----------
Bellman, R., 1957, Dynamic Programming: Princeton University Press (the optimal-path recursion).
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ..flags import Flag
from ..params import PickParams
from .consistency import consistent_picks
from .guide import regional_trend
from .multiples import blank_events, classify_multiples, slow_events
from .peaks import SIGMA_MODEL, SIGMA_NOISE, as_pick_table, candidate_table, event_columns, peak_sigma, refine_peak
from .tracing import trace_function, velocity_bounds

__all__ = ["pick_panel", "trace_function", "velocity_bounds", "regional_trend", "peak_sigma", "consistent_picks",
           "SIGMA_NOISE", "SIGMA_MODEL", "MAX_PASSES"]

MAX_PASSES = 3  # tracings of one panel: the first, and up to two with multiples blanked
SEA_FLOOR_SIGMA = 0.005  # the sea floor's velocity is the water's: known to half a percent
_MULTIPLE = int(Flag.likely_multiple)


def pick_panel(panel: np.ndarray, velocities: np.ndarray, t0: np.ndarray, params: PickParams,
               search: int = 4, offsets: np.ndarray | None = None,
               stretch_limit: float | None = None,
               vint_bounds: tuple[float, float] | None = None,
               guide: np.ndarray | None = None,
               sea_floor: tuple[float, float] | None = None) -> tuple[np.ndarray, np.ndarray]:
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
        picks (the weaker of two picks implying a velocity outside it is flagged
        ``impossible_interval_velocity``).
    guide : ndarray (nt,), optional
        Guide stacking-velocity function, m/s, with the band of ``params.guide_below`` /
        ``guide_above`` around it.
    sea_floor : (t0, v), optional
        Two-way time (s) and water velocity (m/s) of the sea floor at this CMP
        (:mod:`velspec.seafloor`); None or NaN where none is known. Its reverberations and the
        peg-legs of the primaries are predicted from it, and it becomes a pick (flag
        ``sea_floor``).

    Returns
    -------
    picks : structured ndarray of :data:`velspec.result.PICK_DTYPE`
        Picks and likely multiples, ascending in t0 (then velocity), with flags; ``cmp`` is 0
        (the caller's to fill).
    path : float32 ndarray (nt,)
        The traced velocity function on every t0 sample, m/s.
    """
    nv, nt = panel.shape
    if sea_floor is None or not (np.isfinite(sea_floor[0]) and sea_floor[0] > 0 and np.isfinite(sea_floor[1])):
        sea_floor = (float("nan"), params.water_velocity)
    floor_t, water_v = float(sea_floor[0]), float(sea_floor[1])
    bounds = velocity_bounds(t0, params, velocities[0], velocities[-1], guide)
    reach = None
    if offsets is not None and stretch_limit is not None:
        # Live when x <= v t0 sqrt((1+s)^2 - 1): the stretch mute of velspec.scan.moveout.
        factor = np.sqrt((1.0 + stretch_limit) ** 2 - 1.0)
        ranked = np.sort(np.abs(offsets))
        reach = lambda j, v: np.searchsorted(ranked, v * np.maximum(t0[j], 0.0) * factor, side="right")  # noqa: E731
    picks, path = _pick_along_path(panel, velocities, t0, params, bounds, vint_bounds, search, reach)
    known, explained = classify_multiples(picks, slow_events(panel, velocities, t0, path, reach, params), params,
                                          sea_floor, vint_bounds, panel, velocities, t0)
    blank = panel
    for _ in range(MAX_PASSES - 1):
        from_path = np.isin(known["t0"], picks["t0"]) & ((known["flags"] & _MULTIPLE) != 0)
        if params.multiple_margin <= 0 or not from_path.any():
            break
        # A pick along the traced function was a multiple: trace again with the recognised
        # multiples blanked out of the panel, so that they neither pull the function nor hide
        # the primaries beside them. A new pass can show multiples the last one hid.
        blank = blank_events(blank, velocities, t0, known, params)
        picks, path = _pick_along_path(blank, velocities, t0, params, bounds, vint_bounds, search, reach)
        again = slow_events(blank, velocities, t0, path, reach, params)
        prior = known[(known["flags"] & _MULTIPLE) != 0]
        known, explained = classify_multiples(picks, np.concatenate([prior, again]), params, sea_floor,
                                              vint_bounds, panel, velocities, t0)
    mult = (known["flags"] & _MULTIPLE) != 0
    picks, explained, multiples = known[~mult], explained[~mult], known[mult]
    lo_floor, hi_floor = (np.interp(floor_t, t0, b) for b in bounds) if np.isfinite(floor_t) else (0.0, 0.0)
    if np.isfinite(floor_t) and lo_floor <= water_v <= hi_floor:
        # (a corridor or a person's guide band that excludes the water velocity there wins)
        # the sea floor is a primary at the water velocity and the top of the field; a pick on it
        # (or on its smear, a little later and faster) is the same event
        wv = water_v
        same = ((np.abs(picks["t0"] - floor_t) <= params.multiple_time_tolerance)
                & (np.abs(picks["vrms"] - wv) <= 2 * params.multiple_velocity_tolerance * wv))
        floor = candidate_table([(floor_t, wv, float(picks["coherence"][same].max()) if same.any() else 1.0,
                                  SEA_FLOOR_SIGMA * wv, int(Flag.sea_floor))])
        picks, explained = picks[~same], explained[~same]
        order = np.argsort(np.concatenate([floor["t0"], picks["t0"]]), kind="stable")
        picks = np.concatenate([floor, picks])[order]
        explained = np.concatenate([[False], explained])[order]
    if vint_bounds is not None:
        # the first to go of a pair Dix forbids: one a multiple explains, then one slower than the
        # water below the sea floor, then the weaker
        rank = picks["coherence"] - 1.0 * explained
        if np.isfinite(floor_t):
            rank = rank - 2.0 * ((picks["t0"] > floor_t + 1e-9) & (picks["vrms"] < water_v))
            rank[(picks["flags"] & int(Flag.sea_floor)) != 0] = np.inf
        keep = consistent_picks(picks["t0"], picks["vrms"], rank, vint_bounds)
        picks["flags"][~keep] |= int(Flag.impossible_interval_velocity)
    picks["flags"][picks["coherence"] < params.doubtful_coherence] |= int(Flag.low_coherence)
    picks["flags"][picks["sigma"] > params.doubtful_sigma * picks["vrms"]] |= int(Flag.wide_peak)
    merged = np.concatenate([picks, multiples])
    merged = merged[np.lexsort((merged["vrms"], merged["t0"]))]
    return as_pick_table(merged), path.astype(np.float32)


def _pick_along_path(panel, velocities, t0, params, bounds, vint_bounds, search, reach):
    """Trace the function and pick the prominent maxima near it: (candidate table, path)."""
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
    for j in event_columns(along, t0, dt, params):
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
            flags |= int(Flag.at_bound)
        else:
            v, c = refine_peak(column, velocities, r)
            if r == 0 or r == nv - 1:
                flags |= int(Flag.at_bound)   # at the end of the scanned range: the peak may lie beyond it
        entries.append((t0[j], v, c, peak_sigma(column, velocities, r, v, c), flags))
    return candidate_table(entries), path


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


