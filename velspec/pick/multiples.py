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
INVERSION = int(Flag.velocity_inversion)
SLOW = 1 << 15          # working mark of an event found below the traced function; never returned
MAX_WATER_ORDER = 6     # water round trips predicted for reverberations and peg-legs
STRONG = 0.5            # coherence of a primary strong enough to make a surface multiple of its own
WATER_TIME_ERROR = 0.004  # s: how far the sea floor's time may be off, per trip through the water
PANEL_RATIO = 0.6         # coherence of a peg-leg's primary, at least, relative to the peg-leg's
PANEL_MIN_SHIFT = 0.03    # the primary must lie this much faster than the peg-leg for the panel to tell
PANEL_VELOCITY = 0.01     # half width of the velocity window searched for it


def classify_multiples(picks: np.ndarray, slow: np.ndarray, params,
                       sea_floor: tuple[float, float] = (float("nan"), float("nan")),
                       vint_bounds: tuple[float, float] | None = None, panel: np.ndarray | None = None,
                       velocities: np.ndarray | None = None,
                       t0: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Picks and slow events together, time-ordered, the likely multiples flagged, and why.

    A multiple is recognised by prediction, not by slowness alone. Flat layers make every
    surface-related multiple a sum of primary legs: events a and b combine into one at
    t0 = t_a + t_b whose stacking velocity is the RMS over the whole path,
    V^2 = (t_a V_a^2 + t_b V_b^2) / (t_a + t_b) (Dix, 1955). Walking down in time:

    - with a sea floor at t_w (found in the data, given, or inferred from its reverberations):
      its reverberations at (m + 1) t_w with the water velocity, and the peg-legs
      t_p + j t_w of every primary p above (j up to :data:`MAX_WATER_ORDER`), picked or only
      seen as coherence in the panel;
    - the surface multiples t_a + t_b of strong primaries (coherence >= :data:`STRONG`);
    - without a sea floor, any earlier event combined with an earlier primary.

    An event within ``multiple_time_tolerance`` and ``multiple_velocity_tolerance`` of a
    prediction is a likely multiple. An event slower than the traced function (``slow``) that no
    prediction explains is a primary in a velocity inversion when the interval velocity it
    implies with the primary above lies in the physical range (at least the water velocity below
    a sea floor): it is kept and flagged ``velocity_inversion``; otherwise it is a likely
    multiple. Last, a weaker maximum on a recognised multiple's smear is the multiple's tail.

    Parameters
    ----------
    picks, slow : candidate tables (:data:`velspec.pick.peaks.CANDIDATE_DTYPE`)
        Maxima along the traced function, and events slower than it (earlier multiples may be
        among them, already flagged).
    params : PickParams
    sea_floor : (t0, v)
        Two-way time (s) and water velocity (m/s) of the sea floor; NaN time where none is known
        (then ``params.water_bottom`` or an inference from the picks is tried).
    vint_bounds : (vmin, vmax), optional
        Physical interval-velocity range, m/s (default ``(1400, 7000)``).
    panel, velocities, t0 : optional
        The coherence panel (nv, nt) with its axes: with a sea floor, an event is a peg-leg also
        when the panel holds its primary, picked or not (:func:`_peg_leg_in_panel`).

    Returns
    -------
    events : candidate table, ascending in t0 (stable)
    explained : bool ndarray
        Events that a prediction explains within twice the tolerances (flagged or not): the first
        to drop when two picks contradict each other.
    """
    slow = slow.copy()
    slow["flags"][(slow["flags"] & MULTIPLE) == 0] |= SLOW
    events = np.concatenate([picks, slow])
    events = events[np.argsort(events["t0"], kind="stable")]
    explained = np.zeros(events.size, dtype=np.bool_)
    if params.multiple_margin <= 0:
        events["flags"] &= np.uint16(~SLOW & 0xFFFF)
        return events, explained
    t, v, c = (np.ascontiguousarray(events[k]) for k in ("t0", "vrms", "coherence"))
    flags = np.ascontiguousarray(events["flags"])
    floor, water_v = sea_floor
    if not (np.isfinite(floor) and floor > 0):
        inferred = infer_sea_floor(t, v, flags, params)
        floor, water_v = (-1.0, water_v) if inferred is None else inferred
    lo, hi = vint_bounds if vint_bounds is not None else (1400.0, 7000.0)
    if panel is None:
        panel, velocities, t0 = np.zeros((1, 1), np.float32), np.zeros(1), np.zeros(2)
    dt = float(t0[1] - t0[0]) if t0.size > 1 else 1.0
    _mark_predicted(t, v, c, flags, explained, float(floor), float(water_v), params.multiple_time_tolerance,
                    params.multiple_velocity_tolerance, STRONG, float(lo), float(hi), params.min_separation,
                    MULTIPLE, INVERSION, SLOW, np.ascontiguousarray(panel, dtype=np.float32),
                    np.ascontiguousarray(velocities, dtype=np.float64), float(t0[0]), dt)
    events["flags"] = flags & np.uint16(~SLOW & 0xFFFF)
    return events, explained


def infer_sea_floor(t: np.ndarray, v: np.ndarray, flags: np.ndarray, params) -> tuple | None:
    """(t0, v) of a sea floor that no pick holds, or None.

    Given (``water_bottom`` > 0) it is used. Otherwise it is inferred from its
    reverberations: when the earliest pick (t1, V1) has a companion at 1.5 t1
    with the same velocity, the two are the second and third passes of a water layer whose
    floor at t1 / 2 was too shallow to be seen inside the stretch mute, and no primary could
    keep the stacking velocity unchanged over that interval while the earth below the sea
    floor is faster than the water.
    """
    tol_t, tol_v = params.multiple_time_tolerance, params.multiple_velocity_tolerance
    if params.water_bottom > 0:
        return params.water_bottom, params.water_velocity
    prim = np.flatnonzero((flags & MULTIPLE) == 0)
    if prim.size < 2:
        return None
    t1, v1 = t[prim[0]], v[prim[0]]
    third = (np.abs(t - 1.5 * t1) <= tol_t) & (np.abs(v - v1) <= tol_v * v1)
    return (0.5 * t1, v1) if third.any() else None


@njit(cache=True, nogil=True)
def _matches(ti, vi, tp, vp, tol_t, tol_v):
    return abs(tp - ti) <= tol_t and abs(vi - vp) <= tol_v * vp


@njit(cache=True, nogil=True)
def _pair(ti, vi, a_t, a_v, p_t, p_v, tol_t, tol_v):
    ta = a_t + p_t
    return abs(ta - ti) <= tol_t and _matches(ti, vi, ta, np.sqrt((a_t * a_v * a_v + p_t * p_v * p_v) / ta),
                                              tol_t, tol_v)


@njit(cache=True, nogil=True)
def _peg_leg_in_panel(panel, vel, t_first, dt, ti, vi, ci, wb, vw, tol_t, tol_v):
    """True when the panel holds, at the place a peg-leg (ti, vi) with j water trips would come
    from, (ti - j wb, vp) with ti vi^2 = (ti - j wb) vp^2 + j wb vw^2, coherence of at least
    PANEL_RATIO times the event's own: its primary, picked or not. A primary on the trend maps
    to a place faster than the trend there, where nothing is."""
    nv, nt = panel.shape
    for j in range(1, MAX_WATER_ORDER + 1):
        tp = ti - j * wb
        if tp < wb:
            break
        u = (ti * vi * vi - j * wb * vw * vw) / tp
        if u <= 0:
            continue
        vp = np.sqrt(u)
        if vp < vi * (1.0 + PANEL_MIN_SHIFT):
            # a primary maps to a place as near the trend as its peg-leg would: no telling them apart
            continue
        reach = tol_t + j * WATER_TIME_ERROR
        a = max(int(np.floor((tp - reach - t_first) / dt)), 0)
        b = min(int(np.ceil((tp + reach - t_first) / dt)), nt - 1)
        r0 = max(np.searchsorted(vel, vp * (1.0 - PANEL_VELOCITY)), 0)
        r1 = min(np.searchsorted(vel, vp * (1.0 + PANEL_VELOCITY), side="right"), nv)
        best = 0.0
        for r in range(r0, r1):
            for k in range(a, b + 1):
                if panel[r, k] > best:
                    best = panel[r, k]
        if best >= PANEL_RATIO * ci:
            return True
    return False


@njit(cache=True, nogil=True)
def _predicted(i, t, v, c, flags, wb, vw, tol_t, tol_v, strong, bit, panel, vel, t_first, dt):
    """True when the sea floor or earlier primaries predict event i within the tolerances."""
    ti, vi = t[i], v[i]
    if wb > 0 and panel.shape[1] > 1 and _peg_leg_in_panel(panel, vel, t_first, dt, ti, vi, c[i], wb, vw, tol_t,
                                                              tol_v):
        return True
    if wb > 0:
        # an error in the sea floor's time adds up with every trip through the water
        for m in range(1, MAX_WATER_ORDER + 1):          # reverberations of the sea floor
            if _matches(ti, vi, (m + 1) * wb, vw, tol_t + (m + 1) * WATER_TIME_ERROR, tol_v):
                return True
    for p in range(i):
        if flags[p] & bit or t[p] >= ti - tol_t:
            continue
        if wb > 0:
            if t[p] > 0.5 * wb:
                for j in range(1, MAX_WATER_ORDER + 1):  # peg-legs of primary p
                    if _pair(ti, vi, j * wb, vw, t[p], v[p], tol_t + j * WATER_TIME_ERROR, tol_v):
                        return True
            if c[p] >= strong:
                for a in range(p + 1):                   # surface multiples of strong primaries
                    if not flags[a] & bit and c[a] >= strong and _pair(ti, vi, t[a], v[a], t[p], v[p], tol_t, tol_v):
                        return True
        else:
            for a in range(i):                           # any earlier event with primary p
                if t[a] < ti - tol_t and _pair(ti, vi, t[a], v[a], t[p], v[p], tol_t, tol_v):
                    return True
    return False


@njit(cache=True, nogil=True)
def _mark_predicted(t, v, c, flags, explained, wb, vw, tol_t, tol_v, strong, vint_lo, vint_hi, reach, bit,
                    inversion, slow, panel, vel, t_first, dt):
    """Set ``bit`` (in place) on predicted multiples, on unexplained slow events that imply an
    impossible interval velocity and on multiples' smears; ``inversion`` on the slow events kept
    as primaries; ``explained`` where a prediction lies within twice the tolerances."""
    n = t.size
    for i in range(n):
        if flags[i] & bit:
            explained[i] = True
            continue
        if _predicted(i, t, v, c, flags, wb, vw, tol_t, tol_v, strong, bit, panel, vel, t_first, dt):
            flags[i] |= bit
            explained[i] = True
            continue
        explained[i] = _predicted(i, t, v, c, flags, wb, vw, 2 * tol_t, 2 * tol_v, strong, bit, panel, vel,
                                  t_first, dt)
        if not flags[i] & slow:
            continue
        if explained[i]:
            # slower than the trend and near a predicted multiple (within twice the tolerances):
            # the multiple, not a primary of an inversion
            flags[i] |= bit
            continue
        # slower than the trend and no multiple explains it: a primary of an inversion when the
        # interval velocity it implies with the primary above is physical
        lo = max(vint_lo, vw) if wb > 0 and t[i] > wb else vint_lo
        above = -1
        for p in range(i - 1, -1, -1):
            if not flags[p] & bit and t[p] < t[i] - 1e-9:
                above = p
                break
        if above >= 0:
            u = (t[i] * v[i] * v[i] - t[above] * v[above] * v[above]) / (t[i] - t[above])
        elif wb > 0 and t[i] > wb:
            u = (t[i] * v[i] * v[i] - wb * vw * vw) / (t[i] - wb)
        else:
            u = v[i] * v[i]
        if lo * lo <= u <= vint_hi * vint_hi:
            flags[i] |= inversion
        else:
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
            # along the smear's diagonal; or, much weaker, right beside the multiple: its side lobe
            if ((abs(dt_m) <= reach and dt_m * dv_m >= 0 and abs(dv_m) <= 2 * tol_v * v[m])
                    or (abs(dt_m) <= 0.5 * reach and c[i] < 0.5 * c[m] and abs(dv_m) <= 4 * tol_v * v[m])):
                flags[i] = (flags[i] | bit) & ~inversion
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
    as a candidate table (unflagged: :func:`classify_multiples` tells multiples from primaries
    of an inversion); ``reach(j, v)`` counts the live traces."""
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
        out.append((t0[j], v, c, peak_sigma(column, velocities, r, v, c), 0))
    return candidate_table(out)


