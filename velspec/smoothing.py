"""Spectrum smoothing along the line: a CMP's panel averaged with its neighbours' before picking.

Noise averages out and the picks agree from CMP to CMP. Triangle weights ``half + 1 - |d|`` for
a neighbour ``d`` positions away; CMPs without a panel (too few live traces) and the ends of the
line simply drop out. The neighbours are summed in a fixed order, so the result does not depend
on how the line was cut into blocks, nor on the thread count.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange


def smoothed_panel(panels: list, positions: np.ndarray, centre: int, half: int) -> np.ndarray:
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
    _accumulate(out, tuple(chosen), (w / w.sum()).astype(np.float32))
    return out


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
