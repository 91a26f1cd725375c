"""The line-wide regularised interval-velocity field (velspec.regularised) against layered models
whose RMS velocities are computed here from Dix (1955), against scipy's bounded least squares
on the documented cost, and for its bounds, weights, lateral fill and depth conversion."""

import numba
import numpy as np
import pytest
from scipy.optimize import lsq_linear

from velspec.errors import ParameterError, VelspecError
from velspec.params import IntervalParams
from velspec.regularised import NoPicksError, depth_from_interval, regularised_dix

DT = 0.004


def layer_picks(dt_layers, vint):
    """Two-way time and RMS velocity at each layer base, V_rms^2 t = sum v_k^2 dt_k (Dix, 1955,
    Seismic velocities from surface measurements, Geophysics 20, 68-86), from the layer table."""
    dt_layers = np.asarray(dt_layers, dtype=float)
    vint = np.asarray(vint, dtype=float)
    t = np.cumsum(dt_layers)
    return t, np.sqrt(np.cumsum(vint**2 * dt_layers) / t)


def line_of(models, nt=500):
    """Picks of several CMPs, one (dt_layers, vint) model or None (no picks) per CMP, 1 % sigma."""
    t0 = np.arange(nt) * DT
    rows, ts, vs = [], [], []
    for c, model in enumerate(models):
        if model is None:
            continue
        t, v = layer_picks(*model)
        rows.append(np.full(t.size, c))
        ts.append(t)
        vs.append(v)
    t, v = np.concatenate(ts), np.concatenate(vs)
    return t0, np.concatenate(rows), t, v, 0.01 * v


def mid_layer_samples(t0, dt_layers, margin=0.05):
    """Samples at least ``margin`` s inside each layer, per layer."""
    tb = np.concatenate(([0.0], np.cumsum(dt_layers)))
    return [np.flatnonzero((t0 > a + margin) & (t0 < b - margin)) for a, b in zip(tb[:-1], tb[1:])]


THICK = ([0.4, 0.3, 0.6, 0.5], [1500.0, 2000.0, 2600.0, 3200.0])


def test_thick_layers_are_recovered_mid_layer():
    t0, rows, t, v, s = line_of([THICK] * 5)
    out = regularised_dix(t0, rows, t, v, s, 5)
    assert out.converged
    for k, idx in enumerate(mid_layer_samples(t0, THICK[0])):
        # layer velocities of the model; picks at Dix (1955) RMS velocities computed above
        assert np.all(np.abs(out.vint[:, idx] / THICK[1][k] - 1) < 0.03), k
    # consistent exact picks are fitted: misfits far below one sigma
    assert np.all(np.abs(out.misfit) < 0.1)


def test_predicted_stacking_velocity_is_dix_of_the_interval_field():
    # V(t)^2 t = integral of v_int^2 dt (Dix, 1955), summed here over the returned field's cells
    t0, rows, t, v, s = line_of([THICK, None, THICK])
    out = regularised_dix(t0, rows, t, v, s, 3)
    dts = np.diff(np.concatenate(([0.0], t0)))
    b = np.cumsum(out.vint.astype(float) ** 2 * dts, axis=1)
    assert np.allclose(out.vrms[:, 1:], np.sqrt(b[:, 1:] / t0[1:]), rtol=1e-5)


def test_a_pick_with_a_large_sigma_moves_the_field_less():
    # weighted least squares: a datum's pull falls with its uncertainty (common practice, no source)
    t0, rows, t, v, s = line_of([THICK] * 3)
    base = regularised_dix(t0, rows, t, v, s, 3).vint.astype(float)
    k = np.flatnonzero(rows == 1)[1]               # the second pick of the middle CMP
    bumped = v.copy()
    bumped[k] *= 1.05
    normal = regularised_dix(t0, rows, t, bumped, s, 3).vint.astype(float)
    loose_sigma = s.copy()
    loose_sigma[k] *= 10
    loose = regularised_dix(t0, rows, t, bumped, loose_sigma, 3).vint.astype(float)
    moved_normal = np.abs(normal - base).max()
    moved_loose = np.abs(loose - base).max()
    assert moved_normal > 20.0                     # m/s: the perturbation is seen at all
    assert moved_loose < 0.5 * moved_normal


def test_a_gas_layer_slower_than_the_floor_is_held_at_it():
    # a 1250 m/s gas sand under 2400 m/s rock (raw Dix below a 1400 m/s floor; Dix, 1955)
    gas = ([0.5, 0.24, 0.6], [2400.0, 1250.0, 3000.0])
    t0, rows, t, v, s = line_of([gas] * 4)
    params = IntervalParams(vint_min=1400.0, vint_max=7000.0)
    out = regularised_dix(t0, rows, t, v, s, 4, params)
    assert out.converged
    assert out.vint.min() >= np.float32(1400.0)     # never below the bound
    idx = mid_layer_samples(t0, gas[0])[1]
    assert np.allclose(out.vint[:, idx], 1400.0, atol=0.5)
    assert out.at_bound[:, idx].all()
    # the gas layer's base is fitted too slowly from the floor: its pick is predicted too fast
    assert np.all(out.misfit[1::3] > 0)


def test_a_cmp_without_picks_gets_a_field_between_its_neighbours():
    slow = THICK
    fast = (THICK[0], [v * 1.15 for v in THICK[1]])
    t0, rows, t, v, s = line_of([slow, None, fast])
    out = regularised_dix(t0, rows, t, v, s, 3)
    for idx in mid_layer_samples(t0, THICK[0]):
        lo = np.minimum(out.vint[0, idx], out.vint[2, idx])
        hi = np.maximum(out.vint[0, idx], out.vint[2, idx])
        # lateral smoothing interpolates (common practice, no source): strictly between
        assert np.all((out.vint[1, idx] > lo) & (out.vint[1, idx] < hi))


def test_cmp_coordinates_set_the_lateral_coupling():
    # a CMP 10 m from one neighbour and 1 km from the other follows the near one (common
    # practice, no source: smoothing weighs neighbours by their distance)
    slow = THICK
    fast = (THICK[0], [v * 1.15 for v in THICK[1]])
    t0, rows, t, v, s = line_of([slow, None, fast])
    out = regularised_dix(t0, rows, t, v, s, 3, cmp_x=np.array([0.0, 10.0, 1010.0]))
    idx = mid_layer_samples(t0, THICK[0])[2]
    assert np.all(np.abs(out.vint[1, idx] - out.vint[0, idx]) < np.abs(out.vint[1, idx] - out.vint[2, idx]))


def documented_cost(t0, rows, t, v, s, ncmp, params):
    """The cost of velspec.regularised's module notes, written out as one dense matrix here."""
    tc = t0[1:]                                   # t0[0] = 0: that sample copies the one below
    n = tc.size
    dt = np.diff(np.concatenate(([0.0], tc)))
    top = tc - dt
    order = np.argsort(t, kind="stable")
    parts = np.array_split(order, min(20, t.size))
    tk = np.array([np.median(t[i]) for i in parts])
    vk = np.array([np.median(v[i]) for i in parts])
    first = np.concatenate(([True], np.diff(tk) > 0))     # groups of one median time: the first
    uref = np.interp(tc, tk[first], vk[first]) ** 2
    eqs, rhs = [], []
    for c, ti, vi, si in zip(rows, t, v, s):
        row = np.zeros(ncmp * n)
        row[c * n:(c + 1) * n] = np.clip(ti - top, 0.0, dt)        # integral of u to ti
        w = 1.0 / (2 * ti * vi * si)
        eqs.append(row * w)
        rhs.append(ti * vi * vi * w)
    steps = set()
    for c, ti in zip(rows, t):
        j = np.searchsorted(tc, ti)
        steps.add((c, j - 1 if (ti - top[j]) / dt[j] < 0.5 else j))
    with_picks = sorted(set(rows.tolist()))
    for c in sorted(set(range(ncmp)) - set(with_picks)):   # steps of the nearest CMPs with picks
        near = [max([r for r in with_picks if r < c], default=None),
                min([r for r in with_picks if r > c], default=None)]
        steps |= {(c, j) for r, j in list(steps) if r in near}
    for c in range(ncmp):
        for j in range(n - 1):
            up = 0.5 * (uref[j] + uref[j + 1])
            sd = (params.step_variation if (c, j) in steps
                  else params.time_variation * np.sqrt(0.5 * (dt[j] + dt[j + 1])))
            row = np.zeros(ncmp * n)
            row[c * n + j + 1], row[c * n + j] = 1.0, -1.0
            eqs.append(row / (2 * up * sd))
            rhs.append(0.0)
    for c in range(ncmp - 1):
        for j in range(n):
            sd = params.lateral_variation * np.sqrt(params.cmp_spacing / 1000.0) / np.sqrt(dt[j])
            row = np.zeros(ncmp * n)
            row[(c + 1) * n + j], row[c * n + j] = 1.0, -1.0
            eqs.append(row / (2 * uref[j] * sd))
            rhs.append(0.0)
    return np.array(eqs), np.array(rhs)


@pytest.mark.parametrize("vmin, vmax", [(1400.0, 3500.0), (1750.0, 1900.0)])
def test_solver_agrees_with_scipy_bounded_least_squares(vmin, vmax):
    # reference library: scipy.optimize.lsq_linear (bounded-variable least squares, Stark &
    # Parker, 1995) on the same cost; the second case has many cells held at the bounds
    t0 = np.arange(60) * 0.01
    rows = np.array([0, 0, 0, 2, 2, 4, 4, 4, 4])
    t = np.array([0.1, 0.25, 0.5, 0.2, 0.45, 0.05, 0.2, 0.333, 0.59])
    v = np.array([1600, 1800, 2000, 1700, 2100, 1500, 1650, 1500, 2300.0])
    s = np.full(9, 30.0)
    params = IntervalParams(vint_min=vmin, vint_max=vmax)
    out = regularised_dix(t0, rows, t, v, s, 5, params)
    a, b = documented_cost(t0, rows, t, v, s, 5, params)
    scale = 1e6
    ref = lsq_linear(a * scale, b, bounds=(vmin**2 / scale, vmax**2 / scale), method="bvls", tol=1e-14)
    expect = np.sqrt(ref.x * scale).reshape(5, -1)
    assert out.converged
    assert np.abs(out.vint[:, 1:] - expect).max() < 0.05          # m/s
    assert np.allclose(out.vint[:, 0], out.vint[:, 1])


def test_same_bits_on_one_and_two_threads():
    # the project's rule: each output value computed by one thread in a fixed order
    gas = ([0.5, 0.24, 0.6], [2400.0, 1250.0, 3000.0])
    t0, rows, t, v, s = line_of([gas, None, THICK, THICK, None, gas])
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = regularised_dix(t0, rows, t, v, s, 6)
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        two = regularised_dix(t0, rows, t, v, s, 6)
    finally:
        numba.set_num_threads(before)
    assert np.array_equal(one.vint, two.vint) and np.array_equal(one.misfit, two.misfit)


def test_no_picks_on_the_line_is_a_clear_error():
    empty = np.array([])
    with pytest.raises(NoPicksError, match="no used pick") as err:
        regularised_dix(np.arange(10) * DT, empty.astype(int), empty, empty, empty, 3)
    assert isinstance(err.value, ValueError) and isinstance(err.value, VelspecError)


@pytest.mark.parametrize("change, message", [
    (dict(pick_t0=np.array([9.0])), "pick times"),
    (dict(pick_cmp=np.array([5])), "pick_cmp"),
    (dict(pick_sigma=np.array([0.0])), "sigmas"),
    (dict(cmp_x=np.array([0.0, 0.0, 5.0])), "distinct"),
])
def test_bad_arrays_are_refused(change, message):
    args = dict(t0=np.arange(100) * DT, pick_cmp=np.array([1]), pick_t0=np.array([0.2]),
                pick_v=np.array([2000.0]), pick_sigma=np.array([20.0]), ncmp=3)
    args.update(change)
    with pytest.raises(ValueError, match=message):
        regularised_dix(**args)


@pytest.mark.parametrize("name, value", [("time_variation", 0.0), ("step_variation", -1.0),
                                         ("lateral_variation", float("nan")), ("cmp_spacing", 0.0),
                                         ("solver_tolerance", 0.5), ("solver_iterations", 0)])
def test_bad_parameters_are_refused(name, value):
    with pytest.raises(ParameterError, match=name):
        IntervalParams(**{name: value}).validate()


def test_depth_of_a_layered_model():
    # depth = sum v_k dt_k / 2 over two-way time (Dix, 1955; common practice, no source)
    dt_layers = np.array([0.4, 0.3, 0.6, 0.5])
    vlayers = np.array([1500.0, 2000.0, 2600.0, 3200.0])
    tb = np.cumsum(dt_layers)
    depth = np.cumsum(vlayers * dt_layers / 2.0)        # 300, 600, 1380, 2180 m
    t0 = np.arange(501) * DT
    vint = vlayers[np.minimum(np.searchsorted(tb, t0, side="left"), 3)]
    z, tz, vz, vavg = depth_from_interval(t0, np.stack([vint, vint]), 5.0)
    for k in range(4):
        z_at = np.interp(tb[k], tz[0], z)
        assert abs(z_at / depth[k] - 1) < 0.005, k
        # average velocity to a layer base = depth / one-way time
        assert abs(np.interp(depth[k], z, vavg[1]) / (2 * depth[k] / tb[k]) - 1) < 0.005, k
        mid = 0.5 * (depth[k] + (depth[k - 1] if k else 0.0))
        assert vz[0, np.searchsorted(z, mid)] == vlayers[k]
    z1, tz1, vz1, vavg1 = depth_from_interval(t0, vint, 5.0)       # one CMP as a 1-D array
    assert np.array_equal(tz1, tz[0]) and np.array_equal(vavg1, vavg[0])
