"""``velspec inspect``: a header survey of a line before a long run."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np

from .io.segy import SegyLine
from .params import ReadParams


def survey_line(path: str | Path, params: ReadParams | None = None) -> str:
    """A header survey of a line before a long run (``velspec inspect``), as text.

    Traces, CMP range, fold, offsets, sampling, the byte positions used, and warnings for
    anything odd (dead traces, thin CMPs, gaps in the CMP numbers).

    Parameters
    ----------
    path : str or Path
        Prestack SEG-Y line.
    params : ReadParams, optional
        Header byte positions and binning (default SEG-Y rev 1 / rev 2.0 positions).
    """
    params = params or ReadParams()
    with SegyLine(path, params) as line:
        ix = line.index
        fold = ix.fold
        offsets = ix.offset
        notes = list(line.warnings)
        if np.any(line.dead):
            notes.append(f"{int(line.dead.sum())} trace(s) flagged dead (trace identification code 2)")
        if fold.size and fold.min() < 2:
            notes.append(f"{int((fold < 2).sum())} CMP(s) with fewer than 2 traces will be skipped")
        if fold.size > 1 and np.any(np.diff(ix.cmp) > 1):
            notes.append(f"CMP numbers have {int((np.diff(ix.cmp) > 1).sum())} gap(s)")
        order = "CMP order" if np.all(np.diff(ix.order) > 0) else "not CMP order (read through the index)"
        rows = [
            ("file", str(line.path)),
            ("size", f"{line.size:,} bytes"),
            ("byte order", line.endian + "-endian"),
            ("sample format", {1: "IBM float", 2: "int32", 3: "int16", 5: "IEEE float", 8: "int8"}[line.sample_format]),
            ("units", "feet (converted to metres)" if line.feet else "metres"),
            ("traces", f"{line.ntraces:,} ({order})"),
            ("samples", f"{line.nsamples} at {line.dt * 1000:g} ms, first at {line.t_first:g} s, "
                        f"last at {line.times[-1]:g} s"),
            ("CMPs", f"{line.ncmp} from {ix.cmp.min()} to {ix.cmp.max()}"
                     + (" (binned from midpoints)" if ix.binned else "")),
            ("fold", f"min {fold.min()}, median {int(np.median(fold))}, max {fold.max()}"),
            ("offsets", f"{offsets.min():.1f} to {offsets.max():.1f} m (from {ix.offset_source})"),
            ("CMP x", f"{ix.cmp_x.min():.1f} to {ix.cmp_x.max():.1f} m"),
            ("header bytes", ", ".join(f"{k} {v}" for k, v in dataclasses.asdict(params.headers).items())),
        ]
        width = max(len(k) for k, _ in rows)
        text = [f"{k.ljust(width)}  {v}" for k, v in rows]
        text += [f"warning: {n}" for n in notes] or ["no warnings"]
        return "\n".join(text)
