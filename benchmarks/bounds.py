"""What bounds the semblance kernel: the same loop with parts of the 16-sample block left out.

Each variant runs the kernel's own driver (live spans, two blocks per turn, masked tails) over
the standard gather on one thread, with a different block:

- ``kernel``: the block of velspec.scan.kernels as it is;
- ``gathers instead of permutes``: the interpolation end points fetched with two 16-lane
  gathers (what the loop vectoriser makes of ``trace[k]``), everything else the same;
- ``no sqrt``: the positions a linear function of tau^2 instead of sqrt(tau^2 + q);
- ``sqrt and position only``: no trace samples at all, the position itself accumulated;
- ``table loads, no permutes``: the two 16-float loads used directly as end points;
- ``driver only``: one vector add per block, to show the cost of spans, loop and tails.

Run alone (``python benchmarks/bounds.py``) or from run.py. Figures are cycles per block of 16
t0 samples at the measured clock, so they do not move with the machine's clock.
"""

from __future__ import annotations

import time

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic

from velspec.scan import kernels as K
from velspec.scan.moveout import hyperbolic_span


def _variant(kind: str):
    """A block intrinsic with the kernel's signature and parts of its work left out."""

    def typer(typingctx, trace, src, stack, energy, j, n, q, tau_first):
        sig = types.boolean(trace, src, stack, energy, j, n, q, tau_first)

        def codegen(context, builder, signature, args):
            at = signature.args

            def data(k):
                return cgutils.create_struct_proxy(at[k])(context, builder, value=args[k]).data

            trace_ptr, src_ptr, stack_ptr, energy_ptr = (data(k) for k in range(4))
            jv = context.cast(builder, args[4], at[4], types.int64)
            if kind == "driver only":
                one = K._splat(builder, ir.Constant(K._F32, 1.0), K._VF)
                K._store(builder, builder.fadd(K._load(builder, stack_ptr, jv, None), one), stack_ptr, jv, None)
                return ir.Constant(K._I1, 1)
            ns = builder.trunc(cgutils.unpack_tuple(
                builder, cgutils.create_struct_proxy(at[0])(context, builder, value=args[0]).shape)[0], K._I32)
            x = builder.fadd(K._load(builder, src_ptr, jv, None), K._splat(builder, args[6], K._VF))
            if kind == "no sqrt":
                p = builder.fmul(x, K._splat(builder, ir.Constant(K._F32, 1e-4), K._VF))
            else:
                sqrt = cgutils.get_or_insert_function(builder.module, ir.FunctionType(K._VF, [K._VF]),
                                                      "llvm.sqrt.v16f32")
                p = builder.fsub(builder.call(sqrt, [x]), K._splat(builder, args[7], K._VF))
            if kind == "sqrt and position only":
                K._store(builder, builder.fadd(K._load(builder, stack_ptr, jv, None), p), stack_ptr, jv, None)
                return ir.Constant(K._I1, 1)
            k = builder.fptosi(p, K._VI)
            kmax = K._splat(builder, builder.sub(ns, K._c32(2)), K._VI)
            k = builder.select(builder.icmp_signed("<", k, kmax), k, kmax)
            f = builder.fsub(p, builder.sitofp(k, K._VF))
            kb = builder.extract_element(k, K._c32(0))
            ok = builder.icmp_signed("<=", kb, builder.sub(ns, K._c32(2 * K.LANES)))
            with builder.if_then(ok, likely=True):
                if kind == "gathers instead of permutes":
                    # vgatherdps: base + 4 * k for all 16 lanes (what the loop vectoriser emits).
                    fnty = ir.FunctionType(K._VF, [K._VF, trace_ptr.type, K._VI, ir.IntType(16), K._I32])
                    gather = cgutils.get_or_insert_function(builder.module, fnty, "llvm.x86.avx512.gather.dps.512")
                    zero = ir.Constant(K._VF, [0.0] * K.LANES)
                    allm = ir.Constant(ir.IntType(16), 0xFFFF)
                    a0 = builder.call(gather, [zero, trace_ptr, k, allm, K._c32(4)])
                    k1 = builder.add(k, K._splat(builder, K._c32(1), K._VI))
                    a1 = builder.call(gather, [zero, trace_ptr, k1, allm, K._c32(4)])
                else:
                    kb64 = builder.sext(kb, K._I64)
                    lo = K._load(builder, trace_ptr, kb64, None)
                    hi = K._load(builder, trace_ptr, builder.add(kb64, ir.Constant(K._I64, K.LANES)), None)
                    if kind == "table loads, no permutes":
                        a0, a1 = lo, hi
                    else:
                        idx = builder.sub(k, K._splat(builder, kb, K._VI))
                        a0 = K._pick(builder, lo, hi, idx, K._HOST_AVX512)
                        a1 = K._pick(builder, lo, hi, builder.add(idx, K._splat(builder, K._c32(1), K._VI)),
                                     K._HOST_AVX512)
                fma = cgutils.get_or_insert_function(builder.module, ir.FunctionType(K._VF, [K._VF] * 3),
                                                     "llvm.fma.v16f32")
                a = builder.call(fma, [f, builder.fsub(a1, a0), a0])
                K._store(builder, builder.fadd(K._load(builder, stack_ptr, jv, None), a), stack_ptr, jv, None)
                K._store(builder, builder.call(fma, [a, a, K._load(builder, energy_ptr, jv, None)]),
                         energy_ptr, jv, None)
            return ok

        return sig, codegen

    typer.__name__ = typer.__qualname__ = "_bound_" + "".join(c if c.isalnum() else "_" for c in kind)
    return intrinsic(typer)


def _driver(block):
    lanes = K.LANES
    tail = K._hyperbola_tail

    @njit(nogil=True)
    def drive(data, q_unit, trials, tau2, mute_c, tau_first):
        ntr, ns = data.shape
        nt = tau2.shape[0]
        last = np.float32(ns - 1)
        stack = np.zeros(nt, dtype=np.float32)
        energy = np.zeros(nt, dtype=np.float32)
        blocks = 0
        for m in range(trials.shape[0]):
            for i in range(ntr):
                q = q_unit[i] * trials[m, 0]
                j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
                trace = data[i]
                j = j0
                while j + 2 * lanes <= j1 and block(trace, tau2, stack, energy, j, lanes, q, tau_first):
                    j += lanes
                    blocks += 1
                    if not block(trace, tau2, stack, energy, j, lanes, q, tau_first):
                        break
                    j += lanes
                    blocks += 1
                while j + lanes <= j1 and block(trace, tau2, stack, energy, j, lanes, q, tau_first):
                    j += lanes
                    blocks += 1
                while j < j1:
                    tail(trace, tau2, stack, energy, j, min(lanes, j1 - j), q, tau_first)
                    blocks += 1
                    j += lanes
        return blocks, stack[0] + energy[-1]

    return drive


VARIANTS = ["kernel", "gathers instead of permutes", "no sqrt", "sqrt and position only",
            "table loads, no permutes", "driver only"]


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
    """Cycles per 16-sample block of each variant, one thread, best of rounds for ``seconds``."""
    args = kernel_args()
    drivers = {}
    for kind in VARIANTS:
        block = K._hyperbola_block if kind == "kernel" else _variant(kind)
        drivers[kind] = _driver(block)
        drivers[kind](*args)                       # compile
    best = {kind: 1e9 for kind in VARIANTS}
    nblocks = {}
    start = time.perf_counter()
    while time.perf_counter() - start < seconds:   # interleaved rounds, best of each
        for kind, drive in drivers.items():
            t = time.perf_counter()
            nblocks[kind], _ = drive(*args)
            best[kind] = min(best[kind], time.perf_counter() - t)
    return [{"variant": kind, "seconds": best[kind], "blocks": int(nblocks[kind]),
             "ns_per_block": best[kind] / nblocks[kind] * 1e9,
             "cycles_per_block": best[kind] / nblocks[kind] * clock_ghz * 1e9} for kind in VARIANTS]


def hot_loop_instructions() -> dict:
    """Instructions per block in the kernel's steady-state loop (the one with vsqrtps and
    vpermi2ps), from a fresh, uncached compile of the kernel (cached code cannot be inspected)."""
    from numba import njit as _njit

    fresh = _njit(parallel=True, nogil=True, error_model="numpy")(K.semblance.py_func)
    data, q_unit, trials, tau2, mute_c, tau_first = kernel_args(ntr=8, ns=100, nv=4)
    fresh(data, q_unit, trials, 0, tau2, mute_c, tau_first, 5)
    lines = [ln.split("#")[0].strip() for ln in fresh.inspect_asm(fresh.signatures[0]).splitlines()]
    labels = {ln[:-1]: i for i, ln in enumerate(lines) if ln.startswith(".LBB") and ln.endswith(":")}
    best = None
    for i, ln in enumerate(lines):
        parts = ln.split()
        if len(parts) == 2 and parts[0].startswith("j") and parts[1] in labels and labels[parts[1]] < i:
            body = [x for x in lines[labels[parts[1]] + 1: i + 1] if x and not x.startswith(".")]
            text = " ".join(body)
            if "vsqrtps" in text and "vpermi2ps" in text and (best is None or len(body) < len(best)):
                best = body
    if best is None:
        return {}
    per_turn = sum(1 for x in best if x.startswith("vsqrtps"))
    return {"instructions_per_turn": len(best), "blocks_per_turn": per_turn,
            "instructions_per_block": len(best) / per_turn,
            "vector_instructions_per_block": sum(1 for x in best if x.startswith(("v", "k"))) / per_turn,
            "listing": best}


if __name__ == "__main__":
    import sys

    import numba

    numba.set_num_threads(1)
    ghz = float(sys.argv[1]) if len(sys.argv) > 1 else 2.6
    for r in measure(clock_ghz=ghz):
        print(f"{r['variant']:32s} {r['ns_per_block']:6.2f} ns  {r['cycles_per_block']:6.1f} cycles per block "
              f"at {ghz} GHz")
    hot = hot_loop_instructions()
    print({k: v for k, v in hot.items() if k != "listing"})
    print("\n".join(hot.get("listing", [])))
