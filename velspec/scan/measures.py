"""More coherence kernels: AB semblance, normalised cross-correlation sum, weighted semblance.

Same signature and skeleton as :func:`velspec.scan.kernels.semblance`: parallel over trials
with ``prange`` (each trial is computed by one thread from start to end, so the output bits do
not depend on the thread count), per trial a loop over traces that calls
:func:`velspec.scan.moveout.positions` for the moveout and
:func:`velspec.scan.primitives.interp` for the samples, then a sliding window over t0
(:func:`velspec.scan.primitives.window_ratio`). AB semblance and weighted semblance are one
kernel, :func:`_trend_panel`, with a flag for the weight.

Notation used in the docstrings: a_i(t) is the sample of trace i on the trial moveout at output
time t (linear interpolation), the sums over i run over the N(t) traces live at t (inside the
NMO-stretch mute and the trace), and W(t0) is the window of 2*half+1 output samples centred on
t0 (clipped at the panel ends).
"""

import math

import numpy as np
from numba import njit, prange

from .moveout import positions
from .primitives import interp, window_ratio

# Live traces count as one offset for the A + B*phi fit when the centred sum of phi^2 is below
# this fraction of the sum of phi^2: it is then only float64 rounding of the running sums.
_DEGENERATE = 1e-9


@njit(cache=True, nogil=True)
def _offset_trend(q_unit):
    """phi_i = x_i^2 / max x^2, in 0..1 so the float32 sums of a*phi stay well scaled."""
    qmax = np.float32(0.0)
    for i in range(q_unit.shape[0]):
        qmax = max(qmax, q_unit[i])
    phi = np.zeros(q_unit.shape[0], dtype=np.float32)
    if qmax > 0:
        for i in range(q_unit.shape[0]):
            phi[i] = q_unit[i] / qmax
    return phi


@njit(cache=True, nogil=True)
def _trend_sums(data, q_unit, phi, s2, eta, law, tau2, mute_c, tau_first, sums):
    """Per-sample sums for fits of the NMO-corrected amplitudes by A + B phi_i.

    ``sums`` (6, nt) float64 is filled with, per output sample over the live traces:
    N, sum a, sum a phi, sum a^2, sum phi, sum phi^2.
    """
    ntr, ns = data.shape
    nt = tau2.shape[0]
    last = np.float32(ns - 1)
    pos = np.empty(nt, dtype=np.float32)
    sa = np.zeros(nt, dtype=np.float32)
    sap = np.zeros(nt, dtype=np.float32)
    saa = np.zeros(nt, dtype=np.float32)
    # Difference arrays: the live set changes only at each trace's j0 and j1, so N, sum phi and
    # sum phi^2 over live traces are running sums (float64: they subtract as traces leave).
    live = np.zeros(nt + 1, dtype=np.int32)
    dp = np.zeros(nt + 1)
    dpp = np.zeros(nt + 1)
    for i in range(ntr):
        j0, j1 = positions(law, tau2, q_unit[i] * s2, eta, mute_c, tau_first, last, pos)
        if j1 <= j0:
            continue
        trace = data[i]
        p = phi[i]
        for j in range(j0, j1):
            a = interp(trace, pos[j])
            sa[j] += a
            sap[j] += a * p
            saa[j] += a * a
        live[j0] += 1
        live[j1] -= 1
        dp[j0] += p
        dp[j1] -= p
        dpp[j0] += np.float64(p) * p
        dpp[j1] -= np.float64(p) * p
    n = 0
    sp = 0.0
    spp = 0.0
    for j in range(nt):
        n += live[j]
        sp += dp[j]
        spp += dpp[j]
        sums[0, j] = n
        sums[1, j] = sa[j]
        sums[2, j] = sap[j]
        sums[3, j] = saa[j]
        sums[4, j] = sp
        sums[5, j] = spp


@njit(cache=True, nogil=True)
def _one_offset(n, sp, spp):
    """True when the live traces share one offset: their centred sum of phi^2 is only rounding."""
    vp = spp - sp * sp / n
    return not (vp > _DEGENERATE * spp and vp > 0.0)


@njit(cache=True, nogil=True)
def _ab_energies(sums, fit, energy):
    """Per sample: fitted energy sum_i (A + B phi_i)^2 of the least-squares trend, and energy.

    Both are 0 where the fit has no spare degree of freedom (N not larger than the number of
    fitted coefficients), so those samples count for nothing in the window.
    """
    for j in range(sums.shape[1]):
        fit[j] = 0.0
        energy[j] = 0.0
        n = sums[0, j]
        if n < 2.0:
            continue
        sa = sums[1, j]
        f = sa * sa / n                       # projection on the constant (classic semblance)
        if not _one_offset(n, sums[4, j], sums[5, j]):
            if n < 3.0:
                continue                      # two traces, two coefficients: a perfect fit
            vp = sums[5, j] - sums[4, j] * sums[4, j] / n
            c = sums[2, j] - sums[4, j] * sa / n
            f += c * c / vp                   # plus the projection on the centred phi
        # A projection cannot exceed the energy; float32 sums can by a rounding.
        fit[j] = min(f, sums[3, j])
        energy[j] = sums[3, j]


@njit(cache=True, parallel=True, nogil=True)
def _trend_panel(data, q_unit, trials, law, tau2, mute_c, tau_first, half, weighted):
    """AB semblance panel, or with ``weighted`` the weighted semblance panel (one body)."""
    nt = tau2.shape[0]
    out = np.empty((trials.shape[0], nt), dtype=np.float32)
    phi = _offset_trend(q_unit)
    for m in prange(trials.shape[0]):
        sums = np.empty((6, nt))
        _trend_sums(data, q_unit, phi, trials[m, 0], trials[m, 1], law, tau2, mute_c,
                    tau_first, sums)
        fit = np.empty(nt)
        energy = np.empty(nt)
        _ab_energies(sums, fit, energy)
        if weighted:
            for j in range(nt):
                if energy[j] > 0.0:
                    fit[j] = fit[j] * fit[j] / energy[j]
        window_ratio(fit, energy, half, out[m])
    return out


def ab_semblance(data, q_unit, trials, law, tau2, mute_c, tau_first, half):
    """AB semblance panel of one gather: coherence that allows amplitude to vary with offset.

    At every output sample t the NMO-corrected amplitudes are fitted by least squares with the
    two-term trend a_i(t) ~ A(t) + B(t) phi_i, phi_i = x_i^2 (the lowest even power of offset:
    the small-angle form of the A + B sin^2(theta) reflectivity trend, since sin^2(theta) is
    about x^2 / (v^2 t0^2) at one t0). Then

        S_AB(t0) = sum_{t in W} sum_i (A(t) + B(t) phi_i)^2  /  sum_{t in W} sum_i a_i(t)^2.

    The fitted energy is the projection of the amplitude vector on span{1, phi}, written as the
    sum of two orthogonal parts so that only per-sample sums are needed:

        sum_i (A + B phi_i)^2 = (sum a)^2 / N + (sum a phi - sum phi sum a / N)^2
                                                  / (sum phi^2 - (sum phi)^2 / N).

    The sums of phi and phi^2 run over the traces live at t, which change with t0 under the
    stretch mute. Where all live traces share one offset the centred sum of phi^2 vanishes, the
    trend cannot be told from the constant and only the first term is kept: S_AB is then classic
    semblance. Samples contribute only when N exceeds the number of fitted coefficients (N >= 3,
    or N >= 2 in the one-offset case). Values lie in 0..1; S_AB >= semblance on the same data.

    On independent, identically distributed Gaussian traces the fitted energy is a projection
    on a 2-dimensional subspace of the N-dimensional sample vector, so its ratio to the total
    energy has expectation exactly 2/N (against 1/N for semblance).

    Parameters
    ----------
    data : float32 (ntr, ns)
        Traces.
    q_unit : float32 (ntr,)
        x^2 / dt^2 for each trace; times the trial slowness squared it is the moveout term q.
        phi is taken as q_unit / max(q_unit), which spans the same trend as x^2.
    trials : float32 (ntrial, 2)
        (1 / v^2, eta) of each trial.
    law : int
        Moveout law (see :mod:`velspec.scan.moveout`).
    tau2 : float32 (nt,)
        (t0 / dt)^2 of each output sample, -1 where t0 <= 0.
    mute_c : float32
        (1 + stretch_limit)^2 - 1.
    tau_first : float32
        t_first / dt.
    half : int
        Half window length in samples.

    Returns
    -------
    float32 (ntrial, nt)

    References
    ----------
    Sarkar, D., Baumel, R. T., and Larner, K. L., 2002, Velocity analysis in the presence of
    amplitude variation: Geophysics 67, 1664-1672.
    Fomel, S., 2009, Velocity analysis using AB semblance: Geophysical Prospecting 57, 311-321.
    """
    return _trend_panel(data, q_unit, trials, law, tau2, mute_c, tau_first, half, False)


def weighted_semblance(data, q_unit, trials, law, tau2, mute_c, tau_first, half):
    """Weighted semblance panel of one gather: AB semblance with each sample weighted by its fit.

    What is implemented (our reading of the weighted semblance of Luo & Hale, 2012, from memory
    of the published method, not checked against the paper's equations): the per-sample
    least-squares trend A(t) + B(t) phi_i of :func:`ab_semblance` (phi_i = x_i^2), with fitted
    energy F(t) = sum_i (A + B phi_i)^2 and energy E(t) = sum_i a_i^2. Each sample of the window
    is weighted by how well the trend explains it, w(t) = 1 - r(t) = F(t) / E(t), r(t) being the
    normalised least-squares residual at t:

        S_w(t0) = sum_{t in W} w(t) F(t) / sum_{t in W} E(t)
                = sum_{t in W} F(t)^2 / E(t)  /  sum_{t in W} E(t).

    At the right moveout the trend fits every sample of the wavelet (w near 1) and S_w stays
    near S_AB; at a wrong one the residual moveout leaves a residual that the weight counts a
    second time, which narrows the peak along velocity compared with AB semblance. Amplitude
    that varies with offset, polarity reversal included, is fitted by the trend as in AB
    semblance. Values lie in 0..1 and S_w <= S_AB. On our flat-amplitude tests the peak is
    narrower than that of AB semblance but wider than that of classic semblance. The samples
    left out of AB semblance (too few live traces) are left out here too.

    Parameters
    ----------
    data : float32 (ntr, ns)
        Traces.
    q_unit : float32 (ntr,)
        x^2 / dt^2 for each trace; phi = q_unit / max(q_unit).
    trials : float32 (ntrial, 2)
        (1 / v^2, eta) of each trial.
    law : int
        Moveout law (see :mod:`velspec.scan.moveout`).
    tau2 : float32 (nt,)
        (t0 / dt)^2 of each output sample, -1 where t0 <= 0.
    mute_c : float32
        (1 + stretch_limit)^2 - 1.
    tau_first : float32
        t_first / dt.
    half : int
        Half window length in samples.

    Returns
    -------
    float32 (ntrial, nt)

    References
    ----------
    Luo, S., and Hale, D., 2012, Velocity analysis using weighted semblance: Geophysics 77(2),
    U15-U22.
    Fomel, S., 2009, Velocity analysis using AB semblance: Geophysical Prospecting 57, 311-321.
    """
    return _trend_panel(data, q_unit, trials, law, tau2, mute_c, tau_first, half, True)


@njit(cache=True, parallel=True, nogil=True)
def crosscorrelation_sum(data, q_unit, trials, law, tau2, mute_c, tau_first, half):
    """Normalised cross-correlation sum panel of one gather.

    The mean over trace pairs of the zero-lag windowed cross-correlation, each normalised by the
    geometric mean of the two traces' windowed energies:

        C(t0) = 2 / (M (M - 1)) sum_{i<k} sum_{t in W} a_i a_k
                                          / sqrt(sum_{t in W} a_i^2  sum_{t in W} a_k^2).

    With b_i(t) = a_i(t) / sqrt(sum_{t in W} a_i^2) each trace has unit energy over the window,
    so the pair sum is ((sum_W (sum_i b_i)^2) - M) / 2 and

        C(t0) = (sum_{t in W} (sum_i b_i(t))^2 - M) / (M (M - 1)),

    which costs O(M W) per t0 instead of O(M^2 W). The M traces taking part at t0 are those
    live at t0 with nonzero energy over the window (dead traces are left out); their samples
    in the window that the stretch mute removes count as zero. C = 0 where M < 2.

    C is not bounded below by 0: Cauchy-Schwarz gives C <= 1 (equal to 1 for traces identical
    up to a positive scale), and sum_W (sum_i b_i)^2 >= 0 gives C >= -1 / (M - 1). On
    independent traces its expectation is 0 (each pair correlation has mean 0).

    Parameters
    ----------
    data : float32 (ntr, ns)
        Traces.
    q_unit : float32 (ntr,)
        x^2 / dt^2 for each trace.
    trials : float32 (ntrial, 2)
        (1 / v^2, eta) of each trial.
    law : int
        Moveout law (see :mod:`velspec.scan.moveout`).
    tau2 : float32 (nt,)
        (t0 / dt)^2 of each output sample, -1 where t0 <= 0.
    mute_c : float32
        (1 + stretch_limit)^2 - 1.
    tau_first : float32
        t_first / dt.
    half : int
        Half window length in samples.

    Returns
    -------
    float32 (ntrial, nt)

    References
    ----------
    Neidell, N. S., and Taner, M. T., 1971, Semblance and other coherency measures for
    multichannel data: Geophysics 36, 482-497.
    """
    ntr, ns = data.shape
    nt = tau2.shape[0]
    out = np.empty((trials.shape[0], nt), dtype=np.float32)
    last = np.float32(ns - 1)
    for m in prange(trials.shape[0]):
        pos = np.empty(nt, dtype=np.float32)
        corrected = np.zeros((ntr, nt), dtype=np.float32)
        # Per-trace prefix sums of a^2 give every window energy in O(1).
        cum = np.zeros((ntr, nt + 1))
        lo_live = np.zeros(ntr, dtype=np.int64)
        hi_live = np.zeros(ntr, dtype=np.int64)
        acc = np.empty(2 * half + 1)
        s2 = trials[m, 0]
        eta = trials[m, 1]
        for i in range(ntr):
            j0, j1 = positions(law, tau2, q_unit[i] * s2, eta, mute_c, tau_first, last, pos)
            if j1 <= j0:
                continue
            lo_live[i] = j0
            hi_live[i] = j1
            trace = data[i]
            row = corrected[i]
            for j in range(j0, j1):
                row[j] = interp(trace, pos[j])
            c = cum[i]
            for j in range(nt):
                a = np.float64(row[j])
                c[j + 1] = c[j] + a * a
        for j in range(nt):
            lo = max(j - half, 0)
            hi = min(j + half + 1, nt)
            for k in range(hi - lo):
                acc[k] = 0.0
            mcount = 0
            for i in range(ntr):
                if j < lo_live[i] or j >= hi_live[i]:
                    continue
                e = cum[i, hi] - cum[i, lo]
                if e <= 0.0:
                    continue
                mcount += 1
                w = 1.0 / math.sqrt(e)      # float64: a near-silent trace has a huge weight
                row = corrected[i]
                for k in range(hi - lo):
                    acc[k] += row[lo + k] * w
            if mcount < 2:
                out[m, j] = 0.0
                continue
            total = 0.0
            for k in range(hi - lo):
                total += acc[k] * acc[k]
            out[m, j] = np.float32((total - mcount) / (mcount * (mcount - 1.0)))
    return out
