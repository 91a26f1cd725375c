"""The line pass on hand-made outcomes: the fallback when a CMP has no picks, and the
Dix-consistent fields (Dix, 1955, Seismic velocities from surface measurements)."""

import numpy as np

from velspec.params import RunParams
from velspec.pick import PickResult
from velspec.pipeline import CmpOutcome, line_pass


def outcome(cmp, t0, v, path):
    n = len(t0)
    picks = PickResult(t0=np.asarray(t0, float), velocity=np.asarray(v, np.float32),
                       coherence=np.full(n, 0.8, np.float32), sigma=np.full(n, 10.0, np.float32),
                       flags=np.zeros(n, np.uint16), path=path.astype(np.float32))
    return CmpOutcome(position=cmp, cmp=cmp, live=24, dropped_nan=0, dropped_dead=0, picks=picks)


def test_cmp_without_picks_falls_back_on_the_traced_function():
    t = np.arange(1, 751) * 0.004
    path = 1500.0 + 400.0 * t            # a plausible increasing function
    fields = line_pass(t, [outcome(1, [], [], path), outcome(2, [0.0], [1500.0], path)], RunParams())
    assert list(fields["no_picks"]) == [1, 1]   # a pick at t0 = 0 carries no interval either
    assert np.allclose(fields["vrms"][0][t >= 0.3], path[t >= 0.3], rtol=0.01)
    assert np.isfinite(fields["vint"]).all()


def test_fields_match_dix_of_two_picks():
    # vint between picks 1.0 s / 2000 m/s and 2.0 s / 2500 m/s: sqrt(2*2500^2 - 2000^2) (Dix, 1955).
    t = np.arange(1, 751) * 0.004
    fields = line_pass(t, [outcome(1, [1.0, 2.0], [2000.0, 2500.0], np.full(t.size, 2000.0))], RunParams())
    mid = np.searchsorted(t, 1.5)
    assert abs(fields["vint"][0, mid] - np.sqrt(2 * 2500.0**2 - 2000.0**2)) < 0.5
    assert abs(fields["vrms"][0, np.searchsorted(t, 2.0)] - 2500.0) < 0.5
    assert fields["forced_count"][0] == 0
