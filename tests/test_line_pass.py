"""The line pass on hand-made picks (lateral outlier rejection, quality per CMP, a person's
edits) and the lateral smoothing of the coherence panels before picking."""

import dataclasses

import numpy as np
import pytest
from handmade import Line, T, outcome

from velspec.errors import InputError
from velspec.flags import EXCLUDED, Flag, used_mask
from velspec.linepass import apply_edits
from velspec.params import RunParams
from velspec.pipeline import run_line
from velspec.smoothing import smoothed_panel
from velspec.synth import LineSpec, make_line

EDITED, MULTIPLE, OUTLIER = int(Flag.edited), int(Flag.likely_multiple), int(Flag.lateral_outlier)
OUTSIDE_GUIDE, REPLACED = int(Flag.outside_guide), int(Flag.replaced)

PICK_T = np.array([0.4, 0.8, 1.2, 1.6, 2.0, 2.4])
# Interval velocities of each interval down to the picks; equal above and below 1.2 s, so
# without the pick at 1.2 s Dix's linear t*V^2 (Dix, 1955) still passes through its value.
VINT = np.array([1800.0, 2200.0, 2600.0, 2600.0, 3000.0, 3300.0])


def rms_at_picks(vint=VINT, t=PICK_T):
    # RMS velocity of constant-velocity intervals (Dix, 1955, Geophysics 20, 68-86).
    return np.sqrt(np.cumsum(vint ** 2 * np.diff(np.concatenate([[0.0], t]))) / t)


def at(fields, row, t):
    return np.interp(t, T, fields.vrms[row])


# -- lateral outlier rejection -------------------------------------------------------------

def test_single_bad_pick_is_a_lateral_outlier():
    v = rms_at_picks()
    bad_cmp, bad_pick = 7, 2                        # the pick at 1.2 s, 10 % fast
    bad = v.copy()
    bad[bad_pick] *= np.float32(1.10)
    line = Line([outcome(c, PICK_T, bad if c == bad_cmp else v) for c in range(15)])
    fields = line.run()
    flagged = [(int(line.picks["cmp"][i]), int(i) % 6) for i in np.flatnonzero(line.picks["flags"] & OUTLIER)]
    assert flagged == [(bad_cmp, bad_pick)]
    assert not used_mask(line.of(bad_cmp)["flags"])[bad_pick]
    # The CMP's field now follows its neighbours there (expected: the function the picks were
    # made from, RMS of the intervals, Dix 1955), where the bad pick would have put it 10 % off.
    t_bad = PICK_T[bad_pick]
    others = np.array([at(fields, r, t_bad) for r in range(15) if r != bad_cmp])
    assert np.allclose(others, v[bad_pick], rtol=1e-5)
    assert abs(at(fields, bad_cmp, t_bad) / v[bad_pick] - 1.0) < 0.005


def test_lateral_step_is_not_an_outlier():
    # CMPs 0-7 on one function, 8-14 on one 8 % faster (a fault or facies change): the running
    # median along the line follows the step, so nothing is rejected (common practice, no source).
    slow = rms_at_picks()
    fast = rms_at_picks(VINT * 1.08)
    line = Line([outcome(c, PICK_T, slow if c < 8 else fast) for c in range(15)])
    fields = line.run()
    assert not (line.picks["flags"] & OUTLIER).any()
    for row in range(15):
        want = slow if row < 8 else fast
        assert np.allclose(at(fields, row, PICK_T), want, rtol=1e-5), row
    assert np.allclose(at(fields, 8, PICK_T) / at(fields, 7, PICK_T), 1.08, rtol=1e-5)


# -- spectrum smoothing along the line -----------------------------------------------------

def reference_smooth(panels, centre, k):
    """Triangle-weighted mean (weights k + 1 - |d|) of the panels within +-k, in float64 numpy;
    positions without a panel drop out."""
    acc, total = 0.0, 0.0
    for pos, panel in panels.items():
        d = abs(pos - centre)
        if panel is None or d > k:
            continue
        acc = acc + (k + 1 - d) * panel.astype(np.float64)
        total += k + 1 - d
    return acc / total


def test_smoothed_panel_is_the_triangle_weighted_mean():
    # Reference: numpy, weighted mean written out (common practice, no source).
    rng = np.random.default_rng(4)
    panels = {p: rng.random((7, 11)).astype(np.float32) for p in range(10)}
    panels[4] = None                                 # a CMP with too few live traces
    items = [panels[p] for p in range(10)]
    pos = list(range(10))
    for k in (1, 2, 3):
        for centre in (0, 1, 3, 5, 9):
            got = smoothed_panel(items, pos, centre, k)
            assert np.allclose(got, reference_smooth(panels, centre, k), rtol=2e-6, atol=1e-7), (k, centre)
            # only the neighbours count: a shorter list holding them gives the same bits
            lo, hi = max(centre - k, 0), min(centre + k + 1, 10)
            assert np.array_equal(smoothed_panel(items[lo:hi], pos[lo:hi], centre - lo, k), got)
    assert smoothed_panel(items, pos, 3, 0) is panels[3]
    # the weights matter: a flat mean over the same CMPs differs
    flat = np.mean([panels[p] for p in (1, 2, 3, 5)], axis=0)
    assert not np.allclose(smoothed_panel(items, pos, 3, 2), flat, rtol=1e-3)


@pytest.fixture(scope="module")
def noisy_line(tmp_path_factory):
    path = tmp_path_factory.mktemp("smooth") / "line.sgy"
    make_line(path, LineSpec(ncmp=12, snr=1.5, nsamples=600, seed=5))
    return path


@pytest.fixture(scope="module")
def block_runs(noisy_line):
    base = RunParams()
    runs = {b: run_line(noisy_line, dataclasses.replace(base, block=b).validate()) for b in (1, 5, 16)}
    no_smooth = base.with_overrides(pick__smooth_cmps=0).validate()
    return runs, run_line(noisy_line, no_smooth)


def test_smoothing_does_not_depend_on_the_block_size(block_runs):
    # Expected: the same line cut into blocks of 1, 5 or 16 CMPs gives the same bits (the
    # smoothing is over neighbouring CMPs, whatever block they were read in; common practice).
    runs, _ = block_runs
    ref = runs[16]
    for b in (1, 5):
        assert np.array_equal(runs[b].vrms, ref.vrms), b
        assert np.array_equal(runs[b].vint, ref.vint), b
        for name in ("cmp", "t0", "vrms", "sigma", "flags"):
            assert np.array_equal(runs[b].picks[name], ref.picks[name]), (b, name)


def test_smoothing_changes_the_picks(block_runs):
    runs, plain = block_runs
    assert not np.array_equal(plain.vrms, runs[16].vrms)


# -- quality per CMP -----------------------------------------------------------------------

def test_quality_marks_the_cmps_known_to_be_bad(tmp_path):
    # CMPs 12-23 of a 36-CMP line hold nothing but noise (every trace replaced by Gaussian noise
    # of the line's own RMS amplitude): there is nothing to pick, so beyond the reach of the
    # panel smoothing from the clean CMPs they must be graded poor, and the clean CMPs away
    # from them good (common practice, no source: a grade follows the evidence of the data).
    import segyio

    path = tmp_path / "line.sgy"
    make_line(path, LineSpec(ncmp=36, snr=4.0, nsamples=600, seed=11))
    rng = np.random.default_rng(3)
    with segyio.open(path, "r+", ignore_geometry=True) as f:
        cdp = f.attributes(segyio.TraceField.CDP)[:]
        first = int(cdp.min())
        rms = float(np.sqrt(np.mean(np.square(f.trace.raw[:]))))
        for i in np.flatnonzero((cdp >= first + 12) & (cdp <= first + 23)):
            f.trace[int(i)] = rng.normal(0.0, rms, f.samples.size).astype(np.float32)
    result = run_line(path)
    q = result.qc["quality"]
    rows = result.cmp - first
    half = RunParams().pick.smooth_cmps
    inner_bad = (rows >= 12 + half) & (rows <= 23 - half)
    clean = (rows < 12 - 2 * half) | (rows > 23 + 2 * half)
    assert inner_bad.sum() == 12 - 2 * half and clean.sum() >= 16
    assert np.all(q[inner_bad] == 2), q
    assert np.mean(q[clean] == 0) >= 0.8, q


def test_cmp_with_every_pick_excluded_is_poor():
    # A CMP falls back on its traced function when every pick is left out: poor (2). A CMP with
    # six strong, narrow picks is good (0) and one whose picks are 5 % uncertain is poor
    # (common practice, no source: quality follows the evidence the picks carry).
    v = rms_at_picks()
    line = Line([outcome(1, PICK_T, v), outcome(2, PICK_T, v, flags=np.full(6, MULTIPLE)),
                 outcome(3, PICK_T, v), outcome(4, PICK_T, v, sigma=0.05 * v)])
    fields = line.run()
    assert fields.quality.dtype == np.uint8
    assert list(fields.no_picks) == [0, 1, 0, 0]
    assert list(fields.quality) == [0, 2, 0, 2]


# -- a person's picks in the Python API ----------------------------------------------------

def test_replace_mode_swaps_the_automatic_picks():
    v = rms_at_picks()
    line = Line([outcome(c, PICK_T, v) for c in (10, 11, 12)])
    mine_t = np.array([0.5, 1.0, 1.5, 2.2])
    mine_v = np.interp(mine_t, PICK_T, v) * 1.03
    fields = line.run(edits={11: (mine_t, mine_v)})
    p = line.of(11)
    used = used_mask(p["flags"])
    edited = (p["flags"] & EDITED) != 0
    assert edited.sum() == 4
    assert np.allclose(p["t0"][edited], mine_t) and np.allclose(p["vrms"][edited], mine_v)
    assert np.all(p["flags"][~edited] & REPLACED) and not used[~edited].any()
    assert used[edited].all()
    assert np.all(np.diff(p["t0"]) >= 0)
    assert fields.edited_cmps == 1
    # The field of that CMP goes through the person's picks (t V^2 linear between them, Dix
    # 1955), the others keep their own.
    assert np.allclose(at(fields, 1, mine_t), mine_v, rtol=1e-5)
    assert np.allclose(at(fields, 0, PICK_T), v, rtol=1e-5)
    assert not line.of(10)["flags"].any() and not line.of(12)["flags"].any()


def test_guide_mode_keeps_the_picks_inside_the_band():
    pp = RunParams().pick
    v = rms_at_picks()
    auto = v.copy()
    auto[3] *= 0.80                                  # 20 % slow: outside the band below (15 %)
    line = Line([outcome(c, PICK_T, auto) for c in (10, 11, 12)])
    guide_t, guide_v = PICK_T.copy(), v.copy()       # the person's function
    picks = apply_edits(line.cmp, line.picks, {11: (guide_t, guide_v)}, "guide", RunParams())
    p = picks[picks["cmp"] == 11]
    assert p.size == PICK_T.size                     # some picks are left: nothing added
    g = np.interp(p["t0"], guide_t, guide_v)
    inside = (p["vrms"] >= g * (1 - pp.guide_below)) & (p["vrms"] <= g * (1 + pp.guide_above))
    assert list(inside) == [True, True, True, False, True, True]
    assert np.array_equal(used_mask(p["flags"]), inside)
    assert np.array_equal((p["flags"] & OUTSIDE_GUIDE) != 0, ~inside)
    # all of them outside the band: the person's picks are used instead
    line = Line([outcome(c, PICK_T, v * 0.7) for c in (10, 11)])
    picks = apply_edits(line.cmp, line.picks, {10: (guide_t, guide_v)}, "guide", RunParams())
    p = picks[picks["cmp"] == 10]
    used = used_mask(p["flags"])
    assert np.all(p["flags"][(p["flags"] & EDITED) == 0] & OUTSIDE_GUIDE)
    assert np.allclose(p["vrms"][used], guide_v) and np.all(p["flags"][used] & EDITED)


def test_edits_for_a_cmp_not_in_the_line_are_an_error():
    v = rms_at_picks()
    line = Line([outcome(c, PICK_T, v) for c in (10, 11)])
    with pytest.raises(InputError, match="99"):
        apply_edits(line.cmp, line.picks, {99: (PICK_T, v)}, "replace", RunParams())
    with pytest.raises(InputError):
        line.run(edits={12: (PICK_T, v)})
    assert not (line.picks["flags"] & int(EXCLUDED)).any()
