"""The fast semblance kernel against the straightforward loop it replaces, bit for bit.

The kernel takes 16 t0 samples at a time and picks their interpolation end points out of a
32-sample table with register permutes, with masked blocks at the end of a span and a
sample-by-sample fallback. Every path does the same float32 operations in the same order as
the plain loop below (moveout.positions, then linear interpolation a0 + f (a1 - a0) and a^2 with
one rounding each, traces summed in order), so the panels must be identical, not merely close.
No timing here: speed is measured in benchmarks/.
"""

import numpy as np
import pytest
from numba import njit

from velspec.scan import kernels, scan_gather, velocity_axis
from velspec.scan.moveout import HYPERBOLIC, NONHYPERBOLIC, _search, hyperbolic_span, positions

DT = 0.004


@njit(cache=False)
def plain_semblance(data, q_unit, trials, law, tau2, mute_c, tau_first, half):
    """The semblance definition as one simple loop: positions, _interp, running sums."""
    ntr, ns = data.shape
    nt = tau2.shape[0]
    out = np.empty((trials.shape[0], nt), dtype=np.float32)
    last = np.float32(ns - 1)
    pos = np.empty(nt, dtype=np.float32)
    for m in range(trials.shape[0]):
        stack = np.zeros(nt, dtype=np.float32)
        energy = np.zeros(nt, dtype=np.float32)
        live = np.zeros(nt + 1, dtype=np.int32)
        for i in range(ntr):
            j0, j1 = positions(law, tau2, q_unit[i] * trials[m, 0], trials[m, 1], mute_c, tau_first, last, pos)
            for j in range(j0, j1):
                p = pos[j]
                k = min(int(p), ns - 2)
                a0 = data[i, k]
                a = kernels._fma32(p - np.float32(k), data[i, k + 1] - a0, a0)
                stack[j] += a
                energy[j] = kernels._fma32(a, a, energy[j])
            if j1 > j0:
                live[j0] += 1
                live[j1] -= 1
        num = np.zeros(nt)
        den = np.zeros(nt)
        n = 0
        for j in range(nt):
            n += live[j]
            if n >= 2:
                num[j] = np.float64(stack[j]) * stack[j]
                den[j] = np.float64(n) * energy[j]
        kernels._window_ratio(num, den, half, out[m])
    return out


def kernel_args(ntr, ns, nv, rng, t_first=0.0, eta=None, stretch=0.5, half=5, offsets=None, dt=DT):
    data = rng.standard_normal((ntr, ns)).astype(np.float32)
    x = np.abs(np.linspace(0.0, 4000.0, ntr) if offsets is None else np.asarray(offsets, dtype=np.float64))
    vels = np.linspace(1400.0, 6000.0, nv)
    t0 = t_first + dt * np.arange(ns)
    trials = np.zeros((nv, 2), dtype=np.float32)
    trials[:, 0] = 1.0 / vels**2
    law = HYPERBOLIC
    if eta is not None:
        trials[:, 1] = eta
        law = NONHYPERBOLIC
    return (data, (x * x / (dt * dt)).astype(np.float32), trials, law,
            np.where(t0 > 0, (t0 / dt) ** 2, -1.0).astype(np.float32),
            np.float32((1.0 + stretch) ** 2 - 1.0), np.float32(t_first / dt), half)


CASES = {
    "standard": dict(ntr=96, ns=1500, nv=24),
    "tiny trace": dict(ntr=5, ns=2, nv=3, half=0),
    "shorter than a block": dict(ntr=7, ns=13, nv=5),
    "span ends near the trace end": dict(ntr=24, ns=37, nv=9, stretch=8.0),
    "delay": dict(ntr=24, ns=600, nv=11, t_first=0.2),
    "negative delay": dict(ntr=24, ns=600, nv=11, t_first=-0.1),
    "zero offsets": dict(ntr=12, ns=400, nv=4, offsets=np.zeros(12)),
    "split spread": dict(ntr=40, ns=700, nv=9, offsets=np.linspace(-2000, 2000, 40)),
    "no window": dict(ntr=30, ns=500, nv=7, half=0),
    "nonhyperbolic": dict(ntr=30, ns=500, nv=9, eta=0.15),
    "nonhyperbolic, delay": dict(ntr=30, ns=500, nv=9, eta=0.4, t_first=0.1),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_same_bits_as_the_plain_loop(name, rng):
    args = kernel_args(rng=rng, **CASES[name])
    assert np.array_equal(kernels.semblance(*args), plain_semblance(*args))


@pytest.mark.parametrize("name", ["standard", "delay", "nonhyperbolic", "span ends near the trace end"])
def test_live_count_matches_positions(name, rng):
    data, q_unit, trials, law, tau2, mute_c, tau_first, _ = kernel_args(rng=rng, **CASES[name])
    ns = data.shape[1]
    pos = np.empty(tau2.size, dtype=np.float32)
    expected = np.zeros((trials.shape[0], tau2.size), dtype=np.int32)
    for m in range(trials.shape[0]):
        for i in range(q_unit.size):
            j0, j1 = positions(law, tau2, q_unit[i] * trials[m, 0], trials[m, 1], mute_c, tau_first,
                               np.float32(ns - 1), pos)
            expected[m, j0:j1] += 1
    got = kernels.live_count(q_unit, trials, law, tau2, mute_c, tau_first, ns)
    assert np.array_equal(got, expected)


def test_hyperbolic_span_is_the_span_of_positions(rng):
    _, q_unit, trials, law, tau2, mute_c, tau_first, _ = kernel_args(rng=rng, ntr=50, ns=900, nv=40, t_first=0.1)
    last = np.float32(899)
    pos = np.empty(tau2.size, dtype=np.float32)
    for s2 in trials[:, 0]:
        for q in q_unit * s2:
            assert hyperbolic_span(tau2, q, mute_c, tau_first, last) == \
                positions(HYPERBOLIC, tau2, q, np.float32(0), mute_c, tau_first, last, pos)


def test_guessed_search_equals_binary_search(rng):
    # The guess assumes tau2 = (tau_first + j)^2; any other sorted array must still be searched
    # exactly (the walk gives up and binary-searches).
    arrays = [np.sort(rng.uniform(-5, 1e4, 300)).astype(np.float32),
              np.repeat(np.arange(50, dtype=np.float32), 7),
              ((3.0 + np.arange(200)) ** 2).astype(np.float32)]
    for tau2 in arrays:
        for v in np.concatenate([rng.uniform(-10, 2e4, 200), tau2[::17]]).astype(np.float32):
            for right in (False, True):
                side = "right" if right else "left"
                assert _search(tau2, v, np.float32(3.0), right) == np.searchsorted(tau2, v, side=side)


@njit(cache=False)
def _drive_blocks(trace, pos, stack, energy, j0, j1):
    kernels._stack_positions(trace, pos, stack, energy, j0, j1)


@njit(cache=False)
def _plain_positions(trace, pos, stack, energy, j0, j1):
    ns = trace.shape[0]
    for j in range(j0, j1):
        k = min(int(pos[j]), ns - 2)
        a = kernels._fma32(pos[j] - np.float32(k), trace[k + 1] - trace[k], trace[k])
        stack[j] += a
        energy[j] = kernels._fma32(a, a, energy[j])


def test_blocks_that_spread_too_wide_fall_back_to_the_plain_loop(rng):
    # Positions that jump back and forth (not a moveout any law gives) fail the block's spread
    # test; those blocks are done sample by sample and the sums must not change.
    ns, nt = 400, 300
    trace = rng.standard_normal(ns).astype(np.float32)
    pos = rng.uniform(0, ns - 1, nt).astype(np.float32)
    pos[::3] = np.float32(ns - 1)        # the exact last position, clamped to k = ns - 2
    pos[100:140] = np.linspace(10, 30, 40, dtype=np.float32)   # one run that does fit a block
    fast_s, fast_e = np.zeros(nt, np.float32), np.zeros(nt, np.float32)
    _drive_blocks(trace, pos, fast_s, fast_e, 3, nt - 2)
    slow_s, slow_e = np.zeros(nt, np.float32), np.zeros(nt, np.float32)
    _plain_positions(trace, pos, slow_s, slow_e, 3, nt - 2)
    assert np.array_equal(fast_s, slow_s) and np.array_equal(fast_e, slow_e)


def _generic_driver():
    # The same block without the AVX-512 permute (the IR emitted on other CPUs).
    full = kernels._make_block(True, False, False)
    tail = kernels._make_block(True, True, False)

    @njit(cache=False)
    def drive(trace, tau2, q, tau_first, stack, energy, j0, j1):
        j = j0
        while j + kernels.LANES <= j1 and full(trace, tau2, stack, energy, j, kernels.LANES, q, tau_first):
            j += kernels.LANES
        while j < j1:
            if not tail(trace, tau2, stack, energy, j, min(kernels.LANES, j1 - j), q, tau_first):
                return -1
            j += kernels.LANES
        return 0

    return drive


def test_generic_block_gives_the_same_bits(rng):
    drive = _generic_driver()
    data, q_unit, trials, law, tau2, mute_c, tau_first, _ = kernel_args(rng=rng, ntr=20, ns=700, nv=6, t_first=0.05)
    last = np.float32(data.shape[1] - 1)
    nt = tau2.size
    for s2 in trials[:, 0]:
        for i in range(q_unit.size):
            q = q_unit[i] * s2
            j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
            ref_s, ref_e = np.zeros(nt, np.float32), np.zeros(nt, np.float32)
            kernels_stack_hyperbola(data[i], tau2, q, tau_first, ref_s, ref_e, j0, j1)
            gen_s, gen_e = np.zeros(nt, np.float32), np.zeros(nt, np.float32)
            assert drive(data[i], tau2, q, tau_first, gen_s, gen_e, j0, j1) == 0
            assert np.array_equal(gen_s, ref_s) and np.array_equal(gen_e, ref_e)


@njit(cache=False)
def kernels_stack_hyperbola(trace, tau2, q, tau_first, stack, energy, j0, j1):
    kernels._stack_hyperbola(trace, tau2, q, tau_first, stack, energy, j0, j1)


@pytest.mark.parametrize("etas", [None, np.array([0.0, 0.1, 0.3])])
def test_same_bits_for_any_thread_count_both_laws(etas, rng):
    import numba

    offsets = np.linspace(-2800, 2800, 57)
    data = rng.standard_normal((57, 800)).astype(np.float32)
    vels = velocity_axis(1500, 4500, 37)
    panels = []
    for threads in range(1, numba.config.NUMBA_NUM_THREADS + 1):
        numba.set_num_threads(threads)
        panels.append(scan_gather(data, offsets, DT, 0.1, vels, etas=etas))
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
    assert all(np.array_equal(panels[0], p) for p in panels[1:])
