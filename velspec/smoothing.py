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
                   dt: float = 0.004) -> np.ndarray:
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

    Returns
    -------
    ndarray, float32 (nv, nt)
    """
    me = panels[centre]
    if half == 0:
        return me
    chosen, weights = [], []
    for panel, pos in zip(panels, positions):
        d = abs(int(pos) - int(positions[centre]))
        if panel is not None and d <= half:
            chosen.append(panel)
            weights.append(float(half + 1 - d))
    if len(chosen) == 1:
        return me
    w = np.asarray(weights)
    out = np.empty_like(chosen[0])
    if step_scale > 0 and velocities is not None:
        nv, nt = me.shape
        win = max(int(round(WINDOW / dt)), 8)
        edges = np.unique(np.append(np.arange(0, nt, win), nt)).astype(np.int64)
        per = np.empty((len(chosen), edges.size - 1))
        for k, panel in enumerate(chosen):
            s = 0.0 if panel is me else panel_shift(me, panel, velocities, edges)
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
    its mean removed) are cross-correlated over shifts of the log-velocity axis up to
    :data:`MAX_SHIFT`; the best shift is refined by a parabola. Positive: ``b``'s events are
    faster.

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
    lv = np.log(np.asarray(velocities, dtype=np.float64))
    step = float(np.median(np.diff(lv)))
    grid = np.arange(lv[0], lv[-1] + 0.5 * step, step)   # an even log-velocity axis
    reach = max(int(np.ceil(MAX_SHIFT / step)), 1)
    out = np.zeros(edges.size - 1)
    for w in range(edges.size - 1):
        pa = np.interp(grid, lv, a[:, edges[w]: edges[w + 1]].mean(axis=1))
        pb = np.interp(grid, lv, b[:, edges[w]: edges[w + 1]].mean(axis=1))
        pa, pb = pa - pa.mean(), pb - pb.mean()
        if not (np.any(pa) and np.any(pb)):
            continue
        cc = np.array([np.dot(pa[max(0, -s): pa.size - max(0, s)], pb[max(0, s): pb.size - max(0, -s)])
                       for s in range(-reach, reach + 1)])
        k = int(np.argmax(cc))
        shift = float(k - reach)
        if 0 < k < cc.size - 1:
            c0, c1, c2 = cc[k - 1], cc[k], cc[k + 1]
            curv = c0 - 2 * c1 + c2
            if curv < 0:
                shift += float(np.clip(0.5 * (c0 - c2) / curv, -0.5, 0.5))
        out[w] = shift * step
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
