"""Exact traveltimes and amplitudes for a stack of flat, isotropic, constant-velocity layers.

A model is ``thickness`` (n,) in metres of n layers and ``velocity`` (n+1,) in m/s: the n layers
plus the half-space below the last reflector. Reflector k is the base of layer k (0-based), so it
separates ``velocity[k]`` from ``velocity[k+1]``. Everything here is float64 numpy; nothing
knows about files.

The ray equations come from Snell's law: a ray with horizontal slowness (ray parameter) ``p``
travels at angle ``theta_i`` from the vertical in layer i with ``sin(theta_i) = p * v_i``. The
two-way reflection from reflector k has

    x(p) = 2 * sum_{i<=k} h_i * tan(theta_i),     t(p) = 2 * sum_{i<=k} h_i / (v_i * cos(theta_i)).

A multiple reflection in flat layers keeps one ray parameter at every bounce, so the same equations
hold with the factor 2 replaced by ``n_i``, the number of times the event crosses layer i: 4 in
every layer for the first-order free-surface multiple, ``2 (m + 1)`` in the water layer alone for
a water-layer reverberation of order m, 2 + 2 j in the water and 2 below it for a peg-leg with j
extra round trips in the water (:func:`event_times`, :func:`path_crossings`).

They are solved for ``p`` at a given offset in the variable ``u = tan(theta_max)``, the tangent of
the angle in the fastest layer the event crosses. In ``u`` the offset is a smooth, increasing,
concave function that grows linearly without bound, so a safeguarded Newton iteration converges
at every offset, from zero to many times the depth.

References
----------
Snell's law of refraction, as used for layered media in any seismology text, e.g.
Sheriff, R. E. & Geldart, L. P., 1995, Exploration Seismology, 2nd ed., Cambridge (also for
free-surface multiples, water-layer reverberations and peg-leg multiples).

Dix, C. H., 1955, Seismic velocities from surface measurements, Geophysics 20, 68-86.

Taner, M. T. & Koehler, F., 1969, Velocity spectra: digital computer derivation and
applications of velocity functions, Geophysics 34, 859-881.

Gardner, G. H. F., Gardner, L. W. & Gregory, A. R., 1974, Formation velocity and density: the
diagnostic basics for stratigraphic traps, Geophysics 39, 770-780.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

__all__ = [
    "check_model",
    "zero_offset_times",
    "rms_velocity",
    "reflection_times",
    "trace_rays",
    "event_times",
    "path_crossings",
    "multiple_times",
    "best_fit_stacking_velocity",
    "stacking_velocity",
    "incidence_sine",
    "critical_fade",
    "gardner_density",
    "reflection_coefficients",
    "FADE_START",
    "FADE_STOP",
]

FADE_START = 0.85
"""Sine of the incidence angle (relative to the critical sine of 1) where the fade begins."""
FADE_STOP = 0.97
"""Sine where the reflection amplitude has faded to zero, kept short of 1 so no event is cut."""

_X_TOL = 1e-7  # m; dt = p dx < dx / v, so this keeps times within ~1e-10 s
_MAX_ITER = 200


def check_model(thickness, velocity):
    """Validate a layered model and return it as float64 arrays.

    Parameters
    ----------
    thickness : array_like, shape (n,)
        Layer thicknesses, m, all > 0.
    velocity : array_like, shape (n+1,)
        P velocities of the n layers and of the half-space below, m/s, all > 0.

    Returns
    -------
    thickness, velocity : ndarray of float64

    Raises
    ------
    ValueError
        If shapes disagree or any value is not finite and positive.
    """
    h = np.asarray(thickness, dtype=np.float64)
    v = np.asarray(velocity, dtype=np.float64)
    if h.ndim != 1 or h.size == 0:
        raise ValueError("thickness must be a non-empty 1-D array of layer thicknesses in metres")
    if v.shape != (h.size + 1,):
        raise ValueError(
            f"velocity must hold {h.size + 1} values (the {h.size} layers and the half-space), "
            f"got shape {v.shape}"
        )
    if not (np.all(np.isfinite(h)) and np.all(h > 0)):
        raise ValueError("every layer thickness must be finite and > 0 m")
    if not (np.all(np.isfinite(v)) and np.all(v > 0)):
        raise ValueError("every velocity must be finite and > 0 m/s")
    return h, v


def zero_offset_times(thickness, velocity):
    """Two-way vertical traveltime to the base of each layer.

    Parameters
    ----------
    thickness : array_like, shape (n,)
        Layer thicknesses, m.
    velocity : array_like, shape (n+1,)
        Layer and half-space velocities, m/s.

    Returns
    -------
    t0 : ndarray, shape (n,)
        Two-way time at normal incidence, s.
    """
    h, v = check_model(thickness, velocity)
    return np.cumsum(2.0 * h / v[:-1])


def rms_velocity(thickness, velocity):
    """RMS velocity at each reflector.

    ``vrms_k^2 = sum_{i<=k} v_i^2 dt_i / sum_{i<=k} dt_i`` with ``dt_i = 2 h_i / v_i`` the two-way
    time in layer i.

    Parameters
    ----------
    thickness : array_like, shape (n,)
        Layer thicknesses, m.
    velocity : array_like, shape (n+1,)
        Layer and half-space velocities, m/s.

    Returns
    -------
    vrms : ndarray, shape (n,)
        RMS velocity down to the base of each layer, m/s.

    References
    ----------
    Dix, C. H., 1955, Seismic velocities from surface measurements, Geophysics 20, 68-86.
    Taner, M. T. & Koehler, F., 1969, Geophysics 34, 859-881.
    """
    h, v = check_model(thickness, velocity)
    dt = 2.0 * h / v[:-1]
    return np.sqrt(np.cumsum(v[:-1] ** 2 * dt) / np.cumsum(dt))


def _crossing_table(legs, m, n):
    """Crossing counts of a ``legs`` argument as float64 (m or 1, E, n), and whether it was an int.

    An integer means every layer down to each reflector, crossed ``legs`` times (E = n events).
    """
    if np.ndim(legs) == 0:
        if int(legs) != legs or legs <= 0:
            raise ValueError("legs must be a positive integer or an array of crossing counts")
        return float(legs) * np.tri(n)[None], True
    N = np.asarray(legs)
    if N.ndim == 2:
        N = N[None]
    if N.ndim != 3 or N.shape[2] != n or N.shape[0] not in (1, m):
        raise ValueError(
            f"crossing counts must have shape (events, {n}) or ({m}, events, {n}), got {N.shape}"
        )
    N = N.astype(np.float64)
    if not (np.all(np.isfinite(N)) and np.all(N >= 0) and np.all(N == np.round(N))):
        raise ValueError("crossing counts must be whole numbers >= 0")
    if N.shape[1] and not np.all(N.max(axis=2) > 0):
        raise ValueError("every event must cross at least one layer")
    return N, False


def _layer_tables(h, v, N):
    """Per-event weights of a batch of models for the ray equations.

    h, v: (m, n) thicknesses and layer velocities; N: (m or 1, E, n) crossings of layer i by event
    e. Returns Hl (m, E, i) = N h, the summed path thickness in layer i (0 where not crossed),
    V its velocity (1 where not crossed), r = v_i / vmax_e (0 where not crossed), a = 1 - r^2,
    vmax (m, E), the fastest layer crossed, and hmax (m, E), the summed N h of those fastest layers.
    """
    on = np.broadcast_to(N > 0, (h.shape[0],) + N.shape[1:])
    vb = np.broadcast_to(v[:, None, :], on.shape)
    vmax = np.where(on, vb, 0.0).max(axis=2)  # fastest layer each event crosses
    Hl = N * h[:, None, :]
    V = np.where(on, vb, 1.0)
    r = np.where(on, vb / vmax[:, :, None], 0.0)
    fastest = on & (r >= 1.0)
    hmax = np.where(fastest, Hl, 0.0).sum(axis=2)
    return Hl, V, r, 1.0 - r * r, vmax, hmax


def trace_rays(thickness, velocity, offsets, legs=2):
    """Solve the flat-layer ray equations for a batch of models at once.

    The vectorised core of :func:`reflection_times`, :func:`multiple_times` and
    :func:`event_times`, for callers with a different model per trace (e.g. one shot over a
    laterally varying line). An event that crosses layer i ``n_i`` times with one ray parameter
    ``p`` (flat layers: Snell's law keeps ``p`` at every bounce) has

        x(p) = sum_i n_i h_i v_i p / sqrt(1 - p^2 v_i^2),
        t(p) = sum_i n_i h_i / (v_i sqrt(1 - p^2 v_i^2)),

    solved here for ``p`` at each offset to 1e-7 m (times within about 1e-10 s).

    Parameters
    ----------
    thickness : ndarray, shape (m, n)
        Thicknesses of the n layers of each of m models, m, all > 0 (not checked here).
    velocity : ndarray, shape (m, n)
        Velocities of those layers, m/s (the half-space is not needed).
    offsets : ndarray, shape (m, nx)
        Offsets per model, m; the sign is ignored.
    legs : int or array_like of int, shape (E, n) or (m, E, n)
        An integer: times every layer down to each reflector is crossed, 2 for the primaries and
        4 for the first-order free-surface multiples of the n reflectors (E = n events). An array:
        ``legs[..., e, i]`` is the number of times event e crosses layer i, whole numbers >= 0
        with at least one crossing per event, the same for every model (E, n) or per model
        (m, E, n). Whether the counts make a surface-to-surface path is not checked here (see
        :func:`event_times`).

    Returns
    -------
    times : ndarray, shape (m, E, nx)
        Traveltime of each event, s (E = n for an integer ``legs``).
    ray_parameter : ndarray, shape (m, E, nx)
        s/m.

    Raises
    ------
    ValueError
        If ``legs`` is neither a positive integer nor a table of crossing counts of that shape.

    References
    ----------
    Snell's law; Sheriff & Geldart, 1995, Exploration Seismology, Cambridge (ray paths of
    primaries and multiples in flat layers).
    """
    h = np.asarray(thickness, dtype=np.float64)
    v = np.asarray(velocity, dtype=np.float64)
    x = np.asarray(offsets, dtype=np.float64)
    N, _ = _crossing_table(legs, h.shape[0], h.shape[1])
    Hs, V, r, _, vmax, hmax = _layer_tables(h, v, N)
    X = np.ascontiguousarray(np.broadcast_to(np.abs(x)[:, None, :], (h.shape[0], N.shape[1], x.shape[1])))
    t, p, ok = _solve_rays(np.ascontiguousarray(Hs), np.ascontiguousarray(V), np.ascontiguousarray(r),
                           vmax, hmax, X, _X_TOL, _MAX_ITER)
    if not ok.all():
        raise RuntimeError("ray tracing did not converge; please report the model and offsets")
    return t, p


@njit(cache=True, nogil=True, parallel=True)
def _solve_rays(Hs, V, r, vmax, hmax, X, x_tol, max_iter):
    """Newton's method with bracketing on u = tan(theta) in the fastest layer, per (model, event,
    offset): x(u) = sum_i H_i r_i u / sqrt(1 + a_i u^2), a_i = 1 - r_i^2, is concave in u and
    x(u) >= hmax u, so [0, X / hmax] brackets the root; bisection wherever a Newton step would
    leave the bracket. Only the layers an event crosses are visited."""
    m, ne, nl = Hs.shape
    nx = X.shape[2]
    t = np.zeros((m, ne, nx))
    p = np.zeros((m, ne, nx))
    ok = np.ones((m, ne), dtype=np.bool_)
    for k in prange(m * ne):
        b, e = k // ne, k % ne
        idx = np.flatnonzero(Hs[b, e] > 0)
        H, vv, rr = Hs[b, e][idx], V[b, e][idx], r[b, e][idx]
        aa = 1.0 - rr * rr
        t0 = 0.0
        hv = 0.0
        for i in range(idx.size):
            t0 += H[i] / vv[i]
            hv += H[i] * vv[i]
        v2 = hv / t0
        for j in range(nx):
            xj = X[b, e, j]
            u = 0.0
            if xj > 0:
                lo = 0.0
                hi = xj / hmax[b, e]
                # start from the ray parameter of the RMS-velocity hyperbola; any start converges
                s0 = min(xj / (np.sqrt(t0 * t0 + xj * xj / v2) * v2) * vmax[b, e], 0.99)
                u = min(s0 / np.sqrt(1.0 - s0 * s0), hi)
                done = False
                for _ in range(max_iter):
                    g = 0.0
                    dg = 0.0
                    for i in range(idx.size):
                        q = 1.0 + aa[i] * u * u
                        sq = np.sqrt(q)
                        g += H[i] * rr[i] * u / sq
                        dg += H[i] * rr[i] / (q * sq)
                    res = g - xj
                    if abs(res) <= max(x_tol, 1e-14 * xj):
                        done = True
                        break
                    if res < 0:
                        lo = u
                    elif res > 0:
                        hi = u
                    step = u - res / dg
                    # Newton from the left never overshoots a concave curve; bisect if rounding says it did
                    u = step if lo < step < hi else 0.5 * (lo + hi)
                if not done:
                    ok[b, e] = False
            tt = 0.0
            for i in range(idx.size):
                # cos(theta_i) without cancellation
                cos_ratio = np.sqrt((1.0 + aa[i] * u * u) / (1.0 + u * u))
                tt += H[i] / (vv[i] * cos_ratio)
            t[b, e, j] = tt
            p[b, e, j] = u / np.sqrt(1.0 + u * u) / vmax[b, e]
    return t, p, ok


def _single(thickness, velocity, offsets, legs):
    h, v = check_model(thickness, velocity)
    x = np.atleast_1d(np.asarray(offsets, dtype=np.float64))
    if x.ndim != 1:
        raise ValueError("offsets must be a 1-D array in metres")
    if not np.all(np.isfinite(x)):
        raise ValueError("offsets must be finite")
    t, p = trace_rays(h[None], v[None, :-1], x[None], legs)
    return t[0], p[0]


def reflection_times(thickness, velocity, offsets):
    """Exact two-way P reflection times of every reflector by Snell's law.

    For reflector k the ray parameter ``p`` in ``[0, 1/max(v[:k+1]))`` is found such that
    ``x(p) = 2 sum_{i<=k} h_i v_i p / sqrt(1 - p^2 v_i^2) = |offset|``; then
    ``t = 2 sum_{i<=k} h_i / (v_i sqrt(1 - p^2 v_i^2))``. Converged to 1e-7 m in offset, which
    keeps the times within about 1e-10 s.

    Parameters
    ----------
    thickness : array_like, shape (n,)
        Layer thicknesses, m.
    velocity : array_like, shape (n+1,)
        Layer and half-space velocities, m/s (the half-space velocity does not affect times).
    offsets : array_like, shape (nx,)
        Source-receiver offsets, m; the sign is ignored.

    Returns
    -------
    times : ndarray, shape (n, nx)
        Two-way traveltime, s.
    ray_parameter : ndarray, shape (n, nx)
        Horizontal slowness of each ray, s/m.

    References
    ----------
    Snell's law; Sheriff & Geldart, 1995, Exploration Seismology, Cambridge.
    """
    return _single(thickness, velocity, offsets, 2)


def multiple_times(thickness, velocity, offsets):
    """Exact times of the first-order free-surface multiple of every reflector.

    The multiple of reflector k bounces once at the free surface and travels the primary's path
    twice: ``x = 4 sum h_i tan(theta_i)`` and ``t = 4 sum h_i / (v_i cos(theta_i))`` with one ray
    parameter throughout (the layers are flat, so Snell's law keeps ``p`` at every bounce).
    For reverberations, peg-legs and any other count of layer crossings see :func:`event_times`.

    Parameters
    ----------
    thickness : array_like, shape (n,)
        Layer thicknesses, m.
    velocity : array_like, shape (n+1,)
        Layer and half-space velocities, m/s.
    offsets : array_like, shape (nx,)
        Offsets, m; the sign is ignored.

    Returns
    -------
    times : ndarray, shape (n, nx)
        Two-way traveltime of the multiple, s.
    ray_parameter : ndarray, shape (n, nx)
        Ray parameter, s/m.

    References
    ----------
    Snell's law; Sheriff & Geldart, 1995, Exploration Seismology, Cambridge (multiple reflections).
    """
    return _single(thickness, velocity, offsets, 4)


def path_crossings(nlayers, reflector, repeats=1, water_round_trips=0):
    """Crossing counts of a primary, a free-surface multiple or a peg-leg in flat layers.

    The event goes down to ``reflector`` and back ``repeats`` times (each time reflected at the
    free surface in between) and makes ``water_round_trips`` further round trips in layer 0 alone
    (sea surface to sea floor and back). So layer i crosses ``2 * repeats`` times for
    ``i <= reflector``, plus ``2 * water_round_trips`` in layer 0.

    ======================================  =========  =======  =================
    event                                   reflector  repeats  water_round_trips
    ======================================  =========  =======  =================
    primary of reflector k                  k          1        0
    first-order multiple of reflector k     k          2        0
    sea-floor reverberation of order m      0          m + 1    0
    peg-leg of reflector k, j water trips   k          1        j
    ======================================  =========  =======  =================

    Parameters
    ----------
    nlayers : int
        Number of layers n of the model (reflectors 0..n-1).
    reflector : int
        Deepest reflector the event reaches, 0-based.
    repeats : int
        Round trips down to ``reflector``, >= 1.
    water_round_trips : int
        Extra round trips in layer 0, >= 0.

    Returns
    -------
    crossings : ndarray of int64, shape (n,)
        Times the event crosses each layer, for :func:`event_times`.

    References
    ----------
    Sheriff, R. E. & Geldart, L. P., 1995, Exploration Seismology, 2nd ed., Cambridge (multiple
    reflections: free-surface multiples, water reverberations, peg-legs).
    """
    n, k = int(nlayers), int(reflector)
    if n < 1 or not 0 <= k < n:
        raise ValueError(f"reflector must be in 0..{n - 1} for {n} layers, got {reflector}")
    if int(repeats) != repeats or repeats < 1:
        raise ValueError("repeats must be a whole number >= 1")
    if int(water_round_trips) != water_round_trips or water_round_trips < 0:
        raise ValueError("water_round_trips must be a whole number >= 0")
    c = np.zeros(n, dtype=np.int64)
    c[: k + 1] = 2 * int(repeats)
    c[0] += 2 * int(water_round_trips)
    return c


def event_times(thickness, velocity, offsets, crossings):
    """Exact times of events that cross each flat layer a given number of times.

    An event recorded at the surface with ray parameter ``p`` that crosses layer i ``n_i`` times
    (flat layers: Snell's law keeps ``p`` at every reflection, so every crossing of layer i is at
    the same angle ``asin(p v_i)``) arrives at offset
    ``x(p) = sum_i n_i h_i v_i p / sqrt(1 - p^2 v_i^2)`` at time
    ``t = sum_i n_i h_i / (v_i sqrt(1 - p^2 v_i^2))``; at zero offset ``t0 = sum_i n_i h_i / v_i``.
    ``p`` is solved for at each offset to 1e-7 m, keeping the times within about 1e-10 s. The
    counts fix the time but not the order of the bounces, so all paths that share them (e.g. the
    j + 1 peg-legs with j water round trips before or after the deep reflection) share one time.

    Parameters
    ----------
    thickness : array_like, shape (n,)
        Layer thicknesses, m.
    velocity : array_like, shape (n+1,)
        Layer and half-space velocities, m/s (the half-space velocity does not affect times).
    offsets : array_like, shape (nx,)
        Source-receiver offsets, m; the sign is ignored.
    crossings : array_like of int, shape (E, n) or (n,)
        Times each event crosses each layer: even whole numbers, > 0 from layer 0 down to the
        deepest layer the event reaches and 0 below it (a path that starts and ends at the
        surface); see :func:`path_crossings`. 2 in layers 0..k is the primary of reflector k.

    Returns
    -------
    times : ndarray, shape (E, nx)
        Traveltime, s (shape (nx,) for a 1-D ``crossings``).
    ray_parameter : ndarray, shape (E, nx)
        Horizontal slowness, s/m.

    Raises
    ------
    ValueError
        If the model, offsets or crossing counts are invalid.

    References
    ----------
    Snell's law; Sheriff, R. E. & Geldart, L. P., 1995, Exploration Seismology, 2nd ed.,
    Cambridge (ray paths of multiple reflections in flat layers).
    """
    h, v = check_model(thickness, velocity)
    c = np.asarray(crossings)
    one = c.ndim == 1
    c = np.atleast_2d(c)
    if c.ndim != 2 or c.shape[1] != h.size:
        raise ValueError(f"crossings must have shape (events, {h.size}), got {np.shape(crossings)}")
    if not (np.all(np.isfinite(c)) and np.all(c == np.round(c)) and np.all(c >= 0)):
        raise ValueError("crossings must be whole numbers >= 0")
    if np.any(c % 2):
        raise ValueError("every layer must be crossed an even number of times (surface to surface)")
    on = c > 0
    if not np.all(on[:, 0]) or np.any(~on[:, :-1] & on[:, 1:]):
        raise ValueError("each event must cross layer 0 and every layer down to its deepest one")
    x = np.atleast_1d(np.asarray(offsets, dtype=np.float64))
    if x.ndim != 1 or not np.all(np.isfinite(x)):
        raise ValueError("offsets must be a finite 1-D array in metres")
    t, p = trace_rays(h[None], v[None, :-1], x[None], c.astype(np.int64))
    return (t[0, 0], p[0, 0]) if one else (t[0], p[0])


def best_fit_stacking_velocity(t0, offsets, times, mask=None, free_intercept=True):
    """Velocity of the hyperbola that best fits the given traveltimes.

    Least squares of ``t^2 = a + b x^2`` over the offsets used, ``v = 1 / sqrt(b)``. With
    ``free_intercept=False`` the intercept is held at ``a = t0^2``.

    Parameters
    ----------
    t0 : array_like, shape (n,)
        Zero-offset times, s (used only when ``free_intercept`` is False).
    offsets : array_like, shape (nx,) or (n, nx)
        Offsets, m. NaN offsets are ignored.
    times : array_like, shape (n, nx)
        Traveltimes, s. NaN times are ignored.
    mask : array_like of bool, shape (nx,) or (n, nx), optional
        True where an offset takes part in the fit. Default: all.
    free_intercept : bool
        Fit the intercept too (default) or hold it at ``t0^2``.

    Returns
    -------
    velocity : ndarray, shape (n,)
        Best-fit stacking velocity, m/s; NaN where fewer than two distinct offsets (one with a
        fixed intercept) are used or the fitted curvature is not positive.

    References
    ----------
    Taner, M. T. & Koehler, F., 1969, Velocity spectra: digital computer derivation and
    applications of velocity functions, Geophysics 34, 859-881.
    """
    t = np.atleast_2d(np.asarray(times, dtype=np.float64))
    n, nx = t.shape
    x = np.broadcast_to(np.asarray(offsets, dtype=np.float64), (n, nx))
    use = np.isfinite(x) & np.isfinite(t)
    if mask is not None:
        use &= np.broadcast_to(np.asarray(mask, dtype=bool), (n, nx))
    X = np.where(use, x * x, 0.0)
    Y = np.where(use, t * t, 0.0)
    w = use.astype(np.float64)
    cnt = w.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        if free_intercept:
            mx = X.sum(axis=1) / cnt
            my = Y.sum(axis=1) / cnt
            dx = np.where(use, X - mx[:, None], 0.0)
            sxx = (dx * dx).sum(axis=1)
            sxy = (dx * np.where(use, Y - my[:, None], 0.0)).sum(axis=1)
            b = sxy / sxx
            ok = (cnt >= 2) & (sxx > 1e-12 * np.maximum(mx * mx, 1.0))
        else:
            t0 = np.broadcast_to(np.asarray(t0, dtype=np.float64), (n,))
            sxx = (X * X).sum(axis=1)
            b = (X * np.where(use, Y - (t0 * t0)[:, None], 0.0)).sum(axis=1) / sxx
            ok = (cnt >= 1) & (sxx > 0)
        ok &= b > 0
        return np.where(ok, 1.0 / np.sqrt(np.where(ok, b, 1.0)), np.nan)


def stacking_velocity(thickness, velocity, offsets, stretch_limit=0.3):
    """Best-fit stacking velocity of the exact times over the offsets left by a stretch mute.

    For each reflector the offsets with NMO stretch ``(t(x) - t0) / t0 <= stretch_limit`` are kept
    (t from exact ray tracing) and the hyperbola ``t^2 = a + b x^2`` is fitted to them by least
    squares. This is the velocity a perfect hyperbolic velocity scan would find; it is the truth a
    velocity picker is judged against.

    Parameters
    ----------
    thickness : array_like, shape (n,)
        Layer thicknesses, m.
    velocity : array_like, shape (n+1,)
        Layer and half-space velocities, m/s.
    offsets : array_like, shape (nx,)
        Offsets of the gather, m (sign ignored, NaN ignored).
    stretch_limit : float or None
        Largest fractional NMO stretch kept, e.g. 0.3; None or inf keeps every offset.

    Returns
    -------
    vstack : ndarray, shape (n,)
        Best-fit stacking velocity, m/s; NaN where fewer than two offsets survive.
    max_offset : ndarray, shape (n,)
        Largest offset used for each reflector, m; NaN where none survives.

    References
    ----------
    Taner, M. T. & Koehler, F., 1969, Geophysics 34, 859-881 (stacking velocity).
    Yilmaz, O., 2001, Seismic Data Analysis, SEG (NMO stretch, stretch mute).
    """
    x = np.abs(np.asarray(offsets, dtype=np.float64))
    finite = np.isfinite(x)
    t, _ = reflection_times(thickness, velocity, np.where(finite, x, 0.0))
    t0 = zero_offset_times(thickness, velocity)
    keep = np.broadcast_to(finite, t.shape)
    if stretch_limit is not None and np.isfinite(stretch_limit):
        keep = keep & ((t - t0[:, None]) / t0[:, None] <= stretch_limit)
    v = best_fit_stacking_velocity(t0, x, t, mask=keep)
    xm = np.where(keep, np.broadcast_to(x, t.shape), -np.inf).max(axis=1)
    return v, np.where(np.isfinite(xm), xm, np.nan)


def incidence_sine(ray_parameter, velocity):
    """Largest sine of incidence that each reflected ray meets on its way.

    For reflector k this is ``p * max(v[0], ..., v[k+1])``: with the velocity below the reflector
    it is the sine of the transmitted angle (1 at the critical angle, above 1 post-critical);
    with a faster layer higher up it measures how close the ray comes to the critical angle of
    that interface (a ray grazing in a fast layer means a shallower interface is near critical).

    Parameters
    ----------
    ray_parameter : array_like, shape (n, nx)
        Ray parameters, s/m, as returned by :func:`reflection_times`.
    velocity : array_like, shape (n+1,)
        Layer and half-space velocities, m/s.

    Returns
    -------
    sine : ndarray, shape (n, nx)
        Dimensionless; 1 marks the critical point.

    References
    ----------
    Snell's law; the critical angle ``asin(v1 / v2)``, e.g. Sheriff & Geldart, 1995.
    """
    p = np.asarray(ray_parameter, dtype=np.float64)
    v = np.asarray(velocity, dtype=np.float64)
    vmax = np.maximum.accumulate(v)[1:]  # max(v[0..k+1]) for reflector k
    return p * vmax.reshape((-1,) + (1,) * (p.ndim - 1))


def critical_fade(sine, start=FADE_START, stop=FADE_STOP):
    """Amplitude weight that fades a reflection smoothly to zero before the critical angle.

    A cosine (Hann) taper in the incidence sine: 1 for ``sine <= start``, 0 for ``sine >= stop``
    and ``0.5 * (1 + cos(pi * (sine - start) / (stop - start)))`` between. The fade is chosen to
    end short of the critical point (sine 1) because near it the true reflection coefficient
    rises sharply and head waves appear, neither of which this generator models; fading
    removes the events instead of drawing wrong ones.

    Parameters
    ----------
    sine : array_like
        Incidence sine from :func:`incidence_sine`, dimensionless.
    start, stop : float
        Sines where the fade begins and where it reaches zero, ``0 < start < stop``.

    Returns
    -------
    weight : ndarray
        Amplitude factor in [0, 1], same shape as ``sine``.
    """
    if not 0.0 < start < stop:
        raise ValueError("critical_fade needs 0 < start < stop")
    s = np.asarray(sine, dtype=np.float64)
    frac = np.clip((s - start) / (stop - start), 0.0, 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * frac))


def gardner_density(velocity):
    """Bulk density from P velocity by Gardner's relation.

    ``rho = 310 * v^0.25`` with v in m/s and rho in kg/m^3 (0.31 v^0.25 g/cm^3).

    Parameters
    ----------
    velocity : array_like
        P velocity, m/s.

    Returns
    -------
    density : ndarray
        kg/m^3.

    References
    ----------
    Gardner, G. H. F., Gardner, L. W. & Gregory, A. R., 1974, Formation velocity and density:
    the diagnostic basics for stratigraphic traps, Geophysics 39, 770-780.
    """
    return 310.0 * np.asarray(velocity, dtype=np.float64) ** 0.25


def reflection_coefficients(velocity, density=None):
    """Normal-incidence P reflection coefficient of each reflector.

    ``R_k = (Z_{k+1} - Z_k) / (Z_{k+1} + Z_k)`` with impedance ``Z = rho v``.

    Parameters
    ----------
    velocity : array_like, shape (n+1,)
        Layer and half-space velocities, m/s.
    density : array_like, shape (n+1,), optional
        Densities, kg/m^3. Default: Gardner's relation (:func:`gardner_density`).

    Returns
    -------
    R : ndarray, shape (n,)
        Dimensionless, positive where impedance increases downward.

    References
    ----------
    Sheriff & Geldart, 1995, Exploration Seismology (Zoeppritz at normal incidence).
    """
    v = np.asarray(velocity, dtype=np.float64)
    rho = gardner_density(v) if density is None else np.asarray(density, dtype=np.float64)
    if rho.shape != v.shape:
        raise ValueError("density must have the same shape as velocity")
    z = rho * v
    return (z[1:] - z[:-1]) / (z[1:] + z[:-1])
