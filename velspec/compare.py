"""Two results side by side: fields, picks, parameters and versions (``velspec compare``).

:func:`compare_results` compares two :class:`~velspec.result.LineAnalysis` (or result files)
field by field on their common CMPs and t0 samples, matches their picks CMP by CMP, and lists
the parameters and provenance (versions, input checksum) that differ. A value passes when

    |a - b| <= atol + rtol * |b|

which is the rule of :func:`numpy.isclose` (B is the reference). The report says which CMPs and
times are outside the tolerance, and writes itself as JSON, as a JUnit XML file for CI systems
and as a picture of the relative difference.

Parameters and provenance that differ are reported but do not fail a comparison: two runs with
other thread counts, or two velspec versions, are meant to give the same fields.
"""

from __future__ import annotations

import json
import math
import os
import xml.etree.ElementTree as ET
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from .caution import CAUTION
from .errors import InputError, ParameterError
from .flags import Flag, used_mask
from .result import LineAnalysis


@dataclass(frozen=True)
class CompareParams:
    """Tolerances of a comparison.

    Attributes
    ----------
    rtol : float
        Relative tolerance, a fraction of the reference value B (default 0.001).
    atol : float
        Absolute tolerance of velocity fields and pick velocities, m/s (default 1.0).
    atol_time : float
        Absolute tolerance of fields in seconds (``depth/t0``), s (default 0.001).
    atol_eta : float
        Absolute tolerance of the dimensionless ``eta`` field (default 0.001).
    match_window : float
        Picks of the same CMP closer than this in t0 are the same pick, s (default 0.05: half
        the default smallest time between two picks).
    t0_atol : float
        A matched pick whose t0 changed by more than this has moved, s (default 0.002: half a
        4 ms sample).
    worst : int
        How many of the largest differences each field lists (default 5).
    """

    rtol: float = 0.001
    atol: float = 1.0
    atol_time: float = 0.001
    atol_eta: float = 0.001
    match_window: float = 0.05
    t0_atol: float = 0.002
    worst: int = 5

    @classmethod
    def exact(cls) -> CompareParams:
        """Every tolerance zero: the same bits or a difference (NaN still equals NaN)."""
        return cls(rtol=0.0, atol=0.0, atol_time=0.0, atol_eta=0.0, t0_atol=0.0)

    def validate(self) -> CompareParams:
        for name in ("rtol", "atol", "atol_time", "atol_eta", "t0_atol"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
                raise ParameterError(f"{name} must be a finite number >= 0, got {value!r}")
        if not (isinstance(self.match_window, (int, float)) and math.isfinite(self.match_window)
                and self.match_window > 0):
            raise ParameterError(f"match_window must be a time > 0 s, got {self.match_window!r}")
        if not (isinstance(self.worst, int) and self.worst >= 0):
            raise ParameterError("worst must be an integer >= 0")
        return self


@dataclass
class FieldDifference:
    """How one field differs between A and B, on their common CMPs and samples.

    ``abs_*`` are in the field's units, ``rel_*`` are fractions of ``|B|``; ``worst`` lists the
    largest relative differences (CMP, time or depth, A, B), ``outside`` the CMPs with values
    outside the tolerance and the span of times (or depths) where they are.
    """

    name: str
    units: str
    axis: str
    compared: bool
    note: str = ""
    values: int = 0
    outside_count: int = 0
    nan_mismatch: int = 0
    abs_median: float = 0.0
    abs_p95: float = 0.0
    abs_max: float = 0.0
    rel_median: float = 0.0
    rel_p95: float = 0.0
    rel_max: float = 0.0
    atol: float = 0.0
    worst: list = field(default_factory=list)
    outside: list = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return (not self.compared and not self.note.startswith("no common")) or (
            self.compared and self.outside_count == 0)


@dataclass
class PickDifference:
    """Picks matched CMP by CMP (nearest t0 within the match window, one to one).

    Changes are told from the reference B to A: ``added`` are picks only A has, ``removed``
    picks only B has, ``moved`` matched picks whose t0 or stacking velocity differ beyond the
    tolerance, ``flags_changed`` matched picks whose flags differ (the bits A ``gained`` and
    ``lost``, named as in :class:`velspec.Flag`).
    """

    matched: int = 0
    added: list = field(default_factory=list)
    removed: list = field(default_factory=list)
    moved: list = field(default_factory=list)
    flags_changed: list = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return not (self.added or self.removed or self.moved or self.flags_changed)


@dataclass
class AxesDifference:
    """CMPs and t0 samples of A and B: which are common, which only one side has."""

    common_cmps: int = 0
    only_in_a: list = field(default_factory=list)
    only_in_b: list = field(default_factory=list)
    common_t0: int = 0
    t0_a: list = field(default_factory=list)   # [first, last, count] of each t0 axis, s
    t0_b: list = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return (not self.only_in_a and not self.only_in_b and self.common_t0 == self.t0_a[2] == self.t0_b[2]
                and self.common_cmps > 0)


@dataclass
class ComparisonReport:
    """Everything :func:`compare_results` found.

    Attributes
    ----------
    a, b : str
        What was compared (file paths, or ``"A"``, ``"B"`` for objects).
    tolerance : CompareParams
        The tolerances used.
    axes : AxesDifference
    fields : list of FieldDifference
        ``vrms``, ``vint``, ``vint_sigma``, then the optional fields either side has.
    picks : PickDifference
    parameters : list of dict
        ``{"key": "scan.nvel", "a": 120, "b": 160}`` for every run parameter that differs
        (``None`` where one side lacks it). Reported, not judged.
    provenance : list of dict
        The same for the root attributes other than ``parameters`` and ``created``: versions
        (``velspec_version``, ``format_version``), ``input.checksum`` and the rest of ``input``,
        counts. Reported, not judged.
    passed : bool
        True when the axes agree, every field is within tolerance and no pick differs.
    """

    a: str
    b: str
    tolerance: CompareParams
    axes: AxesDifference
    fields: list
    picks: PickDifference
    parameters: list
    provenance: list
    _maps: dict = field(default_factory=dict, repr=False)

    @property
    def passed(self) -> bool:
        return self.axes.passed and self.picks.passed and all(f.passed for f in self.fields)

    def field(self, name: str) -> FieldDifference:
        """The :class:`FieldDifference` of field ``name`` (``"vrms"``, ``"depth/vint"`` ...)."""
        for f in self.fields:
            if f.name == name:
                return f
        raise KeyError(name)

    def to_dict(self) -> dict:
        """The report as plain JSON-ready values (non-finite numbers as None)."""
        out = {"a": self.a, "b": self.b, "passed": self.passed,
               "rule": "a value passes when |a - b| <= atol + rtol * |b| (numpy.isclose's rule, B the reference)",
               "tolerance": asdict(self.tolerance), "axes": dict(asdict(self.axes), passed=self.axes.passed),
               "fields": [dict(asdict(f), passed=f.passed) for f in self.fields],
               "picks": dict(asdict(self.picks), passed=self.picks.passed),
               "parameters": self.parameters, "provenance": self.provenance, "caution": CAUTION}
        return _plain(out)

    def summary(self, limit: int = 5) -> str:
        """A few lines for a person: each field, the picks, parameters and versions that differ."""
        t = self.tolerance
        lines = [f"velspec compare: A = {self.a}, B = {self.b}",
                 f"  a value passes when |a - b| <= atol + rtol*|b|: rtol {t.rtol:g}, atol {t.atol:g} m/s"
                 f" ({t.atol_time:g} s for times, {t.atol_eta:g} for eta)"]
        ax = self.axes
        if not ax.passed:
            lines.append(f"  axes      {ax.common_cmps} common CMP(s), {ax.common_t0} common t0 sample(s); "
                         f"only in A: {_few(ax.only_in_a, limit)}; only in B: {_few(ax.only_in_b, limit)}; "
                         f"t0 A {_span(ax.t0_a)}, B {_span(ax.t0_b)}")
        for f in self.fields:
            if not f.compared:
                lines.append(f"  {f.name:<16} not compared: {f.note}")
                continue
            verdict = "ok" if f.passed else f"{f.outside_count} of {f.values} outside"
            lines.append(f"  {f.name:<16} {verdict}; abs diff median {f.abs_median:.3g}, p95 {f.abs_p95:.3g}, "
                         f"max {f.abs_max:.3g} {f.units}; rel median {100 * f.rel_median:.3g} %, "
                         f"p95 {100 * f.rel_p95:.3g} %, max {100 * f.rel_max:.3g} %")
            for region in f.outside[:limit]:
                lines.append(f"      CMP {region['cmp']}: {region['count']} value(s) outside, {f.axis} "
                             f"{region['first']:g}..{region['last']:g}, max rel {100 * region['rel_max']:.3g} %")
            if len(f.outside) > limit:
                lines.append(f"      ... and {len(f.outside) - limit} more CMP(s)")
        p = self.picks
        lines.append(f"  picks (B -> A)   {p.matched} matched, {len(p.added)} added, {len(p.removed)} removed, "
                     f"{len(p.moved)} moved, {len(p.flags_changed)} with other flags")
        for kind, rows in (("added", p.added), ("removed", p.removed)):
            for r in rows[:limit]:
                lines.append(f"      {kind}: CMP {r['cmp']} t0 {r['t0']:.3f} s, {r['vrms']:.0f} m/s")
        for r in p.moved[:limit]:
            lines.append(f"      moved: CMP {r['cmp']} t0 {r['t0_b']:.3f} -> {r['t0_a']:.3f} s, "
                         f"{r['vrms_b']:.0f} -> {r['vrms_a']:.0f} m/s (B -> A)")
        for r in p.flags_changed[:limit]:
            lines.append(f"      flags: CMP {r['cmp']} t0 {r['t0']:.3f} s: gained {','.join(r['gained']) or 'none'}, "
                         f"lost {','.join(r['lost']) or 'none'}")
        for title, rows in (("parameter", self.parameters), ("provenance", self.provenance)):
            for r in rows[:limit * 4]:
                lines.append(f"  {title} {r['key']}: {r['a']!r} (A) vs {r['b']!r} (B)")
        lines.append("  result: " + ("within tolerance" if self.passed else "OUTSIDE tolerance"))
        return "\n".join(lines)

    def write_json(self, path: str | Path, force: bool = False) -> Path:
        """Write :meth:`to_dict` as JSON, atomically."""
        text = json.dumps(self.to_dict(), indent=2, allow_nan=False) + "\n"
        return _atomic_write(path, text.encode("utf-8"), force)

    def junit(self) -> ET.Element:
        """The report as a JUnit XML tree: one ``testsuite``, a ``testcase`` for the axes, each
        field and the picks (``failure`` when outside tolerance, ``skipped`` when not both have
        the field), and for the parameters and provenance (never failing; the differences in
        ``system-out``)."""
        cases = []

        def case(name, failure=None, skipped=None, out=None):
            el = ET.Element("testcase", classname="velspec.compare", name=name, time="0")
            if failure is not None:
                ET.SubElement(el, "failure", message=failure[0], type="outside tolerance").text = failure[1]
            elif skipped is not None:
                ET.SubElement(el, "skipped", message=skipped)
            if out:
                ET.SubElement(el, "system-out").text = out
            cases.append(el)

        ax = self.axes
        case("axes", None if ax.passed else (
            f"CMPs or t0 samples differ: {len(ax.only_in_a)} CMP(s) only in A, {len(ax.only_in_b)} only in B, "
            f"{ax.common_t0} common t0 sample(s) of {ax.t0_a[2]} (A) and {ax.t0_b[2]} (B)",
            f"only in A: {ax.only_in_a}\nonly in B: {ax.only_in_b}"))
        for f in self.fields:
            if not f.compared:
                if f.passed:
                    case(f"field {f.name}", skipped=f.note)
                else:
                    case(f"field {f.name}", failure=(f.note, f.note))
                continue
            detail = "\n".join(f"CMP {r['cmp']}: {r['count']} value(s), {f.axis} {r['first']:g}..{r['last']:g}, "
                               f"max rel {100 * r['rel_max']:.3g} %" for r in f.outside)
            case(f"field {f.name}", None if f.passed else (
                f"{f.outside_count} of {f.values} values outside |a-b| <= {f.atol:g} {f.units} + "
                f"{self.tolerance.rtol:g}*|b|; max {f.abs_max:.4g} {f.units} ({100 * f.rel_max:.3g} %)", detail))
        p = self.picks
        case("picks", None if p.passed else (
            f"{len(p.added)} added, {len(p.removed)} removed, {len(p.moved)} moved, "
            f"{len(p.flags_changed)} with other flags ({p.matched} matched)",
            json.dumps(_plain({"added": p.added, "removed": p.removed, "moved": p.moved,
                               "flags_changed": p.flags_changed}), indent=1)))
        for name, rows in (("parameters", self.parameters), ("provenance", self.provenance)):
            case(name, out="\n".join(f"{r['key']}: {r['a']!r} (A) vs {r['b']!r} (B)" for r in rows) or None)
        failures = sum(1 for c in cases if c.find("failure") is not None)
        skipped = sum(1 for c in cases if c.find("skipped") is not None)
        suite = ET.Element("testsuite", name="velspec compare", tests=str(len(cases)), failures=str(failures),
                           errors="0", skipped=str(skipped), time="0")
        props = ET.SubElement(suite, "properties")
        for key, value in (("a", self.a), ("b", self.b), *((k, str(v)) for k, v in asdict(self.tolerance).items())):
            ET.SubElement(props, "property", name=key, value=str(value))
        suite.extend(cases)
        root = ET.Element("testsuites", name="velspec compare", tests=str(len(cases)), failures=str(failures),
                          errors="0", skipped=str(skipped))
        root.append(suite)
        return root

    def write_junit(self, path: str | Path, force: bool = False) -> Path:
        """Write :meth:`junit` as an XML file, atomically."""
        tree = ET.ElementTree(self.junit())
        ET.indent(tree)
        import io

        buf = io.BytesIO()
        tree.write(buf, encoding="utf-8", xml_declaration=True)
        return _atomic_write(path, buf.getvalue(), force)

    def draw_difference(self, ax, name: str = "vrms"):
        """Draw the signed relative difference (A - B) / |B| of field ``name`` over CMP x t0 (or
        depth) on a matplotlib ``Axes``, in per cent, with a diverging colour-blind-safe map
        (ColorBrewer's RdBu) centred on zero. Returns the image (for a colour bar)."""
        if name not in self._maps:
            raise InputError(f"field {name} was not compared; compared: {', '.join(self._maps) or 'none'}")
        cmp, axis, rel = self._maps[name]
        f = self.field(name)
        finite = rel[np.isfinite(rel)]
        top = max(float(np.abs(finite).max()) if finite.size else 0.0, self.tolerance.rtol, 1e-6) * 100
        half_cmp = 0.5 if cmp.size < 2 else 0.5 * float(np.median(np.diff(cmp)))
        half_ax = 0.5 * float(axis[1] - axis[0]) if axis.size > 1 else 0.5
        extent = (float(cmp[0]) - half_cmp, float(cmp[-1]) + half_cmp,
                  float(axis[-1]) + half_ax, float(axis[0]) - half_ax)
        im = ax.imshow(100 * rel.T, aspect="auto", extent=extent, cmap="RdBu_r", vmin=-top, vmax=top,
                       interpolation="nearest")
        from matplotlib.ticker import MaxNLocator

        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.ticklabel_format(axis="x", useOffset=False, style="plain")
        ax.set_xlabel("CMP")
        ax.set_ylabel("depth (m)" if f.axis == "z" else "t0 (s)")
        ax.set_title(f"{name}: (A - B) / |B|, {f.outside_count} outside tolerance", fontsize=9)
        return im

    def write_picture(self, path: str | Path, force: bool = False, names: tuple = ("vrms", "vint")) -> Path:
        """A PNG of :meth:`draw_difference` for the fields ``names`` that were compared, side by side."""
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        names = [n for n in names if n in self._maps] or list(self._maps)[:1]
        if not names:
            raise InputError("no field was compared (no common CMPs and t0 samples); nothing to draw")
        fig = Figure(figsize=(4.2 * len(names) + 0.8, 5.0), dpi=110)
        canvas = FigureCanvasAgg(fig)
        for k, name in enumerate(names):
            ax = fig.add_subplot(1, len(names), k + 1)
            im = self.draw_difference(ax, name)
            fig.colorbar(im, ax=ax, fraction=0.06, pad=0.02, label="relative difference (%)")
        fig.suptitle(f"A = {Path(self.a).name}, B = {Path(self.b).name}", fontsize=9)
        fig.text(0.01, 0.005, "First-pass fields for qualified review", fontsize=6, color="0.35")
        fig.tight_layout()
        import io

        buf = io.BytesIO()
        canvas.print_png(buf)
        return _atomic_write(path, buf.getvalue(), force)


def compare_results(a: LineAnalysis | str | Path, b: LineAnalysis | str | Path, *, rtol: float | None = None,
                    atol: float | None = None, params: CompareParams | None = None) -> ComparisonReport:
    """Compare two results field by field and pick by pick (``velspec compare``).

    Parameters
    ----------
    a, b : LineAnalysis, or the path of a result file
        The results; B is the reference of the relative tolerance.
    rtol : float, optional
        Relative tolerance, a fraction of ``|b|``; overrides ``params.rtol`` (default 0.001).
    atol : float, optional
        Absolute tolerance of velocities, m/s; overrides ``params.atol`` (default 1.0).
    params : CompareParams, optional
        All the tolerances (time and eta fields, pick matching).

    Returns
    -------
    ComparisonReport
        ``report.passed`` is True within tolerance; ``report.summary()``, ``write_json``,
        ``write_junit`` and ``write_picture`` show it.

    Notes
    -----
    A value passes when ``|a - b| <= atol + rtol * |b|``, the rule of :func:`numpy.isclose`;
    NaN equals NaN. Fields are compared on the CMPs and t0 samples (depth samples for
    ``depth/*``) both results have; CMPs or samples only one side has fail the ``axes`` check
    and are listed. Optional fields (``eta``, ``regularised/*``, ``depth/*``) are compared when
    both results have them and otherwise listed as not compared.

    Raises
    ------
    InputError
        A path that is not a result file.
    ParameterError
        A negative or non-finite tolerance.
    """
    from .io.hdf5 import read_result

    params = params or CompareParams()
    over = {k: v for k, v in (("rtol", rtol), ("atol", atol)) if v is not None}
    if over:
        params = CompareParams(**dict(asdict(params), **over))
    params.validate()
    name_a = str(a) if not isinstance(a, LineAnalysis) else "A"
    name_b = str(b) if not isinstance(b, LineAnalysis) else "B"
    ra = a if isinstance(a, LineAnalysis) else read_result(a)
    rb = b if isinstance(b, LineAnalysis) else read_result(b)

    _, ia, ib = np.intersect1d(ra.cmp, rb.cmp, assume_unique=True, return_indices=True)
    ta, tb = _common_samples(ra.t0, rb.t0, 1e6)
    axes = AxesDifference(common_cmps=int(ia.size),
                          only_in_a=[int(c) for c in np.setdiff1d(ra.cmp, rb.cmp)],
                          only_in_b=[int(c) for c in np.setdiff1d(rb.cmp, ra.cmp)],
                          common_t0=int(ta.size), t0_a=_axis_span(ra.t0), t0_b=_axis_span(rb.t0))
    cmp = ra.cmp[ia]
    fields, maps = [], {}
    for name, units, getter, on_depth in _FIELD_TABLE:
        va, vb = getter(ra), getter(rb)
        tol = {"m/s": params.atol, "s": params.atol_time}.get(units, params.atol_eta)
        axis_name = "z" if on_depth else "t0"
        if va is None or vb is None:
            if va is None and vb is None and name not in ("vrms", "vint", "vint_sigma"):
                continue
            side = "A" if va is not None else "B"
            fields.append(FieldDifference(name, units, axis_name, False, note=f"only {side} has it", atol=tol))
            continue
        if on_depth:
            ka, kb = _common_samples(ra.depth.z, rb.depth.z, 1e3)
            axis = ra.depth.z[ka]
        else:
            ka, kb, axis = ta, tb, ra.t0[ta]
        if ia.size == 0 or ka.size == 0:
            fields.append(FieldDifference(name, units, axis_name, False, note="no common CMPs and samples",
                                          atol=tol))
            continue
        sa = np.asarray(va, dtype=np.float64)[np.ix_(ia, ka)]
        sb = np.asarray(vb, dtype=np.float64)[np.ix_(ib, kb)]
        diff, rel = _field_difference(name, units, axis_name, sa, sb, cmp, axis, tol, params)
        fields.append(diff)
        maps[name] = (cmp, axis, rel)
    picks = _compare_picks(ra.picks, rb.picks, params)
    parameters = _dict_difference(ra.attrs.get("parameters") or {}, rb.attrs.get("parameters") or {})
    skip = ("parameters", "created")
    provenance = _dict_difference({k: v for k, v in ra.attrs.items() if k not in skip},
                                  {k: v for k, v in rb.attrs.items() if k not in skip})
    return ComparisonReport(a=name_a, b=name_b, tolerance=params, axes=axes, fields=fields, picks=picks,
                            parameters=parameters, provenance=provenance, _maps=maps)


# name, units, how to get it from a result (None when absent), on the depth axis
_FIELD_TABLE = (
    ("vrms", "m/s", lambda r: r.vrms, False),
    ("vint", "m/s", lambda r: r.vint, False),
    ("vint_sigma", "m/s", lambda r: r.vint_sigma, False),
    ("eta", "1", lambda r: r.eta, False),
    ("regularised/vint", "m/s", lambda r: r.regularised.vint if r.regularised is not None else None, False),
    ("regularised/vrms", "m/s", lambda r: r.regularised.vrms if r.regularised is not None else None, False),
    ("depth/t0", "s", lambda r: r.depth.t0 if r.depth is not None else None, True),
    ("depth/vint", "m/s", lambda r: r.depth.vint if r.depth is not None else None, True),
    ("depth/vavg", "m/s", lambda r: r.depth.vavg if r.depth is not None else None, True),
)


def _field_difference(name, units, axis_name, a, b, cmp, axis, tol, params):
    both_nan = np.isnan(a) & np.isnan(b)
    one_nan = np.isnan(a) ^ np.isnan(b)
    with np.errstate(invalid="ignore", divide="ignore"):
        d = np.abs(a - b)
        rel = np.where(d == 0, 0.0, d / np.abs(b))
        signed = np.where(d == 0, 0.0, (a - b) / np.abs(b))
        ok = (d <= tol + params.rtol * np.abs(b)) | both_nan
    bad = ~ok
    finite = np.isfinite(d) & np.isfinite(rel)
    out = FieldDifference(name, units, axis_name, True, values=int(a.size), outside_count=int(bad.sum()),
                          nan_mismatch=int(one_nan.sum()), atol=tol)
    if finite.any():
        dv, rv = d[finite], rel[finite]
        out.abs_median, out.abs_p95, out.abs_max = (float(x) for x in np.percentile(dv, [50, 95, 100]))
        out.rel_median, out.rel_p95, out.rel_max = (float(x) for x in np.percentile(rv, [50, 95, 100]))
    order_key = np.where(np.isnan(rel), np.inf, rel).ravel()
    order_key[both_nan.ravel()] = -1.0
    top = np.argsort(-order_key, kind="stable")[:params.worst]
    for flat in top:
        i, j = np.unravel_index(flat, a.shape)
        if order_key[flat] <= 0:
            break
        out.worst.append({"cmp": int(cmp[i]), axis_name: float(axis[j]), "a": float(a[i, j]), "b": float(b[i, j]),
                          "abs": float(d[i, j]), "rel": float(rel[i, j])})
    for i in np.flatnonzero(bad.any(axis=1)):
        cols = np.flatnonzero(bad[i])
        rmax = rel[i, cols]
        out.outside.append({"cmp": int(cmp[i]), "count": int(cols.size), "first": float(axis[cols[0]]),
                            "last": float(axis[cols[-1]]),
                            "rel_max": float(np.nanmax(rmax)) if np.isfinite(rmax).any() else math.inf})
    return out, np.where(both_nan, 0.0, signed)


def _compare_picks(pa: np.ndarray, pb: np.ndarray, params: CompareParams) -> PickDifference:
    out = PickDifference()
    cmps = np.union1d(pa["cmp"], pb["cmp"])
    sa, sb = np.searchsorted(pa["cmp"], cmps), np.searchsorted(pb["cmp"], cmps)
    ea, eb = np.searchsorted(pa["cmp"], cmps, "right"), np.searchsorted(pb["cmp"], cmps, "right")
    for c, a0, a1, b0, b1 in zip(cmps, sa, ea, sb, eb):
        ra, rb = pa[a0:a1], pb[b0:b1]
        pairs = []
        if ra.size and rb.size:
            dist = np.abs(ra["t0"][:, None] - rb["t0"][None, :])
            dv = np.abs(ra["vrms"][:, None].astype(np.float64) - rb["vrms"][None, :])
            # a used pick pairs with a used one first (a person's pick beside the one it replaced)
            other_use = used_mask(ra["flags"])[:, None] != used_mask(rb["flags"])[None, :]
            i, j = np.nonzero(dist <= params.match_window)
            # nearest in t0 (to a microsecond, as a CSV keeps it), alike in use, nearest in
            # velocity, then table order: one deterministic one-to-one matching
            near = np.round(dist[i, j] * 1e6)
            for k in np.lexsort((j, i, dv[i, j], other_use[i, j], near)):
                pairs.append((int(i[k]), int(j[k])))
        taken_a, taken_b = set(), set()
        for i, j in pairs:
            if i in taken_a or j in taken_b:
                continue
            taken_a.add(i)
            taken_b.add(j)
            out.matched += 1
            x, y = ra[i], rb[j]
            dv = abs(float(x["vrms"]) - float(y["vrms"]))
            dt = abs(float(x["t0"]) - float(y["t0"]))
            if dt > params.t0_atol or dv > params.atol + params.rtol * abs(float(y["vrms"])):
                out.moved.append({"cmp": int(c), "t0_a": float(x["t0"]), "t0_b": float(y["t0"]),
                                  "vrms_a": float(x["vrms"]), "vrms_b": float(y["vrms"])})
            fa, fb = int(x["flags"]), int(y["flags"])
            if fa != fb:
                out.flags_changed.append({"cmp": int(c), "t0": float(y["t0"]), "vrms": float(y["vrms"]),
                                          "flags_a": fa, "flags_b": fb, "gained": _bit_names(fa & ~fb),
                                          "lost": _bit_names(fb & ~fa)})
        for i in sorted(set(range(ra.size)) - taken_a):
            out.added.append(_pick_row(c, ra[i]))
        for j in sorted(set(range(rb.size)) - taken_b):
            out.removed.append(_pick_row(c, rb[j]))
    out.moved.sort(key=lambda r: (r["cmp"], r["t0_b"]))
    for rows in (out.added, out.removed, out.flags_changed):
        rows.sort(key=lambda r: (r["cmp"], r["t0"]))
    return out


def _pick_row(cmp, row) -> dict:
    return {"cmp": int(cmp), "t0": float(row["t0"]), "vrms": float(row["vrms"]), "flags": int(row["flags"]),
            "flag_names": _bit_names(int(row["flags"]))}


def _bit_names(bits: int) -> list:
    names = [f.name for f in Flag if bits & int(f)]
    unknown = bits & ~sum(int(f) for f in Flag)
    return names + ([f"unknown bits {unknown}"] if unknown else [])


def _common_samples(x: np.ndarray, y: np.ndarray, per_unit: float):
    """Indices of the samples of ``x`` and ``y`` that agree to 1/per_unit (a microsecond, a millimetre)."""
    kx = np.round(np.asarray(x, dtype=np.float64) * per_unit).astype(np.int64)
    ky = np.round(np.asarray(y, dtype=np.float64) * per_unit).astype(np.int64)
    _, ix, iy = np.intersect1d(kx, ky, return_indices=True)
    return ix, iy


def _axis_span(t: np.ndarray) -> list:
    return [float(t[0]), float(t[-1]), int(t.size)] if t.size else [math.nan, math.nan, 0]


def _flatten(d, prefix="") -> dict:
    out = {}
    for key, value in d.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            out.update(_flatten(value, name + "."))
        else:
            out[name] = value.tolist() if isinstance(value, np.ndarray) else value
    return out


def _dict_difference(a: dict, b: dict) -> list:
    fa, fb = _flatten(a), _flatten(b)
    rows = []
    for key in sorted(set(fa) | set(fb)):
        x, y = fa.get(key), fb.get(key)
        if _normal(x) != _normal(y):
            rows.append({"key": key, "a": _plain(x), "b": _plain(y)})
    return rows


def _normal(v):
    """Tuples and lists alike (TOML and JSON give lists, the dataclasses tuples)."""
    if isinstance(v, (list, tuple)):
        return [_normal(x) for x in v]
    if isinstance(v, np.generic):
        return v.item()
    return v


def _plain(v):
    """JSON-ready: numpy scalars to Python, tuples to lists, non-finite floats to None."""
    if isinstance(v, dict):
        return {str(k): _plain(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_plain(x) for x in v]
    if isinstance(v, np.ndarray):
        return _plain(v.tolist())
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, bytes):
        return v.decode("utf-8", "replace")
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, CompareParams):
        return asdict(v)
    return v


def _few(values: list, limit: int) -> str:
    if not values:
        return "none"
    return ", ".join(map(str, values[:limit])) + (f" ... ({len(values)} in all)" if len(values) > limit else "")


def _span(s: list) -> str:
    return f"{s[0]:g}..{s[1]:g} s ({s[2]} samples)"


def _atomic_write(path: str | Path, data: bytes, force: bool) -> Path:
    path = Path(path)
    if path.exists() and not force:
        raise InputError(f"{path} exists; use --force to overwrite it")
    tmp = path.with_name(path.name + ".partial")
    try:
        with open(tmp, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise InputError(f"{path}: cannot write ({exc.strerror}); check the folder exists and is writable") from None
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


__all__ = ["compare_results", "ComparisonReport", "CompareParams", "FieldDifference", "PickDifference",
           "AxesDifference"]
