"""The nonhyperbolic (eta) scan against events on the traveltime equation of Alkhalifah &
Tsvankin (1995), Velocity analysis for transversely isotropic media, Geophysics 60, 1550-1566,
and against exact ray-traced times of an isotropic layered model."""

import numpy as np
from conftest import ricker
from scipy.optimize import brentq

from velspec.scan import scan_gather

DT = 0.004
ETAS = np.linspace(0.0, 0.3, 31)


def at_time(t0, v, eta, x):
    """t^2 = t0^2 + x^2/v^2 - 2 eta x^4 / (v^2 (t0^2 v^2 + (1 + 2 eta) x^2)) (Alkhalifah &
    Tsvankin, 1995), v the NMO velocity."""
    x2 = x * x
    t2 = t0**2 + x2 / v**2 - 2.0 * eta * x2 * x2 / (v**2 * (t0**2 * v**2 + (1.0 + 2.0 * eta) * x2))
    return np.sqrt(t2)


def event_gather(times, ns, f=25.0):
    """Ricker events (Ricker, 1953) at the given times, shape (nevents, ntr) -> (ntr, ns)."""
    t = np.arange(ns) * DT
    data = np.zeros((times.shape[1], ns))
    for tx in times:
        data += ricker(t[None, :] - tx[:, None], f)
    return data.astype(np.float32)


def eta_scan(t0, v, eta, offsets, vels, ns=450):
    data = event_gather(at_time(t0, v, eta, offsets)[None, :], ns)
    panel = scan_gather(data, offsets, DT, 0.0, vels, etas=ETAS, stretch_limit=0.5)
    return panel[:, :, int(round(t0 / DT))]


T0, V, ETA = 1.2, 2500.0, 0.1
DEPTH = V * T0 / 2.0           # 1500 m: reflector depth of the equivalent vertical path
VELS = np.arange(2300.0, 2701.0, 10.0)


def test_long_spread_finds_velocity_and_eta():
    # On a spread to twice the depth the quartic term separates eta from velocity, so the
    # coherence maximum lies at the true (v, eta) (Alkhalifah & Tsvankin, 1995).
    offsets = np.linspace(50.0, 2.0 * DEPTH, 60)
    data = event_gather(at_time(T0, V, ETA, offsets)[None, :], 450)
    panel = scan_gather(data, offsets, DT, 0.0, VELS, etas=ETAS, stretch_limit=0.5)
    assert panel.shape == (ETAS.size, VELS.size, 450)
    cut = panel[:, :, int(round(T0 / DT))]
    ie, iv = np.unravel_index(cut.argmax(), cut.shape)
    print(f"long spread: peak {cut.max():.3f} at v = {VELS[iv]:.0f} m/s, eta = {ETAS[ie]:.2f}")
    assert abs(VELS[iv] - V) <= 10.0 + 1e-6
    assert abs(ETAS[ie] - ETA) <= 0.01 + 1e-6


def test_short_spread_trades_eta_for_velocity():
    # With offsets below the depth the eta term, of order eta x^4 / (v^4 t0^2), is small
    # against x^2 / v^2: eta is poorly resolved and trades off with velocity (Alkhalifah &
    # Tsvankin, 1995). What the equation guarantees: (1) the coherence varies less along eta
    # on the short spread than on the long one, since the eta term grows as x^4; (2) t falls
    # when v or eta grows, at every offset, so along the ridge a larger eta goes with a lower v.
    short = eta_scan(T0, V, ETA, np.linspace(50.0, 0.9 * DEPTH, 30), VELS)
    long_ = eta_scan(T0, V, ETA, np.linspace(50.0, 2.0 * DEPTH, 60), VELS)
    prof_s, prof_l = short.max(axis=1), long_.max(axis=1)
    flat_s, flat_l = prof_s.min() / prof_s.max(), prof_l.min() / prof_l.max()
    ridge = VELS[short.argmax(axis=1)]
    good = ETAS[prof_s >= 0.9 * prof_s.max()]
    print(f"short spread: best-v coherence over eta 0..0.3 stays within {flat_s:.3f} of its "
          f"peak (long spread: {flat_l:.3f}); eta within 90% of peak: {good.min():.2f}.."
          f"{good.max():.2f}; ridge velocity {ridge[0]:.0f} m/s at eta 0, "
          f"{ridge[-1]:.0f} m/s at eta 0.3")
    assert flat_s > flat_l
    assert ridge[-1] < ridge[0]


def layered_times(thickness, velocity, offsets):
    """Exact two-way times of the base of the last layer, isotropic flat layers, by Snell's law.

    For ray parameter p, x(p) = 2 sum h_i p v_i / sqrt(1 - p^2 v_i^2) and
    t(p) = 2 sum h_i / (v_i sqrt(1 - p^2 v_i^2)); x(p) is increasing, solved by brentq
    (Snell's law as in Sheriff & Geldart, 1995, Exploration Seismology, ch. 4).
    """
    h, v = np.asarray(thickness, float), np.asarray(velocity, float)

    def x_of(p):
        c = np.sqrt(1.0 - (p * v) ** 2)
        return 2.0 * np.sum(h * p * v / c)

    times = []
    for x in offsets:
        p = 0.0 if x == 0 else brentq(lambda p: x_of(p) - x, 0.0, (1 - 1e-12) / v.max(),
                                      xtol=1e-16, rtol=1e-14)
        c = np.sqrt(1.0 - (p * v) ** 2)
        times.append(2.0 * np.sum(h / (v * c)))
    return np.array(times)


def test_eta_at_the_layers_rms_velocity_matches_the_layering_estimate():
    # Flat isotropic layers: the x^4 term of t^2(x) is that of an effective eta
    # (1/8)(t0 sum v_i^4 dt_i / (sum v_i^2 dt_i)^2 - 1) at the NMO velocity sqrt(sum v_i^2 dt_i / t0)
    # (Alkhalifah, 1997, Velocity analysis using nonhyperbolic moveout in transversely isotropic
    # media, Geophysics 62, 1839-1854; value from memory). On a spread as long as the reflector
    # is deep the scan's best eta at that velocity is within 0.01 of it (the higher terms of the
    # exact layered moveout, by Snell's law, make the rest).
    thickness = np.array([400.0, 500.0, 600.0, 700.0])
    velocity = np.array([1800.0, 2200.0, 2700.0, 3300.0])
    dt_i = 2.0 * thickness / velocity
    t0 = dt_i.sum()
    vrms = np.sqrt(np.sum(velocity**2 * dt_i) / t0)
    estimate = (t0 * np.sum(velocity**4 * dt_i) / np.sum(velocity**2 * dt_i) ** 2 - 1.0) / 8.0
    offsets = np.linspace(25.0, thickness.sum(), 60)
    times = layered_times(thickness, velocity, offsets)
    data = event_gather(times[None, :], int(np.ceil((times.max() + 0.2) / DT)))
    etas = np.linspace(0.0, 0.1, 101)
    panel = scan_gather(data, offsets, DT, 0.0, np.array([vrms]), etas=etas, stretch_limit=1.0)
    best = etas[panel[:, 0, int(round(t0 / DT))].argmax()]
    assert 0.015 < estimate < 0.035          # the model is one where the term matters
    assert abs(best - estimate) <= 0.01, (best, estimate)


def test_isotropic_layering_looks_like_small_positive_eta():
    # Flat isotropic layers with velocity increasing downward bend the moveout like eta > 0
    # (common practice, no source); the eta the scan finds is small and positive. For
    # comparison it prints the effective eta of layering, (1/8)(t0 sum v_i^4 dt_i /
    # (sum v_i^2 dt_i)^2 - 1) (Alkhalifah, 1997, Velocity analysis using nonhyperbolic moveout
    # in transversely isotropic media, Geophysics 62, 1839-1854; value from memory).
    thickness = np.array([400.0, 500.0, 600.0, 700.0])
    velocity = np.array([1800.0, 2200.0, 2700.0, 3300.0])
    dt_i = 2.0 * thickness / velocity
    t0 = dt_i.sum()
    vrms = np.sqrt(np.sum(velocity**2 * dt_i) / t0)
    depth = thickness.sum()
    offsets = np.linspace(50.0, 2.0 * depth, 60)
    times = layered_times(thickness, velocity, offsets)
    # The tracer itself: t(0) = t0, and at small offset t^2 - t0^2 = x^2 / vrms^2 (Dix, 1955,
    # Seismic velocities from surface measurements, Geophysics 20, 68-86).
    small = layered_times(thickness, velocity, np.array([0.0, 20.0]))
    assert abs(small[0] - t0) < 1e-12
    assert abs((small[1] ** 2 - t0**2) * vrms**2 / 20.0**2 - 1.0) < 1e-4
    data = event_gather(times[None, :], int(np.ceil((times.max() + 0.2) / DT)))
    vels = np.arange(np.floor(0.9 * vrms), 1.1 * vrms, 10.0)
    panel = scan_gather(data, offsets, DT, 0.0, vels, etas=ETAS, stretch_limit=0.5)
    cut = panel[:, :, int(round(t0 / DT))]
    ie, iv = np.unravel_index(cut.argmax(), cut.shape)
    s = t0 * np.sum(velocity**4 * dt_i) / np.sum(velocity**2 * dt_i) ** 2
    print(f"isotropic layers: t0 = {t0:.3f} s, vrms = {vrms:.0f} m/s; scan peak {cut.max():.3f} "
          f"at v = {vels[iv]:.0f} m/s, apparent eta = {ETAS[ie]:.2f} "
          f"(layering estimate (S - 1)/8 = {(s - 1) / 8:.3f})")
    assert 0.0 < ETAS[ie] <= 0.1
