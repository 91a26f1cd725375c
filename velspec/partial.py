"""The partial file of a run in progress (``RESULT.h5.partial``): what the streaming pass has
finished, block by block, so that an interrupted run resumes without redoing it.

Layout (HDF5, written in SWMR mode so the file stays readable whenever the process dies):

- root attributes ``partial_version``, ``parameters`` (JSON of the run's parameters, the thread
  count left out since it does not change the bits), ``input`` (JSON: path, size, SHA-256 of
  the line, as the header pass computes it), ``files`` (SHA-256 of the pick and guide files the
  parameters name), ``block`` (CMPs per block), ``analysed`` (CMPs analysed);
- per analysed CMP, in analysis order: ``position`` (in the line's CMP index), ``cmp``,
  ``live``, ``dropped_nan``, ``dropped_dead``, ``clipped``, ``noisy``, ``scanned`` (1 where it
  had enough live traces), ``path`` (the traced function, m/s, on the t0 axis), ``water``
  (sea-floor time, s, and water velocity, m/s), ``pick_start`` and ``pick_count`` (rows in
  ``picks``);
- ``picks``: the pick tables (:data:`velspec.result.PICK_DTYPE`), block after block;
- ``panel`` and ``panel_item``: the coherence panels kept for QC;
- ``done`` (nblocks,): the completion record of each block, set to 1 only after the block's
  data are written and flushed.

A partial file is only ever extended in place while its run is alive. Resuming copies the
finished blocks into a fresh partial file and renames it over the old one, so a block that died
half-written is simply not there.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import h5py
import numpy as np

from .errors import InputError
from .pipeline import CmpOutcome
from .result import PICK_DTYPE

PARTIAL_VERSION = 1
_COUNTS = ("live", "dropped_nan", "dropped_dead", "clipped", "noisy")


def run_signature(params) -> dict:
    """The parameters that decide a run's bits: all of them but the thread count."""
    d = params.to_dict()
    d.pop("threads", None)
    return d


def named_files(params) -> dict:
    """SHA-256 of the files the parameters name (a person's picks, a guide CSV)."""
    out = {}
    for key in ("edits", "guide"):
        name = getattr(params.pick, key)
        if name and name != "regional" and Path(name).is_file():
            out[key] = "sha256:" + hashlib.sha256(Path(name).read_bytes()).hexdigest()
    return out


class PartialRun:
    """An open partial file. Make one with :meth:`create` or :meth:`resume`.

    Attributes
    ----------
    path : Path
    block : int
        CMPs per block (the completion records are per block).
    n : int
        CMPs analysed.
    done : ndarray of bool (nblocks,)
        Blocks finished.
    """

    def __init__(self, path: Path, h5: h5py.File, block: int, n: int, done: np.ndarray, npick: int):
        self.path, self.h5, self.block, self.n = path, h5, int(block), int(n)
        self.done = done
        self.npick = int(npick)
        self._panel_row = {int(item): k for k, item in enumerate(h5["panel_item"][()])}

    @property
    def nblocks(self) -> int:
        return -(-self.n // self.block)

    def block_span(self, j: int) -> tuple[int, int]:
        """Items (analysed CMPs) of block ``j``."""
        return j * self.block, min((j + 1) * self.block, self.n)

    # -- making ---------------------------------------------------------------------------------

    @classmethod
    def create(cls, path: str | Path, *, params, identity: dict, positions: np.ndarray, cmp: np.ndarray,
               water: np.ndarray, nt: int, nv: int, keep: np.ndarray, block: int) -> PartialRun:
        """A new, empty partial file at ``path`` (replaced if there). ``keep`` are the items whose
        panels are kept; ``water`` (n, 2) the sea-floor time and water velocity of each item."""
        path = Path(path)
        n = len(positions)
        h5 = h5py.File(path, "w", libver="latest")
        try:
            h5.attrs["partial_version"] = PARTIAL_VERSION
            h5.attrs["parameters"] = json.dumps(run_signature(params), sort_keys=True)
            h5.attrs["input"] = json.dumps(identity, sort_keys=True)
            h5.attrs["files"] = json.dumps(named_files(params), sort_keys=True)
            h5.attrs["block"] = int(block)
            h5.attrs["analysed"] = int(n)
            h5.create_dataset("position", data=np.asarray(positions, np.int64))
            h5.create_dataset("cmp", data=np.asarray(cmp, np.int64))
            h5.create_dataset("water", data=np.asarray(water, np.float64).reshape(n, 2))
            for name in _COUNTS:
                h5.create_dataset(name, (n,), dtype=np.int32)
            h5.create_dataset("scanned", (n,), dtype=np.uint8)
            h5.create_dataset("pick_start", (n,), dtype=np.int64)
            h5.create_dataset("pick_count", (n,), dtype=np.int32)
            h5.create_dataset("path", (n, nt), dtype=np.float32, chunks=(max(1, min(block, n)), nt),
                              compression="gzip", compression_opts=1, shuffle=True)
            h5.create_dataset("picks", (0,), maxshape=(None,), dtype=PICK_DTYPE, chunks=(4096,),
                              compression="gzip", compression_opts=1)
            h5.create_dataset("panel_item", data=np.asarray(keep, np.int64))
            h5.create_dataset("panel", (len(keep), nv, nt), dtype=np.float32,
                              chunks=(1, nv, nt) if len(keep) else None)
            h5.create_dataset("done", (-(-n // block),), dtype=np.uint8)
            h5.flush()
            h5.swmr_mode = True
        except BaseException:
            h5.close()
            raise
        return cls(path, h5, block, n, np.zeros(-(-n // block), bool), 0)

    @classmethod
    def resume(cls, path: str | Path, *, params, identity: dict, positions: np.ndarray) -> PartialRun:
        """Open the partial file of an interrupted run to finish it.

        The finished blocks are copied into a fresh file that then replaces the old one, so a
        block cut off half-way leaves nothing behind.

        Raises
        ------
        InputError
            The file is not a velspec partial file, is damaged, or belongs to a run of other
            parameters or another input.
        """
        path = Path(path)
        fresh_path = path.with_name(path.name + ".resuming")
        try:
            old = h5py.File(path, "r", swmr=True)
        except OSError:
            try:
                old = h5py.File(path, "r")
            except OSError:
                raise InputError(f"{path} cannot be read (damaged); start again with --force "
                                 "instead of --resume") from None
        with old:
            check_compatible(path, old, params, identity, positions)
            block = int(old.attrs["block"])
            done = old["done"][()].astype(bool)
            keep = old["panel_item"][()]
            nt = old["path"].shape[1]
            nv = old["panel"].shape[1]
            fresh = cls.create(fresh_path, params=params, identity=identity, positions=positions,
                               cmp=old["cmp"][()], water=old["water"][()], nt=nt, nv=nv, keep=keep, block=block)
            try:
                for j in np.flatnonzero(done):
                    fresh.write_block(int(j), read_outcomes(old, *fresh.block_span(int(j))))
            except BaseException:
                fresh.close()
                fresh_path.unlink(missing_ok=True)
                raise
        fresh.h5.close()
        os.replace(fresh_path, path)
        h5 = h5py.File(path, "r+", libver="latest")
        h5.swmr_mode = True
        return cls(path, h5, block, len(positions), h5["done"][()].astype(bool), _pick_end(h5))

    # -- blocks ---------------------------------------------------------------------------------

    def write_block(self, j: int, outcomes: list[CmpOutcome]) -> None:
        """Write the outcomes of block ``j`` (its CMPs in order), flush, then record it done."""
        lo, hi = self.block_span(j)
        if len(outcomes) != hi - lo:
            raise ValueError(f"block {j} needs {hi - lo} outcomes, got {len(outcomes)}")
        h5 = self.h5
        nt = h5["path"].shape[1]
        paths = np.full((hi - lo, nt), np.nan, np.float32)
        counts = {name: np.zeros(hi - lo, np.int32) for name in _COUNTS}
        scanned = np.zeros(hi - lo, np.uint8)
        tables, start, count = [], np.zeros(hi - lo, np.int64), np.zeros(hi - lo, np.int32)
        cursor = self.npick
        for r, o in enumerate(outcomes):
            for name in _COUNTS:
                counts[name][r] = getattr(o, name)
            start[r] = cursor
            if o.picks is not None:
                scanned[r] = 1
                paths[r] = o.path
                tables.append(o.picks)
                count[r] = o.picks.size
                cursor += o.picks.size
            if o.panel is not None and lo + r in self._panel_row:
                h5["panel"][self._panel_row[lo + r]] = o.panel
        if cursor > self.npick:
            ds = h5["picks"]
            ds.resize((cursor,))
            ds[self.npick:cursor] = np.concatenate(tables).astype(PICK_DTYPE)
        h5["path"][lo:hi] = paths
        for name in _COUNTS:
            h5[name][lo:hi] = counts[name]
        h5["scanned"][lo:hi] = scanned
        h5["pick_start"][lo:hi] = start
        h5["pick_count"][lo:hi] = count
        h5.flush()
        h5["done"][j] = 1   # the record comes after the data it vouches for
        h5.flush()
        self.npick = cursor
        self.done[j] = True

    def read(self, lo: int, hi: int) -> list[CmpOutcome]:
        """Outcomes of items ``lo..hi-1`` (all in finished blocks)."""
        return read_outcomes(self.h5, lo, hi)

    def close(self) -> None:
        if self.h5.id.valid:
            self.h5.close()


def _pick_end(h5: h5py.File) -> int:
    done = h5["done"][()].astype(bool)
    if not done.any():
        return 0
    return int((h5["pick_start"][()] + h5["pick_count"][()]).max())


def read_outcomes(h5: h5py.File, lo: int, hi: int) -> list[CmpOutcome]:
    """The outcomes of items ``lo..hi-1`` as the streaming pass left them."""
    positions = h5["position"][lo:hi]
    cmp = h5["cmp"][lo:hi]
    counts = {name: h5[name][lo:hi] for name in _COUNTS}
    scanned = h5["scanned"][lo:hi]
    start, count = h5["pick_start"][lo:hi], h5["pick_count"][lo:hi]
    paths = h5["path"][lo:hi]
    block = int(h5.attrs["block"])
    panel_row = {int(item): k for k, item in enumerate(h5["panel_item"][()])}
    out = []
    # blocks may have finished in any order (a cluster), but each block's picks are contiguous
    for first in range(lo - lo % block, hi, block):
        a, b = max(first, lo) - lo, min(first + block, hi) - lo
        live = scanned[a:b] == 1
        if live.any():
            p0 = int(start[a:b][live].min())
            picks = h5["picks"][p0: int((start[a:b] + count[a:b])[live].max())]
        for r in range(a, b):
            o = CmpOutcome(position=int(positions[r]), cmp=int(cmp[r]),
                           **{name: int(counts[name][r]) for name in _COUNTS})
            if scanned[r]:
                o.picks = picks[start[r] - p0: start[r] - p0 + count[r]].copy()
                o.path = paths[r]
                if lo + r in panel_row:
                    o.panel = h5["panel"][panel_row[lo + r]]
            out.append(o)
    return out


def check_compatible(path: Path, h5: h5py.File, params, identity: dict, positions: np.ndarray) -> None:
    """Refuse a partial file of another run.

    Raises
    ------
    InputError
        Another input (checksum), other parameters, other pick or guide files, or not a
        partial file of this velspec.
    """
    attrs = dict(h5.attrs)
    if int(attrs.get("partial_version", -1)) != PARTIAL_VERSION:
        raise InputError(f"{path} is not the partial file of a velspec run this version can resume; "
                         "start again with --force")
    theirs = json.loads(attrs["input"])
    if theirs.get("checksum") != identity.get("checksum"):
        raise InputError(f"{path} belongs to a run on another input ({theirs.get('path')}, "
                         f"{theirs.get('checksum', '?')[:19]}...); resume with that line or start again with --force")
    # compared as JSON, the form they are stored in (tuples read back as lists)
    ours, stored = json.loads(json.dumps(run_signature(params), sort_keys=True)), json.loads(attrs["parameters"])
    if ours != stored:
        diff = sorted(_differences(stored, ours))
        raise InputError(f"{path} belongs to a run with other parameters ({', '.join(diff[:4])}"
                         f"{' ...' if len(diff) > 4 else ''}); resume with the same configuration or start "
                         "again with --force")
    files = json.loads(attrs.get("files", "{}"))
    if files != named_files(params):
        raise InputError(f"{path}: the pick or guide file the run used has changed since; start again with --force")
    if not np.array_equal(h5["position"][()], np.asarray(positions)):
        raise InputError(f"{path} analysed other CMPs of the line; start again with --force")


def _differences(a: dict, b: dict, where: str = "") -> list[str]:
    out = []
    for key in sorted(set(a) | set(b)):
        name = f"{where}{key}"
        x, y = a.get(key), b.get(key)
        if isinstance(x, dict) and isinstance(y, dict):
            out += _differences(x, y, name + ".")
        elif x != y:
            out.append(f"{name}: {x!r} then, {y!r} now")
    return out


def partial_state(path: str | Path) -> tuple[int, int] | None:
    """(finished blocks, all blocks) of a partial file, or None when it cannot be read; for
    following a run from outside (tests, progress of a cluster run)."""
    try:
        with h5py.File(path, "r", swmr=True) as h5:
            done = h5["done"][()]
            return int(done.sum()), int(done.size)
    except (OSError, KeyError):
        return None


__all__ = ["PartialRun", "read_outcomes", "check_compatible", "run_signature", "named_files", "partial_state",
           "PARTIAL_VERSION"]
