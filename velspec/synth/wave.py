"""Shot records of a flat layered earth by the 2D acoustic wave equation (finite differences).

The variable-density acoustic equations in first-order form, pressure ``p`` and particle
velocity ``(vx, vz)``,

    rho dvx/dt = -dp/dx,     rho dvz/dt = -dp/dz,     dp/dt = -K (dvx/dx + dvz/dz) + K q delta,

with bulk modulus ``K = rho v^2``, are solved on a staggered grid (Virieux, 1986): p at the
nodes ``(i h, j h)``, vx half a cell to the right, vz half a cell below, vx and vz half a time
step before p. Time derivatives are second-order central differences (leapfrog), space
derivatives staggered differences of order 4, ``(9/8 (f[+1/2] - f[-1/2]) - 1/24 (f[+3/2] -
f[-3/2])) / h`` (Levander, 1988), or, by default, order 8 with the Taylor weights of
:data:`velspec.params.STAGGERED_COEFFICIENTS` (Fornberg, 1988), which at the same grid has about
a tenth of the dispersion. The grid follows Alford, Kelly & Boore (1974): enough points per
shortest wavelength (``WaveParams.points_per_wavelength`` at ``max_frequency_ratio`` times the
peak frequency) and a time step inside the stability limit (``v_max dt / h <= 0.606`` for order
4, 0.550 for order 8) and short enough for the leapfrog's own phase error
(``WaveParams.time_phase_error``).

Everything in the wavefield is there because the equation puts it there: the direct wave, the
sea-floor and deeper reflections, head waves, guided waves in the water layer, source and
receiver ghosts, every free-surface and interbed multiple, and thin-bed interference.

- Layers to grid: each node takes the exact volume average across its cell of the piecewise
  constant layered model (harmonic for K, arithmetic for the density behind vz, arithmetic of
  the buoyancy 1/rho behind vx), so an interface between nodes sits where it should for the
  long wavelengths (Moczo et al., 2002).
- Free surface at z = 0 (p = 0 on the top row of nodes) by the image method: above the surface p
  is the mirror image of p below with its sign flipped and vz the mirror image unchanged, which
  is the exact reflection (coefficient -1) of a pressure-release surface.
- Absorbing sides and bottom: a perfectly matched layer (PML) of ``boundary_cells`` cells, the
  pressure split into the parts ``px``, ``pz`` driven by dvx/dx and dvz/dz, each damped by
  ``d(s) = d0 (s / L)^2`` with ``d0 = 3 v_max ln(1 / R) / (2 L)`` (Collino & Tsogka, 2001).
- Source: a point (a line, in 2D) of volume injection at a chosen depth, spread over the 8 x 8
  nearest nodes by Kaiser-windowed sinc weights (Hicks, 2002), folded about the free surface
  with the sign flipped, so that off-node positions and the ghost delay are exact for the
  band of the wavelet (bilinear weights would cut the amplitude by several percent). Its time
  function is the half-integral of a Ricker wavelet, scaled so that the
  far-field direct wave in a uniform medium is exactly the Ricker wavelet divided by
  ``sqrt(r / 1 m)``: the 2D Green's function ``H(t - r/c) / (2 pi sqrt(t^2 - r^2/c^2))`` acts
  in the far field as the half-integral times ``sqrt(c / (8 pi r))`` (e.g. Morse & Feshbach,
  1953), and the two half-operators cancel. Arrivals therefore carry a zero-phase Ricker
  wavelet at their exact times, as the ray tracer's do.
- Receivers: pressure (hydrophones) at chosen offsets and depths, read with the same windowed
  sinc weights; recorded at every step and brought to the output sampling by a zero-phase anti-alias
  filter (scipy.signal.resample_poly).

Kernels are numba, float32 fields, parallel over grid rows; every value is computed by one
thread in a fixed order, so the bits do not depend on the thread count. Inner loops index
``row[k + const]`` with k from 0: a negative offset such as ``row[i - 1]`` makes numba check for
wraparound and stops the loop from vectorising (five times slower here).

References
----------
Alford, R. M., Kelly, K. R. & Boore, D. M., 1974, Accuracy of finite-difference modeling of the
acoustic wave equation, Geophysics 39, 834-842 (the method; points per wavelength).

Virieux, J., 1986, P-SV wave propagation in heterogeneous media: velocity-stress
finite-difference method, Geophysics 51, 889-901 (staggered grid).

Levander, A. R., 1988, Fourth-order finite-difference P-SV seismograms, Geophysics 53,
1425-1436 (fourth-order staggered differences, their stability limit, image free surface).

Collino, F. & Tsogka, C., 2001, Application of the perfectly matched absorbing layer model to
the linear elastodynamic problem in anisotropic heterogeneous media, Geophysics 66, 294-307.

Fornberg, B., 1988, Generation of finite difference formulas on arbitrarily spaced grids,
Math. Comp. 51, 699-706 (staggered weights of any order).

Hicks, G. J., 2002, Arbitrary source and receiver positioning in finite-difference schemes
using Kaiser windowed sinc functions, Geophysics 67, 156-166.

Moczo, P., Kristek, J., Vavrycuk, V., Archuleta, R. J. & Halada, L., 2002, 3D heterogeneous
staggered-grid finite-difference modeling of seismic motion with volume harmonic and
arithmetic averaging of elastic moduli and densities, Bull. Seism. Soc. Am. 92, 3042-3066.

Morse, P. M. & Feshbach, H., 1953, Methods of Theoretical Physics, McGraw-Hill (Green's
function of the 2D wave equation).

Ricker, N., 1953, The form and laws of propagation of seismic wavelets, Geophysics 18, 10-40.
"""

from __future__ import annotations

import math

import numba
import numpy as np
from numba import njit, prange
from scipy.signal import resample_poly

from velspec.errors import ParameterError
from velspec.params import COURANT_LIMITS, STAGGERED_COEFFICIENTS, WaveParams
from velspec.synth.layers import check_model, gardner_density

__all__ = ["choose_grid", "model_shot", "source_function"]

_PAD = 4  # ghost cells around the grid: half the width of the eighth-order stencil
_WAVELET_HALF = 1.5  # Ricker half-length in peak periods: beyond it |w| < 1e-8
_SINC_RADIUS = 4  # nodes each side of a source or receiver (Hicks, 2002)
_SINC_BETA = 6.31  # Kaiser window shape for that radius (Hicks, 2002, table 1; value from memory)


def choose_grid(velocity_min, velocity_max, peak_frequency, dt, params=None, grid_spacing=None,
                time_step=None):
    """Grid spacing and time step for a model's velocity range and a Ricker wavelet.

    The spacing is the largest that keeps ``params.points_per_wavelength`` points per shortest
    wavelength ``velocity_min / f_max`` with ``f_max = params.max_frequency_ratio *
    peak_frequency``; the time step is the largest that divides ``dt`` a whole number of times
    and keeps both ``velocity_max * time_step / h <= params.courant`` and the leapfrog phase
    error ``(2 pi f_max time_step)^2 / 24 <= params.time_phase_error``. A given spacing is
    checked against the points-per-wavelength rule, a given time step against the stability
    limit (the accuracy bound is then the caller's choice).

    Parameters
    ----------
    velocity_min, velocity_max : float
        Slowest and fastest velocity in the model, m/s.
    peak_frequency : float
        Ricker peak frequency, Hz.
    dt : float
        Output sample interval, s.
    params : WaveParams, optional
        Default ``WaveParams()``.
    grid_spacing : float, optional
        Grid spacing h, m; None chooses it.
    time_step : float, optional
        Time step, s, a whole fraction of ``dt``; None chooses it.

    Returns
    -------
    grid_spacing : float
        m.
    time_step : float
        s.

    Raises
    ------
    ParameterError
        If the given spacing is too coarse for the wavelet (dispersion) or the time step
        breaks the stability limit or does not divide ``dt``.

    References
    ----------
    Alford, Kelly & Boore, 1974, Geophysics 39, 834-842 (points per wavelength).
    Levander, 1988, Geophysics 53, 1425-1436 (stability of fourth-order staggered differences).
    """
    params = (params or WaveParams()).validate()
    vmin, vmax = float(velocity_min), float(velocity_max)
    if not (math.isfinite(vmin) and math.isfinite(vmax) and 0 < vmin <= vmax):
        raise ParameterError("velocities must be finite and > 0 m/s")
    if not (math.isfinite(peak_frequency) and peak_frequency > 0):
        raise ParameterError("peak_frequency must be > 0 Hz")
    if not (math.isfinite(dt) and dt > 0):
        raise ParameterError("dt must be > 0 s")
    fmax = params.max_frequency_ratio * peak_frequency
    h_max = vmin / (fmax * params.points_per_wavelength)
    if grid_spacing is None:
        h = h_max
    else:
        h = float(grid_spacing)
        if not (math.isfinite(h) and h > 0):
            raise ParameterError("grid_spacing must be > 0 m")
        if h > h_max * (1 + 1e-9):
            raise ParameterError(
                f"grid_spacing {h:g} m gives {vmin / (fmax * h):.2f} points per wavelength at "
                f"{fmax:g} Hz in {vmin:g} m/s, fewer than the {params.points_per_wavelength:g} "
                f"needed against grid dispersion (Alford, Kelly & Boore, 1974); use at most "
                f"{h_max:.3f} m, or grid_spacing=None to choose it"
            )
    # stable, and accurate in time: leapfrog phase error (2 pi f dt)^2 / 24 at f_max
    dt_max = min(params.courant * h / vmax,
                 math.sqrt(24.0 * params.time_phase_error) / (2.0 * math.pi * fmax))
    if time_step is None:
        step = dt / math.ceil(dt / dt_max * (1 - 1e-12))
    else:
        step = float(time_step)
        if not (math.isfinite(step) and step > 0):
            raise ParameterError("time_step must be > 0 s")
        courant = vmax * step / h
        limit = COURANT_LIMITS[params.order]
        if courant > limit:
            raise ParameterError(
                f"time_step {step:g} s is unstable: v_max dt / h = {courant:.3f} exceeds the "
                f"limit {limit:.3f} of order-{params.order} staggered differences; use at most "
                f"{limit * h / vmax:.3g} s, or time_step=None to choose it"
            )
        ratio = dt / step
        if abs(ratio - round(ratio)) > 1e-6:
            raise ParameterError(
                f"time_step {step:g} s must divide the output interval dt = {dt:g} s a whole "
                "number of times"
            )
    return h, step


def source_function(peak_frequency, time_step, nsteps, start, velocity, density):
    """Time function of the volume-injection source at the half steps of the grid.

    ``q(t) = sqrt(8 pi / c) / rho * I^(1/2)[w](t)``: the causal half-integral of the Ricker
    wavelet ``w`` (centred at t = 0), made in the frequency domain (multiplication by
    ``(2 pi i f)^(-1/2)``) on a grid padded to eight times its length so that the wrap-around
    of its slowly decaying tail is negligible. With the equations of this module the far-field
    direct wave in a uniform medium of velocity c and density rho is then ``w(t - r/c) /
    sqrt(r / 1 m)``.

    Parameters
    ----------
    peak_frequency : float
        Ricker peak frequency, Hz.
    time_step : float
        Time step of the grid, s.
    nsteps : int
        Number of steps.
    start : float
        Time of the first pressure level, s (negative: the wavelet is centred at t = 0).
    velocity, density : float
        Medium at the source, m/s and kg/m^3.

    Returns
    -------
    q : ndarray of float64, shape (nsteps,)
        Source strength at ``start + (n + 1/2) time_step``, (m^3/s per m^3) s^(1/2) / ...
        in the units that make the direct wave above.

    References
    ----------
    Morse & Feshbach, 1953, Methods of Theoretical Physics (2D Green's function).
    Ricker, 1953, Geophysics 18, 10-40.
    """
    n = int(nsteps)
    nfft = 1 << int(math.ceil(math.log2(max(8 * n, 16))))
    t = start + (np.arange(nfft) + 0.5) * time_step
    a = (np.pi * peak_frequency * t) ** 2
    w = (1.0 - 2.0 * a) * np.exp(-a)  # the wavelet beyond the record is ~0, so padding is exact
    f = np.fft.rfftfreq(nfft, time_step)
    W = np.fft.rfft(w)
    op = np.zeros_like(W)
    op[1:] = (2j * np.pi * f[1:]) ** -0.5  # causal half-integral; the Ricker has no DC
    q = np.fft.irfft(W * op, nfft)[:n]
    return q * math.sqrt(8.0 * math.pi / velocity) / density


def _cell_means(interfaces, values, lo, hi):
    """Mean of a piecewise-constant function of depth over each interval [lo, hi].

    ``values[k]`` holds from ``interfaces[k-1]`` to ``interfaces[k]``: values[0] above the first
    interface (also above z = 0), values[-1] below the last.
    """
    z = np.asarray(interfaces, dtype=np.float64)
    v = np.asarray(values, dtype=np.float64)
    z_start = np.concatenate(([0.0], z))  # top of each layer, the first taken from 0
    cum = np.concatenate(([0.0], np.cumsum(v[:-1] * np.diff(z_start))))  # int_0^top

    def integral(x):  # int_0^x f, linear beyond both ends
        k = np.searchsorted(z, x, side="right")
        return cum[k] + v[k] * (x - z_start[k])

    return (integral(hi) - integral(lo)) / (hi - lo)


def _pml_profile(n, width, inner_lo, inner_hi, h, d0, dt, offset):
    """Decay and scale factors (float32) of the PML at nodes ``i + offset`` of a 1D axis.

    Cells with index below ``inner_lo`` or above ``inner_hi`` lie in the layer; the damping
    grows as the square of the depth into it.
    """
    s = np.arange(n) + offset
    depth = np.maximum(np.maximum(inner_lo - s, s - inner_hi), 0.0) / width
    d = d0 * np.minimum(depth, 1.0) ** 2
    a = (1.0 - 0.5 * d * dt) / (1.0 + 0.5 * d * dt)
    b = 1.0 / (1.0 + 0.5 * d * dt)
    return a.astype(np.float32), b.astype(np.float32)


def _sinc_weights(f, n, radius=_SINC_RADIUS, beta=_SINC_BETA):
    """Kaiser-windowed sinc weights of points at fractional node positions ``f`` on n nodes.

    Returns node indices (m, 2 radius) and weights (m, 2 radius); a point on a node gets
    weight 1 there and 0 elsewhere.
    """
    f = np.asarray(f, dtype=np.float64)
    i0 = np.floor(f).astype(np.int64)
    idx = i0[:, None] + np.arange(1 - radius, radius + 1)[None, :]
    d = idx - f[:, None]
    win = np.i0(beta * np.sqrt(np.clip(1.0 - (d / radius) ** 2, 0.0, None))) / np.i0(beta)
    w = np.sinc(d) * np.where(np.abs(d) <= radius, win, 0.0)
    return idx, w


def _stencil(fj, fi, nz, nx, free_surface):
    """Node indices (padded rows and columns) and weights (m, k) that place points on the grid.

    The 2D weights are the product of windowed sincs in z and x (Hicks, 2002). With a free
    surface on row 0, weights on rows above it are folded onto their mirror rows with the sign
    flipped and the surface row's dropped: the antisymmetric image that the pressure obeys there.
    """
    jj, wj = _sinc_weights(fj, nz)
    ii, wi = _sinc_weights(fi, nx)
    if free_surface:
        wj = np.where(jj < 0, -wj, np.where(jj == 0, 0.0, wj))
        jj = np.abs(jj)
    if np.any((jj < 0) | (jj >= nz)) or np.any((ii < 0) | (ii >= nx)):
        raise ParameterError("a source or receiver lies outside the modelled grid")
    m = jj.shape[0]
    rows = np.broadcast_to(jj[:, :, None], (m, jj.shape[1], ii.shape[1])).reshape(m, -1)
    cols = np.broadcast_to(ii[:, None, :], (m, jj.shape[1], ii.shape[1])).reshape(m, -1)
    w = (wj[:, :, None] * wi[:, None, :]).reshape(m, -1)
    keep = np.abs(w).max(axis=0) > 0  # drop columns no point uses (points on nodes)
    return ((rows[:, keep] + _PAD).astype(np.int64), (cols[:, keep] + _PAD).astype(np.int64),
            w[:, keep].astype(np.float32))


@njit(cache=True, nogil=True)
def _images(p, vz, free, of_p):
    """Mirror rows above the free surface (row 4): p with its sign flipped, vz as it is."""
    if not free:
        return
    nxp = p.shape[1]
    for k in range(1, 5):
        if of_p:
            src, dst = p[4 + k], p[4 - k]
            for i in range(nxp):
                dst[i] = -src[i]
        else:
            src, dst = vz[3 + k], vz[4 - k]
            for i in range(nxp):
                dst[i] = src[i]


@njit(cache=True, nogil=True)
def _energy(p, vx, vz, kap, bxx, bzz, ax_v, bx_v, az_v, bz_v, c, erow):
    """Sum of p^2 / (2 K) + rho v^(n-1/2) v^(n+1/2) / 2, times h / dt, before the v update.

    The new velocities are computed here as the update will make them, without storing them.
    """
    nzp, nxp = p.shape
    c1, c2, c3, c4 = c[0], c[1], c[2], c[3]
    m = nxp - 8
    for j in range(4, nzp - 4):
        pr, vxr, vzr, kr, bxr, bzr = p[j], vx[j], vz[j], kap[j], bxx[j], bzz[j]
        pm3, pm2, pm1, p1, p2, p3, p4 = p[j - 3], p[j - 2], p[j - 1], p[j + 1], p[j + 2], p[j + 3], p[j + 4]
        a, b = az_v[j], bz_v[j]
        e = 0.0
        for k in range(m):
            i = k + 4
            dpx = (c1 * (pr[k + 5] - pr[k + 4]) + c2 * (pr[k + 6] - pr[k + 3])
                   + c3 * (pr[k + 7] - pr[k + 2]) + c4 * (pr[k + 8] - pr[k + 1]))
            dpz = (c1 * (p1[i] - pr[i]) + c2 * (p2[i] - pm1[i]) + c3 * (p3[i] - pm2[i])
                   + c4 * (p4[i] - pm3[i]))
            ux = ax_v[i] * vxr[i] - bx_v[i] * bxr[i] * dpx
            uz = a * vzr[i] - b * bzr[i] * dpz
            e += 0.5 * (vxr[i] * ux / bxr[i] + vzr[i] * uz / bzr[i] + pr[i] * pr[i] / kr[i])
        erow[j] = e


@njit(cache=True, nogil=True)
def _advance_rows(r0, r1, top, free, p, px, pz, vx, vz, P, PX, PZ, VX, VZ, kap, bxx, bzz,
                  ax_p, bx_p, ax_v, bx_v, az_p, bz_p, az_v, bz_v, c):
    """One time step of rows [r0, r1): levels n - 1/2, n (lower case) to n + 1/2, n + 1 (upper).

    vz is also made for the 4 rows on each side that the p update needs; a neighbouring block
    makes the same values from the same inputs, so the blocks need no sync within a step.
    """
    nzp, nxp = p.shape
    c1, c2, c3, c4 = c[0], c[1], c[2], c[3]
    m = nxp - 8  # inner indices written k + const with k >= 0, so numba needs no wraparound
    if free and r0 <= 4:
        for k in range(1, 5):  # image of p above the surface (row 4), sign flipped
            src, dst = p[4 + k], p[4 - k]
            for i in range(nxp):
                dst[i] = -src[i]
    for j in range(r0, r1):
        pr, vxr, bxr, out = p[j], vx[j], bxx[j], VX[j]
        for k in range(m):
            d = (c1 * (pr[k + 5] - pr[k + 4]) + c2 * (pr[k + 6] - pr[k + 3])
                 + c3 * (pr[k + 7] - pr[k + 2]) + c4 * (pr[k + 8] - pr[k + 1]))
            out[k + 4] = ax_v[k + 4] * vxr[k + 4] - bx_v[k + 4] * bxr[k + 4] * d
    for j in range(max(4, r0 - 4), min(nzp - 4, r1 + 4)):
        pm3, pm2, pm1, p0, p1, p2, p3, p4 = (p[j - 3], p[j - 2], p[j - 1], p[j], p[j + 1],
                                             p[j + 2], p[j + 3], p[j + 4])
        vzr, bzr, out = vz[j], bzz[j], VZ[j]
        a, b = az_v[j], bz_v[j]
        for k in range(m):
            i = k + 4
            d = (c1 * (p1[i] - p0[i]) + c2 * (p2[i] - pm1[i]) + c3 * (p3[i] - pm2[i])
                 + c4 * (p4[i] - pm3[i]))
            out[i] = a * vzr[i] - b * bzr[i] * d
    if free and r0 <= 4:
        for k in range(1, 5):  # image of vz above the surface, sign kept
            src, dst = VZ[3 + k], VZ[4 - k]
            for i in range(nxp):
                dst[i] = src[i]
    for j in range(max(top, r0), r1):
        vxr, pxr, kr, outx = VX[j], px[j], kap[j], PX[j]
        for k in range(m):
            d = (c1 * (vxr[k + 4] - vxr[k + 3]) + c2 * (vxr[k + 5] - vxr[k + 2])
                 + c3 * (vxr[k + 6] - vxr[k + 1]) + c4 * (vxr[k + 7] - vxr[k]))
            outx[k + 4] = ax_p[k + 4] * pxr[k + 4] - bx_p[k + 4] * kr[k + 4] * d
        vm4, vm3, vm2, vm1, v0, v1, v2, v3 = (VZ[j - 4], VZ[j - 3], VZ[j - 2], VZ[j - 1], VZ[j],
                                              VZ[j + 1], VZ[j + 2], VZ[j + 3])
        pzr, outz, outp = pz[j], PZ[j], P[j]
        a, b = az_p[j], bz_p[j]
        for k in range(m):
            i = k + 4
            d = (c1 * (v0[i] - vm1[i]) + c2 * (v1[i] - vm2[i]) + c3 * (v2[i] - vm3[i])
                 + c4 * (v3[i] - vm4[i]))
            u = a * pzr[i] - b * kr[i] * d
            outz[i] = u
            outp[i] = outx[i] + u


@njit(cache=True, nogil=True, parallel=True)
def _advance_blocks(edges, top, free, p, px, pz, vx, vz, P, PX, PZ, VX, VZ, kap, bxx, bzz,
                    ax_p, bx_p, ax_v, bx_v, az_p, bz_p, az_v, bz_v, c):
    """One time step, the blocks of rows between ``edges`` in parallel (one region per step)."""
    for b in prange(edges.size - 1):
        _advance_rows(edges[b], edges[b + 1], top, free, p, px, pz, vx, vz, P, PX, PZ, VX, VZ,
                      kap, bxx, bzz, ax_p, bx_p, ax_v, bx_v, az_p, bz_p, az_v, bz_v, c)


@njit(cache=True, nogil=True)
def _fields(nzp, nxp):
    """Double-buffered p, px, pz, vx, vz: index 0 or 1 is the level, even or odd step."""
    return (np.zeros((2, nzp, nxp), dtype=np.float32), np.zeros((2, nzp, nxp), dtype=np.float32),
            np.zeros((2, nzp, nxp), dtype=np.float32), np.zeros((2, nzp, nxp), dtype=np.float32),
            np.zeros((2, nzp, nxp), dtype=np.float32))


@njit(cache=True, nogil=True)
def _record(pc, rec_r, rec_c, rec_w, out):
    """Pressure at the receivers: windowed-sinc weights over nodes, summed in a fixed order."""
    for r in range(rec_r.shape[0]):
        acc = np.float32(0.0)
        for k in range(rec_r.shape[1]):
            acc += rec_w[r, k] * pc[rec_r[r, k], rec_c[r, k]]
        out[r] = acc


@njit(cache=True, nogil=True)
def _inject(P, PX, PZ, src_r, src_c, src_w, qn):
    """Add the source's pressure increment, half to each split part."""
    half = np.float32(0.5)
    for k in range(src_r.size):
        s = src_w[k] * qn
        PX[src_r[k], src_c[k]] += half * s
        PZ[src_r[k], src_c[k]] += half * s
        P[src_r[k], src_c[k]] += s


@njit(cache=True, nogil=True)
def _total_energy(pc, vxc, vzc, kap, bxx, bzz, ax_v, bx_v, az_v, bz_v, c, free, erow):
    _images(pc, vzc, free, True)
    _energy(pc, vxc, vzc, kap, bxx, bzz, ax_v, bx_v, az_v, bz_v, c, erow)
    tot = 0.0
    for j in range(erow.size):  # fixed order
        tot += erow[j]
    return tot


@njit(cache=True, nogil=True)
def _run_serial(kap, bxx, bzz, ax_p, bx_p, ax_v, bx_v, az_p, bz_p, az_v, bz_v, c, src_r, src_c,
                src_w, q, rec_r, rec_c, rec_w, free, want_energy, rec, energy):
    """Leapfrog ``q.size`` steps on one thread; record p before each step.

    Padded arrays (nz + 8, nx + 8), the surface on row 4 when ``free``; ``kap = dt K / h``,
    ``bxx``, ``bzz = dt / (rho h)`` at the vx, vz nodes; ``c`` the four stencil weights.
    """
    nzp, nxp = kap.shape
    p, px, pz, vx, vz = _fields(nzp, nxp)
    erow = np.zeros(nzp, dtype=np.float64)
    top = 5 if free else 4  # first row of p updated; row 4 is the free surface (p = 0)
    for n in range(q.size):
        cur, nxt = n % 2, 1 - n % 2
        _record(p[cur], rec_r, rec_c, rec_w, rec[n])
        if want_energy:
            energy[n] = _total_energy(p[cur], vx[cur], vz[cur], kap, bxx, bzz, ax_v, bx_v, az_v,
                                      bz_v, c, free, erow)
        _advance_rows(4, nzp - 4, top, free, p[cur], px[cur], pz[cur], vx[cur], vz[cur], p[nxt],
                      px[nxt], pz[nxt], vx[nxt], vz[nxt], kap, bxx, bzz, ax_p, bx_p, ax_v, bx_v,
                      az_p, bz_p, az_v, bz_v, c)
        _inject(p[nxt], px[nxt], pz[nxt], src_r, src_c, src_w, np.float32(q[n]))
    return rec, energy


@njit(cache=True, nogil=True)
def _run_parallel(kap, bxx, bzz, ax_p, bx_p, ax_v, bx_v, az_p, bz_p, az_v, bz_v, c, src_r,
                  src_c, src_w, q, rec_r, rec_c, rec_w, free, want_energy, nblock, rec, energy):
    """As :func:`_run_serial`, each step one parallel region over ``nblock`` blocks of rows.

    Kept apart from the serial loop: cached code that refers to a parallel function must not
    be loaded before numba's thread pool has started.
    """
    nzp, nxp = kap.shape
    p, px, pz, vx, vz = _fields(nzp, nxp)
    erow = np.zeros(nzp, dtype=np.float64)
    top = 5 if free else 4
    rows = nzp - 8
    nblock = max(1, min(nblock, rows // 8))  # the top block must hold the images' rows
    edges = np.empty(nblock + 1, dtype=np.int64)
    for b in range(nblock + 1):
        edges[b] = 4 + (rows * b) // nblock
    for n in range(q.size):
        cur, nxt = n % 2, 1 - n % 2
        _record(p[cur], rec_r, rec_c, rec_w, rec[n])
        if want_energy:
            energy[n] = _total_energy(p[cur], vx[cur], vz[cur], kap, bxx, bzz, ax_v, bx_v, az_v,
                                      bz_v, c, free, erow)
        _advance_blocks(edges, top, free, p[cur], px[cur], pz[cur], vx[cur], vz[cur], p[nxt],
                        px[nxt], pz[nxt], vx[nxt], vz[nxt], kap, bxx, bzz, ax_p, bx_p, ax_v, bx_v,
                        az_p, bz_p, az_v, bz_v, c)
        _inject(p[nxt], px[nxt], pz[nxt], src_r, src_c, src_w, np.float32(q[n]))
    return rec, energy


def model_shot(thickness, velocity, density=None, *, offsets, source_depth=6.0, receiver_depth=8.0,
               peak_frequency=25.0, dt=0.004, nsamples=751, delay=0.0, free_surface=True,
               grid_spacing=None, time_step=None, params=None, return_energy=False, threads=0):
    """Pressure recorded from one shot over flat layers, by the 2D acoustic wave equation.

    The source sits at x = 0, ``source_depth`` below the free surface; receiver r at
    ``offsets[r]`` (either side) and ``receiver_depth`` (one depth or one per receiver). The
    grid reaches from ``params.margin`` beyond the outermost source or receiver on each side
    and down to the depth whose vertical two-way time is the end of the record (deeper layers
    cannot send anything back in time, nor can the bottom boundary), plus the margin; beyond
    that the absorbing layer. See the module notes for the scheme.

    Parameters
    ----------
    thickness : array_like, shape (n,)
        Layer thicknesses, m (layer 0 at the top; source and receivers may lie in any layer).
    velocity : array_like, shape (n+1,)
        Velocities of the layers and the half-space, m/s.
    density : array_like, shape (n+1,), optional
        Densities, kg/m^3. Default: Gardner's relation for every layer (give sea water its own,
        about 1025 kg/m^3, where layer 0 is water).
    offsets : array_like, shape (nrec,)
        Receiver x relative to the source, m.
    source_depth : float
        m below the surface (default 6).
    receiver_depth : float or array_like, shape (nrec,)
        m below the surface (default 8).
    peak_frequency : float
        Ricker peak frequency, Hz (default 25).
    dt : float
        Output sample interval, s (default 0.004).
    nsamples : int
        Output samples per trace (default 751).
    delay : float
        Time of the first output sample, s (default 0); the wavelet is centred on t = 0.
    free_surface : bool
        Pressure-release surface at z = 0 (default). False puts an absorbing layer there too and
        extends layer 0 upwards: no ghosts and no surface multiples.
    grid_spacing, time_step : float, optional
        m and s; None chooses them (:func:`choose_grid`).
    params : WaveParams, optional
        Numerical choices; default ``WaveParams()``.
    return_energy : bool
        Also return the wavefield's energy per metre of line at every output sample.
    threads : int
        Threads for the time loop (blocks of grid rows, one sync per step); 0 (default) takes
        numba's current number. The result has the same bits for any count. On a machine
        whose cores are busy with other work, GNU OpenMP's spinning threads make each per-step
        sync wait for a time slice: two threads ran 5x slower than one at a load of 5 on 2
        cores, and as fast as one with ``OMP_WAIT_POLICY=PASSIVE`` (or
        ``NUMBA_THREADING_LAYER=workqueue``) set before the process starts. Use 1 there, or
        model several shots at once on one thread each (as
        :func:`velspec.synth.make_wave_line` does).

    Returns
    -------
    data : ndarray of float32, shape (nrec, nsamples)
        Pressure; a direct wave in a uniform medium is the Ricker wavelet over
        ``sqrt(r / 1 m)`` (Pa per the source's unit strength).
    energy : ndarray of float64, shape (nsamples,)
        Only with ``return_energy``: ``sum p^2 / (2 K) + rho v^- v^+ / 2`` over the grid times
        h^2 (the form the leapfrog scheme conserves), J/m.

    Raises
    ------
    ParameterError
        For an impossible model or geometry, or a grid that is unstable or too coarse.

    Notes
    -----
    Accuracy on the default grid (order 8, 4.5 points per wavelength at 2.5 times the peak
    frequency, leapfrog phase error 0.2 % there), measured in tests/test_wave.py: arrival times
    within 1 ms of exact ray tracing over 1.4 s (the leapfrog's phase error makes waves very
    slightly fast, ~0.03 % of the traveltime at the peak frequency); the direct wave's amplitude
    within 0.2 % of the 2D Green's function; a sharp interface's reflection coefficient
    converges as h^2 and comes out a few percent weak (about 4 % at 25 Hz on a 5 m grid for a
    water / sediment contrast of 0.46): interfaces are a cell wide on the grid.

    References
    ----------
    Alford, Kelly & Boore, 1974, Geophysics 39, 834-842; Virieux, 1986, Geophysics 51, 889-901;
    Levander, 1988, Geophysics 53, 1425-1436; Collino & Tsogka, 2001, Geophysics 66, 294-307;
    Moczo et al., 2002, BSSA 92, 3042-3066.
    """
    params = (params or WaveParams()).validate()
    try:
        h_lay, v_lay = check_model(thickness, velocity)
    except (TypeError, ValueError) as exc:
        raise ParameterError(f"model: {exc}") from exc
    rho = gardner_density(v_lay) if density is None else np.asarray(density, dtype=np.float64)
    if rho.shape != v_lay.shape or not np.all(np.isfinite(rho) & (rho > 0)):
        raise ParameterError("density needs n+1 finite values > 0 kg/m^3, like velocity")
    x_rec = np.atleast_1d(np.asarray(offsets, dtype=np.float64))
    if x_rec.ndim != 1 or x_rec.size == 0 or not np.all(np.isfinite(x_rec)):
        raise ParameterError("offsets must be a non-empty 1-D array of finite x in metres")
    z_rec = np.broadcast_to(np.asarray(receiver_depth, dtype=np.float64), x_rec.shape).copy()
    zs = float(source_depth)
    if not (np.all(np.isfinite(z_rec)) and np.all(z_rec >= 0) and math.isfinite(zs) and zs >= 0):
        raise ParameterError("source and receiver depths must be finite and >= 0 m")
    if not (isinstance(nsamples, (int, np.integer)) and nsamples >= 2):
        raise ParameterError("nsamples must be an integer >= 2")
    if not (math.isfinite(delay) and math.isfinite(dt) and dt > 0):
        raise ParameterError("dt must be > 0 s and delay finite")
    if not (math.isfinite(peak_frequency) and 0 < peak_frequency < 0.25 / dt):
        raise ParameterError(
            f"peak_frequency must be in (0, {0.25 / dt:g}) Hz: below half the output Nyquist "
            "frequency, so that the wavelet's band is sampled"
        )

    t_end = delay + (nsamples - 1) * dt
    # deepest depth that can send energy back before the record ends (vertical two-way time)
    z_if = np.cumsum(h_lay)
    t_if = np.cumsum(2.0 * h_lay / v_lay[:-1])
    if t_end <= t_if[-1]:
        k = int(np.searchsorted(t_if, t_end))
        z_top = z_if[k - 1] if k > 0 else 0.0
        t_top = t_if[k - 1] if k > 0 else 0.0
        z_reach = z_top + 0.5 * (t_end - t_top) * v_lay[k]
    else:
        z_reach = z_if[-1] + 0.5 * (t_end - t_if[-1]) * v_lay[-1]
    # below the last interface the half-space sends nothing back but the boundary's residual
    z_reach = max(min(z_reach, z_if[-1]), zs, float(z_rec.max()))
    inside = np.r_[True, z_if < z_reach + params.margin]  # layers within the grid
    vmin, vmax = float(v_lay[inside].min()), float(v_lay[inside].max())
    h, step = choose_grid(vmin, vmax, peak_frequency, dt, params, grid_spacing, time_step)
    ratio = int(round(dt / step))

    nb = params.boundary_cells
    x_lo = min(0.0, float(x_rec.min())) - params.margin
    x_hi = max(0.0, float(x_rec.max())) + params.margin
    # receivers on nodes where they can be: the first receiver fixes the x origin
    x0 = float(x_rec[0]) - math.ceil((float(x_rec[0]) - x_lo) / h) * h - nb * h
    nx = int(math.ceil((x_hi - x0) / h)) + nb + 1
    ntop = 0 if free_surface else nb + int(math.ceil(params.margin / h))
    z0 = -ntop * h
    nz = ntop + int(math.ceil((z_reach + params.margin) / h)) + nb + 1

    # volume averages of the layered model around every node (Moczo et al., 2002)
    zn = z0 + np.arange(nz) * h
    K = rho * v_lay**2
    k_node = 1.0 / _cell_means(z_if, 1.0 / K, zn - 0.5 * h, zn + 0.5 * h)
    bx_node = _cell_means(z_if, 1.0 / rho, zn - 0.5 * h, zn + 0.5 * h)
    bz_node = 1.0 / _cell_means(z_if, rho, zn, zn + h)
    if free_surface:  # the surface row's cell is half water, half nothing: keep the water
        k_node[0] = K[0]
        bx_node[0] = 1.0 / rho[0]
    shape = (nz + 2 * _PAD, nx + 2 * _PAD)

    def field(col):
        out = np.ones(shape, dtype=np.float32)  # padding: harmless nonzero (never updated)
        out[_PAD:-_PAD, _PAD:-_PAD] = col[:, None].astype(np.float32)
        out[:_PAD] = out[_PAD]
        out[-_PAD:] = out[-_PAD - 1]
        return out

    kap = field(step * k_node / h)
    bxx = field(step * bx_node / h)
    bzz = field(step * bz_node / h)

    L = nb * h
    d0 = 3.0 * vmax * math.log(1.0 / params.boundary_reflection) / (2.0 * L)
    ax_p, bx_p = _pml_profile(shape[1], nb, _PAD + nb, shape[1] - 1 - _PAD - nb, h, d0, step, 0.0)
    ax_v, bx_v = _pml_profile(shape[1], nb, _PAD + nb, shape[1] - 1 - _PAD - nb, h, d0, step, 0.5)
    top_inner = _PAD + (nb if not free_surface else -10**6)
    az_p, bz_p = _pml_profile(shape[0], nb, top_inner, shape[0] - 1 - _PAD - nb, h, d0, step, 0.0)
    az_v, bz_v = _pml_profile(shape[0], nb, top_inner, shape[0] - 1 - _PAD - nb, h, d0, step, 0.5)

    fi_s = np.array([(0.0 - x0) / h])
    fj_s = np.array([(zs - z0) / h])
    src_r, src_c, src_w = _stencil(fj_s, fi_s, nz, nx, free_surface)
    rec_r, rec_c, rec_w = _stencil((z_rec - z0) / h, (x_rec - x0) / h, nz, nx, free_surface)

    k0 = int(math.ceil(_WAVELET_HALF / (peak_frequency * dt) - 1e-9))
    t_begin = min(delay, 0.0) - k0 * dt  # a whole number of output samples before t = 0
    nsteps = int(round((t_end - t_begin) / step)) + 1
    layer_s = int(np.searchsorted(z_if, zs, side="right"))
    q = source_function(peak_frequency, step, nsteps, t_begin, v_lay[layer_s], rho[layer_s])
    q = q * (step * K[layer_s] / h**2)  # dp = dt K q / (h^2) spread over the nodes

    rec = np.zeros((nsteps, x_rec.size), dtype=np.float32)
    energy = np.zeros(nsteps if return_energy else 1, dtype=np.float64)
    c = np.zeros(4, dtype=np.float32)
    cs = STAGGERED_COEFFICIENTS[params.order]
    c[: len(cs)] = cs
    if not (isinstance(threads, (int, np.integer)) and threads >= 0):
        raise ParameterError("threads must be an integer >= 0 (0: numba's current number)")
    nthreads = int(threads) or numba.get_num_threads()
    args = (kap, bxx, bzz, ax_p, bx_p, ax_v, bx_v, az_p, bz_p, az_v, bz_v, c, src_r.ravel(),
            src_c.ravel(), src_w.ravel(), q.astype(np.float32), rec_r, rec_c, rec_w,
            bool(free_surface), bool(return_energy))
    if nthreads == 1:  # no thread pool at all: nothing to wait for on a busy machine
        _run_serial(*args, rec, energy)
    else:
        before = numba.get_num_threads()  # thread-local in numba: restored for the caller
        numba.set_num_threads(min(nthreads, numba.config.NUMBA_NUM_THREADS))
        try:
            _run_parallel(*args, nthreads, rec, energy)
        finally:
            numba.set_num_threads(before)

    # to the output sampling; output sample k of the decimated record is at t_begin + k dt
    out = resample_poly(rec.astype(np.float64), 1, ratio, axis=0) if ratio > 1 else rec
    first = int(round((delay - t_begin) / dt))
    data = np.ascontiguousarray(out[first:first + nsamples].T, dtype=np.float32)
    if data.shape[1] < nsamples:  # cannot happen by construction; guard against rounding
        data = np.pad(data, ((0, 0), (0, nsamples - data.shape[1])))
    if not return_energy:
        return data
    e = energy[::ratio][first:first + nsamples] * (step / h) * h * h  # kernel sums carry h / dt
    return data, e
