"""What bounds the semblance kernel: the same loop with parts of the block left out.

Each variant runs the kernel's own per-trace driver (``kernels.make_stackers``: live spans,
two-group blocks, masked tails) over the standard gather on one thread, with different full
blocks (two-group and one-group), built from the kernel's own code-generation stages
(``kernels.BlockCode``); the masked tails stay the kernel's:

- ``kernel``: the block of velspec.scan.kernels as it is;
- ``gathers instead of permutes``: the interpolation end points fetched with two W-lane
  gathers (what the loop vectoriser makes of ``trace[k]``), everything else the same;
- ``no sqrt``: the positions a linear function of tau^2 instead of sqrt(tau^2 + q);
- ``sqrt and position only``: no trace samples at all, the position itself accumulated;
- ``table loads, no permutes``: the two W-float loads used directly as end points;
- ``driver only``: one vector add per block, to show the cost of spans, loop and tails.

The block width W and permute are the kernel's (``kernels.TARGET``); run under
``NUMBA_CPU_NAME=haswell NUMBA_CPU_FEATURES=""`` (and its own ``NUMBA_CACHE_DIR``) for the
AVX2 path. Run alone (``python benchmarks/bounds.py [GHz]``) or from run.py. Figures are cycles
per block of W t0 samples at the given clock.
"""

from __future__ import annotations

import time

import numpy as np
from llvmlite import ir
from numba import njit
from numba.core import cgutils
from numba.extending import intrinsic

from velspec.scan import kernels as K
from velspec.scan.moveout import hyperbolic_span
from velspec.scan.primitives import I1, I32, I64

VARIANTS = ["kernel", "gathers instead of permutes", "no sqrt", "sqrt and position only",
            "table loads, no permutes", "driver only"]


def _gather(code, k):
    """trace[k[l]] for every lane l, by llvm.masked.gather (vgatherdps on x86)."""
    b, v = code.b, code.v
    lanes = v.lanes
    ptr = code.trace.type
    vp = ir.VectorType(ptr, lanes)
    vi64 = ir.VectorType(I64, lanes)
    base = v.b.insert_element(ir.Constant(vi64, ir.Undefined), b.ptrtoint(code.trace, I64), I32(0))
    base = b.shuffle_vector(base, ir.Constant(vi64, ir.Undefined), ir.Constant(v.vi, [0] * lanes))
    addr = b.add(base, b.mul(b.sext(k, vi64), ir.Constant(vi64, [4] * lanes)))
    fn = cgutils.get_or_insert_function(
        b.module, ir.FunctionType(v.vf, [vp, I32, v.vb, v.vf]), f"llvm.masked.gather.v{lanes}f32.v{lanes}p0")
    allm = ir.Constant(v.vb, [1] * lanes)
    return b.call(fn, [b.inttoptr(addr, vp), I32(4), allm, v.float_const(0.0)])


def variant_block(kind: str, groups: int, whole_delay: bool):
    """A full block intrinsic with the kernel's signature and parts of its work left out
    (``whole_delay`` as in ``kernels.make_block``)."""

    def typer(typingctx, trace, src, stack, energy, j, n, q, tau_first):
        sig = K.block_typer(trace, src, stack, energy, j, n, q, tau_first)
        if sig is None:
            return None

        def codegen(context, builder, signature, args):
            code = K.BlockCode(context, builder, signature, args, K.LANES, K.TARGET.permute, masked=False)
            b, v = code.b, code.v
            if kind == "driver only":
                for g in range(groups):
                    j = code.at(g)
                    v.store(b.fadd(v.load(code.stack, j), v.float_const(1.0)), code.stack, j)
                return ir.Constant(I1, 1)
            ps = []
            for g in range(groups):
                x = code.source(g)
                if kind == "no sqrt":
                    ps.append(b.fmul(b.fadd(x, v.splat(code.q)), v.float_const(1e-4)))
                else:
                    ps.append(code.from_zero(x) if whole_delay else code.hyperbola(x))
            if kind == "sqrt and position only":
                for g, p in enumerate(ps):
                    j = code.at(g)
                    v.store(b.fadd(v.load(code.stack, j), p), code.stack, j)
                return ir.Constant(I1, 1)
            parts = [code.indices(p) for p in ps]
            if whole_delay:
                shift = b.fptosi(code.tau_first, I32)
                parts = [(k, f, b.sub(kb, shift), idx) for k, f, kb, idx in parts]
            ok = code.check([kb for _, _, kb, _ in parts], [idx for _, _, _, idx in parts], rising=True)
            with b.if_then(ok, likely=True):
                for g, (k, f, kb, idx) in enumerate(parts):
                    if kind == "gathers instead of permutes":
                        a0 = _gather(code, k)
                        a1 = _gather(code, b.add(k, v.int_const(1)))
                    elif kind == "table loads, no permutes":
                        a0, a1 = code.tables(kb)
                    else:
                        a0, a1 = code.end_points(kb, idx)
                    code.accumulate(f, a0, a1, g)
            return ok

        return sig, codegen

    typer.__name__ = typer.__qualname__ = (f"bound_{groups}_{int(whole_delay)}_"
                                           + "".join(c if c.isalnum() else "_" for c in kind))
    return intrinsic(typer)


def _driver(blocks):
    stack_hyperbola = K.make_stackers(blocks)[0]

    @njit(nogil=True)
    def drive(data, q_unit, trials, tau2, mute_c, tau_first):
        ntr, ns = data.shape
        nt = tau2.shape[0]
        last = np.float32(ns - 1)
        stack = np.zeros(nt, dtype=np.float32)
        energy = np.zeros(nt, dtype=np.float32)
        for m in range(trials.shape[0]):
            for i in range(ntr):
                q = q_unit[i] * trials[m, 0]
                j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
                stack_hyperbola(data[i], tau2, q, tau_first, stack, energy, j0, j1)
        return stack[0] + energy[-1]

    return drive


@njit(nogil=True)
def _blocks(q_unit, trials, tau2, mute_c, tau_first, ns, lanes):
    """Blocks (full or tail) the driver runs over the gather."""
    last = np.float32(ns - 1)
    n = 0
    for m in range(trials.shape[0]):
        for i in range(q_unit.shape[0]):
            j0, j1 = hyperbolic_span(tau2, q_unit[i] * trials[m, 0], mute_c, tau_first, last)
            if j1 > j0:
                n += (j1 - j0 + lanes - 1) // lanes
    return n


def kernel_args(ntr=96, ns=1500, nv=120, dt=0.004):
    rng = np.random.default_rng(7)
    data = rng.standard_normal((ntr, ns)).astype(np.float32)
    x = np.linspace(100.0, 2475.0, ntr)
    vels = np.linspace(1400.0, 6000.0, nv)
    trials = np.zeros((nv, 2), dtype=np.float32)
    trials[:, 0] = 1.0 / vels**2
    t0 = dt * np.arange(ns)
    tau2 = np.where(t0 > 0, (t0 / dt) ** 2, -1.0).astype(np.float32)
    return data, (x * x / (dt * dt)).astype(np.float32), trials, tau2, np.float32(1.5**2 - 1.0), np.float32(0.0)


def measure(clock_ghz: float, seconds: float = 5.0) -> list[dict]:
    """Cycles per W-sample block of each variant, one thread, best of rounds for ``seconds``."""
    args = kernel_args()
    data, q_unit, trials, tau2, mute_c, tau_first = args
    nblocks = int(_blocks(q_unit, trials, tau2, mute_c, tau_first, data.shape[1], K.LANES))
    drivers = {}
    for kind in VARIANTS:
        blocks = K.BLOCKS if kind == "kernel" else K.BLOCKS._replace(
            pair_hyperbola=variant_block(kind, 2, False), full_hyperbola=variant_block(kind, 1, False),
            pair_whole_delay=variant_block(kind, 2, True), full_whole_delay=variant_block(kind, 1, True))
        drivers[kind] = _driver(blocks)
        drivers[kind](*args)                       # compile
    best = {kind: 1e9 for kind in VARIANTS}
    start = time.perf_counter()
    while time.perf_counter() - start < seconds:   # interleaved rounds, best of each
        for kind, drive in drivers.items():
            t = time.perf_counter()
            drive(*args)
            best[kind] = min(best[kind], time.perf_counter() - t)
    return [{"variant": kind, "lanes": K.LANES, "seconds": best[kind], "blocks": nblocks,
             "ns_per_block": best[kind] / nblocks * 1e9,
             "cycles_per_block": best[kind] / nblocks * clock_ghz * 1e9,
             "cycles_per_sample": best[kind] / nblocks * clock_ghz * 1e9 / K.LANES} for kind in VARIANTS]


def hot_loop_instructions() -> dict:
    """Instructions per block in the driver's steady-state loop (the shortest loop with a vector
    square root and a permute), from a fresh, uncached compile of the per-trace driver."""
    stack_hyperbola = K.stack_hyperbola

    @njit(nogil=True)
    def drive(trace, tau2, q, tau_first, stack, energy, j0, j1):
        stack_hyperbola(trace, tau2, q, tau_first, stack, energy, j0, j1)

    data, q_unit, trials, tau2, mute_c, tau_first = kernel_args(ntr=2, ns=400, nv=1)
    z = np.zeros(400, dtype=np.float32)
    drive(data[0], tau2, np.float32(100.0), tau_first, z, z.copy(), 10, 390)
    lines = [ln.split("#")[0].strip() for ln in drive.inspect_asm(drive.signatures[0]).splitlines()]
    labels = {ln[:-1]: i for i, ln in enumerate(lines) if ln.startswith(".LBB") and ln.endswith(":")}
    permutes = ("vpermps", "vpermd", "vpermi2ps", "vpermilps", "tbl")
    best = None
    for i, ln in enumerate(lines):
        parts = ln.split()
        if len(parts) == 2 and parts[0].startswith("j") and parts[1] in labels and labels[parts[1]] < i:
            body = [x for x in lines[labels[parts[1]] + 1: i + 1] if x and not x.startswith(".")]
            text = " ".join(body)
            if "vsqrtps" in text and any(p in text for p in permutes) and (best is None or len(body) < len(best)):
                best = body
    if best is None:
        return {}
    per_turn = sum(1 for x in best if x.startswith("vsqrtps"))
    return {"lanes": K.LANES, "instructions_per_turn": len(best), "blocks_per_turn": per_turn,
            "instructions_per_block": len(best) / per_turn,
            "vector_instructions_per_block": sum(1 for x in best if x.startswith(("v", "k"))) / per_turn,
            "listing": best}


if __name__ == "__main__":
    import sys

    import numba

    numba.set_num_threads(1)
    ghz = float(sys.argv[1]) if len(sys.argv) > 1 else 2.6
    print(f"kernel path {K.TARGET.path} (compiled for {K.TARGET.cpu})")
    for r in measure(clock_ghz=ghz):
        print(f"{r['variant']:32s} {r['ns_per_block']:6.2f} ns  {r['cycles_per_block']:6.1f} cycles per "
              f"{r['lanes']}-sample block at {ghz} GHz")
    hot = hot_loop_instructions()
    print({k: v for k, v in hot.items() if k != "listing"})
    print("\n".join(hot.get("listing", [])))
