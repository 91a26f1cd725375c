"""Which CMPs a run analyses and which of them are neighbours: every CMP along a 2D line, or
chosen bins of a 3D-binned survey on their inline x crossline grid.

For 3D-binned data (``read.geometry = "3d"``) the bins are those of the inline and crossline
headers (:mod:`velspec.io.segy` numbers them inline by inline). ``[grid]`` chooses every n-th
inline and crossline, or a list of bins; the lateral steps then count distances in steps of
that grid (:class:`velspec.neighbours.GridNeighbours`).
"""

from __future__ import annotations

import numpy as np

from .errors import InputError
from .neighbours import GridNeighbours, LineNeighbours


def analysis_plan(segy, params) -> tuple[np.ndarray, object, dict]:
    """The CMPs analysed and their neighbourhood.

    Returns
    -------
    positions : int64 (n,)
        Positions of the analysed CMPs in the line's CMP index, ascending.
    hood : LineNeighbours or GridNeighbours
        Which analysed CMPs are neighbours.
    attrs : dict
        For 3D-binned data: ``inline`` and ``crossline`` (int64 (n,), per analysed bin) and
        ``grid`` (what goes into the result's ``grid`` attribute: first inline and crossline,
        steps, and the shape of the analysed grid); empty for a 2D line.

    Raises
    ------
    InputError
        A bin of ``grid.bins`` that the data do not have.
    """
    if params.read.geometry != "3d":
        return np.arange(segy.ncmp, dtype=np.int64), LineNeighbours(segy.ncmp), {}
    return grid_plan(segy.index.inline, segy.index.crossline, params.grid)


def grid_plan(inline: np.ndarray, crossline: np.ndarray, grid) -> tuple[np.ndarray, GridNeighbours, dict]:
    """:func:`analysis_plan` for bins with these inline and crossline numbers (sorted inline by
    inline) under the ``[grid]`` parameters ``grid``."""
    il0, xl0 = int(inline.min()), int(crossline.min())
    if grid.bins:
        have = {(int(a), int(b)): k for k, (a, b) in enumerate(zip(inline, crossline))}
        missing = [b for b in grid.bins if tuple(b) not in have]
        if missing:
            raise InputError(f"grid.bins names bin(s) the data do not have (inline, crossline): "
                             f"{', '.join(map(str, missing[:5]))}{' ...' if len(missing) > 5 else ''}")
        positions = np.sort(np.array([have[tuple(b)] for b in grid.bins], dtype=np.int64))
    else:
        on = ((inline - il0) % grid.inline_step == 0) & ((crossline - xl0) % grid.crossline_step == 0)
        positions = np.flatnonzero(on).astype(np.int64)
    gi = (inline[positions] - il0) // grid.inline_step
    gx = (crossline[positions] - xl0) // grid.crossline_step
    attrs = {"inline": inline[positions].astype(np.int64), "crossline": crossline[positions].astype(np.int64),
             "grid": {"inline_first": il0, "inline_step": grid.inline_step, "crossline_first": xl0,
                      "crossline_step": grid.crossline_step,
                      "shape": [int(gi.max() - gi.min() + 1), int(gx.max() - gx.min() + 1)] if positions.size
                      else [0, 0]}}
    return positions, GridNeighbours(gi, gx), attrs


def result_neighbours(result):
    """The neighbourhood of a result's CMPs: along the line, or on its grid of bins (a result of
    3D-binned data stores ``inline``, ``crossline`` and the ``grid`` attribute)."""
    if result.inline is None:
        return LineNeighbours(result.cmp.size)
    g = result.attrs.get("grid") or {}
    if isinstance(g, (str, bytes)):
        import json

        g = json.loads(g)
    il0, xl0 = g.get("inline_first", int(result.inline.min())), g.get("crossline_first", int(result.crossline.min()))
    return GridNeighbours((result.inline - il0) // g.get("inline_step", 1),
                          (result.crossline - xl0) // g.get("crossline_step", 1))


def near_rows_of(hood):
    """``near_rows(row, radius)`` for :func:`velspec.linepass.line_pass` on a grid (None along a
    line, where the line pass takes its own neighbours)."""
    if isinstance(hood, LineNeighbours):
        return None
    return lambda row, radius: hood.near(row, radius)[0]


__all__ = ["analysis_plan", "grid_plan", "result_neighbours", "near_rows_of"]
