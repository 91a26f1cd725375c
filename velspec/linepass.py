"""The line pass: from the picks of every CMP to the velocity fields of the line.

It works on the picks alone (never on traces), so it reruns from a result file
(``velspec revise``): a person's edits, the lateral outlier test against the running median
along the line, the stacking and interval velocity fields by constrained Dix with their
uncertainties, the quality grade of each CMP, and depth. The flags it owns
(``lateral_outlier``, and with edits ``edited``, ``replaced``, ``outside_guide``) are set afresh
each time it runs.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .flags import Flag, clear, used_mask
from .interval import depth_fields, fields_from_picks
from .params import RunParams
from .regularised import regularised_dix, trend_knots
from .result import empty_picks, sort_picks

EDITED_SIGMA = 0.01    # uncertainty given to a person's pick, as a fraction of its velocity
LONG_GAP = 0.4         # s: a gap between used picks this long leaves the field to interpolation
SUPPORT = 1.5          # a neighbour's field is supported within this many min_separation of its picks
MIN_NEIGHBOURS = 3     # supported neighbours needed to call a pick a lateral outlier
FALLBACK_SIGMA = 0.05  # the same for the traced function where a CMP has no pick: poor, and said so


@dataclass
class LineFields:
    """What the line pass computes, on (CMP, t0) unless said.

    Attributes
    ----------
    vrms, vint, vint_raw, vint_sigma : float32 (ncmp, nt)
        Stacking velocity, constrained Dix interval velocity, unconstrained Dix (signed square
        root), and the uncertainty of vint, m/s.
    forced : uint8 (ncmp, nt)
        1 where the bounds changed vint by more than 1 m/s.
    forced_count, no_picks, quality : (ncmp,)
        Forced pick intervals; 1 where the traced function stood in for picks; 0 good, 1 fair,
        2 poor.
    eta : float32 (ncmp, nt) or None
        Anellipticity (nonhyperbolic scan only).
    z, depth_t0, depth_vint, depth_vavg : depth axis (nz,) m, and two-way time (s), interval
        and average velocity (m/s) at each depth, (ncmp, nz), from the regularised field (from
        ``vint`` when there is none).
    regularised_vint, regularised_vrms : float32 (ncmp, nt) or None
        The line-wide regularised interval field and the stacking velocity it predicts.
    edited_cmps : int
        CMPs whose picks a person's edits changed.
    """

    vrms: np.ndarray
    vint: np.ndarray
    vint_raw: np.ndarray
    vint_sigma: np.ndarray
    vrms_sigma: np.ndarray
    forced: np.ndarray
    forced_count: np.ndarray
    no_picks: np.ndarray
    quality: np.ndarray
    eta: np.ndarray | None
    z: np.ndarray
    depth_t0: np.ndarray
    depth_vint: np.ndarray
    depth_vavg: np.ndarray | None = None
    regularised_vint: np.ndarray | None = None
    regularised_vrms: np.ndarray | None = None
    edited_cmps: int = 0


def cmp_slices(cmp: np.ndarray, picks: np.ndarray) -> list[slice]:
    """Rows of each CMP in a pick table sorted by CMP."""
    starts = np.searchsorted(picks["cmp"], cmp, side="left")
    stops = np.searchsorted(picks["cmp"], cmp, side="right")
    return [slice(int(a), int(b)) for a, b in zip(starts, stops)]


def apply_edits(cmp: np.ndarray, picks: np.ndarray, edits: dict, mode: str, params: RunParams) -> np.ndarray:
    """The pick table with a person's picks put in.

    ``replace``: at each CMP in ``edits`` the automatic picks are flagged ``replaced`` and the
    person's picks added (flag ``edited``). ``guide``: the automatic picks outside the band
    around the person's function are flagged ``outside_guide``; if none is left, the person's
    picks are added.

    Parameters
    ----------
    cmp : int64 (ncmp,)
        CMP numbers of the line.
    picks : pick table, sorted by CMP
    edits : dict
        ``{cmp: (t0 (s), vrms (m/s))}`` as read by :func:`velspec.io.picks_csv.read_functions`.
    mode : str
        ``"replace"`` or ``"guide"``.

    Raises
    ------
    InputError
        Edits for CMPs the line does not have.
    """
    unknown = sorted(set(edits) - set(int(c) for c in cmp))
    if unknown:
        raise InputError(f"edited picks name CMP(s) not in the result: {', '.join(map(str, unknown[:5]))}"
                         f"{' ...' if len(unknown) > 5 else ''}")
    pp = params.pick
    picks = picks.copy()
    added = []
    edited = np.isin(picks["cmp"], list(edits))
    picks["flags"][edited] = clear(picks["flags"][edited], Flag.replaced | Flag.outside_guide)
    for number, (t, v) in edits.items():
        rows = np.flatnonzero(picks["cmp"] == number)
        p = picks[rows]
        use = used_mask(p["flags"])
        add = True
        if mode == "guide":
            g = np.interp(p["t0"], t, v)
            outside = (p["vrms"] < g * (1 - pp.guide_below)) | (p["vrms"] > g * (1 + pp.guide_above))
            picks["flags"][rows[outside & use]] |= int(Flag.outside_guide)
            add = not used_mask(picks["flags"][rows]).any()
        else:
            picks["flags"][rows[use]] |= int(Flag.replaced)
        if add:
            new = empty_picks(t.size)
            new["cmp"], new["t0"], new["vrms"] = number, t, v.astype(np.float32)
            new["sigma"] = (EDITED_SIGMA * v).astype(np.float32)
            new["flags"] = int(Flag.edited)
            added.append(new)
    return sort_picks(np.concatenate([picks, *added])) if added else picks


def lateral_outliers(t0: np.ndarray, picks: np.ndarray, slices: list[slice], vrms: np.ndarray,
                     params: RunParams, near_rows=None) -> list[int]:
    """Flag (in place) picks far from the running median of the stacking-velocity field.

    The median over +-``lateral_cmps`` CMPs at each t0 follows a step in velocity (a fault, a
    change of facies) where a mean would smear it; a pick is an outlier only where it differs
    from it by more than ``outlier_tolerance`` and by more than ``outlier_sigmas`` of its own
    uncertainty. Only the neighbours whose own field is supported there count (a used pick of
    theirs within :data:`SUPPORT` of ``min_separation``): an extrapolated field is no reference,
    and fewer than :data:`MIN_NEIGHBOURS` such neighbours leave the pick untested. A person's
    picks are never rejected. Returns the rows with a pick flagged.
    ``near_rows(row, radius)`` gives the neighbouring rows on a grid of bins
    (:mod:`velspec.neighbours`); default: the rows along the line.
    """
    pp = params.pick
    if pp.lateral_cmps == 0 or len(slices) < 3:
        return []
    k = pp.lateral_cmps
    used_t = [np.sort(picks["t0"][s][used_mask(picks["flags"][s])]) for s in slices]
    reach = SUPPORT * pp.min_separation
    flagged = []
    for row, rows in enumerate(slices):
        p = picks[rows]
        candidate = used_mask(p["flags"]) & ((p["flags"] & int(Flag.edited)) == 0)
        if not candidate.any():
            continue
        # the median over the neighbours' fields at this CMP's pick times only; the window
        # shrinks at the ends of the line rather than repeating the end CMP
        near_idx = (np.arange(max(row - k, 0), min(row + k + 1, len(slices))) if near_rows is None
                    else np.asarray(near_rows(row, k)))
        near = vrms[near_idx]
        cols = np.clip(np.searchsorted(t0, p["t0"]), 0, t0.size - 1)
        if np.array_equal(t0[cols], p["t0"]):      # automatic picks sit on samples: no interpolation
            values = near[:, cols]
        else:
            values = np.stack([np.interp(p["t0"], t0, f) for f in near])
        supported = np.stack([_within(used_t[j], p["t0"], reach) for j in near_idx])
        supported[near_idx == row] = False    # the CMP itself is no witness
        count = supported.sum(axis=0)
        enough = count >= MIN_NEIGHBOURS
        ref = np.zeros(p.size)
        if enough.any():
            ref[enough] = _masked_median(values, supported, count)[enough]
        dev = np.abs(p["vrms"] - ref)
        bad = (candidate & enough & (dev > pp.outlier_tolerance * ref) & (dev > pp.outlier_sigmas * p["sigma"]))
        if bad.any():
            picks["flags"][np.arange(rows.start, rows.stop)[bad]] |= int(Flag.lateral_outlier)
            flagged.append(row)
    return flagged


def _within(sorted_t: np.ndarray, t: np.ndarray, reach: float) -> np.ndarray:
    """For each time of ``t``: is one of ``sorted_t`` (ascending) within ``reach`` of it?"""
    if sorted_t.size == 0:
        return np.zeros(t.size, dtype=bool)
    k = np.searchsorted(sorted_t, t)
    below = np.abs(t - sorted_t[np.maximum(k - 1, 0)])
    above = np.abs(sorted_t[np.minimum(k, sorted_t.size - 1)] - t)
    return np.minimum(below, above) <= reach


def _masked_median(values: np.ndarray, mask: np.ndarray, count: np.ndarray) -> np.ndarray:
    """Median of each column of ``values`` over the rows where ``mask`` holds (``count`` of
    them, >= 1 where the answer is used), as ``np.nanmedian`` computes it in the values' type
    (the mean of the two middle values for an even count)."""
    s = np.sort(np.where(mask, values, np.inf), axis=0)
    cols = np.arange(values.shape[1])
    c = np.maximum(count, 1)
    return (s[(c - 1) // 2, cols] + s[c // 2, cols]) / 2


def cmp_quality(p: np.ndarray, fallback: bool, forced_count: int, params: RunParams,
                t_end: float = np.inf) -> int:
    """0 good, 1 fair, 2 poor for one CMP's picks ``p`` (see the README's table of the rule).

    Among the rules: a CMP whose used picks leave a gap longer than :data:`LONG_GAP` across a
    coherent event that was rejected against its neighbours (coherence at least
    ``doubtful_coherence``, flagged as an impossible interval velocity or a lateral outlier; a
    predicted multiple is explained) is at best fair: its field there is an interpolation
    across what the data show.
    """
    flags = p["flags"]
    use = used_mask(flags)
    if fallback or use.sum() < 2:
        return 2
    rel = float(np.median(p["sigma"][use] / p["vrms"][use]))
    if rel > params.pick.doubtful_sigma:
        return 2
    candidates = (flags & int(Flag.likely_multiple)) == 0
    rejected = candidates & ((flags & int(Flag.lateral_outlier | Flag.impossible_interval_velocity)) != 0)
    low = use & ((flags & int(Flag.low_coherence)) != 0)
    at_bound = use & ((flags & int(Flag.at_bound)) != 0)
    if (forced_count > 0 or at_bound.any() or rejected.sum() > 0.25 * max(candidates.sum(), 1)
            or rel > 0.5 * params.pick.doubtful_sigma or low.sum() > 0.5 * use.sum()
            or _gap_across_rejected(p, use, params, t_end)):
        return 1
    return 0


def _gap_across_rejected(p: np.ndarray, use: np.ndarray, params: RunParams, t_end: float) -> bool:
    knots = p["t0"][use]
    gaps = np.flatnonzero(np.diff(knots) > LONG_GAP)
    if not gaps.size:
        return False
    # a predicted multiple is explained; an event rejected against its neighbours is not
    strong = ~use & (p["coherence"] >= params.pick.doubtful_coherence) & (
        (p["flags"] & int(Flag.lateral_outlier | Flag.impossible_interval_velocity)) != 0)
    for g in gaps:
        if np.any(strong & (p["t0"] > knots[g]) & (p["t0"] < knots[g + 1])):
            return True
    return False


def _cmp_fields(t0: np.ndarray, p: np.ndarray, path: np.ndarray, params: RunParams):
    """Fields of one CMP from its used picks; the traced function where it has none."""
    use = used_mask(p["flags"]) & (p["t0"] > 0)   # Dix counts time from zero: a pick there carries no interval
    pick_t, pick_v, pick_s = p["t0"][use], p["vrms"][use], p["sigma"][use]
    fallback = pick_t.size == 0
    if fallback:
        # No coherence maximum passed the thresholds: fall back on the traced function.
        start = max(params.pick.tmin, float(t0[t0 > 0][0]))
        pick_t = np.append(np.arange(start, t0[-1], params.pick.min_separation), t0[-1])
        pick_v = np.interp(pick_t, t0, path).astype(np.float32)
        pick_s = (FALLBACK_SIGMA * pick_v).astype(np.float32)
    f = fields_from_picks(t0, pick_t, pick_v, params.interval, pick_sigma=pick_s)
    return f, use, fallback


def line_pass(t0: np.ndarray, cmp: np.ndarray, picks: np.ndarray, paths: np.ndarray, params: RunParams,
              edits: dict | None = None, near_rows=None, depth: bool = True) -> tuple[np.ndarray, LineFields]:
    """Fields on every (CMP, t0) from the picks.

    Parameters
    ----------
    t0 : float64 (nt,)
        Time axis, s.
    cmp : int64 (ncmp,)
        CMP numbers, ascending.
    picks : pick table (:data:`velspec.result.PICK_DTYPE`), sorted by CMP
        Every pick of the line with the flags of the streaming pass.
    paths : float32 (ncmp, nt)
        The traced function of each CMP (stands in where a CMP has no usable pick).
    params : RunParams
    edits : dict, optional
        A person's picks ``{cmp: (t0, vrms)}``, applied in ``params.pick.edit_mode``.
    near_rows : callable, optional
        ``near_rows(row, radius)``: the lateral neighbours of a row on a grid of bins (see
        :func:`lateral_outliers`); default along the line.
    depth : bool
        Compute the depth fields from the per-CMP interval velocity (default True; the run
        makes them from the regularised field instead when it has one).

    Returns
    -------
    picks : the pick table with the line pass's flags and ``vint_sigma`` set (a new array)
    fields : LineFields
    """
    picks = picks.copy()
    picks["flags"] = clear(picks["flags"], Flag.lateral_outlier)   # the line pass owns it: start afresh
    changed = 0
    if edits:
        picks = apply_edits(cmp, picks, edits, params.pick.edit_mode, params)
        changed = len(edits)
    slices = cmp_slices(cmp, picks)
    ncmp, nt = len(cmp), t0.size
    vrms = np.empty((ncmp, nt), dtype=np.float32)
    vint = np.empty_like(vrms)
    vint_raw = np.empty_like(vrms)
    vint_sigma = np.empty_like(vrms)
    vrms_sigma = np.empty_like(vrms)
    forced = np.zeros((ncmp, nt), dtype=np.uint8)
    forced_count = np.zeros(ncmp, dtype=np.int32)
    no_picks = np.zeros(ncmp, dtype=np.uint8)
    quality = np.zeros(ncmp, dtype=np.uint8)
    eta = np.zeros((ncmp, nt), dtype=np.float32) if params.scan.moveout == "nonhyperbolic" else None

    def fill(row: int) -> None:
        # straight into the output arrays: the line pass holds each field once
        p = picks[slices[row]]
        f, use, fallback = _cmp_fields(t0, p, paths[row], params)
        vrms[row], vint[row], vint_raw[row], vint_sigma[row] = f.vrms, f.vint, f.vint_raw, f.vint_sigma
        vrms_sigma[row] = f.vrms_sigma
        forced[row] = f.forced
        forced_count[row] = f.forced_count
        no_picks[row] = fallback
        quality[row] = cmp_quality(p, fallback, f.forced_count, params, t_end=float(t0[-1]))
        ps = np.full(p.size, np.nan, np.float32)
        if not fallback:
            ps[use] = f.pick_vint_sigma
        picks["vint_sigma"][slices[row]] = ps
        if eta is not None and use.any():
            eta[row] = np.interp(t0, p["t0"][use], p["eta"][use])   # held beyond the end picks
        elif eta is not None:
            eta[row] = 0.0

    for row in range(ncmp):
        fill(row)
    for row in lateral_outliers(t0, picks, slices, vrms, params, near_rows):   # judged on the first fields, then redone
        fill(row)
    z = t_of_z = vint_z = None
    if depth:
        z, t_of_z, vint_z = depth_fields(t0, vint, params.interval.dz)
    return picks, LineFields(vrms=vrms, vint=vint, vint_raw=vint_raw, vint_sigma=vint_sigma,
                             vrms_sigma=vrms_sigma, forced=forced,
                             forced_count=forced_count, no_picks=no_picks, quality=quality, eta=eta, z=z,
                             depth_t0=t_of_z, depth_vint=vint_z, edited_cmps=changed)


REG_WINDOW = 128   # CMPs whose regularised field one solve gives
REG_HALO = 48      # CMPs either side of a window whose picks the solve sees as well


def regularised_windows(nrows: int):
    """The windows of the regularised field on a line of ``nrows`` analysed CMPs: ``(a, b, lo,
    hi)``, the rows ``a..b-1`` kept from a solve over rows ``lo..hi-1`` (their halo).

    The whole line as one problem would cost memory and time that grow faster than its length;
    a window with a halo of :data:`REG_HALO` CMPs is the whole-line answer where the lateral
    smoothing reaches less far than the halo. A run in memory, a streamed run and a revise all
    take these windows, so they give the same bits.
    """
    for a in range(0, nrows, REG_WINDOW):
        b = min(a + REG_WINDOW, nrows)
        yield a, b, max(0, a - REG_HALO), min(nrows, b + REG_HALO)


def regularisable(picks: np.ndarray, t0: np.ndarray) -> np.ndarray:
    """The picks the regularised field uses: used, and inside the t0 axis."""
    return used_mask(picks["flags"]) & (picks["t0"] > 0) & (picks["t0"] <= t0[-1])


def line_trend(pick_t0: np.ndarray, pick_vrms: np.ndarray):
    """The stacking-velocity trend of a whole line from its regularisable picks (None if none)."""
    return trend_knots(pick_t0, pick_vrms) if np.size(pick_t0) else None


def regularise_window(t0: np.ndarray, picks: np.ndarray, pick_rows: np.ndarray, nrows: int, params: RunParams,
                      cmp_x: np.ndarray | None, inline: np.ndarray | None, trend):
    """The regularised field of one window of rows from the picks of its rows.

    Returns ``(vint, vrms, misfit)`` (misfit per pick of ``picks``, the given value where a pick
    is not used), or None when the window has no usable pick (the caller keeps the per-CMP
    fields there). On a grid of bins (``inline`` given) the lateral smoothing runs along each
    inline and stops between inlines.
    """
    use = regularisable(picks, t0)
    if not use.any() or trend is None:
        return None
    breaks = None if inline is None else np.diff(np.asarray(inline)) != 0
    x = None
    if cmp_x is not None:
        d = np.diff(np.asarray(cmp_x, dtype=np.float64))
        if np.all((d != 0) | (breaks if breaks is not None else False)):
            x = np.asarray(cmp_x, dtype=np.float64)
    reg = regularised_dix(t0, pick_rows[use].astype(np.int64), picks["t0"][use], picks["vrms"][use],
                          picks["sigma"][use], nrows, params.interval, cmp_x=x, breaks=breaks, trend=trend)
    misfit = picks["misfit"].copy()
    misfit[use] = reg.misfit
    return reg.vint, reg.vrms, misfit


def regularise_line(t0: np.ndarray, picks: np.ndarray, slices: list[slice], vint: np.ndarray, vrms: np.ndarray,
                    params: RunParams, cmp_x: np.ndarray | None = None, inline: np.ndarray | None = None):
    """The regularised field of a line held in memory, window by window (:func:`regularised_windows`).

    Returns ``(reg_vint, reg_vrms, picks)``, the picks with their ``misfit`` set (a new table).
    A window without a usable pick keeps the per-CMP ``vint`` and ``vrms``.
    """
    picks = picks.copy()
    use = regularisable(picks, t0)
    trend = line_trend(picks["t0"][use], picks["vrms"][use])
    reg_vint, reg_vrms = vint.copy(), vrms.copy()
    counts = np.array([s.stop - s.start for s in slices], dtype=np.int64)
    for a, b, lo, hi in regularised_windows(len(slices)):
        p0, p1 = slices[lo].start, slices[hi - 1].stop
        rows = np.repeat(np.arange(hi - lo), counts[lo:hi])
        got = regularise_window(t0, picks[p0:p1], rows, hi - lo, params,
                                None if cmp_x is None else cmp_x[lo:hi], None if inline is None else inline[lo:hi],
                                trend)
        if got is None:
            continue
        w_vint, w_vrms, misfit = got
        reg_vint[a:b], reg_vrms[a:b] = w_vint[a - lo: b - lo], w_vrms[a - lo: b - lo]
        k0, k1 = slices[a].start, slices[b - 1].stop
        picks["misfit"][k0:k1] = misfit[k0 - p0: k1 - p0]
    return reg_vint, reg_vrms, picks


__all__ = ["line_pass", "regularise_line", "regularise_window", "regularised_windows", "line_trend",
           "regularisable", "REG_WINDOW", "REG_HALO", "LineFields",
           "apply_edits", "lateral_outliers", "cmp_quality", "cmp_slices",
           "EDITED_SIGMA", "FALLBACK_SIGMA"]
