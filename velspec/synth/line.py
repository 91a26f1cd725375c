"""A synthetic prestack 2D line over flat layers, written shot by shot as SEG-Y rev 1.

Each CMP has its own flat, layered 1D model (a slow, smooth lateral change along the line is
optional). Every trace holds the exact ray-traced primary reflections of its CMP's model as
zero-phase Ricker wavelets evaluated at the exact fractional event times, optionally
free-surface multiples (the first-order multiple of every reflector, water-layer reverberations
of the sea floor and peg-legs of the deeper reflectors, layer 0 being the water), and optionally
band-limited random noise. There is no spherical divergence, as if the data had been gained, no
transmission loss, and no direct wave, refraction, ghost or interbed multiple.

References
----------
Ricker, N., 1953, The form and laws of propagation of seismic wavelets, Geophysics 18, 10-40.

Sheriff, R. E. & Geldart, L. P., 1995, Exploration Seismology, 2nd ed., Cambridge (free-surface
multiples, water-layer reverberations, peg-leg multiples).

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
    best_fit_stacking_velocity,
    check_model,
    critical_fade,
    gardner_density,
    path_crossings,
    reflection_coefficients,
    rms_velocity,
    stacking_velocity,
    trace_rays,
    zero_offset_times,
)

__all__ = [
    "LineGeometry",
    "LineSpec",
    "LineTruth",
    "MultipleEvents",
    "band_limited_noise",
    "line_geometry",
    "make_line",
    "segy_text_header",
    "trace_blocks",
    "write_segy_line",
    "demo_spec",
    "reverb_spec",
    "default_model",
    "reverb_model",
    "ricker",
]

_FOOT = 0.3048  # m
_COORD_SCALAR = -100  # SEG-Y: negative scalar divides, so coordinates are stored in hundredths
_WAVELET_HALF = 1.5  # Ricker half-length in periods of the peak frequency: beyond, |w| < 1e-8
_MAX_ORDER = 50  # reverberation / peg-leg orders; far beyond any audible one (|R|^50 ~ 0)


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
        Signal-to-noise ratio: the RMS of the noise-free *primaries-only* traces over all
        samples of the line divided by the RMS of the added noise. Multiples do not count as
        signal, so adding them leaves the noise level unchanged (with no multiples this is the
        RMS of the noise-free traces). The noise is white Gaussian noise filtered with the same
        Ricker wavelet (so it shares the signal's band), independent from trace to trace.
        ``inf`` adds none.
    multiples : bool
        Add the first-order free-surface multiple of every reflector (the primary path twice,
        one bounce at the free surface), amplitude ``-R_k^2``. The one of the sea floor is the
        order-1 reverberation and is made once when ``reverberation_order >= 1``.
    reverberation_order : int
        Add the water-layer reverberations of the sea floor (reflector 0, the base of layer 0,
        the water) of orders m = 1 .. ``reverberation_order``: order m crosses the water
        2 (m + 1) times, amplitude ``(-1)^m R_wb^(m+1)``. 0 adds none.
    pegleg_order : int
        Add the peg-legs of every deeper reflector k >= 1 with j = 1 .. ``pegleg_order`` extra
        round trips in the water: they cross the water 2 (j + 1) times and layers 1..k twice.
        In flat layers the j + 1 paths that make their water trips before or after the deep
        reflection arrive together, so the amplitude is ``(-1)^j (j + 1) R_wb^j R_k``. 0 adds
        none; needs a model with at least two layers.
    seafloor_reflection : float or None
        Normal-incidence reflection coefficient of the sea floor ``R_wb``, used for its
        primary and every multiple, e.g. 0.3-0.5 for a hard sea floor; ``|R| < 1``. None takes
        the impedance contrast of the model (Gardner densities unless ``density`` is given).
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

    Notes
    -----
    Amplitudes ignore transmission losses and use -1 for the free surface: every event is the
    product of the reflection coefficients it meets (times the number of distinct paths that
    share its time) and the critical-angle fade of :func:`velspec.synth.layers.critical_fade`,
    applied as for the primaries with the incidence sine ``p * max(v[0..K+1])`` of the deepest
    reflector K that the event reaches. Interbed multiples (any path reflected off the
    underside of an interface, even one that shares a first-order multiple's time), peg-legs in
    layers other than the water, and combinations of the kinds above (e.g. a reverberating
    first-order multiple) are not modelled.
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
    reverberation_order: int = 0
    pegleg_order: int = 0
    seafloor_reflection: object = None
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
        for name in ("reverberation_order", "pegleg_order"):
            val = getattr(self, name)
            need(
                isinstance(val, (int, np.integer)) and not isinstance(val, bool)
                and 0 <= val <= _MAX_ORDER,
                f"{name} must be a whole number from 0 to {_MAX_ORDER}, got {val!r}",
            )
        need(
            self.pegleg_order == 0 or h.size >= 2,
            "pegleg_order needs a model with a reflector below the sea floor (at least 2 layers)",
        )
        if self.seafloor_reflection is not None:
            r0 = self.seafloor_reflection
            need(
                isinstance(r0, (int, float, np.integer, np.floating)) and not isinstance(r0, bool)
                and np.isfinite(r0) and -1.0 < r0 < 1.0,
                f"seafloor_reflection must be a number with |R| < 1 or None, got {r0!r}",
            )

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


def reverb_model():
    """An invented shelf model: shallow water over a hard sea floor (thickness, velocity).

    180 m of water (0.24 s two-way) over a cemented sea floor, a slower mudstone under it, a
    fast sand, then compacting clastics and carbonates down to a last reflector near 2.78 s.
    Every layer below the water is at least 240 ms two-way thick. The reflector times are
    chosen so that the sea-floor reverberations (every 0.24 s) and the peg-legs of the shallow
    reflectors fall within one or two wavelet periods of deeper primaries.

    Returns
    -------
    thickness : ndarray, shape (8,)
        m.
    velocity : ndarray, shape (9,)
        m/s, the last one being the half-space.
    """
    thickness = np.array([180.0, 260.0, 231.25, 391.0, 518.0, 704.0, 936.0, 738.0])
    velocity = np.array([1500.0, 2000.0, 1850.0, 2300.0, 2800.0, 3200.0, 3600.0, 4100.0, 4600.0])
    return thickness, velocity


def reverb_spec():
    """A hard line for a velocity picker: strong water-layer multiples at S/N 1.

    :func:`reverb_model` (water 180 m deep, 0.24 s two-way) with a sea-floor reflection
    coefficient of 0.4, sea-floor reverberations to order 6, peg-legs of every deeper reflector
    with up to 3 extra water round trips, the first-order multiples of all reflectors, a 3 %
    lateral change, S/N 1 (on the primaries alone), 100 CMPs, 96 channels, 4 ms samples to
    3.2 s. At zero offset the order-1 and order-2 reverberations (-0.16, +0.064) and the first
    and second peg-legs (-0.8 R_k and +0.48 R_k) are as strong as or stronger than the deeper
    primaries (Gardner reflection coefficients R_k of about 0.02-0.14), and the multiples
    arrive within a wavelet period of several deeper primaries; over the line the multiples
    carry about as much energy as the primaries.

    Returns
    -------
    LineSpec
    """
    return LineSpec(
        ncmp=100,
        channels=96,
        dt=0.004,
        nsamples=801,
        snr=1.0,
        lateral=0.03,
        model=reverb_model(),
        seafloor_reflection=0.4,
        multiples=True,
        reverberation_order=6,
        pegleg_order=3,
        seed=11,
    )


@dataclass
class MultipleEvents:
    """Where the multiples of a synthetic line are, CMP by CMP.

    Returned by :meth:`LineTruth.multiple_events`; events in the order first-order multiples,
    reverberations (by order), peg-legs (by reflector, then water round trips).

    Attributes
    ----------
    kind : ndarray of str, shape (E,)
        ``"first-order"``, ``"reverberation"`` or ``"peg-leg"``.
    reflector : ndarray of int64, shape (E,)
        Deepest reflector the event reaches (0 = sea floor).
    order : ndarray of int64, shape (E,)
        Reverberation order m, peg-leg water round trips j, or 1 for a first-order multiple.
    crossings : ndarray of int64, shape (E, n)
        Times the event crosses each layer.
    t0 : ndarray, shape (ncmp, E)
        Zero-offset time, s.
    amplitude : ndarray, shape (ncmp, E)
        Amplitude at zero offset (dimensionless; the primaries' is their reflection
        coefficient).
    vstack : ndarray, shape (ncmp, E)
        Best-fit stacking velocity over the CMP's offsets after the stretch mute, m/s; NaN where
        fewer than two offsets survive.
    max_offset : ndarray, shape (ncmp, E)
        Largest offset used in the fit, m; NaN where none survives.
    """

    kind: np.ndarray
    reflector: np.ndarray
    order: np.ndarray
    crossings: np.ndarray
    t0: np.ndarray
    amplitude: np.ndarray
    vstack: np.ndarray
    max_offset: np.ndarray


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
        Normal-incidence reflection coefficients (the primaries' amplitude at zero offset),
        with ``spec.seafloor_reflection`` for reflector 0 when it is set.
    t0 : ndarray, shape (ncmp, n)
        Zero-offset two-way times of the reflectors, s (for the multiples see
        :meth:`multiple_events`).
    vrms : ndarray, shape (ncmp, n)
        RMS velocities at the reflectors, m/s.
    offsets : ndarray, shape (ncmp, maxfold)
        Offsets of the traces of each CMP, m, increasing, NaN-padded where a CMP has fewer.
    fold : ndarray of int64, shape (ncmp,)
        Traces per CMP.
    ntraces : int
        Traces in the file.
    signal_rms : float
        RMS of the noise-free primaries-only traces over all samples of the line, the signal of
        ``spec.snr`` (0 when ``snr`` is inf: no measuring pass is made).
    noise_rms : float
        Standard deviation of the added noise (0 when ``snr`` is inf).
    multiple_rms : float
        RMS of the multiples alone over all samples of the line (0 when ``snr`` is inf).
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
    multiple_rms: float = 0.0

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

    def multiple_events(self, offsets=None, stretch_limit=0.3):
        """Where the modelled multiples are, CMP by CMP, to check that no pick sits on one.

        For each multiple event of the line (see :class:`LineSpec` for the kinds), at every
        CMP: its zero-offset time ``sum n_i h_i / v_i``, its amplitude at zero offset, and the
        velocity of the hyperbola that best fits its exact times (least squares of
        ``t^2 = a + b x^2`` over the offsets with NMO stretch ``(t - t0) / t0 <= stretch_limit``,
        as :meth:`stacking_velocity` does for the primaries; offsets where the critical fade
        has silenced the event are kept, as for the primaries).

        Parameters
        ----------
        offsets : array_like, optional
            Offsets used, m: (k,) for the same spread at every CMP, (ncmp, k) per CMP (NaN
            ignored), or None for each CMP's own offsets in the file.
        stretch_limit : float or None
            Largest fractional NMO stretch kept; None or inf keeps every offset.

        Returns
        -------
        MultipleEvents
            Arrays of shape (ncmp, E) and per-event labels of shape (E,); E = 0 when the line
            has no multiples.

        References
        ----------
        Sheriff & Geldart, 1995, Exploration Seismology, Cambridge (multiples in flat layers).
        Taner, M. T. & Koehler, F., 1969, Geophysics 34, 859-881 (stacking velocity).
        """
        table = _multiple_table(self.spec, self.thickness.shape[1])
        nb, ne = self.cmp.size, table.crossings.shape[0]
        x = self.offsets if offsets is None else np.asarray(offsets, dtype=np.float64)
        x = np.abs(np.broadcast_to(x, (nb, x.shape[-1])))
        finite = np.isfinite(x)
        h, v = self.thickness, self.velocity[:, :-1]
        N = table.crossings.astype(np.float64)
        t0 = (N[None] * (h / v)[:, None, :]).sum(axis=2)
        amp = table.amplitude(self.reflection_coefficient)
        if ne == 0:
            empty = np.zeros((nb, 0))
            return MultipleEvents(
                table.kind, table.reflector, table.order, table.crossings, empty, empty,
                empty, empty,
            )
        t, _ = trace_rays(h, v, np.where(finite, x, 0.0), table.crossings)
        keep = np.broadcast_to(finite[:, None, :], t.shape)
        if stretch_limit is not None and np.isfinite(stretch_limit):
            keep = keep & ((t - t0[..., None]) / t0[..., None] <= stretch_limit)
        xx = np.broadcast_to(x[:, None, :], t.shape)
        vs = best_fit_stacking_velocity(
            t0.ravel(), xx.reshape(nb * ne, -1), t.reshape(nb * ne, -1),
            mask=keep.reshape(nb * ne, -1),
        ).reshape(nb, ne)
        xm = np.where(keep, xx, -np.inf).max(axis=2)
        return MultipleEvents(
            kind=table.kind,
            reflector=table.reflector,
            order=table.order,
            crossings=table.crossings,
            t0=t0,
            amplitude=amp,
            vstack=vs,
            max_offset=np.where(np.isfinite(xm), xm, np.nan),
        )


@dataclass
class _Table:
    """The multiple events of a spec: crossings (E, n), labels (E,), and their amplitude rule."""

    crossings: np.ndarray
    kind: np.ndarray
    reflector: np.ndarray
    order: np.ndarray
    sign: np.ndarray  # (E,)
    paths: np.ndarray  # (E,) distinct ray paths sharing the event's time
    power_wb: np.ndarray  # (E,) power of R_wb
    power_deep: np.ndarray  # (E,) power of R_k of the deepest reflector (k >= 1)

    def amplitude(self, R):
        """Zero-offset amplitudes (ncmp, E) from reflection coefficients R (ncmp, n)."""
        R = np.asarray(R, dtype=np.float64)
        rk = R[:, self.reflector] ** self.power_deep
        return (self.sign * self.paths) * R[:, :1] ** self.power_wb * rk


def _multiple_table(spec, n):
    """Every multiple event that ``spec`` asks for in a model of n layers (layer 0 the water)."""
    rows = []  # (crossings, kind, reflector, order, sign, paths, power of R_wb, power of R_k)
    if spec.multiples:
        # the sea floor's first-order multiple is the order-1 reverberation: made only once
        for k in range(1 if spec.reverberation_order >= 1 else 0, n):
            pw, pk = (2, 0) if k == 0 else (0, 2)
            rows.append((path_crossings(n, k, repeats=2), "first-order", k, 1, -1, 1, pw, pk))
    for m in range(1, spec.reverberation_order + 1):
        rows.append(
            (path_crossings(n, 0, repeats=m + 1), "reverberation", 0, m, (-1) ** m, 1, m + 1, 0)
        )
    for k in range(1, n if spec.pegleg_order else 1):
        for j in range(1, spec.pegleg_order + 1):
            c = path_crossings(n, k, water_round_trips=j)
            rows.append((c, "peg-leg", k, j, (-1) ** j, j + 1, j, 1))
    if not rows:
        z = np.zeros(0, dtype=np.int64)
        return _Table(np.zeros((0, n), dtype=np.int64), np.zeros(0, dtype="<U13"), z, z, z, z, z, z)
    cols = list(zip(*rows))
    ints = [np.array(c, dtype=np.int64) for c in cols[2:]]
    return _Table(np.array(cols[0], dtype=np.int64), np.array(cols[1], dtype="<U13"), *ints)


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


@dataclass
class LineGeometry:
    """Every trace of a line's geometry, in shot order (see :func:`line_geometry`).

    Attributes
    ----------
    shot : ndarray of int64, shape (ntraces,)
        Shot index, 0 at the first shot written.
    chan : ndarray of int64, shape (ntraces,)
        Channel index, 0 = near.
    bins : ndarray of int64, shape (ntraces,)
        CMP bin index, 0 = ``first_cmp``.
    s0 : int
        Index of the first shot written on the full shot axis (shot i sits at x of shot i + s0).
    offset : ndarray, shape (ntraces,)
        Source-receiver offset, m.
    cmp_offsets : ndarray, shape (ncmp, maxfold)
        Offsets of each CMP's traces, m, increasing, NaN-padded.
    fold : ndarray of int64, shape (ncmp,)
        Traces per CMP.
    """

    shot: np.ndarray
    chan: np.ndarray
    bins: np.ndarray
    s0: int
    offset: np.ndarray
    cmp_offsets: np.ndarray
    fold: np.ndarray


def line_geometry(spec):
    """All traces of an end-on line whose CMPs lie in the line's CMP range, in shot order.

    Shot s sits at ``first_cmp_x - near_offset/2 + s * shot_interval`` so that channel 0 of shot 0
    falls on the centre of bin 0; the midpoint of (s, r) is then
    ``first_cmp_x + s * shot_interval + r * group_interval / 2``.

    Parameters
    ----------
    spec : LineSpec
        Or any object with its geometry attributes ``ncmp``, ``channels``, ``group_interval``,
        ``shot_interval`` and ``near_offset`` (e.g. a wave-equation line's spec).

    Returns
    -------
    LineGeometry
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
    bins = np.concatenate(bins)
    offset = spec.near_offset + chan * spec.group_interval
    ntr = shot.size
    fold = np.bincount(bins, minlength=spec.ncmp)
    offs = np.full((spec.ncmp, fold.max()), np.nan)
    order = np.lexsort((offset, bins))
    pos = np.arange(ntr) - np.repeat(np.cumsum(fold) - fold, fold)
    offs[bins[order], pos] = offset[order]
    return LineGeometry(shot=shot - shot[0], chan=chan, bins=bins, s0=int(shot[0]), offset=offset,
                        cmp_offsets=offs, fold=fold.astype(np.int64))


def band_limited_noise(shot, chan, nsamples, dt, peak_frequency, seed):
    """Unit-variance noise in the band of a Ricker wavelet, one seeded stream per trace.

    White Gaussian noise filtered with the Ricker wavelet of ``peak_frequency`` (so it shares
    the signal's band) and scaled to unit variance; the noise of a trace depends only on
    ``seed``, its shot and its channel, so any trace order holds the same noise.

    Parameters
    ----------
    shot, chan : array_like of int, shape (m,)
        Shot and channel index of each trace.
    nsamples : int
        Samples per trace.
    dt : float
        Sample interval, s.
    peak_frequency : float
        Ricker peak frequency, Hz.
    seed : int
        Seed of the line.

    Returns
    -------
    noise : ndarray, shape (m, nsamples)
        Dimensionless, unit variance.

    References
    ----------
    Ricker, N., 1953, Geophysics 18, 10-40.
    """
    hk = int(np.ceil(_WAVELET_HALF / peak_frequency / dt))
    kern = ricker((np.arange(2 * hk + 1) - hk) * dt, peak_frequency)
    kern = kern / np.sqrt(np.sum(kern**2))  # unit gain on white noise power
    n = nsamples + 2 * hk
    white = np.stack(
        [
            np.random.default_rng([seed, 1, int(s), int(c)]).standard_normal(n)
            for s, c in zip(shot, chan)
        ]
    )
    return fftconvolve(white, kern[None, :], mode="valid", axes=1)


class _Synth:
    """Makes the traces of any batch of (shot, channel) pairs; holds only per-CMP tables."""

    def __init__(self, spec):
        self.spec = spec
        self.h, self.v, self.rho = _cmp_models(spec)
        self.R = np.array([reflection_coefficients(v, r) for v, r in zip(self.v, self.rho)])
        if spec.seafloor_reflection is not None:
            self.R[:, 0] = float(spec.seafloor_reflection)
        self.vmax_below = np.maximum.accumulate(self.v, axis=1)[:, 1:]  # for the incidence sine
        self.table = _multiple_table(spec, self.h.shape[1])
        self.mult_amp = self.table.amplitude(self.R)  # (ncmp, E) at zero offset
        self.half = _WAVELET_HALF / spec.peak_frequency
        self.nw = int(np.ceil(2.0 * self.half / spec.dt)) + 2

    def offsets(self, chan):
        return self.spec.near_offset + chan * self.spec.group_interval

    def signal(self, chan, bins):
        """Noise-free traces (m, nsamples), float64: primaries plus multiples."""
        times, amps = self._events(chan, bins, primaries=True, multiples=True)
        return self._place(times, amps)

    def parts(self, chan, bins):
        """Noise-free primaries-only and multiples-only traces, each (m, nsamples)."""
        prim = self._place(*self._events(chan, bins, primaries=True, multiples=False))
        mult = self._place(*self._events(chan, bins, primaries=False, multiples=True))
        return prim, mult

    def _events(self, chan, bins, primaries, multiples):
        """Times and amplitudes (m, E) of the events of each trace."""
        x = self.offsets(chan)[:, None]
        h, v = self.h[bins], self.v[bins]
        times, amps = [np.zeros((bins.size, 0))], [np.zeros((bins.size, 0))]
        if primaries:
            t, p = trace_rays(h, v[:, :-1], x, 2)
            amp = self.R[bins][:, :, None] * critical_fade(p * self.vmax_below[bins][:, :, None])
            times.append(t[..., 0])
            amps.append(amp[..., 0])
        if multiples and self.table.crossings.shape[0]:
            tm, pm = trace_rays(h, v[:, :-1], x, self.table.crossings)
            # the fade of the deepest reflector reached, as for its primary
            sine = pm[..., 0] * self.vmax_below[bins][:, self.table.reflector]
            times.append(tm[..., 0])
            amps.append(self.mult_amp[bins] * critical_fade(sine))
        return np.concatenate(times, axis=1), np.concatenate(amps, axis=1)

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
        return band_limited_noise(shot, chan, sp.nsamples, sp.dt, sp.peak_frequency, sp.seed)


def _text_header(spec, ntraces):
    unit = "feet" if spec.feet else "metres"
    h, v = check_model(*spec.model)
    lines = [
        f"SYNTHETIC DATA made by velspec {__version__}; not a field recording.",
        "Flat layers under each CMP, exact ray-traced reflection times, zero-phase Ricker "
        f"wavelet of peak {spec.peak_frequency:g} Hz, no spherical divergence"
        + (", first-order free-surface multiples" if spec.multiples else "")
        + (
            f", sea-floor reverberations to order {spec.reverberation_order}"
            if spec.reverberation_order
            else ""
        )
        + (
            f", peg-legs with up to {spec.pegleg_order} water round trips"
            if spec.pegleg_order
            else ""
        )
        + (
            f", sea-floor reflection coefficient {spec.seafloor_reflection:g}"
            if spec.seafloor_reflection is not None
            else ""
        )
        + (
            f", band-limited noise S/N {spec.snr:g} (on the primaries)"
            if np.isfinite(spec.snr)
            else ", no noise"
        )
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
    return segy_text_header(lines)


def segy_text_header(lines):
    """A SEG-Y rev 1 textual header from paragraphs of plain text.

    The paragraphs are wrapped to 76 columns into the first 38 card images (the rest cut);
    card 39 says ``SEG Y REV1`` and card 40 ``END TEXTUAL HEADER``, as the standard asks.

    Parameters
    ----------
    lines : sequence of str
        Paragraphs.

    Returns
    -------
    str
        The 3200-character header, as segyio writes it.

    References
    ----------
    SEG Technical Standards Committee, 2002, SEG Y rev 1 Data Exchange format (textual header).
    """
    rows = []
    for line in lines:
        rows += textwrap.wrap(line, 76)
    rows = rows[:38]
    rows = {i + 1: r for i, r in enumerate(rows)}
    rows[39] = "SEG Y REV1"
    rows[40] = "END TEXTUAL HEADER"
    return segyio.tools.create_text_header(rows)


def trace_blocks(geometry, order):
    """Index arrays of the trace batches in writing order: one shot, or one CMP, per batch.

    Parameters
    ----------
    geometry : LineGeometry
    order : str
        ``"shot"`` (channels in order) or ``"cmp"`` (offsets increasing).

    Returns
    -------
    list of ndarray of int64
        Indices into the geometry's trace arrays.
    """
    shot, chan, bins = geometry.shot, geometry.chan, geometry.bins
    # offset grows with the channel number, so (bin, channel) is CMP order with offsets increasing
    key = shot if order == "shot" else bins
    perm = np.lexsort((chan, key))
    cuts = np.flatnonzero(np.diff(key[perm])) + 1
    return np.split(perm, cuts)


def write_segy_line(path, spec, geometry, traces, text_header):
    """Write the traces of a line's geometry as SEG-Y rev 1, batch by batch, atomically.

    Batches are whole shots or whole CMPs (``spec.trace_order``); each is asked of ``traces``
    and written at once to ``path + ".partial"``, which is renamed into place when complete, so
    memory stays flat and no half-written file is ever left under ``path``.

    Parameters
    ----------
    path : str or Path
        Output file; an existing one is replaced.
    spec : LineSpec
        Or any object with the same geometry and format attributes (``ncmp``, ``first_cmp``,
        ``first_cmp_x``, ``line_y``, ``channels``, ``group_interval``, ``shot_interval``,
        ``near_offset``, ``dt``, ``nsamples``, ``delay``, ``trace_order``, ``sample_format``,
        ``feet``, ``cdp_header``), e.g. a wave-equation line's spec.
    geometry : LineGeometry
        From :func:`line_geometry` of the same spec.
    traces : callable
        ``traces(idx) -> ndarray (len(idx), nsamples)``: the samples of the traces ``idx``
        (indices into the geometry's arrays).
    text_header : str
        The textual header (:func:`segy_text_header`).

    Returns
    -------
    cmp_x : ndarray, shape (ncmp,)
        x of each CMP bin centre, m.

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
    path = Path(path)
    shot, chan, bins, s0 = geometry.shot, geometry.chan, geometry.bins, geometry.s0
    fold = geometry.fold
    ntr = shot.size
    blocks = trace_blocks(geometry, spec.trace_order)
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
            f.text[0] = text_header
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
                data = np.asarray(traces(idx)).astype(np.float32)
                for j, i in enumerate(idx):
                    sx = x_ref + shot[i] * spec.shot_interval
                    off = geometry.offset[i]
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
    return cmp_x


def make_line(path, spec=None):
    """Write a synthetic prestack 2D line as SEG-Y rev 1 and return what it was made from.

    The file is written batch by batch (one shot, or one CMP, at a time) to ``path + ".partial"``
    and renamed into place when complete, so memory stays flat whatever the line's length and no
    half-written file is left under ``path``. When ``spec.snr`` is finite the signal is made
    twice: a first pass measures the RMS of the noise-free primaries, which sets the noise level
    (and the RMS of the multiples, for the record).

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
    The trace and binary headers are those of :func:`write_segy_line`.
    """
    spec = LineSpec() if spec is None else spec
    spec.validate()
    path = Path(path)
    geom = line_geometry(spec)
    shot, chan, bins = geom.shot, geom.chan, geom.bins
    synth = _Synth(spec)
    ntr = shot.size

    signal_rms, noise_rms, multiple_rms = 0.0, 0.0, 0.0
    if np.isfinite(spec.snr):
        # the noise level is set by the primaries alone (LineSpec.snr); multiples are measured too
        ss = np.zeros(2)
        for i in trace_blocks(geom, spec.trace_order):
            ss += [float(np.sum(a**2)) for a in synth.parts(chan[i], bins[i])]
        signal_rms, multiple_rms = np.sqrt(ss / (ntr * spec.nsamples))
        noise_rms = signal_rms / spec.snr

    def traces(idx):
        data = synth.signal(chan[idx], bins[idx])
        if noise_rms > 0:
            data += noise_rms * synth.noise(shot[idx], chan[idx])
        return data

    cmp_x = write_segy_line(path, spec, geom, traces, _text_header(spec, ntr))

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
        offsets=geom.cmp_offsets,
        fold=geom.fold,
        ntraces=int(ntr),
        signal_rms=float(signal_rms),
        noise_rms=float(noise_rms),
        multiple_rms=float(multiple_rms),
    )
