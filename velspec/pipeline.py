"""The two passes of ``velspec run``, strung together; nothing else.

1. The streaming pass (:func:`stream_pass`) walks the line in blocks of CMP gathers: read
   (:mod:`velspec.io.segy`), scan (:mod:`velspec.scan`), smooth the panels along the line
   (:mod:`velspec.smoothing`), pick (:mod:`velspec.pick`). Only one block of traces is in memory
   at a time; what a CMP leaves behind is its picks, its traced function, a few counts and, for
   the few CMPs chosen for QC, its coherence panel.
2. The line pass (:func:`velspec.linepass.line_pass`) works on the picks alone and can be rerun
   from a result (:func:`revise_result`).

Nothing here knows about the command line; :mod:`velspec.cli` calls :func:`run_line`.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import __version__
from .condition import ConditionReport, condition_gather, supergather
from .cpu import host, set_threads
from .errors import InputError
from .grid import analysis_plan, near_rows_of, result_neighbours
from .io.hdf5 import read_result
from .io.picks_csv import read_functions
from .io.segy import Gather, SegyLine, open_line
from .linepass import LineFields, cmp_slices, line_pass, regularise_line
from .neighbours import LineNeighbours, subset
from .params import RunParams, load_toml
from .pick import pick_panel
from .pick.guide import GuideFor, guide_source
from .regularised import depth_from_interval
from .result import DepthFields, LineAnalysis, RegularisedField, Spectra, now_utc
from .scan import scan_gather, velocity_axis
from .seafloor import NEAR_TRACES, along_line, water_bottom_time
from .smoothing import smoothed_panel

MIN_LIVE = 2  # a CMP needs two live traces for any coherence

Progress = Callable[[int], "tuple[Callable[[int], None], Callable[[], None]]"]
"""``progress(total) -> (update(n), close())``: how a caller follows a long run."""


@dataclass
class CmpOutcome:
    """What the streaming pass keeps of one CMP."""

    position: int            # index in the line's CMP list
    cmp: int
    live: int
    dropped_nan: int
    dropped_dead: int
    clipped: int = 0                 # traces with samples clipped by the conditioning
    noisy: int = 0                   # traces the conditioning left out as noisy
    picks: np.ndarray | None = None  # pick table (cmp filled); None when the CMP was skipped
    path: np.ndarray | None = None   # traced function, m/s on the t0 axis
    panel: np.ndarray | None = None  # kept for QC only


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


@dataclass
class _Scanned:
    """A scanned CMP waiting for its neighbours' panels before it is picked."""

    position: int
    outcome: CmpOutcome
    gather: Gather | None   # None once picked
    panel: np.ndarray | None = None
    best_eta: np.ndarray | None = None


def scan_one(gather: Gather, times: np.ndarray, dt: float, params: RunParams,
             velocities: np.ndarray) -> tuple[CmpOutcome, np.ndarray | None, np.ndarray | None]:
    """Scan one gather: its outcome record, coherence panel (nv, nt) and, for a nonhyperbolic
    scan, the index of the best eta at each (v, t0) (the panel then holds the best over eta)."""
    live = gather.data.shape[0]
    outcome = CmpOutcome(position=-1, cmp=gather.cmp, live=live, dropped_nan=gather.dropped_nan,
                         dropped_dead=gather.dropped_dead)
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
             times: np.ndarray, params: RunParams, velocities: np.ndarray, guide: np.ndarray | None,
             sea_floor: tuple[float, float] | None = None) -> None:
    """Pick a (laterally smoothed) panel into ``outcome``; eta read back at each pick."""
    sp = params.scan
    picks, path = pick_panel(panel, velocities, times, params.pick, offsets=gather.offsets,
                             stretch_limit=sp.stretch_limit,
                             vint_bounds=(params.interval.vint_min, params.interval.vint_max), guide=guide,
                             sea_floor=sea_floor)
    picks["cmp"] = outcome.cmp
    if best_eta is not None:
        rows = np.abs(velocities[None, :] - picks["vrms"][:, None]).argmin(axis=1)
        cols = np.searchsorted(times, picks["t0"] - 1e-9)
        picks["eta"] = eta_axis(sp)[best_eta[rows, cols]].astype(np.float32)
    outcome.picks, outcome.path = picks, path


def sea_floor_pass(line: SegyLine, params: RunParams, most: int = 2000,
                   every: int = 2) -> tuple[np.ndarray, np.ndarray]:
    """Two-way time (s) and water velocity (m/s) of the sea floor at every CMP of the line (NaN
    where none, as on land).

    ``params.pick.water_bottom`` and ``water_velocity`` when the time is given; otherwise found
    on the nearest traces of every ``every``-th CMP (at most ``most`` of them) along the line
    (:func:`velspec.seafloor.water_bottom_time`), made consistent along the line
    (:func:`velspec.seafloor.along_line`) and interpolated between them. Only a dozen traces of
    those CMPs are read.
    """
    pp = params.pick
    if pp.water_bottom > 0:
        return np.full(line.ncmp, pp.water_bottom), np.full(line.ncmp, pp.water_velocity)
    stride = max(every if line.ncmp >= 10 * every else 1, int(np.ceil(line.ncmp / most)))
    sampled = np.unique(np.append(np.arange(0, line.ncmp, stride), line.ncmp - 1))
    found = np.array([water_bottom_time(g.data, g.offsets, line.dt, line.t_first, pp.water_velocity)[:2]
                      for g in (line.read_gather(int(k), nearest=NEAR_TRACES) for k in sampled)]).reshape(-1, 2)
    # the median over about +-5 CMPs of line (+-2 or 3 looked at when every other is)
    times, velocities = along_line(found[:, 0], velocities=found[:, 1], half=max(5 // stride, 2))
    velocities = np.where(np.isfinite(velocities), velocities, pp.water_velocity)
    velocities[~np.isfinite(times)] = np.nan
    if sampled.size == line.ncmp:
        return times, velocities
    every = np.arange(line.ncmp)
    nearest = np.clip(np.searchsorted(sampled, every), 0, sampled.size - 1)
    gap = ~np.isfinite(times[nearest])
    out = [np.interp(every, sampled, np.nan_to_num(a, nan=0.0)) for a in (times, velocities)]
    for a in out:
        a[gap] = np.nan
    return out[0], out[1]


def stream_pass(line: SegyLine, params: RunParams, positions: np.ndarray | None = None,
                progress: Callable[[int], None] | None = None,
                guide_for: GuideFor | None = None, sea_floor: np.ndarray | None = None, *,
                hood=None, span: tuple[int, int] | None = None) -> Iterator[CmpOutcome]:
    """Yield one :class:`CmpOutcome` per analysed CMP, reading ``params.block`` gathers at a time.

    A CMP is picked once the panels of its neighbours within ``params.pick.smooth_cmps`` are
    scanned, so at most one block plus that many panels on each side are held at a time.
    ``sea_floor`` (ncmp, 2) holds the sea-floor time (s) and water velocity (m/s) of every CMP of
    the line (NaN where none).

    ``positions`` are the line positions analysed (default: every CMP), item ``i`` of the
    analysis being CMP ``positions[i]``; ``hood`` says which items are neighbours
    (:mod:`velspec.neighbours`; default: along the line). With ``span = (lo, hi)`` only items
    ``lo..hi-1`` are picked and yielded, and the halo of neighbours their smoothing needs is
    scanned around them: a block of a resumed or distributed run gives the same bits as the
    whole line in one pass.
    """
    positions = np.arange(line.ncmp) if positions is None else np.asarray(positions)
    hood = hood if hood is not None else LineNeighbours(len(positions))
    velocities = velocity_axis(params.scan.vmin, params.scan.vmax, params.scan.nvel, params.scan.axis)
    keep = set(spectra_positions(len(positions), params.keep_spectra).tolist())
    times = line.times
    half = params.pick.smooth_cmps
    guide_for = guide_for or (lambda cmp: None)
    lo, hi = (0, len(positions)) if span is None else (int(span[0]), int(span[1]))
    if hi <= lo:
        return
    scan_lo, scan_hi = hood.first(lo, half), hood.last(hi - 1, half) + 1
    pending: dict[int, _Scanned] = {}   # scanned items by number; those below `nxt` are picked
    profiles: dict[int, np.ndarray] = {}   # the smoothing's window profiles of pending panels
    nxt = lo

    def ready(upto: float):
        nonlocal nxt
        while nxt < hi and nxt in pending and hood.last(nxt, half) <= upto:
            item = pending[nxt]
            if item.panel is not None:
                near, dist = hood.near(nxt, half)
                panel = smoothed_panel([pending[j].panel for j in near], dist, int(np.flatnonzero(near == nxt)[0]),
                                       half, velocities=velocities, step_scale=params.pick.smooth_step, dt=line.dt,
                                       keys=[int(j) for j in near], cache=profiles)
                pick_one(item.outcome, item.gather, panel, item.best_eta, times, params, velocities,
                         guide_for(item.outcome.cmp),
                         None if sea_floor is None else tuple(map(float, sea_floor[item.position])))
                if nxt in keep:
                    item.outcome.panel = panel
            item.gather = None      # picked: only its panel may still serve the neighbours' smoothing
            nxt += 1
            yield item.outcome
        # forget what no later CMP needs: panels before the first neighbour of the next one
        first_needed = hood.first(nxt, half) if nxt < hi else np.inf
        for j in [j for j in pending if j < first_needed]:
            del pending[j]
            profiles.pop(j, None)

    conditioned = _Conditioned(line, params, None if sea_floor is None else sea_floor[:, 0])
    starts = range(scan_lo, scan_hi, params.block)

    def read_block(start: int) -> list:
        # every gather is read and conditioned on the reader thread, in order: one user of `conditioned`
        return [conditioned.gather(int(positions[i])) for i in range(start, min(start + params.block, scan_hi))]

    # a reader thread prefetches the next block of gathers while this one is scanned (the
    # conditioning kernels are serial: a parallel one here would meet the scan's thread pool)
    with ThreadPoolExecutor(max_workers=1) as reader:
        coming = reader.submit(read_block, starts[0]) if len(starts) else None
        for n, start in enumerate(starts):
            block = range(start, min(start + params.block, scan_hi))
            gathers = coming.result()
            coming = reader.submit(read_block, starts[n + 1]) if n + 1 < len(starts) else None
            for i, (gather, report) in zip(block, gathers):
                k = int(positions[i])
                outcome, panel, best = scan_one(gather, times, line.dt, params, velocities)
                outcome.position = k
                outcome.clipped, outcome.noisy = report.traces_clipped, report.noisy
                pending[i] = _Scanned(k, outcome, gather, panel, best)
            del gathers
            yield from ready(float(block[-1]))
            if progress is not None:
                progress(sum(1 for i in block if lo <= i < hi))
    yield from ready(np.inf)


class _Conditioned:
    """Gathers as read, then conditioned (:mod:`velspec.condition`), and combined with their
    neighbours into a supergather when ``condition.supergather_cmps`` > 1. The few neighbours
    a supergather needs are held; nothing else is."""

    def __init__(self, line: SegyLine, params: RunParams, sea_floor: np.ndarray | None = None):
        self.line, self.params = line, params
        # the automatic mute takes out the direct, head and guided waves of marine data; where
        # no sea floor was found (land), the first arrivals may be reflections: no mute there
        cp = params.condition
        self.land = dataclasses.replace(cp, mute="off") if cp.mute == "auto" else cp
        self.marine = sea_floor if sea_floor is not None else np.zeros(line.ncmp)
        self.half = (params.condition.supergather_cmps - 1) // 2
        self.held: dict[int, tuple[Gather, ConditionReport]] = {}

    def _one(self, k: int) -> tuple[Gather, ConditionReport]:
        if k not in self.held:
            g = self.line.read_gather(k)
            cp = self.params.condition if np.isfinite(self.marine[k]) else self.land
            data, offsets, report = condition_gather(g.data, g.offsets, self.line.dt, self.line.t_first, cp)
            self.held[k] = (Gather(cmp=g.cmp, offsets=offsets, data=data, dropped_nan=g.dropped_nan,
                                   dropped_dead=g.dropped_dead + report.dead), report)
        return self.held[k]

    def gather(self, k: int) -> tuple[Gather, ConditionReport]:
        me, report = self._one(k)
        if self.half == 0:
            self.held.clear()
            return me, report
        near = [self._one(j)[0] for j in range(max(k - self.half, 0), min(k + self.half + 1, self.line.ncmp))]
        for j in [j for j in self.held if j < k - self.half]:
            del self.held[j]
        near = [g for g in near if g.data.shape[0]]
        if len(near) < 2 or not me.data.shape[0]:
            return me, report
        data, offsets, _ = supergather([(g.data, g.offsets) for g in near], self.params.condition.supergather_bin)
        return Gather(cmp=me.cmp, offsets=offsets, data=data, dropped_nan=me.dropped_nan,
                      dropped_dead=me.dropped_dead), report


def as_params(params) -> RunParams:
    """RunParams from RunParams, a nested dict (TOML layout), a TOML file path, or None (defaults)."""
    if params is None:
        return RunParams().validate()
    if isinstance(params, RunParams):
        return params.validate()
    if isinstance(params, dict):
        try:
            return RunParams.from_dict(params).validate()
        except TypeError as exc:
            from .errors import ParameterError

            raise ParameterError(str(exc)) from None
    return load_toml(params).validate()


def run_line(line: str | Path, params: RunParams | dict | str | Path | None = None, *,
             progress: Progress | None = None) -> LineAnalysis:
    """Run the whole analysis on a prestack SEG-Y line (``velspec run``); the result is not written.

    Parameters
    ----------
    line : str or Path
        Prestack 2D SEG-Y line (rev 1 or rev 2.0 byte positions by default).
    params : RunParams, dict, str or Path, optional
        Parameters: a RunParams, a nested dict in the TOML file's layout (``{"scan": {"nvel":
        160}}``), the path of a TOML file, or None for the defaults.
    progress : callable, optional
        ``progress(total) -> (update(n), close())`` for progress reporting, in CMPs.

    Returns
    -------
    LineAnalysis

    Raises
    ------
    VelspecError
        Bad input or impossible parameters, with a message that says what to do.
    """
    params = as_params(params)
    set_threads(params.threads)
    edits = read_functions(params.pick.edits, need_cmp=True) if params.pick.edits else None
    with open_line(line, params.read) as segy:
        if edits:
            # say so before a long scan, not after it
            unknown = sorted(set(edits) - set(int(c) for c in segy.index.cmp))
            if unknown:
                raise InputError(f"{params.pick.edits}: picks for CMP(s) the line does not have: "
                                 f"{', '.join(map(str, unknown[:5]))}{' ...' if len(unknown) > 5 else ''}")
        guide_for = guide_source(params, segy.times)
        positions, hood, plan = analysis_plan(segy, params)
        sea_floor, water_velocity = sea_floor_pass(segy, params)
        update, close = progress(len(positions)) if progress else (None, None)
        try:
            outcomes = list(stream_pass(segy, params, positions, progress=update, guide_for=guide_for,
                                        sea_floor=np.stack([sea_floor, water_velocity], axis=1), hood=hood))
        finally:
            if close is not None:
                close()
        ix = segy.index
        identity = segy.identity()
        t0 = segy.times
        warnings_out = list(segy.warnings)
    analysed = [o for o in outcomes if o.picks is not None]
    skipped = [o for o in outcomes if o.picks is None]
    if not analysed:
        raise InputError(f"{line}: no CMP has {MIN_LIVE} or more live traces; nothing to analyse")
    nan_traces = sum(o.dropped_nan for o in outcomes)
    if skipped:
        warnings_out.append(f"{len(skipped)} CMP(s) with fewer than {MIN_LIVE} live traces were left out "
                            f"(first: CMP {skipped[0].cmp})")
    if nan_traces:
        warnings_out.append(f"{nan_traces} trace(s) with NaN or infinite samples were left out")
    rows = np.array([o.position for o in analysed], dtype=np.int64)
    items = np.array([i for i, o in enumerate(outcomes) if o.picks is not None], dtype=np.int64)
    result = analyse_outcomes(analysed, t0, ix.cmp[rows], ix.cmp_x[rows], ix.cmp_y[rows], sea_floor[rows],
                              water_velocity[rows], params, edits, near_rows=near_rows_of(subset(hood, items)))
    if "inline" in plan:
        result = result.replace(inline=plan["inline"][items], crossline=plan["crossline"][items])
    result = regularise_result(result, params)
    kept = [o for o in analysed if o.panel is not None]
    velocities = velocity_axis(params.scan.vmin, params.scan.vmax, params.scan.nvel, params.scan.axis)
    spectra = Spectra(cmp=np.array([o.cmp for o in kept], dtype=np.int64), velocity=velocities.astype(np.float64),
                      coherence=(np.stack([o.panel for o in kept]) if kept
                                 else np.zeros((0, velocities.size, t0.size), dtype=np.float32)))
    attrs = {"velspec_version": __version__, "created": now_utc(), "parameters": params.to_dict(),
             "input": identity, "skipped_cmps": len(skipped), "nan_traces": nan_traces,
             "machine": host()}
    if "grid" in plan:
        attrs["grid"] = plan["grid"]
    qc = dict(result.qc, **skipped_qc(skipped))
    return result.replace(qc=qc, spectra=spectra, attrs=attrs, warnings=warnings_out)


def regularise_result(result: LineAnalysis, params: RunParams) -> LineAnalysis:
    """The result with its regularised interval field, the picks' misfit to it and the depth
    fields from it, when ``params.interval.regularised`` (else as given).

    Window by window along the line (:func:`velspec.linepass.regularised_windows`), as a
    streamed run does, so the two give the same bits.
    """
    if not params.interval.regularised:
        return result
    slices = cmp_slices(result.cmp, result.picks)
    reg_vint, reg_vrms, picks = regularise_line(result.t0, result.picks, slices, result.vint, result.vrms, params,
                                                cmp_x=result.cmp_x, inline=result.inline)
    z, t_of_z, vint_z, vavg_z = depth_from_interval(result.t0, reg_vint, params.interval.dz)
    return result.replace(picks=picks, regularised=RegularisedField(vint=reg_vint, vrms=reg_vrms),
                          depth=DepthFields(z=z, t0=t_of_z.astype(np.float32), vint=vint_z.astype(np.float32),
                                            vavg=vavg_z.astype(np.float32)))


def skipped_qc(skipped: list[CmpOutcome]) -> dict:
    """The ``/qc`` arrays of the CMPs left out (fewer than ``MIN_LIVE`` live traces)."""
    return {"skipped_cmp": np.array([o.cmp for o in skipped], dtype=np.int64),
            "skipped_nan_traces": np.array([o.dropped_nan for o in skipped], dtype=np.int32)}


def analyse_outcomes(analysed: list[CmpOutcome], t0: np.ndarray, cmp: np.ndarray, cmp_x: np.ndarray,
                     cmp_y: np.ndarray, water_bottom: np.ndarray, water_velocity: np.ndarray, params: RunParams,
                     edits: dict | None = None, near_rows=None) -> LineAnalysis:
    """The line pass over the outcomes of consecutive analysed CMPs (the whole line, or a window
    of it): fields, the line pass's flags and the per-CMP ``/qc`` arrays.

    ``cmp``, ``cmp_x``, ``cmp_y``, ``water_bottom`` (s) and ``water_velocity`` (m/s) hold one value
    per outcome. ``edits`` are a person's picks (``{cmp: (t0, vrms)}``; those of other CMPs are
    ignored); ``near_rows(row)`` gives the rows that are lateral neighbours of a row (default:
    along the line). The result has no spectra, no line-wide QC and no provenance.
    """
    picks = np.concatenate([o.picks for o in analysed])
    paths = np.stack([o.path for o in analysed]).astype(np.float32)
    # In guide mode the edits already steered the picking; the line pass then only replaces.
    line_edits = edits if params.pick.edit_mode == "replace" else None
    if line_edits:
        have = set(int(x) for x in cmp)
        line_edits = {c: f for c, f in line_edits.items() if c in have} or None
    extra = {} if near_rows is None else {"near_rows": near_rows}
    picks, fields = line_pass(t0, cmp, picks, paths, params, edits=line_edits,
                              depth=not params.interval.regularised, **extra)
    qc = {"live_traces": np.array([o.live for o in analysed], dtype=np.int32),
          "nan_traces": np.array([o.dropped_nan for o in analysed], dtype=np.int32),
          "dead_traces": np.array([o.dropped_dead for o in analysed], dtype=np.int32),
          "clipped_traces": np.array([o.clipped for o in analysed], dtype=np.int32),
          "noisy_traces": np.array([o.noisy for o in analysed], dtype=np.int32),
          "path": paths,
          "water_bottom": np.asarray(water_bottom, dtype=np.float64),
          "water_velocity": np.asarray(water_velocity, dtype=np.float64)}
    return _assemble(t0, cmp, cmp_x, cmp_y, picks, fields, qc, None, {}, [])


def _assemble(t0, cmp, cmp_x, cmp_y, picks, fields: LineFields, qc, spectra, attrs, warnings_out) -> LineAnalysis:
    """The LineAnalysis of a line pass (shared by run and revise)."""
    qc = dict(qc)
    qc.update(no_picks=fields.no_picks, quality=fields.quality, forced_count=fields.forced_count,
              vint_forced=fields.forced, vint_raw=fields.vint_raw)
    return LineAnalysis(cmp=cmp, cmp_x=cmp_x, cmp_y=cmp_y, t0=t0, vrms=fields.vrms, vint=fields.vint,
                        vint_sigma=fields.vint_sigma, vrms_sigma=fields.vrms_sigma, picks=picks, qc=qc,
                        spectra=spectra,
                        depth=(None if fields.z is None else
                               DepthFields(z=fields.z, t0=fields.depth_t0, vint=fields.depth_vint,
                                           vavg=fields.depth_vavg)),
                        regularised=(None if fields.regularised_vint is None else
                                     RegularisedField(vint=fields.regularised_vint, vrms=fields.regularised_vrms)),
                        eta=fields.eta, attrs=attrs, warnings=warnings_out)


def revise_result(result: LineAnalysis | str | Path, edits: dict | str | Path | None = None, *,
                  edit_mode: str = "replace", params: RunParams | dict | str | Path | None = None) -> LineAnalysis:
    """Rerun the line pass (edits, lateral regularisation, Dix, depth) of a result (``velspec revise``).

    Nothing is rescanned: the picks, their flags and uncertainties, and the traced functions
    come from the result.

    Parameters
    ----------
    result : LineAnalysis, or the path of a result file
        What to revise (it is not changed).
    edits : dict, str or Path, optional
        A person's picks: a CSV file (columns ``cmp,t0_s,vrms_m_s``; rows with ``used`` = 0
        skipped, so the output of ``velspec picks`` can be given back) or ``{cmp: (t0, vrms)}``.
    edit_mode : str
        ``"replace"``: at the CMPs in ``edits`` the person's picks replace the automatic ones;
        ``"guide"``: only the automatic picks inside the band around the person's function are
        kept there (the person's picks are used where none is).
    params : RunParams, dict, str or Path, optional
        Changed parameters; their ``[pick]`` and ``[interval]`` stages replace the run's (the
        scan's stay as they were, since nothing is rescanned). None keeps the run's.

    Returns
    -------
    LineAnalysis
        With ``revised_from`` and ``edited_cmps`` in its attributes.
    """
    source = ""
    if not isinstance(result, LineAnalysis):
        source = str(result)
        result = read_result(result)
    if "qc/path" not in {f"qc/{k}" for k in result.qc} or not np.isfinite(result.picks["sigma"]).all():
        raise InputError("the result has no pick uncertainties or traced functions (/picks/sigma, /qc/path): "
                         "it was written by an older velspec; rerun velspec run")
    run_params = result.params
    if params is not None:
        changed = as_params(params)
        run_params = dataclasses.replace(run_params, pick=changed.pick, interval=changed.interval)
    edit_file = ""
    if edits is not None and not isinstance(edits, dict):
        edit_file = str(edits)
        edits = read_functions(edits, need_cmp=True)
    run_params = run_params.with_overrides(pick__edits=edit_file, pick__edit_mode=edit_mode).validate()
    picks, fields = line_pass(result.t0, result.cmp, result.picks, np.asarray(result.qc["path"], np.float32),
                              run_params, edits=edits or None, near_rows=near_rows_of(result_neighbours(result)),
                              depth=not run_params.interval.regularised)
    attrs = {k: v for k, v in result.attrs.items() if k != "format_version"}
    attrs.update(created=now_utc(), parameters=run_params.to_dict(), velspec_version=__version__,
                 revised_from=source, edited_cmps=int(fields.edited_cmps))
    qc = {k: result.qc[k] for k in ("live_traces", "nan_traces", "dead_traces", "clipped_traces", "noisy_traces",
                                    "path", "water_bottom",
                                    "water_velocity",
                                    "skipped_cmp", "skipped_nan_traces") if k in result.qc}
    revised = _assemble(result.t0, result.cmp, result.cmp_x, result.cmp_y, picks, fields, qc, result.spectra, attrs,
                        [])
    revised = revised.replace(inline=result.inline, crossline=result.crossline)
    return regularise_result(revised, run_params)


__all__ = ["run_line", "revise_result", "regularise_result", "analyse_outcomes",
           "stream_pass", "scan_one", "pick_one", "CmpOutcome", "as_params",
           "MIN_LIVE"]
