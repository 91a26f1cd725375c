"""Writing velocity products and stacks as SEG-Y rev 1 (IEEE float), one trace at a time.

This module owns every byte position of the files velspec writes; callers give arrays in SI
units. Files are written with segyio to ``NAME.partial`` and renamed when complete.

Conventions (stated in every file's textual header):

- IEEE float samples (format code 5), big-endian, fixed-length traces, no extended textual
  headers, revision 1.0 (bytes 3501-3502), measurement system metres (byte 3255 = 1).
- Coordinates (source X/Y 73/77, group X/Y 81/85, CDP X/Y 181/185) are stored in centimetres
  with the coordinate scalar -100 at byte 71 (a negative scalar divides), coordinate units
  byte 89 = 1 (length).
- Time domain: sample interval in microseconds (bytes 117 and 3217), time of the first sample
  in milliseconds (delay recording time, byte 109).
- Depth domain: SEG-Y rev 1 has no depth fields, so the same bytes hold the depth step in
  millimetres (metres * 1000: a reader that takes the interval as microseconds and the axis as
  milliseconds shows metres) and the first depth in metres at byte 109. 2-byte fields: a depth
  step of at most 32.767 m.
- Trace value measurement unit (byte 203): 6 (m/s) for velocities, -1 (other) otherwise (codes
  of SEG-Y rev 1, value from memory).

References
----------
SEG Technical Standards Committee, 2002, SEG Y rev 1 Data Exchange format.
"""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import numpy as np
import segyio

from ..errors import ParameterError

COORDINATE_SCALAR = -100      # SEG-Y rev 1 byte 71: coordinates divided by 100 (centimetres)
UNIT_METRES_PER_SECOND = 6    # SEG-Y rev 1 byte 203 trace value measurement unit
UNIT_OTHER = -1
SORTING_STACKED, SORTING_CMP = 4, 2   # SEG-Y rev 1 byte 3229: horizontally stacked, CDP ensemble
_INT16 = 32767
_INT32 = 2**31 - 1


def text_header(lines: list[str]) -> str:
    """A 40-line textual header (lines wrapped to 76 characters; lines 39-40 as rev 1 asks).

    Raises
    ------
    ParameterError
        When the text does not fit in 38 lines.
    """
    rows: list[str] = []
    for line in lines:
        rows += textwrap.wrap(line, 76) or [""]
    if len(rows) > 38:
        raise ParameterError(f"textual header text is {len(rows)} lines; at most 38 fit")
    table = {i + 1: r for i, r in enumerate(rows)}
    table[39] = "SEG Y REV1"
    table[40] = "END TEXTUAL HEADER"
    return segyio.tools.create_text_header(table)


def _axis_fields(domain: str, first: float, step: float) -> tuple[int, int]:
    """(byte-117 interval, byte-109 first sample) for a time (s) or depth (m) axis."""
    if domain == "time":
        interval, start = step * 1e6, first * 1e3
        what = "sample interval in microseconds"
    elif domain == "depth":
        interval, start = step * 1e3, first
        what = "depth step in millimetres"
    else:
        raise ValueError(f"domain must be 'time' or 'depth', got {domain!r}")
    if not (0 < round(interval) <= _INT16 and abs(interval - round(interval)) < 1e-3):
        fix = ("; make the result's depth step ([interval] dz) at most 32 m with velspec revise --config"
               if domain == "depth" else "")
        raise ParameterError(f"the {what} ({interval:g}) must be a whole number from 1 to {_INT16} for the "
                             f"2-byte SEG-Y field (byte 117){fix}")
    if not (abs(start) <= _INT16 and abs(start - round(start)) < 1e-3):
        raise ParameterError(f"the first sample ({first:g}) must be a whole number of "
                             f"{'milliseconds' if domain == 'time' else 'metres'} for SEG-Y byte 109")
    return int(round(interval)), int(round(start))


def _coordinate(values: np.ndarray, what: str) -> np.ndarray:
    scaled = np.rint(np.asarray(values, dtype=np.float64) * -COORDINATE_SCALAR)
    if not np.all(np.isfinite(scaled)) or np.any(np.abs(scaled) > _INT32):
        raise ParameterError(f"{what} coordinates do not fit SEG-Y's 4-byte fields in centimetres "
                             f"(|value| above {_INT32 / -COORDINATE_SCALAR:.0f} m)")
    return scaled.astype(np.int64)


class SectionWriter:
    """A SEG-Y file of ``ntraces`` traces of ``nsamples`` samples, written trace by trace.

    Use as a context manager; the file appears under ``path`` only when the block exits without
    an error and every trace was written.

    Parameters
    ----------
    path : str or Path
        Output file.
    ntraces, nsamples : int
        Size of the file.
    domain : str
        ``"time"`` (``first``, ``step`` in s) or ``"depth"`` (in m).
    first, step : float
        First sample and sample step.
    text : list of str
        Lines of the textual header (wrapped; at most 38 lines after wrapping).
    value_unit : int
        Trace value measurement unit code (byte 203).
    stacked : bool
        Post-stack section (sorting code 4, one trace per CMP) or CMP gathers (code 2).
    """

    def __init__(self, path, ntraces: int, nsamples: int, *, domain: str, first: float, step: float,
                 text: list[str], value_unit: int = UNIT_OTHER, stacked: bool = True):
        self.path = Path(path)
        self.tmp = self.path.with_name(self.path.name + ".partial")
        self.ntraces, self.nsamples = int(ntraces), int(nsamples)
        if not 1 <= self.nsamples <= _INT16:
            raise ParameterError(f"{self.nsamples} samples do not fit SEG-Y's 2-byte sample count (byte 115)")
        self.interval, self.start = _axis_fields(domain, first, step)
        self.text = text_header(text)
        self.value_unit = value_unit
        self.stacked = stacked
        self.written = 0
        self._file = None

    def __enter__(self) -> SectionWriter:
        spec = segyio.spec()
        spec.samples = self.start + np.arange(self.nsamples) * self.interval / 1000.0
        spec.format = 5
        spec.tracecount = self.ntraces
        spec.endian = "big"
        self._file = segyio.create(str(self.tmp), spec)
        f = self._file
        f.text[0] = self.text
        BF = segyio.BinField
        f.bin.update({BF.Interval: self.interval, BF.IntervalOriginal: self.interval,
                      BF.Samples: self.nsamples, BF.SamplesOriginal: self.nsamples, BF.Format: 5,
                      BF.SortingCode: SORTING_STACKED if self.stacked else SORTING_CMP,
                      BF.Traces: 1, BF.MeasurementSystem: 1, BF.SEGYRevision: 1, BF.SEGYRevisionMinor: 0,
                      BF.TraceFlag: 1, BF.ExtendedHeaders: 0})
        return self

    def write(self, values: np.ndarray, *, cmp: int, x: float, y: float, offset: float = 0.0,
              trace_in_cmp: int = 1, fold: int = 0) -> None:
        """Write the next trace.

        Parameters
        ----------
        values : ndarray (nsamples,)
            Samples (written as float32).
        cmp : int
            CMP number (byte 21).
        x, y : float
            CMP coordinates, m (bytes 181/185; on a post-stack trace also source and group
            X/Y, 73/77 and 81/85, since source and receiver sit at the CMP after stacking).
        offset : float
            Source-receiver offset, m (byte 37, rounded to whole metres).
        trace_in_cmp : int
            Trace number within the CMP (byte 25).
        fold : int
            Traces stacked into this one (byte 33); 0 leaves it unset.
        """
        if self.written >= self.ntraces:
            raise ValueError(f"the file holds {self.ntraces} traces; all are written")
        values = np.ascontiguousarray(values, dtype=np.float32)
        if values.shape != (self.nsamples,):
            raise ValueError(f"a trace must have {self.nsamples} samples, got {values.shape}")
        cx, cy = _coordinate([x, y], "CMP")
        TF = segyio.TraceField
        k = self.written
        header = {TF.TRACE_SEQUENCE_LINE: k + 1, TF.TRACE_SEQUENCE_FILE: k + 1, TF.CDP: int(cmp),
                  TF.CDP_TRACE: int(trace_in_cmp), TF.TraceIdentificationCode: 1,
                  TF.offset: int(round(offset)), TF.SourceGroupScalar: COORDINATE_SCALAR,
                  TF.CoordinateUnits: 1, TF.DelayRecordingTime: self.start,
                  TF.TRACE_SAMPLE_COUNT: self.nsamples, TF.TRACE_SAMPLE_INTERVAL: self.interval,
                  TF.CDP_X: int(cx), TF.CDP_Y: int(cy), TF.TraceValueMeasurementUnit: self.value_unit}
        if self.stacked:
            header.update({TF.SourceX: int(cx), TF.SourceY: int(cy), TF.GroupX: int(cx), TF.GroupY: int(cy)})
        if fold:
            header[TF.NStackedTraces] = int(min(fold, _INT16))
        self._file.header[k] = header
        self._file.trace[k] = values
        self.written += 1

    def __exit__(self, kind, exc, tb) -> None:
        self._file.close()
        if kind is None and self.written != self.ntraces:
            self.tmp.unlink(missing_ok=True)
            raise ValueError(f"{self.path}: {self.written} of {self.ntraces} traces written")
        if kind is None:
            os.replace(self.tmp, self.path)
        else:
            self.tmp.unlink(missing_ok=True)


def write_section(path, values: np.ndarray, *, cmp: np.ndarray, x: np.ndarray, y: np.ndarray, domain: str,
                  first: float, step: float, text: list[str], value_unit: int = UNIT_OTHER) -> Path:
    """Write a post-stack section, one trace per CMP, from a whole (ncmp, nsamples) array.

    Parameters are those of :class:`SectionWriter` and :meth:`SectionWriter.write`, one row of
    ``values`` and one element of ``cmp``, ``x``, ``y`` (m) per trace.

    Returns
    -------
    Path
        ``path``.
    """
    values = np.asarray(values)
    with SectionWriter(path, values.shape[0], values.shape[1], domain=domain, first=first, step=step,
                       text=text, value_unit=value_unit) as w:
        for k in range(values.shape[0]):
            w.write(values[k], cmp=int(cmp[k]), x=float(x[k]), y=float(y[k]))
    return Path(path)
