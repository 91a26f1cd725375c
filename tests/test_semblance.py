"""Semblance kernel against the properties of Neidell & Taner (1971), Semblance and other
coherency measures for multichannel data, Geophysics 36, 482-497, and against a plain-NumPy
evaluation of the same definition."""

import numpy as np
import pytest
from conftest import ricker

from velspec.scan import scan_gather, velocity_axis
from velspec.scan.reference import semblance_reference

DT = 0.004


def hyperbola_gather(t0s, v, offsets, ns=1000, f=25.0):
    """Ricker events on exact hyperbolas t^2 = t0^2 + x^2/v^2 (Yilmaz, 2001, Seismic Data Analysis)."""
    t = np.arange(ns) * DT
    data = np.zeros((len(offsets), ns), np.float32)
    for t0 in t0s:
        tx = np.sqrt(t0**2 + (offsets / v) ** 2)
        data += ricker(t[None, :] - tx[:, None], f).astype(np.float32)
    return data


def test_identical_traces_without_moveout_give_exactly_one(rng):
    # Neidell & Taner (1971): semblance is 1 for identical traces (perfect coherence).
    trace = rng.standard_normal(600).astype(np.float32)
    data = np.tile(trace, (24, 1))
    panel = scan_gather(data, np.zeros(24), DT, 0.0, np.array([1500.0, 3000.0]), window=0.02)
    assert np.allclose(panel[:, 10:-10], 1.0, atol=2e-6)


def test_hyperbola_peaks_near_one_at_its_velocity():
    # An event on its exact hyperbola stacks coherently (Neidell & Taner, 1971); what is lost is
    # NMO stretch of the wavelet and linear interpolation: with a 0.3 stretch mute and a 25 Hz
    # Ricker at 4 ms the loss stays under 10% (common practice, no source).
    offsets = np.linspace(100, 2500, 48)
    v = 2400.0
    data = hyperbola_gather([0.8, 1.5, 2.5], v, offsets)
    panel = scan_gather(data, offsets, DT, 0.0, np.array([v]), window=0.04, stretch_limit=0.3)
    for t0 in (0.8, 1.5, 2.5):
        assert panel[0, int(round(t0 / DT))] > 0.90


def test_each_event_peaks_at_its_true_velocity():
    # The maximum of the spectrum lies at the velocity of the hyperbola (Taner & Koehler, 1969).
    offsets = np.linspace(100, 3000, 60)
    vels = velocity_axis(1500, 4500, 301)   # 10 m/s steps
    for v in (1800.0, 2700.0, 3600.0):
        data = hyperbola_gather([1.2], v, offsets)
        panel = scan_gather(data, offsets, DT, 0.0, vels, stretch_limit=0.5)
        best = vels[panel[:, int(1.2 / DT)].argmax()]
        assert abs(best - v) <= 0.01 * v


def test_independent_noise_averages_one_over_n(rng):
    # For independent zero-mean traces the expected semblance is 1/N (Neidell & Taner, 1971):
    # the cross terms of (sum a_i)^2 vanish on average.
    for n in (6, 24):
        data = rng.standard_normal((n, 4000)).astype(np.float32)
        panel = scan_gather(data, np.zeros(n), DT, 0.0, np.array([2000.0]), window=0.04)
        assert abs(panel[0, 20:-20].mean() * n - 1.0) < 0.05


def test_live_count_in_semblance_normalisation():
    # Under the stretch mute only the live traces count in N, so identical live traces still
    # give 1 (Neidell & Taner, 1971, with N the number of contributing channels).
    offsets = np.linspace(0, 3000, 31)
    v = 2000.0
    data = hyperbola_gather([0.4, 1.0], v, offsets)
    panel = scan_gather(data, offsets, DT, 0.0, np.array([v]), window=0.0, stretch_limit=0.05)
    # At t0 = 0.4 s only the near offsets pass a 5% stretch mute; the flattened event is coherent.
    assert panel[0, 100] > 0.97


def test_agrees_with_numpy_reference(rng):
    # Cross-check against an independent NumPy evaluation of the same definition, float32
    # precision, away from the stretch-mute edges where a rounding can flip a sample in or out.
    offsets = np.linspace(50, 2800, 40)
    data = hyperbola_gather([0.6, 1.4, 2.2], 2300.0, offsets, ns=700)
    data += 0.3 * rng.standard_normal(data.shape).astype(np.float32)
    vels = velocity_axis(1500, 4000, 26)
    ours = scan_gather(data, offsets, DT, 0.0, vels, window=0.04, stretch_limit=0.4)
    ref = semblance_reference(data, offsets, DT, 0.0, vels, window=0.04, stretch_limit=0.4)
    diff = np.abs(ours - ref)
    assert np.median(diff) < 1e-5
    assert np.mean(diff < 1e-4) > 0.97


@pytest.mark.parametrize("threads", [1, 2])
def test_same_bits_for_any_thread_count(threads, rng):
    import numba

    offsets = np.linspace(50, 2800, 40)
    data = rng.standard_normal((40, 500)).astype(np.float32)
    vels = velocity_axis(1500, 4000, 33)
    numba.set_num_threads(1)
    one = scan_gather(data, offsets, DT, 0.0, vels)
    numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
    many = scan_gather(data, offsets, DT, 0.0, vels)
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
    assert np.array_equal(one, many)


def test_delay_recording_time_shifts_the_t0_axis():
    # A trace whose first sample is at t_first: the event at absolute time t0 is found at t0.
    offsets = np.linspace(100, 2000, 30)
    t_first = 0.2
    t = t_first + np.arange(600) * DT
    tx = np.sqrt(1.0**2 + (offsets / 2500.0) ** 2)
    data = ricker(t[None, :] - tx[:, None], 25.0).astype(np.float32)
    vels = velocity_axis(1500, 4000, 251)
    panel = scan_gather(data, offsets, DT, t_first, vels)
    j = int(round((1.0 - t_first) / DT))
    assert panel[:, j].max() > 0.9
    assert abs(vels[panel[:, j].argmax()] - 2500.0) <= 25.0


def test_slowness_squared_axis_finds_the_same_peak():
    # A trial axis uniform in 1/v^2 spaces the moveout x^2/v^2 evenly (Taner & Koehler, 1969):
    # check the axis against that definition and that the event's peak is found on it too.
    vels = velocity_axis(1500.0, 4500.0, 201, axis="slowness2")
    s2 = 1.0 / vels**2
    assert np.allclose(np.diff(s2), np.diff(s2)[0], rtol=1e-9) and vels[0] == 1500.0
    assert abs(vels[-1] - 4500.0) < 1e-9 and np.all(np.diff(vels) > 0)
    offsets = np.linspace(100, 3000, 60)
    data = hyperbola_gather([1.2], 2700.0, offsets)
    panel = scan_gather(data, offsets, DT, 0.0, vels)
    k = panel[:, int(1.2 / DT)].argmax()
    assert abs(vels[k] - 2700.0) <= max(vels[k + 1] - vels[k], 0.01 * 2700.0)
