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
from numba import njit, prange

from . import __version__
from .errors import InputError
from .interval import depth_fields, fields_from_picks
from .io.segy import Gather, SegyLine, open_line
from .params import RunParams
from .io.picks_csv import function_on_axis, read_functions
from .pick import (AT_BOUND, DIX, EDITED, EXCLUDED, LOW_COHERENCE, MULTIPLE, OUTLIER, OUTSIDE_GUIDE, REPLACED, PickResult,
                   pick_panel, regional_trend)
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
    vint_sigma: np.ndarray | None = None


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


GuideFor = Callable[[int], "np.ndarray | None"]


def guide_source(params: RunParams, t0: np.ndarray) -> GuideFor:
    """The guide function of each CMP (m/s on ``t0``, or None), from ``params.pick``.

    The regional trend or a guide CSV serves every CMP; in ``edit_mode = "guide"`` the functions
    of a person's pick file take over at the CMPs it names.
    """
    pp = params.pick
    base: GuideFor = lambda cmp: None  # noqa: E731
    if pp.guide == "regional":
        trend = regional_trend(t0, pp.regional_v0, pp.regional_gradient)
        base = lambda cmp: trend  # noqa: E731
    elif pp.guide:
        functions = read_functions(pp.guide)
        base = lambda cmp: function_on_axis(functions, cmp, t0)  # noqa: E731
    if pp.edits and pp.edit_mode == "guide":
        edits = read_functions(pp.edits, need_cmp=True)
        return lambda cmp: np.interp(t0, *edits[cmp]) if cmp in edits else base(cmp)
    return base


@dataclass
class _Scanned:
    """A scanned CMP waiting for its neighbours' panels before it is picked."""

    position: int
    outcome: CmpOutcome
    gather: Gather
    panel: np.ndarray | None = None
    best_eta: np.ndarray | None = None


def scan_one(gather: Gather, times: np.ndarray, dt: float, params: RunParams,
             velocities: np.ndarray) -> tuple[CmpOutcome, np.ndarray | None, np.ndarray | None]:
    """Scan one gather: its outcome record, coherence panel (nv, nt) and, for a nonhyperbolic
    scan, the index of the best eta at each (v, t0) (the panel then holds the best over eta)."""
    live = gather.data.shape[0]
    outcome = CmpOutcome(position=-1, cmp=gather.cmp, live=live, dropped_nan=gather.dropped_nan,
                         dropped_dead=gather.dropped_dead, picks=None)
    if live < MIN_LIVE:
        return outcome, None, None
    sp = params.scan
    etas = eta_axis(sp)
    panel = scan_gather(gather.data, gather.offsets, dt, float(times[0]), velocities, measure=sp.measure,
                        window=sp.window, stretch_limit=sp.stretch_limit, etas=etas)
    if etas is None:
        return outcome, panel, None
    return outcome, panel.max(axis=0), panel.argmax(axis=0)


def pick_one(outcome: CmpOutcome, gather: Gather, panel: np.ndarray, best_eta: np.ndarray | None,
             times: np.ndarray, params: RunParams, velocities: np.ndarray, guide: np.ndarray | None) -> None:
    """Pick a (laterally smoothed) panel into ``outcome.picks``; eta read back at each pick."""
    sp = params.scan
    outcome.picks = pick_panel(panel, velocities, times, params.pick, offsets=gather.offsets,
                               stretch_limit=sp.stretch_limit,
                               vint_bounds=(params.interval.vint_min, params.interval.vint_max), guide=guide)
    if best_eta is not None:
        etas = eta_axis(sp)
        rows = np.abs(velocities[None, :] - outcome.picks.velocity[:, None]).argmin(axis=1)
        cols = np.searchsorted(times, outcome.picks.t0 - 1e-9)
        outcome.pick_eta = etas[best_eta[rows, cols]].astype(np.float32)


def smoothed_panel(items: list[_Scanned], centre: int, half: int) -> np.ndarray:
    """Triangle-weighted mean of the panels within +-half positions of ``items[centre]``.

    Weights ``half + 1 - |d|`` for a neighbour d positions away; CMPs without a panel (too few
    live traces) and the ends of the line simply drop out. Summed in a fixed order, so the
    result does not depend on how the line was cut into blocks.
    """
    me = items[centre]
    if half == 0:
        return me.panel
    panels, weights = [], []
    for other in items:
        d = abs(other.position - me.position)
        if other.panel is not None and d <= half:
            panels.append(other.panel)
            weights.append(float(half + 1 - d))
    if len(panels) == 1:
        return me.panel
    w = np.asarray(weights)
    return _weighted_mean(tuple(panels), (w / w.sum()).astype(np.float32))


def _weighted_mean(panels: tuple, weights: np.ndarray) -> np.ndarray:
    out = np.empty_like(panels[0])
    _accumulate(out, panels, weights)
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


def stream_pass(line: SegyLine, params: RunParams, positions: np.ndarray | None = None,
                progress: Callable[[int], None] | None = None,
                guide_for: GuideFor | None = None) -> Iterator[CmpOutcome]:
    """Yield one :class:`CmpOutcome` per CMP, reading ``params.block`` gathers at a time.

    A CMP is picked once the panels of its neighbours within ``params.pick.smooth_cmps`` are
    scanned, so at most one block plus that many panels on each side are held at a time.
    """
    positions = np.arange(line.ncmp) if positions is None else np.asarray(positions)
    velocities = velocity_axis(params.scan.vmin, params.scan.vmax, params.scan.nvel, params.scan.axis)
    keep = set(spectra_positions(line.ncmp, params.keep_spectra).tolist())
    times = line.times
    half = params.pick.smooth_cmps
    guide_for = guide_for or (lambda cmp: None)
    pending: list[_Scanned] = []   # scanned, in position order; the first unpicked at index `nxt`
    nxt = 0

    def ready(upto: float):
        nonlocal nxt, pending
        while nxt < len(pending) and pending[nxt].position + half <= upto:
            item = pending[nxt]
            if item.panel is not None:
                panel = smoothed_panel(pending, nxt, half)
                pick_one(item.outcome, item.gather, panel, item.best_eta, times, params, velocities,
                         guide_for(item.outcome.cmp))
                if int(item.position) in keep:
                    item.outcome.panel = panel
            nxt += 1
            yield item.outcome
        # forget what no later CMP needs: panels more than `half` positions behind the next one
        if nxt < len(pending):
            first_needed = pending[nxt].position - half
        else:
            first_needed = np.inf
        drop = 0
        while drop < nxt and pending[drop].position < first_needed:
            drop += 1
        pending = pending[drop:]
        nxt -= drop

    for start in range(0, len(positions), params.block):
        block = positions[start: start + params.block]
        gathers = [line.read_gather(int(k)) for k in block]
        for k, gather in zip(block, gathers):
            outcome, panel, best = scan_one(gather, times, line.dt, params, velocities)
            outcome.position = int(k)
            pending.append(_Scanned(int(k), outcome, gather, panel, best))
        yield from ready(float(block[-1]))
        if progress is not None:
            progress(len(block))
    yield from ready(np.inf)


EDITED_SIGMA = 0.01  # uncertainty given to a person's pick, as a fraction of its velocity
FALLBACK_SIGMA = 0.05  # the same for the traced function where a CMP has no pick: poor, and said so


def apply_edits(records: list[CmpOutcome], edits: dict, mode: str, params: RunParams) -> int:
    """Put a person's picks into the records, in place; returns the number of CMPs changed.

    ``replace``: at each CMP in ``edits`` the automatic picks are flagged REPLACED and the
    person's picks added (flag EDITED). ``guide``: the automatic picks outside the band around
    the person's function are flagged OUTSIDE_GUIDE; if none is left, the person's picks are
    added. Edits for CMPs the line does not have are an error.
    """
    by_cmp = {o.cmp: o for o in records if o.picks is not None}
    unknown = sorted(set(edits) - set(by_cmp))
    if unknown:
        raise InputError(f"edited picks name CMP(s) not in the result: {', '.join(map(str, unknown[:5]))}"
                         f"{' ...' if len(unknown) > 5 else ''}")
    pp = params.pick
    for cmp, (t, v) in edits.items():
        p = by_cmp[cmp].picks
        p.flags = p.flags & np.uint16(~(REPLACED | OUTSIDE_GUIDE) & 0xFFFF)
        add = True
        if mode == "guide":
            g = np.interp(p.t0, t, v)
            outside = (p.velocity < g * (1 - pp.guide_below)) | (p.velocity > g * (1 + pp.guide_above))
            p.flags[outside & p.used] |= OUTSIDE_GUIDE
            add = not p.used.any()
        else:
            p.flags[p.used] |= REPLACED
        if add:
            n = t.size
            merged = PickResult(
                t0=np.concatenate([p.t0, t]), velocity=np.concatenate([p.velocity, v.astype(np.float32)]),
                coherence=np.concatenate([p.coherence, np.full(n, np.nan, np.float32)]),
                sigma=np.concatenate([p.sigma, (EDITED_SIGMA * v).astype(np.float32)]),
                flags=np.concatenate([p.flags, np.full(n, EDITED, np.uint16)]), path=p.path)
            order = np.lexsort((merged.velocity, merged.t0))
            by_cmp[cmp].picks = merged.subset(order)
    return len(edits)


def lateral_outliers(t0: np.ndarray, records: list[CmpOutcome], vrms: np.ndarray, params: RunParams) -> list[int]:
    """Flag picks far from the running median of the stacking-velocity field along the line.

    The median over +-``lateral_cmps`` CMPs at each t0 follows a step in velocity (a fault, a
    change of facies) where a mean would smear it; a pick is an outlier only where it differs
    from it by more than ``outlier_tolerance`` and by more than ``outlier_sigmas`` of its own
    uncertainty. A person's picks are never rejected. Returns the rows with a pick flagged.
    """
    pp = params.pick
    if pp.lateral_cmps == 0 or len(records) < 3:
        return []
    k = pp.lateral_cmps
    flagged = []
    for row, o in enumerate(records):
        p = o.picks
        candidate = p.used & ((p.flags & EDITED) == 0)
        if not candidate.any():
            continue
        # the median over the neighbours' fields at this CMP's pick times only; the window
        # shrinks at the ends of the line rather than repeating the end CMP
        near = vrms[max(row - k, 0): row + k + 1]
        cols = np.clip(np.searchsorted(t0, p.t0), 0, t0.size - 1)
        if np.array_equal(t0[cols], p.t0):      # automatic picks sit on samples: no interpolation
            ref = np.median(near[:, cols], axis=0)
        else:
            ref = np.median(np.stack([np.interp(p.t0, t0, f) for f in near]), axis=0)
        dev = np.abs(p.velocity - ref)
        bad = candidate & (dev > pp.outlier_tolerance * ref) & (dev > pp.outlier_sigmas * p.sigma)
        p.flags[bad] |= OUTLIER
        if bad.any():
            flagged.append(row)
    return flagged


def _cmp_fields(t0: np.ndarray, p: PickResult, params: RunParams):
    """Fields of one CMP from its used picks; the traced function where it has none."""
    use = p.used & (p.t0 > 0)   # Dix counts time from zero: a pick at or above it carries no interval
    pick_t, pick_v, pick_s = p.t0[use], p.velocity[use], p.sigma[use]
    fallback = pick_t.size == 0
    if fallback:
        # No coherence maximum passed the thresholds: fall back on the traced function.
        start = max(params.pick.tmin, float(t0[t0 > 0][0]))
        pick_t = np.append(np.arange(start, t0[-1], params.pick.min_separation), t0[-1])
        pick_v = np.interp(pick_t, t0, p.path).astype(np.float32)
        pick_s = (FALLBACK_SIGMA * pick_v).astype(np.float32)
    f = fields_from_picks(t0, pick_t, pick_v, params.interval, pick_sigma=pick_s)
    return f, use, fallback


def cmp_quality(p: PickResult, fallback: bool, forced_count: int, params: RunParams) -> int:
    """0 good, 1 fair, 2 poor (see the README's table of the rule)."""
    use = p.used
    if fallback or use.sum() < 2:
        return 2
    rel = float(np.median(p.sigma[use] / p.velocity[use]))
    if rel > params.pick.doubtful_sigma:
        return 2
    candidates = (p.flags & MULTIPLE) == 0
    rejected = candidates & ((p.flags & (OUTLIER | DIX)) != 0)
    low = use & ((p.flags & LOW_COHERENCE) != 0)
    at_bound = use & ((p.flags & AT_BOUND) != 0)
    if (forced_count > 0 or at_bound.any() or rejected.sum() > 0.25 * max(candidates.sum(), 1)
            or rel > 0.5 * params.pick.doubtful_sigma or low.sum() > 0.5 * use.sum()):
        return 1
    return 0


def line_pass(t0: np.ndarray, outcomes: list[CmpOutcome], params: RunParams,
              edits: dict | None = None) -> dict[str, np.ndarray]:
    """Fields on every (CMP, t0) from the picks: edits, lateral outlier rejection, constrained
    Dix with uncertainties, depth. Updates the picks' flags in place."""
    analysed = [o for o in outcomes if o.picks is not None]
    for o in analysed:   # the line pass owns these flags: a rerun starts afresh
        o.picks.flags = o.picks.flags & np.uint16(~OUTLIER & 0xFFFF)
    changed = apply_edits(analysed, edits, params.pick.edit_mode, params) if edits else 0
    nt = t0.size
    ncmp = len(analysed)

    vrms = np.empty((ncmp, nt), dtype=np.float32)
    vint = np.empty_like(vrms)
    vint_raw = np.empty_like(vrms)
    vint_sigma = np.empty_like(vrms)
    forced = np.zeros((ncmp, nt), dtype=np.uint8)
    forced_count = np.zeros(ncmp, dtype=np.int32)
    no_picks = np.zeros(ncmp, dtype=np.uint8)
    quality = np.zeros(ncmp, dtype=np.uint8)
    pick_vint_sigma: list = [None] * ncmp
    eta = np.zeros((ncmp, nt), dtype=np.float32) if params.scan.moveout == "nonhyperbolic" else None

    def fill(row: int) -> None:
        # straight into the output arrays: the line pass holds each field once
        o = analysed[row]
        f, use, fallback = _cmp_fields(t0, o.picks, params)
        vrms[row], vint[row], vint_raw[row], vint_sigma[row] = f.vrms, f.vint, f.vint_raw, f.vint_sigma
        forced[row] = f.forced
        forced_count[row] = f.forced_count
        no_picks[row] = fallback
        quality[row] = cmp_quality(o.picks, fallback, f.forced_count, params)
        ps = np.full(o.picks.t0.size, np.nan, np.float32)
        if not fallback:
            ps[use] = f.pick_vint_sigma
        pick_vint_sigma[row] = ps
        if eta is not None and o.pick_eta is not None and use.any():
            eta[row] = np.interp(t0, o.picks.t0[use], o.pick_eta[use])   # held beyond the end picks
        elif eta is not None:
            eta[row] = 0.0

    for row in range(ncmp):
        fill(row)
    for row in lateral_outliers(t0, analysed, vrms, params):   # judged on the first fields, then redone
        fill(row)
    z, t_of_z, vint_z = depth_fields(t0, vint, params.interval.dz)
    return {"vrms": vrms, "vint": vint, "vint_raw": vint_raw, "vint_sigma": vint_sigma, "forced": forced,
            "forced_count": forced_count, "no_picks": no_picks, "quality": quality, "eta": eta,
            "pick_vint_sigma": pick_vint_sigma, "edited_cmps": changed,
            "z": z, "depth_t0": t_of_z, "depth_vint": vint_z}


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
    edits = read_functions(params.pick.edits, need_cmp=True) if params.pick.edits else None
    with open_line(path, params.read) as line:
        if edits:
            # say so before a long scan, not after it
            unknown = sorted(set(edits) - set(int(c) for c in line.index.cmp))
            if unknown:
                raise InputError(f"{params.pick.edits}: picks for CMP(s) the line does not have: "
                                 f"{', '.join(map(str, unknown[:5]))}{' ...' if len(unknown) > 5 else ''}")
        guide_for = guide_source(params, line.times)
        update, close = progress_factory(line.ncmp) if progress_factory else (None, None)
        try:
            outcomes = list(stream_pass(line, params, progress=update, guide_for=guide_for))
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
    # In guide mode the edits already steered the picking; the line pass then only replaces.
    line_edits = edits if params.pick.edit_mode == "replace" else None
    fields = line_pass(t0, outcomes, params, edits=line_edits)
    rows = np.array([o.position for o in analysed], dtype=np.int64)
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
        "created": _now(),
        "parameters": params.to_json(),
        "input": identity,
        "skipped_cmps": len(skipped),
        "nan_traces": nan_traces,
    }
    skipped_qc = {"skipped_cmp": np.array([o.cmp for o in skipped], dtype=np.int64),
                  "skipped_nan_traces": np.array([o.dropped_nan for o in skipped], dtype=np.int32)}
    return _assemble(t0, analysed, fields, ix.cmp[rows], ix.cmp_x[rows], ix.cmp_y[rows], spectra, attrs,
                     skipped_qc, warnings_out)


def _assemble(t0, analysed, fields, cmp, cmp_x, cmp_y, spectra, attrs, skipped_qc, warnings_out) -> LineResult:
    """The LineResult of a line pass over ``analysed`` (shared by run and revise)."""
    def cat(name, dtype):
        return np.concatenate([getattr(o.picks, name) for o in analysed]).astype(dtype)

    flags = cat("flags", np.uint16)
    picks = {
        "cmp": np.concatenate([np.full(o.picks.t0.size, o.cmp, dtype=np.int64) for o in analysed]),
        "t0": cat("t0", np.float64),
        "vrms": cat("velocity", np.float32),
        "coherence": cat("coherence", np.float32),
        "sigma": cat("sigma", np.float32),
        "flags": flags,
        "used": ((flags & EXCLUDED) == 0).astype(np.uint8),
        "vint_sigma": np.concatenate(fields["pick_vint_sigma"]).astype(np.float32),
    }
    if fields["eta"] is not None:
        picks["eta"] = np.concatenate([o.pick_eta if o.pick_eta is not None else np.zeros(o.picks.t0.size)
                                       for o in analysed]).astype(np.float32)
    qc = {
        "live_traces": np.array([o.live for o in analysed], dtype=np.int32),
        "nan_traces": np.array([o.dropped_nan for o in analysed], dtype=np.int32),
        "dead_traces": np.array([o.dropped_dead for o in analysed], dtype=np.int32),
        "no_picks": fields["no_picks"],
        "quality": fields["quality"],
        "forced_count": fields["forced_count"],
        "vint_forced": fields["forced"],
        "vint_raw": fields["vint_raw"],
        "path": np.stack([o.picks.path for o in analysed]).astype(np.float32),
        **skipped_qc,
    }
    return LineResult(cmp=cmp, cmp_x=cmp_x, cmp_y=cmp_y, t0=t0, vrms=fields["vrms"], vint=fields["vint"],
                      eta=fields["eta"], picks=picks, qc=qc, spectra=spectra,
                      depth={"z": fields["z"], "t0": fields["depth_t0"], "vint": fields["depth_vint"]},
                      attrs=attrs, warnings=warnings_out, vint_sigma=fields["vint_sigma"])


def revise_result(stored: dict, params: RunParams, edits: dict | None = None,
                  source: str = "") -> LineResult:
    """Rerun the line pass (edits, lateral regularisation, Dix, depth) from a stored result.

    Nothing is rescanned: the picks, their flags and uncertainties, and the traced functions
    come from the file (``stored`` as returned by :func:`velspec.io.result.read_result`).
    ``params`` are the run's parameters with any changes to the pick and interval stages; in
    ``guide`` mode the automatic picks are kept only inside the band around a person's function.
    """
    params.validate()
    t0 = stored["t0"]
    pcmp = stored["picks/cmp"]
    order = np.argsort(pcmp, kind="stable")
    starts = np.searchsorted(pcmp[order], stored["cmp"], side="left")
    stops = np.searchsorted(pcmp[order], stored["cmp"], side="right")
    n = pcmp.size
    if "picks/sigma" not in stored or "qc/path" not in stored:
        raise InputError("the result file has no pick uncertainties or traced functions (/picks/sigma, "
                         "/qc/path): it was written by an older velspec; rerun velspec run")
    sigma = stored["picks/sigma"]
    flags = stored.get("picks/flags", np.zeros(n, np.uint16)).astype(np.uint16)
    eta = stored.get("picks/eta")
    records = []
    for row, (cmp, a, b) in enumerate(zip(stored["cmp"], starts, stops)):
        sel = order[a:b]
        picks = PickResult(t0=stored["picks/t0"][sel].astype(np.float64),
                           velocity=stored["picks/vrms"][sel].astype(np.float32),
                           coherence=stored["picks/coherence"][sel].astype(np.float32),
                           sigma=sigma[sel].astype(np.float32), flags=flags[sel].copy(),
                           path=stored["qc/path"][row].astype(np.float32))
        o = CmpOutcome(position=row, cmp=int(cmp), live=int(stored["qc/live_traces"][row]),
                       dropped_nan=int(stored["qc/nan_traces"][row]), dropped_dead=int(stored["qc/dead_traces"][row]),
                       picks=picks, pick_eta=None if eta is None else eta[sel].astype(np.float32))
        records.append(o)
    fields = line_pass(t0, records, params, edits=edits)
    spectra = {k.split("/", 1)[1]: stored[k] for k in ("spectra/cmp", "spectra/velocity", "spectra/coherence")
               if k in stored}
    attrs = {k: v for k, v in stored["attrs"].items() if k != "format_version"}
    attrs.update(created=_now(), parameters=params.to_json(), velspec_version=__version__,
                 revised_from=source, edited_cmps=int(fields["edited_cmps"]))
    skipped_qc = {k.split("/", 1)[1]: stored[k] for k in ("qc/skipped_cmp", "qc/skipped_nan_traces") if k in stored}
    return _assemble(t0, records, fields, stored["cmp"], stored["cmp_x"], stored["cmp_y"], spectra, attrs,
                     skipped_qc, [])


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


def _set_threads(threads: int) -> None:
    import numba

    most = numba.config.NUMBA_NUM_THREADS
    numba.set_num_threads(min(threads, most) if threads > 0 else most)
