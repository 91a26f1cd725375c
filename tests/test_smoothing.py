"""Spectrum smoothing along the line does not smear a velocity step (a fault, a change of facies)."""

import numpy as np

from velspec.smoothing import panel_shift, smoothed_panel

VEL = np.linspace(1400.0, 6000.0, 120)
T = np.arange(600) * 0.004


def panel(scale):
    """Coherence of events at t0 = 0.6, 1.2, 1.8 s on a trend 1800 + 400 t, all velocities x scale."""
    p = np.zeros((VEL.size, T.size), np.float32)
    for t0 in (0.6, 1.2, 1.8):
        v = (1800.0 + 400.0 * t0) * scale
        p += (np.exp(-0.5 * ((VEL[:, None] - v) / 40.0) ** 2) * np.exp(-0.5 * ((T[None, :] - t0) / 0.02) ** 2))
    return p


def peak_velocity(p, t0):
    """Centroid of the column's peak (the coherence-weighted mean velocity within 5 samples)."""
    j = int(np.argmin(np.abs(T - t0)))
    r = int(np.argmax(p[:, j]))
    near = slice(max(r - 5, 0), r + 6)
    return float(np.sum(VEL[near] * p[near, j]) / np.sum(p[near, j]))


def test_panel_shift_measures_a_known_velocity_step():
    # a panel whose events all sit 3 % faster is found 3 % faster (log-velocity shift ln 1.03)
    edges = np.arange(0, T.size + 1, 50)
    s = panel_shift(panel(1.0), panel(1.03), VEL, edges)
    with_events = [w for w in range(edges.size - 1) if panel(1.0)[:, edges[w]:edges[w + 1]].max() > 0.5]
    assert np.allclose(s[with_events], np.log(1.03), atol=0.004)


def test_a_three_percent_step_is_not_smeared():
    # CMPs 0-2 on one trend, 3-5 on one 3 % faster; the CMP beside the step keeps its own
    # velocities (within a tenth of the step) where triangle weights alone move them a third of it
    panels = [panel(1.0)] * 3 + [panel(1.03)] * 3
    pos = list(range(6))
    plain = smoothed_panel(panels, pos, 2, 2)
    aware = smoothed_panel(panels, pos, 2, 2, velocities=VEL, step_scale=0.01, dt=0.004)
    for t0 in (1.2, 1.8):
        own = peak_velocity(panels[2], t0)
        jump = 0.03 * own
        assert abs(peak_velocity(aware, t0) - own) <= 0.1 * jump
        assert abs(peak_velocity(plain, t0) - own) >= 0.2 * jump    # the plain mean does smear it
    # and without a step the weighting changes nothing: the triangle mean, to float32 rounding
    same = [panel(1.0)] * 6
    assert np.allclose(smoothed_panel(same, pos, 2, 2, velocities=VEL, step_scale=0.01, dt=0.004),
                       smoothed_panel(same, pos, 2, 2), atol=1e-6)
