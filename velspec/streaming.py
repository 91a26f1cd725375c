"""``velspec run`` straight to disk: flat memory, resumable, on one machine or a Dask cluster.

1. The streaming pass runs block by block (``params.block`` analysed CMPs); each finished
   block's outcomes (picks, traced functions, counts, kept panels) go to the partial file
   ``RESULT.h5.partial`` (:mod:`velspec.partial`) with a completion record. A resumed run skips
   the finished blocks and scans again only the ``smooth_cmps`` halo around the others; on a
   cluster (:mod:`velspec.distributed`) every task is a run of blocks with its halo.
2. The line pass reads the outcomes back a block of CMPs at a time with the +-``lateral_cmps``
   neighbours its lateral median needs and writes the fields block by block into
   ``RESULT.h5.fields.partial`` (the layout of :func:`velspec.write_result`), then the depth
   fields on the line's depth axis.
3. The result is renamed into place, and only then is the partial file removed: an interrupted
   run never leaves a file under the result's name.

Memory holds the header index, one block of gathers with its halo of panels, and one window of
the line pass, whatever the line's length. The bits are those of :func:`velspec.run_line`
followed by :func:`velspec.write_result` (tested), whatever the blocks, the thread count, an
interruption or the cluster.
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np

from . import __version__
from .cpu import host, set_threads
from .errors import InputError, VelspecError
from .flags import used_mask
from .grid import analysis_plan
from .interval import deepest, depth_fields
from .io.hdf5 import ResultWriter, partial_path
from .io.picks_csv import read_functions
from .io.segy import open_line
from .linepass import line_trend, regularise_window, regularised_windows
from .neighbours import LineNeighbours, subset
from .partial import PartialRun
from .pick.guide import guide_source
from .pipeline import (
    MIN_LIVE,
    CmpOutcome,
    Progress,
    analyse_outcomes,
    as_params,
    sea_floor_pass,
    spectra_positions,
    stream_pass,
)
from .regularised import depth_from_interval
from .result import PICK_DTYPE, Spectra, now_utc
from .scan import velocity_axis

LINE_BLOCK = 256   # CMPs per block of the line pass: a multiple of the result's 64-CMP chunks


@dataclass
class RunSummary:
    """What :func:`run_to_file` wrote.

    Attributes
    ----------
    path : Path
        The result file.
    cmps : int
        CMPs in the result.
    picks, used : int
        Picks in the result, and those used in the fields.
    resumed_blocks : int
        Blocks of the streaming pass found finished in the partial file (0 for a fresh run).
    blocks : int
        Blocks of the streaming pass in all.
    """

    path: Path
    cmps: int
    picks: int
    used: int
    resumed_blocks: int
    blocks: int


def fields_partial_path(out: str | Path) -> Path:
    """Where the line pass writes the result before it is renamed: ``RESULT.h5.fields.partial``."""
    out = Path(out)
    return out.with_name(out.name + ".fields.partial")


def run_to_file(line: str | Path, out: str | Path, params=None, *, resume: bool = False, force: bool = False,
                progress: Progress | None = None, workers: int = 0, scheduler: str | None = None) -> RunSummary:
    """Run the whole analysis on a line and write the result file, streaming (``velspec run``).

    Parameters
    ----------
    line : str or Path
        Prestack SEG-Y line (2D, or 3D-binned with ``read.geometry = "3d"``).
    out : str or Path
        Result file to write (HDF5, the layout of :func:`velspec.write_result`).
    params : RunParams, dict, str or Path, optional
        As for :func:`velspec.run_line`.
    resume : bool
        Finish the interrupted run whose partial file ``OUT.partial`` is beside ``out``,
        without redoing its finished blocks (default False).
    force : bool
        Replace an existing result, and start afresh over an existing partial file.
    progress : callable, optional
        ``progress(total) -> (update(n), close())``, in CMPs.
    workers : int
        Run the streaming pass on a local Dask cluster of this many processes (default 0: in
        this process, on ``params.threads`` threads).
    scheduler : str, optional
        Address (``tcp://HOST:PORT``) of a running dask.distributed scheduler to run the
        streaming pass on; its workers must read ``line`` at the same path.

    Returns
    -------
    RunSummary

    Raises
    ------
    VelspecError
        Bad input, impossible parameters, or a partial file of another run (resume), with a
        message that says what to do.
    """
    params = as_params(params)
    set_threads(params.threads)
    out = Path(out)
    partial = partial_path(out)
    if out.exists() and not force:
        raise InputError(f"{out} exists; use --force to overwrite it")
    if resume and not partial.exists():
        raise InputError(f"there is no interrupted run to resume ({partial} does not exist); "
                         "run without --resume to start one")
    if partial.exists() and not resume and not force:
        raise InputError(f"{partial} holds an interrupted run; add --resume to finish it, or --force to start again")
    edits = read_functions(params.pick.edits, need_cmp=True) if params.pick.edits else None
    with open_line(line, params.read) as segy:
        if edits:
            unknown = sorted(set(edits) - set(int(c) for c in segy.index.cmp))
            if unknown:
                raise InputError(f"{params.pick.edits}: picks for CMP(s) the line does not have: "
                                 f"{', '.join(map(str, unknown[:5]))}{' ...' if len(unknown) > 5 else ''}")
        positions, hood, plan_attrs = analysis_plan(segy, params)
        identity = segy.identity()
        t0 = segy.times
        velocities = velocity_axis(params.scan.vmin, params.scan.vmax, params.scan.nvel, params.scan.axis)
        if resume:
            run = PartialRun.resume(partial, params=params, identity=identity, positions=positions)
        else:
            sea_floor, water_velocity = sea_floor_pass(segy, params)
            water = np.stack([sea_floor, water_velocity], axis=1)[positions]
            run = PartialRun.create(partial, params=params, identity=identity, positions=positions,
                                    cmp=segy.index.cmp[positions], water=water, nt=t0.size, nv=velocities.size,
                                    keep=spectra_positions(len(positions), params.keep_spectra), block=params.block)
        try:
            resumed = int(run.done.sum())
            _stream(segy, params, run, positions, hood, progress, workers, scheduler, line)
            summary = _line_pass(run, segy, params, positions, hood, plan_attrs, identity, t0, velocities, edits, out,
                                 force)
        except VelspecError:
            # a user error of a fresh run leaves nothing behind; an interruption or a crash keeps
            # the partial file to resume from, and so does any failure of a resumed run
            run.close()
            if not resume:
                partial.unlink(missing_ok=True)
            raise
        finally:
            run.close()
    partial.unlink(missing_ok=True)
    summary.resumed_blocks, summary.blocks = resumed, run.nblocks
    return summary


def _stream(segy, params, run: PartialRun, positions, hood, progress, workers, scheduler, line) -> None:
    """Finish every block of the streaming pass not yet recorded done."""
    todo = np.flatnonzero(~run.done)
    if todo.size == 0:
        return
    total = sum(run.block_span(int(j))[1] - run.block_span(int(j))[0] for j in todo)
    update, close = progress(total) if progress else (None, None)
    water = np.full((segy.ncmp, 2), np.nan)
    water[positions] = run.h5["water"][()]
    try:
        if workers or scheduler:
            from .distributed import stream_on_cluster

            stream_on_cluster(segy, params, run, positions, hood, water, todo, workers=workers, scheduler=scheduler,
                              update=update)
            return
        guide_for = guide_source(params, segy.times)
        for lo_block, hi_block in _runs(todo):
            lo, hi = run.block_span(lo_block)[0], run.block_span(hi_block - 1)[1]
            held: list[CmpOutcome] = []
            j = lo_block
            for outcome in stream_pass(segy, params, positions, update, guide_for, water, hood=hood, span=(lo, hi)):
                held.append(outcome)
                a, b = run.block_span(j)
                if len(held) == b - a:
                    run.write_block(j, held)
                    held, j = [], j + 1
    finally:
        if close is not None:
            close()


def _window_near(rows_hood, lo: int, hi: int):
    """``near_rows`` of the line pass on rows ``lo..hi-1``: the grid neighbours inside the window
    (complete for the rows the window is written for; its halo rows are not kept)."""
    def near(row: int, radius: int) -> np.ndarray:
        j = rows_hood.near(lo + row, radius)[0] - lo
        return j[(j >= 0) & (j < hi - lo)]
    return near


def _regularise(f: h5py.File, writer: ResultWriter, t0: np.ndarray, params, cmp_x: np.ndarray,
                inline: np.ndarray | None) -> float:
    """The regularised field of the result file ``f`` being written, window by window as
    :func:`velspec.linepass.regularise_line` takes them (same bits), read back from the file's
    picks; returns the deepest depth it reaches (m)."""
    pick_cmp = f["picks/cmp"][()]
    cmp = f["cmp"][()]
    starts = np.searchsorted(pick_cmp, cmp, side="left")
    stops = np.searchsorted(pick_cmp, cmp, side="right")
    del pick_cmp
    cols = ("t0", "vrms", "sigma", "flags", "misfit")
    flags = f["picks/flags"][()]
    use = used_mask(flags) & (f["picks/t0"][()] > 0) & (f["picks/t0"][()] <= t0[-1])
    trend = line_trend(f["picks/t0"][()][use], f["picks/vrms"][()][use])
    del flags, use
    zmax = 0.0
    for a, b, lo, hi in regularised_windows(cmp.size):
        p0, p1 = int(starts[lo]), int(stops[hi - 1])
        picks = np.zeros(p1 - p0, dtype=PICK_DTYPE)
        for name in cols:
            picks[name] = f[f"picks/{name}"][p0:p1]
        rows = np.repeat(np.arange(hi - lo), stops[lo:hi] - starts[lo:hi])
        got = regularise_window(t0, picks, rows, hi - lo, params, cmp_x[lo:hi],
                                None if inline is None else inline[lo:hi], trend)
        if got is None:
            vint, vrms = f["vint"][a:b], f["vrms"][a:b]
        else:
            w_vint, w_vrms, misfit = got
            vint, vrms = w_vint[a - lo: b - lo], w_vrms[a - lo: b - lo]
            k0, k1 = int(starts[a]), int(stops[b - 1])
            f["picks/misfit"][k0:k1] = misfit[k0 - p0: k1 - p0]
        writer.put_rows("regularised/vint", a, vint)
        writer.put_rows("regularised/vrms", a, vrms)
        zmax = max(zmax, float(deepest(t0, vint).max()))
    return zmax


def _runs(blocks: np.ndarray) -> list[tuple[int, int]]:
    """Consecutive block numbers grouped: [(first, last + 1), ...]."""
    out = []
    for j in blocks.tolist():
        if out and out[-1][1] == j:
            out[-1] = (out[-1][0], j + 1)
        else:
            out.append((j, j + 1))
    return out


def _line_pass(run: PartialRun, segy, params, positions, hood, plan_attrs, identity, t0, velocities, edits, out,
               force) -> RunSummary:
    """The line pass over the finished outcomes, a block of CMPs at a time, into the result file."""
    h5 = run.h5
    scanned = h5["scanned"][()].astype(bool)
    items = np.flatnonzero(scanned)            # the rows of the result
    if items.size == 0:
        raise InputError(f"{segy.path}: no CMP has {MIN_LIVE} or more live traces; nothing to analyse")
    counts = {name: h5[name][()] for name in ("dropped_nan",)}
    skipped = np.flatnonzero(~scanned)
    nan_traces = int(counts["dropped_nan"].sum())
    if skipped.size:
        warnings.warn(f"{skipped.size} CMP(s) with fewer than {MIN_LIVE} live traces were left out "
                      f"(first: CMP {int(h5['cmp'][skipped[0]])})", stacklevel=3)
    if nan_traces:
        warnings.warn(f"{nan_traces} trace(s) with NaN or infinite samples were left out", stacklevel=3)
    rows_hood = subset(hood, items)
    grid = not isinstance(rows_hood, LineNeighbours)
    k = params.pick.lateral_cmps
    nrows = items.size
    water = h5["water"][()]
    ix = segy.index
    tmp = fields_partial_path(out)
    inline = plan_attrs.pop("inline", None)
    crossline = plan_attrs.pop("crossline", None)
    try:
        with h5py.File(tmp, "w") as f:
            writer = None
            zmax = 0.0
            used = npick = 0
            for a in range(0, nrows, LINE_BLOCK):
                b = min(a + LINE_BLOCK, nrows)
                lo, hi = rows_hood.first(a, k), rows_hood.last(b - 1, k) + 1
                if hi - lo < min(nrows, 3):   # the outlier test needs three CMPs, as on the whole line
                    hi = min(nrows, lo + 3)
                    lo = max(0, hi - 3)
                window = [o for o in run.read(int(items[lo]), int(items[hi - 1]) + 1) if o.picks is not None]
                its = items[lo:hi]
                pos = positions[its]
                near = None
                if grid:
                    near = _window_near(rows_hood, lo, hi)
                part = analyse_outcomes(window, t0, ix.cmp[pos], ix.cmp_x[pos], ix.cmp_y[pos], water[its, 0],
                                        water[its, 1], params, edits, near_rows=near)
                if inline is not None:
                    part = part.replace(inline=inline[its], crossline=crossline[its])
                if writer is None:
                    writer = ResultWriter(f, nrows, part, regularised=params.interval.regularised)
                writer.append(part, slice(a - lo, b - lo))
                zmax = max(zmax, float(deepest(t0, part.vint[a - lo: b - lo]).max()))
                sel = slice(*np.searchsorted(part.picks["cmp"], [part.cmp[a - lo], part.cmp[b - lo - 1] + 1]))
                npick += part.picks[sel].size
                used += int(part.used[sel].sum())
            dz = params.interval.dz
            if params.interval.regularised:
                zmax = _regularise(f, writer, t0, params, ix.cmp_x[positions[items]],
                                   None if inline is None else inline[items])
            z = np.arange(0.0, zmax + 0.5 * dz, dz)
            writer.start_depth(z, vavg=params.interval.regularised)
            for a in range(0, nrows, LINE_BLOCK):
                b = min(a + LINE_BLOCK, nrows)
                if params.interval.regularised:
                    _, t_of_z, vint_z, vavg_z = depth_from_interval(t0, f["regularised/vint"][a:b], dz, z=z)
                    writer.append_depth(a, t_of_z.astype(np.float32), vint_z.astype(np.float32),
                                        vavg_z.astype(np.float32))
                else:
                    _, t_of_z, vint_z = depth_fields(t0, f["vint"][a:b], dz, z=z)
                    writer.append_depth(a, t_of_z, vint_z)
            keep = [int(i) for i in h5["panel_item"][()] if scanned[int(i)]]
            panels = [run.read(i, i + 1)[0].panel for i in keep]
            spectra = Spectra(cmp=h5["cmp"][()][keep].astype(np.int64) if keep else np.zeros(0, np.int64),
                              velocity=velocities.astype(np.float64),
                              coherence=(np.stack(panels) if panels
                                         else np.zeros((0, velocities.size, t0.size), dtype=np.float32)))
            attrs = {"velspec_version": __version__, "created": now_utc(), "parameters": params.to_dict(),
                     "input": identity, "skipped_cmps": int(skipped.size), "nan_traces": nan_traces,
                     "machine": host(), **plan_attrs}
            line_qc = {"skipped_cmp": h5["cmp"][()][skipped].astype(np.int64),
                       "skipped_nan_traces": counts["dropped_nan"][skipped].astype(np.int32)}
            writer.finish(attrs, spectra, line_qc)
        if out.exists() and not force:
            raise InputError(f"{out} exists; use --force to overwrite it")
        os.replace(tmp, out)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return RunSummary(path=out, cmps=nrows, picks=npick, used=used, resumed_blocks=0, blocks=run.nblocks)


__all__ = ["run_to_file", "RunSummary", "fields_partial_path", "LINE_BLOCK"]
