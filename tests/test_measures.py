"""AB semblance, normalised cross-correlation sum and weighted semblance against the properties
their papers state, and against plain-NumPy evaluations of their definitions."""

import numpy as np
import pytest
from conftest import ricker

from velspec.scan import MEASURES, scan_gather, velocity_axis

DT = 0.004
NEW = ["ab-semblance", "cross-correlation", "weighted-semblance"]
BOUNDED = [name for name, m in MEASURES.items() if m.bounded]
NO_MOVEOUT = np.array([1e12])  # m/s: x^2/v^2 vanishes in float32, traces are read unshifted


def hyperbola_gather(t0, v, offsets, amplitude=None, ns=800, f=25.0):
    """Ricker event on the exact hyperbola t^2 = t0^2 + x^2/v^2 (Yilmaz, 2001, Seismic Data
    Analysis), scaled per trace by ``amplitude`` (default 1)."""
    t = np.arange(ns) * DT
    tx = np.sqrt(t0**2 + (offsets / v) ** 2)
    a = np.ones(len(offsets)) if amplitude is None else amplitude
    return (a[:, None] * ricker(t[None, :] - tx[:, None], f)).astype(np.float32)


def reversing_amplitude(offsets, t0, v, x_zero):
    """Two-term reflectivity A + B sin^2(theta) (Shuey, 1985, A simplification of the Zoeppritz
    equations, Geophysics 50, 609-614) with the straight-ray angle of a constant-velocity
    medium, sin^2(theta) = x^2 / (x^2 + v^2 t0^2), changing sign at offset ``x_zero``."""
    s2 = offsets**2 / (offsets**2 + (v * t0) ** 2)
    s2_zero = x_zero**2 / (x_zero**2 + (v * t0) ** 2)
    return 1.0 - s2 / s2_zero


def half_max_width(curve, axis):
    """Width along ``axis`` of the connected part of ``curve`` above half its maximum."""
    k = int(curve.argmax())
    lo, hi = k, k
    while lo > 0 and curve[lo - 1] >= curve[k] / 2:
        lo -= 1
    while hi < len(curve) - 1 and curve[hi + 1] >= curve[k] / 2:
        hi += 1
    return axis[hi] - axis[lo]


def test_registry_marks_the_unbounded_measure():
    # The cross-correlation sum ranges over -1/(M-1)..1 (see the lower-bound test below).
    assert not MEASURES["cross-correlation"].bounded
    assert MEASURES["ab-semblance"].bounded and MEASURES["weighted-semblance"].bounded


def test_polarity_reversal_keeps_ab_semblance_high():
    # Sarkar, Baumel & Larner (2002) and Fomel (2009): classic semblance collapses on an event
    # whose amplitude changes sign across the spread, AB semblance does not.
    offsets = np.linspace(100, 3000, 60)
    v, t0 = 2500.0, 1.5
    amp = reversing_amplitude(offsets, t0, v, x_zero=1550.0)
    data = hyperbola_gather(t0, v, offsets, amp)
    vels = velocity_axis(1500, 4000, 251)
    j = int(round(t0 / DT))
    k = int(np.argmin(np.abs(vels - v)))
    panels = {m: scan_gather(data, offsets, DT, 0.0, vels, measure=m) for m in
              ("semblance", "ab-semblance", "weighted-semblance")}
    assert panels["semblance"][k, j] < 0.2
    for m in ("ab-semblance", "weighted-semblance"):
        assert panels[m][k, j] > 0.8
        assert abs(vels[panels[m][:, j].argmax()] - v) <= 0.01 * v


@pytest.mark.parametrize("measure", NEW)
def test_each_measure_peaks_at_the_true_velocity(measure):
    # The coherence maximum lies at the velocity of the hyperbola (Taner & Koehler, 1969,
    # Velocity spectra, Geophysics 34, 859-881), for any measure that rewards alignment.
    offsets = np.linspace(100, 3000, 60)
    vels = velocity_axis(1500, 4500, 301)   # 10 m/s steps, under 1% of every velocity here
    for v in (1800.0, 2700.0, 3600.0):
        data = hyperbola_gather(1.2, v, offsets)
        panel = scan_gather(data, offsets, DT, 0.0, vels, measure=measure)
        best = vels[panel[:, int(round(1.2 / DT))].argmax()]
        assert abs(best - v) <= 0.01 * v


@pytest.mark.parametrize("offsets", [np.zeros(24), np.linspace(100, 2400, 24)],
                         ids=["one-offset", "spread"])
def test_identical_traces_without_moveout_give_one(offsets, rng):
    # Identical traces are perfectly coherent: 1 for every bounded measure (Neidell & Taner,
    # 1971) and for the cross-correlation sum, whose pair correlations are then all 1. With all
    # offsets equal the A + B x^2 trend degenerates to the constant (one-offset branch).
    trace = rng.standard_normal(600).astype(np.float32)
    data = np.tile(trace, (24, 1))
    for m in BOUNDED + ["cross-correlation"]:
        panel = scan_gather(data, offsets, DT, 0.0, NO_MOVEOUT, window=0.02, measure=m)
        assert np.allclose(panel[:, 10:-10], 1.0, atol=2e-5), m


def test_one_offset_ab_semblance_is_classic_semblance(rng):
    # With one offset x^2 is constant, span{1, x^2} is span{1}, and the least-squares A + B x^2
    # fit is the mean (Fomel, 2009: semblance is the fit of a constant), so S_AB = semblance.
    offsets = np.full(30, 1200.0)
    data = hyperbola_gather(1.0, 2500.0, offsets, ns=500)
    data += 0.5 * rng.standard_normal(data.shape).astype(np.float32)
    vels = velocity_axis(2000, 3000, 11)
    ab = scan_gather(data, offsets, DT, 0.0, vels, measure="ab-semblance")
    classic = scan_gather(data, offsets, DT, 0.0, vels, measure="semblance")
    assert np.allclose(ab, classic, atol=1e-5)


def test_live_traces_change_under_the_stretch_mute():
    # Only traces inside the stretch mute count, with the sums of x^2 and x^4 over those alone:
    # a flattened event on the near traces is still coherent (Neidell & Taner, 1971, with N
    # the number of contributing channels; Fomel, 2009, for the fit over the same channels).
    offsets = np.linspace(0, 3000, 31)
    v = 2000.0
    data = hyperbola_gather(0.4, v, offsets, ns=400) + hyperbola_gather(1.0, v, offsets, ns=400)
    for m in NEW:
        panel = scan_gather(data, offsets, DT, 0.0, np.array([v]), window=0.0,
                            stretch_limit=0.05, measure=m)
        assert panel[0, 100] > 0.97, m   # at 0.4 s about 10 of 31 traces pass a 5% mute


def test_independent_noise_ab_semblance_averages_two_over_n(rng):
    # For iid Gaussian samples the fitted energy is the projection of an N-vector on a fixed
    # 2-dimensional subspace, so fit / energy ~ Beta(1, (N-2)/2), mean exactly 2/N; summed over
    # W independent samples the ratio of sums is Beta(W, W(N-2)/2), mean again 2/N (Cochran's
    # theorem; the semblance case, 1/N, is Neidell & Taner, 1971). Unshifted reads keep the
    # samples iid (no interpolation).
    for n in (6, 24):
        data = rng.standard_normal((n, 4000)).astype(np.float32)
        offsets = np.linspace(100, 3000, n)
        panel = scan_gather(data, offsets, DT, 0.0, NO_MOVEOUT, window=0.04,
                            measure="ab-semblance")
        assert abs(panel[0, 20:-20].mean() * n / 2.0 - 1.0) < 0.05


def test_independent_noise_cross_correlation_averages_zero(rng):
    # Pair correlations of independent zero-mean traces have mean 0 (Neidell & Taner, 1971).
    data = rng.standard_normal((24, 4000)).astype(np.float32)
    panel = scan_gather(data, np.zeros(24), DT, 0.0, NO_MOVEOUT, window=0.04,
                        measure="cross-correlation")
    values = panel[0, 20:-20]
    assert abs(values.mean()) < 0.005
    assert values.min() < 0.0   # negative values do occur: the measure is not 0..1


def test_cross_correlation_reaches_its_lower_bound(rng):
    # Half the traces of one polarity, half of the other: sum_i b_i = 0 at every sample, so the
    # mean pair correlation is -1/(M-1), the Cauchy-Schwarz lower bound (any linear algebra text).
    trace = rng.standard_normal(500).astype(np.float32)
    m = 20
    data = np.tile(trace, (m, 1))
    data[::2] *= -1
    panel = scan_gather(data, np.zeros(m), DT, 0.0, NO_MOVEOUT, window=0.02,
                        measure="cross-correlation")
    assert np.allclose(panel[0, 10:-10], -1.0 / (m - 1), atol=1e-5)


def _nmo_reference(data, offsets, v, stretch_limit):
    """NMO-corrected samples (ntr, ns) and live mask by the hyperbola, float64 NumPy."""
    ntr, ns = data.shape
    t0 = DT * np.arange(ns)
    tx = np.sqrt(t0[None, :] ** 2 + (offsets[:, None] / v) ** 2)
    pos = tx / DT
    live = (t0[None, :] > 0) & ((tx - t0) <= stretch_limit * t0) & (pos <= ns - 1)
    a = np.array([np.interp(p, np.arange(ns), tr) for p, tr in zip(pos, data)])
    return np.where(live, a, 0.0), live


def test_agrees_with_numpy_definitions(rng):
    # Independent evaluations of the published definitions: np.linalg.lstsq per sample for the
    # A + B x^2 fit (Fomel, 2009) and the explicit O(M^2) pair loop of normalised
    # cross-correlations (Neidell & Taner, 1971); weighted semblance as documented.
    offsets = np.linspace(50, 2800, 16)
    data = hyperbola_gather(0.9, 2300.0, offsets, ns=300)
    data += 0.3 * rng.standard_normal(data.shape).astype(np.float32)
    stretch, half = 0.4, 3
    vels = np.array([2000.0, 2300.0, 2700.0])
    got = {m: scan_gather(data, offsets, DT, 0.0, vels, window=2 * half * DT,
                          stretch_limit=stretch, measure=m) for m in NEW}
    phi = (offsets / offsets.max()) ** 2
    ns = data.shape[1]
    for iv, v in enumerate(vels):
        a, live = _nmo_reference(data.astype(np.float64), offsets, v, stretch)
        n = live.sum(axis=0)
        fit = np.zeros(ns)
        energy = np.zeros(ns)
        for j in range(ns):
            idx = np.flatnonzero(live[:, j])
            if len(idx) < 3:
                continue
            basis = np.stack([np.ones(len(idx)), phi[idx]], axis=1)
            coef = np.linalg.lstsq(basis, a[idx, j], rcond=None)[0]
            fit[j] = np.sum((basis @ coef) ** 2)
            energy[j] = np.sum(a[idx, j] ** 2)
        box = np.ones(2 * half + 1)
        wf, we = np.convolve(fit, box, "same"), np.convolve(energy, box, "same")
        wg = np.convolve(np.where(energy > 0, fit**2 / np.where(energy > 0, energy, 1), 0),
                         box, "same")
        ab = np.where(we > 0, wf / np.where(we > 0, we, 1), 0)
        ws = np.where(we > 0, wg / np.where(we > 0, we, 1), 0)
        cc = np.zeros(ns)
        for j in range(ns):
            lo, hi = max(j - half, 0), min(j + half + 1, ns)
            idx = [i for i in np.flatnonzero(live[:, j]) if np.sum(a[i, lo:hi] ** 2) > 0]
            if len(idx) < 2:
                continue
            pairs = [np.dot(a[i, lo:hi], a[k, lo:hi])
                     / np.sqrt(np.dot(a[i, lo:hi], a[i, lo:hi]) * np.dot(a[k, lo:hi], a[k, lo:hi]))
                     for p, i in enumerate(idx) for k in idx[p + 1:]]
            cc[j] = np.mean(pairs)
        # Float32 positions may flip a sample in or out at a mute edge: compare most samples.
        ok = n >= 2
        for name, ref in (("ab-semblance", ab), ("weighted-semblance", ws),
                          ("cross-correlation", cc)):
            diff = np.abs(got[name][iv] - ref)[ok]
            assert np.median(diff) < 1e-5, name
            assert np.mean(diff < 1e-3) > 0.95, name


def test_weighted_semblance_peaks_are_narrower_than_ab_semblance():
    # Luo & Hale (2012): weighted semblance has higher resolution than AB semblance, whose
    # A + B x^2 trend partly absorbs residual moveout (claim from memory of the paper). Width
    # at half maximum along velocity, for a flat-amplitude and a polarity-reversing event.
    offsets = np.linspace(100, 3000, 60)
    v, t0 = 2500.0, 1.5
    vels = velocity_axis(1500, 4000, 251)
    j = int(round(t0 / DT))
    for amp in (None, reversing_amplitude(offsets, t0, v, x_zero=1550.0)):
        data = hyperbola_gather(t0, v, offsets, amp)
        width = {m: half_max_width(scan_gather(data, offsets, DT, 0.0, vels, measure=m)[:, j],
                                   vels) for m in ("semblance", "ab-semblance", "weighted-semblance")}
        print("half-max widths, m/s:", width)
        assert width["weighted-semblance"] < width["ab-semblance"]


@pytest.mark.parametrize("measure", NEW)
def test_same_bits_for_any_thread_count(measure, rng):
    import numba

    offsets = np.linspace(50, 2800, 40)
    data = rng.standard_normal((40, 500)).astype(np.float32)
    vels = velocity_axis(1500, 4000, 33)
    numba.set_num_threads(1)
    one = scan_gather(data, offsets, DT, 0.0, vels, measure=measure)
    numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
    many = scan_gather(data, offsets, DT, 0.0, vels, measure=measure)
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
    assert np.array_equal(one, many)
