"""Layered velocity models from sonic logs.

References
----------
Sheriff, R. E. & Geldart, L. P., 1995, Exploration Seismology, 2nd ed., Cambridge
(sonic logs and their integration into traveltime).
"""

from __future__ import annotations

import numpy as np

__all__ = ["blocked_model_from_sonic", "sonic_velocity"]

_US_PER_FT_TO_S_PER_M = 1e-6 / 0.3048  # 1 ft = 0.3048 m exactly


def sonic_velocity(dt_us_per_ft):
    """P velocity from sonic slowness, ``v = 0.3048e6 / DT``.

    Parameters
    ----------
    dt_us_per_ft : array_like
        Sonic transit time, microseconds per foot.

    Returns
    -------
    velocity : ndarray
        m/s.
    """
    return 0.3048e6 / np.asarray(dt_us_per_ft, dtype=np.float64)


def blocked_model_from_sonic(
    depth_m,
    dt_us_per_ft,
    overburden_velocity,
    min_two_way=0.02,
    datum_depth=0.0,
    half_space_velocity=None,
    block_depth=None,
):
    """Block a sonic log into flat layers of equal two-way time (or equal depth), under a stated
    overburden.

    The log is read as constant-slowness intervals between samples (the mean of the two end
    slownesses, i.e. trapezoidal integration of the sonic, with gaps of absent samples bridged the
    same way). Its integrated two-way time is cut into ``N = floor(T / min_two_way)`` blocks of
    equal two-way time, each ``>= min_two_way``; each block's velocity is twice its thickness over
    its two-way time, so the blocked model keeps the log's integrated time exactly. Above the first
    log sample the log says nothing: that stretch, from ``datum_depth`` down, is one layer of the
    stated ``overburden_velocity``.

    Parameters
    ----------
    depth_m : array_like, shape (m,)
        Depth of each log sample below the same reference as ``datum_depth``, m, any order.
    dt_us_per_ft : array_like, shape (m,)
        Sonic slowness, us/ft; NaN or non-positive samples are ignored.
    overburden_velocity : float
        Velocity assumed from the datum to the first log sample, m/s. Must be stated: the log
        cannot supply it.
    min_two_way : float
        Shortest two-way time of a block, s: the log's time is split into the largest number of
        equal blocks no shorter than this (one block if the whole log is shorter).
    datum_depth : float
        Depth of the surface or datum in the log's depth reference, m (e.g. the height of the
        kelly bushing above ground when the log is measured from it).
    half_space_velocity : float, optional
        Velocity below the last block, m/s. Default: the last block's velocity (no reflector at
        the base of the log).
    block_depth : float, optional
        Block the log into layers of equal thickness instead, the largest number no thinner
        than this, m (``min_two_way`` is then ignored). Each block's velocity still keeps the
        log's integrated time exactly.

    Returns
    -------
    thickness : ndarray, shape (n,)
        Layer thicknesses, m: the overburden (if the log starts below the datum) then the blocks.
    velocity : ndarray, shape (n+1,)
        Layer velocities and the half-space velocity, m/s.

    Raises
    ------
    ValueError
        If fewer than two valid samples remain, the log starts above the datum, or a parameter is
        not positive.

    References
    ----------
    Sheriff & Geldart, 1995, Exploration Seismology (integrated sonic time).
    """
    z = np.asarray(depth_m, dtype=np.float64).ravel()
    dt = np.asarray(dt_us_per_ft, dtype=np.float64).ravel()
    if z.shape != dt.shape:
        raise ValueError("depth_m and dt_us_per_ft must have the same length")
    if not (np.isfinite(overburden_velocity) and overburden_velocity > 0):
        raise ValueError("overburden_velocity must be a positive velocity in m/s")
    if not (np.isfinite(min_two_way) and min_two_way > 0):
        raise ValueError("min_two_way must be a positive two-way time in s")
    ok = np.isfinite(z) & np.isfinite(dt) & (dt > 0)
    z, slow = z[ok], dt[ok] * _US_PER_FT_TO_S_PER_M
    order = np.argsort(z, kind="stable")
    z, slow = z[order], slow[order]
    keep = np.r_[True, np.diff(z) > 0]  # repeated depths would make zero-thickness intervals
    z, slow = z[keep], slow[keep]
    if z.size < 2:
        raise ValueError("the sonic log needs at least two valid samples at distinct depths")
    if z[0] < datum_depth:
        raise ValueError(f"the log starts at {z[0]:.2f} m, above the datum at {datum_depth:.2f} m")

    # two-way time at each sample below the first, intervals of mean slowness
    T = np.r_[0.0, np.cumsum(2.0 * np.diff(z) * 0.5 * (slow[1:] + slow[:-1]))]
    if block_depth is not None:
        if not (np.isfinite(block_depth) and block_depth > 0):
            raise ValueError("block_depth must be a positive thickness in m")
        nblock = max(1, int(np.floor((z[-1] - z[0]) / block_depth + 1e-9)))
        zb = np.linspace(z[0], z[-1], nblock + 1)
        Tb = np.interp(zb, z, T)  # exact: T is linear in z inside each constant-slowness interval
    else:
        nblock = max(1, int(np.floor(T[-1] / min_two_way + 1e-9)))
        Tb = np.linspace(0.0, T[-1], nblock + 1)
        zb = np.interp(Tb, T, z)  # exact: T is linear in z inside each constant-slowness interval
    zb[0], zb[-1] = z[0], z[-1]
    thick = np.diff(zb)
    vel = 2.0 * thick / np.diff(Tb)

    if z[0] > datum_depth:
        thick = np.r_[z[0] - datum_depth, thick]
        vel = np.r_[float(overburden_velocity), vel]
    below = vel[-1] if half_space_velocity is None else float(half_space_velocity)
    return thick, np.r_[vel, below]
