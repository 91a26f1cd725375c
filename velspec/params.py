"""Every run parameter, typed and validated in one place, with its default written once.

Each stage has its own dataclass; :class:`RunParams` gathers them. The whole set is stored as
JSON in every result file (``parameters`` attribute), so a run can be reproduced from its output.
Units are SI: seconds, metres, metres per second.
"""

from __future__ import annotations

import dataclasses
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
    """

    headers: HeaderBytes = field(default_factory=HeaderBytes)
    bin_size: float = 0.0

    def validate(self) -> None:
        self.headers.validate()
        _check(self.bin_size >= 0 and math.isfinite(self.bin_size), "bin_size must be >= 0 m")


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
        (defaults 3000 and 1000).
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
    max_increase: float = 3000.0
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
    multiple_time_tolerance: float = 0.04
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
class IntervalParams:
    """Constrained Dix inversion and depth conversion.

    Attributes
    ----------
    vint_min, vint_max : float
        Physical range of interval velocity, m/s (defaults 1400 and 7000).
    dz : float
        Depth step of the ``/depth`` fields, m (default 10).

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
        for name in ("time_variation", "step_variation", "lateral_variation"):
            value = getattr(self, name)
            _check(_finite_positive(value) and value <= 100,
                   f"{name} must be a fraction of velocity in (0, 100], got {value!r}")
        _check(_finite_positive(self.cmp_spacing), "cmp_spacing must be > 0 m")
        _check(_finite_positive(self.solver_tolerance) and self.solver_tolerance <= 1e-2,
               "solver_tolerance must be in (0, 0.01]")
        _check(isinstance(self.solver_iterations, int) and not isinstance(self.solver_iterations, bool)
               and self.solver_iterations >= 1, "solver_iterations must be an integer >= 1")


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
    threads: int = 0
    block: int = 16
    keep_spectra: int = 5

    def validate(self) -> "RunParams":
        self.read.validate()
        self.scan.validate()
        self.pick.validate()
        self.interval.validate()
        _check(isinstance(self.threads, int) and self.threads >= 0, "threads must be an integer >= 0")
        _check(isinstance(self.block, int) and self.block >= 1, "block must be an integer >= 1")
        _check(isinstance(self.keep_spectra, int) and self.keep_spectra >= 0, "keep_spectra must be >= 0")
        return self

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), sort_keys=True)

    @classmethod
    def from_dict(cls, data: dict) -> "RunParams":
        """Build from a nested mapping (TOML or JSON); unknown keys are errors, not ignored."""
        data = dict(data)
        stages = {"read": ReadParams, "scan": ScanParams, "pick": PickParams, "interval": IntervalParams}
        kwargs = {}
        for name, kind in stages.items():
            section = dict(data.pop(name, {}) or {})
            if name == "read" and "headers" in section:
                section["headers"] = HeaderBytes(**_known(HeaderBytes, section["headers"], "read.headers"))
            kwargs[name] = kind(**_known(kind, section, name))
        kwargs.update(_known(cls, data, "top level"))
        return cls(**kwargs)

    def with_overrides(self, **flat) -> "RunParams":
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
    """Read run parameters from a TOML file with sections [read], [scan], [pick], [interval]."""
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise ParameterError(f"config file {path} does not exist") from None
    except tomllib.TOMLDecodeError as exc:
        raise ParameterError(f"config file {path} is not valid TOML: {exc}") from None
    try:
        return RunParams.from_dict(data)
    except TypeError as exc:
        raise ParameterError(f"config file {path}: {exc}") from None


def _known(kind, section: dict, where: str) -> dict:
    names = {f.name for f in dataclasses.fields(kind)}
    unknown = sorted(set(section) - names)
    if unknown:
        raise ParameterError(f"unknown parameter(s) in {where}: {', '.join(unknown)}; "
                             f"known: {', '.join(sorted(names))}")
    return section


def _check(ok: bool, message: str) -> None:
    if not ok:
        raise ParameterError(message)


def _finite_positive(x) -> bool:
    return isinstance(x, (int, float)) and math.isfinite(x) and x > 0


def _finite_nonneg(x) -> bool:
    return isinstance(x, (int, float)) and math.isfinite(x) and x >= 0
