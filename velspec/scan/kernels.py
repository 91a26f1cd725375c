"""Coherence kernels: one numba function per measure, parallel over trial moveouts.

Every kernel has the same skeleton:

    for each trial (velocity, eta)            # each trial is computed by one thread from start
        for each trace                        # to end, so the bits do not depend on the thread
            [j0, j1) = live span of the trace # count
            accumulate the measure's per-t0 sums over the live span
        sum those over the sliding window and form the measure

Kernels know nothing of files, options or progress bars; they take float32 arrays and return
a float32 panel of shape (ntrial, nt).

How the semblance kernel is fast
--------------------------------
Its inner loop takes 16 consecutive t0 samples of one trace at a time (one AVX-512 register).
The moveout position p(t0) = sqrt(tau^2 + q) - tau_first rises by at most one sample per t0
sample (dp/dtau = tau / sqrt(tau^2 + q) <= 1), so the interpolation end points floor(p) and
floor(p) + 1 of a block's 16 lanes lie within 18 consecutive trace samples from the first lane's
floor(p). Two plain 16-float loads from there make a 32-sample table, and both end points of
every lane are picked from it with two register permutes (vpermi2ps) instead of two 16-lane
gathers, which on this CPU cost about 27 cycles each and bound the straightforward loop (see
benchmarks/bounds.py). The last block of a span is masked; a block whose positions spread wider
than the table (never for the hyperbola, possible in principle for other laws) is done sample by
sample. Interpolation a0 + f (a1 - a0) and the energy sum are fused multiply-adds (one rounding)
on every path, so every path gives the same bits; they differ from the unfused NumPy reference by
float32 rounding only.

The block is written as a numba intrinsic (LLVM vector IR) because numba has no vector types
and the loop vectoriser turns table look-ups into gathers. On CPUs without AVX-512 the same IR
with a generic shuffle is emitted: correct, not tuned.
"""

import llvmlite.binding as _llvm_binding
import numpy as np
from llvmlite import ir
from numba import njit, prange, types
from numba.core import cgutils
from numba.extending import intrinsic

from .moveout import HYPERBOLIC, hyperbolic_span, positions

LANES = 16  # t0 samples per block: one 512-bit register of float32
_HOST_AVX512 = "+avx512f" in _llvm_binding.get_host_cpu_features().flatten().split(",")


@njit(cache=True, nogil=True, inline="always")
def _interp(trace, p):
    # p >= 0 and p <= len - 1 (guaranteed by positions), so truncation is floor.
    k = np.uint32(p)
    if k >= trace.shape[0] - 1:
        k = np.uint32(trace.shape[0] - 2)
    f = p - np.float32(k)
    a0 = trace[k]
    return a0 + f * (trace[k + np.uint32(1)] - a0)


# ---------------------------------------------------------------------------------------------
# The 16-sample block, as LLVM IR.

_F32 = ir.FloatType()
_I1, _I32, _I64 = ir.IntType(1), ir.IntType(32), ir.IntType(64)
_VF = ir.VectorType(_F32, LANES)
_VI = ir.VectorType(_I32, LANES)
_VB = ir.VectorType(_I1, LANES)
_IOTA = ir.Constant(_VI, list(range(LANES)))
_ALL = ir.Constant(ir.IntType(LANES), (1 << LANES) - 1)


def _c32(x):
    return ir.Constant(_I32, x)


def _splat(builder, x, vty):
    v = builder.insert_element(ir.Constant(vty, ir.Undefined), x, _c32(0))
    return builder.shuffle_vector(v, ir.Constant(vty, ir.Undefined), ir.Constant(_VI, [0] * LANES))


def _vptr(builder, base, offset):
    return builder.bitcast(builder.gep(base, [offset]), _VF.as_pointer())


def _load(builder, base, offset, mask):
    """16 floats from base[offset:]; with a mask, only its lanes are read (the rest are 0)."""
    if mask is None:
        return builder.load(_vptr(builder, base, offset), align=4)
    fnty = ir.FunctionType(_VF, [_VF.as_pointer(), _I32, _VB, _VF])
    fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.masked.load.v16f32.p0")
    return builder.call(fn, [_vptr(builder, base, offset), _c32(4), mask, ir.Constant(_VF, [0.0] * LANES)])


def _store(builder, v, base, offset, mask):
    if mask is None:
        builder.store(v, _vptr(builder, base, offset), align=4)
        return
    fnty = ir.FunctionType(ir.VoidType(), [_VF, _VF.as_pointer(), _I32, _VB])
    fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.masked.store.v16f32.p0")
    builder.call(fn, [v, _vptr(builder, base, offset), _c32(4), mask])


def _pick(builder, lo, hi, idx, avx512):
    """Lane l = (lo ++ hi)[idx[l]], idx in 0..31."""
    if avx512:
        fnty = ir.FunctionType(_VF, [_VF, _VI, _VF])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.x86.avx512.vpermi2var.ps.512")
        return builder.call(fn, [lo, idx, hi])
    table = builder.shuffle_vector(lo, hi, ir.Constant(ir.VectorType(_I32, 2 * LANES), list(range(2 * LANES))))
    out = ir.Constant(_VF, ir.Undefined)
    for lane in range(LANES):
        e = builder.extract_element(table, builder.extract_element(idx, _c32(lane)))
        out = builder.insert_element(out, e, _c32(lane))
    return out


def _is_vector_row(ty):
    return isinstance(ty, types.Array) and ty.ndim == 1 and ty.layout == "C" and ty.dtype == types.float32


def _make_block(hyperbola, masked, avx512):
    """Intrinsic ``block(trace, src, stack, energy, j, n, q, tau_first) -> bool``.

    Adds the interpolated sample a and a^2 of ``trace`` at the positions of output samples
    j .. j+15 (only the first n, 1 <= n <= 16, when ``masked``) to ``stack`` and ``energy``.
    With ``hyperbola`` the positions are sqrt(src[j] + q) - tau_first (src = tau2, the float32
    operations of :func:`velspec.scan.moveout.positions`); otherwise they are read from src
    (= pos) and q, tau_first are ignored. Returns False, having written nothing, when the
    block's positions spread over more than 31 samples or, unmasked, when the 32-sample table
    would run past the end of the trace: the caller then does the block sample by sample.
    """

    def typer(typingctx, trace, src, stack, energy, j, n, q, tau_first):
        rows = (trace, src, stack, energy)
        if not all(_is_vector_row(a) for a in rows):
            return None  # typing error: rows must be C-contiguous float32 vectors
        if not all(isinstance(a, types.Integer) for a in (j, n)):
            return None
        if not all(isinstance(a, types.Float) for a in (q, tau_first)):
            return None
        sig = types.boolean(trace, src, stack, energy, j, n, q, tau_first)

        def codegen(context, builder, signature, args):
            at = signature.args

            def data(k):
                return cgutils.create_struct_proxy(at[k])(context, builder, value=args[k]).data

            trace_ptr, src_ptr, stack_ptr, energy_ptr = (data(k) for k in range(4))
            ns64 = cgutils.unpack_tuple(
                builder, cgutils.create_struct_proxy(at[0])(context, builder, value=args[0]).shape)[0]
            ns = builder.trunc(ns64, _I32)
            jv = context.cast(builder, args[4], at[4], types.int64)
            lanes = None
            if masked:
                nv = builder.trunc(context.cast(builder, args[5], at[5], types.int64), _I32)
                lanes = builder.icmp_signed("<", _IOTA, _splat(builder, nv, _VI))
            x = _load(builder, src_ptr, jv, lanes)
            if masked:
                # Dead lanes copy lane 0 so they pass the spread test; they are never stored.
                x = builder.select(lanes, x, _splat(builder, builder.extract_element(x, _c32(0)), _VF))
            if hyperbola:
                qv = context.cast(builder, args[6], at[6], types.float32)
                tf = context.cast(builder, args[7], at[7], types.float32)
                sqrt = cgutils.get_or_insert_function(builder.module, ir.FunctionType(_VF, [_VF]),
                                                      "llvm.sqrt.v16f32")
                p = builder.fsub(builder.call(sqrt, [builder.fadd(x, _splat(builder, qv, _VF))]),
                                 _splat(builder, tf, _VF))
            else:
                p = x
            # k = min(trunc(p), ns - 2), f = p - k: linear interpolation between k and k + 1.
            k = builder.fptosi(p, _VI)
            if masked:
                # Unmasked blocks need no clamp: kb <= ns - 32 and idx <= 30 give k <= ns - 2.
                kmax = _splat(builder, builder.sub(ns, _c32(2)), _VI)
                k = builder.select(builder.icmp_signed("<", k, kmax), k, kmax)
            f = builder.fsub(p, builder.sitofp(k, _VF))
            kb = builder.extract_element(k, _c32(0))
            idx = builder.sub(k, _splat(builder, kb, _VI))
            # Unsigned compare: also rejects idx < 0 (a law whose position falls with t0).
            inside = builder.icmp_unsigned("<=", idx, _splat(builder, _c32(2 * LANES - 2), _VI))
            ok = builder.icmp_unsigned("==", builder.bitcast(inside, ir.IntType(LANES)), _ALL)
            if not masked:
                ok = builder.and_(ok, builder.icmp_signed("<=", kb, builder.sub(ns, _c32(2 * LANES))))
            with builder.if_then(ok, likely=True):
                kb64 = builder.sext(kb, _I64)
                lo_lanes = hi_lanes = None
                if masked:
                    room = _splat(builder, builder.sub(ns, kb), _VI)
                    lo_lanes = builder.icmp_signed("<", _IOTA, room)
                    hi_lanes = builder.icmp_signed("<", builder.add(_IOTA, _splat(builder, _c32(LANES), _VI)), room)
                lo = _load(builder, trace_ptr, kb64, lo_lanes)
                hi = _load(builder, trace_ptr, builder.add(kb64, ir.Constant(_I64, LANES)), hi_lanes)
                a0 = _pick(builder, lo, hi, idx, avx512)
                a1 = _pick(builder, lo, hi, builder.add(idx, _splat(builder, _c32(1), _VI)), avx512)
                # a = fma(f, a1 - a0, a0), energy = fma(a, a, energy): as _accumulate does.
                fma = cgutils.get_or_insert_function(builder.module, ir.FunctionType(_VF, [_VF, _VF, _VF]),
                                                     "llvm.fma.v16f32")
                a = builder.call(fma, [f, builder.fsub(a1, a0), a0])
                _store(builder, builder.fadd(_load(builder, stack_ptr, jv, lanes), a), stack_ptr, jv, lanes)
                _store(builder, builder.call(fma, [a, a, _load(builder, energy_ptr, jv, lanes)]),
                       energy_ptr, jv, lanes)
            return ok

        return sig, codegen

    typer.__name__ = typer.__qualname__ = (
        f"_block_{'hyperbola' if hyperbola else 'pos'}_{'tail' if masked else 'full'}"
        f"_{'avx512' if avx512 else 'generic'}")
    return intrinsic(typer)


_hyperbola_block = _make_block(True, False, _HOST_AVX512)
_hyperbola_tail = _make_block(True, True, _HOST_AVX512)
_pos_block = _make_block(False, False, _HOST_AVX512)
_pos_tail = _make_block(False, True, _HOST_AVX512)


# ---------------------------------------------------------------------------------------------
# Sample-by-sample fallback and the per-trace drivers.

@intrinsic
def _fma32(typingctx, a, b, c):
    """a * b + c rounded once (float32), the scalar twin of the block's vector FMA."""
    if not all(x == types.float32 for x in (a, b, c)):
        return None

    def codegen(context, builder, signature, args):
        fn = cgutils.get_or_insert_function(builder.module, ir.FunctionType(_F32, [_F32] * 3), "llvm.fma.f32")
        return builder.call(fn, list(args))

    return types.float32(a, b, c), codegen


@njit(cache=True, nogil=True, inline="always")
def _accumulate(trace, p, stack, energy, j):
    # Same float32 operations as the block: k = min(trunc p, ns - 2), fma(f, a1 - a0, a0).
    k = min(np.int32(p), np.int32(trace.shape[0] - 2))
    f = p - np.float32(k)
    ku = np.uint64(k)
    a0 = trace[ku]
    a = _fma32(f, trace[ku + np.uint64(1)] - a0, a0)
    stack[j] += a
    energy[j] = _fma32(a, a, energy[j])


@njit(cache=True, nogil=True, inline="always")
def _stack_hyperbola(trace, tau2, q, tau_first, stack, energy, j0, j1):
    """Add one trace on the hyperbola (q, tau_first) to stack and energy over [j0, j1)."""
    j = j0
    # Two blocks per turn: half the loop branches, and the core sees more independent work.
    while j + 2 * LANES <= j1 and _hyperbola_block(trace, tau2, stack, energy, j, LANES, q, tau_first):
        j += LANES
        if not _hyperbola_block(trace, tau2, stack, energy, j, LANES, q, tau_first):
            break
        j += LANES
    while j + LANES <= j1 and _hyperbola_block(trace, tau2, stack, energy, j, LANES, q, tau_first):
        j += LANES
    while j < j1:
        n = min(LANES, j1 - j)
        if not _hyperbola_tail(trace, tau2, stack, energy, j, n, q, tau_first):
            for jj in range(np.uint64(j), np.uint64(j + n)):
                _accumulate(trace, np.float32(np.sqrt(tau2[jj] + q) - tau_first), stack, energy, jj)
        j += LANES


@njit(cache=True, nogil=True, inline="always")
def _stack_positions(trace, pos, stack, energy, j0, j1):
    """Add one trace at the positions pos[j0:j1] to stack and energy."""
    zero = np.float32(0.0)
    j = j0
    while j + 2 * LANES <= j1 and _pos_block(trace, pos, stack, energy, j, LANES, zero, zero):
        j += LANES
        if not _pos_block(trace, pos, stack, energy, j, LANES, zero, zero):
            break
        j += LANES
    while j + LANES <= j1 and _pos_block(trace, pos, stack, energy, j, LANES, zero, zero):
        j += LANES
    while j < j1:
        n = min(LANES, j1 - j)
        if not _pos_tail(trace, pos, stack, energy, j, n, zero, zero):
            for jj in range(np.uint64(j), np.uint64(j + n)):
                _accumulate(trace, pos[jj], stack, energy, jj)
        j += LANES


@njit(cache=True, nogil=True, error_model="numpy")
def _ratio(cn, cd, half, out):
    """out[j] = window sum of num / window sum of den from prefix sums cn, cd (nt + 1,)."""
    nt = out.shape[0]
    # Edges clip the window; the middle has affine indices so the loop vectorises (vdivpd).
    mid0 = min(half, nt)
    mid1 = max(nt - half - 1, mid0)
    for j in range(mid0):
        hi = min(j + half + 1, nt)
        d = cd[hi] - cd[0]
        out[j] = np.float32((cn[hi] - cn[0]) / d) if d > 0.0 else np.float32(0.0)
    h = np.uint64(half)
    one = np.uint64(1)
    for j in range(np.uint64(mid0), np.uint64(mid1)):  # unsigned: no wraparound, no gathers
        d = cd[j + h + one] - cd[j - h]
        out[j] = np.float32((cn[j + h + one] - cn[j - h]) / d) if d > 0.0 else np.float32(0.0)
    for j in range(mid1, nt):
        lo = max(j - half, 0)
        d = cd[nt] - cd[lo]
        out[j] = np.float32((cn[nt] - cn[lo]) / d) if d > 0.0 else np.float32(0.0)


@njit(cache=True, nogil=True)
def _window_ratio(num, den, half, out):
    """out[j] = sum num[j-h..j+h] / sum den[j-h..j+h], 0 where the denominator is 0.

    Prefix sums in float64 keep the running window exact enough at any panel length. Shared by
    the measures in :mod:`velspec.scan.measures`.
    """
    nt = num.shape[0]
    cn = np.zeros(nt + 1)
    cd = np.zeros(nt + 1)
    for j in range(nt):
        cn[j + 1] = cn[j] + num[j]
        cd[j + 1] = cd[j] + den[j]
    _ratio(cn, cd, half, out)


@njit(cache=True, nogil=True, inline="always")
def _finish_semblance(stack, energy, live, half, cn, cd, out):
    """Semblance of one trial from its per-t0 sums; live is the difference array of N."""
    n = 0
    sn = 0.0
    sd = 0.0
    cn[0] = 0.0
    cd[0] = 0.0
    for j in range(stack.shape[0]):
        n += live[j]
        if n >= 2:  # fewer than two live traces contribute nothing
            s = np.float64(stack[j])
            sn += s * s
            sd += np.float64(n) * energy[j]
        cn[j + 1] = sn
        cd[j + 1] = sd
    _ratio(cn, cd, half, out)


# ---------------------------------------------------------------------------------------------
# Kernels.

@njit(cache=True, nogil=True)
def _coprime_stride(n):
    """A stride near 0.618 n with gcd(stride, n) = 1, so r -> r * stride % n is a permutation."""
    s = max(int(0.618 * n), 1)
    while s > 1:
        a, b = s, n
        while b:
            a, b = b, a % b
        if a == 1:
            return s
        s -= 1
    return 1

@njit(cache=True, parallel=True, nogil=True, error_model="numpy")
def semblance(data, q_unit, trials, law, tau2, mute_c, tau_first, half):
    """Semblance panel of one gather.

    S(t0) = sum_W (sum_i a_i)^2 / sum_W (N sum_i a_i^2), with a_i the sample of trace i on the
    trial moveout, N the number of traces live at that t0 (after the stretch mute) and W the
    sliding window. Samples with fewer than two live traces contribute nothing.

    Parameters
    ----------
    data : float32 (ntr, ns)
        Traces, C-contiguous.
    q_unit : float32 (ntr,)
        x^2 / dt^2 for each trace; times the trial slowness squared it is the moveout term q.
    trials : float32 (ntrial, 2)
        (1 / v^2, eta) of each trial.
    law : int
        Moveout law (see :mod:`velspec.scan.moveout`).
    tau2 : float32 (nt,)
        (t0 / dt)^2 of each output sample, -1 where t0 <= 0.
    mute_c : float32
        (1 + stretch_limit)^2 - 1.
    tau_first : float32
        t_first / dt.
    half : int
        Half window length in samples.

    Returns
    -------
    float32 (ntrial, nt)

    References
    ----------
    Neidell, N. S., and Taner, M. T., 1971, Semblance and other coherency measures for
    multichannel data: Geophysics 36, 482-497.
    """
    ntr, ns = data.shape
    nt = tau2.shape[0]
    ntrial = trials.shape[0]
    out = np.empty((ntrial, nt), dtype=np.float32)
    last = np.float32(ns - 1)
    stride = _coprime_stride(ntrial)
    for r in prange(ntrial):
        # prange hands each thread a contiguous run of r; visiting trials in a strided order
        # gives every run a spread of velocities, so the work balances (the mute cost falls
        # with velocity). Each trial is computed by one thread alone: same bits for any count.
        m = (r * stride) % ntrial
        stack = np.zeros(nt, dtype=np.float32)
        energy = np.zeros(nt, dtype=np.float32)
        live = np.zeros(nt + 1, dtype=np.int32)
        pos = np.empty(nt, dtype=np.float32)
        cn = np.empty(nt + 1)
        cd = np.empty(nt + 1)
        s2 = trials[m, 0]
        eta = trials[m, 1]
        for i in range(ntr):
            q = q_unit[i] * s2
            if law == HYPERBOLIC:
                j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
                _stack_hyperbola(data[i], tau2, q, tau_first, stack, energy, j0, j1)
            else:
                j0, j1 = positions(law, tau2, q, eta, mute_c, tau_first, last, pos)
                _stack_positions(data[i], pos, stack, energy, j0, j1)
            if j1 > j0:
                live[j0] += 1
                live[j1] -= 1
        _finish_semblance(stack, energy, live, half, cn, cd, out[m])
    return out


@njit(cache=True, parallel=True, nogil=True)
def live_count(q_unit, trials, law, tau2, mute_c, tau_first, ns):
    """Number of live traces (inside the stretch mute and the trace) per trial and t0, int32."""
    ntr = q_unit.shape[0]
    nt = tau2.shape[0]
    out = np.zeros((trials.shape[0], nt), dtype=np.int32)
    last = np.float32(ns - 1)
    for m in prange(trials.shape[0]):
        pos = np.empty(nt, dtype=np.float32)
        live = np.zeros(nt + 1, dtype=np.int32)
        for i in range(ntr):
            q = q_unit[i] * trials[m, 0]
            if law == HYPERBOLIC:
                j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
            else:
                j0, j1 = positions(law, tau2, q, trials[m, 1], mute_c, tau_first, last, pos)
            if j1 > j0:
                live[j0] += 1
                live[j1] -= 1
        n = 0
        for j in range(nt):
            n += live[j]
            out[m, j] = n
    return out
