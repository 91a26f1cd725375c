"""Moveout laws: where, in a trace, the event of a trial (velocity, eta) at each t0 lies.

A law is one small numba function that fills the fractional sample position of every t0 sample
for one trace and one trial, and returns the live span [j0, j1) that survives the NMO-stretch
mute and the end of the trace. Coherence kernels call :func:`positions` and never look inside,
so a new law is one branch here and one name in :data:`LAWS`. The semblance kernel evaluates
the hyperbolic law itself, a vector block of t0 samples at a time, with exactly the float32 operations of
:func:`positions` (sqrt(tau^2 + q) - t_first / dt) over the span of :func:`hyperbolic_span`.

Times are handled in sample units: tau = t0 / dt, q = x^2 / (v^2 dt^2), so the hyperbola is
pos = sqrt(tau^2 + q) - t_first / dt, a form that vectorises.

References
----------
Taner, M. T., and Koehler, F., 1969, Velocity spectra: digital computer derivation and
applications of velocity functions: Geophysics 34, 859-881 (hyperbolic moveout).
Alkhalifah, T., and Tsvankin, I., 1995, Velocity analysis for transversely isotropic media:
Geophysics 60, 1550-1566 (nonhyperbolic moveout with the anellipticity eta).
"""

import math

import numpy as np
from numba import njit

HYPERBOLIC = 0
NONHYPERBOLIC = 1
LAWS = {"hyperbolic": HYPERBOLIC, "nonhyperbolic": NONHYPERBOLIC}

_WALK = 4  # steps tried from the guessed index before falling back to binary search


@njit(cache=True, nogil=True, inline="always")
def guessed_search(tau2, v, tau_first, right):
    """np.searchsorted(tau2, v, side) for the sorted tau2 = (tau_first + j)^2 of the kernels.

    The index is guessed from that form and checked against tau2 itself, so the answer is the
    binary search's for any sorted tau2; the guess only saves the ~11 mispredicted branches.
    """
    nt = tau2.shape[0]
    g = math.sqrt(max(v, np.float32(0.0))) - tau_first
    j = 0 if not g > 0 else (nt if g >= nt else int(g))
    for _ in range(_WALK):
        if j > 0 and (tau2[j - 1] > v if right else tau2[j - 1] >= v):
            j -= 1
        elif j < nt and (tau2[j] <= v if right else tau2[j] < v):
            j += 1
        else:
            return j
    return np.searchsorted(tau2, v, side="right") if right else np.searchsorted(tau2, v)


@njit(cache=True, nogil=True, inline="always")
def hyperbolic_span(tau2, q, mute_c, tau_first, last):
    """The live span [j0, j1) of :func:`positions` for the hyperbolic law, without positions.

    Same arguments as :func:`positions`. Empty when j0 >= j1.
    """
    # tau2 is non-decreasing (t0 <= 0 marked -1), NMO stretch (t - t0)/t0 falls as t0 grows and
    # arrival time grows with t0, so the live samples form one span found by searching tau2.
    j0 = guessed_search(tau2, max(q / mute_c, np.float32(1e-30)), tau_first, False)
    reach = (last + tau_first) * (last + tau_first) - q
    j1 = guessed_search(tau2, reach, tau_first, True)
    # Float32 rounding may push the last position a hair past the end; drop it.
    while j1 > j0 and math.sqrt(tau2[j1 - 1] + q) - tau_first > last:
        j1 -= 1
    return j0, j1


@njit(cache=True, nogil=True, inline="always")
def positions(law, tau2, q, eta, mute_c, tau_first, last, pos):
    """Fill ``pos[j]`` (fractional sample index in the trace) for the live t0 samples.

    Parameters
    ----------
    law : int
        HYPERBOLIC or NONHYPERBOLIC.
    tau2 : float32 (nt,)
        (t0 / dt)^2 for every output sample; t0 <= 0 is marked by a negative value.
    q : float32
        x^2 / (v^2 dt^2) for this trace and trial velocity.
    eta : float32
        Anellipticity (ignored by the hyperbolic law).
    mute_c : float32
        (1 + stretch_limit)^2 - 1: a sample is live when x^2/v^2 <= mute_c * t0^2.
    tau_first : float32
        t_first / dt, the trace's time zero in samples.
    last : float32
        Largest usable position (nsamples - 1; linear interpolation reads pos and pos + 1).
    pos : float32 (nt,)
        Output; only [j0, j1) is written.

    Returns
    -------
    j0, j1 : int
        The live span. Empty when j0 >= j1.
    """
    nt = tau2.shape[0]
    if law == HYPERBOLIC:
        j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
        # Unsigned indices: no negative-index wraparound, so the loop vectorises (vsqrtps).
        for j in range(np.uint64(max(j0, 0)), np.uint64(max(j1, 0))):
            pos[j] = math.sqrt(tau2[j] + q) - tau_first
        return j0, j1
    j0 = guessed_search(tau2, max(q / mute_c, np.float32(1e-30)), tau_first, False)
    twoeta = np.float32(2.0) * eta
    q2 = q * q
    j1 = j0
    while j1 < nt:
        t2 = tau2[j1] + q - twoeta * q2 / (tau2[j1] + (np.float32(1.0) + twoeta) * q)
        p = math.sqrt(t2) - tau_first
        if p > last:
            break
        pos[j1] = p
        j1 += 1
    return j0, j1
