"""The 2D acoustic finite-difference modeller and the wave-equation line maker.

Expected values come from outside the modeller: exact Snell's-law times of the same flat layers
(velspec.synth.layers, itself checked against independent solutions in test_synth_multiples),
the far field of the 2D Green's function, the image-source ghost of a free surface, the plane-
wave reflection coefficient of two fluids, the leapfrog scheme's conserved energy and the
SEG-Y rev 1 layout as segyio reads it. Events are picked by cross-correlation with the Ricker
wavelet of tests/conftest.py (its own implementation of Ricker, 1953).
"""

import numpy as np
import pytest
import segyio
from conftest import WELLS, ricker

from velspec.errors import ParameterError
from velspec.params import COURANT_LIMITS, WaveParams
from velspec.synth import LineSpec, WaveLineSpec, make_line, make_wave_line, model_shot
from velspec.synth.layers import reflection_times
from velspec.synth.wave import choose_grid

FP = 25.0  # Hz
SERIAL = dict(threads=1)  # a shared, busy machine runs one thread best (no per-step sync)
PERIOD = 1.0 / FP
DT = 0.002


def pick(trace, t_pred, window=0.4 * PERIOD, dt=DT, fp=FP):
    """Time and amplitude of the Ricker wavelet that best matches ``trace`` near ``t_pred``.

    The correlation with a Ricker wavelet at a continuously shifted time is maximised over a
    0.05 ms grid of shifts within +-window.
    """
    t = np.arange(trace.size) * dt
    shifts = t_pred + np.arange(-window, window + 1e-9, 5e-5)
    w = ricker(t[None, :] - shifts[:, None], fp)
    c = w @ trace.astype(np.float64)
    k = int(np.argmax(np.abs(c)))
    return shifts[k], c[k] / np.sum(w[k] ** 2)


# --- a uniform medium: the 2D Green's function ------------------------------------------------

def test_direct_wave_has_the_time_and_amplitude_of_the_2d_greens_function():
    # Far field of the 2D Green's function H(t - r/c) / (2 pi sqrt(t^2 - r^2/c^2)) of a line
    # source (Morse & Feshbach, 1953, Methods of Theoretical Physics): amplitude ~ 1/sqrt(r),
    # and the modeller's source is scaled so that the wave is the Ricker wavelet / sqrt(r / 1 m).
    v, rho, depth = 1500.0, 1000.0, 300.0
    x = np.array([200.0, 400.0, 800.0])
    d = model_shot([2000.0], [v, v], [rho, rho], offsets=x, source_depth=depth, receiver_depth=depth,
                   free_surface=False, dt=DT, nsamples=300, peak_frequency=FP, **SERIAL)
    for k, r in enumerate(x):
        t_pick, amp = pick(d[k], r / v)
        assert abs(t_pick - r / v) < 0.02 * PERIOD  # 0.8 ms
        assert amp * np.sqrt(r) == pytest.approx(1.0, abs=0.01)


def test_free_surface_ghost_has_opposite_sign_and_the_image_delay():
    # A pressure-release surface reflects with coefficient -1: its ghost is the wave of an
    # image source at -z_s with the sign flipped (Sheriff & Geldart, 1995, Exploration
    # Seismology). Straight below the source the ghost lags by 2 z_s / v, and its 2D spreading
    # gives the amplitude ratio sqrt((D - z_s) / (D + z_s)).
    v, rho, zs, depth = 1500.0, 1000.0, 8.0, 200.0
    kw = dict(offsets=[0.0], source_depth=zs, receiver_depth=depth, dt=DT, nsamples=180, peak_frequency=FP)
    with_surface = model_shot([2000.0], [v, v], [rho, rho], free_surface=True, **kw, **SERIAL)[0]
    without = model_shot([2000.0], [v, v], [rho, rho], free_surface=False, **kw, **SERIAL)[0]
    ghost = with_surface.astype(np.float64) - without
    t_direct, a_direct = pick(without, (depth - zs) / v)
    t_ghost, a_ghost = pick(ghost, (depth + zs) / v)
    assert t_ghost - t_direct == pytest.approx(2 * zs / v, abs=0.01 * PERIOD)  # 0.4 ms of 10.7 ms
    assert np.sign(a_ghost) == -np.sign(a_direct)
    assert -a_ghost / a_direct == pytest.approx(np.sqrt((depth - zs) / (depth + zs)), rel=0.01)


# --- layered earth: arrival times against exact ray tracing -----------------------------------

# water, then a slow layer under a faster one, so that one reflection is negative
LAYERS = (np.array([300.0, 250.0, 300.0, 300.0]), np.array([1500.0, 2100.0, 1850.0, 2600.0, 3300.0]))
DENSITY = np.array([1000.0, 2050.0, 1980.0, 2250.0, 2400.0])
ZS, ZR = 6.0, 8.0
OFFSETS = np.array([100.0, 300.0, 450.0])


@pytest.fixture(scope="module")
def layered_shot():
    """No free surface, so each primary arrives once (no ghosts, no surface multiples)."""
    h, v = LAYERS
    return model_shot(h, v, DENSITY, offsets=OFFSETS, source_depth=ZS, receiver_depth=ZR,
                      free_surface=False, dt=DT, nsamples=700, peak_frequency=FP, **SERIAL)


def exact_reflections(x):
    """Exact times and ray parameters of the four primaries for a source at ZS, receivers at ZR.

    In flat layers only the summed path length in each layer matters at a given ray
    parameter, so the water legs (h0 - ZS) + (h0 - ZR) are those of a water layer of
    thickness h0 - (ZS + ZR) / 2 crossed twice.
    """
    h, v = LAYERS
    hh = h.copy()
    hh[0] -= 0.5 * (ZS + ZR)
    return reflection_times(hh, v, x)


def test_direct_and_reflected_arrivals_at_the_ray_traced_times(layered_shot):
    h, v = LAYERS
    t_exact, p = exact_reflections(OFFSETS)
    # the geometry is pre-critical everywhere (no head-wave interference, no phase change)
    assert np.all(p * np.maximum.accumulate(v)[1:, None] < 0.9)
    errors = []
    for k, x in enumerate(OFFSETS):
        direct = np.hypot(x, ZR - ZS) / v[0]  # straight ray in the water
        t_pick, _ = pick(layered_shot[k], direct)
        errors.append(t_pick - direct)
        for i in range(4):
            t_pick, _ = pick(layered_shot[k], t_exact[i, k])
            errors.append(t_pick - t_exact[i, k])
    errors = np.abs(errors)
    print(f"largest arrival-time error {errors.max() * 1e3:.2f} ms")
    assert errors.max() < 0.025 * PERIOD  # 1 ms, a fortieth of the dominant period


def test_sea_floor_amplitude_follows_the_fluid_reflection_coefficient():
    # Plane-wave reflection coefficient of two fluids, (Z2 cos t1 - Z1 cos t2) / (Z2 cos t1 +
    # Z1 cos t2) with Z = rho v (Rayleigh; Sheriff & Geldart, 1995), times the 2D spreading of
    # the image source, 1 / sqrt(path length), at pre-critical angles. A sharp interface's
    # coefficient converges as h^2 (5.5 % low at 6 m, 1.3 % at 3 m for this 0.46 contrast at
    # 25 Hz), so this check of the densities runs on a 2.5 m grid.
    h, v, rho = np.array([300.0]), np.array([1500.0, 2000.0]), np.array([1000.0, 2000.0])
    x = np.array([100.0, 300.0])
    data = model_shot(h, v, rho, offsets=x, source_depth=ZS, receiver_depth=ZR, free_surface=False,
                      dt=DT, nsamples=300, peak_frequency=FP, grid_spacing=2.5,
                      params=WaveParams(margin=60.0), **SERIAL)
    t_exact, p = reflection_times(h - 0.5 * (ZS + ZR), v, x)
    z1, z2 = rho * v
    for k in range(x.size):
        c1, c2 = np.sqrt(1 - (p[0, k] * v[0]) ** 2), np.sqrt(1 - (p[0, k] * v[1]) ** 2)
        R = (z2 * c1 - z1 * c2) / (z2 * c1 + z1 * c2)
        _, amp = pick(data[k], t_exact[0, k])
        assert amp * np.sqrt(v[0] * t_exact[0, k]) == pytest.approx(R, rel=0.02)


def test_reflection_polarity_follows_the_impedance_step(layered_shot):
    # normal-incidence coefficient (Z2 - Z1) / (Z2 + Z1): its sign is the wavelet's polarity
    h, v = LAYERS
    t_exact, _ = exact_reflections(OFFSETS)
    z = DENSITY * v
    for i in range(4):
        _, amp = pick(layered_shot[0], t_exact[i, 0])
        assert np.sign(amp) == np.sign(z[i + 1] - z[i])
    assert np.any(np.diff(z) < 0) and np.any(np.diff(z) > 0)  # both signs are checked


# --- the boundaries and the scheme -----------------------------------------------------------

@pytest.mark.slow
def test_absorbing_boundaries_leave_little_against_a_far_larger_grid():
    # On a grid whose boundaries are too far for any reflection from them to return within the
    # record, the record is the unbounded (free-surface) answer; the standard grid may differ
    # from it only by the residual reflections of its absorbing layers. The interior nodes are
    # the same on both grids, so nothing else differs.
    h, v = np.array([150.0, 400.0]), np.array([1500.0, 1900.0, 2500.0])
    rho = np.array([1025.0, 1950.0, 2100.0])
    x = np.arange(100.0, 1101.0, 100.0)
    kw = dict(offsets=x, source_depth=ZS, receiver_depth=ZR, dt=DT, nsamples=400, peak_frequency=FP)
    near = model_shot(h, v, rho, **kw, **SERIAL)
    # 2.2 km round trip to the far boundaries: longer than the 0.8 s record even at 2500 m/s
    far = model_shot(h, v, rho, params=WaveParams(margin=1100.0), **kw, **SERIAL)
    residual = np.abs(near.astype(np.float64) - far).max() / np.abs(far).max()
    print(f"absorbing-boundary residual {100 * residual:.3f} % of the largest amplitude")
    assert residual < 0.001


def test_energy_never_grows_once_the_source_stops():
    # The leapfrog scheme conserves sum p^2 / (2K) + rho v^- v^+ / 2 exactly without damping
    # (a standard property of staggered leapfrog schemes, e.g. Virieux, 1986); the free surface
    # (an image) adds nothing and the absorbing layers only take energy away. Run at 98 % of
    # the stability limit, where an unstable scheme would blow up quickly.
    h, v = np.array([150.0, 300.0]), np.array([1500.0, 2200.0, 3000.0])
    rho = np.array([1025.0, 2000.0, 2200.0])
    fp, n = 12.0, 600  # a low frequency keeps the grid small; 1.2 s is 2000 steps
    spacing = choose_grid(v.min(), v.max(), fp, DT)[0]
    limit = COURANT_LIMITS[WaveParams().order]
    step = DT / np.ceil(DT / (0.98 * limit * spacing / v.max()))
    data, energy = model_shot(h, v, rho, offsets=[200.0], dt=DT, nsamples=n, peak_frequency=fp,
                              grid_spacing=spacing, time_step=step, return_energy=True,
                              params=WaveParams(margin=50.0), **SERIAL)
    t = np.arange(n) * DT
    after = t > 3.0 / fp  # the source's half-integral tail has decayed by then
    e = energy[after]
    assert np.all(np.diff(e) <= 1e-5 * e.max())
    assert e[-1] < 0.05 * e.max()  # and the absorbing layers have taken most of it
    assert np.all(np.isfinite(data))


def test_same_bits_for_one_and_two_threads():
    h, v = np.array([150.0, 300.0]), np.array([1500.0, 2200.0, 3000.0])
    kw = dict(offsets=[100.0, 300.0, 500.0], dt=DT, nsamples=250, peak_frequency=12.0, return_energy=True,
              params=WaveParams(margin=50.0))
    one = model_shot(h, v, threads=1, **kw)
    two = model_shot(h, v, threads=2, **kw)
    three = model_shot(h, v, threads=3, **kw)  # more blocks than cores: still the same values
    assert np.array_equal(one[0], two[0]) and np.array_equal(one[1], two[1])
    assert np.array_equal(one[0], three[0])


# --- parameters that cannot work ------------------------------------------------------------

def test_grid_too_coarse_for_the_wavelet_is_refused():
    with pytest.raises(ParameterError, match="points per wavelength"):
        choose_grid(1500.0, 3000.0, 25.0, 0.004, grid_spacing=20.0)


def test_unstable_time_step_is_refused():
    with pytest.raises(ParameterError, match="unstable"):
        choose_grid(1500.0, 4000.0, 25.0, 0.004, grid_spacing=5.0, time_step=0.001)
    with pytest.raises(ParameterError, match="whole number"):
        choose_grid(1500.0, 4000.0, 25.0, 0.004, grid_spacing=5.0, time_step=0.0003)


@pytest.mark.parametrize("bad, match", [
    (dict(order=6), "order"), (dict(courant=0.7), "courant"), (dict(boundary_cells=2), "boundary_cells"),
    (dict(points_per_wavelength=1.0), "points_per_wavelength"),
])
def test_impossible_wave_parameters_are_refused(bad, match):
    with pytest.raises(ParameterError, match=match):
        WaveParams(**bad).validate()


def test_impossible_wave_line_writes_nothing(tmp_path):
    with pytest.raises(ParameterError, match="water"):
        make_wave_line(tmp_path / "bad.sgy", WaveLineSpec(source_depth=500.0))
    with pytest.raises(ParameterError, match="step_cmp"):
        make_wave_line(tmp_path / "bad.sgy", WaveLineSpec(model_b=WaveLineSpec().model))
    with pytest.raises(ParameterError, match="as many layers"):
        make_wave_line(tmp_path / "bad.sgy", WaveLineSpec(model_b=(np.array([300.0]), np.array([1500.0, 2000.0])),
                                                          step_cmp=1020))
    assert list(tmp_path.iterdir()) == []


# --- the line maker ---------------------------------------------------------------------------

LINE_H, LINE_V = np.array([150.0, 250.0, 300.0]), np.array([1480.0, 1750.0, 2100.0, 2600.0])
LINE_VB = LINE_V * np.array([1.0, 1.03, 1.03, 1.03])  # 3 % faster below the sea floor


def small_line(**kw):
    args = dict(ncmp=12, channels=24, nsamples=251, model=(LINE_H, LINE_V), model_b=(LINE_H, LINE_VB),
                step_cmp=1007)
    args.update(kw)
    return WaveLineSpec(**args)


@pytest.fixture(scope="module")
def wave_line(tmp_path_factory):
    d = tmp_path_factory.mktemp("waveline")
    truth = make_wave_line(d / "line.sgy", small_line(), cache_dir=d / "cache", threads=2)
    return d, truth


@pytest.mark.slow
def test_wave_line_headers_follow_the_standard_layout(wave_line):
    # SEG-Y rev 1 (2002), read by segyio: offset = |group x - source x| after the coordinate
    # scalar (-100: divide), and the CDP number is the midpoint's bin.
    d, truth = wave_line
    spec = truth.spec
    with segyio.open(d / "line.sgy", ignore_geometry=True) as f:
        assert f.tracecount == truth.ntraces
        assert f.samples.size == spec.nsamples and segyio.tools.dt(f) == spec.dt * 1e6
        h = f.header
        sx = np.array([h[i][segyio.TraceField.SourceX] for i in range(f.tracecount)]) / 100.0
        gx = np.array([h[i][segyio.TraceField.GroupX] for i in range(f.tracecount)]) / 100.0
        off = np.array([h[i][segyio.TraceField.offset] for i in range(f.tracecount)])
        cdp = np.array([h[i][segyio.TraceField.CDP] for i in range(f.tracecount)])
    assert np.allclose(np.abs(gx - sx), off)
    mid = 0.5 * (sx + gx)
    assert np.array_equal(cdp, spec.first_cmp + np.round((mid - spec.first_cmp_x) / (0.5 * spec.group_interval)))
    assert np.array_equal(np.bincount(cdp - spec.first_cmp), truth.fold)


@pytest.mark.slow
def test_each_cmp_takes_the_modelled_shot_of_its_part(wave_line):
    d, truth = wave_line
    spec = truth.spec
    offsets = spec.near_offset + np.arange(spec.channels) * spec.group_interval
    t = np.arange(spec.nsamples) * spec.dt
    gain = np.where(t > 0, t, 0.0) ** spec.gain_power
    shots = [model_shot(m[0], m[1], spec.densities(i), offsets=offsets, dt=spec.dt, nsamples=spec.nsamples,
                        grid_spacing=truth.grid_spacing, time_step=truth.time_step, **SERIAL)
             for i, m in enumerate(((LINE_H, LINE_V), (LINE_H, LINE_VB)))]
    with segyio.open(d / "line.sgy", ignore_geometry=True) as f:
        cdp = f.attributes(segyio.TraceField.CDP)[:]
        chan = f.attributes(segyio.TraceField.TraceNumber)[:] - 1
        data = f.trace.raw[:]
    part = (cdp >= spec.step_cmp).astype(int)
    assert set(part) == {0, 1}
    expect = np.stack([(shots[p][c] * gain).astype(np.float32) for p, c in zip(part, chan)])
    assert np.array_equal(data, expect)
    assert np.array_equal(truth.part, (truth.cmp >= spec.step_cmp).astype(int))


@pytest.mark.slow
def test_same_file_for_any_thread_count_and_from_the_cache(wave_line, tmp_path):
    d, first = wave_line
    again = make_wave_line(tmp_path / "serial.sgy", small_line(), threads=1)
    cached = make_wave_line(tmp_path / "cached.sgy", small_line(), cache_dir=d / "cache")
    reference = (d / "line.sgy").read_bytes()
    assert (tmp_path / "serial.sgy").read_bytes() == reference
    assert (tmp_path / "cached.sgy").read_bytes() == reference
    assert cached.model_seconds == [0.0, 0.0] and min(again.model_seconds) > 0


@pytest.mark.slow
def test_signal_to_noise_ratio_as_defined(wave_line, tmp_path):
    # WaveLineSpec.snr: RMS of the noise-free traces from the sea-floor reflection on (its
    # exact time at each offset less the wavelet's half-length) over the RMS of the noise
    d, _ = wave_line
    noisy = make_wave_line(tmp_path / "noisy.sgy", small_line(snr=2.0), cache_dir=d / "cache")
    with segyio.open(d / "line.sgy", ignore_geometry=True) as f:
        clean = f.trace.raw[:].astype(np.float64)
        off = f.attributes(segyio.TraceField.offset)[:].astype(float)
    with segyio.open(tmp_path / "noisy.sgy", ignore_geometry=True) as f:
        noise = f.trace.raw[:].astype(np.float64) - clean
    t = np.arange(clean.shape[1]) * noisy.spec.dt
    t_wb, _ = reflection_times(LINE_H[:1], LINE_V[:2], off)  # same water in both parts
    live = t[None, :] >= t_wb[0][:, None] - 1.5 / noisy.spec.peak_frequency
    ratio = np.sqrt(np.mean(clean[live] ** 2)) / np.std(noise)
    assert ratio == pytest.approx(2.0, rel=0.02)  # noise of a finite sample


@pytest.mark.slow
def test_truth_is_that_of_exact_ray_tracing_for_each_part(wave_line, tmp_path):
    # the ray-traced line's own truth (LineTruth of make_line) for the same model and geometry
    _, truth = wave_line
    spec = truth.spec
    for part, model in enumerate(((LINE_H, LINE_V), (LINE_H, LINE_VB))):
        ray = make_line(tmp_path / f"ray{part}.sgy", LineSpec(
            ncmp=spec.ncmp, channels=spec.channels, nsamples=spec.nsamples, model=model,
            density=spec.densities(part), multiples=True, reverberation_order=spec.reverberation_order,
            pegleg_order=spec.pegleg_order))
        rows = truth.part == part
        assert np.allclose(truth.t0[rows], ray.t0[rows]) and np.allclose(truth.vrms[rows], ray.vrms[rows])
        assert np.allclose(truth.reflection_coefficient[rows], ray.reflection_coefficient[rows])
        vs, _ = truth.stacking_velocity(stretch_limit=0.5)
        assert np.allclose(vs[rows], ray.stacking_velocity(stretch_limit=0.5)[0][rows], equal_nan=True)
        mine, theirs = truth.multiple_events(), ray.multiple_events()
        assert np.array_equal(mine.kind, theirs.kind)
        for name in ("t0", "vstack", "amplitude"):
            assert np.allclose(getattr(mine, name)[rows], getattr(theirs, name)[rows], equal_nan=True)
    assert spec.reverberation_order == int(1.0 / (2 * 150.0 / 1480.0)) - 1  # orders within the 1 s record


def test_sonic_model_keeps_the_logs_integrated_time():
    # the open F03-02 log (../shared/data/wells): the blocks below the assumed overburden keep
    # the two-way time of the sonic integrated over its depth range (trapezoid rule)
    las = WELLS / "F03-02.las"
    if not las.exists():
        pytest.skip(f"open well log {las} not present (shared data absent)")
    from velspec.io.las import read_sonic
    from velspec.synth import sonic_wave_model

    h, v, rho = sonic_wave_model(las, water_depth=120.0, overburden_velocity=1650.0, block_thickness=20.0)
    depth, dt = read_sonic(las)
    ok = np.isfinite(dt) & (dt > 0)
    log_time = 2 * np.trapezoid(dt[ok] * 1e-6 / 0.3048, depth[ok])
    assert np.sum(2 * h[2:] / v[2:-1]) == pytest.approx(log_time, rel=1e-9)
    assert h[0] == 120.0 and v[0] == 1480.0 and rho[0] == 1025.0
    assert h[1] == pytest.approx(depth[ok].min() - 120.0) and v[1] == 1650.0
    assert np.mean(h[2:]) == pytest.approx(20.0, rel=0.1)
