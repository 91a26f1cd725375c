"""Spectrum smoothing along the line: a CMP's panel averaged with its neighbours' before picking.

Noise averages out and the picks agree from CMP to CMP. Triangle weights ``half + 1 - |d|`` for
a neighbour ``d`` positions away; CMPs without a panel (too few live traces) and the ends of the
line simply drop out. The neighbours are summed in a fixed order, so the result does not depend
on how the line was cut into blocks, nor on the thread count.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange


def smoothed_panel(panels: list, positions: np.ndarray, centre: int, half: int, *,
                   velocities: np.ndarray | None = None, step_scale: float = 0.0,
                   dt: float = 0.004, keys: list | None = None, cache: dict | None = None) -> np.ndarray:
    """Triangle-weighted mean of the panels within +-``half`` positions of ``panels[centre]``.

    Parameters
    ----------
    panels : list of ndarray (nv, nt) or None
        Coherence panels of consecutive CMPs, in line order; None for a CMP without one.
    positions : ndarray of int (len(panels),)
        Position of each CMP along the line (its index among the line's CMPs).
    centre : int
        Index in ``panels`` of the CMP whose smoothed panel is wanted (it must have a panel).
    half : int
        Half width in CMPs; 0 returns the panel itself.
    velocities : ndarray (nv,), optional
        The panels' trial velocities, m/s, ascending (needed with ``step_scale``).
    step_scale : float
        0 (default): triangle weights alone. Otherwise each neighbour's weight is also
        multiplied, window by window in t0, by exp(-(s / step_scale)^2), where s is the relative
        velocity shift that best aligns its panel with the centre's there
        (:func:`panel_shift`): a neighbour across a fault or a change of facies, whose events sit
        at other velocities, drops out instead of smearing the step.
    dt : float
        Sample interval of the panels' t0 axis, s.
    keys, cache : list and dict, optional
        A key per panel and a dict the caller keeps between calls: each panel's window profiles
        (:func:`panel_shift`) are computed once and kept there under its key, instead of once
        per neighbour it serves (the caller forgets the keys of panels it drops).

    Returns
    -------
    ndarray, float32 (nv, nt)
    """
    me = panels[centre]
    if half == 0:
        return me
    chosen, weights, chosen_keys = [], [], []
    for n, (panel, pos) in enumerate(zip(panels, positions)):
        d = abs(int(pos) - int(positions[centre]))
        if panel is not None and d <= half:
            chosen.append(panel)
            weights.append(float(half + 1 - d))
            chosen_keys.append(None if keys is None else keys[n])
    if len(chosen) == 1:
        return me
    w = np.asarray(weights)
    out = np.empty_like(chosen[0])
    if step_scale > 0 and velocities is not None:
        nv, nt = me.shape
        win = max(int(round(WINDOW / dt)), 8)
        edges = np.unique(np.append(np.arange(0, nt, win), nt)).astype(np.int64)
        per = np.empty((len(chosen), edges.size - 1))

        def profile(k):
            key = chosen_keys[k]
            if cache is None or key is None:
                return _profiles(np.ascontiguousarray(chosen[k], dtype=np.float32), edges)
            if key not in cache:
                cache[key] = _profiles(np.ascontiguousarray(chosen[k], dtype=np.float32), edges)
            return cache[key]

        mine = next(k for k, panel in enumerate(chosen) if panel is me)
        for k, panel in enumerate(chosen):
            s = 0.0 if panel is me else _shifts(profile(mine), profile(k),
                                                np.ascontiguousarray(velocities, dtype=np.float64), MAX_SHIFT)
            per[k] = w[k] * np.exp(-(np.asarray(s) / step_scale) ** 2)
        per /= per.sum(axis=0, keepdims=True)
        # weights linear in t0 between the windows' centres, so the panel has no seams
        centres = 0.5 * (edges[:-1] + edges[1:] - 1)
        ws = np.stack([np.interp(np.arange(nt), centres, row) for row in per]).astype(np.float32)
        ws /= ws.sum(axis=0, keepdims=True)
        _accumulate_varying(out, tuple(chosen), ws)
        return out
    _accumulate(out, tuple(chosen), (w / w.sum()).astype(np.float32))
    return out


WINDOW = 0.2       # s: t0 windows in which neighbouring panels are compared
MAX_SHIFT = 0.08   # largest relative velocity shift looked for between neighbouring panels


def panel_shift(a: np.ndarray, b: np.ndarray, velocities: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Relative velocity shift that best aligns panel ``b`` with panel ``a`` in each t0 window.

    In each window the two velocity profiles (the mean coherence over the window's t0 samples,
    its mean removed) are cross-correlated over shifts of whole velocity samples up to
    :data:`MAX_SHIFT` of the velocity at ``a``'s peak; the best shift is refined by a parabola and
    divided by that velocity. Positive: ``b``'s events are faster.

    Parameters
    ----------
    a, b : ndarray (nv, nt)
        Coherence panels on the same axes.
    velocities : ndarray (nv,)
        Trial velocities, m/s, ascending.
    edges : ndarray of int
        Sample edges of the windows.

    Returns
    -------
    ndarray (nwindow,)
    """
    edges = np.ascontiguousarray(edges, dtype=np.int64)
    return _shifts(_profiles(np.ascontiguousarray(a, dtype=np.float32), edges),
                   _profiles(np.ascontiguousarray(b, dtype=np.float32), edges),
                   np.ascontiguousarray(velocities, dtype=np.float64), MAX_SHIFT)


@njit(cache=True, nogil=True)
def _profiles(panel, edges):
    # mean coherence of each velocity over each window: (nwindow, nv), reading the panel in order
    nv = panel.shape[0]
    nw = edges.size - 1
    out = np.zeros((nw, nv))
    for r in range(nv):
        row = panel[r]
        for w in range(nw):
            acc = 0.0
            for j in range(edges[w], edges[w + 1]):
                acc += row[j]
            out[w, r] = acc / max(edges[w + 1] - edges[w], 1)
    return out


@njit(cache=True, nogil=True)
def _shifts(pa, pb, velocities, max_shift):
    nw, nv = pa.shape
    out = np.zeros(nw)
    for w in range(nw):
        ma = pa[w].mean()
        mb = pb[w].mean()
        peak = int(np.argmax(pa[w]))
        lo = max(peak - 1, 0)
        hi = min(peak + 1, nv - 1)
        dv = (velocities[hi] - velocities[lo]) / max(hi - lo, 1)
        if dv <= 0:
            continue
        reach = max(int(np.ceil(max_shift * velocities[peak] / dv)), 1)
        best, kbest = -np.inf, 0
        cc = np.empty(2 * reach + 1)
        for k in range(-reach, reach + 1):
            acc = 0.0
            for r in range(max(0, -k), min(nv, nv - k)):
                acc += (pa[w, r] - ma) * (pb[w, r + k] - mb)
            cc[k + reach] = acc
            if acc > best:
                best, kbest = acc, k
        if best <= 0:
            continue
        shift = float(kbest)
        i = kbest + reach
        if 0 < i < cc.size - 1:
            curv = cc[i - 1] - 2.0 * cc[i] + cc[i + 1]
            if curv < 0:
                shift += min(max(0.5 * (cc[i - 1] - cc[i + 1]) / curv, -0.5), 0.5)
        out[w] = shift * dv / velocities[peak]
    return out


@njit(cache=True, nogil=True, parallel=True)
def _accumulate_varying(out, panels, weights):
    # weights (npanel, nt): one weight per panel and t0 sample; same fixed order as _accumulate
    nv, nt = out.shape
    for r in prange(nv):
        for j in range(nt):
            acc = np.float32(0.0)
            for k in range(len(panels)):
                acc += weights[k, j] * panels[k][r, j]
            out[r, j] = acc


@njit(cache=True, nogil=True, parallel=True)
def _accumulate(out, panels, weights):
    # each output value summed by one thread, neighbours in a fixed order: the same bits for
    # any blocking and any thread count
    nv, nt = out.shape
    for r in prange(nv):
        for j in range(nt):
            acc = np.float32(0.0)
            for k in range(len(panels)):
                acc += weights[k] * panels[k][r, j]
            out[r, j] = acc
