"""The picker: its dynamic programme against exhaustive search, its rate constraints, and the
Dix-consistency filter on picks (Dix, 1955, Seismic velocities from surface measurements)."""

import itertools

import numpy as np

from velspec.params import PickParams
from velspec.pick import consistent_picks, pick_panel, trace_function
from velspec.pick.tracing import _best_path


def test_best_path_matches_exhaustive_search(rng):
    # Bellman (1957): the recursion finds the same optimum as trying every admissible path.
    for _ in range(20):
        nnode, nv = 5, 4
        score = rng.random((nnode, nv))
        lo = np.maximum(np.arange(nv) - 1, 0)
        hi = np.minimum(np.arange(nv) + 2, nv - 1)
        best, best_path = -np.inf, None
        for path in itertools.product(range(nv), repeat=nnode):
            if all(lo[a] <= b <= hi[a] for a, b in zip(path, path[1:])):
                total = sum(score[n, p] for n, p in enumerate(path))
                if total > best:
                    best, best_path = total, path
        lo2 = np.tile(lo, (nnode, 1)).astype(np.int64)
        hi2 = np.tile(hi, (nnode, 1)).astype(np.int64)
        got = _best_path(score, lo2, hi2)
        assert np.isclose(sum(score[n, p] for n, p in enumerate(got)), best)
        assert tuple(got) == best_path


def test_traced_function_can_fall_at_the_allowed_rate():
    # A ridge of coherence whose velocity falls at 300 (m/s)/s (a velocity inversion) must be
    # followed when max_decrease allows 1000 (m/s)/s, even though the node step would move less
    # than one velocity sample (common practice, no source: stacking velocity may decrease).
    t0 = np.arange(1000) * 0.004
    vel = np.linspace(1400, 6000, 120)
    ridge = 3000.0 - 300.0 * t0
    panel = np.exp(-0.5 * ((vel[:, None] - ridge[None, :]) / 60.0) ** 2).astype(np.float32)
    path = trace_function(panel, vel, t0, PickParams(max_decrease=1000.0))
    assert np.max(np.abs(path[50:-50] - ridge[50:-50])) < 2 * (vel[1] - vel[0])
    flat = trace_function(panel, vel, t0, PickParams(max_decrease=0.0))
    assert np.all(np.diff(flat) >= -1e-9)      # no decrease allowed: the function never falls


def test_weak_pick_implying_impossible_interval_velocity_is_dropped():
    # Picks at 1.0 s / 2000 m/s and 2.0 s / 2500 m/s; a weak one at 1.5 s / 2000 m/s implies
    # v_int^2 = (1.5*2000^2 - 1.0*2000^2)/0.5 -> 2000 m/s, fine, then from 1.5 s to 2.0 s
    # (2*2500^2 - 1.5*2000^2)/0.5 -> 3741 m/s: consistent, kept. At 1.5 s / 1500 m/s instead,
    # v_int^2 = (1.5*1500^2 - 2000^2)/0.5 < 0: impossible, and it is weak: dropped.
    t = np.array([1.0, 1.5, 2.0])
    coh = np.array([0.9, 0.2, 0.9])
    ok = consistent_picks(t, np.array([2000.0, 2000.0, 2500.0]), coh, (1400.0, 7000.0))
    assert ok.all()
    bad = consistent_picks(t, np.array([2000.0, 1500.0, 2500.0]), coh, (1400.0, 7000.0))
    assert list(bad) == [True, False, True]
    # Even a strong contradiction goes: no pair of picks may imply a non-physical layer.
    strong = consistent_picks(t, np.array([2000.0, 1500.0, 2500.0]), np.array([0.9, 0.8, 0.9]),
                              (1400.0, 7000.0))
    assert list(strong) == [True, False, True]


def test_picks_sit_on_isolated_events():
    # Three Gaussian coherence blobs on a known function: one pick per blob, at its centre.
    t0 = np.arange(1000) * 0.004
    vel = np.linspace(1400, 6000, 120)
    panel = np.zeros((120, 1000), np.float32)
    events = [(0.8, 1900.0), (1.6, 2400.0), (2.6, 3000.0)]
    for t, v in events:
        panel += (0.9 * np.exp(-0.5 * (((vel[:, None] - v) / 80.0) ** 2 + ((t0[None, :] - t) / 0.02) ** 2))
                  ).astype(np.float32)
    res, path = pick_panel(panel, vel, t0, PickParams())
    assert len(res["t0"]) == 3
    for (t, v), pt, pv in zip(events, res["t0"], res["vrms"]):
        assert abs(pt - t) <= 0.004 and abs(pv - v) < 0.25 * (vel[1] - vel[0])


def test_corridor_keeps_the_function_inside_time_varying_bounds():
    # A strong ridge at 2000 m/s everywhere, and a corridor that rises from 2500-3500 m/s at the
    # top to 3000-4000 m/s at the bottom: the traced function must stay inside (the bound is the
    # user's physical knowledge; common practice, no source).
    t0 = np.arange(1000) * 0.004
    vel = np.linspace(1400, 6000, 120)
    ridge = np.exp(-0.5 * ((vel - 2000.0) / 60.0) ** 2).astype(np.float32)
    panel = np.repeat(ridge[:, None], t0.size, axis=1)
    params = PickParams(vmin_top=2500.0, vmax_top=3500.0, vmin_bottom=3000.0, vmax_bottom=4000.0)
    path = trace_function(panel, vel, t0, params)
    frac = t0 / t0[-1]
    lo, hi = 2500.0 + 500.0 * frac, 3500.0 + 500.0 * frac
    step = vel[1] - vel[0]
    assert np.all(path >= lo - step) and np.all(path <= hi + step)
    free = trace_function(panel, vel, t0, PickParams())
    assert np.all(np.abs(free - 2000.0) <= step)
