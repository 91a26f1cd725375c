"""Pairs of picks that Dix's relation forbids: the weaker of an impossible pair is left out.

References
----------
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
"""

from __future__ import annotations

import numpy as np


def consistent_picks(t0: np.ndarray, v: np.ndarray, coherence: np.ndarray,
                     vint_bounds: tuple[float, float]) -> np.ndarray:
    """Mask of picks kept so that no two neighbours imply an interval velocity outside the range.

    Dix (1955): v_int^2 = (t2 V2^2 - t1 V1^2) / (t2 - t1) between neighbouring picks. While some
    interval falls outside ``vint_bounds``, the weakest pick bordering an offending interval is
    dropped. Dropping a pick merges two
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
        with np.errstate(divide="ignore", invalid="ignore"):
            u = np.diff(b) / np.diff(t0[idx])
        bad = np.flatnonzero(~((u >= lo2) & (u <= hi2)))   # two picks at one time are a bad pair too
        if not bad.size:
            return keep
        # Drop the weakest offender first: removing it may make its neighbours consistent.
        candidates = np.unique(np.concatenate([idx[bad], idx[bad + 1]]))
        keep[candidates[np.argmin(coherence[candidates])]] = False


