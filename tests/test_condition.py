"""Gather conditioning (velspec.condition): each check names the outside source it rests on."""

import dataclasses

import numpy as np
import pytest
from conftest import ricker
from scipy import ndimage, signal

from velspec.condition import (
    ConditionReport,
    agc,
    apply_top_mute,
    bandpass,
    bandpass_sos,
    clip_spikes,
    condition_gather,
    first_breaks,
    fit_first_breaks,
    linear_mute_times,
    running_max_abs,
    spherical_divergence_gain,
    supergather,
    table_mute_times,
)
from velspec.errors import InputError, ParameterError
from velspec.params import ConditionParams, RunParams, load_toml
from velspec.synth.layers import reflection_times

DT = 0.004
NS = 750
WATER = 1500.0  # m/s, speed of sound in sea water (common practice, no source)
ONLY = dict(edit=False, bandpass=False, mute="off", gain="none")  # every step off


def steps(**on):
    return ConditionParams(**{**ONLY, **on})


def causal_pulse(tau, f=25.0):
    """A decaying sine that starts at tau = 0: a first arrival whose onset is its arrival time."""
    return np.where(tau >= 0, np.sin(2 * np.pi * f * tau) * np.exp(-1.5 * f * np.maximum(tau, 0)), 0.0)


def flat_earth_gather(rng, offsets, direct=1.0, noise=0.01):
    """A direct wave at exactly |x| / 1500 m/s and three primaries at their exact Snell's-law times."""
    t = DT * np.arange(NS)
    times, _ = reflection_times([400.0, 500.0, 600.0], [WATER, 1900.0, 2300.0, 2800.0], offsets)
    data = direct * causal_pulse(t[None, :] - np.abs(offsets)[:, None] / WATER)
    for k in range(times.shape[0]):
        data += 1.5 * ricker(t[None, :] - times[k][:, None], 25.0)
    data += noise * rng.standard_normal(data.shape)
    return data.astype(np.float32)


# ------------------------------------------------------------------------------------ band-pass

def impulse_response(dt, n, **kw):
    trace = np.zeros((1, n), np.float32)
    trace[0, n // 2] = 1.0
    out = bandpass(trace, dt, **kw)[0].astype(np.float64)
    freqs = np.fft.rfftfreq(n, dt)
    return freqs, np.abs(np.fft.rfft(out))


@pytest.mark.parametrize("low, high, order", [(4.0, 60.0, 4), (8.0, 40.0, 6), (0.0, 30.0, 3), (10.0, 0.0, 5)])
def test_bandpass_amplitude_matches_scipy_design_twice(low, high, order):
    dt, n = 0.002, 8192
    freqs, gain = impulse_response(dt, n, low=low, high=high, order=order)
    # reference: scipy.signal.butter + sosfreqz of the same design; sosfiltfilt applies it forward
    # and backward, so the response is |H|^2 (scipy docs)
    kind, wn = {(True, True): ("bandpass", [low, high]), (True, False): ("highpass", low),
                (False, True): ("lowpass", high)}[(low > 0, high > 0)]
    sos = signal.butter(order, wn, btype=kind, fs=1 / dt, output="sos")
    _, h = signal.sosfreqz(sos, worN=freqs, fs=1 / dt)
    assert np.max(np.abs(gain - np.abs(h) ** 2)) < 2e-4
    for corner in (f for f in (low, high) if f > 0):
        k = np.argmin(np.abs(freqs - corner))
        _, hc = signal.sosfreqz(sos, worN=[freqs[k]], fs=1 / dt)
        assert gain[k] == pytest.approx(abs(hc[0]) ** 2, abs=2e-4)
        _, exact = signal.sosfreqz(sos, worN=[corner], fs=1 / dt)
        # Butterworth (1930): one pass is 1/sqrt(2) at its corner, so forward and back give 1/2
        assert abs(exact[0]) ** 2 == pytest.approx(0.5, abs=1e-6)
    stop = np.zeros_like(freqs, bool)
    if low > 0:
        stop |= freqs < low / 3
    if high > 0:
        stop |= freqs > high * 3
    assert stop.any() and np.all(gain[stop] < 1e-3)  # at least 60 dB down a factor 3 beyond a corner
    assert np.allclose(gain[stop], np.abs(h[stop]) ** 2, atol=2e-6)


def test_bandpass_design_is_the_scipy_butterworth():
    ours = bandpass_sos(0.004, 4.0, 60.0, 4)
    ref = signal.butter(4, [4.0, 60.0], btype="bandpass", fs=250.0, output="sos")  # scipy: reference
    w = np.linspace(0, 125, 500)
    assert np.allclose(signal.sosfreqz(ours, w, fs=250.0)[1], signal.sosfreqz(ref, w, fs=250.0)[1])


def test_bandpass_is_zero_phase():
    # sosfiltfilt runs the filter forward and backward, so the phase cancels (scipy docs)
    n, k = 1001, 500
    t = DT * (np.arange(n) - k)
    traces = np.zeros((2, n), np.float32)
    traces[0] = ricker(t, 25.0)  # symmetric about sample k
    traces[1, k] = 1.0  # a spike at sample k
    out = bandpass(traces, DT, 4.0, 60.0, 4)
    half = 200
    assert np.allclose(out[0, k - half: k], out[0, k + half: k: -1], atol=1e-5 * np.abs(out[0]).max())
    assert np.argmax(out[1]) == k and np.argmax(out[0]) == k


def test_bandpass_corner_above_nyquist_is_a_parameter_error():
    data = np.ones((2, 100), np.float32)
    with pytest.raises(ParameterError, match="Nyquist frequency 50 Hz.*lower it"):
        condition_gather(data, np.array([100.0, 200.0]), 0.01, 0.0, steps(bandpass=True, bandpass_high=60.0))


# ------------------------------------------------------------------------------------------ gain

def test_spherical_divergence_gain_restores_constant_amplitude():
    # Newman (1973), Divergence effects in a layered earth: a primary's amplitude falls as
    # 1 / (t V_rms(t)^2) (value from memory); a trace that falls so comes out of the gain flat
    table = ((0.0, 1500.0), (1.0, 2000.0), (2.5, 3200.0))
    t = DT * np.arange(1, NS + 1)
    v = np.interp(t, [0.0, 1.0, 2.5], [1500.0, 2000.0, 3200.0])
    carrier = np.cos(2 * np.pi * 7.0 * t)
    trace = (carrier / (t * v**2)).astype(np.float32)[None, :]
    out, _, _ = condition_gather(trace, np.array([0.0]), DT, DT, steps(gain="spherical", gain_velocity=table))
    assert np.allclose(out[0], carrier / 1500.0**2, rtol=1e-5, atol=1e-12)
    g = spherical_divergence_gain(NS, DT, DT, table)
    assert np.allclose(g * (1.0 / (t * v**2)), 1 / 1500.0**2, rtol=1e-12)


def test_agc_equalises_bursts_of_different_level():
    # AGC divides by the RMS in a sliding window (definition of AGC, common practice, no source)
    n = 1500
    t = DT * np.arange(n)
    trace = np.zeros(n)
    loud, quiet = (t >= 0.4) & (t < 2.4), (t >= 3.2) & (t < 5.6)
    trace[loud] = 25.0 * np.sin(2 * np.pi * 20.0 * t[loud])
    trace[quiet] = 0.3 * np.sin(2 * np.pi * 20.0 * t[quiet])
    window = 0.4
    out = agc(trace[None].astype(np.float32), DT, window)[0].astype(np.float64)
    wn = int(round(window / DT))
    rms = []
    for burst in (loud, quiet):
        idx = np.flatnonzero(burst)[wn: -wn]  # windows wholly inside the burst
        for start in idx[:: wn // 2][:-2]:
            rms.append(np.sqrt(np.mean(out[start: start + wn] ** 2)))
    assert len(rms) >= 6
    assert np.allclose(rms, 1.0, rtol=0.02)
    assert np.all(out[t < 0.3] == 0)  # silence stays silent


def test_agc_in_the_stage_runs_after_the_mute():
    rng = np.random.default_rng(5)
    x = np.arange(100.0, 2100.0, 100.0)
    data = flat_earth_gather(rng, x)
    out, _, _ = condition_gather(data, x, DT, 0.0, steps(mute="linear", mute_velocity=WATER, gain="agc"))
    t = DT * np.arange(NS)
    assert np.all(out[t[None, :] <= x[:, None] / WATER] == 0)


# ------------------------------------------------------------------------------------------ mute

@pytest.mark.parametrize("filtered, tolerance", [(False, 2), (True, 5)])
def test_automatic_mute_finds_the_direct_arrival(filtered, tolerance):
    # the direct wave travels at |x| / 1500 m/s exactly; its onset is the first break
    # (Coppens, 1985: energy after a sample over the energy before it)
    rng = np.random.default_rng(7)
    x = np.arange(100.0, 3100.0, 50.0)
    data = flat_earth_gather(rng, x)
    t_direct = x / WATER
    burst = [5, 6, 30]  # noise bursts well ahead of the arrival on three traces: the fit is robust
    for i in burst:
        data[i, 10:25] += 3.0 * rng.standard_normal(15).astype(np.float32)
    source = bandpass(data, DT) if filtered else data
    fitted = fit_first_breaks(x, first_breaks(source, DT, 0.0, 0.03), 7)
    assert np.max(np.abs(fitted - t_direct)) <= tolerance * DT
    assert np.all(np.diff(fitted) >= 0)

    taper = 0.03
    params = steps(mute="auto", mute_after=0.0, mute_taper=taper, bandpass=filtered)
    out, _, _ = condition_gather(data, x, DT, 0.0, params)
    t = DT * np.arange(NS)
    above = t[None, :] < (t_direct - tolerance * DT)[:, None]
    assert np.all(out[above] == 0)
    below = t[None, :] > (t_direct + tolerance * DT + taper)[:, None]
    ref = source
    assert np.array_equal(out[below], ref[below])
    assert np.abs(out[~above & ~below]).max() > 0  # the taper passes something


def test_first_breaks_pick_the_first_energy_not_the_strongest():
    # a strong later event: the ratio over all energy before the sample favours the first arrival
    t = DT * np.arange(NS)
    trace = 0.5 * causal_pulse(t - 0.3) + 5.0 * causal_pulse(t - 1.2)
    assert first_breaks(trace[None], DT, 0.0, 0.03)[0] == pytest.approx(0.3, abs=2 * DT)


def test_table_and_linear_mutes_follow_their_definition():
    x = np.array([0.0, 500.0, 1000.0, 1500.0, 2500.0])
    table = ((0.0, 0.1), (1000.0, 0.5), (2000.0, 0.7))
    # linear between the rows, held beyond the last: worked by hand from the table
    assert np.allclose(table_mute_times(x, table), [0.1, 0.3, 0.5, 0.6, 0.7])
    assert np.allclose(table_mute_times(-x, table), [0.1, 0.3, 0.5, 0.6, 0.7])
    # t = intercept + |x| / v with 0.05 s and 2000 m/s
    assert np.allclose(linear_mute_times(x, 0.05, 2000.0), [0.05, 0.3, 0.55, 0.8, 1.3])

    ones = np.ones((x.size, NS), np.float32)
    taper = 0.08
    for params, times in ((steps(mute="table", mute_table=table, mute_taper=taper), [0.1, 0.3, 0.5, 0.6, 0.7]),
                          (steps(mute="linear", mute_intercept=0.05, mute_velocity=2000.0, mute_taper=taper),
                           [0.05, 0.3, 0.55, 0.8, 1.3])):
        out, _, _ = condition_gather(ones, x, DT, 0.0, params)
        t = DT * np.arange(NS)
        late = t[None, :] - np.array(times)[:, None]
        assert np.all(out[late <= 0] == 0)
        assert np.all(out[late >= taper] == 1)
        ramp = (late > 0) & (late < taper)
        assert ramp.sum() >= x.size * (taper / DT - 1)
        # a cosine (Hann) taper: (1 - cos(pi s / taper)) / 2 at s seconds below the mute line
        assert np.allclose(out[ramp], (1 - np.cos(np.pi * late[ramp] / taper)) / 2, atol=1e-6)


def test_hard_mute_without_taper():
    out = apply_top_mute(np.ones((1, 10), np.float32), 0.1, 0.0, np.array([0.45]), taper=0.0)
    assert out[0].tolist() == [0, 0, 0, 0, 0, 1, 1, 1, 1, 1]


# --------------------------------------------------------------------------------------- editing

def test_editing_leaves_out_noisy_and_dead_traces_and_clips_a_spike():
    rng = np.random.default_rng(11)
    x = np.arange(100.0, 3100.0, 50.0)
    clean = flat_earth_gather(rng, x, direct=4.0)  # a direct wave far above the reflections
    data = clean.copy()
    rms = np.sqrt(np.mean(clean.astype(np.float64) ** 2, axis=1))
    data[20] = (10 * rms[20] * rng.standard_normal(NS)).astype(np.float32)  # noise at 10x the RMS
    data[40] = 0.0  # a dead channel
    data[33, 500] = 40.0  # a spike
    out, xo, report = condition_gather(data, x, DT, 0.0, steps(edit=True))
    assert report == ConditionReport(traces_in=x.size, traces_clipped=1, samples_clipped=1, noisy=1, dead=1)
    keep = np.setdiff1d(np.arange(x.size), [20, 40])
    assert np.array_equal(xo, x[keep])
    # robust deviation of the spiked trace: 1.4826 MAD (Hampel, 1974)
    spiked = data[33].astype(np.float64)
    med = np.median(spiked)
    sigma = 1.4826 * np.median(np.abs(spiked - med))
    row = int(np.flatnonzero(keep == 33)[0])
    assert abs(out[row, 500] - med) <= 12 * sigma * (1 + 1e-6) and out[row, 500] < 1.0
    others = np.ones(NS, bool)
    others[500] = False
    assert np.array_equal(out[row, others].view(np.uint32), clean[33, others].view(np.uint32))
    rest = keep != 33
    assert np.array_equal(out[rest].view(np.uint32), clean[keep[rest]].view(np.uint32))  # untouched to the bit


def test_a_clean_gather_passes_editing_to_the_bit():
    rng = np.random.default_rng(3)
    x = np.arange(100.0, 3100.0, 50.0)
    clean = flat_earth_gather(rng, x, direct=20.0, noise=0.0)  # quiet water column, loud direct wave
    fixed, clipped = clip_spikes(clean, DT)
    assert clipped.sum() == 0 and np.array_equal(fixed.view(np.uint32), clean.view(np.uint32))
    _, _, report = condition_gather(clean, x, DT, 0.0, steps(edit=True))
    assert report == ConditionReport(traces_in=x.size)


@pytest.mark.parametrize("ns, half", [(1, 0), (7, 3), (50, 0), (50, 4), (53, 10), (40, 30)])
def test_running_max_matches_scipy(ns, half):
    a = np.random.default_rng(ns + half).standard_normal((3, ns)).astype(np.float32)
    ref = ndimage.maximum_filter1d(np.abs(a), size=2 * half + 1, axis=1, mode="nearest")  # scipy: reference
    assert np.array_equal(running_max_abs(a, half), ref)


def test_non_finite_traces_are_always_left_out():
    data = np.ones((4, 50), np.float32)
    data[2, 7] = np.nan
    out, xo, report = condition_gather(data, np.arange(4.0), DT, 0.0, steps())
    assert out.shape == (3, 50) and report.dead == 1 and xo.tolist() == [0.0, 1.0, 3.0]


# ----------------------------------------------------------------------------------- supergather

def test_supergather_multiplies_the_fold_and_bins_offsets():
    rng = np.random.default_rng(2)
    x = np.arange(100.0, 2100.0, 50.0)
    n = 5
    base = flat_earth_gather(rng, x)
    jitter = np.array([-6.0, -3.0, 0.0, 3.0, 6.0])  # neighbouring CMPs' offsets differ a little
    gathers = [(base, x + jitter[k]) for k in range(n)]
    data, offsets, fold = supergather(gathers)
    # flat earth: identical traces, so each bin is the trace itself, with the fold times n
    assert fold.tolist() == [n] * x.size
    assert np.allclose(offsets, x) and np.allclose(data, base, atol=1e-6)
    # offsets binned by hand: width 100 m from the smallest offset, 94 m
    data, offsets, fold = supergather(gathers, bin_width=100.0)
    lo = x.min() + jitter.min()
    all_x = np.concatenate([x + j for j in jitter])
    index = np.floor((all_x - lo) / 100.0 + 0.5)
    assert fold.tolist() == [int((index == k).sum()) for k in np.unique(index)]
    assert np.allclose(offsets, [all_x[index == k].mean() for k in np.unique(index)])
    assert fold.sum() == n * x.size


def test_supergather_rejects_mixed_trace_lengths():
    with pytest.raises(InputError, match="same samples per trace"):
        supergather([(np.zeros((2, 10)), np.array([1.0, 2.0])), (np.zeros((2, 11)), np.array([1.0, 2.0]))])


# ------------------------------------------------------------------------------------ parameters

@pytest.mark.parametrize("change, words", [
    (dict(mute="sometimes"), "mute must be 'off', 'auto', 'linear' or 'table'"),
    (dict(mute="table"), "mute_table must be rows of two numbers"),
    (dict(mute="table", mute_table=((0.0, 0.2), (0.0, 0.4))), "increasing offsets"),
    (dict(bandpass=True, bandpass_low=50.0, bandpass_high=20.0), r"bandpass_low \(50 Hz\) must be below bandpass_high"),
    (dict(bandpass=True, bandpass_low=0.0, bandpass_high=0.0), "or set bandpass = false"),
    (dict(bandpass_order=0), "bandpass_order must be an integer in 1..10"),
    (dict(gain="loud"), "gain must be 'none', 'spherical' or 'agc'"),
    (dict(gain_velocity=((0.0, -1500.0),)), "positive velocity"),
    (dict(supergather_cmps=4), "supergather_cmps must be an odd integer"),
    (dict(edit_traces=4), "edit_traces must be an odd integer >= 3"),
    (dict(noisy_ratio=0.5), "noisy_ratio must be > 1"),
    (dict(mute_taper=-0.1), "mute_taper must be in"),
    (dict(first_break_traces=2), "first_break_traces must be an odd integer"),
])
def test_bad_parameters_say_what_to_do(change, words):
    with pytest.raises(ParameterError, match=words):
        dataclasses.replace(ConditionParams(), **change).validate()
    with pytest.raises(ParameterError, match=words):
        RunParams(condition=dataclasses.replace(ConditionParams(), **change)).validate()


def test_condition_section_of_a_toml_file(tmp_path):
    cfg = tmp_path / "c.toml"
    cfg.write_text('[condition]\nmute = "table"\nmute_table = [[0, 0.1], [2000, 0.9]]\ngain = "agc"\n')
    p = load_toml(cfg).validate()
    assert p.condition.mute_table == ((0.0, 0.1), (2000.0, 0.9)) and p.condition.gain == "agc"
    assert RunParams.from_dict(p.to_dict()) == p
    cfg.write_text("[condition]\nmute_speed = 1500\n")
    with pytest.raises(ParameterError, match=r"unknown parameter in \[condition\]: .mute_speed."):
        load_toml(cfg)
    with pytest.raises(ParameterError, match="mute_table must be rows of two numbers"):
        ConditionParams(mute_table=((1.0, "a"),))
