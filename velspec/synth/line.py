"""A synthetic prestack 2D line over flat layers, written shot by shot as SEG-Y rev 1.

Each CMP has its own flat, layered 1D model (a slow, smooth lateral change along the line is
optional). Every trace holds the exact ray-traced primary reflections of its CMP's model as
zero-phase Ricker wavelets evaluated at the exact fractional event times, optionally the
first-order free-surface multiples, and optionally band-limited random noise. There is no
spherical divergence, as if the data had been gained, and no direct wave, refraction or ghost.

References
----------
Ricker, N., 1953, The form and laws of propagation of seismic wavelets, Geophysics 18, 10-40.

Gardner, G. H. F., Gardner, L. W. & Gregory, A. R., 1974, Formation velocity and density: the
diagnostic basics for stratigraphic traps, Geophysics 39, 770-780.

SEG Technical Standards Committee, 2002, SEG Y rev 1 Data Exchange format.
"""

from __future__ import annotations

import dataclasses
import os
import textwrap
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import segyio
from scipy.signal import fftconvolve

from velspec import __version__
from velspec.errors import ParameterError
from velspec.synth.layers import (
    check_model,
    critical_fade,
    gardner_density,
    reflection_coefficients,
    rms_velocity,
    stacking_velocity,
    trace_rays,
    zero_offset_times,
)

__all__ = ["LineSpec", "LineTruth", "make_line", "demo_spec", "default_model", "ricker"]

_FOOT = 0.3048  # m
_COORD_SCALAR = -100  # SEG-Y: negative scalar divides, so coordinates are stored in hundredths
_WAVELET_HALF = 1.5  # Ricker half-length in periods of the peak frequency: beyond, |w| < 1e-8


def default_model():
    """The invented shelf-basin model used by default (thickness, velocity).

    Sea water, soft then compacting clastics, a gas-charged sand slower than the rock above it,
    a shale, a fast carbonate, and deeper clastics above a fast half-space. Every layer is more
    than 200 ms two-way thick; the deepest reflector lies near 3.03 s.

    Returns
    -------
    thickness : ndarray, shape (9,)
        m.
    velocity : ndarray, shape (10,)
        m/s, the last one being the half-space.
    """
    thickness = np.array([230.0, 260.0, 330.0, 400.0, 220.0, 420.0, 650.0, 700.0, 1000.0])
    velocity = np.array(
        [1490.0, 1720.0, 2000.0, 2350.0, 2050.0, 2700.0, 4300.0, 3400.0, 3900.0, 4500.0]
    )
    return thickness, velocity


def ricker(t, peak_frequency):
    """Zero-phase Ricker wavelet, peak amplitude 1 at t = 0.

    ``w(t) = (1 - 2 pi^2 f^2 t^2) exp(-pi^2 f^2 t^2)``.

    Parameters
    ----------
    t : array_like
        Time relative to the wavelet's centre, s.
    peak_frequency : float
        Frequency of the amplitude spectrum's peak, Hz.

    Returns
    -------
    w : ndarray
        Dimensionless.

    References
    ----------
    Ricker, N., 1953, Geophysics 18, 10-40.
    """
    a = (np.pi * peak_frequency * np.asarray(t, dtype=np.float64)) ** 2
    return (1.0 - 2.0 * a) * np.exp(-a)


@dataclass
class LineSpec:
    """Everything that defines a synthetic line. Lengths in metres, times in seconds.

    Geometry is end-on, marine style, along a straight line of constant y: shot s sits at
    ``x_s`` and its receivers at ``x_s + near_offset + r * group_interval``, r = 0..channels-1.
    Midpoints fall in bins of ``group_interval / 2``; CMP number = ``first_cmp`` + bin index,
    the centre of the first bin being at ``first_cmp_x``. Shots run past both ends of the CMP
    range and only the traces whose CMP lies in ``[first_cmp, first_cmp + ncmp)`` are written, so
    every CMP in the range has the full fold ``channels * group_interval / (2 * shot_interval)``
    (when ``2 * shot_interval / group_interval`` is an integer; otherwise neighbouring CMPs
    alternate between the two nearest integers and midpoints lie off the bin centres). Shots near
    both ends therefore carry fewer than ``channels`` traces.

    Attributes
    ----------
    ncmp : int
        Number of CMPs.
    first_cmp : int
        Number of the first CMP.
    group_interval : float
        Receiver spacing, m.
    shot_interval : float
        Shot spacing, m.
    channels : int
        Receivers per shot.
    near_offset : float
        Offset of the nearest channel, m.
    dt : float
        Sample interval, s (a whole number of microseconds).
    nsamples : int
        Samples per trace.
    delay : float
        Time of the first sample, s (a whole number of milliseconds, SEG-Y byte 109); may be
        negative.
    peak_frequency : float
        Peak frequency of the Ricker wavelet, Hz.
    snr : float
        Signal-to-noise ratio: the RMS of the noise-free traces over all samples of the line
        divided by the RMS of the added noise. The noise is white Gaussian noise filtered with the
        same Ricker wavelet (so it shares the signal's band), independent from trace to trace.
        ``inf`` adds none.
    multiples : bool
        Add the first-order free-surface multiple of every reflector, amplitude ``-R^2``.
    lateral : float
        Fractional amplitude of the slow lateral change: every layer velocity and thickness of
        CMP b is scaled by ``1 + lateral * sin(pi * xi_b + phase)``, ``xi_b`` running from 0 to 1
        along the line and one random phase per quantity (drawn from ``seed``). 0 keeps the same
        model under every CMP.
    model : tuple of ndarray
        ``(thickness (n,), velocity (n+1,))`` in m and m/s; default :func:`default_model`.
    density : ndarray or None
        Densities of the n layers and the half-space, kg/m^3; None uses Gardner's relation
        ``rho = 310 v^0.25``.
    seed : int
        Seed of the lateral phases and of the noise (the noise of each trace depends only on the
        seed, the shot and the channel, so both trace orders hold identical traces).
    trace_order : str
        ``"shot"`` (shot by shot, channels in order) or ``"cmp"`` (CMP by CMP, offsets
        increasing).
    sample_format : int
        SEG-Y sample format: 5 IEEE float, 1 IBM float.
    feet : bool
        Write offsets and coordinates in feet (binary header measurement system 2). The model
        and geometry above stay in metres.
    cdp_header : bool
        Write CDP number and CDP X/Y; False writes 0 there, so a reader must bin from the source
        and group coordinates.
    first_cmp_x : float
        x of the centre of the first CMP bin, m.
    line_y : float
        y of every source, receiver and CMP, m.
    """

    ncmp: int = 100
    first_cmp: int = 1001
    group_interval: float = 25.0
    shot_interval: float = 25.0
    channels: int = 96
    near_offset: float = 100.0
    dt: float = 0.004
    nsamples: int = 1001
    delay: float = 0.0
    peak_frequency: float = 25.0
    snr: float = float("inf")
    multiples: bool = False
    lateral: float = 0.0
    model: tuple = field(default_factory=default_model)
    density: object = None
    seed: int = 0
    trace_order: str = "shot"
    sample_format: int = 5
    feet: bool = False
    cdp_header: bool = True
    first_cmp_x: float = 10000.0
    line_y: float = 0.0

    def validate(self):
        """Raise :class:`~velspec.errors.ParameterError` for any impossible value."""

        def need(ok, msg):
            if not ok:
                raise ParameterError(msg)

        need(int(self.ncmp) == self.ncmp and self.ncmp >= 1, "ncmp must be a positive integer")
        need(int(self.channels) == self.channels and self.channels >= 1, "channels must be >= 1")
        need(
            int(self.nsamples) == self.nsamples and 2 <= self.nsamples < 2**15,
            "nsamples must be an integer from 2 to 32767 (two-byte SEG-Y header field)",
        )
        for name in ("group_interval", "shot_interval", "dt", "peak_frequency"):
            val = getattr(self, name)
            need(np.isfinite(val) and val > 0, f"{name} must be positive, got {val}")
        need(np.isfinite(self.near_offset) and self.near_offset >= 0, "near_offset must be >= 0 m")
        us = self.dt * 1e6
        need(
            abs(us - round(us)) < 1e-6 and round(us) < 2**15,
            "dt must be a whole number of microseconds below 32.768 ms (SEG-Y byte 3217)",
        )
        ms = self.delay * 1e3
        need(
            abs(ms - round(ms)) < 1e-6 and abs(ms) < 2**15,
            "delay must be a whole number of milliseconds (SEG-Y byte 109)",
        )
        need(self.peak_frequency < 0.5 / self.dt, "peak_frequency must lie below Nyquist")
        need(self.snr > 0, "snr must be > 0 (inf for noise-free data)")
        need(0.0 <= self.lateral < 0.5, "lateral must be in [0, 0.5)")
        need(self.trace_order in ("shot", "cmp"), "trace_order must be 'shot' or 'cmp'")
        need(self.sample_format in (1, 5), "sample_format must be 5 (IEEE float) or 1 (IBM float)")
        try:
            h, v = check_model(*self.model)
        except (TypeError, ValueError) as exc:
            raise ParameterError(f"model: {exc}") from exc
        if self.density is not None:
            rho = np.asarray(self.density, dtype=np.float64)
            need(rho.shape == v.shape and np.all(rho > 0), "density needs n+1 values > 0 kg/m^3")

    def fold(self):
        """Nominal CMP fold, ``channels * group_interval / (2 * shot_interval)``."""
        return self.channels * self.group_interval / (2.0 * self.shot_interval)

    def as_dict(self):
        """The spec as plain Python values (arrays as lists), e.g. for a JSON record."""
        d = dataclasses.asdict(self)
        d["model"] = [np.asarray(a, dtype=float).tolist() for a in self.model]
        if self.density is not None:
            d["density"] = np.asarray(self.density, dtype=float).tolist()
        return d


def demo_spec():
    """The line made by ``velspec demo``: 100 CMPs, S/N 4, a 3 % lateral change, no multiples."""
    return LineSpec(ncmp=100, snr=4.0, lateral=0.03, seed=7)


@dataclass
class LineTruth:
    """What a synthetic line was made from, to judge an analysis against.

    Attributes
    ----------
    spec : LineSpec
        The spec the line was made with.
    path : Path
        The SEG-Y file.
    cmp : ndarray of int64, shape (ncmp,)
        CMP numbers.
    cmp_x : ndarray, shape (ncmp,)
        x of each CMP bin centre, m.
    thickness : ndarray, shape (ncmp, n)
        Layer thicknesses under each CMP, m.
    velocity : ndarray, shape (ncmp, n+1)
        Layer and half-space velocities under each CMP, m/s.
    density : ndarray, shape (ncmp, n+1)
        Densities, kg/m^3.
    reflection_coefficient : ndarray, shape (ncmp, n)
        Normal-incidence reflection coefficients (the primaries' amplitude at zero offset).
    t0 : ndarray, shape (ncmp, n)
        Zero-offset two-way times of the reflectors, s (the multiples are at ``2 * t0``).
    vrms : ndarray, shape (ncmp, n)
        RMS velocities at the reflectors, m/s.
    offsets : ndarray, shape (ncmp, maxfold)
        Offsets of the traces of each CMP, m, increasing, NaN-padded where a CMP has fewer.
    fold : ndarray of int64, shape (ncmp,)
        Traces per CMP.
    ntraces : int
        Traces in the file.
    signal_rms : float
        RMS of the noise-free traces over all samples of the line.
    noise_rms : float
        Standard deviation of the added noise (0 when ``snr`` is inf).
    """

    spec: LineSpec
    path: Path
    cmp: np.ndarray
    cmp_x: np.ndarray
    thickness: np.ndarray
    velocity: np.ndarray
    density: np.ndarray
    reflection_coefficient: np.ndarray
    t0: np.ndarray
    vrms: np.ndarray
    offsets: np.ndarray
    fold: np.ndarray
    ntraces: int
    signal_rms: float
    noise_rms: float

    def stacking_velocity(self, offsets=None, stretch_limit=0.3):
        """Best-fit stacking velocity of each CMP's exact reflection times.

        Parameters
        ----------
        offsets : array_like, optional
            Offsets used, m: (k,) for the same spread at every CMP, (ncmp, k) per CMP (NaN
            ignored), or None for each CMP's own offsets in the file.
        stretch_limit : float or None
            Stretch mute applied before the fit, as in
            :func:`velspec.synth.layers.stacking_velocity`.

        Returns
        -------
        vstack : ndarray, shape (ncmp, n)
            m/s, NaN where fewer than two offsets survive the mute.
        max_offset : ndarray, shape (ncmp, n)
            Largest offset used, m.
        """
        x = self.offsets if offsets is None else np.asarray(offsets, dtype=np.float64)
        x = np.broadcast_to(x, (self.cmp.size, x.shape[-1]))
        out = [
            stacking_velocity(self.thickness[b], self.velocity[b], x[b], stretch_limit)
            for b in range(self.cmp.size)
        ]
        return np.array([o[0] for o in out]), np.array([o[1] for o in out])


def _cmp_models(spec):
    """Per-CMP thickness (ncmp, n), velocity (ncmp, n+1) and density (ncmp, n+1)."""
    h, v = check_model(*spec.model)
    xi = np.arange(spec.ncmp) / max(spec.ncmp - 1, 1)
    rng = np.random.default_rng([spec.seed, 0])
    phase_h = rng.uniform(0.0, 2.0 * np.pi, h.size)
    phase_v = rng.uniform(0.0, 2.0 * np.pi, v.size)
    hh = h * (1.0 + spec.lateral * np.sin(np.pi * xi[:, None] + phase_h))
    vv = v * (1.0 + spec.lateral * np.sin(np.pi * xi[:, None] + phase_v))
    if spec.density is None:
        rho = gardner_density(vv)
    else:
        rho = np.broadcast_to(np.asarray(spec.density, dtype=np.float64), vv.shape).copy()
    return hh, vv, rho


def _geometry(spec):
    """All traces of the line as (shot, channel, bin) index arrays in shot order, and s0.

    Shot s sits at ``first_cmp_x - near_offset/2 + s * shot_interval`` so that channel 0 of shot 0
    falls on the centre of bin 0; the midpoint of (s, r) is then
    ``first_cmp_x + s * shot_interval + r * group_interval / 2``.
    """
    k = spec.shot_interval / (0.5 * spec.group_interval)  # bins advanced per shot
    r = np.arange(spec.channels)
    s_lo = int(np.floor((-0.5 - (spec.channels - 1)) / k)) - 1
    s_hi = int(np.ceil((spec.ncmp - 0.5) / k)) + 1
    shots, chans, bins = [], [], []
    for s in range(s_lo, s_hi + 1):
        b = np.floor(s * k + r + 0.5).astype(np.int64)
        ok = (b >= 0) & (b < spec.ncmp)
        if ok.any():
            shots.append(np.full(ok.sum(), s, dtype=np.int64))
            chans.append(r[ok])
            bins.append(b[ok])
    shot = np.concatenate(shots)
    # shots numbered from 0 at the first one written; x of shot i is x of shot (i + s0) above
    chan = np.concatenate(chans).astype(np.int64)
    return shot - shot[0], chan, np.concatenate(bins), int(shot[0])


class _Synth:
    """Makes the traces of any batch of (shot, channel) pairs; holds only per-CMP tables."""

    def __init__(self, spec):
        self.spec = spec
        self.h, self.v, self.rho = _cmp_models(spec)
        self.R = np.array([reflection_coefficients(v, r) for v, r in zip(self.v, self.rho)])
        self.vmax_below = np.maximum.accumulate(self.v, axis=1)[:, 1:]  # for the incidence sine
        self.half = _WAVELET_HALF / spec.peak_frequency
        self.nw = int(np.ceil(2.0 * self.half / spec.dt)) + 2
        hk = int(np.ceil(self.half / spec.dt))
        kern = ricker((np.arange(2 * hk + 1) - hk) * spec.dt, spec.peak_frequency)
        self.noise_kernel = kern / np.sqrt(np.sum(kern**2))  # unit gain on white noise power
        self.hk = hk

    def offsets(self, chan):
        return self.spec.near_offset + chan * self.spec.group_interval

    def signal(self, chan, bins):
        """Noise-free traces (m, nsamples), float64."""
        sp = self.spec
        x = self.offsets(chan)[:, None]
        h, v = self.h[bins], self.v[bins]
        t, p = trace_rays(h, v[:, :-1], x, 2)
        amp = self.R[bins][:, :, None] * critical_fade(p * self.vmax_below[bins][:, :, None])
        times, amps = t[..., 0], amp[..., 0]
        if sp.multiples:
            tm, pm = trace_rays(h, v[:, :-1], x, 4)
            sine = pm * self.vmax_below[bins][:, :, None]
            am = -(self.R[bins] ** 2)[:, :, None] * critical_fade(sine)
            times = np.concatenate([times, tm[..., 0]], axis=1)
            amps = np.concatenate([amps, am[..., 0]], axis=1)
        return self._place(times, amps)

    def _place(self, times, amps):
        """Sum Ricker wavelets at exact fractional times; (m, E) -> (m, nsamples)."""
        sp = self.spec
        m = times.shape[0]
        i0 = np.ceil((times - sp.delay - self.half) / sp.dt).astype(np.int64)
        idx = i0[..., None] + np.arange(self.nw)
        tau = sp.delay + idx * sp.dt - times[..., None]
        val = amps[..., None] * ricker(tau, sp.peak_frequency)
        ok = (idx >= 0) & (idx < sp.nsamples) & (amps[..., None] != 0)
        flat = (np.arange(m)[:, None, None] * sp.nsamples + idx)[ok]
        out = np.bincount(flat, weights=val[ok], minlength=m * sp.nsamples)
        return out.astype(np.float64, copy=False).reshape(m, sp.nsamples)  # int64 when empty

    def noise(self, shot, chan):
        """Unit-variance band-limited noise (m, nsamples), seeded per (shot, channel)."""
        sp = self.spec
        n = sp.nsamples + 2 * self.hk
        white = np.stack(
            [
                np.random.default_rng([sp.seed, 1, int(s), int(c)]).standard_normal(n)
                for s, c in zip(shot, chan)
            ]
        )
        return fftconvolve(white, self.noise_kernel[None, :], mode="valid", axes=1)


def _blocks(shot, chan, bins, order):
    """Index arrays of the trace batches in writing order: one shot, or one CMP, per batch."""
    # offset grows with the channel number, so (bin, channel) is CMP order with offsets increasing
    key = shot if order == "shot" else bins
    perm = np.lexsort((chan, key))
    cuts = np.flatnonzero(np.diff(key[perm])) + 1
    return np.split(perm, cuts)


def _text_header(spec, ntraces):
    unit = "feet" if spec.feet else "metres"
    h, v = check_model(*spec.model)
    lines = [
        f"SYNTHETIC DATA made by velspec {__version__}; not a field recording.",
        "Flat layers under each CMP, exact ray-traced reflection times, zero-phase Ricker "
        f"wavelet of peak {spec.peak_frequency:g} Hz, no spherical divergence"
        + (", free-surface multiples" if spec.multiples else "")
        + (f", band-limited noise S/N {spec.snr:g}" if np.isfinite(spec.snr) else ", no noise")
        + (f", lateral change {spec.lateral:g}" if spec.lateral else "")
        + ".",
        f"CMP {spec.first_cmp} to {spec.first_cmp + spec.ncmp - 1}, nominal fold {spec.fold():g}, "
        f"{spec.channels} channels, group interval {spec.group_interval:g} m, shot interval "
        f"{spec.shot_interval:g} m, near offset {spec.near_offset:g} m, end-on, {ntraces} traces "
        f"in {spec.trace_order} order.",
        f"Sample interval {spec.dt * 1e3:g} ms, {spec.nsamples} samples, first sample at "
        f"{spec.delay * 1e3:g} ms. Offsets and coordinates in {unit}, coordinates scaled by "
        f"1/100 (scalar {_COORD_SCALAR}).",
        "SEG-Y rev 1 byte positions: CDP 21, offset 37, scalar 71, source X/Y 73/77, group X/Y "
        "81/85, CDP X/Y 181/185, delay 109."
        + ("" if spec.cdp_header else " CDP number and CDP X/Y are 0: bin from coordinates."),
        "Model at the first CMP, thickness m / velocity m/s: "
        + ", ".join(f"{a:g}/{b:g}" for a, b in zip(h, v[:-1]))
        + f", half-space {v[-1]:g}.",
    ]
    rows = []
    for line in lines:
        rows += textwrap.wrap(line, 76)
    rows = rows[:38]
    rows = {i + 1: r for i, r in enumerate(rows)}
    rows[39] = "SEG Y REV1"
    rows[40] = "END TEXTUAL HEADER"
    return segyio.tools.create_text_header(rows)


def make_line(path, spec=None):
    """Write a synthetic prestack 2D line as SEG-Y rev 1 and return what it was made from.

    The file is written batch by batch (one shot, or one CMP, at a time) to ``path + ".partial"``
    and renamed into place when complete, so memory stays flat whatever the line's length and no
    half-written file is left under ``path``. When ``spec.snr`` is finite the signal is made
    twice: a first pass measures the RMS of the noise-free line, which sets the noise level.

    Parameters
    ----------
    path : str or Path
        Output SEG-Y file; an existing file is replaced.
    spec : LineSpec, optional
        Default: ``LineSpec()``.

    Returns
    -------
    LineTruth

    Raises
    ------
    ParameterError
        If the spec is impossible.

    Notes
    -----
    Trace headers (SEG-Y rev 1 byte positions): TRACE_SEQUENCE_LINE 1 and TRACE_SEQUENCE_FILE 5
    (running count), FieldRecord 9 (shot, from 1 along the line), TraceNumber 13 (channel, 1 =
    near), CDP 21, TraceIdentificationCode 29 (1, seismic), offset 37 (whole metres or feet,
    positive), SourceGroupScalar 71 (-100), SourceX/Y 73/77, GroupX/Y 81/85, CoordinateUnits 89
    (1, length), DelayRecordingTime 109 (ms), TRACE_SAMPLE_COUNT 115, TRACE_SAMPLE_INTERVAL 117
    (us), CDP_X/Y 181/185. Binary header: Interval, Samples, Format, SortingCode (1 as recorded,
    2 CMP), MeasurementSystem (1 m, 2 ft), SEGYRevision (rev 1), TraceFlag (fixed length).
    """
    spec = LineSpec() if spec is None else spec
    spec.validate()
    path = Path(path)
    shot, chan, bins, s0 = _geometry(spec)
    synth = _Synth(spec)
    blocks = _blocks(shot, chan, bins, spec.trace_order)
    ntr = shot.size

    # per-CMP offsets for the truth
    fold = np.bincount(bins, minlength=spec.ncmp)
    offs = np.full((spec.ncmp, fold.max()), np.nan)
    order = np.lexsort((synth.offsets(chan), bins))
    pos = np.arange(ntr) - np.repeat(np.cumsum(fold) - fold, fold)
    offs[bins[order], pos] = synth.offsets(chan[order])

    signal_rms, noise_rms = 0.0, 0.0
    if np.isfinite(spec.snr):
        ss = sum(float(np.sum(synth.signal(chan[i], bins[i]) ** 2)) for i in blocks)
        signal_rms = np.sqrt(ss / (ntr * spec.nsamples))
        noise_rms = signal_rms / spec.snr

    scale = 1.0 / _FOOT if spec.feet else 1.0
    x_ref = spec.first_cmp_x - 0.5 * spec.near_offset + s0 * spec.shot_interval
    cmp_x = spec.first_cmp_x + np.arange(spec.ncmp) * 0.5 * spec.group_interval
    dt_us = int(round(spec.dt * 1e6))
    delay_ms = int(round(spec.delay * 1e3))

    def coord(a):
        return int(round(a * scale * -_COORD_SCALAR))

    seg = segyio.spec()
    seg.samples = spec.delay * 1e3 + np.arange(spec.nsamples) * spec.dt * 1e3
    seg.format = spec.sample_format
    seg.tracecount = ntr
    seg.endian = "big"
    tmp = path.with_name(path.name + ".partial")
    TF, BF = segyio.TraceField, segyio.BinField
    try:
        with segyio.create(str(tmp), seg) as f:
            f.text[0] = _text_header(spec, ntr)
            f.bin.update(
                {
                    BF.Interval: dt_us,
                    BF.IntervalOriginal: dt_us,
                    BF.Samples: spec.nsamples,
                    BF.SamplesOriginal: spec.nsamples,
                    BF.Format: spec.sample_format,
                    BF.SortingCode: 1 if spec.trace_order == "shot" else 2,
                    BF.Traces: spec.channels if spec.trace_order == "shot" else int(fold.max()),
                    BF.MeasurementSystem: 2 if spec.feet else 1,
                    BF.SEGYRevision: 1,  # rev 1.0: byte 3501 major, byte 3502 minor
                    BF.SEGYRevisionMinor: 0,
                    BF.TraceFlag: 1,
                    BF.ExtendedHeaders: 0,
                }
            )
            k = 0
            for idx in blocks:
                data = synth.signal(chan[idx], bins[idx])
                if noise_rms > 0:
                    data += noise_rms * synth.noise(shot[idx], chan[idx])
                data = data.astype(np.float32)
                for j, i in enumerate(idx):
                    sx = x_ref + shot[i] * spec.shot_interval
                    off = synth.offsets(chan[i])
                    b = bins[i]
                    f.header[k] = {
                        TF.TRACE_SEQUENCE_LINE: k + 1,
                        TF.TRACE_SEQUENCE_FILE: k + 1,
                        TF.FieldRecord: int(shot[i]) + 1,
                        TF.TraceNumber: int(chan[i]) + 1,
                        TF.CDP: spec.first_cmp + int(b) if spec.cdp_header else 0,
                        TF.TraceIdentificationCode: 1,
                        TF.offset: int(round(off * scale)),
                        TF.SourceGroupScalar: _COORD_SCALAR,
                        TF.SourceX: coord(sx),
                        TF.SourceY: coord(spec.line_y),
                        TF.GroupX: coord(sx + off),
                        TF.GroupY: coord(spec.line_y),
                        TF.CoordinateUnits: 1,
                        TF.DelayRecordingTime: delay_ms,
                        TF.TRACE_SAMPLE_COUNT: spec.nsamples,
                        TF.TRACE_SAMPLE_INTERVAL: dt_us,
                        TF.CDP_X: coord(cmp_x[b]) if spec.cdp_header else 0,
                        TF.CDP_Y: coord(spec.line_y) if spec.cdp_header else 0,
                    }
                    f.trace[k] = data[j]
                    k += 1
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise

    t0 = np.array([zero_offset_times(h, v) for h, v in zip(synth.h, synth.v)])
    vrms = np.array([rms_velocity(h, v) for h, v in zip(synth.h, synth.v)])
    return LineTruth(
        spec=spec,
        path=path,
        cmp=spec.first_cmp + np.arange(spec.ncmp, dtype=np.int64),
        cmp_x=cmp_x,
        thickness=synth.h,
        velocity=synth.v,
        density=synth.rho,
        reflection_coefficient=synth.R,
        t0=t0,
        vrms=vrms,
        offsets=offs,
        fold=fold.astype(np.int64),
        ntraces=int(ntr),
        signal_rms=float(signal_rms),
        noise_rms=float(noise_rms),
    )
