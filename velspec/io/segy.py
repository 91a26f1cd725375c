"""Reading prestack SEG-Y lines: header survey, CMP index and gathers one block at a time.

This module owns every byte offset: callers get numpy arrays in SI units. Headers are read with
segyio (one field across all traces at a time); a gather's samples are read with one positioned
read per trace, so only one block of traces is ever in memory and the file is never loaded
whole. Traces may be in any order (shot order is common).

References
----------
SEG-Y rev 1 (2002) and SEG-Y rev 2.0 (2017) data exchange formats, SEG Technical Standards
Committee: byte positions of the binary and trace headers, IBM and IEEE sample formats.
"""

from __future__ import annotations

import hashlib
import os
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import segyio

from ..errors import InputError
from ..params import HeaderBytes, ReadParams

TEXT_HEADER = 3200
BINARY_HEADER = 400
TRACE_HEADER = 240
FEET = 0.3048

# SEG-Y sample format codes we read: code -> (bytes per sample, numpy big-endian dtype).
FORMATS = {1: (4, ">u4"), 2: (4, ">i4"), 3: (2, ">i2"), 5: (4, ">f4"), 8: (1, "i1")}

# Binary-header byte positions (1-based, SEG-Y rev 1).
_BIN_INTERVAL, _BIN_SAMPLES, _BIN_FORMAT, _BIN_UNITS, _BIN_EXTENDED = 3217, 3221, 3225, 3255, 3505
# Trace-header byte positions that are not user-configurable (SEG-Y rev 1).
_TR_ID, _TR_DELAY, _TR_SAMPLES, _TR_INTERVAL = 29, 109, 115, 117


@dataclass
class Gather:
    """One CMP gather, live traces only, sorted by absolute offset.

    Attributes
    ----------
    cmp : int
        CMP number.
    offsets : ndarray, float32 (ntr,)
        Absolute source-receiver offsets, m.
    data : ndarray, float32 (ntr, nsamples)
        Trace samples, C-contiguous.
    dropped_nan : int
        Traces left out because they held NaN or infinite samples.
    dropped_dead : int
        Traces left out because they were flagged dead or were all zero.
    """

    cmp: int
    offsets: np.ndarray
    data: np.ndarray
    dropped_nan: int = 0
    dropped_dead: int = 0


@dataclass
class CmpIndex:
    """Where each CMP's traces are: a compressed index over the whole line (small)."""

    cmp: np.ndarray        # (ncmp,) int64 ascending
    start: np.ndarray      # (ncmp+1,) int64 into `order`
    order: np.ndarray      # (ntraces,) int64 trace numbers grouped by CMP, by offset within
    offset: np.ndarray     # (ntraces,) float32 absolute offset in metres, by trace number
    cmp_x: np.ndarray      # (ncmp,) float64 metres
    cmp_y: np.ndarray      # (ncmp,) float64 metres
    offset_source: str     # "header", "coordinates" or "header+coordinates"
    binned: bool           # True when CMPs were binned from midpoints (CDP header all zero)
    inline: np.ndarray | None = None      # (ncmp,) int64 inline of each bin (3D geometry), else None
    crossline: np.ndarray | None = None   # (ncmp,) int64 crossline of each bin (3D geometry), else None

    @property
    def fold(self) -> np.ndarray:
        return np.diff(self.start)


class SegyLine:
    """A prestack 2D line opened for reading. Use as a context manager.

    Parameters
    ----------
    path : str or Path
        The SEG-Y file.
    params : ReadParams
        Header byte positions and binning.

    Raises
    ------
    InputError
        The file is not SEG-Y, is truncated, has no traces, or its headers contradict each other.
    """

    def __init__(self, path: str | Path, params: ReadParams | None = None):
        self.path = Path(path)
        self.params = params or ReadParams()
        self.warnings: list[str] = []
        if not self.path.is_file():
            raise InputError(f"{self.path}: no such file")
        self.size = self.path.stat().st_size
        self._read_binary_header()
        self._survey_headers()
        self._map_samples()

    # -- opening -------------------------------------------------------------------------------

    def _read_binary_header(self) -> None:
        if self.size < TEXT_HEADER + BINARY_HEADER:
            raise InputError(f"{self.path}: {self.size} bytes is too short for SEG-Y "
                             f"(the textual and binary headers alone are {TEXT_HEADER + BINARY_HEADER})")
        with open(self.path, "rb") as fh:
            fh.seek(TEXT_HEADER)
            binary = fh.read(BINARY_HEADER)

        def field(pos, size, endian, signed=True):
            raw = binary[pos - TEXT_HEADER - 1: pos - TEXT_HEADER - 1 + size]
            return int.from_bytes(raw, "big" if endian == "big" else "little", signed=signed)

        # SEG-Y is big-endian; rev 2.0 allows little-endian files, recognised by their format code.
        self.endian = "big"
        if field(_BIN_FORMAT, 2, "big") not in FORMATS and field(_BIN_FORMAT, 2, "little") in FORMATS:
            self.endian = "little"
        fmt = field(_BIN_FORMAT, 2, self.endian)
        if fmt not in FORMATS:
            raise InputError(f"{self.path}: does not look like SEG-Y (binary-header sample format code "
                             f"{fmt} at byte {_BIN_FORMAT}; velspec reads codes {sorted(FORMATS)})")
        self.sample_format = fmt
        # Counts and intervals are unsigned: long records at fine sampling pass 32767 samples.
        self.bin_samples = field(_BIN_SAMPLES, 2, self.endian, signed=False)
        self.bin_interval = field(_BIN_INTERVAL, 2, self.endian, signed=False)
        units = field(_BIN_UNITS, 2, self.endian)
        self.feet = units == 2
        extended = field(_BIN_EXTENDED, 2, self.endian)
        if extended < 0:
            raise InputError(f"{self.path}: a variable number of extended textual headers (-1) "
                             "is not supported; rewrite the file with a fixed count")
        self.data_offset = TEXT_HEADER + BINARY_HEADER + TEXT_HEADER * extended

    def _survey_headers(self) -> None:
        hb: HeaderBytes = self.params.headers
        nbytes = FORMATS[self.sample_format][0]
        if self.size == self.data_offset:
            raise InputError(f"{self.path}: the file has headers but no traces")
        ns = self.bin_samples
        if ns <= 0:
            ns = self._first_trace_field(_TR_SAMPLES)
        if ns <= 0:
            raise InputError(f"{self.path}: sample count is zero in both the binary header "
                             f"(byte {_BIN_SAMPLES}) and the first trace header (byte {_TR_SAMPLES})")
        trace_bytes = TRACE_HEADER + ns * nbytes
        body = self.size - self.data_offset
        if body % trace_bytes:
            raise InputError(f"{self.path}: truncated or not fixed-length: {body} bytes of traces is not a "
                             f"whole number of {trace_bytes}-byte traces ({ns} samples of {nbytes} bytes)")
        self.nsamples = ns
        self.trace_bytes = trace_bytes
        self.ntraces = body // trace_bytes

        try:
            with segyio.open(self.path, "r", ignore_geometry=True, endian=self.endian) as f:
                if f.tracecount != self.ntraces:
                    raise InputError(f"{self.path}: segyio counts {f.tracecount} traces, the file size "
                                     f"implies {self.ntraces}")
        except InputError:
            raise
        except Exception as exc:  # segyio reports malformed files as RuntimeError and friends
            raise InputError(f"{self.path}: segyio cannot read it as SEG-Y: {exc}") from None
        fields = {"ns": (_TR_SAMPLES, -2), "dt": (_TR_INTERVAL, -2), "delay": (_TR_DELAY, 2), "id": (_TR_ID, 2),
                  "cdp": (hb.cdp, 4), "offset": (hb.offset, 4), "scalar": (hb.coordinate_scalar, 2),
                  "sx": (hb.source_x, 4), "sy": (hb.source_y, 4), "gx": (hb.group_x, 4), "gy": (hb.group_y, 4),
                  "cx": (hb.cdp_x, 4), "cy": (hb.cdp_y, 4)}
        grid = self.params.geometry == "3d"
        if grid:
            fields.update(il=(hb.inline, 4), xl=(hb.crossline, 4))
        h = self._scan_file(fields)
        tr_ns, tr_dt, delay, trace_id = h["ns"], h["dt"], h["delay"], h["id"]
        cdp, off, scalar = h["cdp"], h["offset"], h["scalar"]
        sx, sy, gx, gy, cx, cy = h["sx"], h["sy"], h["gx"], h["gy"], h["cx"], h["cy"]

        self._check_samples(tr_ns, tr_dt)
        if np.any(delay != delay[0]):
            raise InputError(f"{self.path}: delay recording time (byte {_TR_DELAY}) differs between traces "
                             f"({delay.min()}..{delay.max()} ms); velspec needs one time zero for the line")
        self.t_first = float(delay[0]) / 1000.0
        if self.t_first + (self.nsamples - 1) * self.dt <= 0:
            raise InputError(f"{self.path}: with a delay recording time of {delay[0]} ms every sample lies at "
                             "or before time zero; there is nothing to analyse")
        self.dead = trace_id == 2  # SEG-Y trace identification code 2: dead trace

        # SEG-Y rev 1 byte 71: positive multiplies, negative divides, zero means 1.
        magnitude = np.maximum(np.abs(scalar), 1).astype(np.float64)
        scale = np.where(scalar < 0, 1.0 / magnitude, magnitude)
        unit = FEET if self.feet else 1.0
        sx, sy, gx, gy, cx, cy = ((a * scale * unit) for a in (sx, sy, gx, gy, cx, cy))
        have_coords = bool(np.any(sx) or np.any(gx) or np.any(sy) or np.any(gy))

        offset = np.abs(off).astype(np.float64) * unit
        from_coords = np.hypot(gx - sx, gy - sy)
        zero = offset == 0
        if np.any(zero) and have_coords:
            offset = np.where(zero, from_coords, offset)
            source = "coordinates" if np.all(zero) else "header+coordinates"
        else:
            source = "header"
        if not np.any(offset):
            self.warnings.append("every offset is zero (header and coordinates): coherence has no moveout "
                                 "to measure")

        mid_x, mid_y = (sx + gx) / 2, (sy + gy) / 2
        binned = False
        if grid:
            cdp = self._grid_bins(h["il"], h["xl"])
        elif not np.any(cdp):
            if not have_coords:
                raise InputError(f"{self.path}: CDP numbers (byte {hb.cdp}) and source/group coordinates "
                                 f"(bytes {hb.source_x}/{hb.source_y}/{hb.group_x}/{hb.group_y}) are all "
                                 "zero, so traces cannot be grouped into CMPs; give the byte that holds "
                                 "CMP numbers in [read.headers] cdp = N")
            cdp = self._bin_midpoints(mid_x, mid_y)
            binned = True
        use_cdp_xy = np.any(cx) or np.any(cy)
        px, py = (cx, cy) if use_cdp_xy else (mid_x, mid_y)

        # Group by CMP, offset within, trace number last so the order is independent of file order.
        order = np.lexsort((np.arange(self.ntraces), offset, cdp))
        numbers, start = np.unique(cdp[order], return_index=True)
        start = np.append(start, self.ntraces).astype(np.int64)
        counts = np.diff(start)
        grouped_x, grouped_y = px[order], py[order]
        cmp_x = np.add.reduceat(grouped_x, start[:-1]) / counts
        cmp_y = np.add.reduceat(grouped_y, start[:-1]) / counts
        self.index = CmpIndex(cmp=numbers.astype(np.int64), start=start, order=order.astype(np.int64),
                              offset=offset.astype(np.float32), cmp_x=cmp_x, cmp_y=cmp_y,
                              offset_source=source, binned=binned)
        if grid:
            first = order[start[:-1]]
            self.index.inline = h["il"][first].astype(np.int64)
            self.index.crossline = h["xl"][first].astype(np.int64)

    def _grid_bins(self, il: np.ndarray, xl: np.ndarray) -> np.ndarray:
        """Bin numbers of 3D-binned traces: 1 + the bin's place on the inline x crossline grid,
        inline by inline, so that ascending numbers run along each inline in turn."""
        hb = self.params.headers
        if not (np.any(il) or np.any(xl)):
            raise InputError(f"{self.path}: inline and crossline numbers (bytes {hb.inline}/{hb.crossline}) are "
                             "zero on every trace; give their byte positions in [read.headers] or set "
                             "read.geometry = '2d'")
        width = int(xl.max() - xl.min()) + 1
        return (il - il.min()) * width + (xl - xl.min()) + 1

    def _scan_file(self, fields: dict[str, tuple[int, int]]) -> dict[str, np.ndarray]:
        """One sequential pass over the file for the given trace-header fields.

        ``fields`` maps a name to (1-based byte position, size 2 or 4; negative for unsigned).
        Reading a few MiB at a time keeps memory flat; the SHA-256 of the whole file is taken in
        the same pass, so the line is read once.
        """
        endian = ">" if self.endian == "big" else "<"
        out = {name: np.empty(self.ntraces, dtype=np.int64) for name in fields}
        digest = hashlib.sha256()
        chunk = max(1, (8 << 20) // self.trace_bytes)
        buf = bytearray(chunk * self.trace_bytes)
        with open(self.path, "rb") as fh:
            digest.update(fh.read(self.data_offset))
            for start in range(0, self.ntraces, chunk):
                n = min(chunk, self.ntraces - start)
                view = memoryview(buf)[: n * self.trace_bytes]
                if fh.readinto(view) != len(view):
                    raise InputError(f"{self.path}: the file ended early while reading trace headers")
                digest.update(view)
                rows = np.frombuffer(view, dtype=np.uint8).reshape(n, self.trace_bytes)
                for name, (pos, size) in fields.items():
                    kind, size = ("u", -size) if size < 0 else ("i", size)
                    cells = np.ascontiguousarray(rows[:, pos - 1: pos - 1 + size])
                    out[name][start: start + n] = cells.view(f"{endian}{kind}{size}")[:, 0]
        self.checksum = "sha256:" + digest.hexdigest()
        return out

    def _first_trace_field(self, pos: int) -> int:
        with open(self.path, "rb") as fh:
            fh.seek(self.data_offset + pos - 1)
            return int.from_bytes(fh.read(2), self.endian, signed=False)

    def _check_samples(self, tr_ns: np.ndarray, tr_dt: np.ndarray) -> None:
        if np.any((tr_ns != 0) & (tr_ns != self.nsamples)):
            bad = tr_ns[(tr_ns != 0) & (tr_ns != self.nsamples)][0]
            raise InputError(f"{self.path}: trace headers (byte {_TR_SAMPLES}) give {bad} samples, the binary "
                             f"header {self.nsamples}; velspec needs fixed-length traces")
        bin_dt = self.bin_interval
        tr_nonzero = tr_dt[tr_dt > 0]
        if tr_nonzero.size and np.any(tr_nonzero != tr_nonzero[0]):
            raise InputError(f"{self.path}: sample interval (byte {_TR_INTERVAL}) differs between traces")
        tr_dt0 = int(tr_nonzero[0]) if tr_nonzero.size else 0
        if bin_dt > 0 and tr_dt0 > 0 and bin_dt != tr_dt0:
            raise InputError(f"{self.path}: sample interval is {bin_dt} us in the binary header (byte "
                             f"{_BIN_INTERVAL}) but {tr_dt0} us in the trace headers (byte {_TR_INTERVAL})")
        dt_us = bin_dt if bin_dt > 0 else tr_dt0
        if dt_us <= 0:
            raise InputError(f"{self.path}: sample interval is zero in the binary and trace headers")
        self.dt = dt_us * 1e-6

    def _bin_midpoints(self, mid_x: np.ndarray, mid_y: np.ndarray) -> np.ndarray:
        """CMP numbers from midpoints projected on the line (first to farthest midpoint)."""
        dx, dy = mid_x - mid_x[0], mid_y - mid_y[0]
        far = int(np.argmax(dx * dx + dy * dy))
        length = float(np.hypot(dx[far], dy[far]))
        along = (dx * dx[far] + dy * dy[far]) / length if length > 0 else np.zeros_like(dx)
        size = self.params.bin_size
        if size <= 0:
            steps = np.diff(np.unique(np.round(along, 2)))
            steps = steps[steps > 0.01]
            if steps.size == 0:
                raise InputError(f"{self.path}: every trace has the same midpoint and the CDP header is zero; "
                                 "there is only one CMP, set read.bin_size or the CDP byte")
            size = float(np.min(steps))
        self.warnings.append(f"CDP header is zero: CMPs binned from midpoints, bin size {size:g} m")
        return np.round((along - along.min()) / size).astype(np.int64) + 1

    def _map_samples(self) -> None:
        nbytes, dtype = FORMATS[self.sample_format]
        if self.endian == "little" and nbytes > 1:
            dtype = "<" + dtype[1:]
        self._sample_dtype = np.dtype(dtype)
        self._fd = os.open(self.path, os.O_RDONLY)

    def _read_samples(self, traces: np.ndarray) -> np.ndarray:
        """Raw samples of the given traces, row k from trace ``traces[k]``, one positioned read each.

        The reads go in ascending file position (the file is walked front to back) straight into
        their rows. Explicit reads rather than a memory map keep the resident memory to one block
        of traces, however long the line.
        """
        count = self.nsamples * self._sample_dtype.itemsize
        out = np.empty((len(traces), self.nsamples), dtype=self._sample_dtype)
        view = out.view(np.uint8).reshape(len(traces), count)
        for row in np.argsort(traces, kind="stable"):
            i = int(traces[row])
            got = os.preadv(self._fd, [view[row]], self.data_offset + i * self.trace_bytes + TRACE_HEADER)
            if got != count:
                raise InputError(f"{self.path}: trace {i} could not be read whole (file changed?)")
        return out

    # -- reading -------------------------------------------------------------------------------

    @property
    def ncmp(self) -> int:
        return len(self.index.cmp)

    @property
    def times(self) -> np.ndarray:
        """Sample times from the traces' time zero, s (delay recording time honoured)."""
        return self.t_first + self.dt * np.arange(self.nsamples)

    def read_gather(self, k: int, nearest: int | None = None) -> Gather:
        """Read the k-th CMP (0-based position in ``index.cmp``): live traces sorted by offset;
        with ``nearest``, only that many of the nearest offsets."""
        ix = self.index
        traces = ix.order[ix.start[k]: ix.start[k + 1]]
        if nearest is not None:
            traces = traces[:nearest]
        data = _to_float32(self._read_samples(traces), self.sample_format)
        finite = np.isfinite(data).all(axis=1)
        dead = (self.dead[traces] | ~data.any(axis=1)) & finite
        keep = finite & ~dead
        if not keep.all():
            data = np.ascontiguousarray(data[keep])
        return Gather(cmp=int(ix.cmp[k]), offsets=ix.offset[traces][keep], data=data,
                      dropped_nan=int(np.count_nonzero(~finite)), dropped_dead=int(np.count_nonzero(dead)))

    def close(self) -> None:
        if getattr(self, "_fd", None) is not None:
            os.close(self._fd)
            self._fd = None

    def __getstate__(self) -> dict:
        # sent to the workers of a cluster: the header index travels, the open file does not
        state = dict(self.__dict__)
        state["_fd"] = None
        return state

    def __setstate__(self, state: dict) -> None:
        self.__dict__.update(state)
        if not self.path.is_file() or self.path.stat().st_size != self.size:
            raise InputError(f"{self.path}: not the line the run was started on (missing, or another size, "
                             "here); every worker must read the same file at the same path (shared storage)")
        self._fd = os.open(self.path, os.O_RDONLY)

    def __enter__(self) -> SegyLine:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def identity(self) -> dict:
        """Path, size in bytes and the SHA-256 of the whole file (taken while indexing), for ``input``."""
        return {"path": str(self.path.resolve()), "size": self.size, "checksum": self.checksum,
                "units": "feet converted to metres" if self.feet else "metres",
                "sample_format": self.sample_format, "endian": self.endian, "ntraces": int(self.ntraces),
                "offset_source": self.index.offset_source, "cmp_binned_from_midpoints": self.index.binned}


def ibm_to_float32(words: np.ndarray) -> np.ndarray:
    """Convert IBM System/360 single-precision floats (as uint32) to IEEE float32.

    value = (-1)^sign * 0.mantissa(24 bit) * 16^(exponent - 64)  (SEG-Y rev 1, format code 1).
    """
    words = words.astype(np.uint32, copy=False)
    sign = np.where(words >> 31, -1.0, 1.0)
    exponent = ((words >> 24) & 0x7F).astype(np.int32) - 64
    mantissa = (words & 0x00FFFFFF).astype(np.float64) / float(1 << 24)
    return (sign * mantissa * np.power(16.0, exponent)).astype(np.float32)


def _to_float32(raw: np.ndarray, fmt: int) -> np.ndarray:
    if fmt == 1:
        return ibm_to_float32(raw)
    return raw.astype(np.float32)


def open_line(path: str | Path, params: ReadParams | None = None) -> SegyLine:
    """Open a prestack SEG-Y line; warnings found while indexing are issued as ``UserWarning``."""
    line = SegyLine(path, params)
    for message in line.warnings:
        warnings.warn(f"{os.fspath(path)}: {message}", stacklevel=2)
    return line
