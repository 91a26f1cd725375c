"""The t^2-x^2 cross-check of coherence picks (Green, 1938, Velocity determinations by means of
reflection profiles, Geophysics 3, 295-305): against a least-squares line through exact
Snell's-law times, against the coherence scan and picker on a generated line, and on bad input."""

import numpy as np
import pytest
from conftest import ricker

from velspec.crosscheck import crosscheck_line, select_isolated, tx2_velocity
from velspec.params import RunParams
from velspec.pipeline import run_line
from velspec.result import empty_picks
from velspec.synth import LineSpec, make_line
from velspec.synth.layers import reflection_times

DT, NS, FREQ, STRETCH = 0.004, 800, 25.0, 0.5
THICKNESS = np.array([400.0, 500.0, 600.0])
VELOCITY = np.array([1800.0, 2400.0, 3000.0, 3500.0])
OFFSETS = 100.0 + 50.0 * np.arange(48)     # 100-2450 m


def gather_of(times, amplitude=1.0, t_first=0.0):
    """Traces holding one Ricker wavelet each, centred on the given times."""
    t = t_first + DT * np.arange(NS)
    return (amplitude * ricker(t[None, :] - np.asarray(times)[:, None], FREQ)).astype(np.float32)


@pytest.mark.parametrize("polarity", [1.0, -1.0])
@pytest.mark.parametrize("velocity_error", [0.01, -0.01])
def test_noise_free_reflector_matches_least_squares_line_of_exact_times(polarity, velocity_error):
    k = 1                                   # only the middle reflector is put in the gather
    exact = reflection_times(THICKNESS, VELOCITY, OFFSETS)[0][k]
    dtk = (2.0 * THICKNESS / VELOCITY[:-1])[: k + 1]    # two-way time in each layer above it
    t0 = float(np.sum(dtk))
    # Start from the RMS velocity (Dix, 1955) off by 1%, as an imperfect coherence pick would be.
    vpick = np.sqrt(np.sum(VELOCITY[: k + 1] ** 2 * dtk) / np.sum(dtk)) * (1.0 + velocity_error)
    used = OFFSETS <= vpick * t0 * np.sqrt((1.0 + STRETCH) ** 2 - 1.0)   # the scan's stretch-mute rule
    assert 10 < used.sum() < OFFSETS.size   # the mute bites: the test tells which traces count

    fit = tx2_velocity(gather_of(exact, polarity), OFFSETS, DT, 0.0, t0, vpick, STRETCH)

    # Reference: numpy.polyfit of t^2 on x^2 over the same offsets (Green, 1938).
    slope, intercept = np.polyfit(OFFSETS[used] ** 2, exact[used] ** 2, 1)
    assert fit.ntraces == used.sum()
    assert np.array_equal(fit.offsets, OFFSETS[used])
    assert abs(fit.velocity - 1.0 / np.sqrt(slope)) / (1.0 / np.sqrt(slope)) < 0.002
    assert abs(fit.t0 - np.sqrt(intercept)) < 0.5 * DT
    # Arrival times against Snell's law (reflection_times): within a small fraction of a sample.
    assert np.max(np.abs(fit.times - exact[used])) < 0.1 * DT
    assert fit.polarity == int(polarity)
    # Residual: the exact times are not a hyperbola; the polyfit line leaves the same misfit.
    ref_rms = np.sqrt(np.mean((exact[used] - np.sqrt(intercept + slope * OFFSETS[used] ** 2)) ** 2))
    assert abs(fit.rms_residual - ref_rms) < 0.1 * DT


def test_the_fit_follows_the_arrivals_not_the_starting_velocity():
    # Events on the exact hyperbola of 2000 m/s (Green, 1938: t^2 = t0^2 + x^2/V^2) from starts
    # 1.5% off either way and a delayed first sample: both return 2000 m/s.
    t0, v, t_first = 1.2, 2000.0, 0.1
    times = np.sqrt(t0**2 + (OFFSETS / v) ** 2)
    data = gather_of(times, t_first=t_first)
    for start in (0.985 * v, 1.015 * v):
        fit = tx2_velocity(data, OFFSETS, DT, t_first, t0, start, STRETCH)
        assert abs(fit.velocity - v) / v < 0.002
        assert abs(fit.t0 - t0) < 0.25 * DT


def test_trace_with_two_rival_peaks_is_left_out():
    # Rule: a second extremum of the event's sign reaching max_rival of the first makes the
    # arrival ambiguous. One trace gets a copy of its wavelet 16 ms later: that trace alone drops.
    t0, v = 1.2, 2000.0
    times = np.sqrt(t0**2 + (OFFSETS / v) ** 2)
    data = gather_of(times)
    t = DT * np.arange(NS)
    data[5] += ricker(t - times[5] - 0.016, FREQ).astype(np.float32) * 0.9
    fit = tx2_velocity(data, OFFSETS, DT, 0.0, t0, v, STRETCH)
    used = OFFSETS <= v * t0 * np.sqrt((1.0 + STRETCH) ** 2 - 1.0)
    assert fit.ntraces == used.sum() - 1
    assert OFFSETS[5] not in fit.offsets


def test_fewer_than_three_muted_traces_raise():
    # Stretch mute x <= v t0 sqrt((1+s)^2 - 1) = 2000 * 0.05 * 1.118 = 112 m: only the 100 m trace.
    times = np.sqrt(0.05**2 + (OFFSETS / 2000.0) ** 2)
    with pytest.raises(ValueError, match="at least 3"):
        tx2_velocity(gather_of(times), OFFSETS, DT, 0.0, 0.05, 2000.0, STRETCH)


def test_no_reliable_arrival_raises():
    # Dead (all-zero) traces have no peak anywhere: no trace survives.
    with pytest.raises(ValueError, match="reliable arrival"):
        tx2_velocity(np.zeros((OFFSETS.size, NS), np.float32), OFFSETS, DT, 0.0, 1.2, 2000.0, STRETCH)


def test_arrivals_earlier_with_offset_give_no_positive_slope():
    # An event whose time falls with offset (t^2 = t0^2 - x^2/V^2) is no reflection hyperbola:
    # the least-squares slope is negative and the fit must refuse it.
    t0, v = 1.2, 12000.0
    times = np.sqrt(t0**2 - (OFFSETS / v) ** 2)
    with pytest.raises(ValueError, match="slope"):
        tx2_velocity(gather_of(times), OFFSETS, DT, 0.0, t0, 2 * v, STRETCH)


def test_selection_keeps_strong_picks_with_no_neighbour_within_the_gap():
    # Hand-made picks: CMP 1 has picks 0.10 s apart (neither isolated) and one alone; CMP 2 has a
    # weak isolated pick and a strong one at the same time as a CMP 1 pick (other CMPs don't count).
    cmp = np.array([1, 1, 1, 2, 2])
    t0 = np.array([1.0, 1.1, 2.0, 1.05, 2.5])
    coh = np.array([0.9, 0.9, 0.9, 0.9, 0.3])
    assert list(select_isolated(cmp, t0, coh, 0.5, 0.15)) == [False, False, True, True, False]


@pytest.fixture(scope="module")
def noisy_line(tmp_path_factory):
    path = tmp_path_factory.mktemp("crosscheck") / "line.sgy"
    truth = make_line(path, LineSpec(ncmp=3, snr=4.0, seed=7))
    params = RunParams().validate()
    return path, truth, params, run_line(path, params)


def test_strong_isolated_picks_agree_with_coherence_and_exact_stacking_velocity(noisy_line):
    path, truth, params, result = noisy_line
    check = crosscheck_line(path, result)     # the run's own stretch mute and header bytes
    assert check.failures == ()
    assert check.cmp.size >= 15             # nine reflectors per CMP, most strong and isolated
    assert np.all(check.ntraces >= 3)
    # Truth: least-squares hyperbola of Snell's-law times over the offsets passing the stretch
    # mute (LineTruth.stacking_velocity; Taner & Koehler, 1969; Green, 1938).
    vstack, _ = truth.stacking_velocity(stretch_limit=params.scan.stretch_limit)
    exact = []
    for c, t in zip(check.cmp, check.t0):
        b = int(np.flatnonzero(truth.cmp == c)[0])
        k = int(np.argmin(np.abs(truth.t0[b] - t)))
        assert abs(truth.t0[b][k] - t) < 0.02    # every checked pick sits on a reflector of the model
        exact.append(vstack[b][k])
    exact = np.array(exact)
    vs_pick = np.abs(check.tx2_velocity - check.pick_velocity) / check.pick_velocity
    vs_exact_tx2 = np.abs(check.tx2_velocity - exact) / exact
    vs_exact_pick = np.abs(check.pick_velocity - exact) / exact
    print(f"t^2-x^2 vs coherence pick: worst {100 * vs_pick.max():.2f}%, median {100 * np.median(vs_pick):.2f}%; "
          f"t^2-x^2 vs exact: worst {100 * vs_exact_tx2.max():.2f}%, median {100 * np.median(vs_exact_tx2):.2f}%; "
          f"pick vs exact: worst {100 * vs_exact_pick.max():.2f}% over {check.cmp.size} picks")
    assert vs_pick.max() < 0.01             # the requirement: within 1% of the coherence pick
    assert vs_exact_tx2.max() < 0.02        # and both near the exact best-fit stacking velocity
    assert vs_exact_pick.max() < 0.02


def test_picks_from_a_cmp_not_in_the_line_are_refused(noisy_line):
    path, _, params, _ = noisy_line
    picks = empty_picks(1)
    picks["cmp"], picks["t0"], picks["vrms"], picks["coherence"] = 99, 1.5, 2000.0, 0.9
    with pytest.raises(ValueError, match="CMP 99"):
        crosscheck_line(path, picks, params.scan.stretch_limit, params.read)


def test_a_stored_result_checks_the_same_picks(noisy_line, tmp_path):
    # A result read back from its file must select the same used picks as the in-memory
    # result; likely multiples and rejected picks are not checked.
    from velspec.io.hdf5 import read_result, write_result

    path, _, params, result = noisy_line
    write_result(tmp_path / "r.h5", result)
    stored = read_result(tmp_path / "r.h5")
    a = crosscheck_line(path, result.picks, params.scan.stretch_limit, params.read)
    b = crosscheck_line(path, stored)
    assert np.array_equal(a.t0, b.t0) and np.array_equal(a.tx2_velocity, b.tx2_velocity, equal_nan=True)
    used = stored.picks[stored.used]
    assert set(zip(b.cmp, b.t0)) <= set(zip(used["cmp"], used["t0"]))
