"""The two passes of ``velspec run``.

1. The streaming pass walks the line in blocks of CMP gathers: read, scan, local pick. Only one
   block of traces is in memory at a time; what a CMP leaves behind is its picks, its traced
   function, a few counts and, for the few CMPs chosen for QC, its coherence panel.
2. The line pass works on the picks alone: stacking-velocity and interval-velocity fields by
   constrained Dix, then depth. It can be rerun from a result file.

Nothing here knows about the command line; :mod:`velspec.cli` calls :func:`run_line`.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterator

import numpy as np

from . import __version__
from .errors import InputError
from .interval import depth_fields, fields_from_picks
from .io.segy import Gather, SegyLine, open_line
from .params import RunParams
from .pick import PickResult, pick_panel
from .scan import scan_gather, velocity_axis

MIN_LIVE = 2  # a CMP needs two live traces for any coherence


@dataclass
class CmpOutcome:
    """What the streaming pass keeps of one CMP."""

    position: int            # index in the line's CMP list
    cmp: int
    live: int
    dropped_nan: int
    dropped_dead: int
    picks: PickResult | None  # None when the CMP was skipped
    panel: np.ndarray | None = None
    pick_eta: np.ndarray | None = None  # anellipticity at each pick (nonhyperbolic scan only)


@dataclass
class LineResult:
    """Everything ``velspec run`` writes; arrays follow the result layout of interface.md."""

    cmp: np.ndarray
    cmp_x: np.ndarray
    cmp_y: np.ndarray
    t0: np.ndarray
    vrms: np.ndarray
    vint: np.ndarray
    eta: np.ndarray | None
    picks: dict[str, np.ndarray]
    qc: dict[str, np.ndarray]
    spectra: dict[str, np.ndarray]
    depth: dict[str, np.ndarray]
    attrs: dict = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)


def eta_axis(scan) -> np.ndarray | None:
    """Anellipticity values of a nonhyperbolic scan, or None for the hyperbolic law."""
    if scan.moveout != "nonhyperbolic":
        return None
    return np.linspace(0.0, scan.eta_max, scan.neta)


def spectra_positions(ncmp: int, keep: int) -> np.ndarray:
    """Evenly spaced CMP positions whose panels are kept for QC."""
    if keep <= 0 or ncmp == 0:
        return np.zeros(0, dtype=np.int64)
    return np.unique(np.linspace(0, ncmp - 1, min(keep, ncmp)).round().astype(np.int64))


def analyse_gather(gather: Gather, times: np.ndarray, dt: float, params: RunParams,
                   velocities: np.ndarray, keep_panel: bool = False) -> CmpOutcome:
    """Scan and pick one gather (the unit of work of the streaming pass)."""
    live = gather.data.shape[0]
    outcome = CmpOutcome(position=-1, cmp=gather.cmp, live=live, dropped_nan=gather.dropped_nan,
                         dropped_dead=gather.dropped_dead, picks=None)
    if live < MIN_LIVE:
        return outcome
    sp = params.scan
    etas = eta_axis(sp)
    panel = scan_gather(gather.data, gather.offsets, dt, float(times[0]), velocities, measure=sp.measure,
                        window=sp.window, stretch_limit=sp.stretch_limit, etas=etas)
    if etas is not None:
        # Pick on the best eta at each (v, t0); read each pick's eta back from where it peaked.
        best = panel.argmax(axis=0)
        panel = panel.max(axis=0)
    outcome.picks = pick_panel(panel, velocities, times, params.pick, offsets=gather.offsets,
                               stretch_limit=sp.stretch_limit,
                               vint_bounds=(params.interval.vint_min, params.interval.vint_max))
    if etas is not None:
        rows = np.abs(velocities[None, :] - outcome.picks.velocity[:, None]).argmin(axis=1)
        cols = np.searchsorted(times, outcome.picks.t0 - 1e-9)
        outcome.pick_eta = etas[best[rows, cols]].astype(np.float32)
    if keep_panel:
        outcome.panel = panel
    return outcome


def stream_pass(line: SegyLine, params: RunParams, positions: np.ndarray | None = None,
                progress: Callable[[int], None] | None = None) -> Iterator[CmpOutcome]:
    """Yield one :class:`CmpOutcome` per CMP, reading ``params.block`` gathers at a time."""
    positions = np.arange(line.ncmp) if positions is None else np.asarray(positions)
    velocities = velocity_axis(params.scan.vmin, params.scan.vmax, params.scan.nvel, params.scan.axis)
    keep = set(spectra_positions(line.ncmp, params.keep_spectra).tolist())
    times = line.times
    for start in range(0, len(positions), params.block):
        block = positions[start: start + params.block]
        gathers = [line.read_gather(int(k)) for k in block]
        for k, gather in zip(block, gathers):
            outcome = analyse_gather(gather, times, line.dt, params, velocities, keep_panel=int(k) in keep)
            outcome.position = int(k)
            yield outcome
        if progress is not None:
            progress(len(block))


def line_pass(t0: np.ndarray, outcomes: list[CmpOutcome], params: RunParams) -> dict[str, np.ndarray]:
    """Fields on every (CMP, t0) from the picks: stacking velocity, constrained Dix, depth."""
    analysed = [o for o in outcomes if o.picks is not None]
    nt = t0.size
    vrms = np.empty((len(analysed), nt), dtype=np.float32)
    vint = np.empty_like(vrms)
    vint_raw = np.empty_like(vrms)
    forced = np.zeros((len(analysed), nt), dtype=np.uint8)
    forced_count = np.zeros(len(analysed), dtype=np.int32)
    no_picks = np.zeros(len(analysed), dtype=np.uint8)
    eta = np.zeros((len(analysed), nt), dtype=np.float32) if params.scan.moveout == "nonhyperbolic" else None
    for row, o in enumerate(analysed):
        p = o.picks
        live = p.t0 > 0   # Dix counts time from zero: a pick at or above it carries no interval
        pick_t, pick_v = p.t0[live], p.velocity[live]
        if pick_t.size == 0:
            # No coherence maximum passed the thresholds: fall back on the traced function.
            no_picks[row] = 1
            start = max(params.pick.tmin, float(t0[t0 > 0][0]))
            nodes = np.append(np.arange(start, t0[-1], params.pick.min_separation), t0[-1])
            pick_t, pick_v = nodes, np.interp(nodes, t0, p.path).astype(np.float32)
        f = fields_from_picks(t0, pick_t, pick_v, params.interval)
        vrms[row], vint[row], vint_raw[row] = f.vrms, f.vint, f.vint_raw
        forced[row] = f.forced
        forced_count[row] = f.forced_count
        if eta is not None and o.pick_eta is not None and o.pick_eta.size:
            eta[row] = np.interp(t0, o.picks.t0, o.pick_eta)   # held constant beyond the end picks
    z, t_of_z, vint_z = depth_fields(t0, vint, params.interval.dz)
    return {"vrms": vrms, "vint": vint, "vint_raw": vint_raw, "forced": forced, "forced_count": forced_count,
            "no_picks": no_picks, "eta": eta, "z": z, "depth_t0": t_of_z, "depth_vint": vint_z}


def run_line(path: str | Path, params: RunParams, progress_factory: Callable | None = None) -> LineResult:
    """Run the whole analysis on a SEG-Y line and return the result (not yet written).

    Parameters
    ----------
    path : str or Path
        Prestack SEG-Y line.
    params : RunParams
        Validated parameters.
    progress_factory : callable, optional
        ``progress_factory(total) -> (update(n), close())`` for progress reporting.
    """
    params.validate()
    _set_threads(params.threads)
    with open_line(path, params.read) as line:
        update, close = progress_factory(line.ncmp) if progress_factory else (None, None)
        try:
            outcomes = list(stream_pass(line, params, progress=update))
        finally:
            if close is not None:
                close()
        ix = line.index
        identity = line.identity()
        t0 = line.times
        warnings_out = list(line.warnings)
    analysed = [o for o in outcomes if o.picks is not None]
    skipped = [o for o in outcomes if o.picks is None]
    if not analysed:
        raise InputError(f"{path}: no CMP has {MIN_LIVE} or more live traces; nothing to analyse")
    nan_traces = sum(o.dropped_nan for o in outcomes)
    if skipped:
        warnings_out.append(f"{len(skipped)} CMP(s) with fewer than {MIN_LIVE} live traces were left out "
                            f"(first: CMP {skipped[0].cmp})")
    if nan_traces:
        warnings_out.append(f"{nan_traces} trace(s) with NaN or infinite samples were left out")
    fields = line_pass(t0, outcomes, params)
    rows = np.array([o.position for o in analysed], dtype=np.int64)

    pick_cmp = np.concatenate([np.full(o.picks.t0.size, o.cmp, dtype=np.int64) for o in analysed])
    picks = {
        "cmp": pick_cmp,
        "t0": np.concatenate([o.picks.t0 for o in analysed]).astype(np.float64),
        "vrms": np.concatenate([o.picks.velocity for o in analysed]).astype(np.float32),
        "coherence": np.concatenate([o.picks.coherence for o in analysed]).astype(np.float32),
    }
    qc = {
        "live_traces": np.array([o.live for o in analysed], dtype=np.int32),
        "nan_traces": np.array([o.dropped_nan for o in analysed], dtype=np.int32),
        "dead_traces": np.array([o.dropped_dead for o in analysed], dtype=np.int32),
        "no_picks": fields["no_picks"],
        "forced_count": fields["forced_count"],
        "vint_forced": fields["forced"],
        "vint_raw": fields["vint_raw"],
        "path": np.stack([o.picks.path for o in analysed]).astype(np.float32),
        "skipped_cmp": np.array([o.cmp for o in skipped], dtype=np.int64),
        "skipped_nan_traces": np.array([o.dropped_nan for o in skipped], dtype=np.int32),
    }
    if fields["eta"] is not None:
        picks["eta"] = np.concatenate([o.pick_eta for o in analysed]).astype(np.float32)
    kept = [o for o in analysed if o.panel is not None]
    velocities = velocity_axis(params.scan.vmin, params.scan.vmax, params.scan.nvel, params.scan.axis)
    spectra = {
        "cmp": np.array([o.cmp for o in kept], dtype=np.int64),
        "velocity": velocities.astype(np.float64),
        "coherence": (np.stack([o.panel for o in kept]) if kept
                      else np.zeros((0, velocities.size, t0.size), dtype=np.float32)),
    }
    attrs = {
        "velspec_version": __version__,
        "created": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        "parameters": params.to_json(),
        "input": identity,
        "skipped_cmps": len(skipped),
        "nan_traces": nan_traces,
    }
    return LineResult(cmp=ix.cmp[rows], cmp_x=ix.cmp_x[rows], cmp_y=ix.cmp_y[rows], t0=t0,
                      vrms=fields["vrms"], vint=fields["vint"], eta=fields["eta"], picks=picks, qc=qc, spectra=spectra,
                      depth={"z": fields["z"], "t0": fields["depth_t0"], "vint": fields["depth_vint"]},
                      attrs=attrs, warnings=warnings_out)


def _set_threads(threads: int) -> None:
    import numba

    most = numba.config.NUMBA_NUM_THREADS
    numba.set_num_threads(min(threads, most) if threads > 0 else most)
