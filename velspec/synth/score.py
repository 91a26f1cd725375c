"""Scoring an analysis of a generated line against what the line was made from.

The expected answers come from outside the analysis: exact Snell's-law traveltimes through the
flat layers of each CMP's model, the best-fit hyperbola of those times over the spread the run
used (after the stretch mute), and the layer velocities themselves.

- Stacking velocity: at each reflector's zero-offset time, the picked field against the
  best-fit stacking velocity of the exact times. A value between that and the true RMS
  velocity counts as right (the two differ by the spread-length bias, which no picker should
  be blamed for); elsewhere the error is the distance to the nearer of the two.
- Interval velocity: over blocks of equal two-way time, the time-average of the picked interval
  velocity against the time-average of the model's layer velocities over the same block.
- Multiples: a used pick on a multiple is one within a time and velocity tolerance of a
  modelled multiple event and not within them of any primary.

References
----------
Taner, M. T., and Koehler, F., 1969, Velocity spectra: digital computer derivation and
applications of velocity functions: Geophysics 34, 859-881 (stacking vs RMS velocity).
Dix, C. H., 1955, Seismic velocities from surface measurements: Geophysics 20, 68-86.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from velspec.flags import Flag


@dataclass
class Score:
    """Errors of one analysed line (relative errors as fractions)."""

    vrms_errors: np.ndarray       # every (CMP, reflector) checked
    vint_errors: np.ndarray       # every (CMP, block) checked
    picks_on_multiples: int
    used_picks: int
    flagged_multiples: int
    field_errors: np.ndarray = None      # every (CMP, t0 sample) from tmin to the deepest reflector
    field_z: np.ndarray = None           # the same over the stated vrms_sigma
    sea_floor_errors: np.ndarray = None  # |found - true| water-bottom time per CMP, s (NaN: not found)

    def summary(self) -> dict:
        def pct(a, q):
            return float(100 * np.percentile(a, q)) if a.size else float("nan")

        out = {"vrms_median_pct": pct(self.vrms_errors, 50), "vrms_p95_pct": pct(self.vrms_errors, 95),
                "vrms_max_pct": pct(self.vrms_errors, 100), "vrms_checked": int(self.vrms_errors.size),
                "vint_median_pct": pct(self.vint_errors, 50), "vint_p90_pct": pct(self.vint_errors, 90),
                "vint_checked": int(self.vint_errors.size), "picks_on_multiples": self.picks_on_multiples,
                "used_picks": self.used_picks, "flagged_multiples": self.flagged_multiples}
        if self.field_errors is not None:
            f = self.field_errors
            out.update(field_median_pct=pct(f, 50), field_p95_pct=pct(f, 95), field_max_pct=pct(f, 100),
                       field_checked=int(f.size))
        if self.field_z is not None and self.field_z.size:
            out.update(field_within_2sigma_pct=float(100 * np.mean(self.field_z <= 2.0)))
        if self.sea_floor_errors is not None:
            e = self.sea_floor_errors
            out.update(sea_floor_within_8ms_pct=float(100 * np.mean(np.nan_to_num(e, nan=1.0) <= 0.008)),
                       sea_floor_p95_ms=float(1000 * np.percentile(np.nan_to_num(e, nan=1.0), 95)))
        return out


def true_rms(thickness: np.ndarray, velocity: np.ndarray, t: np.ndarray) -> np.ndarray:
    """RMS velocity of a flat layered model down to each two-way time ``t`` (Dix, 1955):
    V(t)^2 = integral_0^t v^2 dt' / t, the layer velocities constant in time inside each layer
    and the half-space below the last interface."""
    tb = np.concatenate(([0.0], np.cumsum(2.0 * thickness / velocity[:-1])))          # (n + 1,)
    cum = np.concatenate(([0.0], np.cumsum(velocity[:-1] ** 2 * np.diff(tb))))       # integral to each
    k = np.clip(np.searchsorted(tb, t, side="right") - 1, 0, velocity.size - 1)
    integral = cum[k] + velocity[k] ** 2 * (t - tb[k])
    return np.sqrt(integral / np.maximum(t, 1e-12))


def field_errors(result, truth, vstack: np.ndarray, tmin: float = 0.3, min_reflectivity: float = 1e-3,
                 sigma: bool = False):
    """Relative error of the stacking-velocity field on every t0 sample from ``tmin`` to the
    deepest reflector, against the band from the true RMS velocity to the best-fit stacking
    velocity of the exact times.

    Between reflectors the band is the true RMS velocity of the model at that time (exact, from
    the layers) and that times the ratio of best-fit stacking to RMS velocity, interpolated
    linearly in time between the reflectors (held beyond the first and last): the spread-length
    bias varies slowly with time, the RMS velocity does not need to be interpolated at all.
    With ``sigma``, the same samples' error over the result's stated ``vrms_sigma`` too.
    """
    out, zs = [], []
    for row, cmp in enumerate(result.cmp):
        b = int(np.flatnonzero(truth.cmp == cmp)[0])
        t_ref = truth.t0[b]
        ok = np.isfinite(vstack[b]) & (np.abs(truth.reflection_coefficient[b]) > min_reflectivity)
        if not ok.any():
            continue
        deepest = min(float(t_ref[ok].max()), float(result.t0[-1]))
        sel = (result.t0 >= tmin) & (result.t0 <= deepest)
        t = result.t0[sel]
        rms = true_rms(truth.thickness[b], truth.velocity[b], t)
        ratio = np.interp(t, t_ref[ok], vstack[b][ok] / truth.vrms[b][ok])
        lo, hi = np.minimum(rms, rms * ratio), np.maximum(rms, rms * ratio)
        got = result.vrms[row][sel].astype(np.float64)
        miss = np.where(got < lo, lo - got, np.where(got > hi, got - hi, 0.0))
        out.append(miss / hi)
        if sigma and result.vrms_sigma is not None:
            zs.append(miss / np.maximum(result.vrms_sigma[row][sel].astype(np.float64), 1e-6))
    errors = np.concatenate(out) if out else np.zeros(0)
    if sigma:
        return errors, (np.concatenate(zs) if zs else None)
    return errors


def sea_floor_errors(result, truth) -> np.ndarray | None:
    """|found - true| water-bottom two-way time per CMP, s (NaN where it is wrong: none found at
    sea, or one found on land), or None when the result has no ``/qc/water_bottom``.

    The model is marine when its first layer has the velocity of sea water (1400-1600 m/s,
    common practice, no source); the true time is then that layer's 2 h / v. On land the right
    answer is none: 0 where none was found."""
    if "water_bottom" not in result.qc:
        return None
    rows = [int(np.flatnonzero(truth.cmp == c)[0]) for c in result.cmp]
    found = np.asarray(result.qc["water_bottom"], dtype=np.float64)
    marine = (truth.velocity[rows, 0] >= 1400.0) & (truth.velocity[rows, 0] <= 1600.0)
    true = 2.0 * truth.thickness[rows, 0] / truth.velocity[rows, 0]
    return np.where(marine, np.abs(found - true), np.where(np.isfinite(found), np.nan, 0.0))


def score_line(result, truth, stretch_limit: float, tmin: float = 0.3, block: float = 0.150,
               min_reflectivity: float = 1e-3, multiple_tolerance: tuple[float, float] = (0.024, 0.03),
               multiples=None) -> Score:
    """Score ``result`` (a :class:`velspec.LineAnalysis`) against ``truth`` (a LineTruth).

    Parameters
    ----------
    stretch_limit : float
        The run's stretch mute, so that the best-fit stacking velocity uses the same spread.
    tmin : float
        Reflectors above this time are not checked, s.
    block : float
        Length of the interval-velocity blocks, s.
    min_reflectivity : float
        Interfaces with a smaller reflection coefficient make no event and are not checked.
    multiple_tolerance : (s, fraction)
        How close in time and relative velocity a pick must be to an event to be "on" it.
    multiples : MultipleEvents, optional
        The modelled multiples (``truth.multiple_events(...)``: ``t0`` and ``vstack``, (ncmp, E)).
    """
    vstack, _ = truth.stacking_velocity(stretch_limit=stretch_limit)
    t_axis, cmps, vrms_f, vint_f = result.t0, result.cmp, result.vrms, result.vint
    vrms_err, vint_err = [], []
    for row, cmp in enumerate(cmps):
        b = int(np.flatnonzero(truth.cmp == cmp)[0])
        t_ref = truth.t0[b]
        use = (t_ref >= tmin) & (np.abs(truth.reflection_coefficient[b]) > min_reflectivity) & (t_ref <= t_axis[-1])
        use &= np.isfinite(vstack[b])
        got = np.interp(t_ref[use], t_axis, vrms_f[row])
        lo = np.minimum(vstack[b][use], truth.vrms[b][use])
        hi = np.maximum(vstack[b][use], truth.vrms[b][use])
        miss = np.where(got < lo, lo - got, np.where(got > hi, got - hi, 0.0))
        vrms_err.append(miss / vstack[b][use])
        # interval velocity: time averages over blocks between the first checked reflector and
        # the last one (below it the field only extends the last layer)
        if use.sum() >= 2:
            start, stop = float(t_ref[use][0]), float(t_ref[use][-1])
            edges = np.arange(start, stop - 0.5 * block + 1e-9, block)
            tb = np.concatenate(([0.0], np.cumsum(2.0 * truth.thickness[b] / truth.velocity[b][:-1])))
            for e in edges:
                fine = np.linspace(e, min(e + block, stop), 301)
                mid = 0.5 * (fine[1:] + fine[:-1])
                layer = np.clip(np.searchsorted(tb, mid, side="right") - 1, 0, truth.velocity.shape[1] - 1)
                true_mean = float(np.mean(truth.velocity[b][layer]))
                got_mean = float(np.mean(np.interp(mid, t_axis, vint_f[row])))
                vint_err.append([abs(got_mean - true_mean) / true_mean])
    vrms_err = np.concatenate(vrms_err) if vrms_err else np.zeros(0)
    vint_err = np.concatenate([np.asarray(v) for v in vint_err]) if vint_err else np.zeros(0)

    picks = result.picks
    pick_cmp, pick_t, pick_v, flags = picks["cmp"], picks["t0"], picks["vrms"], picks["flags"]
    used = result.used

    on_multiple = 0
    if multiples is not None:
        dt_tol, dv_tol = multiple_tolerance
        for i in np.flatnonzero(used):
            b = int(np.flatnonzero(truth.cmp == pick_cmp[i])[0])
            near_p = (np.abs(truth.t0[b] - pick_t[i]) < dt_tol) & (
                np.abs(pick_v[i] - vstack[b]) < dv_tol * vstack[b])
            mt, mv = multiples.t0[b], multiples.vstack[b]
            near_m = (np.abs(mt - pick_t[i]) < dt_tol) & (np.abs(pick_v[i] - mv) < dv_tol * mv)
            if near_m.any() and not near_p.any():
                on_multiple += 1
    fe = field_errors(result, truth, vstack, tmin, min_reflectivity, sigma=True)
    return Score(vrms_errors=vrms_err, vint_errors=vint_err, picks_on_multiples=on_multiple,
                 used_picks=int(used.sum()), flagged_multiples=int(((flags & int(Flag.likely_multiple)) != 0).sum()),
                 field_errors=fe[0], field_z=fe[1],
                 sea_floor_errors=sea_floor_errors(result, truth))
