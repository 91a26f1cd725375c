"""Hand-made picks for the line-pass tests: one CMP's pick table and traced function at a time."""

import numpy as np

from velspec.linepass import line_pass
from velspec.params import RunParams
from velspec.result import empty_picks

T = np.arange(1, 751) * 0.004  # 4 ms samples down to 3 s


def outcome(cmp, t0, v, sigma=10.0, flags=None, coherence=0.8, path=None, t=T):
    """One CMP's picks as a pick table, and its traced function (through the picks by default)."""
    n = len(t0)
    p = empty_picks(n)
    p["cmp"], p["t0"], p["vrms"], p["coherence"] = cmp, t0, v, coherence
    p["sigma"] = np.broadcast_to(np.asarray(sigma, np.float32), (n,))
    p["flags"] = 0 if flags is None else np.asarray(flags, np.uint16)
    if path is None:
        path = np.interp(t, t0, v) if n else np.full(t.size, 2000.0)
    return p, np.asarray(path, np.float32)


class Line:
    """Hand-made picks of a few CMPs, as the line pass takes them."""

    def __init__(self, records, cmp=None, t=T):
        self.t = t
        self.cmp = np.array(cmp if cmp is not None else [int(p["cmp"][0]) for p, _ in records], dtype=np.int64)
        self.picks = np.concatenate([p for p, _ in records])
        self.paths = np.stack([path for _, path in records])

    def run(self, params=None, edits=None):
        self.picks, fields = line_pass(self.t, self.cmp, self.picks, self.paths, params or RunParams(), edits=edits)
        return fields

    def of(self, cmp):
        return self.picks[self.picks["cmp"] == cmp]
