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
from .result import empty_picks, sort_picks

EDITED_SIGMA = 0.01    # uncertainty given to a person's pick, as a fraction of its velocity
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
    z, depth_t0, depth_vint : depth axis (nz,) m, and two-way time (s) and interval velocity
        (m/s) at each depth, (ncmp, nz).
    edited_cmps : int
        CMPs whose picks a person's edits changed.
    """

    vrms: np.ndarray
    vint: np.ndarray
    vint_raw: np.ndarray
    vint_sigma: np.ndarray
    forced: np.ndarray
    forced_count: np.ndarray
    no_picks: np.ndarray
    quality: np.ndarray
    eta: np.ndarray | None
    z: np.ndarray
    depth_t0: np.ndarray
    depth_vint: np.ndarray
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
    uncertainty. A person's picks are never rejected. Returns the rows with a pick flagged.
    ``near_rows(row, radius)`` gives the neighbouring rows on a grid of bins
    (:mod:`velspec.neighbours`); default: the rows along the line.
    """
    pp = params.pick
    if pp.lateral_cmps == 0 or len(slices) < 3:
        return []
    k = pp.lateral_cmps
    flagged = []
    for row, rows in enumerate(slices):
        p = picks[rows]
        candidate = used_mask(p["flags"]) & ((p["flags"] & int(Flag.edited)) == 0)
        if not candidate.any():
            continue
        # the median over the neighbours' fields at this CMP's pick times only; the window
        # shrinks at the ends of the line rather than repeating the end CMP
        near = vrms[max(row - k, 0): row + k + 1] if near_rows is None else vrms[near_rows(row, k)]
        cols = np.clip(np.searchsorted(t0, p["t0"]), 0, t0.size - 1)
        if np.array_equal(t0[cols], p["t0"]):      # automatic picks sit on samples: no interpolation
            ref = np.median(near[:, cols], axis=0)
        else:
            ref = np.median(np.stack([np.interp(p["t0"], t0, f) for f in near]), axis=0)
        dev = np.abs(p["vrms"] - ref)
        bad = candidate & (dev > pp.outlier_tolerance * ref) & (dev > pp.outlier_sigmas * p["sigma"])
        if bad.any():
            picks["flags"][np.arange(rows.start, rows.stop)[bad]] |= int(Flag.lateral_outlier)
            flagged.append(row)
    return flagged


def cmp_quality(p: np.ndarray, fallback: bool, forced_count: int, params: RunParams) -> int:
    """0 good, 1 fair, 2 poor for one CMP's picks ``p`` (see the README's table of the rule)."""
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
            or rel > 0.5 * params.pick.doubtful_sigma or low.sum() > 0.5 * use.sum()):
        return 1
    return 0


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
              edits: dict | None = None, near_rows=None) -> tuple[np.ndarray, LineFields]:
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
        forced[row] = f.forced
        forced_count[row] = f.forced_count
        no_picks[row] = fallback
        quality[row] = cmp_quality(p, fallback, f.forced_count, params)
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
    z, t_of_z, vint_z = depth_fields(t0, vint, params.interval.dz)
    return picks, LineFields(vrms=vrms, vint=vint, vint_raw=vint_raw, vint_sigma=vint_sigma, forced=forced,
                             forced_count=forced_count, no_picks=no_picks, quality=quality, eta=eta, z=z,
                             depth_t0=t_of_z, depth_vint=vint_z, edited_cmps=changed)


__all__ = ["line_pass", "LineFields", "apply_edits", "lateral_outliers", "cmp_quality", "cmp_slices",
           "EDITED_SIGMA", "FALLBACK_SIGMA"]
