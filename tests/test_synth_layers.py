"""Flat-layer ray tracing checked against independent solutions and published formulas."""

import numpy as np
import pytest
from scipy.optimize import brentq

from velspec.synth.layers import (
    FADE_START,
    FADE_STOP,
    best_fit_stacking_velocity,
    critical_fade,
    gardner_density,
    incidence_sine,
    multiple_times,
    reflection_coefficients,
    reflection_times,
    rms_velocity,
    stacking_velocity,
    zero_offset_times,
)

MODELS = {
    "increasing": (np.array([400.0, 600.0, 800.0]), np.array([1600.0, 2200.0, 2900.0, 3500.0])),
    "slow layer": (
        np.array([250.0, 500.0, 300.0, 700.0]),
        np.array([1500.0, 2600.0, 2000.0, 3300.0, 4000.0]),
    ),
    "fast on top": (np.array([300.0, 300.0]), np.array([3000.0, 2000.0, 2500.0])),
}


def snell_brentq(h, v, x, legs=2):
    """Independent solution of the layered-earth ray equations (Snell's law) with scipy's brentq.

    Solves sum legs*h_i*v_i*p/sqrt(1-p^2 v_i^2) = x directly in the ray parameter p for each
    reflector, then t = sum legs*h_i/(v_i sqrt(1-p^2 v_i^2)).
    """
    n = h.size
    t = np.empty((n, x.size))
    p_out = np.empty((n, x.size))
    for k in range(n):
        hk, vk = h[: k + 1], v[: k + 1]
        pmax = 1.0 / vk.max()
        for j, xj in enumerate(np.abs(x)):
            if xj == 0:
                p = 0.0
            else:

                def f(p):
                    return np.sum(legs * hk * vk * p / np.sqrt(1.0 - (p * vk) ** 2)) - xj

                p = brentq(f, 0.0, pmax * (1.0 - 1e-15), xtol=1e-22, rtol=8.9e-16, maxiter=500)
            t[k, j] = np.sum(legs * hk / (vk * np.sqrt(1.0 - (p * vk) ** 2)))
            p_out[k, j] = p
    return t, p_out


@pytest.mark.parametrize("name", MODELS)
def test_primary_times_match_independent_snell_solution(name):
    # Snell's law for flat layers, solved independently with scipy.optimize.brentq
    h, v = MODELS[name]
    depth = h.sum()
    x = np.r_[0.0, 10.0, np.linspace(100.0, 2.0 * depth, 9), -700.0]
    t, p = reflection_times(h, v, x)
    t_ref, p_ref = snell_brentq(h, v[:-1], x)
    np.testing.assert_allclose(t, t_ref, rtol=0, atol=1e-9)
    np.testing.assert_allclose(p, p_ref, rtol=1e-8, atol=1e-14)


@pytest.mark.parametrize("name", MODELS)
def test_multiple_times_match_independent_snell_solution(name):
    # first-order surface multiple: the primary path twice, one ray parameter (Snell's law)
    h, v = MODELS[name]
    x = np.linspace(0.0, 2.0 * h.sum(), 7)
    t, p = multiple_times(h, v, x)
    t_ref, p_ref = snell_brentq(h, v[:-1], x, legs=4)
    np.testing.assert_allclose(t, t_ref, rtol=0, atol=1e-9)
    np.testing.assert_allclose(p, p_ref, rtol=1e-8, atol=1e-14)


def test_single_layer_is_an_exact_hyperbola():
    # t^2 = t0^2 + x^2/v^2 for one homogeneous layer (Yilmaz, 2001, Seismic Data Analysis, SEG)
    h, v = np.array([1200.0]), np.array([2400.0, 3100.0])
    x = np.linspace(0.0, 12000.0, 25)  # out to ten times the depth
    t, p = reflection_times(h, v, x)
    t0 = 2 * h[0] / v[0]
    np.testing.assert_allclose(t[0], np.sqrt(t0**2 + x**2 / v[0] ** 2), rtol=1e-12)
    # straight ray: sin(theta) = (x/2)/sqrt(h^2 + (x/2)^2), p = sin(theta)/v (exact geometry)
    np.testing.assert_allclose(p[0], (x / 2) / np.hypot(h[0], x / 2) / v[0], rtol=1e-10)


def test_multiple_of_single_layer_is_primary_of_double_thickness():
    # exact geometry: the multiple's path unfolds into a straight ray through a layer 2h thick
    h, v = np.array([700.0]), np.array([1800.0, 2500.0])
    x = np.linspace(0.0, 5000.0, 11)
    t, _ = multiple_times(h, v, x)
    np.testing.assert_allclose(t[0], np.sqrt((4 * h[0] / v[0]) ** 2 + x**2 / v[0] ** 2), rtol=1e-12)


def test_zero_offset_time_and_ray_parameter():
    # vertical ray: t0 = sum 2 h_i / v_i (exact geometry), p = 0
    h, v = MODELS["slow layer"]
    t, p = reflection_times(h, v, [0.0])
    expected = [sum(2 * h[i] / v[i] for i in range(k + 1)) for k in range(h.size)]
    np.testing.assert_allclose(t[:, 0], expected, rtol=1e-14)
    np.testing.assert_allclose(zero_offset_times(h, v), expected, rtol=1e-14)
    assert np.all(p == 0)


@pytest.mark.parametrize("name", MODELS)
def test_very_long_offsets_approach_the_head_wave_line(name):
    # As p -> 1/vmax the reflection becomes asymptotic to the head-wave line of the fastest layer,
    # t = x/vmax + sum 2 h_i sqrt(1/v_i^2 - 1/vmax^2) (refraction intercept time, e.g. Sheriff &
    # Geldart, 1995, Exploration Seismology), and stays above it (t(x) is convex).
    h, v = MODELS[name]
    x = np.array([1e4, 1e5, 1e6]) * h.sum() / 1000.0
    t, p = reflection_times(h, v, x)
    for k in range(h.size):
        vmax = v[: k + 1].max()
        line = x / vmax + np.sum(2 * h[: k + 1] * np.sqrt(1 / v[: k + 1] ** 2 - 1 / vmax**2))
        gap = t[k] - line
        assert np.all(gap > -1e-9)
        assert np.all(gap[1:] < 0.2 * gap[:-1])  # closes roughly as 1/x
        assert gap[-1] < 1e-3
        assert np.all(p[k] * vmax < 1)


def test_rms_velocity_matches_direct_sum_and_dix_inverts_it():
    # Dix, 1955, Geophysics 20, 68-86: vrms^2 = sum v_i^2 dt_i / sum dt_i, and its inverse
    # v_int^2 = (vrms_k^2 t_k - vrms_{k-1}^2 t_{k-1}) / (t_k - t_{k-1})
    h, v = MODELS["slow layer"]
    dt = [2 * h[i] / v[i] for i in range(h.size)]
    direct = [
        np.sqrt(sum(v[i] ** 2 * dt[i] for i in range(k + 1)) / sum(dt[: k + 1]))
        for k in range(h.size)
    ]
    vrms = rms_velocity(h, v)
    np.testing.assert_allclose(vrms, direct, rtol=1e-13)
    t0 = zero_offset_times(h, v)
    a = vrms**2 * t0
    vint = np.sqrt(np.diff(np.r_[0.0, a]) / np.diff(np.r_[0.0, t0]))
    np.testing.assert_allclose(vint, v[:-1], rtol=1e-12)


def test_best_fit_matches_numpy_least_squares():
    # least squares of t^2 = a + b x^2 checked against numpy.polyfit, with and without a mask
    rng = np.random.default_rng(3)
    x = np.linspace(50.0, 3000.0, 40)
    t = np.sqrt(1.2**2 + x**2 / 2300.0**2) + rng.normal(0, 2e-3, x.size)
    mask = x < 2000.0
    v_all = best_fit_stacking_velocity([1.2], x, t[None])[0]
    v_mask = best_fit_stacking_velocity([1.2], x, t[None], mask=mask)[0]
    b_all = np.polyfit(x**2, t**2, 1)[0]
    b_mask = np.polyfit(x[mask] ** 2, t[mask] ** 2, 1)[0]
    assert v_all == pytest.approx(1 / np.sqrt(b_all), rel=1e-10)
    assert v_mask == pytest.approx(1 / np.sqrt(b_mask), rel=1e-10)
    # fewer than two offsets cannot define a hyperbola with a free intercept
    assert np.isnan(best_fit_stacking_velocity([1.2], x, t[None], mask=x < 60.0)[0])


def test_stacking_velocity_of_single_layer_is_its_velocity():
    # the single-layer moveout is an exact hyperbola (Yilmaz, 2001), so any spread fits it exactly
    h, v = np.array([900.0]), np.array([2100.0, 2600.0])
    for x in (np.linspace(100, 500, 5), np.linspace(100, 4000, 60)):
        vs, _ = stacking_velocity(h, v, x, stretch_limit=None)
        assert vs[0] == pytest.approx(2100.0, rel=1e-9)


def test_stacking_velocity_between_rms_and_fastest_layer():
    # Taner & Koehler, 1969, Geophysics 34, 859-881: the short-spread stacking velocity is the RMS
    # velocity. Over longer spreads t^2(x^2) bends below the hyperbola (negative quartic term;
    # Al-Chalabi, 1973, Geophys. Prosp. 21, 783-795, value from memory), so the best fit lies
    # between vrms and the fastest layer above the reflector.
    h, v = MODELS["increasing"]
    vrms = rms_velocity(h, v)
    short, _ = stacking_velocity(h, v, np.linspace(0.0, 40.0, 9), stretch_limit=None)
    np.testing.assert_allclose(short, vrms, rtol=1e-5)
    long_, _ = stacking_velocity(h, v, np.linspace(100.0, 3600.0, 141), stretch_limit=None)
    vmax = np.maximum.accumulate(v[:-1])
    assert np.all(long_[1:] > vrms[1:] * (1 + 1e-4))
    assert np.all(long_[1:] < vmax[1:])
    assert long_[0] == pytest.approx(v[0], rel=1e-9)  # first reflector: one layer, exact


def test_stretch_mute_keeps_offsets_below_the_limit():
    # NMO stretch (t - t0)/t0 <= s for a single layer means x <= v t0 sqrt((1+s)^2 - 1)
    # (Yilmaz, 2001, Seismic Data Analysis: stretch = dt_NMO / t0; exact geometry of the hyperbola)
    h, v = np.array([600.0]), np.array([2000.0, 2400.0])
    x = np.arange(100.0, 3000.0, 25.0)
    s = 0.3
    t0 = 2 * h[0] / v[0]
    bound = v[0] * t0 * np.sqrt((1 + s) ** 2 - 1)
    vs, xmax = stacking_velocity(h, v, x, stretch_limit=s)
    assert xmax[0] == x[x <= bound].max()
    assert vs[0] == pytest.approx(2000.0, rel=1e-9)


def test_critical_fade_zero_beyond_critical_point_and_one_at_normal_incidence():
    # critical angle asin(v1/v2) (Snell's law); beyond the critical distance
    # x_c = 2 h tan(theta_c) the transmitted sine p*v2 exceeds 1
    h, v = np.array([800.0]), np.array([2000.0, 3000.0])
    xc = 2 * h[0] * np.tan(np.arcsin(v[0] / v[1]))
    x = np.r_[0.0, np.linspace(10.0, 0.5 * xc, 5), np.linspace(xc, 4 * xc, 5)]
    _, p = reflection_times(h, v, x)
    w = critical_fade(incidence_sine(p, v))
    assert w[0, 0] == 1.0
    assert np.all(w[0, x >= xc] == 0.0)
    assert np.all(np.diff(w[0]) <= 0)
    # documented fade: full amplitude up to sine 0.85, none from 0.97 on
    np.testing.assert_array_equal(critical_fade([0.0, FADE_START, FADE_STOP, 1.2]), [1, 1, 0, 0])
    mid = critical_fade(0.5 * (FADE_START + FADE_STOP))
    assert mid == pytest.approx(0.5)


def test_gardner_density_and_normal_incidence_reflection():
    # Gardner, Gardner & Gregory, 1974, Geophysics 39, 770-780: rho = 0.31 V^0.25 g/cm^3, V in m/s;
    # 3000 m/s -> 0.31 * 3000^0.25 = 2.294 g/cm^3 (hand computation)
    assert gardner_density(3000.0) == pytest.approx(2294.3, abs=0.1)
    # R = (Z2 - Z1)/(Z2 + Z1), the normal-incidence Zoeppritz result (Sheriff & Geldart, 1995);
    # with Z = 310 v^1.25 it depends only on the velocity ratio
    v = np.array([2000.0, 2500.0, 2500.0, 1800.0])
    r = (v[1:] / v[:-1]) ** 1.25
    np.testing.assert_allclose(reflection_coefficients(v), (r - 1) / (r + 1), rtol=1e-13)
    rho = np.array([1000.0, 2000.0, 2100.0, 2000.0])
    z = rho * v
    np.testing.assert_allclose(
        reflection_coefficients(v, rho), (z[1:] - z[:-1]) / (z[1:] + z[:-1]), rtol=1e-13
    )


@pytest.mark.parametrize(
    "thickness, velocity",
    [([100.0, -5.0], [1500.0, 2000.0, 2500.0]), ([100.0], [1500.0]), ([100.0], [1500.0, np.nan])],
)
def test_bad_models_are_refused(thickness, velocity):
    with pytest.raises(ValueError):
        reflection_times(thickness, velocity, [0.0, 100.0])
