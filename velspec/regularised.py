"""A regularised interval-velocity field over the whole line: one bounded least-squares problem.

The unknowns are u = v_int^2 on every sample of every CMP, u being constant in the cell
(t_{j-1}, t_j] that ends at sample j (t_{-1} = 0), so that the integral of u to any time is exact
and thin layers are not biased by a coarse grid. The cost is a sum of squared residuals:

* data, one per pick i (Dix, 1955): t_i V_i^2 = integral_0^{t_i} u dt, in units of the pick's
  uncertainty, sigma(t V^2) = 2 t V sigma_V;
* smoothness in time, first differences of u between neighbouring cells of a CMP, scaled to a
  relative change of interval velocity (du / (2 u_ref) = dv / v): a random walk with standard
  deviation ``time_variation`` over 1 s of t0 inside a layer, and ``step_variation`` across the
  cell boundary nearest each of that CMP's picks, where a reflector lets the velocity step (a
  CMP without picks may step where the nearest CMPs with picks on either side do);
* smoothness along the line, differences of u at the same sample between neighbouring CMPs: a
  random walk with standard deviation ``lateral_variation`` over 1 km of line for the velocity
  averaged over 1 s of t0 (each cell weighted by its duration, each pair of CMPs by the inverse
  of their distance, so neither the sample interval nor the CMP spacing changes its meaning);

with every u inside [vint_min^2, vint_max^2]. ``u_ref`` is the line's stacking-velocity trend
(medians of the picks in time groups), used only to express the priors in relative terms.

The problem is solved by a primal-dual active-set method (Hintermueller, Ito & Kunisch, 2002)
for the bounds, each pass a preconditioned conjugate-gradient solve on the free unknowns; the
first active sets are proposed CMP by CMP, where the rule is cheap to run to its end
(:func:`_solve_bounded`). Where many cells sit at a bound the passes add up: the benchmark's
gas layer takes 40-70 of them, most of a few iterations. The
preconditioner is the exact inverse of each CMP's own block (data, time smoothing, and the
diagonal of the lateral coupling): in the cumulative variable B = integral u it is a
pentadiagonal matrix, factored once per pass in O(nt) per CMP. Memory is a few (ncmp, nt)
float64 arrays; the work per iteration is O(ncmp nt). Each output value is computed by one
thread in a fixed order and the dot products are summed row by row, so the result has the same
bits for any thread count.

The field is a first-pass interval-velocity field for review: qualified people must check it
before any use, and local regulations and licensed practice prevail.

References
----------
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
Koren, Z., and Ravve, I., 2006, Constrained Dix inversion: Geophysics 71(6), R113-R130.
Hintermueller, M., Ito, K., and Kunisch, K., 2002, The primal-dual active set strategy as a
semismooth Newton method: SIAM Journal on Optimization 13(3), 865-888.
Hestenes, M. R., and Stiefel, E., 1952, Methods of conjugate gradients for solving linear
systems: Journal of Research of the National Bureau of Standards 49(6), 409-436.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from .errors import InputError
from .interval import depth_fields
from .params import IntervalParams

__all__ = ["NoPicksError", "RegularisedField", "regularised_dix", "depth_from_interval"]

T_REF = 1.0        # s: the time over which time_variation and the lateral average are stated
X_REF = 1000.0     # m: the distance over which lateral_variation is stated
UNIT = 1e-6        # u is solved in (km/s)^2 so that its numbers are of order one
FIXED_WEIGHT = 1e6  # a bound-held cell weighs this many times its diagonal in the preconditioner
MAX_PASSES = 400   # active-set passes; each is cheap after the first few
ROW_PASSES = 1000  # multiplier-rule passes of one CMP on its own block
ROW_SHRINK = 0.5   # row proposals go on while each changes at most this share of the cells the last did
KKT_SLACK = 1e-5   # relative: a free cell this far outside a bound (0.0005 % in velocity) counts as inside


class NoPicksError(InputError, ValueError):
    """No used pick on the whole line: there is nothing to invert."""


@dataclass
class RegularisedField:
    """The regularised field of a line.

    Attributes
    ----------
    vint : float32 (ncmp, nt)
        Interval velocity of the cell ending at each sample, m/s, inside [vint_min, vint_max].
    vrms : float32 (ncmp, nt)
        Stacking (RMS) velocity the field predicts, V(t) = sqrt(integral_0^t u dt / t), m/s
        (at t = 0, the interval velocity there).
    misfit : float32 (npick,)
        (predicted - picked) / sigma of each pick, in the order given.
    at_bound : bool (ncmp, nt)
        Samples at vint_min or vint_max (within 1e-6 of it), where the bounds hold the field.
    iterations : int
        Conjugate-gradient iterations, all passes together.
    passes : int
        Active-set passes.
    converged : bool
        Whether the active set settled and the last solve reached its tolerance.
    """

    vint: np.ndarray
    vrms: np.ndarray
    misfit: np.ndarray
    at_bound: np.ndarray
    iterations: int
    passes: int
    converged: bool


# ----------------------------------------------------------------------------------------
# kernels: one CMP row per thread, each value summed in a fixed order


@njit(cache=True, nogil=True)
def _row_apply(xc, xm, xp, out, c, dt, pstart, pcell, palpha, pw, wt, lat, cw, free, rp):
    """out = (H x)[c] on the free cells, 0 on the bound-held ones, from row c of x (xc) and the
    rows before and after it (xm, xp; unused at the ends of the line). Returns out . xc."""
    ncmp = wt.shape[0]
    n = xc.size
    # predicted integral at each pick (picks sorted by time within the CMP), times its weight
    b = 0.0
    k = 0
    for p in range(pstart[c], pstart[c + 1]):
        j = pcell[p]
        while k < j:
            b += xc[k] * dt[k]
            k += 1
        rp[p] = pw[p] * (b + palpha[p] * xc[j] * dt[j])
    # adjoint: cell j collects every pick below it in full, a pick inside it by alpha
    below = 0.0
    p = pstart[c + 1] - 1
    for j in range(n - 1, -1, -1):
        inside = 0.0
        part = 0.0
        while p >= pstart[c] and pcell[p] == j:
            inside += rp[p]
            part += palpha[p] * rp[p]
            p -= 1
        v = dt[j] * (below + part)
        below += inside
        if free[c, j] == 0:
            out[j] = 0.0
            continue
        xj = xc[j]
        if j > 0:
            v += wt[c, j - 1] * (xj - xc[j - 1])
        if j < n - 1:
            v += wt[c, j] * (xj - xc[j + 1])
        if c > 0:
            v += cw[j] * lat[c - 1] * (xj - xm[j])
        if c < ncmp - 1:
            v += cw[j] * lat[c] * (xj - xp[j])
        out[j] = v
    s = 0.0
    for j in range(n):
        s += out[j] * xc[j]
    return s


@njit(cache=True, nogil=True, parallel=True)
def _apply(x, out, dt, pstart, pcell, palpha, pw, wt, lat, cw, free, rp):
    """out = H x (masked to the free cells)."""
    ncmp = x.shape[0]
    for c in prange(ncmp):
        _row_apply(x[c], x[max(c - 1, 0)], x[min(c + 1, ncmp - 1)], out[c], c, dt, pstart, pcell, palpha,
                   pw, wt, lat, cw, free, rp)


@njit(cache=True, nogil=True, parallel=True)
def _cg_apply(p_old, z, beta, p_new, q, rows, dt, pstart, pcell, palpha, pw, wt, lat, cw, free, rp):
    """p_new = z + beta p_old and q = H p_new in one pass; rows[c] = (p_new . q) of row c.

    Each row builds its neighbours' new direction on the fly from z and p_old, so no thread
    reads a row that another is writing.
    """
    ncmp, n = z.shape
    for c in prange(ncmp):
        pm = np.empty(n)
        pp = np.empty(n)
        cm, cp = max(c - 1, 0), min(c + 1, ncmp - 1)
        for j in range(n):
            p_new[c, j] = z[c, j] + beta * p_old[c, j]
            pm[j] = z[cm, j] + beta * p_old[cm, j]
            pp[j] = z[cp, j] + beta * p_old[cp, j]
        rows[c] = _row_apply(p_new[c], pm, pp, q[c], c, dt, pstart, pcell, palpha, pw, wt, lat, cw, free, rp)


@njit(cache=True, nogil=True, parallel=True)
def _cg_update(x, r, z, p, q, alpha, idt, d0, d1, d2, free, rz_rows, rr_rows):
    """x += alpha p, r -= alpha q, z = M^-1 r, with the row sums of r . z and r . r."""
    ncmp, n = x.shape
    for c in prange(ncmp):
        rr = 0.0
        for j in range(n):
            x[c, j] += alpha * p[c, j]
            rj = r[c, j] - alpha * q[c, j]
            r[c, j] = rj
            rr += rj * rj
        y = np.empty(n)
        _solve_row(r[c], z[c], idt, d0[c], d1[c], d2[c], free[c], y)
        rz = 0.0
        for j in range(n):
            rz += r[c, j] * z[c, j]
        rz_rows[c] = rz
        rr_rows[c] = rr


@njit(cache=True, nogil=True)
def _ordered_sum(rows):
    """Sum over rows in row order: with row sums made one thread each, the same bits on any
    thread count."""
    s = 0.0
    for v in rows:
        s += v
    return s


@njit(cache=True, nogil=True, parallel=True)
def _data_adjoint(ncmp, n, dt, pstart, pcell, palpha, r):
    """A^T r: the right-hand side of the normal equations from weighted pick data r."""
    out = np.zeros((ncmp, n))
    for c in prange(ncmp):
        below = 0.0
        p = pstart[c + 1] - 1
        for j in range(n - 1, -1, -1):
            inside = 0.0
            part = 0.0
            while p >= pstart[c] and pcell[p] == j:
                inside += r[p]
                part += palpha[p] * r[p]
                p -= 1
            out[c, j] = dt[j] * (below + part)
            below += inside
    return out


@njit(cache=True, nogil=True)
def _factor_row(c, dt, pstart, pcell, palpha, pw, wt, lat, cw, free_row, d0r, d1r, d2r, pen):
    """LDL^T of CMP c's block in the cumulative variable B_j = sum_{k<=j} u_k dt_k.

    H_c = S^T K_c S with S the cumulative sum; K_c is pentadiagonal: the picks interpolate B,
    a diagonal term in u is a first difference of B, a first difference of u a second one. A
    bound-held cell adds pen[j] (FIXED_WEIGHT times its diagonal) to the diagonal in u. On
    return d0r holds 1 / D, d1r and d2r the first and second subdiagonals of L.
    """
    ncmp = wt.shape[0]
    n = d0r.size
    for j in range(n):
        d0r[j] = 0.0
        if j < n - 1:
            d1r[j] = 0.0
        if j < n - 2:
            d2r[j] = 0.0
    # data diagonal in u, for the weight of a bound-held cell
    hd = np.zeros(n)
    below = 0.0
    p = pstart[c + 1] - 1
    for j in range(n - 1, -1, -1):
        inside = 0.0
        part = 0.0
        while p >= pstart[c] and pcell[p] == j:
            inside += pw[p]
            part += pw[p] * palpha[p] * palpha[p]
            p -= 1
        hd[j] = dt[j] * dt[j] * (below + part)
        below += inside
    for p in range(pstart[c], pstart[c + 1]):
        j = pcell[p]
        a = palpha[p]
        w = pw[p]
        d0r[j] += w * a * a
        if j >= 1:
            d0r[j - 1] += w * (1.0 - a) * (1.0 - a)
            d1r[j - 1] += w * a * (1.0 - a)
    for j in range(n):
        lam = 0.0
        if c > 0:
            lam += cw[j] * lat[c - 1]
        if c < ncmp - 1:
            lam += cw[j] * lat[c]
        if free_row[j] == 0:
            h = hd[j] + lam
            if j > 0:
                h += wt[c, j - 1]
            if j < n - 1:
                h += wt[c, j]
            pen[j] = FIXED_WEIGHT * h
            lam += pen[j]
        else:
            pen[j] = 0.0
        q = lam / (dt[j] * dt[j])
        d0r[j] += q
        if j >= 1:
            d0r[j - 1] += q
            d1r[j - 1] -= q
    for j in range(n - 1):
        w = wt[c, j]
        ca = 1.0 / dt[j + 1]
        cb = -1.0 / dt[j + 1] - 1.0 / dt[j]
        d0r[j + 1] += w * ca * ca
        d0r[j] += w * cb * cb
        d1r[j] += w * ca * cb
        if j >= 1:
            c1 = 1.0 / dt[j]
            d0r[j - 1] += w * c1 * c1
            d1r[j - 1] += w * c1 * cb
            d2r[j - 1] += w * c1 * ca
    # banded LDL^T in place
    for j in range(n):
        dj = d0r[j]
        if j >= 1:
            dj -= d1r[j - 1] * d1r[j - 1] * d0r[j - 1]
        if j >= 2:
            dj -= d2r[j - 2] * d2r[j - 2] * d0r[j - 2]
        d0r[j] = dj
        if j < n - 1:
            e = d1r[j]
            if j >= 1:
                e -= d2r[j - 1] * d0r[j - 1] * d1r[j - 1]
            d1r[j] = e / dj
        if j < n - 2:
            d2r[j] = d2r[j] / dj
    for j in range(n):
        d0r[j] = 1.0 / d0r[j]           # the solves multiply


@njit(cache=True, nogil=True, parallel=True)
def _factor(dt, pstart, pcell, palpha, pw, wt, lat, cw, free, d0, d1, d2):
    """LDL^T of every CMP's block (see :func:`_factor_row`)."""
    ncmp, n = d0.shape
    for c in prange(ncmp):
        pen = np.empty(n)
        _factor_row(c, dt, pstart, pcell, palpha, pw, wt, lat, cw, free[c], d0[c], d1[c], d2[c], pen)


@njit(cache=True, nogil=True)
def _solve_row(r, z, idt, d0, d1, d2, free, y):
    """z = H_c^-1 r = S^-1 K_c^-1 S^-T r for one CMP (1-D rows, idt = 1 / dt, d0 = 1 / D), 0 on
    held cells; y is scratch."""
    n = r.size
    # y = L^-1 S^-T r
    for j in range(n):
        v = r[j] * idt[j]
        if j < n - 1:
            v -= r[j + 1] * idt[j + 1]
        if j >= 1:
            v -= d1[j - 1] * y[j - 1]
        if j >= 2:
            v -= d2[j - 2] * y[j - 2]
        y[j] = v
    # y = L^-T D^-1 y, and z = S^-1 y as soon as each difference is known
    for j in range(n - 1, -1, -1):
        v = y[j] * d0[j]
        if j < n - 1:
            v -= d1[j] * y[j + 1]
        if j < n - 2:
            v -= d2[j] * y[j + 2]
        y[j] = v
        if j < n - 1:
            z[j + 1] = (y[j + 1] - v) * idt[j + 1] if free[j + 1] else 0.0
    z[0] = y[0] * idt[0] if free[0] else 0.0


@njit(cache=True, nogil=True, parallel=True)
def _precondition(r, z, idt, d0, d1, d2, free):
    """z = M^-1 r, M the block-diagonal part of H (one exact block per CMP)."""
    ncmp, n = r.shape
    for c in prange(ncmp):
        y = np.empty(n)
        _solve_row(r[c], z[c], idt, d0[c], d1[c], d2[c], free[c], y)


@njit(cache=True, nogil=True, parallel=True)
def _row_dots(a, b):
    ncmp, n = a.shape
    out = np.empty(ncmp)
    for c in prange(ncmp):
        s = 0.0
        for j in range(n):
            s += a[c, j] * b[c, j]
        out[c] = s
    return out


@njit(cache=True, nogil=True)
def _dot(a, b):
    """Dot product summed row by row, then over rows in order: the same bits on any thread count."""
    return _ordered_sum(_row_dots(a, b))


@njit(cache=True, nogil=True, parallel=True)
def _rows_bounded(x, g, at_lo, at_hi, lo, hi, slack_lo, slack_hi, dt, pstart, pcell, palpha, pw, wt, lat, cw,
                  all_free, rp, max_passes):
    """Active sets proposed CMP by CMP: each one's bounded minimiser with its neighbours held at x.

    Per CMP the multiplier rule runs to its end on the CMP's own block, each pass an exact
    banded solve (O(nt)), so a run of held cells that shrinks or grows along t0 is settled here
    at little cost. Rows with nothing held and nothing outside the bounds are left as they are.
    """
    ncmp, n = x.shape
    new_lo = at_lo.copy()
    new_hi = at_hi.copy()
    for c in prange(ncmp):
        need = False
        for j in range(n):
            if at_lo[c, j] or at_hi[c, j] or x[c, j] < lo - slack_lo or x[c, j] > hi + slack_hi:
                need = True
                break
        if not need:
            continue
        rhs = np.empty(n)
        for j in range(n):
            v = g[c, j]
            if c > 0:
                v += cw[j] * lat[c - 1] * x[c - 1, j]
            if c < ncmp - 1:
                v += cw[j] * lat[c] * x[c + 1, j]
            rhs[j] = v
        zeros = np.zeros(n)
        idt = 1.0 / dt
        keep = np.ones(n, dtype=np.uint8)
        free_row = np.empty(n, dtype=np.uint8)
        d0r, d1r, d2r = np.empty(n), np.empty(max(n - 1, 0)), np.empty(max(n - 2, 0))
        pen, b, y, tmp, hy = np.empty(n), np.empty(n), np.empty(n), np.empty(n), np.empty(n)
        fl, fh = new_lo[c], new_hi[c]
        for _ in range(max_passes):
            for j in range(n):
                free_row[j] = 0 if (fl[j] or fh[j]) else 1
            _factor_row(c, dt, pstart, pcell, palpha, pw, wt, lat, cw, free_row, d0r, d1r, d2r, pen)
            for j in range(n):
                b[j] = rhs[j] + (pen[j] * (lo if fl[j] else hi) if free_row[j] == 0 else 0.0)
            _solve_row(b, y, idt, d0r, d1r, d2r, keep, tmp)
            for j in range(n):
                if fl[j]:
                    y[j] = lo
                elif fh[j]:
                    y[j] = hi
            _row_apply(y, zeros, zeros, hy, c, dt, pstart, pcell, palpha, pw, wt, lat, cw, all_free, rp)
            changed = False
            for j in range(n):
                m = rhs[j] - hy[j]
                held = fl[j] or fh[j]
                nl = (fl[j] and m <= 0.0) or (not held and y[j] < lo - slack_lo)
                nh = (fh[j] and m >= 0.0) or (not held and y[j] > hi + slack_hi)
                if nl != fl[j] or nh != fh[j]:
                    changed = True
                fl[j] = nl
                fh[j] = nh
            if not changed:
                break
    return new_lo, new_hi


@njit(cache=True, nogil=True, parallel=True)
def _predict(x, dt, pstart, pcell, palpha, b_samples, b_picks):
    """Integral of u at every sample and at every pick."""
    ncmp, n = x.shape
    for c in prange(ncmp):
        b = 0.0
        p = pstart[c]
        for j in range(n):
            while p < pstart[c + 1] and pcell[p] == j:
                b_picks[p] = b + palpha[p] * x[c, j] * dt[j]
                p += 1
            b += x[c, j] * dt[j]
            b_samples[c, j] = b


@njit(cache=True, nogil=True, parallel=True)
def _residual(g, q, free, r):
    """r = g - q on the free cells, 0 on the held ones; returns |g on the free cells|^2."""
    ncmp, n = g.shape
    rows = np.empty(ncmp)
    for c in prange(ncmp):
        s = 0.0
        for j in range(n):
            if free[c, j]:
                r[c, j] = g[c, j] - q[c, j]
                s += g[c, j] * g[c, j]
            else:
                r[c, j] = 0.0
        rows[c] = s
    return _ordered_sum(rows)


@njit(cache=True, nogil=True, parallel=True)
def _multiplier_rule(x, mu, at_lo, at_hi, lo, hi, slack_lo, slack_hi, new_lo, new_hi):
    """The multiplier rule's next active sets (into new_lo, new_hi) and the number of cells that
    break the KKT conditions: free ones outside a bound, held ones pulled inwards."""
    ncmp, n = x.shape
    rows = np.zeros(ncmp, dtype=np.int64)
    for c in prange(ncmp):
        k = 0
        for j in range(n):
            if at_lo[c, j]:
                pull = mu[c, j] > 0.0
                new_lo[c, j] = not pull
                new_hi[c, j] = False
            elif at_hi[c, j]:
                pull = mu[c, j] < 0.0
                new_hi[c, j] = not pull
                new_lo[c, j] = False
            else:
                below, above = x[c, j] < lo - slack_lo, x[c, j] > hi + slack_hi
                pull = below or above
                new_lo[c, j] = below
                new_hi[c, j] = above
            if pull:
                k += 1
        rows[c] = k
    total = 0
    for v in rows:
        total += v
    return total


@njit(cache=True, nogil=True, parallel=True)
def _hold(x, at_lo, at_hi, lo, hi, free):
    """Held cells to their bound, the others clipped into the bounds; free = not held."""
    ncmp, n = x.shape
    for c in prange(ncmp):
        for j in range(n):
            if at_lo[c, j]:
                x[c, j] = lo
                free[c, j] = 0
            elif at_hi[c, j]:
                x[c, j] = hi
                free[c, j] = 0
            else:
                x[c, j] = min(max(x[c, j], lo), hi)
                free[c, j] = 1


# ----------------------------------------------------------------------------------------


class _System:
    """The normal equations H u = g of the regularised problem, and their preconditioner."""

    def __init__(self, dt, pstart, pcell, palpha, pw, wt, lat, cw):
        self.dt, self.pstart, self.pcell, self.palpha, self.pw = dt, pstart, pcell, palpha, pw
        self.wt, self.lat, self.cw = wt, lat, cw
        self.shape = wt.shape[0], dt.size
        self.rp = np.empty(pw.size)
        self.d0 = np.empty(self.shape)
        self.d1 = np.empty((self.shape[0], max(self.shape[1] - 1, 0)))
        self.d2 = np.empty((self.shape[0], max(self.shape[1] - 2, 0)))
        self.all_free = np.ones(self.shape, dtype=np.uint8)
        self.idt = 1.0 / dt

    def apply(self, x, out, free):
        _apply(x, out, self.dt, self.pstart, self.pcell, self.palpha, self.pw, self.wt, self.lat,
               self.cw, free, self.rp)

    def factor(self, free):
        _factor(self.dt, self.pstart, self.pcell, self.palpha, self.pw, self.wt, self.lat, self.cw,
                free, self.d0, self.d1, self.d2)

    def precondition(self, r, z, free):
        _precondition(r, z, self.idt, self.d0, self.d1, self.d2, free)

    def rows_bounded(self, x, g, at_lo, at_hi, lo, hi, slack_lo, slack_hi):
        return _rows_bounded(x, g, at_lo, at_hi, lo, hi, slack_lo, slack_hi, self.dt, self.pstart, self.pcell,
                             self.palpha, self.pw, self.wt, self.lat, self.cw, self.all_free, self.rp, ROW_PASSES)

    def cg_apply(self, p_old, z, beta, p_new, q, rows, free):
        _cg_apply(p_old, z, beta, p_new, q, rows, self.dt, self.pstart, self.pcell, self.palpha, self.pw,
                  self.wt, self.lat, self.cw, free, self.rp)

    def cg_update(self, x, r, z, p, q, alpha, free, rz_rows, rr_rows):
        _cg_update(x, r, z, p, q, alpha, self.idt, self.d0, self.d1, self.d2, free, rz_rows, rr_rows)


def _pcg(system, x, g, free, tol, maxiter, work):
    """Solve H_ff x_f = g_f - H_fa x_a in place by preconditioned conjugate gradients
    (Hestenes & Stiefel, 1952), two fused passes over the field per iteration.

    Returns the iterations taken and whether the relative residual reached ``tol``.
    """
    r, z, p, q, p2 = work
    ncmp = x.shape[0]
    rows, rz_rows, rr_rows = np.empty(ncmp), np.empty(ncmp), np.empty(ncmp)
    system.apply(x, q, system.all_free)
    target = tol * max(np.sqrt(_residual(g, q, free, r)), 1e-300)
    system.precondition(r, z, free)
    rz = _dot(r, z)
    rr = _dot(r, r)
    p[...] = 0.0
    beta = 0.0
    for it in range(maxiter):
        if np.sqrt(rr) <= target:
            return it, True
        system.cg_apply(p, z, beta, p2, q, rows, free)
        p, p2 = p2, p
        pq = _ordered_sum(rows)
        if not pq > 0.0:
            return it, False
        alpha = rz / pq
        system.cg_update(x, r, z, p, q, alpha, free, rz_rows, rr_rows)
        rz_new = _ordered_sum(rz_rows)
        rr = _ordered_sum(rr_rows)
        beta = rz_new / rz
        rz = rz_new
    return maxiter, bool(np.sqrt(rr) <= target)


def _set_key(at_lo, at_hi):
    return hashlib.sha1(np.packbits(at_lo).tobytes() + np.packbits(at_hi).tobytes()).digest()


def _solve_bounded(system, g, x, lo, hi, tol, maxiter):
    """Minimise 1/2 u^T H u - g^T u over lo <= u <= hi by a primal-dual active-set method.

    Each pass solves on the free cells of the line (PCG), then proposes the next active set.
    The rule is the multiplier rule of Hintermueller, Ito & Kunisch (2002): free cells outside
    a bound are held at it, held cells that the gradient pulls inwards are released. Applied to
    the whole line at once it frees a run of held cells one cell a pass from its ends; so the
    first proposals run it to its end on each CMP's own block, the neighbouring CMPs held where
    they are, an exact banded solve a pass (:func:`_rows_bounded`). Once those proposals stop
    shrinking fast (neighbours proposing at once can chase each other), the plain rule over the
    line finishes, a cheap pass at a time. It stops when the KKT conditions hold: free cells
    inside the bounds (to KKT_SLACK), held cells pushed against theirs; or, not converged, when
    the plain rule would revisit an active set already solved, or after MAX_PASSES.

    Returns x (clipped), the lower and upper active sets, CG iterations, passes, converged.
    """
    shape = x.shape
    free = np.ones(shape, dtype=np.uint8)
    at_lo = np.zeros(shape, dtype=bool)
    at_hi = np.zeros(shape, dtype=bool)
    plain_lo, plain_hi = np.empty(shape, dtype=bool), np.empty(shape, dtype=bool)
    work = [np.zeros(shape) for _ in range(5)]
    slack_lo, slack_hi = KKT_SLACK * lo, KKT_SLACK * hi
    seen = set()
    by_rows, last_changes = True, np.inf
    total, passes, converged = 0, 0, False
    for passes in range(1, MAX_PASSES + 1):  # noqa: B007 - the count is reported after the loop
        system.factor(free)
        its, reached = _pcg(system, x, g, free, tol, maxiter, work)
        total += its
        mu = work[3]
        system.apply(x, mu, system.all_free)
        np.subtract(g, mu, out=mu)                       # minus the gradient: > 0 pulls u up
        if _multiplier_rule(x, mu, at_lo, at_hi, lo, hi, slack_lo, slack_hi, plain_lo, plain_hi) == 0:
            converged = reached
            break
        seen.add(_set_key(at_lo, at_hi))
        new_lo = None
        if by_rows:
            new_lo, new_hi = system.rows_bounded(x, g, at_lo, at_hi, lo, hi, slack_lo, slack_hi)
            changes = int(np.count_nonzero(new_lo != at_lo) + np.count_nonzero(new_hi != at_hi))
            # neighbouring rows proposing at once can chase each other: once the proposals stop
            # shrinking fast, the plain rule finishes (from near the answer it takes few passes)
            if changes > ROW_SHRINK * last_changes or _set_key(new_lo, new_hi) in seen:
                by_rows = False
                new_lo = None
            last_changes = changes
        if new_lo is None:
            if _set_key(plain_lo, plain_hi) in seen:
                break                                   # the plain rule went round in a circle
            new_lo, new_hi, plain_lo, plain_hi = plain_lo, plain_hi, at_lo, at_hi   # reuse the buffers
        at_lo, at_hi = new_lo, new_hi
        _hold(x, at_lo, at_hi, lo, hi, free)
    np.clip(x, lo, hi, out=x)
    return x, at_lo, at_hi, total, passes, converged


def trend_knots(pick_t: np.ndarray, pick_v: np.ndarray, groups: int = 20) -> tuple[np.ndarray, np.ndarray]:
    """Knots (time s, velocity m/s) of a line's stacking-velocity trend, robust to outlying picks.

    Medians of time and velocity in up to ``groups`` groups of equal pick count (of groups with
    the same median time, the first); the trend is linear between them and held beyond. Used
    only to express the priors of :func:`regularised_dix` in relative terms; a run computes it
    once from all used picks of the line, so every window of the line has the same priors.
    """
    pick_t = np.asarray(pick_t, dtype=np.float64)
    pick_v = np.asarray(pick_v, dtype=np.float64)
    order = np.argsort(pick_t, kind="stable")
    parts = np.array_split(order, min(groups, order.size))
    tk = np.array([np.median(pick_t[i]) for i in parts])
    vk = np.array([np.median(pick_v[i]) for i in parts])
    keep = np.concatenate(([True], np.diff(tk) > 0))
    return tk[keep], vk[keep]


def _reference_trend(t_cells, knots):
    """Squared stacking-velocity trend on the cell times, (km/s)^2, from :func:`trend_knots`."""
    v = np.interp(t_cells, knots[0], knots[1])
    return (v * v) * UNIT


def regularised_dix(t0: np.ndarray, pick_cmp: np.ndarray, pick_t0: np.ndarray, pick_v: np.ndarray,
                    pick_sigma: np.ndarray, ncmp: int, params: IntervalParams | None = None,
                    cmp_x: np.ndarray | None = None, breaks: np.ndarray | None = None,
                    trend: tuple[np.ndarray, np.ndarray] | None = None) -> RegularisedField:
    """Interval velocity of a whole line from its used picks, regularised in time and along it.

    One bounded least-squares problem in u = v_int^2 on every (CMP, sample): Dix's integral
    equation for every pick, weighted by the pick's uncertainty, first-difference smoothness in
    time (relaxed at the picks, where reflectors let the velocity step) and along the line, and
    every interval velocity inside [vint_min, vint_max]. A CMP without picks gets its field from
    its neighbours through the lateral smoothing. See the module notes for the exact cost.

    Parameters
    ----------
    t0 : ndarray (nt,)
        Two-way time of each sample, s, strictly increasing, t0[0] >= 0. Sample j carries the
        interval velocity of (t0[j-1], t0[j]] (of (0, t0[0]] for j = 0; where t0[0] = 0 it is
        the velocity just below). One unknown per sample: pass a decimated axis to go faster.
    pick_cmp : ndarray of int (npick,)
        CMP row of each pick, 0 .. ncmp-1.
    pick_t0 : ndarray (npick,)
        Pick times, s, in (0, t0[-1]].
    pick_v : ndarray (npick,)
        Picked stacking velocities, m/s, > 0.
    pick_sigma : ndarray (npick,)
        Their uncertainties (one standard deviation), m/s, > 0.
    ncmp : int
        Number of CMPs (rows) on the line.
    params : IntervalParams, optional
        Bounds, prior strengths and solver settings (defaults: ``IntervalParams()``).
    cmp_x : ndarray (ncmp,), optional
        Position of each CMP along the line, m, distinct between neighbouring rows. Without it
        the rows are ``params.cmp_spacing`` apart.
    breaks : bool ndarray (ncmp - 1,), optional
        True between rows that are not neighbours (the end of one inline of a 3D grid and the
        start of the next): no lateral smoothing across them, and their positions may repeat.
    trend : (ndarray, ndarray), optional
        The stacking-velocity trend that scales the priors (:func:`trend_knots`); default: from
        these picks.

    Returns
    -------
    RegularisedField
        Interval and predicted stacking velocity on every (CMP, sample), float32, and each
        pick's misfit in units of its sigma. A first-pass field: qualified people must review
        it, and local regulations and licensed practice prevail.

    Raises
    ------
    NoPicksError
        When there is no pick at all (a ValueError and an InputError).
    ValueError
        When the arrays are inconsistent or out of range.

    References
    ----------
    Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
    Koren, Z., and Ravve, I., 2006, Constrained Dix inversion: Geophysics 71(6), R113-R130.
    Hintermueller, M., Ito, K., and Kunisch, K., 2002, The primal-dual active set strategy as
    a semismooth Newton method: SIAM Journal on Optimization 13(3), 865-888.
    """
    params = IntervalParams() if params is None else params
    params.validate()
    t = np.asarray(t0, dtype=np.float64)
    pc = np.asarray(pick_cmp)
    pt = np.asarray(pick_t0, dtype=np.float64)
    pv = np.asarray(pick_v, dtype=np.float64)
    ps = np.asarray(pick_sigma, dtype=np.float64)
    ncmp = int(ncmp)
    if t.ndim != 1 or t.size < 2 or not np.all(np.isfinite(t)) or t[0] < 0 or np.any(np.diff(t) <= 0):
        raise ValueError("t0 must be a 1-D axis of at least 2 finite, strictly increasing times >= 0 s")
    if ncmp < 1:
        raise ValueError(f"ncmp must be at least 1, got {ncmp}")
    if not (pc.shape == pt.shape == pv.shape == ps.shape) or pc.ndim != 1:
        raise ValueError("pick_cmp, pick_t0, pick_v and pick_sigma must be 1-D arrays of one length")
    if pc.size == 0:
        raise NoPicksError("no used pick on the whole line: the regularised interval-velocity field "
                           "needs at least one pick; check the picking thresholds or add picks by hand")
    if not np.issubdtype(pc.dtype, np.integer) or pc.min() < 0 or pc.max() >= ncmp:
        raise ValueError(f"pick_cmp must be integer rows in 0..{ncmp - 1}")
    if not (np.all(np.isfinite(pt)) and pt.min() > 0 and pt.max() <= t[-1]):
        raise ValueError(f"pick times must be in (0, {t[-1]:g}] s, the span of the t0 axis")
    if not (np.all(np.isfinite(pv)) and pv.min() > 0 and np.all(np.isfinite(ps)) and ps.min() > 0):
        raise ValueError("pick velocities and sigmas must be finite and > 0 m/s")
    if cmp_x is None:
        dist = np.full(max(ncmp - 1, 0), float(params.cmp_spacing))
    else:
        xs = np.asarray(cmp_x, dtype=np.float64)
        if xs.shape != (ncmp,) or not np.all(np.isfinite(xs)):
            raise ValueError(f"cmp_x must hold {ncmp} finite positions, m")
        dist = np.abs(np.diff(xs))
    cut = np.zeros(max(ncmp - 1, 0), dtype=bool) if breaks is None else np.asarray(breaks, dtype=bool)
    if cut.shape != (max(ncmp - 1, 0),):
        raise ValueError(f"breaks must hold {max(ncmp - 1, 0)} values, one between each pair of rows")
    dist = np.where(cut, 1.0, dist)
    if np.any(dist <= 0):
        raise ValueError("neighbouring CMPs must have distinct cmp_x positions")

    # cells: (t[j-1], t[j]]; a sample at t = 0 has no width and copies the cell below it
    first = 1 if t[0] == 0.0 else 0
    tc = t[first:]
    dt = np.diff(np.concatenate(([0.0], tc)))
    n = tc.size
    lo, hi = params.vint_min ** 2 * UNIT, params.vint_max ** 2 * UNIT

    order = np.lexsort((pt, pc))
    pc_s, pt_s, pv_s, ps_s = pc[order], pt[order], pv[order], ps[order]
    pcell = np.searchsorted(tc, pt_s, side="left").astype(np.int64)
    top = np.concatenate(([0.0], tc))[pcell]
    palpha = (pt_s - top) / dt[pcell]
    pstart = np.searchsorted(pc_s, np.arange(ncmp + 1), side="left").astype(np.int64)
    b_obs = pt_s * pv_s * pv_s * UNIT
    pw = 1.0 / (2.0 * pt_s * pv_s * ps_s * UNIT) ** 2

    uref = _reference_trend(tc, trend_knots(pt, pv) if trend is None else trend)
    upair = 0.5 * (uref[1:] + uref[:-1])
    gap = 0.5 * (dt[1:] + dt[:-1])                      # s between the cells' centres
    wt = np.empty((ncmp, max(n - 1, 0)))
    wt[:] = (T_REF / gap) / (2.0 * upair * params.time_variation) ** 2
    if n > 1:
        # the boundary nearest each pick may carry a step: t[j-1] or t[j] of the pick's cell
        bnd = np.where(palpha < 0.5, pcell - 1, pcell)
        ok = (bnd >= 0) & (bnd < n - 1)
        step_rows, step_cells = [pc_s[ok]], [bnd[ok]]
        # a CMP without picks may step where its nearest CMPs with picks on either side do
        has = np.flatnonzero(np.diff(pstart) > 0)
        gaps = np.flatnonzero(np.diff(pstart) == 0)
        pos = np.searchsorted(has, gaps)
        for c, k in zip(gaps, pos):
            for src in (has[k - 1] if k > 0 else -1, has[k] if k < has.size else -1):
                if src >= 0:
                    cells = bnd[pstart[src]:pstart[src + 1]]
                    cells = cells[(cells >= 0) & (cells < n - 1)]
                    step_rows.append(np.full(cells.size, c))
                    step_cells.append(cells)
        step_rows, step_cells = np.concatenate(step_rows), np.concatenate(step_cells)
        wt[step_rows, step_cells] = 1.0 / (2.0 * upair[step_cells] * params.step_variation) ** 2
    lat = np.where(cut, 0.0, (X_REF / dist) / params.lateral_variation ** 2)
    cw = (dt / T_REF) / (2.0 * uref) ** 2

    system = _System(dt, pstart, pcell, palpha, pw, wt, lat, cw)
    g = _data_adjoint(ncmp, n, dt, pstart, pcell, palpha, pw * b_obs)
    x = np.empty((ncmp, n))
    x[:] = np.clip(uref, lo, hi)
    x, _, _, total, passes, converged = _solve_bounded(
        system, g, x, lo, hi, params.solver_tolerance, params.solver_iterations)
    del system

    b_samples = np.empty((ncmp, n))
    b_picks = np.empty(pt_s.size)
    _predict(x, dt, pstart, pcell, palpha, b_samples, b_picks)
    vint = np.empty((ncmp, t.size), dtype=np.float32)
    vint[:, first:] = np.sqrt(x / UNIT)
    vrms = np.empty_like(vint)
    vrms[:, first:] = np.sqrt(b_samples / UNIT / tc[None, :])
    if first:
        vint[:, 0] = vint[:, 1]
        vrms[:, 0] = vint[:, 1]     # V(t) -> v_int(0) as t -> 0
    np.clip(vint, np.float32(params.vint_min), np.float32(params.vint_max), out=vint)
    bound = (vint <= np.float32(params.vint_min) * (1 + 1e-6)) | (vint >= np.float32(params.vint_max) * (1 - 1e-6))
    misfit_sorted = (np.sqrt(b_picks / UNIT / pt_s) - pv_s) / ps_s
    misfit = np.empty(pt.size, dtype=np.float32)
    misfit[order] = misfit_sorted
    return RegularisedField(vint=vint, vrms=vrms, misfit=misfit, at_bound=bound, iterations=int(total),
                            passes=passes, converged=bool(converged))


def depth_from_interval(t0: np.ndarray, vint: np.ndarray, dz: float, z: np.ndarray | None = None):
    """Depth, time, interval and average velocity on a regular depth grid.

    Depth below the datum is z(t) = integral of v_int / 2 over two-way time from 0, with the
    interval velocity of sample j taken over (t0[j-1], t0[j]] and the first sample's from time
    zero (:func:`velspec.interval.depth_fields`). The average velocity from the datum to depth z
    is vavg = 2 z / t(z).

    Parameters
    ----------
    t0 : ndarray (nt,)
        Two-way times, s, strictly increasing, >= 0.
    vint : ndarray (nt,) or (ncmp, nt)
        Interval velocity in time, m/s, > 0.
    dz : float
        Depth step, m, > 0.
    z : ndarray (nz,), optional
        The depth axis, m, when a line is converted a block of CMPs at a time (default: from 0 in
        steps of ``dz`` to the deepest depth these CMPs reach).

    Returns
    -------
    z : float64 (nz,)
        Depths from 0 to the deepest any CMP reaches, m.
    t_of_z : float32 (nz,) or (ncmp, nz)
        Two-way time of each depth, s (beyond a CMP's last sample its last velocity continues).
    vint_z : float32, same shape
        Interval velocity at each depth, m/s.
    vavg_z : float32, same shape
        Average velocity from the datum to each depth, m/s (at z = 0, the interval velocity).

    References
    ----------
    Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
    """
    t = np.asarray(t0, dtype=np.float64)
    v = np.asarray(vint, dtype=np.float64)
    single = v.ndim == 1
    v2 = v[None, :] if single else v
    if t.ndim != 1 or v2.ndim != 2 or v2.shape[1] != t.size:
        raise ValueError("vint must have shape (nt,) or (ncmp, nt) matching t0")
    if t.size < 1 or not np.all(np.isfinite(t)) or t[0] < 0 or np.any(np.diff(t) <= 0):
        raise ValueError("t0 must be finite, strictly increasing and >= 0 s")
    if not (np.all(np.isfinite(v2)) and v2.size and v2.min() > 0):
        raise ValueError("interval velocities must be finite and > 0 m/s")
    if not (np.isfinite(dz) and dz > 0):
        raise ValueError(f"dz must be > 0 m, got {dz}")
    z, t_of_z, vint_z = depth_fields(t, v2, float(dz), z=z)
    with np.errstate(divide="ignore", invalid="ignore"):
        vavg = np.where(z[None, :] > 0, 2.0 * z[None, :] / t_of_z.astype(np.float64), vint_z)
    vavg = vavg.astype(np.float32)
    if single:
        return z, t_of_z[0], vint_z[0], vavg[0]
    return z, t_of_z, vint_z, vavg
