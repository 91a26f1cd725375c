"""Which analysed CMPs are neighbours: along a 2D line, or on the grid of a 3D-binned survey.

The lateral steps (spectrum smoothing before picking, the lateral outlier test of the line
pass) and the blocking of a run (the halo a block of CMPs needs) ask one question: which items
lie within ``radius`` of item ``i``? Items are numbered in analysis order (along the line; on a
grid inline by inline, crossline within), and every answer is a contiguous-or-sorted set of
item numbers, so a streaming pass knows from :meth:`first` and :meth:`last` how far ahead it
must have scanned and how far back it may forget.

- :class:`LineNeighbours`: item ``j`` is a neighbour of ``i`` when ``|i - j| <= radius``
  (positions along the line; the 2D case).
- :class:`GridNeighbours`: on a grid of bins, when ``max(|d inline|, |d crossline|) <= radius``,
  counted in steps of the analysis grid: a square of ``(2 radius + 1)^2`` bins. The distance is
  a whole number, so the triangle weights of the smoothing stay ``radius + 1 - d``.

A 2D line is the grid with one inline, so both give the same neighbours there (tested).
:meth:`first` and :meth:`last` are monotone in ``i``, so the halo of a span of items lies
between the bounds of its first and last item.
"""

from __future__ import annotations

import numpy as np


class LineNeighbours:
    """Neighbours along a line of ``n`` analysed CMPs: those within ``radius`` positions.

    Parameters
    ----------
    n : int
        Number of items, numbered 0..n-1 along the line.
    """

    def __init__(self, n: int):
        self.n = int(n)

    def near(self, i: int, radius: int) -> tuple[np.ndarray, np.ndarray]:
        """Item numbers within ``radius`` of ``i`` (ascending, ``i`` included) and their distances."""
        j = np.arange(max(i - radius, 0), min(i + radius + 1, self.n), dtype=np.int64)
        return j, np.abs(j - i)

    def first(self, i: int, radius: int) -> int:
        """Lowest item number within ``radius`` of ``i``."""
        return max(int(i) - radius, 0)

    def last(self, i: int, radius: int) -> int:
        """Highest item number within ``radius`` of ``i``."""
        return min(int(i) + radius, self.n - 1)


class GridNeighbours:
    """Neighbours on a grid of analysed bins: within ``radius`` grid steps in inline and crossline.

    Parameters
    ----------
    inline, crossline : ndarray of int (n,)
        Grid coordinates of each item in steps of the analysis grid (e.g. (inline - first) /
        inline_step), items sorted by inline, then crossline.

    Raises
    ------
    ValueError
        Items not in inline-then-crossline order, or a bin given twice.
    """

    def __init__(self, inline: np.ndarray, crossline: np.ndarray):
        self.inline = np.asarray(inline, dtype=np.int64)
        self.crossline = np.asarray(crossline, dtype=np.int64)
        self.n = self.inline.size
        if self.n:
            self.inline = self.inline - self.inline.min()
            self.crossline = self.crossline - self.crossline.min()
        self._width = int(self.crossline.max()) + 1 if self.n else 1
        self._keys: dict = {}
        keys = self._key_array(0)
        if self.n > 1 and not np.all(np.diff(keys) > 0):
            raise ValueError("grid items must be sorted by inline, then crossline, each bin once")

    def _key_array(self, radius: int) -> np.ndarray:
        # a row wide enough that crossline +- radius never wraps into the next inline
        if radius not in self._keys:
            self._keys[radius] = self.inline * (self._width + 2 * radius + 1) + self.crossline + radius
        return self._keys[radius]

    def _key(self, il: int, xl: int, radius: int) -> int:
        return il * (self._width + 2 * radius + 1) + xl + radius

    def near(self, i: int, radius: int) -> tuple[np.ndarray, np.ndarray]:
        """Item numbers within ``radius`` of ``i`` (ascending, ``i`` included) and their
        distances ``max(|d inline|, |d crossline|)``."""
        keys = self._key_array(radius)
        il, xl = int(self.inline[i]), int(self.crossline[i])
        rows = []
        for d in range(-radius, radius + 1):
            lo = np.searchsorted(keys, self._key(il + d, xl - radius, radius), side="left")
            hi = np.searchsorted(keys, self._key(il + d, xl + radius, radius), side="right")
            rows.append(np.arange(lo, hi, dtype=np.int64))
        j = np.concatenate(rows)
        dist = np.maximum(np.abs(self.inline[j] - il), np.abs(self.crossline[j] - xl))
        return j, dist

    def _bounds(self, radius: int) -> tuple[np.ndarray, np.ndarray]:
        # exact lowest and highest neighbour of every item, then made monotone (a running min
        # from the end, a running max from the start) so that a span of items has its halo
        # between the bounds of its ends
        if ("bounds", radius) not in self._keys:
            keys = self._key_array(radius)
            lo = np.arange(self.n, dtype=np.int64)
            hi = lo.copy()
            for d in range(-radius, radius + 1):
                a = np.searchsorted(keys, self._key(self.inline + d, self.crossline - radius, radius), side="left")
                b = np.searchsorted(keys, self._key(self.inline + d, self.crossline + radius, radius), side="right")
                some = b > a
                lo[some] = np.minimum(lo[some], a[some])
                hi[some] = np.maximum(hi[some], b[some] - 1)
            self._keys[("bounds", radius)] = (np.minimum.accumulate(lo[::-1])[::-1], np.maximum.accumulate(hi))
        return self._keys[("bounds", radius)]

    def first(self, i: int, radius: int) -> int:
        """A lower bound of the item numbers within ``radius`` of ``i`` and of every later item
        (exact on a single inline)."""
        return int(self._bounds(radius)[0][i])

    def last(self, i: int, radius: int) -> int:
        """An upper bound of the item numbers within ``radius`` of ``i`` and of every earlier item
        (exact on a single inline)."""
        return int(self._bounds(radius)[1][i])


def subset(hood, items: np.ndarray):
    """The neighbourhood restricted to ``items`` (ascending item numbers), renumbered 0..len-1.

    Used for the line pass, whose rows are the analysed CMPs that had enough live traces.
    """
    items = np.asarray(items, dtype=np.int64)
    if isinstance(hood, LineNeighbours):
        return LineNeighbours(items.size)
    return GridNeighbours(hood.inline[items], hood.crossline[items])


__all__ = ["LineNeighbours", "GridNeighbours", "subset"]
