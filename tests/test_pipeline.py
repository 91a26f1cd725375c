"""The line pass on hand-made outcomes: the fallback when a CMP has no picks, and the
Dix-consistent fields (Dix, 1955, Seismic velocities from surface measurements)."""

import numpy as np
from handmade import Line, outcome


def test_cmp_without_picks_falls_back_on_the_traced_function():
    t = np.arange(1, 751) * 0.004
    path = 1500.0 + 400.0 * t            # a plausible increasing function
    fields = Line([outcome(1, [], [], path=path, t=t), outcome(2, [0.0], [1500.0], path=path, t=t)],
                  cmp=[1, 2], t=t).run()
    assert list(fields.no_picks) == [1, 1]   # a pick at t0 = 0 carries no interval either
    assert np.allclose(fields.vrms[0][t >= 0.3], path[t >= 0.3], rtol=0.01)
    assert np.isfinite(fields.vint).all()


def test_fields_match_dix_of_two_picks():
    # vint between picks 1.0 s / 2000 m/s and 2.0 s / 2500 m/s: sqrt(2*2500^2 - 2000^2) (Dix, 1955).
    t = np.arange(1, 751) * 0.004
    fields = Line([outcome(1, [1.0, 2.0], [2000.0, 2500.0], path=np.full(t.size, 2000.0), t=t)], t=t).run()
    mid = np.searchsorted(t, 1.5)
    assert abs(fields.vint[0, mid] - np.sqrt(2 * 2500.0**2 - 2000.0**2)) < 0.5
    assert abs(fields.vrms[0, np.searchsorted(t, 2.0)] - 2500.0) < 0.5
    assert fields.forced_count[0] == 0
