"""A cross-check of coherence picks by another route: the t^2-x^2 method.

A coherence pick (t0, V) says where a reflection's hyperbola lies. This module measures, on each
trace that passes the same stretch mute, the time at which that event actually arrives, from the
trace's own extremum near the pick's hyperbola and without any coherence measure, and fits a
straight line t^2 = t0^2 + x^2 / V^2 through those times by least squares (Green, 1938). For a
strong isolated event the two velocities should agree to within about a percent; a larger
difference marks a pick worth a second look.

Everything is in SI units: seconds, metres, metres per second.

References
----------
Green, C. H., 1938, Velocity determinations by means of reflection profiles: Geophysics 3,
295-305 (the t^2-x^2 method).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .io.segy import open_line
from .params import ReadParams

__all__ = ["Tx2Fit", "LineCrosscheck", "tx2_velocity", "select_isolated", "crosscheck_line"]

MIN_TRACES = 3  # a line through t^2-x^2 needs two points; a third gives a residual at all
_MAD_TO_SIGMA = 1.4826  # standard deviation of Gaussian noise per median absolute deviation


@dataclass(frozen=True)
class Tx2Fit:
    """The t^2-x^2 line through one event's measured arrival times.

    Attributes
    ----------
    velocity : float
        V of the fitted line t^2 = t0^2 + x^2 / V^2, m/s.
    t0 : float
        Zero-offset time of the fitted line, s.
    times : ndarray, float64 (n,)
        Measured arrival time on each trace used, s.
    offsets : ndarray, float64 (n,)
        Absolute offset of each trace used, m, in the order of the gather.
    ntraces : int
        Traces used in the fit (n).
    rms_residual : float
        RMS of the measured times minus the fitted hyperbola sqrt(t0^2 + x^2 / V^2), s.
    polarity : int
        +1 when the event is a peak (positive central lobe), -1 when a trough.
    """

    velocity: float
    t0: float
    times: np.ndarray
    offsets: np.ndarray
    ntraces: int
    rms_residual: float
    polarity: int


@dataclass(frozen=True)
class LineCrosscheck:
    """Coherence picks of a line beside their t^2-x^2 velocities, one entry per checked pick.

    Attributes
    ----------
    cmp : ndarray, int64 (m,)
        CMP number.
    t0 : ndarray, float64 (m,)
        Pick time, s.
    pick_velocity : ndarray, float64 (m,)
        Stacking velocity of the coherence pick, m/s.
    tx2_velocity : ndarray, float64 (m,)
        Velocity of the t^2-x^2 line, m/s; NaN where the measurement failed.
    relative_difference : ndarray, float64 (m,)
        (tx2_velocity - pick_velocity) / pick_velocity, dimensionless; NaN where it failed.
    ntraces : ndarray, int64 (m,)
        Traces used in each fit, 0 where it failed.
    coherence : ndarray, float64 (m,)
        Coherence of the pick.
    failures : tuple of str
        One message per failed measurement, naming the CMP and t0.
    """

    cmp: np.ndarray
    t0: np.ndarray
    pick_velocity: np.ndarray
    tx2_velocity: np.ndarray
    relative_difference: np.ndarray
    ntraces: np.ndarray
    coherence: np.ndarray
    failures: tuple[str, ...] = ()


def _line_fit(x2: np.ndarray, t2: np.ndarray) -> tuple[float, float]:
    """Intercept and slope of the least-squares line t2 = a + b x2."""
    mx, my = x2.mean(), t2.mean()
    dx = x2 - mx
    sxx = float(np.dot(dx, dx))
    if sxx <= 1e-12 * max(mx * mx, 1.0):
        raise ValueError("t^2-x^2 fit: the traces used all have the same offset; no slope can be fitted")
    b = float(np.dot(dx, t2 - my)) / sxx
    return float(my - b * mx), b


def tx2_velocity(data: np.ndarray, offsets: np.ndarray, dt: float, t_first: float, t0: float,
                 velocity: float, stretch_limit: float, *, half_window: float = 0.024,
                 min_snr: float = 3.0, max_rival: float = 0.7, outlier: float = 4.0) -> Tx2Fit:
    """Velocity of the least-squares t^2-x^2 line through one event's arrival times (Green, 1938).

    Starting from a coherence pick (t0, velocity), the event's arrival time is measured on each
    trace that passes the stretch mute, as the sample-refined extremum of the trace (of the
    event's polarity) within ``half_window`` of the pick's hyperbola sqrt(t0^2 + x^2/v^2).
    Unreliable arrivals are dropped (rules below) and the line t^2 = T0^2 + x^2 / V^2 is fitted to
    the rest by unweighted least squares in t^2 and x^2.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces of one CMP gather.
    offsets : ndarray (ntr,)
        Source-receiver offsets, m (sign ignored).
    dt : float
        Sample interval, s.
    t_first : float
        Time of the first sample, s.
    t0 : float
        Zero-offset time of the coherence pick, s (> 0).
    velocity : float
        Stacking velocity of the coherence pick, m/s (> 0).
    stretch_limit : float
        The scan's NMO-stretch limit s: a trace takes part when
        x <= velocity * t0 * sqrt((1 + s)^2 - 1), the mute rule of :mod:`velspec.scan.moveout`.
    half_window : float
        Half length of the search window about the pick's hyperbola, s (default 0.024). It must
        hold the event's central lobe wherever the pick's velocity misplaces it, and should be
        shorter than the time to the next event.
    min_snr : float
        Smallest ratio of the arrival's peak amplitude to the trace's noise level (default 3).
    max_rival : float
        Largest ratio of the second-strongest extremum of the same sign in the window to the
        strongest one (default 0.7).
    outlier : float
        After the fit, the trace with the largest time residual is dropped and the line refitted
        while that residual exceeds ``outlier`` robust standard deviations of the residuals and
        one sample (default 4). 0 or inf keeps every measured trace.

    Returns
    -------
    Tx2Fit

    Raises
    ------
    ValueError
        When the inputs are malformed, fewer than 3 traces keep a reliable arrival, or the fitted
        slope 1/V^2 or intercept T0^2 is not positive.

    Notes
    -----
    Polarity: the sign of the sum, over the muted traces, of each trace's largest-magnitude sample
    in its window; a zero-phase wavelet's central lobe outweighs its side lobes, so this needs no
    alignment of the traces and either polarity is found.

    A trace's arrival is dropped as unreliable when

    * its window runs off the end of the trace;
    * the largest sample of the event's polarity in the window is not a local extremum inside
      it (the true peak lies outside the window, or there is none);
    * that extremum is weaker than ``min_snr`` times the trace's noise level, estimated as
      1.4826 times the median absolute deviation of the whole trace (reflections fill few
      samples of a trace, so the median sees mostly noise);
    * another local extremum of the same sign in the window reaches ``max_rival`` times it
      (two candidate arrivals: which one is the event is ambiguous);
    * it is a time outlier of the fit (``outlier`` above).

    The arrival time is refined to a fraction of a sample by the vertex of the parabola through
    the extremum and its two neighbours.

    References
    ----------
    Green, C. H., 1938, Velocity determinations by means of reflection profiles: Geophysics 3,
    295-305.
    """
    data = np.asarray(data, dtype=np.float64)
    if data.ndim != 2:
        raise ValueError(f"data must be a 2-D array (traces, samples), got shape {data.shape}")
    ntr, ns = data.shape
    x = np.abs(np.asarray(offsets, dtype=np.float64))
    if x.shape != (ntr,):
        raise ValueError(f"offsets must hold one value per trace ({ntr}), got shape {x.shape}")
    for name, value in (("dt", dt), ("t0", t0), ("velocity", velocity), ("stretch_limit", stretch_limit),
                        ("half_window", half_window)):
        if not (np.isfinite(value) and value > 0):
            raise ValueError(f"{name} must be finite and > 0, got {value!r}")
    if ns < 3:
        raise ValueError("traces need at least three samples")

    reach = velocity * t0 * np.sqrt((1.0 + stretch_limit) ** 2 - 1.0)
    predicted = np.sqrt(t0 * t0 + (x / velocity) ** 2)
    centre = (predicted - t_first) / dt           # fractional sample index of the pick's hyperbola
    half = half_window / dt
    lo = np.floor(centre - half).astype(np.int64)
    hi = np.ceil(centre + half).astype(np.int64)
    muted = (x <= reach) & (lo >= 0) & (hi <= ns - 1)
    rows = np.flatnonzero(muted)
    if rows.size < MIN_TRACES:
        raise ValueError(f"t^2-x^2 fit at t0 = {t0:.3f} s: only {rows.size} trace(s) pass the stretch mute "
                         f"with their window inside the trace; at least {MIN_TRACES} are needed")

    windows = [data[i, lo[i]: hi[i] + 1] for i in rows]
    # Each trace votes with its largest-magnitude sample: central lobes outweigh side lobes.
    vote = sum(float(w[np.argmax(np.abs(w))]) for w in windows)
    polarity = 1 if vote >= 0 else -1

    times, used = [], []
    for i, w in zip(rows, windows):
        s = polarity * w
        inner = np.arange(1, s.size - 1)
        peaks = inner[(s[inner] >= s[inner - 1]) & (s[inner] > s[inner + 1])]
        if peaks.size == 0:
            continue
        best = int(peaks[np.argmax(s[peaks])])
        if s[best] < s.max():
            continue    # the strongest sample sits on the window's edge: the true peak is outside
        trace = data[i]
        noise = _MAD_TO_SIGMA * float(np.median(np.abs(trace - np.median(trace))))
        if s[best] <= 0 or s[best] < min_snr * noise:
            continue
        rivals = s[peaks[peaks != best]]
        if rivals.size and rivals.max() >= max_rival * s[best]:
            continue
        a, b, c = s[best - 1], s[best], s[best + 1]
        curv = a - 2.0 * b + c
        shift = 0.5 * (a - c) / curv if curv < 0 else 0.0
        times.append(t_first + (lo[i] + best + float(np.clip(shift, -0.5, 0.5))) * dt)
        used.append(i)
    times = np.asarray(times, dtype=np.float64)
    used = np.asarray(used, dtype=np.int64)
    if used.size < MIN_TRACES:
        raise ValueError(f"t^2-x^2 fit at t0 = {t0:.3f} s: only {used.size} of {rows.size} muted trace(s) "
                         f"have a reliable arrival; at least {MIN_TRACES} are needed")

    keep = np.ones(used.size, dtype=bool)
    while True:
        a0, slope = _line_fit(x[used[keep]] ** 2, times[keep] ** 2)
        if not (slope > 0):
            raise ValueError(f"t^2-x^2 fit at t0 = {t0:.3f} s: fitted slope 1/V^2 = {slope:.3g} s^2/m^2 is not "
                             "positive; the arrivals do not describe a reflection hyperbola")
        if not (a0 > 0):
            raise ValueError(f"t^2-x^2 fit at t0 = {t0:.3f} s: fitted intercept t0^2 = {a0:.3g} s^2 is not "
                             "positive")
        resid = times - np.sqrt(a0 + slope * x[used] ** 2)
        if not (0 < outlier < np.inf) or keep.sum() <= MIN_TRACES:
            break
        r = resid[keep]
        sigma = _MAD_TO_SIGMA * float(np.median(np.abs(r - np.median(r))))
        worst = int(np.flatnonzero(keep)[np.argmax(np.abs(r))])
        if abs(resid[worst]) <= max(outlier * sigma, dt):
            break
        keep[worst] = False     # one at a time: a bad trace inflates the residuals of the rest
    r = resid[keep]
    return Tx2Fit(velocity=float(1.0 / np.sqrt(slope)), t0=float(np.sqrt(a0)), times=times[keep],
                  offsets=x[used[keep]], ntraces=int(keep.sum()), rms_residual=float(np.sqrt(np.mean(r * r))),
                  polarity=polarity)


def select_isolated(cmp: np.ndarray, t0: np.ndarray, coherence: np.ndarray, min_coherence: float = 0.5,
                    min_gap: float = 0.15) -> np.ndarray:
    """Mask of the strong, isolated picks.

    Parameters
    ----------
    cmp, t0, coherence : ndarray (npick,)
        CMP number, time (s) and coherence of each pick.
    min_coherence : float
        Smallest coherence of a strong pick (default 0.5).
    min_gap : float
        A pick is isolated when no other pick of its CMP lies within this time of it, s
        (default 0.15).

    Returns
    -------
    ndarray of bool (npick,)
    """
    cmp = np.asarray(cmp)
    t0 = np.asarray(t0, dtype=np.float64)
    coherence = np.asarray(coherence, dtype=np.float64)
    isolated = np.ones(t0.size, dtype=bool)
    for c in np.unique(cmp):
        idx = np.flatnonzero(cmp == c)
        order = idx[np.argsort(t0[idx], kind="stable")]
        gaps = np.diff(t0[order])
        close = gaps < min_gap
        isolated[order[1:][close]] = False
        isolated[order[:-1][close]] = False
    return isolated & (coherence >= min_coherence)


def _pick_columns(picks) -> tuple[np.ndarray, ...]:
    """(cmp, t0, vrms, coherence) of the used picks of a result or a pick table."""
    from .flags import used_mask

    table = getattr(picks, "picks", picks)
    names = getattr(getattr(table, "dtype", None), "names", None) or ()
    if not all(k in names for k in ("cmp", "t0", "vrms", "coherence", "flags")):
        raise ValueError("picks must be a LineAnalysis or its pick table (velspec.result.PICK_DTYPE)")
    # likely multiples and rejected picks are in the table too, flagged: check only the used
    table = table[used_mask(table["flags"])]
    return (table["cmp"].astype(np.int64), table["t0"].astype(np.float64), table["vrms"].astype(np.float64),
            table["coherence"].astype(np.float64))


def crosscheck_line(line_path: str | Path, picks, stretch_limit: float | None = None,
                    read_params: ReadParams | None = None, *, min_coherence: float = 0.5, min_gap: float = 0.15,
                    **fit_options) -> LineCrosscheck:
    """The t^2-x^2 velocity of every strong, isolated coherence pick of a line.

    The line is read one CMP gather at a time, only the CMPs that hold a selected pick.

    Parameters
    ----------
    line_path : str or Path
        The prestack SEG-Y line the picks were made on.
    picks : LineAnalysis or pick table
        A result of ``velspec.run_line`` (or read from its file), or its pick table; only the
        used picks count.
    stretch_limit : float, optional
        The run's stretch limit; default the result's own (``scan.stretch_limit``), or 0.5
        for a bare pick table.
    read_params : ReadParams, optional
        The run's read parameters; default the result's own, or ``ReadParams()``.
    min_coherence, min_gap : float
        Selection of strong, isolated picks, see :func:`select_isolated`.
    **fit_options
        Passed to :func:`tx2_velocity` (``half_window``, ``min_snr``, ``max_rival``, ``outlier``).

    Returns
    -------
    LineCrosscheck
        One entry per selected pick, in CMP then time order. A pick whose measurement fails
        (too few reliable traces, no positive slope) has NaN velocity and 0 traces, and a message
        in ``failures``.

    Raises
    ------
    ValueError
        Malformed picks, or a selected pick's CMP is not in the line.

    References
    ----------
    Green, C. H., 1938, Velocity determinations by means of reflection profiles: Geophysics 3,
    295-305.
    """
    if hasattr(picks, "params"):
        run = picks.params
        stretch_limit = run.scan.stretch_limit if stretch_limit is None else stretch_limit
        read_params = run.read if read_params is None else read_params
    stretch_limit = 0.5 if stretch_limit is None else stretch_limit
    cmp, t0, vrms, coh = _pick_columns(picks)
    sel = np.flatnonzero(select_isolated(cmp, t0, coh, min_coherence, min_gap))
    sel = sel[np.lexsort((t0[sel], cmp[sel]))]
    vtx = np.full(sel.size, np.nan)
    ntr = np.zeros(sel.size, dtype=np.int64)
    failures = []
    with open_line(line_path, read_params) as line:
        times = line.times
        numbers = line.index.cmp
        for c in np.unique(cmp[sel]):
            k = int(np.searchsorted(numbers, c))
            if k >= numbers.size or numbers[k] != c:
                raise ValueError(f"{line_path}: CMP {c} of the picks is not in the line")
            gather = line.read_gather(k)    # one gather in memory at a time
            for j in np.flatnonzero(cmp[sel] == c):
                p = sel[j]
                try:
                    fit = tx2_velocity(gather.data, gather.offsets, line.dt, float(times[0]), t0[p], vrms[p],
                                       stretch_limit, **fit_options)
                except ValueError as err:
                    failures.append(f"CMP {c}: {err}")
                    continue
                vtx[j], ntr[j] = fit.velocity, fit.ntraces
    vpick = vrms[sel]
    return LineCrosscheck(cmp=cmp[sel], t0=t0[sel], pick_velocity=vpick, tx2_velocity=vtx,
                          relative_difference=(vtx - vpick) / vpick, ntraces=ntr, coherence=coh[sel],
                          failures=tuple(failures))
