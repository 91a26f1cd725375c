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
    consistency_ratio : float
        Where two neighbouring picks imply an interval velocity outside the physical range of
        [interval], the weaker is dropped when its coherence is below this fraction of the
        stronger's (default 0.5); stronger contradictions are kept and flagged by Dix.
    """

    node_interval: float = 0.024
    max_increase: float = 3000.0
    max_decrease: float = 1000.0
    smoothness: float = 0.01
    vmin_top: float = 0.0
    vmax_top: float = 0.0
    vmin_bottom: float = 0.0
    vmax_bottom: float = 0.0
    min_coherence: float = 0.1
    min_prominence: float = 0.15
    min_live: int = 6
    min_separation: float = 0.1
    tmin: float = 0.1
    consistency_ratio: float = 0.5

    def validate(self) -> None:
        _check(0 <= self.consistency_ratio <= 1, "consistency_ratio must be in [0, 1]")
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
    """

    vint_min: float = 1400.0
    vint_max: float = 7000.0
    dz: float = 10.0

    def validate(self) -> None:
        _check(_finite_positive(self.vint_min), "vint_min must be a positive velocity in m/s")
        _check(_finite_positive(self.vint_max), "vint_max must be a positive velocity in m/s")
        _check(self.vint_min < self.vint_max,
               f"vint_min ({self.vint_min:g} m/s) must be below vint_max ({self.vint_max:g} m/s)")
        _check(_finite_positive(self.dz), "dz must be > 0 m")


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
