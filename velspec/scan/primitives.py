"""Building blocks shared by the coherence kernels and the benchmarks.

Scalar numba primitives (one rounding where the definition has a multiply-add):

- :func:`fma32` - a * b + c rounded once, float32, by ``llvm.fma`` on every target;
- :func:`interp` - linear interpolation of a trace at a fractional sample position;
- :func:`window_ratio` and :func:`prefix_ratio` - sliding-window sum of a numerator over the
  same window sum of a denominator.

Vector code generation for the block kernels (LLVM IR written through llvmlite):

- :func:`vector_target` - the CPU numba compiles for, its vector width and permute;
- :class:`VectorIR` - loads, stores, square root, FMA and the in-register permute at that width.

Why explicit FMA: without fast-math numba leaves a * b + c as two roundings, but whether a
compiler fuses them is a choice that differs between targets. Calling ``llvm.fma`` in the
scalar and the vector code makes the rounding part of the definition, so every path (AVX-512,
AVX2, NEON, scalar) gives the same bits.
"""

from __future__ import annotations

from dataclasses import dataclass

import llvmlite.binding as llvm_binding
import numba
import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.core.codegen import get_host_cpu_features
from numba.extending import intrinsic

F32 = ir.FloatType()
I1, I8, I32, I64 = ir.IntType(1), ir.IntType(8), ir.IntType(32), ir.IntType(64)


# ---------------------------------------------------------------------------------------------
# Scalar primitives.

@intrinsic
def fma32(typingctx, a, b, c):
    """a * b + c rounded once (float32): the scalar twin of the vector FMA of :class:`VectorIR`."""
    if not all(x == types.float32 for x in (a, b, c)):
        return None

    def codegen(context, builder, signature, args):
        fn = cgutils.get_or_insert_function(builder.module, ir.FunctionType(F32, [F32] * 3), "llvm.fma.f32")
        return builder.call(fn, list(args))

    return types.float32(a, b, c), codegen


@njit(cache=True, nogil=True, inline="always")
def interp(trace, p):
    """Trace value at fractional sample position ``p`` by linear interpolation, float32.

    ``0 <= p <= len(trace) - 1`` (guaranteed by :func:`velspec.scan.moveout.positions`), so
    truncation is floor; the last position is read between samples ns - 2 and ns - 1. The value
    is fma(f, a1 - a0, a0) with f = p - k, the same float32 operations as the vector block of
    :mod:`velspec.scan.kernels`.
    """
    k = min(np.int32(p), np.int32(trace.shape[0] - 2))
    f = p - np.float32(k)
    ku = np.uint64(k)
    a0 = trace[ku]
    return fma32(f, trace[ku + np.uint64(1)] - a0, a0)


@njit(cache=True, nogil=True, error_model="numpy")
def prefix_ratio(cn, cd, half, out):
    """out[j] = window sum of num / window sum of den, from prefix sums cn, cd of shape (nt + 1,).

    The window is j - half .. j + half, clipped at the ends; 0 where its denominator is not
    positive.
    """
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
def window_ratio(num, den, half, out):
    """out[j] = sum num[j-h..j+h] / sum den[j-h..j+h], 0 where the denominator is 0.

    Parameters
    ----------
    num, den : float64 (nt,)
        Per-sample numerator and denominator.
    half : int
        Half window length in samples (the window is 2 half + 1 samples, clipped at the ends).
    out : float32 (nt,)
        Output.

    Prefix sums in float64 keep the running window exact enough at any panel length.
    """
    nt = num.shape[0]
    cn = np.zeros(nt + 1)
    cd = np.zeros(nt + 1)
    for j in range(nt):
        cn[j + 1] = cn[j] + num[j]
        cd[j + 1] = cd[j] + den[j]
    prefix_ratio(cn, cd, half, out)


# ---------------------------------------------------------------------------------------------
# The compilation target.

@dataclass(frozen=True)
class VectorTarget:
    """What the block kernels are generated for.

    cpu, features : the LLVM CPU name and feature string numba compiles for;
    arch : "x86_64", "aarch64", ...;
    lanes : float32 lanes per block (16: AVX-512, 8: AVX2, 4: SSE/AVX or NEON);
    permute : how one register's lanes are picked by index ("avx512" vpermps zmm, "avx2"
        vpermps ymm, "avx" vpermilps xmm, "neon" tbl, "generic" LLVM's own lowering).
    """

    cpu: str
    features: str
    arch: str
    lanes: int
    permute: str

    @property
    def path(self) -> str:
        """Short name of the kernel path, e.g. ``"16-lane avx512"``."""
        return f"{self.lanes}-lane {self.permute}"


_PROBE_IR = """
define void @probe(ptr %a, ptr %b) {
  %x = load <16 x float>, ptr %a, align 4
  %y = fadd <16 x float> %x, %x
  store <16 x float> %y, ptr %a, align 4
  %i = load <8 x i32>, ptr %b, align 4
  %j = mul <8 x i32> %i, %i
  store <8 x i32> %j, ptr %b, align 4
  ret void
}
"""


def _probe_x86(cpu: str) -> set[str]:
    # An empty feature string means "the CPU's own defaults", which only LLVM knows: compile a
    # 512-bit float add and a 256-bit integer multiply for that CPU and see which registers it uses.
    llvm_binding.initialize_native_asmprinter()
    mod = llvm_binding.parse_assembly(_PROBE_IR)
    tm = llvm_binding.Target.from_default_triple().create_target_machine(cpu=cpu, features="")
    lines = tm.emit_assembly(mod).splitlines()
    found = set()
    if any("zmm" in ln for ln in lines):
        found.add("avx512f")
    if any("vpmulld" in ln and "ymm" in ln for ln in lines):
        found.add("avx2")
    if any("vaddps" in ln for ln in lines):      # VEX encoding: AVX at least
        found.add("avx")
    return found


def vector_target(cpu: str | None = None, features: str | None = None) -> VectorTarget:
    """The target numba compiles for, and the block width and permute the kernels use there.

    Follows numba's own choice: ``NUMBA_CPU_NAME`` / ``NUMBA_CPU_FEATURES`` when set, else the
    host CPU and its features (so ``NUMBA_CPU_NAME=haswell NUMBA_CPU_FEATURES=""`` gives the
    8-lane AVX2 path on any x86-64 machine). ``cpu`` and ``features`` override both.
    """
    if cpu is None:
        cpu = numba.config.CPU_NAME or llvm_binding.get_host_cpu_name()
    if features is None:
        features = numba.config.CPU_FEATURES
        if features is None:
            features = get_host_cpu_features()
    arch = llvm_binding.get_process_triple().split("-")[0]
    if arch in ("aarch64", "arm64"):
        return VectorTarget(cpu, features, "aarch64", 4, "neon")
    if arch != "x86_64":
        return VectorTarget(cpu, features, arch, 4, "generic")
    on = {f[1:] for f in features.split(",") if f.startswith("+")}
    if not features.strip():
        on = _probe_x86(cpu)
    if "avx512f" in on:
        return VectorTarget(cpu, features, arch, 16, "avx512")
    if "avx2" in on:
        return VectorTarget(cpu, features, arch, 8, "avx2")
    if "avx" in on:
        return VectorTarget(cpu, features, arch, 4, "avx")
    return VectorTarget(cpu, features, arch, 4, "generic")


# ---------------------------------------------------------------------------------------------
# Vector IR at one width.

class VectorIR:
    """LLVM vector operations on ``lanes`` float32 / int32 lanes, for intrinsic code generation.

    Parameters
    ----------
    builder : llvmlite.ir.IRBuilder
        The builder of the intrinsic being generated.
    lanes : int
        Vector width in float32 lanes (4, 8 or 16).
    permute : str
        Permute of :class:`VectorTarget` (``"avx512"``, ``"avx2"``, ``"avx"``, ``"neon"`` or
        ``"generic"``); must be one the compilation target has.
    """

    def __init__(self, builder, lanes: int, permute: str = "generic"):
        if permute == "avx512" and lanes != 16 or permute == "avx2" and lanes != 8 \
                or permute in ("avx", "neon") and lanes != 4:
            raise ValueError(f"permute {permute!r} does not work on {lanes} lanes")
        self.b = builder
        self.lanes = lanes
        self.permute_kind = permute
        self.vf = ir.VectorType(F32, lanes)
        self.vi = ir.VectorType(I32, lanes)
        self.vb = ir.VectorType(I1, lanes)
        self.iota = ir.Constant(self.vi, list(range(lanes)))

    def _fn(self, name, ret, params):
        return cgutils.get_or_insert_function(self.b.module, ir.FunctionType(ret, params), name)

    def splat(self, x):
        """Every lane = the scalar ``x`` (float32 or int32)."""
        vty = self.vf if x.type == F32 else self.vi
        v = self.b.insert_element(ir.Constant(vty, ir.Undefined), x, ir.Constant(I32, 0))
        return self.b.shuffle_vector(v, ir.Constant(vty, ir.Undefined), ir.Constant(self.vi, [0] * self.lanes))

    def int_const(self, x):
        return ir.Constant(self.vi, [x] * self.lanes)

    def float_const(self, x):
        return ir.Constant(self.vf, [x] * self.lanes)

    def lanes_below(self, n):
        """Mask of the lanes l < n (n an int32 scalar)."""
        return self.b.icmp_signed("<", self.iota, self.splat(n))

    def all_of(self, mask):
        """True (i1) when every lane of the mask is set."""
        bits = ir.IntType(self.lanes)
        return self.b.icmp_unsigned("==", self.b.bitcast(mask, bits), ir.Constant(bits, (1 << self.lanes) - 1))

    def no_bits(self, v, bits):
        """True (i1) when no lane of the int32 vector ``v`` has any of ``bits`` set.

        One test of the whole register where the target has it (vptest on AVX and AVX2, a
        compare into a mask register on AVX-512, an OR reduction elsewhere) rather than a
        compare per lane, a movemask and a test.
        """
        b = self.b
        kind = self.permute_kind
        if kind in ("avx2", "avx"):
            q = ir.VectorType(I64, self.lanes // 2)
            name = "llvm.x86.avx.ptestz.256" if self.lanes == 8 else "llvm.x86.sse41.ptestz"
            z = b.call(self._fn(name, I32, [q, q]), [b.bitcast(v, q), b.bitcast(self.int_const(bits), q)])
            return b.icmp_unsigned("!=", z, I32(0))
        masked = b.and_(v, self.int_const(bits))
        if kind == "avx512":   # LLVM makes this one compare into a mask register and a test
            return self.all_of(b.icmp_unsigned("==", masked, self.int_const(0)))
        fn = self._fn(f"llvm.vector.reduce.or.v{self.lanes}i32", I32, [self.vi])
        return b.icmp_unsigned("==", b.call(fn, [masked]), I32(0))

    def _ptr(self, base, offset):
        return self.b.bitcast(self.b.gep(base, [offset]), self.vf.as_pointer())

    def load(self, base, offset, mask=None):
        """``lanes`` floats from base[offset:]; with a mask only its lanes are read (others 0)."""
        if mask is None:
            return self.b.load(self._ptr(base, offset), align=4)
        fn = self._fn(f"llvm.masked.load.v{self.lanes}f32.p0", self.vf,
                      [self.vf.as_pointer(), I32, self.vb, self.vf])
        return self.b.call(fn, [self._ptr(base, offset), ir.Constant(I32, 4), mask, self.float_const(0.0)])

    def store(self, v, base, offset, mask=None):
        """Store to base[offset:]; with a mask only its lanes are written."""
        if mask is None:
            self.b.store(v, self._ptr(base, offset), align=4)
            return
        fn = self._fn(f"llvm.masked.store.v{self.lanes}f32.p0", ir.VoidType(),
                      [self.vf, self.vf.as_pointer(), I32, self.vb])
        self.b.call(fn, [v, self._ptr(base, offset), ir.Constant(I32, 4), mask])

    def sqrt(self, v):
        """Correctly rounded square root of each lane (as the scalar sqrtf)."""
        return self.b.call(self._fn(f"llvm.sqrt.v{self.lanes}f32", self.vf, [self.vf]), [v])

    def fma(self, a, b, c):
        """a * b + c rounded once in each lane (as :func:`fma32`)."""
        return self.b.call(self._fn(f"llvm.fma.v{self.lanes}f32", self.vf, [self.vf] * 3), [a, b, c])

    def permute(self, table, idx):
        """Lane l = table[idx[l]], idx[l] in 0 .. lanes - 1: one register, picked by index."""
        b = self.b
        kind = self.permute_kind
        if kind == "avx512":
            return b.call(self._fn("llvm.x86.avx512.permvar.sf.512", self.vf, [self.vf, self.vi]), [table, idx])
        if kind == "avx2":
            return b.call(self._fn("llvm.x86.avx2.permps", self.vf, [self.vf, self.vi]), [table, idx])
        if kind == "avx":
            return b.call(self._fn("llvm.x86.avx.vpermilvar.ps", self.vf, [self.vf, self.vi]), [table, idx])
        if kind == "neon":
            # tbl picks bytes: float lane l takes bytes 4 idx[l] .. 4 idx[l] + 3 (little endian).
            v16 = ir.VectorType(I8, 16)
            byte_idx = b.add(b.mul(idx, self.int_const(0x04040404)), self.int_const(0x03020100))
            fn = self._fn("llvm.aarch64.neon.tbl1.v16i8", v16, [v16, v16])
            picked = b.call(fn, [b.bitcast(table, v16), b.bitcast(byte_idx, v16)])
            return b.bitcast(picked, self.vf)
        out = ir.Constant(self.vf, ir.Undefined)
        for lane in range(self.lanes):
            c = ir.Constant(I32, lane)
            out = b.insert_element(out, b.extract_element(table, b.extract_element(idx, c)), c)
        return out
