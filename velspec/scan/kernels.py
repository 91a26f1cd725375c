"""The semblance kernel: parallel over trial moveouts, a block of t0 samples at a time.

Skeleton (shared with the kernels of :mod:`velspec.scan.measures`):

    for each trial (velocity, eta)            # each trial is computed by one thread from start
        for each trace                        # to end, so the bits do not depend on the thread
            [j0, j1) = live span of the trace # count
            add a and a^2 of the trace on the trial moveout over the live span
        sum those over the sliding window and form the measure

Kernels know nothing of files, options or progress bars; they take float32 arrays and return
a float32 panel of shape (ntrial, nt).

How the block works, at any vector width W
------------------------------------------
The inner loop takes W consecutive t0 samples of one trace at a time: W = 16 with AVX-512, 8
with AVX2, 4 on NEON or older x86 (:func:`velspec.scan.primitives.vector_target`, which
follows the CPU numba compiles for). The moveout position p(t0) = sqrt(tau^2 + q) - tau_first
rises by at most one sample per t0 sample (dp/dtau = tau / sqrt(tau^2 + q) <= 1), so with
k = floor(p) the offsets idx[l] = k[l] - k[0] of the block's lanes satisfy 0 <= idx[l] <= l < W.
Two plain loads of W samples, from k[0] and from k[0] + 1, therefore hold both interpolation end
points of every lane: a0[l] = trace[k[0] + idx[l]] is lane idx[l] of the first load, a1[l] =
trace[k[l] + 1] the same lane of the second. One in-register permute by idx per end point
replaces a W-lane gather (27 cycles for 16 lanes on AMD Zen 5; see benchmarks/bounds.py): vpermps
on AVX2 and AVX-512, tbl on NEON, vpermilps on AVX (:meth:`VectorIR.permute`). The last block
of a span is masked; a block whose offsets fall outside 0..W-1 (float32 rounding at near-zero
offsets, or another law) or whose loads would pass the trace end is done sample by sample.

The same bits on every path: a block does, lane by lane, the float32 operations of the scalar
code (:func:`velspec.scan.moveout.positions`, then :func:`velspec.scan.primitives.interp` and
the energy as explicit fused multiply-adds, :func:`velspec.scan.primitives.fma32`), traces are
summed in order and each trial by one thread; so the panel is identical for any width, any
x86-64 or ARM CPU and any thread count. It differs from the unfused NumPy reference
(:func:`velspec.scan.reference.semblance_reference`) by float32 rounding only.

The block is a numba intrinsic (LLVM vector IR) because numba has no vector types and the loop
vectoriser turns the table look-ups into gathers.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange, types
from numba.core import cgutils
from numba.extending import intrinsic

from .moveout import HYPERBOLIC, hyperbolic_span, positions
from .primitives import I32, I64, VectorIR, VectorTarget, fma32, interp, prefix_ratio, vector_target

TARGET: VectorTarget = vector_target()
LANES = TARGET.lanes  # t0 samples per block


# ---------------------------------------------------------------------------------------------
# The block, as LLVM IR.

def _is_vector_row(ty):
    return isinstance(ty, types.Array) and ty.ndim == 1 and ty.layout == "C" and ty.dtype == types.float32


def block_typer(trace, src, stack, energy, j, n, q, tau_first):
    """numba signature of a block intrinsic, or None (a typing error) for other arguments."""
    if not all(_is_vector_row(a) for a in (trace, src, stack, energy)):
        return None  # rows must be C-contiguous float32 vectors
    if not all(isinstance(a, types.Integer) for a in (j, n)):
        return None
    if not all(isinstance(a, types.Float) for a in (q, tau_first)):
        return None
    return types.boolean(trace, src, stack, energy, j, n, q, tau_first)


class BlockCode:
    """Code generation of one block ``block(trace, src, stack, energy, j, n, q, tau_first)``.

    The stages of :func:`make_block`, public so that benchmarks/bounds.py can time the block
    with parts left out. Create it inside an intrinsic's ``codegen``.

    Parameters
    ----------
    context, builder, signature, args
        What numba passes to ``codegen``.
    lanes, permute
        Vector width and permute (see :class:`velspec.scan.primitives.VectorTarget`).
    masked
        A tail block: only the first ``n`` lanes are live.
    """

    def __init__(self, context, builder, signature, args, lanes, permute, masked):
        self.b = builder
        self.v = VectorIR(builder, lanes, permute)
        self.lanes = lanes
        self.masked = masked
        at = signature.args
        rows = [cgutils.create_struct_proxy(at[k])(context, builder, value=args[k]) for k in range(4)]
        self.trace, self.src, self.stack, self.energy = (r.data for r in rows)
        self.ns = builder.trunc(cgutils.unpack_tuple(builder, rows[0].shape)[0], I32)
        self.j = context.cast(builder, args[4], at[4], types.int64)
        self.n = builder.trunc(context.cast(builder, args[5], at[5], types.int64), I32)
        self.q = context.cast(builder, args[6], at[6], types.float32)
        self.tau_first = context.cast(builder, args[7], at[7], types.float32)
        self.live = self.v.lanes_below(self.n) if masked else None

    def source(self):
        """src[j:j + W]; in a tail the dead lanes copy lane 0, so they pass every test."""
        x = self.v.load(self.src, self.j, self.live)
        if self.masked:
            x = self.b.select(self.live, x, self.v.splat(self.b.extract_element(x, I32(0))))
        return x

    def hyperbola(self, x):
        """Positions sqrt(tau^2 + q) - tau_first from x = tau^2, as moveout.positions does."""
        v = self.v
        return self.b.fsub(v.sqrt(self.b.fadd(x, v.splat(self.q))), v.splat(self.tau_first))

    def split(self, p):
        """(k, f, kb, idx, ok): k = min(trunc p, ns - 2), f = p - k, kb = k[0], idx = k - kb.

        ``ok`` (i1) says the block can be done with two loads and permutes: every idx in
        0..W-1 and, unmasked, both loads inside the trace (a tail's loads are masked).
        """
        b, v = self.b, self.v
        k = b.fptosi(p, v.vi)
        if self.masked:
            # Unmasked blocks need no clamp: kb <= ns - W - 1 and idx <= W - 1 give k <= ns - 2.
            kmax = v.splat(b.sub(self.ns, I32(2)))
            k = b.select(b.icmp_signed("<", k, kmax), k, kmax)
        f = b.fsub(p, b.sitofp(k, v.vf))
        kb = b.extract_element(k, I32(0))
        idx = b.sub(k, v.splat(kb))
        # 0 <= idx < W (W a power of two) is "no bit above log2 W", which also rejects idx < 0
        # (a law whose position falls with t0): one test of the whole register.
        ok = v.no_bits(idx, ~(self.lanes - 1) & 0xFFFFFFFF)
        if not self.masked:
            ok = b.and_(ok, b.icmp_signed("<=", kb, b.sub(self.ns, I32(self.lanes + 1))))
        return k, f, kb, idx, ok

    def tables(self, kb):
        """The two loads: trace[kb:kb + W] and trace[kb + 1:kb + 1 + W] (masked at the end)."""
        b, v = self.b, self.v
        kb64 = b.sext(kb, I64)
        m0 = m1 = None
        if self.masked:
            room = b.sub(self.ns, kb)
            m0 = v.lanes_below(room)
            m1 = v.lanes_below(b.sub(room, I32(1)))
        return v.load(self.trace, kb64, m0), v.load(self.trace, b.add(kb64, I64(1)), m1)

    def end_points(self, kb, idx):
        """a0 = trace[k], a1 = trace[k + 1] of every lane: two loads, two permutes."""
        t0, t1 = self.tables(kb)
        return self.v.permute(t0, idx), self.v.permute(t1, idx)

    def accumulate(self, f, a0, a1):
        """a = fma(f, a1 - a0, a0); stack += a; energy = fma(a, a, energy), as the scalar path."""
        b, v = self.b, self.v
        a = v.fma(f, b.fsub(a1, a0), a0)
        v.store(b.fadd(v.load(self.stack, self.j, self.live), a), self.stack, self.j, self.live)
        v.store(v.fma(a, a, v.load(self.energy, self.j, self.live)), self.energy, self.j, self.live)

    def emit(self, hyperbola):
        """The whole block; returns ``ok`` (False: nothing written, do it sample by sample)."""
        x = self.source()
        p = self.hyperbola(x) if hyperbola else x
        _, f, kb, idx, ok = self.split(p)
        with self.b.if_then(ok, likely=True):
            a0, a1 = self.end_points(kb, idx)
            self.accumulate(f, a0, a1)
        return ok


def make_block(hyperbola: bool, masked: bool, lanes: int = LANES, permute: str = TARGET.permute):
    """Intrinsic ``block(trace, src, stack, energy, j, n, q, tau_first) -> bool``.

    Adds the interpolated sample a and a^2 of ``trace`` at the positions of output samples
    j .. j + W - 1 (only the first n, 1 <= n <= W, when ``masked``) to ``stack`` and ``energy``.
    With ``hyperbola`` the positions are sqrt(src[j] + q) - tau_first (src = tau2, the float32
    operations of :func:`velspec.scan.moveout.positions`); otherwise they are read from src
    (= pos) and q, tau_first are ignored. Returns False, having written nothing, when the
    block cannot be done with two loads and permutes (see :meth:`BlockCode.split`); the caller
    then does it sample by sample. ``lanes`` and ``permute`` must suit the CPU numba compiles
    for (the defaults do).
    """

    def typer(typingctx, trace, src, stack, energy, j, n, q, tau_first):
        sig = block_typer(trace, src, stack, energy, j, n, q, tau_first)
        if sig is None:
            return None

        def codegen(context, builder, signature, args):
            return BlockCode(context, builder, signature, args, lanes, permute, masked).emit(hyperbola)

        return sig, codegen

    typer.__name__ = typer.__qualname__ = (
        f"block_{'hyperbola' if hyperbola else 'pos'}_{'tail' if masked else 'full'}_{lanes}_{permute}")
    return intrinsic(typer)


# ---------------------------------------------------------------------------------------------
# Per-trace drivers: full blocks, masked tails, sample-by-sample fallback.

@njit(cache=True, nogil=True, inline="always")
def accumulate(trace, p, stack, energy, j):
    """Scalar twin of a block lane: a = interp(trace, p); stack[j] += a; energy[j] += a^2 (fused)."""
    a = interp(trace, p)
    stack[j] += a
    energy[j] = fma32(a, a, energy[j])


def make_stackers(full_hyperbola, tail_hyperbola, full_positions, tail_positions, lanes: int = LANES):
    """The per-trace drivers around four block intrinsics of width ``lanes``.

    Returns (stack_hyperbola, stack_positions, stack_hyperbola_scalar, stack_positions_scalar),
    numba functions that add one trace to ``stack`` and ``energy`` over its live span [j0, j1):

    - ``stack_hyperbola(trace, tau2, q, tau_first, stack, energy, j0, j1)``;
    - ``stack_positions(trace, pos, stack, energy, j0, j1)``;

    and the same two sample by sample (:func:`accumulate`, the fallback of the block drivers):
    the scalar path every block path must match bit for bit.
    """

    @njit(cache=True, nogil=True, inline="always")
    def stack_hyperbola(trace, tau2, q, tau_first, stack, energy, j0, j1):
        j = j0
        # Two blocks per turn: half the loop branches, and the core sees more independent work.
        while j + 2 * lanes <= j1 and full_hyperbola(trace, tau2, stack, energy, j, lanes, q, tau_first):
            j += lanes
            if not full_hyperbola(trace, tau2, stack, energy, j, lanes, q, tau_first):
                break
            j += lanes
        while j + lanes <= j1 and full_hyperbola(trace, tau2, stack, energy, j, lanes, q, tau_first):
            j += lanes
        while j < j1:
            n = min(lanes, j1 - j)
            if not tail_hyperbola(trace, tau2, stack, energy, j, n, q, tau_first):
                for jj in range(np.uint64(j), np.uint64(j + n)):
                    accumulate(trace, np.float32(np.sqrt(tau2[jj] + q) - tau_first), stack, energy, jj)
            j += lanes

    @njit(cache=True, nogil=True, inline="always")
    def stack_positions(trace, pos, stack, energy, j0, j1):
        zero = np.float32(0.0)
        j = j0
        while j + 2 * lanes <= j1 and full_positions(trace, pos, stack, energy, j, lanes, zero, zero):
            j += lanes
            if not full_positions(trace, pos, stack, energy, j, lanes, zero, zero):
                break
            j += lanes
        while j + lanes <= j1 and full_positions(trace, pos, stack, energy, j, lanes, zero, zero):
            j += lanes
        while j < j1:
            n = min(lanes, j1 - j)
            if not tail_positions(trace, pos, stack, energy, j, n, zero, zero):
                for jj in range(np.uint64(j), np.uint64(j + n)):
                    accumulate(trace, pos[jj], stack, energy, jj)
            j += lanes

    @njit(cache=True, nogil=True, inline="always")
    def stack_hyperbola_scalar(trace, tau2, q, tau_first, stack, energy, j0, j1):
        for j in range(np.uint64(max(j0, 0)), np.uint64(max(j1, 0))):
            accumulate(trace, np.float32(np.sqrt(tau2[j] + q) - tau_first), stack, energy, j)

    @njit(cache=True, nogil=True, inline="always")
    def stack_positions_scalar(trace, pos, stack, energy, j0, j1):
        for j in range(np.uint64(max(j0, 0)), np.uint64(max(j1, 0))):
            accumulate(trace, pos[j], stack, energy, j)

    return stack_hyperbola, stack_positions, stack_hyperbola_scalar, stack_positions_scalar


hyperbola_block = make_block(True, False)
hyperbola_tail = make_block(True, True)
positions_block = make_block(False, False)
positions_tail = make_block(False, True)
stack_hyperbola, stack_positions, stack_hyperbola_scalar, stack_positions_scalar = make_stackers(
    hyperbola_block, hyperbola_tail, positions_block, positions_tail)


# ---------------------------------------------------------------------------------------------
# Kernels.

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
    prefix_ratio(cn, cd, half, out)


@njit(cache=True, nogil=True)
def coprime_stride(n):
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
def semblance_panel(data, q_unit, trials, law, tau2, mute_c, tau_first, half):
    """The numba kernel of :func:`semblance` (same arguments)."""
    ntr, ns = data.shape
    nt = tau2.shape[0]
    ntrial = trials.shape[0]
    out = np.empty((ntrial, nt), dtype=np.float32)
    last = np.float32(ns - 1)
    stride = coprime_stride(ntrial)
    # Up to 4 trials share one set of work arrays; at least 32 chunks, so threads stay balanced.
    per = max(1, min(4, ntrial // 32))
    nchunk = (ntrial + per - 1) // per
    for c in prange(nchunk):
        # Work arrays once per chunk of trials, not per trial (a fifth of the fixed cost per
        # trial of a small gather). prange hands each thread a contiguous run of chunks; visiting trials
        # in a strided order gives every run a spread of velocities, so the work balances
        # (the mute cost falls with velocity). Each trial is computed by one thread alone,
        # start to end: the same bits for any thread count and any chunking.
        stack = np.empty(nt, dtype=np.float32)
        energy = np.empty(nt, dtype=np.float32)
        live = np.empty(nt + 1, dtype=np.int32)
        pos = np.empty(nt, dtype=np.float32)
        cn = np.empty(nt + 1)
        cd = np.empty(nt + 1)
        for r in range(c * per, min((c + 1) * per, ntrial)):
            m = (r * stride) % ntrial
            stack[:] = 0.0
            energy[:] = 0.0
            live[:] = 0
            s2 = trials[m, 0]
            eta = trials[m, 1]
            for i in range(ntr):
                q = q_unit[i] * s2
                if law == HYPERBOLIC:
                    j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
                    stack_hyperbola(data[i], tau2, q, tau_first, stack, energy, j0, j1)
                else:
                    j0, j1 = positions(law, tau2, q, eta, mute_c, tau_first, last, pos)
                    stack_positions(data[i], pos, stack, energy, j0, j1)
                if j1 > j0:
                    live[j0] += 1
                    live[j1] -= 1
            _finish_semblance(stack, energy, live, half, cn, cd, out[m])
    return out


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
    return semblance_panel(data, q_unit, trials, law, tau2, mute_c, tau_first, half)


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
