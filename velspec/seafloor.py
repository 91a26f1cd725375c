"""The sea floor from the data: its two-way time at each CMP, found on the near offsets.

The sea-floor reflection is the one event whose moveout is known before any velocity analysis:
its ray runs through the water alone, so its times lie exactly on the hyperbola
t^2 = t0^2 + x^2 / v_w^2 of the water velocity. On the nearest traces of a gather (where it is
recorded before its critical angle and before the direct wave swamps it), the sea floor is the
first strong event whose coherence peaks at the water velocity. A land line has none: its first
events are faster than water, and the time is NaN.

The time per CMP is then made consistent along the line (a running median of the CMPs where it
was found, outliers replaced by it), and used to predict the water-layer multiples: the
reverberations at (m + 1) t_wb and the peg-legs t_p + j t_wb of every primary.

References
----------
Sheriff, R. E., and Geldart, L. P., 1995, Exploration Seismology, 2nd ed.: Cambridge University
Press (the sea-floor reflection, water-layer reverberations and peg-legs).
Neidell, N. S., and Taner, M. T., 1971, Semblance and other coherency measures for multichannel
data: Geophysics 36, 482-497 (semblance).
"""

from __future__ import annotations

import numpy as np
from scipy.signal import hilbert

NEAR_TRACES = 12        # nearest traces used: the sea floor is recorded best before its critical angle
MAX_TIME = 0.8          # s two-way: about 600 m of water
MIN_TIME = 0.03         # s: about 22 m of water; shallower seas hide under the direct wave
VELOCITY_SPAN = 0.08    # trial velocities within +-8 % of the water velocity
VELOCITY_MATCH = 0.04   # the event's best velocity within 4 % of the water velocity
MIN_SEMBLANCE = 0.4     # coherence of a clear reflection on a dozen traces
MIN_STRENGTH = 0.25     # stack amplitude relative to the strongest event in the search window
WINDOW = 0.016          # s, semblance window
EVENT_REACH = 0.04      # s: the event's centre lies within this of its first coherent lobe
APERTURE = np.radians(55.0)  # incidence angle in the water within which the traces are used
MIN_TRACES_VELOCITY = 4      # traces that must see the sea floor for its velocity to be measured


def water_bottom_time(data: np.ndarray, offsets: np.ndarray, dt: float, t_first: float,
                      water_velocity: float = 1500.0) -> tuple[float, float, float]:
    """Two-way time of the sea floor in one CMP gather, its velocity and its semblance.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces of the gather (the nearest :data:`NEAR_TRACES` by offset are used).
    offsets : ndarray (ntr,)
        Offsets, m.
    dt, t_first : float
        Sample interval and time of the first sample, s.
    water_velocity : float
        Expected water velocity, m/s (default 1500).

    Returns
    -------
    t_wb : float
        The first t0 between :data:`MIN_TIME` and :data:`MAX_TIME` where the coherence over
        trial velocities within +-8 % of ``water_velocity`` has a local maximum of at least
        :data:`MIN_SEMBLANCE` at a velocity within 4 % of it, with a stack at least
        :data:`MIN_STRENGTH` of the strongest in the window, moved to the peak of the stack's
        envelope (semblance is as high on a wavelet's side lobe as on its centre); NaN when
        there is none.
    velocity : float
        The velocity of that event's hyperbola, m/s, refined by a parabola through the trial
        velocities; ``water_velocity`` when fewer than :data:`MIN_TRACES_VELOCITY` traces see
        it (NaN when there is no event).
    semblance : float
        Its coherence (0 when none).
    """
    none = (float("nan"), float("nan"), 0.0)
    data = np.asarray(data, dtype=np.float64)
    x = np.abs(np.asarray(offsets, dtype=np.float64))
    order = np.argsort(x, kind="stable")[:NEAR_TRACES]
    data, x = data[order], x[order]
    ntr, ns = data.shape
    if ntr < 3:
        return none
    t = t_first + dt * np.arange(ns)
    t0 = t[(t >= MIN_TIME) & (t <= MAX_TIME)]
    if t0.size < 3:
        return none
    vels = water_velocity * np.linspace(1.0 - VELOCITY_SPAN, 1.0 + VELOCITY_SPAN, 17)
    half = max(int(round(0.5 * WINDOW / dt)), 1)
    box = np.ones(2 * half + 1)
    # the sea floor is seen before its critical angle: at each t0 only the traces within
    # APERTURE of the vertical take part (at least two)
    reach = np.maximum(np.tan(APERTURE) * water_velocity * t0, x[min(1, ntr - 1)])
    inside = x[:, None] <= reach[None, :]
    sem = np.zeros((vels.size, t0.size))
    amp = np.zeros(t0.size)
    live = np.maximum(inside.sum(axis=0), 1)
    # every trial velocity and trace at once: fractional sample positions into the flat traces
    times = np.sqrt(t0[None, None, :] ** 2 + (x[None, :, None] / vels[:, None, None]) ** 2)
    pos = np.clip((times - t_first) / dt, 0.0, ns - 1.000001)
    k0 = pos.astype(np.int64)
    frac = pos - k0
    flat = data.ravel()
    base = (np.arange(ntr) * ns)[None, :, None]
    a = (flat[base + k0] * (1.0 - frac) + flat[base + k0 + 1] * frac) * (inside[None] & (times <= t[-1]))
    stacks = a.sum(axis=1)
    energies = (a * a).sum(axis=1)
    for m in range(vels.size):
        num = np.convolve(stacks[m] * stacks[m], box, mode="same")
        den = np.convolve(live * energies[m], box, mode="same")
        sem[m] = np.where(den > 0, num / np.where(den > 0, den, 1.0), 0.0)
        amp = np.maximum(amp, np.sqrt(num / box.size) / live)
    envelope = (np.abs(hilbert(stacks, axis=1)) / live).max(axis=0)
    if not amp.max() > 0:
        return none
    best = sem.argmax(axis=0)
    best_s = sem.max(axis=0)
    best_v = vels[best]
    peaks = np.flatnonzero((best_s[1:-1] >= best_s[:-2]) & (best_s[1:-1] > best_s[2:])) + 1
    for j in peaks:
        if (best_s[j] >= MIN_SEMBLANCE and abs(best_v[j] / water_velocity - 1.0) <= VELOCITY_MATCH
                and amp[j] >= MIN_STRENGTH * amp.max()):
            near = np.flatnonzero(np.abs(t0 - t0[j]) <= EVENT_REACH)
            k = int(near[np.argmax(envelope[near])])
            velocity = water_velocity
            if inside[:, k].sum() >= MIN_TRACES_VELOCITY:
                column = sem[:, k]
                r = int(column.argmax())
                velocity = float(vels[r])
                if 0 < r < vels.size - 1:
                    a0, b0, c0 = column[r - 1], column[r], column[r + 1]
                    curv = a0 - 2.0 * b0 + c0
                    if curv < 0:
                        velocity += float(np.clip(0.5 * (a0 - c0) / curv, -0.5, 0.5)) * float(vels[1] - vels[0])
            return float(t0[k]), velocity, float(best_s[k])
    return none


def along_line(times: np.ndarray, half: int = 5, tolerance: float = 0.008,
               velocities: np.ndarray | None = None) -> np.ndarray | tuple[np.ndarray, np.ndarray]:
    """Sea-floor times made consistent along the line, s (NaN where it was not found nearby).

    Each CMP takes the median of the times found within +-``half`` CMPs where at least half of
    them found one, those more than ``tolerance`` from it (a reverberation or a noise burst taken
    for the sea floor) left out; elsewhere NaN, as on land.

    Parameters
    ----------
    times : ndarray (ncmp,)
        Per-CMP times from :func:`water_bottom_time`, NaN where none was found.
    half : int
        Half width of the running median, CMPs (default 5).
    tolerance : float
        Largest distance from the median kept as found, s (default 0.008).
    velocities : ndarray (ncmp,), optional
        The velocity found with each time, m/s; when given, their median over the same CMPs is
        returned too.

    Returns
    -------
    times : ndarray (ncmp,)
    velocities : ndarray (ncmp,), only when given
    """
    times = np.asarray(times, dtype=np.float64)
    vel = np.full(times.size, np.nan) if velocities is None else np.asarray(velocities, dtype=np.float64)
    n = times.size
    out = np.full(n, np.nan)
    out_v = np.full(n, np.nan)
    for k in range(n):
        near = times[max(k - half, 0): k + half + 1]
        near_v = vel[max(k - half, 0): k + half + 1]
        ok = np.isfinite(near)
        if not ok.any() or ok.sum() < 0.5 * near.size:
            continue
        # the median of the neighbours that agree with the median: robust and smooth
        med = float(np.median(near[ok]))
        agree = ok & (np.abs(near - med) <= tolerance)
        out[k] = float(np.median(near[agree])) if agree.any() else med
        if agree.any() and np.isfinite(near_v[agree]).any():
            out_v[k] = float(np.nanmedian(near_v[agree]))
    return out if velocities is None else (out, out_v)
