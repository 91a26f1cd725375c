"""The fast semblance kernel against the straightforward loop it replaces, bit for bit.

The kernel takes a block of W t0 samples at a time (W = 16, 8 or 4 by the CPU numba compiles
for) and picks their interpolation end points out of two W-sample loads with register permutes,
with masked blocks at the end of a span and a sample-by-sample fallback. Every path does the
same float32 operations in the same order as the plain loop below (moveout.positions, then
linear interpolation fma(f, a1 - a0, a0) and the energy fma(a, a, e), traces summed in order),
so the panels must be identical, not merely close: across paths (every width and permute this
machine can run, the AVX2 code in a process compiled for Haswell, the scalar path) and across
thread counts. No timing here: speed is measured in benchmarks/.
"""

import json
import os
import subprocess
import sys
import textwrap

import llvmlite.binding as llvm_binding
import numpy as np
import pytest
from llvmlite import ir
from numba import njit

from velspec.scan import kernels, scan_gather, velocity_axis
from velspec.scan.moveout import HYPERBOLIC, NONHYPERBOLIC, guessed_search, hyperbolic_span, positions
from velspec.scan.primitives import VectorIR, fma32, vector_target, window_ratio

DT = 0.004


@njit(cache=False)
def plain_semblance(data, q_unit, trials, law, tau2, mute_c, tau_first, half):
    """The semblance definition as one simple loop: positions, interpolation, running sums."""
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
                a = fma32(p - np.float32(k), data[i, k + 1] - a0, a0)
                stack[j] += a
                energy[j] = fma32(a, a, energy[j])
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
        window_ratio(num, den, half, out[m])
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
    "delay of a fraction of a sample": dict(ntr=24, ns=600, nv=11, t_first=0.0513),
    "negative delay": dict(ntr=24, ns=600, nv=11, t_first=-0.1),
    "zero offsets": dict(ntr=12, ns=400, nv=4, offsets=np.zeros(12)),
    "near-zero offsets": dict(ntr=12, ns=3000, nv=4, offsets=np.linspace(0.0, 30.0, 12)),
    "split spread": dict(ntr=40, ns=700, nv=9, offsets=np.linspace(-2000, 2000, 40)),
    "no window": dict(ntr=30, ns=500, nv=7, half=0),
    "nonhyperbolic": dict(ntr=30, ns=500, nv=9, eta=0.15),
    "nonhyperbolic, delay": dict(ntr=30, ns=500, nv=9, eta=0.4, t_first=0.1),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_same_bits_as_the_plain_loop(name, rng):
    args = kernel_args(rng=rng, **CASES[name])
    assert np.array_equal(kernels.semblance(*args), plain_semblance(*args))


# -- every block width and permute this machine can run -----------------------------------------

def runnable_paths():
    """(lanes, permute) pairs whose instructions the CPU numba compiles for has; (1, "scalar")
    is the sample-by-sample path of the drivers."""
    t = vector_target()
    paths = [(1, "scalar"), (4, "generic"), (8, "generic"), (16, "generic")]
    if t.arch == "x86_64":
        if t.lanes >= 8 or t.permute == "avx":
            paths.append((4, "avx"))
        if t.lanes >= 8:
            paths.append((8, "avx2"))
        if t.lanes == 16:
            paths.append((16, "avx512"))
    elif t.arch == "aarch64":
        paths.append((4, "neon"))
    return paths


def stack_everything(lanes, permute):
    """njit (data, q_unit, trials, law, tau2, mute_c, tau_first) -> stack, energy per trial,
    through the block path of the given width and permute, or sample by sample ("scalar")."""
    if permute == "scalar":
        stack_h, stack_p = kernels.stack_hyperbola_scalar, kernels.stack_positions_scalar
    else:
        stack_h, stack_p, _, _ = kernels.make_stackers(kernels.make_blocks(lanes, permute))

    @njit(cache=False)
    def run(data, q_unit, trials, law, tau2, mute_c, tau_first):
        ntr, ns = data.shape
        nt = tau2.shape[0]
        last = np.float32(ns - 1)
        stack = np.zeros((trials.shape[0], nt), dtype=np.float32)
        energy = np.zeros((trials.shape[0], nt), dtype=np.float32)
        pos = np.empty(nt, dtype=np.float32)
        for m in range(trials.shape[0]):
            for i in range(ntr):
                q = q_unit[i] * trials[m, 0]
                if law == HYPERBOLIC:
                    j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
                    stack_h(data[i], tau2, q, tau_first, stack[m], energy[m], j0, j1)
                else:
                    j0, j1 = positions(law, tau2, q, trials[m, 1], mute_c, tau_first, last, pos)
                    stack_p(data[i], pos, stack[m], energy[m], j0, j1)
        return stack, energy

    return run


@njit(cache=False)
def stack_plainly(data, q_unit, trials, law, tau2, mute_c, tau_first):
    ntr, ns = data.shape
    nt = tau2.shape[0]
    last = np.float32(ns - 1)
    stack = np.zeros((trials.shape[0], nt), dtype=np.float32)
    energy = np.zeros((trials.shape[0], nt), dtype=np.float32)
    pos = np.empty(nt, dtype=np.float32)
    for m in range(trials.shape[0]):
        for i in range(ntr):
            j0, j1 = positions(law, tau2, q_unit[i] * trials[m, 0], trials[m, 1], mute_c, tau_first, last, pos)
            for j in range(j0, j1):
                k = min(int(pos[j]), ns - 2)
                a0 = data[i, k]
                a = fma32(pos[j] - np.float32(k), data[i, k + 1] - a0, a0)
                stack[m, j] += a
                energy[m, j] = fma32(a, a, energy[m, j])
    return stack, energy


@pytest.mark.parametrize("lanes,permute", runnable_paths())
def test_every_runnable_block_path_gives_the_plain_bits(lanes, permute, rng):
    run = stack_everything(lanes, permute)
    for name in ("standard", "shorter than a block", "span ends near the trace end", "delay", "negative delay",
                 "delay of a fraction of a sample", "near-zero offsets", "nonhyperbolic, delay"):
        args = kernel_args(rng=rng, **CASES[name])[:7]
        got_s, got_e = run(*args)
        ref_s, ref_e = stack_plainly(*args)
        assert np.array_equal(got_s, ref_s) and np.array_equal(got_e, ref_e), (lanes, permute, name)


def test_the_host_path_is_chosen_from_the_compilation_target():
    # The width follows the CPU features numba compiles with (AVX-512: 16, AVX2: 8 lanes).
    assert vector_target("haswell", "").path == "8-lane avx2"
    assert vector_target("skylake-avx512", "").path == "16-lane avx512"
    assert vector_target("x86-64", "").lanes == 4
    assert kernels.LANES == kernels.TARGET.lanes == vector_target().lanes


def test_neon_permute_compiles_to_tbl():
    # The 4-lane NEON permute cannot run here; check that LLVM lowers it to one tbl (the bits
    # are checked by test_every_runnable_block_path_gives_the_plain_bits on an ARM machine).
    llvm_binding.initialize_all_targets()
    try:
        target = llvm_binding.Target.from_triple("aarch64-unknown-linux-gnu")
    except RuntimeError:
        pytest.skip("this llvmlite has no AArch64 target")
    llvm_binding.initialize_all_asmprinters()
    mod = ir.Module()
    vf, vi = ir.VectorType(ir.FloatType(), 4), ir.VectorType(ir.IntType(32), 4)
    fn = ir.Function(mod, ir.FunctionType(vf, [vf, vi]), "pick")
    builder = ir.IRBuilder(fn.append_basic_block())
    builder.ret(VectorIR(builder, 4, "neon").permute(*fn.args))
    asm = target.create_target_machine().emit_assembly(llvm_binding.parse_assembly(str(mod)))
    assert "tbl" in asm


# -- the AVX2 path, compiled for Haswell in a fresh process ------------------------------------

_CHILD = textwrap.dedent("""
    import json, sys
    import numba, numpy as np
    from velspec.scan import kernels, scan_gather, velocity_axis
    out = {"path": kernels.TARGET.path, "cpu": kernels.TARGET.cpu}
    rng = np.random.default_rng(5)
    offsets = np.linspace(-2800, 2800, 57)
    data = rng.standard_normal((57, 800)).astype(np.float32)
    vels = velocity_axis(1500, 4500, 37)
    for threads in (1, 2):
        numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
        for etas in (None, [0.0, 0.1, 0.3]):
            p = scan_gather(data, offsets, DT, 0.1, vels, etas=None if etas is None else np.array(etas))
            np.save(sys.argv[1] + f"/panel-{threads}-{'eta' if etas else 'hyp'}.npy", p)
    # The parallel kernel's body is compiled apart and cannot be listed: list its driver.
    drive = numba.njit(lambda tr, t2, q, tf, s, e, j0, j1: kernels.stack_hyperbola(tr, t2, q, tf, s, e, j0, j1))
    q, tf = np.float32(100.0), np.float32(0.0)
    tau2 = (np.arange(800) ** 2).astype(np.float32)
    drive(data[0], tau2, q, tf, np.zeros(800, np.float32), np.zeros(800, np.float32), 10, 790)
    asm = drive.inspect_asm(drive.signatures[0])
    out["zmm"] = "zmm" in asm
    out["vperm_ymm"] = sum(1 for ln in asm.splitlines() if ("vpermps" in ln or "vpermd" in ln) and "ymm" in ln)
    print(json.dumps(out))
""").replace("DT", repr(DT))


def test_avx2_path_gives_the_same_bits_as_this_machine(tmp_path, rng):
    env = dict(os.environ, NUMBA_CPU_NAME="haswell", NUMBA_CPU_FEATURES="",
               NUMBA_CACHE_DIR=str(tmp_path / "numba-cache-haswell"))
    proc = subprocess.run([sys.executable, "-c", _CHILD, str(tmp_path)], env=env, capture_output=True,
                          text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr[-2000:]
    child = json.loads(proc.stdout.strip().splitlines()[-1])
    assert child["path"] == "8-lane avx2" and child["cpu"] == "haswell"
    assert not child["zmm"] and child["vperm_ymm"] > 0   # really 256-bit code, vpermps/vpermd
    cr = np.random.default_rng(5)
    offsets = np.linspace(-2800, 2800, 57)
    data = cr.standard_normal((57, 800)).astype(np.float32)
    vels = velocity_axis(1500, 4500, 37)
    import numba
    for etas in (None, [0.0, 0.1, 0.3]):
        here = scan_gather(data, offsets, DT, 0.1, vels, etas=None if etas is None else np.array(etas))
        for threads in (1, 2):
            there = np.load(tmp_path / f"panel-{threads}-{'eta' if etas else 'hyp'}.npy")
            assert np.array_equal(here, there), (etas, threads, numba.config.NUMBA_NUM_THREADS)


# -- other invariants -------------------------------------------------------------------------

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
    # exactly (the walk gives up and binary-searches); numpy.searchsorted is the reference.
    arrays = [np.sort(rng.uniform(-5, 1e4, 300)).astype(np.float32),
              np.repeat(np.arange(50, dtype=np.float32), 7),
              ((3.0 + np.arange(200)) ** 2).astype(np.float32)]
    for tau2 in arrays:
        for v in np.concatenate([rng.uniform(-10, 2e4, 200), tau2[::17]]).astype(np.float32):
            for right in (False, True):
                side = "right" if right else "left"
                assert guessed_search(tau2, v, np.float32(3.0), right) == np.searchsorted(tau2, v, side=side)


@njit(cache=False)
def _drive_blocks(trace, pos, stack, energy, j0, j1):
    kernels.stack_positions(trace, pos, stack, energy, j0, j1)


@njit(cache=False)
def _plain_positions(trace, pos, stack, energy, j0, j1):
    ns = trace.shape[0]
    for j in range(j0, j1):
        k = min(int(pos[j]), ns - 2)
        a = fma32(pos[j] - np.float32(k), trace[k + 1] - trace[k], trace[k])
        stack[j] += a
        energy[j] = fma32(a, a, energy[j])


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
