"""The interval stage: stacking-velocity fields from picks, constrained Dix, depth conversion.

Dix's relation is linear in the interval velocity squared: with picks (t_i, V_i) and u_k the
squared interval velocity between t_{k-1} and t_k (t_0 = 0),

    t_i V_i^2 = sum_{k <= i} u_k (t_k - t_{k-1}).

Solving it as a bounded least-squares problem (``scipy.optimize.lsq_linear``) keeps every
interval velocity inside a physical range; where the unconstrained (raw) Dix value falls outside
it, the result says so and by how much instead of hiding it.

References
----------
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
Stark, P. B., and Parker, R. L., 1995, Bounded-variable least-squares: an algorithm and
applications: Computational Statistics 10, 129-141 (the bounded solver used by scipy).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import lsq_linear

from .params import IntervalParams

FORCED_TOLERANCE = 1.0  # m/s: a constrained value this close to raw Dix is not "forced"


@dataclass
class DixResult:
    """Interval velocities of one velocity function.

    Attributes
    ----------
    t0 : float64 (n,)
        Times of the knots (picks), s; interval k spans t0[k-1]..t0[k] with t0[-1] = 0.
    vint : float64 (n,)
        Constrained interval velocity of each interval, m/s, inside the bounds.
    vint_raw : float64 (n,)
        Unconstrained Dix interval velocity, signed square root (negative where Dix gives an
        imaginary velocity), m/s.
    forced : bool (n,)
        Where the bounds changed the interval velocity by more than FORCED_TOLERANCE.
    """

    t0: np.ndarray
    vint: np.ndarray
    vint_raw: np.ndarray
    forced: np.ndarray


def constrained_dix(t0: np.ndarray, vrms: np.ndarray, vmin: float, vmax: float) -> DixResult:
    """Interval velocities from stacking-velocity picks, bounded to [vmin, vmax].

    Parameters
    ----------
    t0 : ndarray (n,)
        Pick times, s, strictly increasing and positive.
    vrms : ndarray (n,)
        Stacking (approximately RMS) velocities at the picks, m/s.
    vmin, vmax : float
        Physical range of interval velocity, m/s.

    Returns
    -------
    DixResult

    Notes
    -----
    Each equation is scaled by 1 / (t_i V_i^2) so that every pick weighs by its relative misfit.
    """
    t0 = np.asarray(t0, dtype=np.float64)
    v = np.asarray(vrms, dtype=np.float64)
    n = t0.size
    if n == 0:
        raise ValueError("constrained_dix needs at least one pick")
    if np.any(t0 <= 0) or np.any(np.diff(t0) <= 0):
        raise ValueError("pick times must be positive and strictly increasing")
    dt = np.diff(np.concatenate(([0.0], t0)))
    b = t0 * v * v
    a = np.tril(np.ones((n, n))) * dt[None, :]
    raw = np.diff(np.concatenate(([0.0], b))) / dt
    lo, hi = vmin * vmin, vmax * vmax
    if np.all((raw >= lo) & (raw <= hi)):
        u = raw
    else:
        w = 1.0 / b
        sol = lsq_linear(a * w[:, None], b * w, bounds=(lo, hi), method="bvls", tol=1e-12)
        u = np.clip(sol.x, lo, hi)
    vint = np.sqrt(u)
    vint_raw = np.sign(raw) * np.sqrt(np.abs(raw))
    forced = np.abs(vint - vint_raw) > FORCED_TOLERANCE
    return DixResult(t0=t0, vint=vint, vint_raw=vint_raw, forced=forced)


def dix_sigma(t0: np.ndarray, vrms: np.ndarray, sigma: np.ndarray, vint: np.ndarray) -> np.ndarray:
    """Uncertainty of each Dix interval velocity from the uncertainties of the picks, m/s.

    First-order propagation through Dix (1955), picks independent: with b_i = t_i V_i^2 and
    u_k = (b_k - b_{k-1}) / (t_k - t_{k-1}),

        sigma_u^2 = ((2 t_k V_k s_k)^2 + (2 t_{k-1} V_{k-1} s_{k-1})^2) / (t_k - t_{k-1})^2,
        sigma_vint = sigma_u / (2 vint),

    the first interval (from time zero) having sigma_vint = s_1 (its velocity is V_1 itself).
    Thin intervals between uncertain picks get large uncertainties, as they should.

    Parameters
    ----------
    t0, vrms, sigma : ndarray (n,)
        Pick times (s, positive, increasing), stacking velocities and their uncertainties (m/s).
    vint : ndarray (n,)
        Interval velocity of each interval, m/s (the constrained values).

    References
    ----------
    Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
    """
    t = np.asarray(t0, dtype=np.float64)
    g = 2.0 * t * np.asarray(vrms, dtype=np.float64) * np.asarray(sigma, dtype=np.float64)
    out = np.empty(t.size)
    if t.size == 0:
        return out
    out[0] = float(sigma[0])
    su = np.sqrt(g[1:] ** 2 + g[:-1] ** 2) / np.diff(t)
    out[1:] = su / (2.0 * np.asarray(vint, dtype=np.float64)[1:])
    return out


@dataclass
class Fields:
    """Velocity functions of one CMP on the t0 axis, float32 (nt,) each, plus QC."""

    vrms: np.ndarray
    vint: np.ndarray
    vint_raw: np.ndarray
    forced: np.ndarray
    forced_count: int
    vint_sigma: np.ndarray | None = None
    pick_vint_sigma: np.ndarray | None = None
    vrms_sigma: np.ndarray | None = None


def fields_from_picks(t0_axis: np.ndarray, pick_t0: np.ndarray, pick_v: np.ndarray,
                      params: IntervalParams, pick_sigma: np.ndarray | None = None) -> Fields:
    """Stacking and interval velocity on every t0 sample from one CMP's picks.

    Between picks t0 * vrms^2 is linear (constant interval velocity); above the first pick the
    stacking velocity is held at the first pick's value (one layer from time zero); below the
    last pick the last constrained interval velocity continues. With ``pick_sigma`` (m/s) the
    uncertainties come too: per pick the Dix propagation (:func:`dix_sigma`), and on every
    sample that and the picks' sigma, each grown with the distance to the nearest picks
    (:func:`gap_sigma`).
    """
    keep = pick_t0 > 0
    pick_t0, pick_v = pick_t0[keep], pick_v[keep]
    dix = constrained_dix(pick_t0, pick_v, params.vint_min, params.vint_max)
    t = np.asarray(t0_axis, dtype=np.float64)
    k = np.searchsorted(pick_t0, t, side="left")            # interval index of each sample
    k_int = np.minimum(k, len(pick_t0) - 1)
    vint = dix.vint[k_int]
    vint_raw = dix.vint_raw[k_int]
    forced = dix.forced[k_int]
    knots_t = np.concatenate(([0.0], pick_t0))
    knots_b = np.concatenate(([0.0], pick_t0 * pick_v.astype(np.float64) ** 2))
    b = np.interp(t, knots_t, knots_b)
    below = t > pick_t0[-1]
    b[below] = knots_b[-1] + dix.vint[-1] ** 2 * (t[below] - pick_t0[-1])
    with np.errstate(divide="ignore", invalid="ignore"):
        vrms = np.sqrt(b / t)
    vrms[t <= pick_t0[0]] = pick_v[0]
    fields = Fields(vrms=vrms.astype(np.float32), vint=vint.astype(np.float32),
                    vint_raw=vint_raw.astype(np.float32), forced=forced, forced_count=int(dix.forced.sum()))
    if pick_sigma is not None:
        per_pick = dix_sigma(pick_t0, pick_v, np.asarray(pick_sigma)[keep], dix.vint)
        fields.pick_vint_sigma = per_pick.astype(np.float32)
        # the picks' own uncertainty, and what the distance to the nearest picks adds
        s_pick = np.interp(t, pick_t0, np.asarray(pick_sigma, dtype=np.float64)[keep])
        fields.vrms_sigma = np.hypot(s_pick, gap_sigma(t, pick_t0, VRMS_DRIFT) * vrms).astype(np.float32)
        fields.vint_sigma = np.hypot(per_pick[k_int], gap_sigma(t, pick_t0, VINT_DRIFT) * vint).astype(np.float32)
    return fields


VRMS_DRIFT = 0.03   # relative stacking-velocity uncertainty one second from the nearest pick, per sqrt(s)
VINT_DRIFT = 0.10   # the same for the interval velocity


def gap_sigma(t0_axis: np.ndarray, pick_t0: np.ndarray, drift: float) -> np.ndarray:
    """Relative uncertainty that the distance to the picks adds to a field at each sample.

    Between two picks t_a < t < t_b the field is an interpolation, and the earth may do
    anything there that the picks do not see: modelled as a random walk tied down at both picks
    (a Brownian bridge), whose standard deviation is ``drift * sqrt((t - t_a)(t_b - t) /
    (t_b - t_a))``; beyond the first or last pick, free: ``drift * sqrt(|t - t_end|)``. Zero at
    the picks, largest in the middle of a long gap.

    Parameters
    ----------
    t0_axis : ndarray (nt,)
        Times, s.
    pick_t0 : ndarray (n,)
        Times of the used picks, s, increasing (at least one).
    drift : float
        Relative standard deviation after one second, per sqrt(s).
    """
    t = np.asarray(t0_axis, dtype=np.float64)
    p = np.asarray(pick_t0, dtype=np.float64)
    k = np.searchsorted(p, t)
    out = np.empty(t.size)
    inside = (k > 0) & (k < p.size)
    a, b = p[np.maximum(k - 1, 0)], p[np.minimum(k, p.size - 1)]
    span = np.where(inside, b - a, 1.0)
    out[inside] = np.sqrt(np.maximum((t - a) * (b - t), 0.0) / span)[inside]
    out[k == 0] = np.sqrt(np.abs(p[0] - t[k == 0]))
    out[k >= p.size] = np.sqrt(np.abs(t[k >= p.size] - p[-1]))
    return drift * out


def deepest(t0_axis: np.ndarray, vint: np.ndarray) -> np.ndarray:
    """Depth (m) each CMP reaches at its last sample, as :func:`depth_fields` integrates it:
    the depth axis of a line is ``np.arange(0, max + dz / 2, dz)`` over all its CMPs."""
    t = np.asarray(t0_axis, dtype=np.float64)
    dts = np.diff(np.concatenate(([0.0], t)))
    return np.cumsum(0.5 * np.asarray(vint, dtype=np.float64) * dts[None, :], axis=1)[:, -1]


def depth_fields(t0_axis: np.ndarray, vint: np.ndarray, dz: float,
                 z: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Convert interval-velocity fields in time to depth.

    Depth below the datum is z(t) = integral of vint / 2 over two-way time from 0 (the first
    sample's interval velocity is taken from time zero to the first sample).

    Parameters
    ----------
    t0_axis : ndarray (nt,)
        Two-way times, s, regular.
    vint : ndarray (ncmp, nt)
        Interval velocity in time, m/s.
    dz : float
        Depth step, m.
    z : ndarray (nz,), optional
        The depth axis, m, when the fields are converted a block of CMPs at a time (default:
        from 0 in steps of ``dz`` to the deepest depth these CMPs reach, :func:`deepest`).

    Returns
    -------
    z : float64 (nz,)
        Regular depths, m, from 0 to the deepest depth the line reaches.
    t_of_z : float32 (ncmp, nz)
        Two-way time at each depth, s (beyond a CMP's last sample, its last velocity continues).
    vint_z : float32 (ncmp, nz)
        Interval velocity at each depth, m/s.
    """
    t = np.asarray(t0_axis, dtype=np.float64)
    v = np.asarray(vint, dtype=np.float64)
    ncmp, nt = v.shape
    dts = np.diff(np.concatenate(([0.0], t)))
    z_t = np.cumsum(0.5 * v * dts[None, :], axis=1)          # (ncmp, nt) depth at each sample
    if z is None:
        zmax = float(z_t[:, -1].max()) if ncmp else 0.0
        z = np.arange(0.0, zmax + 0.5 * dz, dz)
    t_of_z = np.empty((ncmp, z.size), dtype=np.float32)
    vint_z = np.empty((ncmp, z.size), dtype=np.float32)
    for c in range(ncmp):
        zc = np.concatenate(([0.0], z_t[c]))
        tc = np.concatenate(([0.0], t))
        tz = np.interp(z, zc, tc)
        deeper = z > zc[-1]
        tz[deeper] = tc[-1] + 2.0 * (z[deeper] - zc[-1]) / v[c, -1]
        t_of_z[c] = tz
        idx = np.clip(np.searchsorted(tc, tz, side="left") - 1, 0, nt - 1)
        vint_z[c] = v[c, idx]
    return z, t_of_z, vint_z
