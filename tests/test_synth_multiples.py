"""Water-layer reverberations, peg-legs and first-order multiples of the synthetic line generator.

Times are checked against straight-ray geometry and an independent Snell's-law solution by
scipy.optimize.brentq; amplitudes against an enumeration of every ray path in the test itself
(free surface -1, no transmission loss); the written SEG-Y is read back with segyio; stacking
velocities are checked against numpy.polyfit.
"""

import dataclasses

import numpy as np
import pytest
import segyio
from scipy.optimize import brentq

from velspec.errors import ParameterError
from velspec.synth import (
    LineSpec,
    event_times,
    make_line,
    path_crossings,
    reverb_spec,
    ricker,
)
from velspec.synth.layers import FADE_START, FADE_STOP

TF = segyio.TraceField
SMALL = dict(ncmp=4, channels=24, first_cmp=2001)

MODELS = {
    "increasing": (np.array([200.0, 600.0, 800.0]), np.array([1500.0, 2200.0, 2900.0, 3500.0])),
    "slow layer": (
        np.array([150.0, 500.0, 300.0, 700.0]),
        np.array([1480.0, 2600.0, 2000.0, 3300.0, 4000.0]),
    ),
    "fast on top": (np.array([300.0, 300.0]), np.array([3000.0, 2000.0, 2500.0])),
}


def snell_brentq(h, v, n, x):
    """Independent solution of the flat-layer ray equations for crossing counts n (Snell's law).

    Solves x(p) = sum n_i h_i v_i p / sqrt(1 - p^2 v_i^2) for p with scipy's brentq, then
    t = sum n_i h_i / (v_i sqrt(1 - p^2 v_i^2)). h, v, n: layers crossed (n_i > 0 only).
    """
    use = n > 0
    h, v, n = h[use], v[use], n[use]
    pmax = 1.0 / v.max()
    t = np.empty(x.size)
    p_out = np.empty(x.size)
    for j, xj in enumerate(np.abs(x)):
        if xj == 0:
            p = 0.0
        else:

            def f(p):
                return np.sum(n * h * v * p / np.sqrt(1.0 - (p * v) ** 2)) - xj

            p = brentq(f, 0.0, pmax * (1.0 - 1e-15), xtol=1e-22, rtol=8.9e-16, maxiter=500)
        t[j] = np.sum(n * h / (v * np.sqrt(1.0 - (p * v) ** 2)))
        p_out[j] = p
    return t, p_out


def path_amplitude(R, counts, underside=True):
    """Sum of the amplitudes of every ray path from the surface to the surface with these counts.

    Enumerates the paths leg by leg: going down at the base of layer i the ray reflects (R_i) or
    passes on; going up at the top of layer i > 0 it reflects off the underside (-R_{i-1}, only
    with ``underside``) or passes on; at the surface it ends or reflects (-1, free surface).
    Transmission losses are ignored. ``counts[i]`` is the number of crossings of layer i.
    """
    n = len(counts)
    target = tuple(int(c) for c in counts)
    total = 0.0

    def walk(layer, down, used, amp):
        nonlocal total
        used = list(used)
        used[layer] += 1
        if used[layer] > target[layer]:
            return
        if down:
            walk(layer, False, used, amp * R[layer])  # reflect at the base of the layer
            if layer + 1 < n:
                walk(layer + 1, True, used, amp)  # transmit down
        elif layer == 0:
            if tuple(used) == target:
                total += amp  # arrives at the surface
            walk(0, True, used, -amp)  # free-surface reflection
        else:
            walk(layer - 1, False, used, amp)  # transmit up
            if underside:
                walk(layer, True, used, -amp * R[layer - 1])

    walk(0, True, [0] * n, 1.0)
    return total


def gardner_r(v1, v2):
    # R = (Z2 - Z1)/(Z2 + Z1) with Z = 310 v^1.25 (Gardner et al., 1974, Geophysics 39, 770-780)
    r = (v2 / v1) ** 1.25
    return (r - 1) / (r + 1)


def read_traces(path):
    with segyio.open(path, ignore_geometry=True) as f:
        data = segyio.tools.collect(f.trace[:]).astype(np.float64)
        off = f.attributes(TF.offset)[:].astype(np.float64)
        cdp = f.attributes(TF.CDP)[:]
    return data, off, cdp


# ---------------------------------------------------------------------------- ray tracing


@pytest.mark.parametrize("m", range(7))
def test_reverberation_of_one_water_layer_is_a_straight_ray_hyperbola(m):
    # homogeneous water layer: the order-m reverberation unfolds into one straight ray through
    # 2(m+1) h of water, t = sqrt((2(m+1)h/v)^2 + (x/v)^2) (exact geometry)
    h, v = np.array([180.0]), np.array([1500.0, 2100.0])
    x = np.r_[0.0, np.linspace(25.0, 6000.0, 40)]
    t, p = event_times(h, v, x, path_crossings(1, 0, repeats=m + 1))
    legs = 2 * (m + 1)
    # within the solver's documented 1e-10 s (offsets converged to 1e-7 m)
    np.testing.assert_allclose(
        t, np.sqrt((legs * h[0] / v[0]) ** 2 + (x / v[0]) ** 2), rtol=0, atol=1e-10
    )
    # sin(theta) = (x/legs) / sqrt(h^2 + (x/legs)^2) on each leg, p = sin(theta)/v (geometry)
    np.testing.assert_allclose(p, (x / legs) / np.hypot(h[0], x / legs) / v[0], rtol=1e-10)


def test_reverberation_ignores_the_layers_below_the_water():
    # a reverberation never leaves the water, so faster rock below must not change its path:
    # t = sqrt((2(m+1)h/v)^2 + (x/v)^2) (exact geometry), one event per order
    h, v = MODELS["slow layer"]
    x = np.linspace(0.0, 4000.0, 17)
    counts = np.array([path_crossings(h.size, 0, repeats=m + 1) for m in range(1, 5)])
    assert np.all(counts[:, 1:] == 0)
    t, _ = event_times(h, v, x, counts)
    for row, m in enumerate(range(1, 5)):
        want = np.sqrt((2 * (m + 1) * h[0] / v[0]) ** 2 + (x / v[0]) ** 2)
        np.testing.assert_allclose(t[row], want, rtol=0, atol=1e-10)


def crossing_tables(n):
    """Peg-legs, first-order multiples, reverberations and an irregular path for n layers."""
    rows = [[2 * (j + 1)] + [2] * k + [0] * (n - 1 - k) for k in range(1, n) for j in (1, 2, 3)]
    rows += [[4] * (k + 1) + [0] * (n - 1 - k) for k in range(n)]
    rows += [[2 * (m + 1)] + [0] * (n - 1) for m in (1, 3)]
    rows += [[6] + [4] * (n - 1)]
    return np.array(rows)


@pytest.mark.parametrize("name", MODELS)
def test_multiple_times_match_independent_snell_solution(name):
    # Snell's law in flat layers (one ray parameter at every bounce), solved independently by
    # scipy.optimize.brentq in the ray parameter
    h, v = MODELS[name]
    x = np.r_[0.0, 5.0, np.linspace(100.0, 3.0 * h.sum(), 8), 12.0 * h.sum(), -900.0]
    table = crossing_tables(h.size)
    t, p = event_times(h, v, x, table)
    for e, n in enumerate(table):
        t_ref, p_ref = snell_brentq(h, v[:-1], n, x)
        np.testing.assert_allclose(t[e], t_ref, rtol=0, atol=1e-9)
        np.testing.assert_allclose(p[e], p_ref, rtol=1e-8, atol=1e-14)


@pytest.mark.parametrize("name", MODELS)
def test_zero_offset_time_is_the_sum_of_vertical_legs(name):
    # vertical ray: t0 = sum n_i h_i / v_i (exact geometry), p = 0
    h, v = MODELS[name]
    table = crossing_tables(h.size)
    t, p = event_times(h, v, [0.0], table)
    want = [sum(n[i] * h[i] / v[i] for i in range(h.size)) for n in table]
    np.testing.assert_allclose(t[:, 0], want, rtol=1e-14)
    assert np.all(p == 0)


def test_path_crossings_follow_the_definition():
    # peg-leg of reflector k with j water round trips: 2 + 2j in the water, 2 in layers 1..k,
    # 0 below; first-order multiple: 4 down to k; order-m reverberation: 2(m+1) in the water
    np.testing.assert_array_equal(path_crossings(4, 2, water_round_trips=3), [8, 2, 2, 0])
    np.testing.assert_array_equal(path_crossings(4, 1, repeats=2), [4, 4, 0, 0])
    np.testing.assert_array_equal(path_crossings(3, 0, repeats=4), [8, 0, 0])
    with pytest.raises(ValueError):
        path_crossings(3, 3)


@pytest.mark.parametrize(
    "counts", [[[3, 2, 0]], [[2, 0, 2]], [[0, 2, 2]], [[-2, 2, 0]], [[2, 2]], [[2.5, 2, 2]]]
)
def test_impossible_crossing_counts_are_refused(counts):
    # a surface-to-surface path crosses each layer an even number of times, from the top down
    h, v = MODELS["increasing"]
    with pytest.raises(ValueError):
        event_times(h, v, [0.0, 100.0], counts)


# ---------------------------------------------------------------------------- amplitudes


def test_path_enumeration_gives_the_documented_amplitudes():
    # every ray path with the event's crossing counts, enumerated in this test (free surface -1,
    # no transmission loss; Sheriff & Geldart, 1995, Exploration Seismology: multiples)
    R = np.array([0.4, -0.07, 0.12])
    for m in range(1, 6):  # reverberation: one path, (-1)^m R_wb^(m+1)
        assert path_amplitude(R, [2 * (m + 1), 0, 0]) == pytest.approx((-1) ** m * R[0] ** (m + 1))
    for k in (1, 2):  # peg-leg: j + 1 paths, (-1)^j (j+1) R_wb^j R_k
        for j in range(1, 5):
            counts = [2 * (j + 1)] + [2] * k + [0] * (2 - k)
            want = (-1) ** j * (j + 1) * R[0] ** j * R[k]
            assert path_amplitude(R, counts) == pytest.approx(want, rel=1e-12)
    # first-order multiple: -R_k^2 among the free-surface paths (paths off the underside of an
    # interface can share its counts; the generator leaves them out)
    for k in (1, 2):
        counts = [4] * (k + 1) + [0] * (2 - k)
        assert path_amplitude(R, counts, underside=False) == pytest.approx(-R[k] ** 2)


def test_truth_lists_every_multiple_with_its_time_amplitude_and_fit(tmp_path):
    # t0 = sum n_i h_i / v_i (geometry); amplitude from the path enumeration above; stacking
    # velocity = least squares of t^2 on x^2 by numpy.polyfit over the stretch-muted offsets,
    # the times from the independent brentq solution of Snell's law
    model = (np.array([160.0, 400.0, 500.0]), np.array([1500.0, 2100.0, 2500.0, 3100.0]))
    spec = LineSpec(
        ncmp=3, channels=48, nsamples=251, model=model, lateral=0.03, multiples=True,
        reverberation_order=3, pegleg_order=2, seafloor_reflection=-0.35,
    )
    truth = make_line(tmp_path / "m.sgy", spec)
    s = 0.3
    ev = truth.multiple_events(stretch_limit=s)
    # first-order of reflectors 1, 2 (the sea floor's is the order-1 reverberation), 3 orders of
    # reverberation, 2 peg-legs of each of the 2 deeper reflectors
    assert ev.kind.tolist() == ["first-order"] * 2 + ["reverberation"] * 3 + ["peg-leg"] * 4
    assert ev.t0.shape == ev.vstack.shape == ev.amplitude.shape == (3, 9)
    R = truth.reflection_coefficient
    assert np.all(R[:, 0] == -0.35)
    vel = truth.velocity
    np.testing.assert_allclose(R[:, 1:], gardner_r(vel[:, 1:-1], vel[:, 2:]), rtol=1e-12)
    muted = 0
    for b in range(spec.ncmp):
        h, v = truth.thickness[b], truth.velocity[b, :-1]
        x = truth.offsets[b][np.isfinite(truth.offsets[b])]
        for e, counts in enumerate(ev.crossings):
            t0 = np.sum(counts * h / v)
            assert ev.t0[b, e] == pytest.approx(t0, rel=1e-13)
            under = ev.kind[e] != "first-order"
            amp = path_amplitude(R[b], counts, underside=under)
            assert ev.amplitude[b, e] == pytest.approx(amp, rel=1e-12)
            t, _ = snell_brentq(h, v, counts, x)
            keep = (t - t0) / t0 <= s
            assert keep.sum() >= 3
            muted += (~keep).any()
            slope = np.polyfit(x[keep] ** 2, t[keep] ** 2, 1)[0]
            assert ev.vstack[b, e] == pytest.approx(1.0 / np.sqrt(slope), rel=1e-8)
            assert ev.max_offset[b, e] == x[keep].max()
    assert muted >= 3 * spec.ncmp  # the mute bites on several events
    # reverberations never leave the water: their fit is the water velocity (straight rays)
    rev = ev.kind == "reverberation"
    np.testing.assert_allclose(ev.vstack[:, rev], truth.velocity[:, :1] * np.ones(3), rtol=1e-9)


def test_line_without_multiples_lists_none(tmp_path):
    truth = make_line(tmp_path / "p.sgy", LineSpec(**SMALL, nsamples=101))
    ev = truth.multiple_events()
    assert ev.kind.size == 0 and ev.t0.shape == (SMALL["ncmp"], 0)


# ---------------------------------------------------------------------------- written SEG-Y


def least_squares_amplitude(trace, times, t_event, f):
    """Amplitude a minimising |trace - a * ricker(times - t_event)|^2 (Ricker, 1953)."""
    w = ricker(times - t_event, f)
    return float(trace @ w / (w @ w))


def test_reverberations_in_the_written_file(tmp_path):
    # one water layer over a half-space, no noise: the file (read with segyio) must hold the
    # primary R at t_0 and the order-m reverberation (-1)^m R^(m+1) at
    # t_m = sqrt((2(m+1)h/v)^2 + (x/v)^2) (straight rays; free surface -1), nothing else
    h, v = np.array([400.0]), np.array([1500.0, 1800.0])
    R = 0.45
    spec = LineSpec(
        **SMALL, nsamples=601, model=(h, v), seafloor_reflection=R, reverberation_order=3
    )
    path = tmp_path / "reverb.sgy"
    truth = make_line(path, spec)
    data, x, _ = read_traces(path)
    times = np.arange(spec.nsamples) * spec.dt
    want = np.zeros_like(data)
    for m in range(4):
        legs = 2 * (m + 1)
        # all offsets stay short of the critical-angle fade: sine p*v1 < FADE_START (Snell's law)
        assert np.max((x / legs) / np.hypot(h[0], x / legs) * v[1] / v[0]) < FADE_START
        t = np.sqrt((legs * h[0] / v[0]) ** 2 + (x / v[0]) ** 2)
        want += (-1) ** m * R ** (m + 1) * ricker(times[None] - t[:, None], spec.peak_frequency)
    np.testing.assert_allclose(data, want, rtol=0, atol=1e-6)
    # sign and relative amplitude of each order on the nearest trace: (-R)^m of the primary
    near = np.argmin(x)
    amps = [
        least_squares_amplitude(
            data[near], times, np.hypot(2 * (m + 1) * h[0] / v[0], x[near] / v[0]), 25.0
        )
        for m in range(4)
    ]
    np.testing.assert_allclose(np.array(amps[1:]) / amps[0], (-R) ** np.arange(1, 4), rtol=1e-4)
    assert truth.reflection_coefficient[0, 0] == R


def test_pegleg_amplitudes_and_times_in_the_written_file(tmp_path):
    # water over one layer over a half-space, no noise: primaries R_0, R_1 and the peg-legs of
    # reflector 1 with j water round trips, (-1)^j (j+1) R_0^j R_1, at the times of the brentq
    # Snell's-law solution; R_1 from Gardner's relation (Gardner et al., 1974)
    h, v = np.array([500.0, 600.0]), np.array([1500.0, 1900.0, 2500.0])
    R0 = 0.35
    R1 = gardner_r(v[1], v[2])
    spec = LineSpec(
        **SMALL, nsamples=751, model=(h, v), seafloor_reflection=R0, pegleg_order=2
    )
    path = tmp_path / "pegleg.sgy"
    make_line(path, spec)
    data, x, _ = read_traces(path)
    times = np.arange(spec.nsamples) * spec.dt
    events = [([2, 0], R0, v[1]), ([2, 2], R1, v[2])]
    events += [([2 * (j + 1), 2], (-1) ** j * (j + 1) * R0**j * R1, v[2]) for j in (1, 2)]
    want = np.zeros_like(data)
    for counts, amp, v_below in events:
        t, p = snell_brentq(h, v[:-1], np.array(counts), x)
        # short of the critical-angle fade at every offset: sine p * max v < FADE_START
        assert np.max(p * max(v_below, v[:2].max())) < FADE_START
        want += amp * ricker(times[None] - t[:, None], spec.peak_frequency)
    np.testing.assert_allclose(data, want, rtol=0, atol=1e-6)


def test_multiples_fade_before_the_critical_angle_like_the_primaries(tmp_path):
    # each event fades with the sine p * max(v_0..v_{K+1}) of the deepest reflector K it reaches
    # (1 = critical angle, Snell's law), by the cosine taper LineSpec documents between
    # FADE_START and FADE_STOP; p from the independent brentq solution
    h, v = np.array([150.0, 300.0]), np.array([1500.0, 1800.0, 3000.0])
    R0, R1 = 0.4, gardner_r(v[1], v[2])
    spec = LineSpec(
        **SMALL, nsamples=301, model=(h, v), seafloor_reflection=R0, reverberation_order=2,
        pegleg_order=1,
    )
    path = tmp_path / "fade.sgy"
    make_line(path, spec)
    data, x, _ = read_traces(path)
    times = np.arange(spec.nsamples) * spec.dt
    events = [([2 * (m + 1), 0], (-1) ** m * R0 ** (m + 1), v[:2].max()) for m in range(3)]
    events += [([2, 2], R1, v.max()), ([4, 2], -2 * R0 * R1, v.max())]
    want = np.zeros_like(data)
    faded = 0
    for counts, amp, vmax in events:
        t, p = snell_brentq(h, v[:-1], np.array(counts), x)
        frac = np.clip((p * vmax - FADE_START) / (FADE_STOP - FADE_START), 0.0, 1.0)
        w = 0.5 * (1.0 + np.cos(np.pi * frac))
        faded += np.sum(w < 1.0)
        want += (amp * w)[:, None] * ricker(times[None] - t[:, None], spec.peak_frequency)
    assert faded > x.size  # the fade bites on many traces
    np.testing.assert_allclose(data, want, rtol=0, atol=1e-6)


def test_first_order_sea_floor_multiple_is_made_once(tmp_path):
    # with both multiples=True and reverberations, the sea floor's first-order multiple is the
    # order-1 reverberation: one event of amplitude -R^2 at sqrt((4h/v)^2 + (x/v)^2) (geometry)
    h, v = np.array([400.0]), np.array([1500.0, 1800.0])
    R = 0.3
    spec = LineSpec(
        **SMALL, nsamples=401, model=(h, v), seafloor_reflection=R, reverberation_order=1,
        multiples=True,
    )
    path = tmp_path / "once.sgy"
    make_line(path, spec)
    data, x, _ = read_traces(path)
    times = np.arange(spec.nsamples) * spec.dt
    t1 = np.hypot(2 * h[0] / v[0], x / v[0])
    t2 = np.hypot(4 * h[0] / v[0], x / v[0])
    want = R * ricker(times - t1[:, None], 25.0) - R**2 * ricker(times - t2[:, None], 25.0)
    np.testing.assert_allclose(data, want, rtol=0, atol=1e-6)


def rms(a):
    return float(np.sqrt(np.mean(a**2)))


def test_snr_is_measured_on_the_primaries_alone(tmp_path):
    # LineSpec.snr as documented: RMS of the noise-free primaries-only line / RMS of the noise,
    # measured on the files read back with segyio
    model = (np.array([200.0, 500.0]), np.array([1500.0, 2200.0, 2800.0]))
    base = dict(SMALL, ncmp=8, nsamples=301, model=model, seed=5, seafloor_reflection=0.45)
    mult = dict(reverberation_order=4, pegleg_order=2)
    make_line(tmp_path / "prim.sgy", LineSpec(**base))
    make_line(tmp_path / "clean.sgy", LineSpec(**base, **mult))
    truth = make_line(tmp_path / "noisy.sgy", LineSpec(**base, **mult, snr=2.0))
    prim, _, _ = read_traces(tmp_path / "prim.sgy")
    clean, _, _ = read_traces(tmp_path / "clean.sgy")
    noisy, _, _ = read_traces(tmp_path / "noisy.sgy")
    assert rms(clean - prim) > 0.3 * rms(prim)  # the multiples are not negligible
    assert rms(prim) / rms(noisy - clean) == pytest.approx(2.0, rel=0.1)
    assert truth.signal_rms == pytest.approx(rms(prim), rel=1e-5)
    assert truth.multiple_rms == pytest.approx(rms(clean - prim), rel=1e-5)
    assert truth.noise_rms == pytest.approx(truth.signal_rms / 2.0, rel=1e-12)


@pytest.mark.parametrize(
    "bad, match",
    [
        (dict(reverberation_order=-1), "reverberation_order"),
        (dict(reverberation_order=1.5), "reverberation_order"),
        (dict(pegleg_order=True), "pegleg_order"),
        (dict(pegleg_order=2, model=(np.array([300.0]), np.array([1500.0, 2000.0]))),
         "pegleg_order"),
        (dict(seafloor_reflection=1.0), "seafloor_reflection"),
        (dict(seafloor_reflection=float("nan")), "seafloor_reflection"),
        (dict(seafloor_reflection="hard"), "seafloor_reflection"),
    ],
)
def test_impossible_multiple_options_are_refused(tmp_path, bad, match):
    with pytest.raises(ParameterError, match=match):
        make_line(tmp_path / "bad.sgy", LineSpec(**dict(SMALL, **bad)))
    assert list(tmp_path.iterdir()) == []


# ---------------------------------------------------------------------------- the scenario


def test_reverb_scenario_is_as_specified(tmp_path):
    # the scenario's requirements, checked with t0 = sum 2 h_i / v_i (geometry) and amplitudes
    # from the path enumeration above
    spec = reverb_spec()
    spec.validate()
    h, v = spec.model
    assert 100.0 <= h[0] <= 250.0 and v[0] < 1600.0  # a water layer
    R0 = spec.seafloor_reflection
    assert 0.3 <= R0 <= 0.5
    dt_layer = 2 * h / v[:-1]
    assert 4 <= h.size - 1 <= 8 and np.all(dt_layer[1:] >= 0.15)
    t0 = np.cumsum(dt_layer)
    assert 2.5 <= t0[-1] <= 3.0 <= (spec.nsamples - 1) * spec.dt <= 3.2
    assert (spec.snr, spec.lateral, spec.channels, spec.dt) == (1.0, 0.03, 96, 0.004)
    assert 80 <= spec.ncmp <= 120
    R = np.r_[R0, gardner_r(v[1:-1], v[2:])]
    deep = np.abs(R[1:])
    # strong reverberations and peg-legs: the order-1 reverberation beats every deeper primary,
    # and the first peg-leg of the strongest deeper reflector beats the median deeper primary
    assert abs(path_amplitude(R, [4] + [0] * (h.size - 1))) > deep.max()
    n = h.size
    pegs = [abs(path_amplitude(R, [4] + [2] * k + [0] * (n - 1 - k))) for k in range(1, n)]
    assert max(pegs) > np.median(deep)
    # the hard case: a strong multiple (|amplitude| >= half the weakest deeper primary) within one
    # period of the 25 Hz wavelet of a deeper primary at zero offset, for at least three primaries
    mult_t, mult_a = [], []
    for m in range(1, spec.reverberation_order + 1):
        mult_t.append((m + 1) * dt_layer[0])
        mult_a.append(R0 ** (m + 1))
    for k in range(1, h.size):
        for j in range(1, spec.pegleg_order + 1):
            mult_t.append(t0[k] + j * dt_layer[0])
            mult_a.append((j + 1) * R0**j * abs(R[k]))
    mult_t, mult_a = np.array(mult_t), np.array(mult_a)
    strong = mult_a >= 0.5 * deep.min()
    near = [np.any(strong & (np.abs(mult_t - tk) < 1.0 / spec.peak_frequency)) for tk in t0[1:]]
    assert sum(near) >= 3

    # a short piece of the line: the multiples carry as much energy as the primaries (S/N 1)
    truth = make_line(tmp_path / "rev.sgy", dataclasses.replace(spec, ncmp=3))
    assert truth.multiple_rms > 0.5 * truth.signal_rms
    assert truth.noise_rms == pytest.approx(truth.signal_rms)
    ev = truth.multiple_events(stretch_limit=0.5)
    assert {"reverberation", "peg-leg", "first-order"} <= set(ev.kind.tolist())
