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

from typing import NamedTuple

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
    """Code generation of a block ``block(trace, src, stack, energy, j, n, q, tau_first)``.

    A block is ``groups`` registers of W consecutive t0 samples (group g covers j + g W ..
    j + g W + W - 1) sharing one test of whether the fast path applies.

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

    def at(self, group):
        """Output index of the first lane of ``group``, int64."""
        return self.j if group == 0 else self.b.add(self.j, I64(group * self.lanes))

    def source(self, group=0):
        """src[j + g W:j + g W + W]; in a tail the dead lanes copy lane 0, so they pass every
        test."""
        x = self.v.load(self.src, self.at(group), self.live)
        if self.masked:
            x = self.b.select(self.live, x, self.v.splat(self.b.extract_element(x, I32(0))))
        return x

    def hyperbola(self, x):
        """Positions sqrt(tau^2 + q) - tau_first from x = tau^2, as moveout.positions does."""
        v = self.v
        return self.b.fsub(self.from_zero(x), v.splat(self.tau_first))

    def from_zero(self, x):
        """sqrt(tau^2 + q): the hyperbola's position counted from time zero, in samples."""
        v = self.v
        return v.sqrt(self.b.fadd(x, v.splat(self.q)))

    def split(self, p):
        """(k, f, kb, idx, ok): k = min(trunc p, ns - 2), f = p - k, kb = k[0], idx = k - kb.

        ``ok`` (i1) says the block can be done with two loads and permutes: every idx in
        0..W-1 and, unmasked, both loads inside the trace (a tail's loads are masked).
        """
        k, f, kb, idx = self.indices(p)
        return k, f, kb, idx, self.check([kb], [idx])

    def indices(self, p):
        """(k, f, kb, idx) of :meth:`split`, without the test."""
        b, v = self.b, self.v
        k = b.fptosi(p, v.vi)
        if self.masked:
            # Unmasked blocks need no clamp: kb <= ns - W - 1 and idx <= W - 1 give k <= ns - 2.
            kmax = v.splat(b.sub(self.ns, I32(2)))
            k = b.select(b.icmp_signed("<", k, kmax), k, kmax)
        f = b.fsub(p, b.sitofp(k, v.vf))
        kb = b.extract_element(k, I32(0))
        return k, f, kb, b.sub(k, v.splat(kb))

    def check(self, kbs, idxs, rising=False):
        """The test of :meth:`split` for several groups at once (``rising``: the kb do not
        fall from group to group, so the last is the largest)."""
        b, v = self.b, self.v
        every = idxs[0]
        for idx in idxs[1:]:
            every = b.or_(every, idx)
        # 0 <= idx < W (W a power of two) is "no bit above log2 W", which also rejects idx < 0
        # (a law whose position falls with t0): one test of the whole register.
        ok = v.no_bits(every, ~(self.lanes - 1) & 0xFFFFFFFF)
        if not self.masked:
            top = kbs[-1]
            if not rising:
                for kb in kbs[:-1]:
                    top = b.select(b.icmp_signed(">", kb, top), kb, top)
            # 0 <= kb <= ns - W - 1 as one unsigned compare (the limit is loop-invariant).
            room = b.sub(self.ns, I32(self.lanes))
            limit = b.select(b.icmp_signed(">", room, I32(0)), room, I32(0))
            ok = b.and_(ok, b.icmp_unsigned("<", top, limit))
        return ok

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

    def accumulate(self, f, a0, a1, group=0):
        """a = fma(f, a1 - a0, a0); stack += a; energy = fma(a, a, energy), as the scalar path."""
        b, v = self.b, self.v
        j = self.at(group)
        a = v.fma(f, b.fsub(a1, a0), a0)
        v.store(b.fadd(v.load(self.stack, j, self.live), a), self.stack, j, self.live)
        v.store(v.fma(a, a, v.load(self.energy, j, self.live)), self.energy, j, self.live)

    def emit(self, hyperbola, groups=1, whole_delay=False):
        """The whole block; returns ``ok`` (False: nothing written, do it sample by sample).

        ``whole_delay``: tau_first is a whole number d >= 0 (the first sample at a whole number
        of samples after time zero, 0 included), so with P = sqrt(tau^2 + q) the position
        p = P - d is exact and floor(p) = floor(P) - d, p - floor(p) = P - floor(P): the same
        bits without the subtraction per sample (it is one of the block's dozen FP operations).
        """
        b = self.b
        parts = []
        for g in range(groups):
            x = self.source(g)
            if hyperbola and whole_delay:
                k, f, kb, idx = self.indices(self.from_zero(x))
                parts.append((k, f, b.sub(kb, b.fptosi(self.tau_first, I32)), idx))
            else:
                parts.append(self.indices(self.hyperbola(x) if hyperbola else x))
        ok = self.check([kb for _, _, kb, _ in parts], [idx for _, _, _, idx in parts], rising=hyperbola)
        with self.b.if_then(ok, likely=True):
            for g, (_, f, kb, idx) in enumerate(parts):
                a0, a1 = self.end_points(kb, idx)
                self.accumulate(f, a0, a1, g)
        return ok


def make_block(hyperbola: bool, masked: bool, lanes: int = LANES, permute: str = TARGET.permute,
               groups: int = 1, whole_delay: bool = False):
    """Intrinsic ``block(trace, src, stack, energy, j, n, q, tau_first) -> bool``.

    Adds the interpolated sample a and a^2 of ``trace`` at the positions of output samples
    j .. j + groups W - 1 (only the first n, 1 <= n <= W, when ``masked``, which needs
    ``groups`` = 1) to ``stack`` and ``energy``. ``whole_delay`` (hyperbola, unmasked): the
    caller guarantees tau_first is a whole number >= 0 (see :meth:`BlockCode.emit`).
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
            code = BlockCode(context, builder, signature, args, lanes, permute, masked)
            return code.emit(hyperbola, groups, whole_delay)

        return sig, codegen

    if masked and (groups != 1 or whole_delay):
        raise ValueError("a masked block is one group, and takes any delay")
    typer.__name__ = typer.__qualname__ = (
        f"block_{'hyperbola' if hyperbola else 'pos'}{'_whole' if whole_delay else ''}"
        f"_{'tail' if masked else 'full'}_{groups}x{lanes}_{permute}")
    return intrinsic(typer)


# ---------------------------------------------------------------------------------------------
# Per-trace drivers: full blocks, masked tails, sample-by-sample fallback.

@njit(cache=True, nogil=True, inline="always")
def accumulate(trace, p, stack, energy, j):
    """Scalar twin of a block lane: a = interp(trace, p); stack[j] += a; energy[j] += a^2 (fused)."""
    a = interp(trace, p)
    stack[j] += a
    energy[j] = fma32(a, a, energy[j])


class Blocks(NamedTuple):
    """The block intrinsics of one width: two groups, one group, a masked tail; for the
    hyperbola (positions computed in the block) and for positions read from an array."""

    pair_hyperbola: object
    full_hyperbola: object
    tail_hyperbola: object
    pair_whole_delay: object
    full_whole_delay: object
    pair_positions: object
    full_positions: object
    tail_positions: object
    lanes: int


def make_blocks(lanes: int = LANES, permute: str = TARGET.permute) -> Blocks:
    """The block intrinsics of :class:`Blocks` at one width and permute."""
    return Blocks(make_block(True, False, lanes, permute, groups=2), make_block(True, False, lanes, permute),
                  make_block(True, True, lanes, permute),
                  make_block(True, False, lanes, permute, groups=2, whole_delay=True),
                  make_block(True, False, lanes, permute, whole_delay=True),
                  make_block(False, False, lanes, permute, groups=2),
                  make_block(False, False, lanes, permute), make_block(False, True, lanes, permute), lanes)


def make_stackers(blocks: Blocks):
    """The per-trace drivers around the block intrinsics of one width.

    Returns (stack_hyperbola, stack_positions, stack_hyperbola_scalar, stack_positions_scalar),
    numba functions that add one trace to ``stack`` and ``energy`` over its live span [j0, j1):

    - ``stack_hyperbola(trace, tau2, q, tau_first, stack, energy, j0, j1)``;
    - ``stack_positions(trace, pos, stack, energy, j0, j1)``;

    and the same two sample by sample (:func:`accumulate`, the fallback of the block drivers):
    the scalar path every block path must match bit for bit. The drivers run two-group blocks
    (one test for 2 W samples), then at most one one-group block and one masked tail; a block
    that fails its test is redone with one-group blocks, and those sample by sample.
    """
    lanes = blocks.lanes
    pair_h, full_h, tail_h = blocks.pair_hyperbola, blocks.full_hyperbola, blocks.tail_hyperbola
    pair_w, full_w = blocks.pair_whole_delay, blocks.full_whole_delay
    pair_p, full_p, tail_p = blocks.pair_positions, blocks.full_positions, blocks.tail_positions

    @njit(cache=True, nogil=True, inline="always")
    def hyperbola_samples(trace, tau2, q, tau_first, stack, energy, j, n):
        for jj in range(np.uint64(j), np.uint64(j + n)):
            accumulate(trace, np.float32(np.sqrt(tau2[jj] + q) - tau_first), stack, energy, jj)

    @njit(cache=True, nogil=True, inline="always")
    def stack_hyperbola(trace, tau2, q, tau_first, stack, energy, j0, j1):
        # The first sample at a whole number of samples >= 0 after time zero (the usual case)
        # spares the blocks a subtraction per sample; same bits (BlockCode.emit).
        whole = tau_first >= 0 and tau_first == np.floor(tau_first) and tau_first < 2.0**24
        j = j0
        while j + 2 * lanes <= j1:
            if whole:
                done = pair_w(trace, tau2, stack, energy, j, lanes, q, tau_first)
            else:
                done = pair_h(trace, tau2, stack, energy, j, lanes, q, tau_first)
            if not done:
                for g in range(2):
                    jg = j + g * lanes
                    if not full_h(trace, tau2, stack, energy, jg, lanes, q, tau_first):
                        hyperbola_samples(trace, tau2, q, tau_first, stack, energy, jg, lanes)
            j += 2 * lanes
        if j + lanes <= j1:
            if whole:
                done = full_w(trace, tau2, stack, energy, j, lanes, q, tau_first)
            else:
                done = full_h(trace, tau2, stack, energy, j, lanes, q, tau_first)
            if not done:
                hyperbola_samples(trace, tau2, q, tau_first, stack, energy, j, lanes)
            j += lanes
        if j < j1:
            if not tail_h(trace, tau2, stack, energy, j, j1 - j, q, tau_first):
                hyperbola_samples(trace, tau2, q, tau_first, stack, energy, j, j1 - j)

    @njit(cache=True, nogil=True, inline="always")
    def positions_samples(trace, pos, stack, energy, j, n):
        for jj in range(np.uint64(j), np.uint64(j + n)):
            accumulate(trace, pos[jj], stack, energy, jj)

    @njit(cache=True, nogil=True, inline="always")
    def stack_positions(trace, pos, stack, energy, j0, j1):
        zero = np.float32(0.0)
        j = j0
        while j + 2 * lanes <= j1:
            if not pair_p(trace, pos, stack, energy, j, lanes, zero, zero):
                for g in range(2):
                    jg = j + g * lanes
                    if not full_p(trace, pos, stack, energy, jg, lanes, zero, zero):
                        positions_samples(trace, pos, stack, energy, jg, lanes)
            j += 2 * lanes
        if j + lanes <= j1:
            if not full_p(trace, pos, stack, energy, j, lanes, zero, zero):
                positions_samples(trace, pos, stack, energy, j, lanes)
            j += lanes
        if j < j1:
            if not tail_p(trace, pos, stack, energy, j, j1 - j, zero, zero):
                positions_samples(trace, pos, stack, energy, j, j1 - j)

    @njit(cache=True, nogil=True, inline="always")
    def stack_hyperbola_scalar(trace, tau2, q, tau_first, stack, energy, j0, j1):
        for j in range(np.uint64(max(j0, 0)), np.uint64(max(j1, 0))):
            accumulate(trace, np.float32(np.sqrt(tau2[j] + q) - tau_first), stack, energy, j)

    @njit(cache=True, nogil=True, inline="always")
    def stack_positions_scalar(trace, pos, stack, energy, j0, j1):
        for j in range(np.uint64(max(j0, 0)), np.uint64(max(j1, 0))):
            accumulate(trace, pos[j], stack, energy, j)

    return stack_hyperbola, stack_positions, stack_hyperbola_scalar, stack_positions_scalar


BLOCKS = make_blocks()
stack_hyperbola, stack_positions, stack_hyperbola_scalar, stack_positions_scalar = make_stackers(BLOCKS)


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
