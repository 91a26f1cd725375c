"""The result file (HDF5, format_version 1): a :class:`~velspec.result.LineAnalysis` written
atomically and read back.

The layout is the outside contract of ``../shared/design/interface.md`` (also in the README):
root attributes, ``/cmp``, ``/cmp_x``, ``/cmp_y``, ``/t0``, ``/vrms``, ``/vint``, ``/picks/*``,
and the ``/qc``, ``/spectra`` and ``/depth`` groups. Every dataset has a ``units`` attribute, and
the axis datasets (``/cmp``, ``/t0``, ``/spectra/velocity``, ``/depth/z``) are attached to the
fields as HDF5 dimension scales, so any HDF5 tool shows labelled axes. The file is written as
``NAME.partial`` beside the output and renamed into place only when complete, so a reader never
sees half a result. Files written before the axes were attached read the same way.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import h5py
import numpy as np

from ..errors import InputError
from ..flags import bit_names, used_mask
from ..result import PICK_COLUMNS, DepthFields, LineAnalysis, RegularisedField, Spectra, empty_picks

FORMAT_VERSION = 1

# units and one-line meaning of every dataset that is not a pick column
_FIELDS = {
    "cmp": ("1", "numbers of the CMPs analysed, ascending"),
    "cmp_x": ("m", "CMP x coordinate"),
    "cmp_y": ("m", "CMP y coordinate"),
    "inline": ("1", "inline number of each CMP bin (3D-binned input)"),
    "crossline": ("1", "crossline number of each CMP bin (3D-binned input)"),
    "t0": ("s", "zero-offset two-way time from the traces' time zero"),
    "vrms": ("m/s", "stacking velocity: best-fit hyperbola over the offsets used; t0*vrms^2 linear between picks"),
    "vint": ("m/s", "constrained Dix interval velocity in time, inside the physical range"),
    "vint_sigma": ("m/s", "one-standard-deviation uncertainty of vint: the picks' sigma through Dix, grown "
                          "between distant picks"),
    "vrms_sigma": ("m/s", "one-standard-deviation uncertainty of vrms: the picks' sigma, grown between distant picks"),
    "eta": ("1", "anellipticity of the nonhyperbolic moveout (Alkhalifah & Tsvankin, 1995), linear between picks"),
    "picks/used": ("1", "1 where the pick entered the velocity fields"),
    "qc/quality": ("1", "per CMP: 0 good, 1 fair, 2 poor (README: quality per CMP)"),
    "qc/live_traces": ("1", "traces used"),
    "qc/nan_traces": ("1", "traces left out because they held NaN or infinite samples"),
    "qc/dead_traces": ("1", "traces left out because they were flagged dead or were all zero"),
    "qc/clipped_traces": ("1", "traces with spikes clipped by the conditioning"),
    "qc/noisy_traces": ("1", "traces the conditioning left out as noisy against their neighbours in offset"),
    "qc/no_picks": ("1", "1 where no pick passed the thresholds and the traced function was used"),
    "qc/forced_count": ("1", "pick intervals whose interval velocity the bounds changed"),
    "qc/vint_forced": ("1", "1 where the physical bounds changed vint by more than 1 m/s"),
    "qc/vint_raw": ("m/s", "unconstrained Dix interval velocity, signed square root (negative: imaginary)"),
    "qc/path": ("m/s", "traced dynamic-programming velocity function on every t0 sample"),
    "qc/water_velocity": ("m/s", "velocity of the sea floor's hyperbola on the near offsets (or given); "
                                 "NaN where none"),
    "qc/water_bottom": ("s", "two-way time of the sea floor found in the data (or given); NaN where none, as on land"),
    "qc/skipped_cmp": ("1", "CMPs left out (fewer than 2 live traces)"),
    "qc/skipped_nan_traces": ("1", "traces with NaN samples in the CMPs left out"),
    "spectra/cmp": ("1", "CMP of each kept coherence panel"),
    "spectra/velocity": ("m/s", "trial stacking velocities of the kept panels"),
    "spectra/coherence": ("1", "kept coherence panels, as picked (after the smoothing along the line)"),
    "depth/z": ("m", "depth below the datum of the input times"),
    "depth/t0": ("s", "two-way time at each depth"),
    "depth/vint": ("m/s", "interval velocity at each depth"),
    "depth/vavg": ("m/s", "average velocity from the datum to each depth (depth / one-way time)"),
    "regularised/vint": ("m/s", "line-wide regularised interval velocity in time, inside the physical range"),
    "regularised/vrms": ("m/s", "stacking velocity the regularised interval field predicts back"),
}
_PICKS = {f"picks/{name}": (units, meaning) for name, _, units, meaning in PICK_COLUMNS}

# which axis datasets label the dimensions of a dataset, by its shape's kind
_AXES_CMP_T0 = ("cmp", "t0")


def partial_path(path: str | Path) -> Path:
    """Where ``path`` is written before it is complete: ``PATH.partial`` beside it."""
    path = Path(path)
    return path.with_name(path.name + ".partial")


def write_result(path: str | Path, result: LineAnalysis, force: bool = False) -> Path:
    """Write a result to ``path`` atomically (``PATH.partial``, then renamed).

    Parameters
    ----------
    path : str or Path
        The HDF5 file to write.
    result : LineAnalysis
        What to write.
    force : bool
        Replace an existing file.

    Raises
    ------
    InputError
        ``path`` exists and ``force`` is false.
    """
    path = Path(path)
    if path.exists() and not force:
        raise InputError(f"{path} exists; use --force to overwrite it")
    tmp = partial_path(path)
    try:
        with h5py.File(tmp, "w") as h5:
            _write(h5, result)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def _write(h5: h5py.File, r: LineAnalysis) -> None:
    writer = ResultWriter(h5, r.cmp.size, r)
    writer.append(r)
    if r.depth is not None:
        writer.start_depth(r.depth.z, vavg=r.depth.vavg is not None)
        writer.append_depth(0, r.depth.t0, r.depth.vint, r.depth.vavg)
    writer.finish(r.attrs, r.spectra, {k: v for k, v in r.qc.items() if f"qc/{k}" not in writer.per_row})


class ResultWriter:
    """A result file (format_version 1) filled in blocks of CMPs, so that no field of the whole
    line is ever in memory: ``velspec run`` writes each block's fields as the line pass makes
    them. The layout is the one :func:`write_result` writes (it uses this writer too).

    Parameters
    ----------
    h5 : h5py.File
        Open for writing, empty.
    nrows : int
        CMPs the result will have.
    first : LineAnalysis
        A part of the result (any block of CMPs): it says which fields, QC arrays and pick
        columns there are and their types.
    chunk_rows : int
        CMPs per HDF5 chunk of the (CMP, ...) fields (default 64).
    regularised : bool
        Make room for the regularised field and the picks' misfit even if ``first`` has none
        (a streamed run writes them after the other fields, :meth:`put_rows`).

    Notes
    -----
    Call :meth:`append` for consecutive blocks, :meth:`start_depth` and :meth:`append_depth`
    for the depth fields, then :meth:`finish`, which writes the root attributes (the
    ``format_version`` last).
    """

    def __init__(self, h5: h5py.File, nrows: int, first: LineAnalysis, chunk_rows: int = 64,
                 regularised: bool = False):
        self.h5, self.nrows, self.chunk_rows = h5, int(nrows), int(chunk_rows)
        self.row = 0
        self.npick = 0
        self.nt = first.t0.size
        self.axes = {"cmp": self._new("cmp", (self.nrows,), np.int64), "t0": _put(h5, "t0", first.t0)}
        for name in ("cmp", "t0"):
            self.axes[name].make_scale(name)
        self.per_row: dict[str, str] = {}   # dataset name -> where in a part it comes from
        rows = first.cmp.size

        def per_row(name, value, source):
            value = np.asarray(value)
            ds = self._new(name, (self.nrows, *value.shape[1:]), value.dtype)
            dims = ("cmp", "t0") if value.ndim == 2 and value.shape[1] == self.nt else ("cmp",)[: value.ndim]
            for k, axis in enumerate(dims):
                ds.dims[k].attach_scale(self.axes[axis])
                ds.dims[k].label = axis
            self.per_row[name] = source

        for name in ("cmp_x", "cmp_y", "vrms", "vint", "vint_sigma", "vrms_sigma"):
            if getattr(first, name) is not None:
                per_row(name, getattr(first, name), name)
        if first.eta is not None:
            per_row("eta", first.eta, "eta")
        for name in ("inline", "crossline"):
            if getattr(first, name, None) is not None:
                per_row(name, getattr(first, name), name)
        for name, value in first.qc.items():
            value = np.asarray(value)
            if value.ndim >= 1 and value.shape[0] == rows and not name.startswith("skipped"):
                per_row(f"qc/{name}", value, f"qc:{name}")
        has_regularised = regularised or first.regularised is not None
        if has_regularised:
            for name in ("vint", "vrms"):
                per_row(f"regularised/{name}", first.vint, f"regularised:{name}")
        absent = {"eta"} if first.eta is None else set()
        absent |= {"misfit"} if not has_regularised else set()
        self.columns = [name for name, _, _, _ in PICK_COLUMNS if name not in absent]
        for name in self.columns:
            ds = self._new(f"picks/{name}", (0,), first.picks.dtype[name], grow=True)
            if name == "flags":
                ds.attrs["bits"] = json.dumps(bit_names())
        self._new("picks/used", (0,), np.uint8, grow=True)

    def _new(self, name: str, shape: tuple, dtype, grow: bool = False) -> h5py.Dataset:
        big = len(shape) >= 2 and int(np.prod(shape)) > 4096
        if grow:
            ds = self.h5.create_dataset(name, shape=shape, maxshape=(None,), dtype=dtype, chunks=(16384,))
        else:
            chunks = (max(1, min(self.chunk_rows, shape[0])), *shape[1:]) if big else None
            # gzip is readable by every HDF5 tool; level 1 with byte shuffling keeps most of the
            # gain on smooth velocity fields at a fraction of the time of higher levels.
            ds = self.h5.create_dataset(name, shape=shape, dtype=dtype, chunks=chunks,
                                        compression="gzip" if big else None,
                                        compression_opts=1 if big else None, shuffle=big)
        _describe(ds, name)
        return ds

    def _source(self, part: LineAnalysis, source: str):
        if source.startswith("qc:"):
            return part.qc[source[3:]]
        if source.startswith("regularised:"):
            return getattr(part.regularised, source.split(":")[1])
        return getattr(part, source)

    def append(self, part: LineAnalysis, rows: slice | None = None) -> None:
        """Write the CMPs ``rows`` of ``part`` (default all) after those already written, with
        their picks."""
        rows = rows or slice(0, part.cmp.size)
        cmp = part.cmp[rows]
        n = cmp.size
        a, b = self.row, self.row + n
        if b > self.nrows:
            raise ValueError(f"{b} CMPs appended to a result of {self.nrows}")
        self.h5["cmp"][a:b] = cmp
        for name, source in self.per_row.items():
            if source.startswith("regularised:") and part.regularised is None:
                continue     # written later (put_rows)
            self.h5[name][a:b] = np.asarray(self._source(part, source))[rows]
        lo, hi = np.searchsorted(part.picks["cmp"], [cmp[0], cmp[-1] + 1]) if n else (0, 0)
        picks = part.picks[lo:hi]
        m = self.npick + picks.size
        for name in self.columns:
            ds = self.h5[f"picks/{name}"]
            ds.resize((m,))
            ds[self.npick:m] = picks[name]
        ds = self.h5["picks/used"]
        ds.resize((m,))
        ds[self.npick:m] = used_mask(picks["flags"]).astype(np.uint8)
        self.row, self.npick = b, m

    def put_rows(self, name: str, start: int, value: np.ndarray) -> None:
        """Write ``value`` into the per-CMP dataset ``name`` from row ``start`` on (fields filled
        after the others: the regularised field of a streamed run)."""
        self.h5[name][start:start + len(value)] = value

    def start_depth(self, z: np.ndarray, vavg: bool = False) -> None:
        """Create the depth fields on the depth axis ``z`` (m)."""
        self.axes["depth/z"] = _put(self.h5, "depth/z", z)
        self.axes["depth/z"].make_scale("depth")
        for name in ("t0", "vint") + (("vavg",) if vavg else ()):
            ds = self._new(f"depth/{name}", (self.nrows, np.asarray(z).size), np.float32)
            for k, axis in enumerate(("cmp", "depth/z")):
                ds.dims[k].attach_scale(self.axes[axis])
                ds.dims[k].label = axis

    def append_depth(self, start: int, t0: np.ndarray, vint: np.ndarray, vavg: np.ndarray | None = None) -> None:
        """Write the depth fields of the CMPs from row ``start`` on."""
        stop = start + len(t0)
        self.h5["depth/t0"][start:stop] = t0
        self.h5["depth/vint"][start:stop] = vint
        if vavg is not None:
            self.h5["depth/vavg"][start:stop] = vavg

    def finish(self, attrs: dict, spectra: Spectra | None, line_qc: dict) -> None:
        """Write the kept panels, the line-wide QC arrays and the root attributes; the file is then
        complete (``format_version`` is written last)."""
        if self.row != self.nrows:
            raise ValueError(f"{self.row} of {self.nrows} CMPs written")
        for name, value in line_qc.items():
            _put(self.h5, f"qc/{name}", value)
        if spectra is not None:
            axes = self.axes
            axes["spectra/cmp"] = _put(self.h5, "spectra/cmp", spectra.cmp)
            axes["spectra/velocity"] = _put(self.h5, "spectra/velocity", spectra.velocity)
            axes["spectra/cmp"].make_scale("cmp of the kept panel")
            axes["spectra/velocity"].make_scale("trial stacking velocity")
            ds = _put(self.h5, "spectra/coherence", spectra.coherence)
            for k, axis in enumerate(("spectra/cmp", "spectra/velocity", "t0")):
                ds.dims[k].attach_scale(axes[axis])
                ds.dims[k].label = axis
        for key, value in attrs.items():
            if key == "format_version":
                continue
            self.h5.attrs[key] = json.dumps(value, sort_keys=True) if isinstance(value, dict) else value
        self.h5.attrs["format_version"] = FORMAT_VERSION


def _describe(ds: h5py.Dataset, name: str) -> None:
    units, meaning = _FIELDS.get(name) or _PICKS.get(name) or ("1", "")
    ds.attrs["units"] = units
    if meaning:
        ds.attrs["description"] = meaning


def _put(h5: h5py.File, name: str, value) -> h5py.Dataset:
    value = np.asarray(value)
    big = value.ndim >= 2 and value.size > 4096
    # gzip is readable by every HDF5 tool; level 1 with byte shuffling keeps most of the gain
    # on smooth velocity fields at a fraction of the time of higher levels.
    ds = h5.create_dataset(name, data=value, compression="gzip" if big else None,
                           compression_opts=1 if big else None, shuffle=big)
    _describe(ds, name)
    return ds


def read_result(path: str | Path) -> LineAnalysis:
    """Read a result file.

    Parameters
    ----------
    path : str or Path
        A file written by ``velspec run`` or ``velspec revise`` (any format_version 1 file,
        with or without dimension scales).

    Returns
    -------
    LineAnalysis

    Raises
    ------
    InputError
        No such file, not HDF5, not a velspec result, or a format version this velspec does
        not read.
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file")
    try:
        h5 = h5py.File(path, "r")
    except OSError:
        raise InputError(f"{path}: not an HDF5 result file") from None
    with h5:
        attrs = {k: (v.item() if hasattr(v, "item") else v) for k, v in h5.attrs.items()}
        if "format_version" not in attrs:
            raise InputError(f"{path}: not a velspec result (no format_version attribute)")
        if int(attrs["format_version"]) != FORMAT_VERSION:
            raise InputError(f"{path}: result format_version {attrs['format_version']} is not the version "
                             f"{FORMAT_VERSION} this velspec reads; use the velspec that wrote it")
        for key in ("cmp", "t0", "vrms", "vint", "picks/cmp", "picks/t0", "picks/vrms"):
            if key not in h5:
                raise InputError(f"{path}: not a complete velspec result (no /{key})")
        data = {}
        h5.visititems(lambda name, obj: data.__setitem__(name, obj[()]) if isinstance(obj, h5py.Dataset) else None)
    for key in ("parameters", "input", "machine"):
        if isinstance(attrs.get(key), (str, bytes)):
            attrs[key] = json.loads(attrs[key])
    return _from_datasets(data, attrs)


def _from_datasets(d: dict, attrs: dict) -> LineAnalysis:
    npick = d["picks/t0"].size
    picks = empty_picks(npick)
    picks["sigma"] = np.nan   # stays NaN in a file from before picks had uncertainties
    for name, dtype, _, _ in PICK_COLUMNS:
        if f"picks/{name}" in d:
            picks[name] = d[f"picks/{name}"].astype(dtype)
    vrms = d["vrms"].astype(np.float32)
    vint_sigma = d.get("vint_sigma")
    spectra = None
    if "spectra/coherence" in d:
        spectra = Spectra(cmp=d["spectra/cmp"], velocity=d["spectra/velocity"], coherence=d["spectra/coherence"])
    depth = None
    if "depth/z" in d:
        depth = DepthFields(z=d["depth/z"], t0=d["depth/t0"], vint=d["depth/vint"], vavg=d.get("depth/vavg"))
    regularised = None
    if "regularised/vint" in d:
        regularised = RegularisedField(vint=d["regularised/vint"], vrms=d["regularised/vrms"])
    return LineAnalysis(
        cmp=d["cmp"].astype(np.int64), cmp_x=d.get("cmp_x", np.zeros(d["cmp"].size)),
        cmp_y=d.get("cmp_y", np.zeros(d["cmp"].size)), t0=d["t0"].astype(np.float64), vrms=vrms,
        vint=d["vint"].astype(np.float32),
        vint_sigma=(vint_sigma if vint_sigma is not None else np.full_like(vrms, np.nan)),
        picks=picks, vrms_sigma=d.get("vrms_sigma"),
        qc={k.split("/", 1)[1]: v for k, v in d.items() if k.startswith("qc/")},
        spectra=spectra, depth=depth, regularised=regularised, eta=d.get("eta"), attrs=attrs,
        inline=d.get("inline"), crossline=d.get("crossline"))
