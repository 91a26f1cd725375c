"""Every run parameter, typed and validated in one place, with its default written once.

Each stage has its own dataclass; :class:`RunParams` gathers them. The whole set is stored as
JSON in every result file (``parameters`` attribute), so a run can be reproduced from its output.
Units are SI: seconds, metres, metres per second.
"""

from __future__ import annotations

import dataclasses
import difflib
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from .errors import ParameterError


@dataclass(frozen=True)
class HeaderBytes:
    """Trace-header byte positions (1-based, SEG-Y rev 1 (2002) / rev 2.0 (2017) defaults)."""

    cdp: int = 21
    offset: int = 37
    coordinate_scalar: int = 71
    source_x: int = 73
    source_y: int = 77
    group_x: int = 81
    group_y: int = 85
    cdp_x: int = 181
    cdp_y: int = 185
    inline: int = 189
    crossline: int = 193

    def validate(self) -> None:
        for name, pos in dataclasses.asdict(self).items():
            if not (isinstance(pos, int) and 1 <= pos <= 237):
                raise ParameterError(f"header byte for {name} must be an integer in 1..237, got {pos!r}")


@dataclass(frozen=True)
class ReadParams:
    """How traces are read and grouped into CMP gathers.

    Attributes
    ----------
    headers : HeaderBytes
        Byte positions of the trace headers used.
    bin_size : float
        CMP bin size in metres, used only when the CDP header is zero everywhere and CMPs must
        be binned from source-group midpoints. 0 means: estimate it from the midpoints.
    geometry : str
        ``"2d"`` (default): traces grouped into CMPs by the CDP header, along a line;
        ``"3d"``: grouped into bins by the inline and crossline headers (``headers.inline``,
        ``headers.crossline``), analysed on the grid ``[grid]`` chooses.
    """

    headers: HeaderBytes = field(default_factory=HeaderBytes)
    bin_size: float = 0.0
    geometry: str = "2d"

    def validate(self) -> None:
        self.headers.validate()
        _check(self.bin_size >= 0 and math.isfinite(self.bin_size), "bin_size must be >= 0 m")
        _check(self.geometry in ("2d", "3d"), f"geometry must be '2d' or '3d', got {self.geometry!r}")


@dataclass(frozen=True)
class GridParams:
    """Which bins of 3D-binned data are analysed (``read.geometry = "3d"``), and the grid the
    lateral steps work on.

    Attributes
    ----------
    inline_step, crossline_step : int
        Analyse every n-th inline and crossline, counted from the first of each in the data
        (defaults 1: every bin). They are also the unit of the lateral radii: the neighbours
        of an analysed bin are the analysed bins within ``pick.smooth_cmps`` (panel smoothing)
        or ``pick.lateral_cmps`` (lateral outliers) steps of this grid, in inline and in
        crossline (a square of ``2 r + 1`` by ``2 r + 1``).
    bins : tuple of (inline, crossline) rows
        Analyse only these bins (empty: the grid of the steps). Their grid positions are
        still counted in steps of ``inline_step`` and ``crossline_step``.
    """

    inline_step: int = 1
    crossline_step: int = 1
    bins: tuple = ()

    def __post_init__(self):
        if not isinstance(self.bins, tuple) or any(not isinstance(row, tuple) for row in self.bins):
            try:
                rows = tuple(tuple(int(x) for x in row) for row in self.bins)
            except (TypeError, ValueError):
                raise ParameterError("grid.bins must be rows of two whole numbers: [inline, crossline]") from None
            object.__setattr__(self, "bins", rows)

    def validate(self) -> None:
        for name in ("inline_step", "crossline_step"):
            value = getattr(self, name)
            _check(isinstance(value, int) and value >= 1, f"grid.{name} must be a whole number >= 1, got {value!r}")
        _check(all(len(row) == 2 for row in self.bins), "grid.bins must be rows of two whole numbers: "
                                                        "[inline, crossline]")
        _check(len(set(self.bins)) == len(self.bins), "grid.bins names a bin twice")


@dataclass(frozen=True)
class ScanParams:
    """Coherence scan over trial stacking velocities and every t0 sample.

    Attributes
    ----------
    measure : str
        Coherence measure, a name from :data:`velspec.scan.MEASURES` (default ``"semblance"``).
    vmin, vmax : float
        Trial stacking-velocity range, m/s (default 1400-6000).
    nvel : int
        Number of trial velocities (default 120).
    axis : str
        ``"velocity"`` (uniform in v) or ``"slowness2"`` (uniform in 1/v^2).
    window : float
        Length of the sliding time window over which coherence is summed, s (default 0.040).
    stretch_limit : float
        NMO-stretch mute: samples with (t - t0)/t0 above this are left out (default 0.5).
    moveout : str
        ``"hyperbolic"`` or ``"nonhyperbolic"`` (Alkhalifah & Tsvankin, 1995: adds an eta axis,
        for spreads longer than about the depth).
    eta_max : float
        Largest anellipticity scanned by the nonhyperbolic moveout (default 0.3).
    neta : int
        Number of eta values from 0 to eta_max (default 16).
    """

    measure: str = "semblance"
    vmin: float = 1400.0
    vmax: float = 6000.0
    nvel: int = 120
    axis: str = "velocity"
    window: float = 0.040
    stretch_limit: float = 0.5
    moveout: str = "hyperbolic"
    eta_max: float = 0.3
    neta: int = 16

    def validate(self) -> None:
        from .scan import MEASURES

        _check(self.measure in MEASURES, f"measure must be one of {sorted(MEASURES)}, got {self.measure!r}")
        _check(_finite_positive(self.vmin), f"vmin must be a positive velocity in m/s, got {self.vmin}")
        _check(_finite_positive(self.vmax), f"vmax must be a positive velocity in m/s, got {self.vmax}")
        _check(self.vmin < self.vmax, f"vmin ({self.vmin:g} m/s) must be below vmax ({self.vmax:g} m/s)")
        _check(isinstance(self.nvel, int) and 2 <= self.nvel <= 10000, "nvel must be an integer in 2..10000")
        _check(self.axis in ("velocity", "slowness2"), "axis must be 'velocity' or 'slowness2'")
        _check(_finite_positive(self.window) and self.window <= 1.0, "window must be in (0, 1] s")
        _check(_finite_positive(self.stretch_limit) and self.stretch_limit <= 10,
               "stretch_limit must be in (0, 10]")
        _check(self.moveout in ("hyperbolic", "nonhyperbolic"), "moveout must be 'hyperbolic' or 'nonhyperbolic'")
        _check(_finite_nonneg(self.eta_max) and self.eta_max <= 1.0, "eta_max must be in [0, 1]")
        _check(isinstance(self.neta, int) and 2 <= self.neta <= 200, "neta must be an integer in 2..200")


@dataclass(frozen=True)
class PickParams:
    """Automatic picking of a velocity function through each coherence panel.

    Attributes
    ----------
    node_interval : float
        Shortest time step of the dynamic-programming path, s (default 0.024). It is lengthened
        (up to 0.25 s) where needed so that the slower of the two rates below allows at least
        one velocity sample of change per step.
    max_increase, max_decrease : float
        Largest rate at which the stacking velocity may rise or fall with t0, (m/s)/s
        (defaults 8000 and 1000). The rise is wide: under a slow overburden fast rock raises the
        stacking velocity by several thousand (m/s)/s, and Dix's relation already bounds the
        path by the physical interval velocities.
    smoothness : float
        Cost, in units of coherence, of one velocity sample of change between two nodes of the
        path (default 0.01): where no event pulls the path, it stays put instead of wandering
        after noise.
    vmin_top, vmax_top, vmin_bottom, vmax_bottom : float
        Velocity corridor: bounds at t0 = 0 and at the last sample, linear in between, m/s.
        0 means the scan range.
    bounds : tuple of (t0, vmin, vmax) rows
        Time-varying stacking-velocity bounds, s and m/s, linear between rows and held beyond
        the first and last; empty for none. The tightest of corridor, bounds and guide band wins.
    guide : str
        Guide function: ``""`` none, ``"regional"`` the built-in trend of a velocity rising
        linearly with depth (``regional_v0``, ``regional_gradient``), or the path of a CSV file
        with columns ``t0_s,vrms_m_s`` (one function) or ``cmp,t0_s,vrms_m_s`` (one per CMP,
        linear between the CMPs given, held beyond them).
    guide_below, guide_above : float
        Band around the guide, as fractions of it: the path stays within
        ``guide * (1 - guide_below)`` .. ``guide * (1 + guide_above)`` (defaults 0.15, 0.25).
    regional_v0, regional_gradient : float
        The regional trend v(z) = v0 + k z: v0 in m/s (default 1500), k in 1/s (default 0.6).
    multiple_margin : float
        A coherent event slower than ``1 - multiple_margin`` times the traced function at the
        same t0 is a likely multiple: recorded with a flag, never picked (default 0.08; 0 turns
        the multiple checks off).
    multiple_time_tolerance, multiple_velocity_tolerance : float
        How close (s, and fraction of velocity) a pick must come to a surface multiple
        predicted from two earlier events, t0 = t_a + t_b and V^2 = (t_a V_a^2 + t_b V_b^2) /
        (t_a + t_b), to count as that multiple (defaults 0.04 s, about a scan window, and 0.03).
    water_bottom, water_velocity : float
        Two-way time of the sea floor, s, and the water velocity, m/s (defaults 0: found from
        the picks, or from its reverberations when it is too shallow to be picked; 1500). Give
        them where the water depth is known and shallow, so that its multiples are predicted.
    min_coherence : float
        Coherence below which a local maximum along the path is not picked (default 0.1).
    min_prominence : float
        How far a maximum must rise above the coherence between it and any higher maximum to be
        picked (default 0.15): keeps noise bumps between events out.
    min_live : int
        Fewest traces that must pass the stretch mute at a pick (default 6).
    min_separation : float
        Smallest time between two picks, s (default 0.1).
    tmin : float
        No picks above this t0, s (default 0.1).
    doubtful_coherence : float
        Picks below this coherence are flagged doubtful (still used; default 0.25).
    doubtful_sigma : float
        Picks whose uncertainty exceeds this fraction of their velocity are flagged (still
        used; default 0.03).
    smooth_cmps : int
        Spectrum smoothing along the line: the panel picked at a CMP is the triangle-weighted
        mean of the panels of the CMPs within +-smooth_cmps of it (default 2; 0 turns it off).
    smooth_step : float
        In that smoothing, a neighbour whose panel is best aligned with the CMP's own by a
        relative velocity shift s (in windows of 0.2 s of t0) is weighted by exp(-(s /
        smooth_step)^2) as well (default 0.01): across a fault or a change of facies, where the
        events step in velocity, the neighbours drop out instead of smearing the step; 0 turns
        it off (triangle weights alone).
    lateral_cmps : int
        Half width, in CMPs, of the running median along the line that the line pass compares
        each pick with (default 5; 0 turns the outlier rejection off).
    outlier_tolerance, outlier_sigmas : float
        A pick is a lateral outlier, and left out, where it differs from that median by more
        than ``outlier_tolerance`` of it (default 0.04) and by more than ``outlier_sigmas``
        times its own uncertainty (default 3). A step in velocity along the line survives: the
        median follows it.
    edits : str
        Path of a CSV of picks a person made or edited (columns ``cmp,t0_s,vrms_m_s``); empty
        for none.
    edit_mode : str
        ``"replace"``: at the CMPs in ``edits`` their picks replace the automatic ones;
        ``"guide"``: they guide the automatic picking there (band ``guide_below`` /
        ``guide_above``).
    """

    node_interval: float = 0.024
    max_increase: float = 8000.0
    max_decrease: float = 1000.0
    smoothness: float = 0.01
    vmin_top: float = 0.0
    vmax_top: float = 0.0
    vmin_bottom: float = 0.0
    vmax_bottom: float = 0.0
    bounds: tuple = ()
    guide: str = ""
    guide_below: float = 0.15
    guide_above: float = 0.25
    regional_v0: float = 1500.0
    regional_gradient: float = 0.6
    multiple_margin: float = 0.08
    multiple_time_tolerance: float = 0.02
    multiple_velocity_tolerance: float = 0.03
    water_bottom: float = 0.0
    water_velocity: float = 1500.0
    min_coherence: float = 0.1
    min_prominence: float = 0.15
    min_live: int = 6
    min_separation: float = 0.1
    tmin: float = 0.1
    doubtful_coherence: float = 0.25
    doubtful_sigma: float = 0.03
    smooth_cmps: int = 2
    smooth_step: float = 0.01
    lateral_cmps: int = 5
    outlier_tolerance: float = 0.04
    outlier_sigmas: float = 3.0
    edits: str = ""
    edit_mode: str = "replace"

    def __post_init__(self):
        # TOML and JSON give lists; a frozen, hashable record wants tuples.
        if not isinstance(self.bounds, tuple):
            try:
                rows = tuple(tuple(float(x) for x in row) for row in self.bounds)
            except (TypeError, ValueError):
                raise ParameterError("bounds must be rows of three numbers: t0 (s), vmin, vmax (m/s)") from None
            object.__setattr__(self, "bounds", rows)

    def validate(self) -> None:
        if self.bounds:
            _check(all(len(row) == 3 for row in self.bounds),
                   "bounds must be rows of three numbers: t0 (s), vmin, vmax (m/s)")
            table = [tuple(map(float, row)) for row in self.bounds]
            _check(all(all(math.isfinite(x) for x in row) for row in table), "bounds must be finite numbers")
            _check(all(b[0] > a[0] for a, b in zip(table, table[1:])), "bounds rows must have increasing t0")
            _check(all(0 < row[1] < row[2] for row in table),
                   "each bounds row needs 0 < vmin < vmax (m/s)")
        _check(isinstance(self.guide, str), "guide must be '', 'regional' or the path of a CSV file")
        _check(_finite_nonneg(self.guide_below) and self.guide_below < 1, "guide_below must be in [0, 1)")
        _check(_finite_nonneg(self.guide_above), "guide_above must be >= 0")
        _check(_finite_positive(self.regional_v0), "regional_v0 must be a positive velocity in m/s")
        _check(_finite_nonneg(self.regional_gradient) and self.regional_gradient <= 10,
               "regional_gradient must be in [0, 10] 1/s")
        _check(_finite_nonneg(self.multiple_margin) and self.multiple_margin < 1, "multiple_margin must be in [0, 1)")
        _check(_finite_positive(self.multiple_time_tolerance), "multiple_time_tolerance must be > 0 s")
        _check(_finite_positive(self.multiple_velocity_tolerance) and self.multiple_velocity_tolerance < 1,
               "multiple_velocity_tolerance must be in (0, 1)")
        _check(_finite_nonneg(self.water_bottom), "water_bottom must be a two-way time >= 0 s (0: unknown)")
        _check(_finite_positive(self.water_velocity), "water_velocity must be a positive velocity in m/s")
        _check(0 <= self.doubtful_coherence <= 1, "doubtful_coherence must be in [0, 1]")
        _check(_finite_positive(self.doubtful_sigma), "doubtful_sigma must be > 0")
        for name in ("smooth_cmps", "lateral_cmps"):
            value = getattr(self, name)
            _check(isinstance(value, int) and 0 <= value <= 1000, f"{name} must be an integer in 0..1000")
        _check(_finite_nonneg(self.smooth_step) and self.smooth_step < 1, "smooth_step must be in [0, 1)")
        _check(_finite_positive(self.outlier_tolerance), "outlier_tolerance must be > 0")
        _check(_finite_nonneg(self.outlier_sigmas), "outlier_sigmas must be >= 0")
        _check(isinstance(self.edits, str), "edits must be the path of a CSV file, or empty")
        _check(self.edit_mode in ("replace", "guide"), "edit_mode must be 'replace' or 'guide'")
        _check(_finite_positive(self.node_interval), "node_interval must be > 0 s")
        _check(_finite_nonneg(self.max_increase) and _finite_nonneg(self.max_decrease),
               "max_increase and max_decrease must be >= 0 (m/s)/s")
        _check(_finite_nonneg(self.smoothness), "smoothness must be >= 0")
        for name in ("vmin_top", "vmax_top", "vmin_bottom", "vmax_bottom"):
            _check(_finite_nonneg(getattr(self, name)), f"{name} must be >= 0 m/s (0: the scan range)")
        _check(0 <= self.min_coherence < 1, "min_coherence must be in [0, 1)")
        _check(0 <= self.min_prominence < 1, "min_prominence must be in [0, 1)")
        _check(isinstance(self.min_live, int) and self.min_live >= 2, "min_live must be an integer >= 2")
        _check(_finite_positive(self.min_separation), "min_separation must be > 0 s")
        _check(_finite_nonneg(self.tmin), "tmin must be >= 0 s")


@dataclass(frozen=True)
class ConditionParams:
    """Gather conditioning before the scan: trace editing, band-pass, top mute, gain, supergathers.

    The steps run in that order on every CMP gather (:func:`velspec.condition.condition_gather`):
    editing first, so that a spike or a noise burst is not smeared by the filter; the filter
    before the mute, so that its ringing does not refill the muted zone; gain last. The defaults
    aim at marine data whose strongest energy is the linear package of direct, head and guided
    waves, with faint shallow reflections beneath it. They are a starting point, to be tuned.

    Attributes
    ----------
    edit : bool
        Trace editing on (default True): spikes clipped, noisy and dead traces left out. Cheap,
        and a single noise burst can dominate a semblance window, so it is on.
    spike_sigmas : float
        A sample is a spike when it lies more than this many robust standard deviations
        (1.4826 MAD) from its trace's median (default 12)...
    spike_neighbour_ratio : float
        ...and its magnitude exceeds this many times the largest magnitude on the two traces
        either side of it in offset within ``spike_window`` (default 4), so that a strong
        event that its neighbours share, such as the direct wave or the sea floor, is never
        clipped. Spikes are clipped to the median +- ``spike_sigmas`` deviations.
    spike_window : float
        Length of that window on the neighbours, centred on the sample, s (default 0.2: covers
        the direct wave's moveout over two traces 50 m apart).
    edit_traces : int
        Odd number of traces, nearest in offset, whose median RMS a trace is compared with
        (default 11).
    noisy_sigmas, noisy_ratio : float
        A trace is noisy, and left out, when its log RMS lies more than ``noisy_sigmas`` robust
        deviations of the gather above that median and its RMS exceeds ``noisy_ratio`` times
        the median (defaults 5 and 4: the ratio keeps the smooth fall of amplitude with offset of
        a clean gather from being taken for noise).
    dead_ratio : float
        A trace whose RMS is below this fraction of that median is dead, and left out (default
        0.01); so is one that is all zero. One that holds non-finite samples is left out even
        with editing off.
    bandpass : bool
        Zero-phase Butterworth band-pass on (default False: on the wave-equation and ray-traced
        scenarios it helped some and hurt others by a few tenths of a percent of stacking
        velocity, and it is the costliest step, about half the conditioning time; the README's
        table gives the figures).
    bandpass_low, bandpass_high : float
        Corner (-3 dB of one pass, -6 dB after the forward and backward passes) frequencies, Hz
        (defaults 4 and 60). Mild: 4 Hz takes out swell noise and drift, 60 Hz keeps all that a
        semblance scan uses and lies below the Nyquist frequency of 8 ms data. 0 for
        ``bandpass_low`` makes it a low-pass, 0 for ``bandpass_high`` a high-pass.
    bandpass_order : int
        Butterworth order of one pass, 1..10 (default 4); the forward and backward passes
        double it.
    mute : str
        Top mute: ``"off"``; ``"auto"`` (default) from the first breaks found on each trace;
        ``"linear"``: t = ``mute_intercept`` + abs(x) / ``mute_velocity``; ``"table"``: times
        linear in offset between the rows of ``mute_table``, held beyond the first and last.
        Automatic by default because the first arrivals of marine data are strong and clear,
        and the package that follows them is what most harms a shallow velocity scan.
    mute_table : tuple of (offset, time) rows
        m and s, offsets increasing.
    mute_intercept, mute_velocity : float
        The linear mute: s (default 0) and m/s (default 1500, the speed of sound in sea water).
        The automatic mute lies no later than the direct wave at ``mute_velocity`` either, so
        that a reflection recorded as the first arrival is not cut, and it acts only at the
        CMPs where a sea floor was found (marine data, whose first arrivals are the direct,
        head and guided waves); elsewhere the stretch mute alone acts.
    mute_after : float
        The automatic mute lies this long after the fitted first breaks, s (default 0.06: one
        and a half periods of a 25 Hz wavelet, so that the first-arrival wavelets themselves go).
    mute_taper : float
        Length of the cosine taper from zero at the mute line to full amplitude below it, s
        (default 0.03); 0 for a hard mute.
    first_break_window : float
        Length of the two energy windows of the first-break detector, s (default 0.03, about a
        period of the dominant frequency).
    first_break_traces : int
        Odd length, in traces, of the running median that fits the first breaks across the
        gather before they are made to increase with offset (default 7).
    gain : str
        ``"none"``, ``"spherical"`` (default): the divergence correction t v(t)^2 / v0^2, or
        ``"agc"``: automatic gain control. Semblance normalises each window, so only the
        balance between offsets and times matters; the default velocity function of 1500 m/s
        makes the default correction a mild gain proportional to t.
    gain_velocity : tuple of (time, velocity) rows
        RMS velocity function of the divergence correction, s and m/s, linear between the rows
        and held beyond them (default a constant 1500 m/s); v0 is its first velocity.
    agc_window : float
        Length of the sliding AGC window, s (default 0.5).
    supergather_cmps : int
        Odd number of neighbouring CMPs combined into one supergather (default 1: off).
    supergather_bin : float
        Offset bin width of the supergather, m (default 0: the median offset step of the
        central gather).
    """

    edit: bool = True
    spike_sigmas: float = 12.0
    spike_neighbour_ratio: float = 4.0
    spike_window: float = 0.2
    edit_traces: int = 11
    noisy_sigmas: float = 5.0
    noisy_ratio: float = 4.0
    dead_ratio: float = 0.01
    bandpass: bool = False
    bandpass_low: float = 4.0
    bandpass_high: float = 60.0
    bandpass_order: int = 4
    mute: str = "auto"
    mute_table: tuple = ()
    mute_intercept: float = 0.0
    mute_velocity: float = 1500.0
    mute_after: float = 0.06
    mute_taper: float = 0.03
    first_break_window: float = 0.03
    first_break_traces: int = 7
    gain: str = "spherical"
    gain_velocity: tuple = ((0.0, 1500.0),)
    agc_window: float = 0.5
    supergather_cmps: int = 1
    supergather_bin: float = 0.0

    def __post_init__(self):
        # TOML and JSON give lists; a frozen, hashable record wants tuples.
        for name, what in (("mute_table", "offset (m), time (s)"), ("gain_velocity", "time (s), velocity (m/s)")):
            try:
                rows = tuple(tuple(float(x) for x in row) for row in getattr(self, name))
            except (TypeError, ValueError):
                raise ParameterError(f"{name} must be rows of two numbers: {what}") from None
            object.__setattr__(self, name, rows)

    def validate(self) -> None:
        for name in ("edit", "bandpass"):
            _check(isinstance(getattr(self, name), bool), f"{name} must be true or false")
        _check(_finite_positive(self.spike_sigmas), "spike_sigmas must be > 0 (robust standard deviations)")
        _check(_finite_positive(self.spike_neighbour_ratio) and self.spike_neighbour_ratio >= 1,
               "spike_neighbour_ratio must be >= 1 (a spike stands out from its neighbours)")
        _check(_finite_positive(self.spike_window) and self.spike_window <= 2.0, "spike_window must be in (0, 2] s")
        _check(isinstance(self.edit_traces, int) and self.edit_traces >= 3 and self.edit_traces % 2 == 1,
               f"edit_traces must be an odd integer >= 3, got {self.edit_traces!r}")
        _check(_finite_positive(self.noisy_sigmas), "noisy_sigmas must be > 0 (robust standard deviations)")
        _check(_finite_positive(self.noisy_ratio) and self.noisy_ratio > 1,
               "noisy_ratio must be > 1 (how many times its neighbours' RMS a noisy trace has)")
        _check(_finite_nonneg(self.dead_ratio) and self.dead_ratio < 1,
               "dead_ratio must be in [0, 1) (fraction of the neighbours' RMS; 0: only all-zero traces)")
        _check(_finite_nonneg(self.bandpass_low) and _finite_nonneg(self.bandpass_high),
               "bandpass_low and bandpass_high must be >= 0 Hz (0: that side open)")
        if self.bandpass:
            _check(self.bandpass_low > 0 or self.bandpass_high > 0,
                   "bandpass needs bandpass_low or bandpass_high above 0 Hz; or set bandpass = false")
            _check(self.bandpass_high == 0 or self.bandpass_low < self.bandpass_high,
                   f"bandpass_low ({self.bandpass_low:g} Hz) must be below bandpass_high "
                   f"({self.bandpass_high:g} Hz)")
        _check(isinstance(self.bandpass_order, int) and 1 <= self.bandpass_order <= 10,
               f"bandpass_order must be an integer in 1..10, got {self.bandpass_order!r}")
        _check(self.mute in ("off", "auto", "linear", "table"),
               f"mute must be 'off', 'auto', 'linear' or 'table', got {self.mute!r}")
        if self.mute == "table" or self.mute_table:
            _check(len(self.mute_table) >= 1 and all(len(row) == 2 for row in self.mute_table),
                   "mute_table must be rows of two numbers: offset (m), time (s); mute = 'table' needs one row or more")
            _check(all(math.isfinite(x) for row in self.mute_table for x in row), "mute_table must be finite numbers")
            _check(all(row[0] >= 0 and row[1] >= 0 for row in self.mute_table),
                   "mute_table offsets (m) and times (s) must be >= 0")
            _check(all(b[0] > a[0] for a, b in zip(self.mute_table, self.mute_table[1:])),
                   "mute_table rows must have increasing offsets")
        _check(_finite_nonneg(self.mute_intercept), "mute_intercept must be >= 0 s")
        _check(_finite_positive(self.mute_velocity), "mute_velocity must be a positive velocity in m/s")
        _check(_finite_nonneg(self.mute_after) and self.mute_after <= 2.0, "mute_after must be in [0, 2] s")
        _check(_finite_nonneg(self.mute_taper) and self.mute_taper <= 2.0, "mute_taper must be in [0, 2] s")
        _check(_finite_positive(self.first_break_window) and self.first_break_window <= 1.0,
               "first_break_window must be in (0, 1] s")
        _check(isinstance(self.first_break_traces, int) and self.first_break_traces >= 1
               and self.first_break_traces % 2 == 1,
               f"first_break_traces must be an odd integer >= 1, got {self.first_break_traces!r}")
        _check(self.gain in ("none", "spherical", "agc"),
               f"gain must be 'none', 'spherical' or 'agc', got {self.gain!r}")
        _check(len(self.gain_velocity) >= 1 and all(len(row) == 2 for row in self.gain_velocity),
               "gain_velocity must be rows of two numbers: time (s), velocity (m/s), one row or more")
        _check(all(math.isfinite(t) and t >= 0 and math.isfinite(v) and v > 0 for t, v in self.gain_velocity),
               "gain_velocity rows need a time >= 0 s and a positive velocity in m/s")
        _check(all(b[0] > a[0] for a, b in zip(self.gain_velocity, self.gain_velocity[1:])),
               "gain_velocity rows must have increasing times")
        _check(_finite_positive(self.agc_window) and self.agc_window <= 10.0, "agc_window must be in (0, 10] s")
        _check(isinstance(self.supergather_cmps, int) and self.supergather_cmps >= 1
               and self.supergather_cmps % 2 == 1,
               f"supergather_cmps must be an odd integer >= 1 (1: off), got {self.supergather_cmps!r}")
        _check(_finite_nonneg(self.supergather_bin), "supergather_bin must be >= 0 m (0: the gather's offset step)")


@dataclass(frozen=True)
class IntervalParams:
    """Constrained Dix inversion and depth conversion.

    Attributes
    ----------
    vint_min, vint_max : float
        Physical range of interval velocity, m/s (defaults 1400 and 7000).
    dz : float
        Depth step of the ``/depth`` fields, m (default 10).

    regularised : bool
        Compute the line-wide regularised interval field and take the depth fields from it
        (default True; False keeps the per-CMP constrained Dix for depth, and is faster).

    The line-wide regularised field (:mod:`velspec.regularised`) uses the fields below. Its
    three strengths are prior standard deviations of the interval velocity, as fractions of
    the line's stacking-velocity trend at that t0 (dimensionless): smaller means smoother.

    time_variation : float
        Within a layer (between two picks of a CMP) the interval velocity changes with t0 as a
        random walk whose change over 1 s of two-way time has this standard deviation
        (default 0.05).
    step_variation : float
        Standard deviation of the step in interval velocity at a pick's t0, where a reflector
        lets the velocity jump (default 0.5: steps of tens of percent cost little).
    lateral_variation : float
        Along the line, the interval velocity averaged over 1 s of t0 changes as a random walk
        whose change over 1 km of line has this standard deviation (default 0.2: on a
        synthetic line with picks 1.5 % uncertain it gave the smallest error against the true
        field, the picks then fitted to about one sigma; see benchmarks/regularised.py).
    cmp_spacing : float
        Distance between neighbouring CMPs, m, used only when no CMP coordinates are given
        (default 12.5).
    solver_tolerance : float
        Relative residual at which each conjugate-gradient solve stops (default 1e-7).
    solver_iterations : int
        Most conjugate-gradient iterations per solve (default 3000).
    """

    vint_min: float = 1400.0
    vint_max: float = 7000.0
    dz: float = 10.0
    regularised: bool = True
    time_variation: float = 0.05
    step_variation: float = 0.5
    lateral_variation: float = 0.2
    cmp_spacing: float = 12.5
    solver_tolerance: float = 1e-7
    solver_iterations: int = 3000

    def validate(self) -> None:
        _check(_finite_positive(self.vint_min), "vint_min must be a positive velocity in m/s")
        _check(_finite_positive(self.vint_max), "vint_max must be a positive velocity in m/s")
        _check(self.vint_min < self.vint_max,
               f"vint_min ({self.vint_min:g} m/s) must be below vint_max ({self.vint_max:g} m/s)")
        _check(_finite_positive(self.dz), "dz must be > 0 m")
        _check(isinstance(self.regularised, bool), "regularised must be true or false")
        for name in ("time_variation", "step_variation", "lateral_variation"):
            value = getattr(self, name)
            _check(_finite_positive(value) and value <= 100,
                   f"{name} must be a fraction of velocity in (0, 100], got {value!r}")
        _check(_finite_positive(self.cmp_spacing), "cmp_spacing must be > 0 m")
        _check(_finite_positive(self.solver_tolerance) and self.solver_tolerance <= 1e-2,
               "solver_tolerance must be in (0, 0.01]")
        _check(isinstance(self.solver_iterations, int) and not isinstance(self.solver_iterations, bool)
               and self.solver_iterations >= 1, "solver_iterations must be an integer >= 1")


STAGGERED_COEFFICIENTS = {
    4: (9.0 / 8.0, -1.0 / 24.0),
    8: (1225.0 / 1024.0, -245.0 / 3072.0, 49.0 / 5120.0, -5.0 / 7168.0),
}
"""Staggered first-derivative weights of (f[+1/2] - f[-1/2]), (f[+3/2] - f[-3/2]), ... over h,
by Taylor expansion (Levander, 1988, for order 4; Fornberg, 1988, Generation of finite
difference formulas on arbitrarily spaced grids, Math. Comp. 51, 699-706, for any order)."""

COURANT_LIMITS = {n: 1.0 / (math.sqrt(2.0) * sum(abs(c) for c in cs))
                  for n, cs in STAGGERED_COEFFICIENTS.items()}
"""Stability limit of ``v dt / h`` for leapfrog time steps and staggered space differences of
each order in 2D, ``1 / (sqrt(2) sum |c_m|)`` (von Neumann analysis, e.g. Levander, 1988,
Fourth-order finite-difference P-SV seismograms, Geophysics 53, 1425-1436): 0.606 for order 4,
0.550 for order 8."""


@dataclass(frozen=True)
class WaveParams:
    """Numerical choices of the finite-difference modeller (:mod:`velspec.synth.wave`).

    Attributes
    ----------
    order : int
        Order of the staggered space differences, 4 or 8 (default 8: at 4.5 points per
        wavelength its phase-velocity error is 0.12 %, against 1.6 % for order 4).
    points_per_wavelength : float
        Fewest grid points per shortest wavelength, ``v_min / f_max`` (default 4.5). At the
        default ``f_max`` this is about 7.8 points at the wavelet's upper half-power frequency,
        above the ~5 that Alford, Kelly & Boore (1974) found enough for fourth-order differences
        (value from memory).
    max_frequency_ratio : float
        Highest frequency modelled, as a multiple of the Ricker peak frequency (default 2.5:
        there the Ricker amplitude spectrum is 3 % of its peak).
    courant : float
        Largest ``v_max dt / h`` when the time step is chosen automatically (default 0.5); it
        must stay below the stability limit of the order, :data:`COURANT_LIMITS`.
    time_phase_error : float
        Largest phase-velocity error of the leapfrog time step at ``f_max`` when the step is
        chosen automatically, ``(2 pi f_max dt)^2 / 24`` (default 0.002): in slow, uniform
        models the stability limit alone allows steps whose error is several percent.
    boundary_cells : int
        Width of the absorbing layer on the sides and the bottom, grid cells (default 30).
    boundary_reflection : float
        Design reflection coefficient of the absorbing layer at normal incidence, which sets its
        damping (default 1e-4; Collino & Tsogka, 2001).
    margin : float
        Distance kept between the outermost source or receiver and the absorbing layer, m
        (default 150).
    """

    order: int = 8
    points_per_wavelength: float = 4.5
    max_frequency_ratio: float = 2.5
    courant: float = 0.5
    time_phase_error: float = 0.002
    boundary_cells: int = 30
    boundary_reflection: float = 1e-4
    margin: float = 150.0

    def validate(self) -> WaveParams:
        _check(self.order in STAGGERED_COEFFICIENTS, "order must be 4 or 8 (staggered space differences)")
        _check(_finite_positive(self.points_per_wavelength) and self.points_per_wavelength >= 2.5,
               "points_per_wavelength must be >= 2.5 (below that the differences are far too dispersive)")
        _check(_finite_positive(self.max_frequency_ratio) and 1.0 <= self.max_frequency_ratio <= 5.0,
               "max_frequency_ratio must be in [1, 5] (times the Ricker peak frequency)")
        limit = COURANT_LIMITS.get(self.order, 0.0)
        _check(_finite_positive(self.courant) and self.courant <= limit,
               f"courant must be in (0, {limit:.3f}] for order {self.order}: above that the scheme is unstable")
        _check(_finite_positive(self.time_phase_error) and self.time_phase_error <= 0.1,
               "time_phase_error must be in (0, 0.1]")
        _check(isinstance(self.boundary_cells, int) and 5 <= self.boundary_cells <= 500,
               "boundary_cells must be an integer in 5..500")
        _check(_finite_positive(self.boundary_reflection) and self.boundary_reflection < 1,
               "boundary_reflection must be in (0, 1)")
        _check(_finite_nonneg(self.margin), "margin must be >= 0 m")
        return self


@dataclass(frozen=True)
class RunParams:
    """All parameters of ``velspec run``.

    Attributes
    ----------
    threads : int
        Threads for the numba kernels; 0 means all cores.
    block : int
        CMP gathers read and scanned per block (memory grows with it, not with line length).
    keep_spectra : int
        Number of coherence panels kept in the result for QC, evenly spaced along the line.
    """

    read: ReadParams = field(default_factory=ReadParams)
    scan: ScanParams = field(default_factory=ScanParams)
    pick: PickParams = field(default_factory=PickParams)
    interval: IntervalParams = field(default_factory=IntervalParams)
    condition: ConditionParams = field(default_factory=ConditionParams)
    grid: GridParams = field(default_factory=GridParams)
    threads: int = 0
    block: int = 16
    keep_spectra: int = 5

    def validate(self) -> RunParams:
        self.read.validate()
        self.scan.validate()
        self.pick.validate()
        self.interval.validate()
        self.condition.validate()
        self.grid.validate()
        _check(self.read.geometry == "2d" or self.condition.supergather_cmps == 1,
               "supergathers (condition.supergather_cmps > 1) are made along a 2D line only; set it to 1 "
               "for 3D-binned data (read.geometry = '3d')")
        _check(self.read.geometry == "3d" or self.grid == GridParams(),
               "[grid] chooses bins of 3D-binned data; set read.geometry = '3d' or leave [grid] out")
        _check(isinstance(self.threads, int) and self.threads >= 0, "threads must be an integer >= 0")
        _check(isinstance(self.block, int) and self.block >= 1, "block must be an integer >= 1")
        _check(isinstance(self.keep_spectra, int) and self.keep_spectra >= 0, "keep_spectra must be >= 0")
        return self

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), sort_keys=True)

    @classmethod
    def from_dict(cls, data: dict) -> RunParams:
        """Build from a nested mapping (TOML or JSON); unknown keys are errors, not ignored."""
        data = dict(data)
        stages = {"read": ReadParams, "scan": ScanParams, "pick": PickParams, "interval": IntervalParams,
                  "condition": ConditionParams, "grid": GridParams}
        kwargs = {}
        for name, kind in stages.items():
            section = dict(_table(data.pop(name, {}) or {}, name))
            if name == "read" and "headers" in section:
                headers = _table(section["headers"], "read.headers")
                section["headers"] = HeaderBytes(**_known(HeaderBytes, headers, "read.headers"))
            kwargs[name] = kind(**_known(kind, section, name))
        kwargs.update(_known(cls, data, "top level"))
        return cls(**kwargs)

    def with_overrides(self, **flat) -> RunParams:
        """Return a copy with ``stage__name=value`` or top-level ``name=value`` overrides."""
        out = self
        for key, value in flat.items():
            if value is None:
                continue
            if "__" in key:
                stage, name = key.split("__", 1)
                out = dataclasses.replace(out, **{stage: dataclasses.replace(getattr(out, stage), **{name: value})})
            else:
                out = dataclasses.replace(out, **{key: value})
        return out


def load_toml(path: str | Path) -> RunParams:
    """Read run parameters from a TOML file with sections [read], [scan], [pick], [interval],
    [condition]."""
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise ParameterError(f"config file {path} does not exist") from None
    except tomllib.TOMLDecodeError as exc:
        raise ParameterError(f"config file {path} is not valid TOML: {exc}") from None
    try:
        return RunParams.from_dict(data)
    except (TypeError, ParameterError) as exc:
        raise ParameterError(f"config file {path}: {exc}") from None


def _known(kind, section: dict, where: str) -> dict:
    names = {f.name for f in dataclasses.fields(kind)}
    unknown = sorted(set(section) - names, key=str)
    if unknown:
        place = "at the top level" if where == "top level" else f"in [{where}]"
        hints = []
        for key in unknown[:3]:
            near = difflib.get_close_matches(str(key), sorted(names), n=1, cutoff=0.6)
            home = _home_of(str(key))
            hint = (f"did you mean {near[0]!r}?" if near else
                    ("it belongs at the top level" if home == "top level" else f"it belongs in [{home}]")
                    if home and home != where else f"known: {', '.join(sorted(names))}")
            hints.append(f"{str(key)!r} ({hint})")
        more = f" and {len(unknown) - 3} more" if len(unknown) > 3 else ""
        raise ParameterError(f"unknown parameter {place}: {', '.join(hints)}{more}")
    # a file can hold any TOML type; say which key has the wrong one before validation compares it
    types = {f.name: f.type for f in dataclasses.fields(kind)}
    for key, value in section.items():
        want = _TYPES.get(types[key])
        if want is not None and not want[0](value):
            where_key = key if where == "top level" else f"{where}.{key}"
            raise ParameterError(f"{where_key} must be {want[1]}, got {value!r}")
    return section


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


# the annotation of a field -> (test, what to say); others (sub-tables) are checked by their own class
_TYPES = {
    "float": (_is_number, "a number"),
    "int": (lambda v: isinstance(v, int) and not isinstance(v, bool), "a whole number"),
    "str": (lambda v: isinstance(v, str), "a text in quotes"),
    "tuple": (lambda v: isinstance(v, (list, tuple)), "a list of rows [[t0, vmin, vmax], ...]"),
}


def _table(value, where: str) -> dict:
    """A section must be a table of parameters, not a value (``scan = 3`` in a TOML file)."""
    if not isinstance(value, dict):
        raise ParameterError(f"[{where}] must be a table of parameters (a [{where}] section), got {value!r}")
    return value


def _home_of(key: str) -> str:
    """The section that has a parameter named ``key``, for a key put in the wrong one."""
    sections = {"read": ReadParams, "read.headers": HeaderBytes, "scan": ScanParams, "pick": PickParams,
                "interval": IntervalParams, "grid": GridParams, "top level": RunParams}
    for where, kind in sections.items():
        if key in {f.name for f in dataclasses.fields(kind)}:
            return where
    return ""


def _check(ok: bool, message: str) -> None:
    if not ok:
        raise ParameterError(message)


def _finite_positive(x) -> bool:
    return isinstance(x, (int, float)) and math.isfinite(x) and x > 0


def _finite_nonneg(x) -> bool:
    return isinstance(x, (int, float)) and math.isfinite(x) and x >= 0


@dataclass(frozen=True)
class ProductParams:
    """How ``velspec export`` shapes its products (not stored in results: they come after the run).

    Attributes
    ----------
    smooth_time : float
        Standard deviation in t0 of the Gaussian that smooths the field for migration, s
        (default 0.1).
    smooth_cmps : float
        Its standard deviation along the line, in CMPs (default 10).
    csv_step : float
        Time step of the CSV velocity functions on a regular grid, s, rounded to a whole number
        of samples (default 0.05).
    """

    smooth_time: float = 0.1
    smooth_cmps: float = 10.0
    csv_step: float = 0.05

    def validate(self) -> ProductParams:
        _check(_finite_nonneg(self.smooth_time) and self.smooth_time <= 10,
               f"smooth_time (--smooth-time) must be in [0, 10] s, got {self.smooth_time}")
        _check(_finite_nonneg(self.smooth_cmps) and self.smooth_cmps <= 10000,
               f"smooth_cmps (--smooth-cmps) must be in [0, 10000] CMPs, got {self.smooth_cmps}")
        _check(_finite_positive(self.csv_step) and self.csv_step <= 10,
               f"csv_step (--csv-step) must be in (0, 10] s, got {self.csv_step}")
        return self
