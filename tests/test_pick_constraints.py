"""The picker's constraints while picking (time-varying bounds, guide band, Dix between nodes and
between picks), its recognition of slow events as likely multiples, and the regional trend."""

import numpy as np
import pytest
from conftest import ricker

from velspec.flags import Flag, used_mask
from velspec.io.picks_csv import function_on_axis, read_functions
from velspec.params import PickParams
from velspec.pick import pick_panel, regional_trend, trace_function, velocity_bounds
from velspec.scan import scan_gather, velocity_axis
from velspec.synth.layers import rms_velocity

DIX, MULTIPLE = int(Flag.impossible_interval_velocity), int(Flag.likely_multiple)

T0 = np.arange(1000) * 0.004
VEL = np.linspace(1400, 6000, 120)
STEP = VEL[1] - VEL[0]


def blob(t, v, height=0.9, sv=80.0, st=0.02):
    return (height * np.exp(-0.5 * (((VEL[:, None] - v) / sv) ** 2 + ((T0[None, :] - t) / st) ** 2))).astype(np.float32)


def ridge(v_of_t, height=0.8, sv=60.0):
    return (height * np.exp(-0.5 * ((VEL[:, None] - v_of_t[None, :]) / sv) ** 2)).astype(np.float32)


def dix_u(t, v):
    # Dix (1955): squared interval velocity between successive (t, V) samples.
    return np.diff(t * v.astype(np.float64) ** 2) / np.diff(t)


def test_regional_trend_is_the_rms_velocity_of_a_linear_velocity_depth_law():
    # v(z) = v0 + k z, finely layered; RMS velocity by its definition (Dix, 1955, Geophysics 20,
    # 68-86) over the layers, against the closed form of velspec.pick.regional_trend.
    v0, k = 1500.0, 0.6
    dz = 1.0
    z = np.arange(0.0, 4000.0, dz)
    v = v0 + k * (z + 0.5 * dz)
    t_layers = np.cumsum(2 * dz / v)
    vrms = rms_velocity(np.full(z.size, dz), np.append(v, v[-1]))
    got = regional_trend(t_layers, v0, k)
    assert np.max(np.abs(got - vrms) / vrms) < 1e-4
    assert np.allclose(regional_trend(np.array([0.0, 1.0]), v0, 0.0), v0)


def test_path_never_implies_an_impossible_interval_velocity():
    # A strong ridge that falls from 2600 to 1600 m/s within 0.2 s at 1.2 s, as a multiple train
    # crossing a primary trend would. Following it needs t2 V2^2 < t1 V1^2: an imaginary Dix
    # interval velocity (Dix, 1955). With the physical range held between nodes the traced
    # function may fall only as fast as vint >= 1400 m/s allows.
    truth = np.where(T0 < 1.2, 1600 + 800 * T0, np.maximum(2560 - 5000 * (T0 - 1.2), 1600.0))
    panel = ridge(truth)
    params = PickParams(max_decrease=20000.0)       # the rate limit alone would allow the fall
    free = trace_function(panel, VEL, T0, params)
    held = trace_function(panel, VEL, T0, params, vint_bounds=(1400.0, 7000.0))
    coarse = slice(25, None, 25)                    # 0.1 s apart, beyond the node rounding
    assert dix_u(T0[coarse], free[coarse]).min() < 0           # the check can fail
    assert dix_u(T0[coarse], held[coarse]).min() > (1400.0 - STEP) ** 2


def test_bounds_table_and_guide_band_hold_the_path(tmp_path):
    # A ridge at 2000 m/s everywhere. A bounds table (t0, vmin, vmax) and a guide function with a
    # band around it are the user's physical knowledge (common practice, no source): the path
    # stays inside whichever is tighter.
    panel = ridge(np.full(T0.size, 2000.0))
    params = PickParams(bounds=((0.0, 2300.0, 3000.0), (4.0, 3000.0, 4000.0)))
    path = trace_function(panel, VEL, T0, params)
    lo = np.interp(T0, [0, 4], [2300, 3000])
    hi = np.interp(T0, [0, 4], [3000, 4000])
    assert np.all(path >= lo - STEP) and np.all(path <= hi + STEP)

    csv = tmp_path / "guide.csv"
    csv.write_text("# a guide\nt0_s,vrms_m_s\n0.0,2600\n4.0,3400\n")
    functions = read_functions(csv)
    guide = function_on_axis(functions, 1, T0)
    gp = PickParams(guide_below=0.05, guide_above=0.05)
    lo, hi = velocity_bounds(T0, gp, VEL[0], VEL[-1], guide)
    res, path = pick_panel(panel, VEL, T0, gp, guide=guide)
    assert np.all(path >= lo - STEP) and np.all(path <= hi + STEP)


def test_per_cmp_guides_are_interpolated_between_cmps(tmp_path):
    # Linear interpolation in CMP number between the two nearest functions, held beyond them
    # (numpy.interp as the reference).
    csv = tmp_path / "g.csv"
    csv.write_text("cmp,t0_s,vrms_m_s\n10,0,2000\n10,2,3000\n20,0,2200\n20,2,3400\n")
    f = read_functions(csv)
    t = np.array([0.0, 1.0, 2.0])
    assert np.allclose(function_on_axis(f, 15, t), 0.5 * (np.interp(t, [0, 2], [2000, 3000])
                                                          + np.interp(t, [0, 2], [2200, 3400])))
    assert np.allclose(function_on_axis(f, 5, t), np.interp(t, [0, 2], [2000, 3000]))
    assert np.allclose(function_on_axis(f, 99, t), np.interp(t, [0, 2], [2200, 3400]))


def test_slow_strong_event_is_a_likely_multiple_and_not_used():
    # Primaries on a rising trend, and at 1.6 s a stronger event at 1550 m/s, 30 % slower than
    # the trend there: slower than any primary at that time can be, a likely multiple (common
    # practice, no source). It is returned flagged, never used.
    trend = 1500 + 500 * T0
    panel = ridge(trend, height=0.15)
    for t in (0.6, 1.2, 2.0, 2.8):
        panel += blob(t, float(np.interp(t, T0, trend)), 0.7)
    panel += blob(1.6, 1550.0, 0.95)
    res, path = pick_panel(panel, VEL, T0, PickParams(), vint_bounds=(1400.0, 7000.0))
    mult = (res["flags"] & MULTIPLE) != 0
    assert mult.sum() == 1
    assert abs(res["t0"][mult][0] - 1.6) < 0.01 and abs(res["vrms"][mult][0] - 1550) < STEP
    assert not used_mask(res["flags"])[mult].any()
    used_t = res["t0"][used_mask(res["flags"])]
    assert all(np.min(np.abs(used_t - t)) < 0.01 for t in (0.6, 1.2, 2.0, 2.8))


def test_no_two_used_picks_imply_a_non_physical_layer():
    # Two strong events 60 ms apart at 2400 and 2000 m/s: Dix (1955) gives
    # (1.06*2000^2 - 1.0*2400^2)/0.06 < 0. The weaker one is flagged DIX and left out.
    panel = ridge(1500 + 700 * T0, height=0.2)
    panel += blob(1.0, 2400.0, 0.9, st=0.01) + blob(1.2, 2000.0, 0.6, st=0.01)
    params = PickParams(multiple_margin=0.0, min_separation=0.05)
    res, path = pick_panel(panel, VEL, T0, params, search=20, vint_bounds=(1400.0, 7000.0))
    u = dix_u(res["t0"][used_mask(res["flags"])], res["vrms"][used_mask(res["flags"])])
    assert np.all(u >= 1400.0**2) and np.all(u <= 7000.0**2)
    assert ((res["flags"] & DIX) != 0).any()


def test_ab_semblance_pick_on_a_polarity_reversal_within_one_percent():
    # An event whose amplitude changes sign at mid-spread (two-term reflectivity, Shuey, 1985,
    # Geophysics 50, 609-614): classic semblance collapses there, AB semblance (Sarkar, Baumel &
    # Larner, 2002, Geophysics 67, 1503-1510) does not. Its pick must lie within 1 % of the
    # hyperbola's velocity (the exact moveout t^2 = t0^2 + x^2/v^2 of a constant-velocity layer).
    dt = 0.004
    offsets = np.linspace(100, 3000, 60)
    ns = 800
    t = np.arange(ns) * dt
    vels = velocity_axis(1500, 4000, 120)
    for t0, v in ((1.2, 2300.0), (1.8, 2800.0)):
        s2 = offsets**2 / (offsets**2 + (v * t0) ** 2)
        x_mid = 0.5 * (offsets[0] + offsets[-1])
        amp = 1.0 - s2 / (x_mid**2 / (x_mid**2 + (v * t0) ** 2))
        tx = np.sqrt(t0**2 + (offsets / v) ** 2)
        data = (amp[:, None] * ricker(t[None, :] - tx[:, None], 25.0)).astype(np.float32)
        data += np.random.default_rng(5).normal(0, 0.05, data.shape).astype(np.float32)
        panel = scan_gather(data, offsets, dt, 0.0, vels, measure="ab-semblance", window=0.04, stretch_limit=1.0)
        res, path = pick_panel(panel, vels, t, PickParams(), offsets=offsets, stretch_limit=1.0)
        near = np.abs(res["t0"] - t0) < 0.02
        assert near.sum() == 1, res["t0"]
        assert abs(res["vrms"][near][0] - v) / v < 0.01
        semb = scan_gather(data, offsets, dt, 0.0, vels, measure="semblance", window=0.04, stretch_limit=1.0)
        assert semb[:, int(round(t0 / dt))].max() < 0.7 * panel[:, int(round(t0 / dt))].max()


@pytest.mark.parametrize("text, words", [
    ("t0_s,vrms_m_s\n0.5,2000\n0.4,2100\n", ["increase"]),
    ("t0_s,velocity\n0.5,2000\n", ["missing column", "vrms_m_s"]),
    ("t0_s,vrms_m_s\n0.5,fast\n", ["row 1", "numbers"]),
    ("t0_s,vrms_m_s\n0.5,-3\n", ["velocity > 0"]),
])
def test_bad_guide_files_are_clear_errors(tmp_path, text, words):
    from velspec.errors import InputError

    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(InputError) as err:
        read_functions(path)
    for w in words:
        assert w in str(err.value)


def test_peak_beyond_the_scanned_range_is_flagged_at_bound():
    # An event whose coherence still rises at the slowest trial velocity: its peak lies below
    # the scanned range, so the pick at the range's end is forced there (common practice, no
    # source: a pick on the edge of a velocity spectrum is not a measurement).
    AT_BOUND = int(Flag.at_bound)

    panel = ridge(np.full(T0.size, 1450.0), height=0.2) + blob(1.0, 1330.0, 0.9, sv=120.0)
    res, path = pick_panel(panel, VEL, T0, PickParams(multiple_margin=0.0), search=10)
    at = np.abs(res["t0"] - 1.0) < 0.02
    assert at.sum() == 1 and res["vrms"][at][0] == VEL[0]
    assert res["flags"][at][0] & AT_BOUND


def test_reverberations_of_an_unseen_shallow_sea_floor_are_recognised():
    # A sea floor at 0.13 s too shallow to be picked still makes its reverberations at 0.26,
    # 0.39 and 0.52 s (water velocity) and the peg-leg of the primary at 0.45 s at 0.58 s, whose
    # stacking velocity is the RMS over its path, V^2 = (0.45*1800^2 + 0.13*1520^2)/0.58 (Dix,
    # 1955; flat layers, common practice for surface multiples). The train at 1.5x the first
    # event's time and the same velocity betrays the floor; the primaries stay.
    vw, vp = 1520.0, 1800.0
    peg = np.sqrt((0.45 * vp**2 + 0.13 * vw**2) / 0.58)
    panel = ridge(1500 + 500 * T0, height=0.1)
    for t, v, h in ((0.26, vw, 0.9), (0.39, vw, 0.8), (0.52, vw, 0.7), (0.45, vp, 0.6), (0.58, peg, 0.8),
                    (1.2, 2100.0, 0.7), (2.0, 2500.0, 0.7)):
        panel += blob(t, v, h, st=0.015)
    params = PickParams(min_separation=0.06)
    res, path = pick_panel(panel, VEL, T0, params, search=12, vint_bounds=(1400.0, 7000.0))
    used_t = res["t0"][used_mask(res["flags"])]
    for t in (0.26, 0.39, 0.52, 0.58):
        assert np.min(np.abs(used_t - t)) > 0.02, (t, used_t)
    for t in (0.45, 1.2, 2.0):
        assert np.min(np.abs(used_t - t)) <= 0.01, (t, used_t)
    # Given the floor instead (water_bottom, water_velocity), the same holds.
    given = PickParams(min_separation=0.06, water_bottom=0.13, water_velocity=vw)
    res, path = pick_panel(panel, VEL, T0, given, search=12, vint_bounds=(1400.0, 7000.0))
    assert np.min(np.abs(res["t0"][used_mask(res["flags"])] - 0.58)) > 0.02
