"""Prestack 2D lines whose traces come from the 2D acoustic wave equation.

Over a flat layered earth every shot sees the same earth, so one modelled shot gather
(:func:`velspec.synth.wave.model_shot`, receivers at every offset of the spread) serves every shot
position of the line. A line may have two parts with two models (e.g. the sediments 3 % faster
past a given CMP): each part gets its own modelled shot, and every trace takes the response of
the part its CMP lies in, so every CMP gather is that of a flat earth (a shot whose spread
crosses the step holds traces of both parts). Geometry, headers, coordinates and noise are
those of :func:`velspec.synth.make_line`, written by the same SEG-Y writer.

Unlike the ray-traced lines, these hold everything the wave equation makes: direct wave, head
waves, guided waves in the water layer, source and receiver ghosts, every free-surface and
interbed multiple, thin-bed interference, grid dispersion's small tail, and 2D geometrical
spreading (corrected on output by a gain ``t^gain_power``).

The truth returned (:class:`WaveLineTruth`) is a :class:`velspec.synth.LineTruth`: exact Snell's
law times, RMS and best-fit stacking velocities of the primaries, and the times and stacking
velocities of the water-layer multiples and peg-legs (:meth:`WaveLineTruth.multiple_events`),
all referred to the sea surface. The ghosts of a source at z_s and a receiver at z_r turn
each event into four arrivals at t - (z_s + z_r)/v_w + {0, 2 z_s, 2 z_r, 2 (z_s + z_r)}/v_w
near vertical incidence, a wavelet whose centre is the sea-surface time.

A velocity field found from these lines is a first-pass field, like any automatic result: it is
for qualified people to review, and local regulations and licensed practice prevail.

References
----------
Alford, R. M., Kelly, K. R. & Boore, D. M., 1974, Accuracy of finite-difference modeling of the
acoustic wave equation, Geophysics 39, 834-842.

Sheriff, R. E. & Geldart, L. P., 1995, Exploration Seismology, 2nd ed., Cambridge (ghosts,
multiples, head waves).

Gardner, G. H. F., Gardner, L. W. & Gregory, A. R., 1974, Formation velocity and density: the
diagnostic basics for stratigraphic traps, Geophysics 39, 770-780.

SEG Technical Standards Committee, 2002, SEG Y rev 1 Data Exchange format.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numba
import numpy as np

from velspec import __version__
from velspec.errors import ParameterError
from velspec.params import WaveParams
from velspec.synth.layers import (
    check_model,
    gardner_density,
    reflection_coefficients,
    reflection_times,
    rms_velocity,
    zero_offset_times,
)
from velspec.synth.line import (
    LineTruth,
    band_limited_noise,
    default_model,
    line_geometry,
    segy_text_header,
    write_segy_line,
)
from velspec.synth.wave import choose_grid, model_shot

__all__ = ["WaveLineSpec", "WaveLineTruth", "make_wave_line", "sonic_wave_model"]

_MAX_ORDER = 50  # the ray-traced line's largest multiple order
_WAVELET_HALF = 1.5  # Ricker half-length in peak periods
_CACHE_FORMAT = 1  # bump when the modeller's output for the same inputs changes


@dataclass(frozen=True)
class WaveLineSpec:
    """Everything that defines a wave-equation line. Lengths in metres, times in seconds.

    The geometry and file attributes mean what they mean in :class:`velspec.synth.LineSpec`
    (end-on, marine style; only traces whose CMP lies in the range are written, shot order or
    CMP order, SEG-Y rev 1).

    Attributes
    ----------
    ncmp, first_cmp, group_interval, shot_interval, channels, near_offset : see LineSpec
        Defaults 60 CMPs from 1001, 25 m groups and shots, 96 channels (fold 48), 100 m near.
    dt, nsamples, delay : see LineSpec
        Defaults 4 ms, 751 samples (3 s), 0.
    peak_frequency : float
        Ricker peak frequency, Hz (default 25).
    model : tuple of ndarray
        ``(thickness (n,), velocity (n+1,))``, m and m/s; layer 0 is the sea water, which must
        hold the source and the receivers. Default :func:`velspec.synth.default_model`.
    density : ndarray or None
        Densities of the n layers and the half-space, kg/m^3. None: ``water_density`` for layer
        0 and Gardner's relation ``310 v^0.25`` below (Gardner's relation is for rock, not water).
    water_density : float
        Sea-water density used when ``density`` is None, kg/m^3 (default 1025, common practice,
        no source).
    model_b, density_b : tuple, ndarray or None
        The second part's model (as many layers as ``model``) and densities; None: one model.
    step_cmp : int or None
        First CMP of the second part; needed with ``model_b``.
    source_depth, receiver_depth : float
        Below the sea surface, m (defaults 6 and 8).
    gain_power : float
        Output traces are multiplied by ``(t / 1 s)^gain_power``, 0 before t = 0 (default 0.5,
        the 2D geometrical-spreading correction: amplitudes in 2D fall as 1/sqrt(distance)).
    snr : float
        Signal-to-noise ratio: the RMS of the noise-free (gained) traces over the samples from
        the sea-floor reflection on (each trace's samples later than the exact sea-floor
        primary time at its offset less the wavelet's half-length 1.5 / peak_frequency), over
        the whole line, divided by the RMS of the added noise. That window leaves out the direct
        and head waves (which come before it at every offset) and keeps everything after,
        multiples included: the wavefield cannot be split into primaries and multiples as the
        ray-traced line's can. ``inf`` adds none. The noise is that of ``make_line`` (white,
        filtered with the Ricker wavelet, seeded per shot and channel).
    seed : int
        Seed of the noise.
    trace_order, sample_format, feet, cdp_header, first_cmp_x, line_y : see LineSpec
    listed_reverberation_order : int or None
        Sea-floor reverberations the truth lists (orders 1..m); None lists every order whose
        zero-offset time lies within the record (at most 50). The data holds all of them.
    listed_pegleg_order : int
        Peg-legs the truth lists (1..j extra water round trips of every deeper reflector,
        default 2; higher orders are weaker by R_wb each).
    wave : WaveParams
        The modeller's numerical choices.
    grid_spacing : float or None
        Grid spacing, m; None takes the largest allowed by ``wave`` that divides the group
        interval a whole number of times, so that every receiver sits on a node.
    """

    ncmp: int = 60
    first_cmp: int = 1001
    group_interval: float = 25.0
    shot_interval: float = 25.0
    channels: int = 96
    near_offset: float = 100.0
    dt: float = 0.004
    nsamples: int = 751
    delay: float = 0.0
    peak_frequency: float = 25.0
    model: tuple = field(default_factory=default_model)
    density: object = None
    water_density: float = 1025.0
    model_b: object = None
    density_b: object = None
    step_cmp: object = None
    source_depth: float = 6.0
    receiver_depth: float = 8.0
    gain_power: float = 0.5
    snr: float = float("inf")
    seed: int = 0
    trace_order: str = "shot"
    sample_format: int = 5
    feet: bool = False
    cdp_header: bool = True
    first_cmp_x: float = 10000.0
    line_y: float = 0.0
    listed_reverberation_order: object = None
    listed_pegleg_order: int = 2
    wave: WaveParams = field(default_factory=WaveParams)
    grid_spacing: object = None

    # --- what LineTruth.multiple_events reads: which multiples the truth lists ---------------
    @property
    def multiples(self):
        """True: the truth lists the first-order free-surface multiple of every reflector."""
        return True

    @property
    def reverberation_order(self):
        """Sea-floor reverberation orders the truth lists (see ``listed_reverberation_order``)."""
        if self.listed_reverberation_order is not None:
            return int(self.listed_reverberation_order)
        t_end = self.delay + (self.nsamples - 1) * self.dt
        t_wb = min(2.0 * m[0][0] / m[1][0] for m in self._models())
        return int(min(_MAX_ORDER, max(0, math.floor(t_end / t_wb) - 1)))

    @property
    def pegleg_order(self):
        """Peg-leg orders the truth lists (``listed_pegleg_order``; 0 for a one-layer model)."""
        return int(self.listed_pegleg_order) if len(self.model[0]) >= 2 else 0

    def _models(self):
        out = [tuple(np.asarray(a, dtype=np.float64) for a in self.model)]
        if self.model_b is not None:
            out.append(tuple(np.asarray(a, dtype=np.float64) for a in self.model_b))
        return out

    def fold(self):
        """Nominal CMP fold, ``channels * group_interval / (2 * shot_interval)``."""
        return self.channels * self.group_interval / (2.0 * self.shot_interval)

    def densities(self, part=0):
        """Densities of part 0 (``model``) or 1 (``model_b``), kg/m^3, filled as documented."""
        h, v = check_model(*(self.model if part == 0 else self.model_b))
        given = self.density if part == 0 else self.density_b
        if given is not None:
            return np.asarray(given, dtype=np.float64)
        rho = gardner_density(v)
        rho[0] = self.water_density
        return rho

    def validate(self):
        """Raise :class:`~velspec.errors.ParameterError` for any impossible value."""

        def need(ok, msg):
            if not ok:
                raise ParameterError(msg)

        need(isinstance(self.ncmp, (int, np.integer)) and self.ncmp >= 1, "ncmp must be a positive integer")
        need(isinstance(self.channels, (int, np.integer)) and self.channels >= 1, "channels must be >= 1")
        need(isinstance(self.nsamples, (int, np.integer)) and 2 <= self.nsamples < 2**15,
             "nsamples must be an integer from 2 to 32767 (two-byte SEG-Y header field)")
        for name in ("group_interval", "shot_interval", "dt", "peak_frequency"):
            val = getattr(self, name)
            need(np.isfinite(val) and val > 0, f"{name} must be positive, got {val}")
        need(np.isfinite(self.near_offset) and self.near_offset >= 0, "near_offset must be >= 0 m")
        us = self.dt * 1e6
        need(abs(us - round(us)) < 1e-6 and round(us) < 2**15,
             "dt must be a whole number of microseconds below 32.768 ms (SEG-Y byte 3217)")
        ms = self.delay * 1e3
        need(abs(ms - round(ms)) < 1e-6 and abs(ms) < 2**15,
             "delay must be a whole number of milliseconds (SEG-Y byte 109)")
        need(self.peak_frequency < 0.25 / self.dt,
             "peak_frequency must lie below half the Nyquist frequency, so its band is sampled")
        need(self.snr > 0, "snr must be > 0 (inf for noise-free data)")
        need(self.trace_order in ("shot", "cmp"), "trace_order must be 'shot' or 'cmp'")
        need(self.sample_format in (1, 5), "sample_format must be 5 (IEEE float) or 1 (IBM float)")
        need(np.isfinite(self.gain_power) and 0 <= self.gain_power <= 3, "gain_power must be in [0, 3]")
        need(np.isfinite(self.water_density) and self.water_density > 0, "water_density must be > 0 kg/m^3")
        for name in ("source_depth", "receiver_depth"):
            val = getattr(self, name)
            need(np.isfinite(val) and val >= 0, f"{name} must be >= 0 m")
        parts = [("model", self.model, self.density)]
        if self.model_b is not None:
            parts.append(("model_b", self.model_b, self.density_b))
            need(isinstance(self.step_cmp, (int, np.integer))
                 and self.first_cmp < self.step_cmp < self.first_cmp + self.ncmp,
                 "step_cmp must be a CMP number inside the line (after the first) when model_b is given")
        else:
            need(self.step_cmp is None and self.density_b is None,
                 "step_cmp and density_b need model_b (the second part's model)")
        sizes = set()
        for name, model, rho in parts:
            try:
                h, v = check_model(*model)
            except (TypeError, ValueError) as exc:
                raise ParameterError(f"{name}: {exc}") from exc
            sizes.add(h.size)
            need(max(self.source_depth, self.receiver_depth) < h[0],
                 f"{name}: source and receivers must lie in the water (layer 0, {h[0]:g} m deep)")
            if rho is not None:
                r = np.asarray(rho, dtype=np.float64)
                need(r.shape == v.shape and np.all(np.isfinite(r) & (r > 0)),
                     f"density of {name} needs n+1 values > 0 kg/m^3")
        need(len(sizes) == 1, "model_b must have as many layers as model (the truth is one table)")
        if self.listed_reverberation_order is not None:
            val = self.listed_reverberation_order
            need(isinstance(val, (int, np.integer)) and 0 <= val <= _MAX_ORDER,
                 f"listed_reverberation_order must be None or a whole number 0..{_MAX_ORDER}")
        need(isinstance(self.listed_pegleg_order, (int, np.integer)) and 0 <= self.listed_pegleg_order <= _MAX_ORDER,
             f"listed_pegleg_order must be a whole number 0..{_MAX_ORDER}")
        self.wave.validate()
        if self.grid_spacing is not None:
            need(np.isfinite(self.grid_spacing) and self.grid_spacing > 0, "grid_spacing must be > 0 m or None")

    def as_dict(self):
        """The spec as plain Python values (arrays as lists), e.g. for a JSON record."""
        d = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        for key in ("model", "model_b"):
            if d[key] is not None:
                d[key] = [np.asarray(a, dtype=float).tolist() for a in d[key]]
        for key in ("density", "density_b"):
            if d[key] is not None:
                d[key] = np.asarray(d[key], dtype=float).tolist()
        d["wave"] = dataclasses.asdict(self.wave)
        return d


@dataclass
class WaveLineTruth(LineTruth):
    """What a wave-equation line was made from: a :class:`LineTruth` and how it was modelled.

    Attributes (besides those of LineTruth; ``multiple_rms`` is NaN, since the wavefield's
    multiples cannot be told apart from its primaries)
    ----------
    part : ndarray of int64, shape (ncmp,)
        0 where a CMP took ``model``, 1 where it took ``model_b``.
    grid_spacing : float
        m.
    time_step : float
        s.
    model_seconds : list of float
        Wall time of each part's modelling, s (0 where it came from the cache).
    shots : ndarray of float32, shape (nparts, channels, nsamples)
        The modelled shot gather of each part, noise-free and without the gain, channel r at
        offset ``near_offset + r * group_interval``.
    """

    part: np.ndarray = None
    grid_spacing: float = 0.0
    time_step: float = 0.0
    model_seconds: list = field(default_factory=list)
    shots: np.ndarray = None

    def _representatives(self, offsets):
        """CMPs that stand for all others (same part, same offsets), and who stands for whom."""
        x = self.offsets if offsets is None else np.asarray(offsets, dtype=np.float64)
        x = np.broadcast_to(x, (self.cmp.size, x.shape[-1]))
        keys = {}
        who = np.empty(self.cmp.size, dtype=np.int64)
        for b in range(self.cmp.size):
            key = (int(self.part[b]), np.nan_to_num(x[b], nan=-1.0).tobytes())
            who[b] = keys.setdefault(key, b)
        reps = np.array(sorted(set(who.tolist())), dtype=np.int64)
        return reps, np.searchsorted(reps, who), x

    def multiple_events(self, offsets=None, stretch_limit=0.3):
        """As :meth:`LineTruth.multiple_events`, solved once per distinct (model, spread).

        Every CMP of a part has the same model and at most a few distinct spreads, so the
        exact ray tracing is done for one CMP of each and copied to the others.
        """
        reps, index, x = self._representatives(offsets)
        small = dataclasses.replace(self, cmp=self.cmp[reps], thickness=self.thickness[reps],
                                    velocity=self.velocity[reps], density=self.density[reps],
                                    reflection_coefficient=self.reflection_coefficient[reps],
                                    offsets=x[reps], part=self.part[reps])
        ev = LineTruth.multiple_events(small, None, stretch_limit)
        return dataclasses.replace(ev, t0=ev.t0[index], amplitude=ev.amplitude[index],
                                   vstack=ev.vstack[index], max_offset=ev.max_offset[index])

    def stacking_velocity(self, offsets=None, stretch_limit=0.3):
        """As :meth:`LineTruth.stacking_velocity`, solved once per distinct (model, spread)."""
        reps, index, x = self._representatives(offsets)
        small = dataclasses.replace(self, cmp=self.cmp[reps], thickness=self.thickness[reps],
                                    velocity=self.velocity[reps], offsets=x[reps],
                                    part=self.part[reps])
        v, xm = LineTruth.stacking_velocity(small, None, stretch_limit)
        return v[index], xm[index]


def sonic_wave_model(las_path, water_depth=120.0, water_velocity=1480.0, overburden_velocity=1650.0,
                     block_thickness=20.0, water_density=1025.0):
    """A marine model from a sonic log: water, an assumed soft overburden, then the blocked log.

    The log is blocked into layers of equal two-way time (:func:`velspec.synth.blocked_model_from_sonic`)
    chosen so that they are ``block_thickness`` thick on average; above its first sample the
    log says nothing, so from the sea floor down to it the stated ``overburden_velocity`` is
    assumed (young unconsolidated sediment, ~1600-1800 m/s). The log's depths are taken as
    below sea level. Densities: water, then Gardner's relation.

    Parameters
    ----------
    las_path : str or Path
        LAS 2.0 file with a DT curve (us/ft).
    water_depth : float
        m, above the log's first sample (default 120).
    water_velocity : float
        m/s (default 1480).
    overburden_velocity : float
        m/s, assumed (default 1650).
    block_thickness : float
        Mean thickness of the log's blocks, m (default 20).
    water_density : float
        kg/m^3 (default 1025).

    Returns
    -------
    thickness : ndarray, shape (n,)
        m, layer 0 the water.
    velocity : ndarray, shape (n+1,)
        m/s.
    density : ndarray, shape (n+1,)
        kg/m^3.

    References
    ----------
    Sheriff & Geldart, 1995, Exploration Seismology (integrated sonic time).
    Gardner, Gardner & Gregory, 1974, Geophysics 39, 770-780.
    """
    from velspec.io.las import read_sonic
    from velspec.synth.wells import blocked_model_from_sonic

    depth, dt = read_sonic(las_path)
    if not (np.isfinite(water_depth) and 0 < water_depth < depth.min()):
        raise ParameterError(f"water_depth must be in (0, {depth.min():g}) m: above the log's first sample")
    if not (np.isfinite(block_thickness) and block_thickness > 0):
        raise ParameterError("block_thickness must be > 0 m")
    ok = np.isfinite(dt) & (dt > 0)
    slowness = dt[ok] * 1e-6 / 0.3048
    span = depth[ok].max() - depth[ok].min()
    mean_v = span / np.trapezoid(slowness, depth[ok])
    h, v = blocked_model_from_sonic(depth, dt, overburden_velocity=overburden_velocity,
                                    min_two_way=2.0 * block_thickness / mean_v, datum_depth=water_depth)
    h = np.concatenate(([water_depth], h))
    v = np.concatenate(([water_velocity], v))
    rho = gardner_density(v)
    rho[0] = water_density
    return h, v, rho


def _shot_key(model, rho, offsets, spec, h, step):
    record = {
        "format": _CACHE_FORMAT, "version": __version__,
        "thickness": np.asarray(model[0], dtype=float).tolist(),
        "velocity": np.asarray(model[1], dtype=float).tolist(),
        "density": np.asarray(rho, dtype=float).tolist(), "offsets": offsets.tolist(),
        "source_depth": spec.source_depth, "receiver_depth": spec.receiver_depth,
        "peak_frequency": spec.peak_frequency, "dt": spec.dt, "nsamples": spec.nsamples,
        "delay": spec.delay, "wave": dataclasses.asdict(spec.wave), "h": h, "step": step,
    }
    return hashlib.sha256(json.dumps(record, sort_keys=True).encode()).hexdigest()[:24]


def _grid(spec):
    """Grid spacing (a whole fraction of the group interval unless given) and time step."""
    v = np.concatenate([m[1] for m in spec._models()])
    h_max, _ = choose_grid(v.min(), v.max(), spec.peak_frequency, spec.dt, spec.wave)
    if spec.grid_spacing is None:
        h = spec.group_interval / math.ceil(spec.group_interval / h_max * (1 - 1e-12))
    else:
        h = float(spec.grid_spacing)
    return choose_grid(v.min(), v.max(), spec.peak_frequency, spec.dt, spec.wave, grid_spacing=h)


def _text_header(spec, ntraces, h, step):
    unit = "feet" if spec.feet else "metres"
    hh, vv = check_model(*spec.model)
    lines = [
        f"SYNTHETIC DATA made by velspec {__version__}; not a field recording.",
        "Flat layers; traces modelled by the 2D acoustic wave equation (staggered-grid finite "
        f"differences of order {spec.wave.order}, grid {h:g} m, step {step * 1e3:g} ms, free sea "
        "surface, absorbing sides and bottom): direct and head waves, ghosts and all multiples "
        f"included. Ricker source of peak {spec.peak_frequency:g} Hz at {spec.source_depth:g} m, "
        f"hydrophones at {spec.receiver_depth:g} m, gain t^{spec.gain_power:g}, "
        + (f"band-limited noise S/N {spec.snr:g} (after the sea floor)" if np.isfinite(spec.snr) else "no noise")
        + ".",
        (f"Two parts: CMPs from {spec.step_cmp} take a second model. " if spec.model_b is not None else "")
        + f"CMP {spec.first_cmp} to {spec.first_cmp + spec.ncmp - 1}, nominal fold {spec.fold():g}, "
        f"{spec.channels} channels, group interval {spec.group_interval:g} m, shot interval "
        f"{spec.shot_interval:g} m, near offset {spec.near_offset:g} m, end-on, {ntraces} traces "
        f"in {spec.trace_order} order.",
        f"Sample interval {spec.dt * 1e3:g} ms, {spec.nsamples} samples, first sample at "
        f"{spec.delay * 1e3:g} ms. Offsets and coordinates in {unit}, coordinates scaled by 1/100.",
        "SEG-Y rev 1 byte positions: CDP 21, offset 37, scalar 71, source X/Y 73/77, group X/Y "
        "81/85, CDP X/Y 181/185, delay 109."
        + ("" if spec.cdp_header else " CDP number and CDP X/Y are 0: bin from coordinates."),
        f"Model, {hh.size} layers, water {hh[0]:g} m at {vv[0]:g} m/s, half-space {vv[-1]:g} m/s.",
    ]
    return segy_text_header(lines)


def make_wave_line(path, spec=None, cache_dir=None, progress=None, threads=0):
    """Write a wave-equation prestack 2D line as SEG-Y rev 1 and return what it was made from.

    One shot gather per model is modelled by :func:`velspec.synth.wave.model_shot` with
    receivers at the spread's offsets; every trace of the line is the channel of its offset
    from the shot of the part its CMP lies in, times the gain, plus noise. The file is written
    by :func:`velspec.synth.line.write_segy_line` (atomically, shot by shot or CMP by CMP).

    Parameters
    ----------
    path : str or Path
        Output SEG-Y file; an existing file is replaced.
    spec : WaveLineSpec, optional
        Default ``WaveLineSpec()``.
    cache_dir : str or Path, optional
        Directory where modelled shots are kept, keyed by a hash of the model, geometry, wavelet
        and grid; a shot found there is not modelled again. None: no cache.
    progress : callable, optional
        Called with a short message before the shots are modelled.
    threads : int
        Threads to use, 0 (default) numba's current number. Two shots to model run at once on
        half the threads each; the data have the same bits for any count.

    Returns
    -------
    WaveLineTruth

    Raises
    ------
    ParameterError
        If the spec is impossible or the grid it needs is unstable or too coarse.
    """
    spec = WaveLineSpec() if spec is None else spec
    spec.validate()
    path = Path(path)
    h, step = _grid(spec)
    offsets = spec.near_offset + np.arange(spec.channels) * spec.group_interval
    t = spec.delay + np.arange(spec.nsamples) * spec.dt
    gain = np.where(t > 0, np.maximum(t, 0.0) ** spec.gain_power, 0.0) if spec.gain_power else np.ones_like(t)

    # shots not in the cache are modelled at once, one thread each where threads allow: no
    # per-step sync between them, so they also run well on a loaded machine
    models = spec._models()
    raw = [None] * len(models)
    seconds = [0.0] * len(models)
    todo = []
    for part, model in enumerate(models):
        key = _shot_key(model, spec.densities(part), offsets, spec, h, step)
        cached = Path(cache_dir) / f"shot-{key}.npy" if cache_dir is not None else None
        if cached is not None and cached.exists():
            raw[part] = np.load(cached)
        else:
            todo.append((part, cached))
    nthreads = int(threads) or numba.get_num_threads()
    per_shot = max(1, nthreads // max(len(todo), 1))

    def run(part):
        model = models[part]
        t0 = time.perf_counter()
        data = model_shot(model[0], model[1], spec.densities(part), offsets=offsets,
                          source_depth=spec.source_depth, receiver_depth=spec.receiver_depth,
                          peak_frequency=spec.peak_frequency, dt=spec.dt, nsamples=spec.nsamples,
                          delay=spec.delay, grid_spacing=h, time_step=step, params=spec.wave,
                          threads=per_shot)
        return data, time.perf_counter() - t0

    if progress is not None and todo:
        progress(f"modelling {len(todo)} shot(s) on a {h:g} m grid, step {step * 1e3:g} ms")
    if len(todo) > 1 and nthreads > 1:
        with ThreadPoolExecutor(max_workers=len(todo)) as pool:
            results = list(pool.map(run, [part for part, _ in todo]))
    else:
        results = [run(part) for part, _ in todo]
    for (part, cached), (data, sec) in zip(todo, results):
        raw[part], seconds[part] = data, sec
        if cached is not None:
            cached.parent.mkdir(parents=True, exist_ok=True)
            tmp = cached.with_name(cached.stem + ".partial.npy")
            np.save(tmp, data)
            tmp.replace(cached)
    shots = [(d * gain[None, :]).astype(np.float64) for d in raw]

    geom = line_geometry(spec)
    cmp_numbers = spec.first_cmp + np.arange(spec.ncmp, dtype=np.int64)
    part_of_cmp = (np.zeros(spec.ncmp, dtype=np.int64) if spec.model_b is None
                   else (cmp_numbers >= spec.step_cmp).astype(np.int64))
    trace_part = part_of_cmp[geom.bins]

    # noise level: signal RMS over the samples from the sea-floor reflection on (WaveLineSpec.snr)
    signal_rms = noise_rms = 0.0
    if np.isfinite(spec.snr):
        total, count = 0.0, 0
        for part, model in enumerate(spec._models()):
            hh, vv = check_model(*model)
            t_wb, _ = reflection_times(hh[:1], vv[:2], offsets)
            live = t[None, :] >= t_wb[0][:, None] - _WAVELET_HALF / spec.peak_frequency
            ss = (np.where(live, shots[part], 0.0) ** 2).sum(axis=1)  # per channel
            n_live = live.sum(axis=1)
            use = trace_part == part
            total += float(ss[geom.chan[use]].sum())
            count += int(n_live[geom.chan[use]].sum())
        signal_rms = math.sqrt(total / max(count, 1))
        noise_rms = signal_rms / spec.snr

    def traces(idx):
        data = np.stack([shots[trace_part[i]][geom.chan[i]] for i in idx])
        if noise_rms > 0:
            data = data + noise_rms * band_limited_noise(geom.shot[idx], geom.chan[idx], spec.nsamples,
                                                         spec.dt, spec.peak_frequency, spec.seed)
        return data

    cmp_x = write_segy_line(path, spec, geom, traces, _text_header(spec, geom.shot.size, h, step))

    thick = np.stack([models[p][0] for p in part_of_cmp])
    vel = np.stack([models[p][1] for p in part_of_cmp])
    dens = np.stack([spec.densities(p) for p in part_of_cmp])
    refl = np.stack([reflection_coefficients(models[p][1], spec.densities(p)) for p in part_of_cmp])
    t0 = np.stack([zero_offset_times(*models[p]) for p in part_of_cmp])
    vrms = np.stack([rms_velocity(*models[p]) for p in part_of_cmp])
    return WaveLineTruth(
        spec=spec, path=path, cmp=cmp_numbers, cmp_x=cmp_x, thickness=thick, velocity=vel,
        density=dens, reflection_coefficient=refl, t0=t0, vrms=vrms, offsets=geom.cmp_offsets,
        fold=geom.fold, ntraces=int(geom.shot.size), signal_rms=float(signal_rms),
        noise_rms=float(noise_rms), multiple_rms=float("nan"), part=part_of_cmp,
        grid_spacing=float(h), time_step=float(step), model_seconds=seconds,
        shots=np.stack(raw).astype(np.float32),
    )
