"""``velspec export``: velocity products a processor can hand on, made from a result file alone.

Everything comes from one :class:`~velspec.result.LineAnalysis` (no rescan): post-stack SEG-Y
sections of the stacking velocity, the interval velocity in time and in depth, two-way time and
average velocity in depth, a smoothed field for migration, CSV velocity functions per CMP and,
given the prestack line, its NMO-corrected CMP stack and chosen NMO-corrected gathers. The
folder is made as ``DIR.partial`` and renamed into place when complete; ``README.txt`` and
``contents.json`` in it list every file with its content and units.

The smoothed field for migration is the interval velocity in time smoothed with a 2-D Gaussian
(scipy.ndimage) in velocity, not slowness: the mean of velocity over time is what depth is made
of (z = integral of v dt / 2), so smoothing velocity in time keeps the depth of every time away
from the ends of the line and the record. Its stacking velocity comes back from it by Dix's
relation (V^2 t = integral of v^2 dt), so the two smoothed sections agree with each other.

References
----------
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
Yilmaz, O., 2001, Seismic Data Analysis, SEG (NMO correction, stacking, velocities for
migration).
SEG Technical Standards Committee, 2002, SEG Y rev 1 Data Exchange format.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import __version__
from .caution import CAUTION
from .errors import InputError, ParameterError
from .io.hdf5 import read_result
from .io.segy import Gather, SegyLine, open_line
from .io.segy_out import UNIT_METRES_PER_SECOND, UNIT_OTHER, SectionWriter, write_section
from .nmo import nmo_correct, stack_traces
from .params import ProductParams
from .result import LineAnalysis, now_utc

__all__ = ["export_result", "Product", "interval_field", "smooth_field", "rms_from_interval", "depth_of",
           "open_matching_line", "corrected_gather", "iter_stack", "staged_folder", "load_result", "check_cmps"]

CONTENTS = "contents.json"   # every product folder lists its files here; --force replaces only such folders


@dataclass(frozen=True)
class Product:
    """One file of a product folder: what it holds, in which units and domain."""

    name: str
    content: str
    units: str
    domain: str


# -- the result and its fields -----------------------------------------------------------------

def load_result(result: LineAnalysis | str | Path) -> tuple[LineAnalysis, str]:
    """The result, read from its file when a path is given, and a name for it (the file name or "")."""
    if isinstance(result, LineAnalysis):
        return result, ""
    return read_result(result), str(result)


def interval_field(result: LineAnalysis) -> tuple[np.ndarray, str]:
    """The interval velocity in time to hand on, m/s, and where it came from.

    The line-wide regularised field (``/regularised/vint``) when the result has one, else the
    per-CMP constrained Dix field (``/vint``).
    """
    if result.regularised is not None and result.regularised.vint is not None:
        return np.asarray(result.regularised.vint, dtype=np.float32), "/regularised/vint (line-wide regularised)"
    return np.asarray(result.vint, dtype=np.float32), "/vint (constrained Dix per CMP)"


def smooth_field(field: np.ndarray, dt: float, smooth_time: float, smooth_cmps: float) -> np.ndarray:
    """A (ncmp, nt) field smoothed by a 2-D Gaussian along the line and in time.

    Parameters
    ----------
    field : ndarray (ncmp, nt)
        Velocities, m/s (smoothed as they are, in velocity).
    dt : float
        Time step of the field, s.
    smooth_time : float
        Standard deviation in time, s (0: none).
    smooth_cmps : float
        Standard deviation along the line, CMPs (0: none).

    Returns
    -------
    float32 (ncmp, nt)
        Truncated at 3 standard deviations; the edge values are repeated beyond the ends.

    References
    ----------
    scipy.ndimage.gaussian_filter (the filter itself).
    """
    from scipy.ndimage import gaussian_filter

    sigma = (float(smooth_cmps), float(smooth_time) / dt)
    out = gaussian_filter(np.asarray(field, dtype=np.float64), sigma=sigma, mode="nearest", truncate=3.0)
    return out.astype(np.float32)


def rms_from_interval(t0: np.ndarray, vint: np.ndarray) -> np.ndarray:
    """Stacking (RMS) velocity of an interval-velocity field in time, by Dix's relation.

    V(t)^2 t = integral from 0 to t of vint^2 dt, with each sample's interval velocity taken
    from the previous sample (from time zero for the first), as in the result's depth
    conversion. At and above time zero V is the first positive sample's interval velocity.

    Parameters
    ----------
    t0 : ndarray (nt,)
        Two-way times, s, regular.
    vint : ndarray (ncmp, nt)
        Interval velocity, m/s.

    Returns
    -------
    float32 (ncmp, nt)

    References
    ----------
    Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
    """
    t = np.asarray(t0, dtype=np.float64)
    v = np.asarray(vint, dtype=np.float64)
    after = t > 0
    step = np.diff(np.concatenate(([0.0], np.maximum(t, 0.0))))
    b = np.cumsum(v * v * step[None, :], axis=1)
    out = np.empty_like(v)
    out[:, after] = np.sqrt(b[:, after] / t[after])
    if (~after).any():
        first = int(np.argmax(after)) if after.any() else 0
        out[:, ~after] = v[:, first: first + 1]
    return out.astype(np.float32)


def depth_of(result: LineAnalysis) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, str]:
    """The result's depth fields: z (m), t(z) (s), vint(z) and vavg(z) (m/s), and their source.

    ``result.depth`` when present; otherwise converted here from ``result.vint`` with the run's
    depth step (:func:`velspec.interval.depth_fields`). The average velocity is
    ``result.depth.vavg`` when stored, else depth over one-way time, 2 z / t(z) (the first
    interval velocity at z = 0).
    """
    if result.depth is not None:
        z, tz, vz, vavg = result.depth.z, result.depth.t0, result.depth.vint, result.depth.vavg
        source = "/depth of the result"
    else:
        from .interval import depth_fields

        z, tz, vz = depth_fields(result.t0, result.vint, result.params.interval.dz)
        vavg = None
        source = "converted by export from /vint"
    z = np.asarray(z, dtype=np.float64)
    tz = np.asarray(tz, dtype=np.float32)
    if vavg is None:
        with np.errstate(divide="ignore", invalid="ignore"):
            vavg = np.where(z[None, :] > 0, 2.0 * z[None, :] / tz, np.asarray(vz, np.float64)[:, :1])
        vsrc = "2 z / t(z) from the depth fields"
    else:
        vsrc = "/depth/vavg of the result"
    return z, tz, np.asarray(vz, np.float32), np.asarray(vavg, np.float32), f"{source}; vavg {vsrc}"


def check_cmps(result: LineAnalysis, cmps) -> list[int]:
    """The CMP numbers asked for, each checked to be in the result (InputError if not)."""
    out = []
    for c in cmps or ():
        result.row(int(c))   # raises InputError naming the result's range
        if int(c) not in out:
            out.append(int(c))
    return out


# -- the prestack line ---------------------------------------------------------------------------

def open_matching_line(line: str | Path, result: LineAnalysis) -> SegyLine:
    """Open the prestack line a result was made from, checked against the result.

    The line is read with the result's header byte positions. Its CMPs must be the result's
    (with those the run skipped), and its time axis the result's (samples, interval, time of
    the first sample). A different checksum alone is allowed (e.g. the same line after more
    processing) and only warned about.

    Raises
    ------
    InputError
        The line cannot be read, or does not match the result.
    """
    import warnings

    segy = open_line(line, result.params.read)
    try:
        have = np.asarray(segy.index.cmp, dtype=np.int64)
        expect = np.union1d(result.cmp, np.asarray(result.qc.get("skipped_cmp", []), dtype=np.int64))
        missing = np.setdiff1d(result.cmp, have)
        extra = np.setdiff1d(have, expect)
        if missing.size or extra.size:
            raise InputError(
                f"{line} does not match the result: its CMPs are {have[0]}..{have[-1]} ({have.size}), the "
                f"result's {result.cmp[0]}..{result.cmp[-1]} ({result.cmp.size})"
                f"{f'; {missing.size} result CMP(s) missing, first {missing[0]}' if missing.size else ''}"
                f"{f'; {extra.size} CMP(s) not in the result, first {extra[0]}' if extra.size else ''}"
                "; give the line the result was made from")
        times = segy.times
        t0 = np.asarray(result.t0, dtype=np.float64)
        if times.size != t0.size or not np.allclose(times, t0, rtol=0, atol=1e-7):
            raise InputError(
                f"{line} does not match the result's time axis: the line has {times.size} samples of "
                f"{segy.dt * 1e3:g} ms from {segy.t_first:g} s, the result {t0.size} samples of "
                f"{(t0[1] - t0[0]) * 1e3 if t0.size > 1 else 0:g} ms from {t0[0]:g} s; give the line the "
                "result was made from")
        stored = (result.attrs.get("input") or {}).get("checksum") if isinstance(result.attrs.get("input"), dict) \
            else None
        if stored and stored != segy.checksum:
            warnings.warn(f"{line} is not the file the result was made from (its checksum differs); its CMPs and "
                          "time axis match, so it is stacked with the result's field", stacklevel=2)
    except BaseException:
        segy.close()
        raise
    return segy


def _field_row(result: LineAnalysis, row: int) -> tuple[np.ndarray, np.ndarray | None]:
    velocity = np.asarray(result.vrms[row], dtype=np.float64)
    eta = None if result.eta is None else np.asarray(result.eta[row], dtype=np.float64)
    return velocity, eta


def corrected_gather(segy: SegyLine, result: LineAnalysis, cmp: int) -> tuple[Gather, np.ndarray, np.ndarray]:
    """Read one CMP of a matching line and NMO-correct it with the result's stacking velocity.

    Returns
    -------
    gather : Gather
        The input gather (live traces, by offset).
    corrected : float32 (ntr, nt)
        NMO-corrected with ``result.vrms`` (and ``result.eta`` of a nonhyperbolic run), the
        run's stretch mute applied (0 there).
    live : uint8 (ntr, nt)
        1 where a sample passed the mute.
    """
    row = result.row(cmp)
    k = int(np.searchsorted(segy.index.cmp, cmp))
    gather = segy.read_gather(k)
    velocity, eta = _field_row(result, row)
    corrected, live = nmo_correct(gather.data, gather.offsets, segy.dt, segy.t_first, velocity,
                                  stretch_limit=result.params.scan.stretch_limit, eta=eta)
    return gather, corrected, live


def iter_stack(segy: SegyLine, result: LineAnalysis, progress=None) -> Iterator[tuple[int, np.ndarray, np.ndarray]]:
    """Stream the line one gather at a time: ``(row, stack trace, live fold)`` for every result CMP.

    Each gather is NMO-corrected with the result's field and stretch mute and stacked,
    normalised by its live fold (:func:`velspec.nmo.stack_traces`); only one gather is in
    memory at a time.

    Parameters
    ----------
    progress : callable, optional
        ``progress(total) -> (update(n), close())``, in CMPs.
    """
    stretch = result.params.scan.stretch_limit
    positions = np.searchsorted(segy.index.cmp, result.cmp)
    update, close = progress(result.cmp.size) if progress else (None, None)
    try:
        for row, k in enumerate(positions):
            gather = segy.read_gather(int(k))
            if gather.data.shape[0] == 0:
                yield row, np.zeros(segy.nsamples, np.float32), np.zeros(segy.nsamples, np.int32)
            else:
                velocity, eta = _field_row(result, row)
                corrected, live = nmo_correct(gather.data, gather.offsets, segy.dt, segy.t_first, velocity,
                                              stretch_limit=stretch, eta=eta)
                trace, fold = stack_traces(corrected, live)
                yield row, trace, fold
            if update is not None:
                update(1)
    finally:
        if close is not None:
            close()


# -- the output folder ---------------------------------------------------------------------------

def _is_ours(folder: Path) -> bool:
    try:
        return folder.is_dir() and json.loads((folder / CONTENTS).read_text()).get("written_by", "").startswith(
            "velspec")
    except (OSError, ValueError, AttributeError):
        return False


@contextlib.contextmanager
def staged_folder(out: str | Path, force: bool, inputs=()) -> Iterator[Path]:
    """Make a product folder as ``OUT.partial`` and rename it to ``OUT`` when the block succeeds.

    With ``force`` an existing ``OUT`` is replaced only if velspec wrote it (it holds
    ``contents.json``) or it is empty; it is moved aside until the new folder is in place.

    Raises
    ------
    InputError
        ``OUT`` exists (without ``force``), is a file, is a folder velspec did not write, holds
        one of ``inputs``, or its parent folder does not exist.
    """
    out = Path(out)
    check_output_folder(out, force, inputs)
    tmp = out.with_name(out.name + ".partial")
    if tmp.is_dir() and not tmp.is_symlink():
        shutil.rmtree(tmp)
    elif tmp.exists() or tmp.is_symlink():
        tmp.unlink()
    tmp.mkdir()
    try:
        yield tmp
        if out.exists():
            aside = out.with_name(out.name + ".replaced")
            if aside.exists():
                shutil.rmtree(aside)
            os.replace(out, aside)
            os.replace(tmp, out)
            shutil.rmtree(aside, ignore_errors=True)
        else:
            os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def check_output_folder(out: Path, force: bool, inputs=()) -> None:
    """Raise InputError where :func:`staged_folder` would refuse ``out`` (before any work is done)."""
    out = Path(out)
    if not out.parent.resolve().is_dir():
        raise InputError(f"folder {out.parent} does not exist; create it first")
    if out.exists() or out.is_symlink():
        if not force:
            raise InputError(f"{out} exists; use --force to replace it or --out to choose another folder")
        if not out.is_dir() or out.is_symlink():
            raise InputError(f"{out} exists and is not a folder; choose another --out")
        if any(out.iterdir()) and not _is_ours(out):
            raise InputError(f"{out} exists and was not written by velspec (no {CONTENTS}); velspec replaces "
                             "only its own folders: remove it yourself or choose another --out")
        root = out.resolve()
        for path in inputs:
            if path and root in Path(path).resolve().parents:
                raise InputError(f"{out} holds the input {path}; choose another --out (inputs are never modified)")


def write_contents(folder: Path, command: str, products: list[Product], source: str) -> None:
    """``contents.json`` and ``README.txt``: every file with its content, units and domain."""
    record = {"written_by": f"velspec {__version__}", "command": command, "created": now_utc(),
              "result": source, "caution": CAUTION, "files": [p.__dict__ for p in products]}
    (folder / CONTENTS).write_text(json.dumps(record, indent=1) + "\n", encoding="utf-8")
    if command != "export":
        return
    wide = max(len(p.name) for p in products)
    lines = [f"velspec {__version__} export of {source or 'a result'}, {record['created']}", "", CAUTION, "",
             f"{'file'.ljust(wide)}  domain  units  content"]
    lines += [f"{p.name.ljust(wide)}  {p.domain.ljust(6)}  {p.units}  {p.content}" for p in products]
    lines += ["", "SEG-Y: rev 1 byte positions, IEEE float (format 5), one trace per CMP; CDP 21, CDP X/Y 181/185, "
              "coordinates in cm with scalar -100 at byte 71. Depth sections hold the depth step in mm "
              "(metres * 1000) in bytes 117 and 3217."]
    (folder / "README.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")


# -- the export ----------------------------------------------------------------------------------

def _header(result: LineAnalysis, source: str, title: str, values: str, domain: str, origin: str) -> list[str]:
    cmp = result.cmp
    ident = result.attrs.get("input") if isinstance(result.attrs.get("input"), dict) else {}
    return [f"velspec {__version__} velocity product: {title}",
            f"TRACE VALUES: {values}. IEEE float (format 5).",
            f"DOMAIN: {domain}",
            f"FROM: {origin}",
            f"ONE TRACE PER CMP, CMP {cmp[0]} to {cmp[-1]} ({cmp.size} traces). CDP byte 21, CDP X/Y 181/185, "
            "source and group X/Y 73/77 and 81/85 at the CMP, coordinates in cm (scalar -100, byte 71), metres "
            "(byte 3255 = 1).",
            f"RESULT: {Path(source).name if source else 'in memory'}, made {result.attrs.get('created', '?')} by "
            f"velspec {result.attrs.get('velspec_version', '?')} from "
            f"{Path(str(ident.get('path', '?'))).name} ({str(ident.get('checksum', '?'))[:23]}).",
            f"CAUTION: {CAUTION}",
            "Written by velspec; SEG-Y rev 1 byte positions."]


def _time_domain(t0: np.ndarray) -> str:
    dt = float(t0[1] - t0[0]) if t0.size > 1 else 0.0
    return (f"time, zero-offset two-way time t0 from {t0[0]:g} s, {t0.size} samples of {dt * 1e3:g} ms "
            "(interval us at bytes 117/3217, first sample ms at byte 109)")


def _depth_domain(z: np.ndarray) -> str:
    dz = float(z[1] - z[0]) if z.size > 1 else 0.0
    return (f"DEPTH below the datum of the input times, from {z[0]:g} m, {z.size} samples of {dz:g} m; bytes "
            "117/3217 hold the depth step in millimetres (metres * 1000), byte 109 the first depth in m")


def export_result(result: LineAnalysis | str | Path, out: str | Path, line: str | Path | None = None, *,
                  cmps=(), smooth_time: float | None = None, smooth_cmps: float | None = None,
                  csv_step: float | None = None, force: bool = False, progress=None) -> list[Path]:
    """Write a result's velocity products into the folder ``out`` (``velspec export``).

    Files (README.txt in the folder and the README list them with content and units):
    ``vrms.sgy``, ``vint_time.sgy``, ``vint_depth.sgy``, ``time_depth.sgy``, ``vavg_depth.sgy``,
    ``vint_time_smooth.sgy``, ``vrms_smooth.sgy``, ``functions.csv``, ``functions_at_picks.csv``;
    with ``line`` also ``stack.sgy`` and ``stack_fold.sgy``, and with ``cmps``
    ``nmo_gathers.sgy``.

    Parameters
    ----------
    result : LineAnalysis, or the path of a result file
        What to export (nothing is rescanned).
    out : str or Path
        Folder to create (made as ``OUT.partial`` and renamed when complete).
    line : str or Path, optional
        The prestack SEG-Y line the result was made from: adds its NMO-corrected stack with
        the result's stacking velocity and the run's stretch mute, normalised by live fold.
    cmps : sequence of int
        CMPs whose NMO-corrected gathers to write (needs ``line``).
    smooth_time : float, optional
        Standard deviation in t0 of the smoothing for migration, s (default
        ``ProductParams.smooth_time``, 0.1 s).
    smooth_cmps : float, optional
        Its standard deviation along the line, CMPs (default ``ProductParams.smooth_cmps``, 10).
    csv_step : float, optional
        Time step of ``functions.csv``, s, rounded to whole samples (default 0.05 s).
    force : bool
        Replace an existing folder that velspec wrote.
    progress : callable, optional
        ``progress(total) -> (update(n), close())`` while the line is stacked, in CMPs.

    Returns
    -------
    list of Path
        The files written, in their final place.

    Raises
    ------
    InputError
        Unreadable result (e.g. another format version), a line that does not match it, a CMP
        the result lacks, an existing output without ``force``.
    ParameterError
        Impossible smoothing lengths or CSV step.

    References
    ----------
    Dix, C. H., 1955, Geophysics 20, 68-86 (the smoothed field's stacking velocity).
    Yilmaz, O., 2001, Seismic Data Analysis, SEG (NMO and stack).
    """
    defaults = ProductParams()
    params = ProductParams(smooth_time=defaults.smooth_time if smooth_time is None else smooth_time,
                           smooth_cmps=defaults.smooth_cmps if smooth_cmps is None else smooth_cmps,
                           csv_step=defaults.csv_step if csv_step is None else csv_step).validate()
    result, source = load_result(result)
    cmps = check_cmps(result, cmps)
    if cmps and line is None:
        raise ParameterError("--cmp needs --line: the NMO-corrected gathers are made from the prestack line")
    out = Path(out)
    check_output_folder(out, force, (source, line))
    segy = open_matching_line(line, result) if line is not None else None
    try:
        with staged_folder(out, force, (source, line)) as tmp:
            products = _write_fields(result, source, tmp, params)
            if segy is not None:
                products += _write_line_products(result, source, tmp, segy, cmps, progress)
            write_contents(tmp, "export", products, source)
    finally:
        if segy is not None:
            segy.close()
    return [out / p.name for p in products] + [out / "README.txt", out / CONTENTS]


def _write_fields(result: LineAnalysis, source: str, folder: Path, params: ProductParams) -> list[Product]:
    t0 = np.asarray(result.t0, dtype=np.float64)
    if t0.size < 2:
        raise InputError("the result's time axis has fewer than 2 samples; nothing to export")
    dt = float(t0[1] - t0[0])
    cmp, x, y = result.cmp, result.cmp_x, result.cmp_y
    vint, vint_source = interval_field(result)
    z, tz, vz, vavg, depth_source = depth_of(result)
    products: list[Product] = []

    def section(name, values, title, what, units, domain, origin, unit_code=UNIT_METRES_PER_SECOND):
        first, step, domain_text = ((t0[0], dt, _time_domain(t0)) if domain == "time"
                                    else (z[0], float(z[1] - z[0]) if z.size > 1 else 1.0, _depth_domain(z)))
        write_section(folder / name, values, cmp=cmp, x=x, y=y, domain=domain, first=first, step=step,
                      text=_header(result, source, title, f"{what}, {units}", domain_text, origin),
                      value_unit=unit_code)
        products.append(Product(name, f"{what} ({origin})", units, domain))

    section("vrms.sgy", result.vrms, "stacking velocity", "stacking velocity (best-fit hyperbola; ~RMS velocity)",
            "m/s", "time", "/vrms")
    section("vint_time.sgy", vint, "interval velocity in time", "interval velocity", "m/s", "time", vint_source)
    section("vint_depth.sgy", vz, "interval velocity in depth", "interval velocity", "m/s", "depth",
            "/depth/vint" if result.depth is not None else depth_source)
    section("time_depth.sgy", tz, "two-way time at each depth (depth to time)", "two-way time", "s", "depth",
            depth_source, unit_code=UNIT_OTHER)
    section("vavg_depth.sgy", vavg, "average velocity in depth", "average velocity from the datum (z / one-way time)",
            "m/s", "depth", depth_source)
    smooth = smooth_field(vint, dt, params.smooth_time, params.smooth_cmps)
    how = (f"{vint_source} smoothed for migration: 2-D Gaussian in velocity, standard deviation "
           f"{params.smooth_time:g} s in t0 and {params.smooth_cmps:g} CMPs along the line, truncated at 3, "
           "edges repeated")
    section("vint_time_smooth.sgy", smooth, "smoothed interval velocity in time (for migration)", "interval velocity",
            "m/s", "time", how)
    section("vrms_smooth.sgy", rms_from_interval(t0, smooth), "stacking velocity of the smoothed field (for time "
            "migration)", "RMS velocity by Dix's relation from vint_time_smooth.sgy", "m/s", "time", how)
    products += _write_csv(result, folder, params, vint, vint_source, z, tz)
    return products


def _write_csv(result: LineAnalysis, folder: Path, params: ProductParams, vint: np.ndarray, vint_source: str,
               z: np.ndarray, tz: np.ndarray) -> list[Product]:
    t0 = np.asarray(result.t0, dtype=np.float64)
    dt = float(t0[1] - t0[0])
    every = max(int(round(params.csv_step / dt)), 1)
    cols = np.arange(int(np.searchsorted(t0, -1e-9)), t0.size, every)   # from the first t0 >= 0
    regularised = result.regularised is not None
    forced = result.qc.get("vint_forced")
    quality = result.qc.get("quality")
    caution = f"# velspec {__version__}: {CAUTION}\n"
    head = ("cmp,x_m,y_m,t0_s,vrms_m_s,vint_m_s,vint_sigma_m_s,depth_m,vint_forced,quality"
            + (",vint_regularised_m_s" if regularised else ""))
    lines = [caution, f"# one row per CMP and t0 every {every * dt:g} s; vrms: stacking velocity (/vrms); vint: "
             "constrained Dix interval velocity (/vint) with its one-sigma uncertainty; depth: below the datum, "
             "from the result's depth fields; vint_forced 1 where the bounds changed vint; quality 0 good, 1 fair, "
             f"2 poor{'; vint_regularised: ' + vint_source if regularised else ''}\n", head + "\n"]
    for row in range(result.cmp.size):
        depth = np.interp(t0[cols], tz[row], z)
        vr, vi, vs = result.vrms[row, cols], result.vint[row, cols], result.vint_sigma[row, cols]
        fo = forced[row, cols] if forced is not None else np.zeros(cols.size, np.uint8)
        q = int(quality[row]) if quality is not None else -1
        lead = f"{result.cmp[row]},{result.cmp_x[row]:.2f},{result.cmp_y[row]:.2f},"
        reg = vint[row, cols] if regularised else None
        for k in range(cols.size):
            lines.append(f"{lead}{t0[cols[k]]:.4f},{vr[k]:.1f},{vi[k]:.1f},{vs[k]:.1f},{depth[k]:.1f},{int(fo[k])},{q}"
                         + (f",{reg[k]:.1f}\n" if regularised else "\n"))
    (folder / "functions.csv").write_text("".join(lines), encoding="utf-8")

    picks = result.picks[result.used]
    rows = np.searchsorted(result.cmp, picks["cmp"])
    # the last sample at or before the pick: the interval ending at the pick (velspec.interval)
    j = np.clip(np.searchsorted(t0, picks["t0"], side="right") - 1, 0, t0.size - 1)
    lines = [caution, "# one row per used pick; pick_vrms and pick_sigma: the pick and its one-sigma uncertainty; "
             "vrms: the field at the pick; vint: interval velocity of the interval ending at the pick (/vint), "
             "vint_sigma its uncertainty; depth below the datum; flags: velspec.Flag bits (README)\n",
             "cmp,x_m,y_m,t0_s,pick_vrms_m_s,pick_sigma_m_s,vrms_m_s,vint_m_s,vint_sigma_m_s,depth_m,coherence,flags\n"]
    for p, r, jj in zip(picks, rows, j):
        depth = float(np.interp(p["t0"], tz[r], z))
        vr = float(np.interp(p["t0"], t0, result.vrms[r]))
        lines.append(f"{p['cmp']},{result.cmp_x[r]:.2f},{result.cmp_y[r]:.2f},{p['t0']:.4f},{p['vrms']:.1f},"
                     f"{p['sigma']:.1f},{vr:.1f},{result.vint[r, jj]:.1f},{p['vint_sigma']:.1f},{depth:.1f},"
                     f"{p['coherence']:.4f},{int(p['flags'])}\n")
    (folder / "functions_at_picks.csv").write_text("".join(lines), encoding="utf-8")
    return [Product("functions.csv", f"velocity functions per CMP every {every * dt:g} s: stacking, interval "
                    "(with uncertainty), depth, forced flag, quality", "s, m, m/s", "time"),
            Product("functions_at_picks.csv", "velocity functions at the used picks: pick and field values, "
                    "interval velocity ending at each pick, depth", "s, m, m/s", "time")]


def _write_line_products(result: LineAnalysis, source: str, folder: Path, segy: SegyLine, cmps: list[int],
                         progress) -> list[Product]:
    t0 = np.asarray(result.t0, dtype=np.float64)
    dt = float(t0[1] - t0[0])
    ncmp, nt = result.cmp.size, t0.size
    stretch = result.params.scan.stretch_limit
    law = "nonhyperbolic moveout with /eta" if result.eta is not None else "hyperbolic moveout"
    origin = (f"the prestack line {segy.path.name}, NMO-corrected with /vrms ({law}), stretch mute (t - t0)/t0 > "
              f"{stretch:g} (the run's scan.stretch_limit), stacked and divided by the live fold")
    products = []
    if cmps:
        gathers = [corrected_gather(segy, result, c) for c in cmps]
        ntr = sum(g.data.shape[0] for g, _, _ in gathers)
        text = _header(result, source, f"NMO-corrected CMP gathers of CMP(s) {', '.join(map(str, cmps))}",
                       "amplitude of the input, muted samples 0", _time_domain(t0),
                       origin.replace("stacked and divided by the live fold", "not stacked; offset at byte 37 "
                                      "(whole m); source/group X/Y not carried (0)"))
        text[4] = (f"CMP GATHERS: {len(cmps)} CMP(s), {ntr} traces, offset byte 37, trace in CMP byte 25, CDP 21, "
                   "CDP X/Y 181/185 in cm (scalar -100, byte 71), metres (byte 3255 = 1).")
        with SectionWriter(folder / "nmo_gathers.sgy", ntr, nt, domain="time", first=t0[0], step=dt, text=text,
                           stacked=False) as w:
            for c, (g, corrected, _) in zip(cmps, gathers):
                r = result.row(c)
                for i in range(corrected.shape[0]):
                    w.write(corrected[i], cmp=c, x=result.cmp_x[r], y=result.cmp_y[r], offset=float(g.offsets[i]),
                            trace_in_cmp=i + 1)
        products.append(Product("nmo_gathers.sgy", f"NMO-corrected gathers of CMP(s) {', '.join(map(str, cmps))} "
                                "(stretch mute applied, 0 there)", "input amplitude", "time"))
        del gathers
    stack_text = _header(result, source, "NMO-corrected CMP stack", "stacked amplitude (input units)",
                         _time_domain(t0), origin)
    fold_text = _header(result, source, "live fold of the CMP stack", "number of live traces in the stack (count)",
                        _time_domain(t0), origin)
    with SectionWriter(folder / "stack.sgy", ncmp, nt, domain="time", first=t0[0], step=dt, text=stack_text) as ws, \
            SectionWriter(folder / "stack_fold.sgy", ncmp, nt, domain="time", first=t0[0], step=dt,
                          text=fold_text) as wf:
        for row, trace, fold in iter_stack(segy, result, progress):
            where = dict(cmp=int(result.cmp[row]), x=float(result.cmp_x[row]), y=float(result.cmp_y[row]))
            ws.write(trace, fold=int(fold.max()) if fold.size else 0, **where)
            wf.write(fold.astype(np.float32), **where)
    products.append(Product("stack.sgy", "NMO-corrected CMP stack with the picked field, stretch mute applied, "
                            "normalised by live fold", "input amplitude", "time"))
    products.append(Product("stack_fold.sgy", "live fold of each stack sample", "count", "time"))
    return products
