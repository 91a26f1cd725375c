"""Constrained Dix inversion (Dix, 1955, Seismic velocities from surface measurements,
Geophysics 20, 68-86) against independently built layered models and a reference solver."""

import numpy as np
from scipy.optimize import minimize

from velspec.interval import constrained_dix, depth_fields, fields_from_picks
from velspec.params import IntervalParams


def layered_rms(thickness, vint):
    """RMS velocity at each layer base: V^2 = sum v_k^2 dt_k / sum dt_k (Dix, 1955, eq. for V_rms),
    evaluated here directly from the layer table, independent of velspec."""
    dt = 2.0 * np.asarray(thickness) / np.asarray(vint)
    t = np.cumsum(dt)
    return t, np.sqrt(np.cumsum(np.asarray(vint) ** 2 * dt) / t)


def test_recovers_interval_velocities_of_a_layered_model():
    thickness = np.array([400.0, 650.0, 500.0, 900.0, 700.0])
    vint = np.array([1800.0, 2300.0, 2100.0, 3200.0, 4100.0])
    t, vrms = layered_rms(thickness, vint)
    out = constrained_dix(t, vrms, 1400.0, 7000.0)
    assert np.allclose(out.vint, vint, rtol=1e-9)
    assert not out.forced.any()


def test_dix_formula_by_hand():
    # Dix (1955): v_n^2 = (t_n V_n^2 - t_{n-1} V_{n-1}^2) / (t_n - t_{n-1}). Evaluated by hand:
    # V = 2000 m/s at 1.0 s and 2500 m/s at 2.0 s -> v = sqrt(2*2500^2 - 2000^2) = 2915.48 m/s.
    out = constrained_dix([1.0, 2.0], [2000.0, 2500.0], 1400.0, 7000.0)
    assert abs(out.vint[1] - 2915.476) < 0.01
    assert abs(out.vint[0] - 2000.0) < 1e-9


def test_bounds_force_and_flag_a_slow_layer():
    # A gas sand at 1250 m/s under 2400 m/s rock: raw Dix is below a 1400 m/s floor. The bounded
    # least-squares answer must agree with an independent bounded solver (scipy L-BFGS-B on
    # the same weighted problem) and be flagged as forced.
    thickness = np.array([600.0, 150.0, 800.0])
    vint = np.array([2400.0, 1250.0, 3000.0])
    t, vrms = layered_rms(thickness, vint)
    out = constrained_dix(t, vrms, 1400.0, 7000.0)
    assert out.vint.min() >= 1400.0 - 1e-9 and out.vint.max() <= 7000.0 + 1e-9
    assert out.forced[1] and abs(out.vint_raw[1] - 1250.0) < 1e-6

    dt = np.diff(np.concatenate(([0.0], t)))
    a = np.tril(np.ones((3, 3))) * dt
    b = t * vrms**2
    w = 1.0 / b
    obj = lambda u: np.sum(((a @ u - b) * w) ** 2)  # noqa: E731
    ref = minimize(obj, x0=np.full(3, 2500.0**2), bounds=[(1400.0**2, 7000.0**2)] * 3, method="L-BFGS-B",
                   options={"ftol": 1e-16, "gtol": 1e-14, "maxiter": 10000})
    assert np.allclose(out.vint, np.sqrt(ref.x), rtol=2e-3)


def test_never_nan_or_negative_for_inconsistent_picks():
    # Picks whose t*V^2 decreases have no real Dix velocity (common practice, no source): the
    # result stays real and inside the range.
    out = constrained_dix([0.5, 1.0, 1.5], [2500.0, 1600.0, 2600.0], 1400.0, 7000.0)
    assert np.all(np.isfinite(out.vint)) and out.vint.min() >= 1400.0 - 1e-9
    assert out.vint_raw[1] < 0 and out.forced[1]


def test_fields_hold_constant_interval_velocity_between_picks():
    # Between picks t0*V^2 is linear, so Dix of the sampled field equals the pick-interval value.
    thickness = np.array([500.0, 800.0, 1000.0])
    vint = np.array([2000.0, 2600.0, 3400.0])
    t, vrms = layered_rms(thickness, vint)
    t0 = np.arange(1, 1001) * 0.004
    f = fields_from_picks(t0, t, vrms, IntervalParams())
    inside = t0 <= t[-1]
    b = t0 * f.vrms.astype(np.float64) ** 2
    dix = np.sqrt(np.diff(b) / np.diff(t0))
    expect = vint[np.searchsorted(t, t0[1:], side="left").clip(0, 2)]
    ok = inside[1:] & (np.min(np.abs(t0[1:, None] - t[None, :]), axis=1) > 0.005)
    assert np.allclose(dix[ok], expect[ok], rtol=1e-3)
    assert np.allclose(f.vint[inside], vint[np.searchsorted(t, t0[inside], side="left")], rtol=1e-6)


def test_depth_of_layer_bases():
    # z = sum v dt / 2 over two-way time (exact for a layered model: the layer thicknesses).
    thickness = np.array([500.0, 800.0])
    vint = np.array([2000.0, 3200.0])
    tb = np.cumsum(2 * thickness / vint)
    t0 = np.arange(1, 501) * 0.002
    v = np.where(t0 <= tb[0], vint[0], vint[1])[None, :]
    z, tz, vz = depth_fields(t0, v, 10.0)
    assert abs(np.interp(500.0, z, tz[0]) - tb[0]) < 0.002
    assert abs(np.interp(1300.0, z, tz[0]) - tb[1]) < 0.002
    assert vz[0, np.searchsorted(z, 450.0)] == 2000.0 and vz[0, np.searchsorted(z, 900.0)] == 3200.0
