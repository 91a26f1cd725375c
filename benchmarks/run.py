#!/usr/bin/env python
"""velspec benchmarks, one command: semblance kernel, thread scaling, ``velspec run`` on a line.

    python benchmarks/run.py                 # full, about 5 minutes on 2 cores
    python benchmarks/run.py --quick         # shorter version, about a minute
    python benchmarks/run.py --cpu haswell   # compiled for an AVX2-only CPU (8-lane path)

Writes ``benchmarks/results/<mode>-<UTC time>.json`` (every figure, the machine, its vector
extensions and the kernel path taken) and the same figures as a Markdown table in a ``.md``
beside it, printed at the end too; git ignores new results until a README cites them. See
README.md here for what each figure means. Speed is only ever measured here, never asserted in a
test.
"""

from __future__ import annotations

import argparse
import os
import sys

# OpenBLAS reads these when NumPy loads it, so they are dropped (for this process only) before
# the first NumPy import; --keep-openblas-env keeps them. See README.md for the measurement.
_OPENBLAS_VARS = ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE")


def _parse_args(argv=None):
    ap = argparse.ArgumentParser(description="velspec benchmarks (kernel, threads, velspec run)")
    ap.add_argument("--quick", action="store_true", help="short version (under a minute)")
    ap.add_argument("--out", default=None, metavar="DIR", help="results folder (default benchmarks/results)")
    ap.add_argument("--clock-ghz", type=float, default=None,
                    help="nominal core clock for samples per cycle (default: /proc/cpuinfo 'cpu MHz')")
    ap.add_argument("--skip-line", action="store_true", help="kernel and thread figures only")
    ap.add_argument("--keep-openblas-env", action="store_true",
                    help="keep OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE as set in the environment")
    ap.add_argument("--cpu", default=None, metavar="NAME",
                    help="compile for this LLVM CPU with its own features (NUMBA_CPU_NAME=NAME, "
                         "NUMBA_CPU_FEATURES=''), e.g. haswell for the AVX2 path; numba's cache "
                         "goes to a folder of its own for that CPU")
    return ap.parse_args(argv)


ARGS = _parse_args() if __name__ == "__main__" else None
OPENBLAS_ENV = {k: os.environ.get(k) for k in _OPENBLAS_VARS}
if ARGS is not None and not ARGS.keep_openblas_env:
    for _k in _OPENBLAS_VARS:
        os.environ.pop(_k, None)
if ARGS is not None and ARGS.cpu:
    # numba reads these when it is imported; its cache keys on the CPU, but a folder of its own
    # keeps the forced build from replacing the native one.
    import tempfile as _tempfile

    os.environ["NUMBA_CPU_NAME"] = ARGS.cpu
    os.environ["NUMBA_CPU_FEATURES"] = ""
    os.environ.setdefault("NUMBA_CACHE_DIR", os.path.join(_tempfile.gettempdir(), f"velspec-numba-{ARGS.cpu}"))

import cProfile  # noqa: E402
import datetime as _dt  # noqa: E402
import json  # noqa: E402
import platform  # noqa: E402
import pstats  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numba  # noqa: E402
import numpy as np  # noqa: E402
from numba import njit, prange  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import bounds  # noqa: E402

from velspec.scan import kernels, scan_gather, velocity_axis  # noqa: E402
from velspec.scan.moveout import hyperbolic_span  # noqa: E402
from velspec.scan.primitives import interp, window_ratio  # noqa: E402
from velspec.scan.reference import semblance_reference  # noqa: E402

DT = 0.004
SCAN = dict(vmin=1400.0, vmax=6000.0, window=0.040, stretch_limit=0.5)  # RunParams defaults
STANDARD = (96, 1500, 120)
SMALL = (48, 601, 120)
SIZES = [SMALL, (61, 601, 120), STANDARD, (192, 3000, 240)]
# /proc/cpuinfo flags that decide the kernel path (x86) or name the vector unit (ARM)
VECTOR_FLAGS = ["sse4_2", "avx", "avx2", "fma", "avx512f", "avx512bw", "avx512vl", "avx512vbmi",
                "asimd", "sve", "sve2"]


# -- machine and clock ------------------------------------------------------------------------

def _cpuinfo() -> dict:
    info = {}
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if ":" in line:
                k, v = (s.strip() for s in line.split(":", 1))
                info.setdefault(k, v)
    except OSError:
        pass
    return info


def _caches() -> list[str]:
    out = []
    base = Path("/sys/devices/system/cpu/cpu0/cache")
    for d in sorted(base.glob("index*")):
        try:
            level, kind, size = ((d / f).read_text().strip() for f in ("level", "type", "size"))
            out.append(f"L{level} {kind} {size}")
        except OSError:
            continue
    return out


def machine() -> dict:
    ci = _cpuinfo()
    flags = (ci.get("flags") or ci.get("Features") or "").split()
    t = kernels.TARGET
    return {
        "cpu": ci.get("model name") or ci.get("CPU part") or platform.processor(),
        "vector_extensions": [f for f in VECTOR_FLAGS if f in flags],
        "kernel_path": t.path,
        "kernel_lanes": t.lanes,
        "kernel_permute": t.permute,
        "compiled_for_cpu": t.cpu,
        "numba_cpu_env": {k: os.environ.get(k) for k in ("NUMBA_CPU_NAME", "NUMBA_CPU_FEATURES", "NUMBA_CACHE_DIR")},
        "family_model_stepping": [ci.get("cpu family"), ci.get("model"), ci.get("stepping")],
        "logical_cpus": os.cpu_count(),
        "cores_reported": int(ci["cpu cores"]) if "cpu cores" in ci else None,
        "siblings_per_package": int(ci["siblings"]) if "siblings" in ci else None,
        "cpuinfo_mhz": float(ci["cpu MHz"]) if "cpu MHz" in ci else None,
        "avx512f": "avx512f" in flags,
        "avx2": "avx2" in flags,
        "hypervisor": "hypervisor" in flags,
        "caches_cpu0": _caches(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "numba": numba.__version__,
        "numba_threads": numba.config.NUMBA_NUM_THREADS,
        "threading_layer": numba.config.THREADING_LAYER,
        "openblas_env_inherited": OPENBLAS_ENV,
        "openblas_env_used": {k: os.environ.get(k) for k in _OPENBLAS_VARS},
    }


@njit(cache=True, nogil=True)
def _chain(n, x):
    # Each step is a shift then an add, both 1-cycle integer ops on every x86 core of the last
    # decade, and each needs the previous result: 2 cycles per step, nothing to overlap.
    for _ in range(n):
        x = x + (x >> np.uint64(5))
    return x


@njit(cache=True, nogil=True, parallel=True)
def _chain_all(n, x, nthreads):
    out = np.empty(nthreads, dtype=np.uint64)
    for t in prange(nthreads):
        out[t] = _chain(n, x + np.uint64(t))
    return out


def spin_up(nthreads: int, seconds: float) -> None:
    """Keep every core busy for a while: this machine starts from a low clock when idle."""
    end = time.perf_counter() + seconds
    while time.perf_counter() < end:
        _chain_all(20_000_000, np.uint64(3), nthreads)


def effective_clock(nthreads: int, steps: int = 60_000_000) -> float:
    """Clock each core actually runs at, GHz, from a dependent chain of 2-cycle steps."""
    _chain_all(10, np.uint64(3), nthreads)
    best = 1e9
    for _ in range(3):
        t = time.perf_counter()
        _chain_all(steps, np.uint64(3), nthreads)
        best = min(best, time.perf_counter() - t)
    return 2 * steps / best / 1e9


# -- timing helpers ---------------------------------------------------------------------------

class OtherLoad:
    """Share of the CPUs that other processes (and the hypervisor, as steal) used meanwhile.

    Other people's jobs on the same machine slow a timing down; this says how much they ran."""

    def __enter__(self):
        self.t, self.stat, self.own = time.perf_counter(), self._stat(), self._own()
        return self

    def __exit__(self, *exc):
        wall = time.perf_counter() - self.t
        stat, own = self._stat(), self._own()
        hz = os.sysconf("SC_CLK_TCK")
        if stat is None or self.stat is None:
            self.result = {}
            return
        busy = (stat[0] - self.stat[0]) / hz
        steal = (stat[1] - self.stat[1]) / hz
        cpus = os.cpu_count() or 1
        self.result = {"wall_s": wall, "others_share": max(busy - (own - self.own), 0.0) / (wall * cpus),
                       "steal_share": steal / (wall * cpus)}

    @staticmethod
    def _stat():
        try:
            f = [int(x) for x in Path("/proc/stat").read_text().split("\n", 1)[0].split()[1:]]
        except (OSError, ValueError):
            return None
        user, nice, system, idle, iowait, irq, softirq, steal = (f + [0] * 8)[:8]
        return user + nice + system + irq + softirq, steal

    @staticmethod
    def _own():
        t = os.times()
        return t.user + t.system + t.children_user + t.children_system


def tag(m: dict) -> str:
    """CPU, vector extensions and kernel path: printed beside every figure."""
    ext = " ".join(m["vector_extensions"]) or "no vector flags"
    return f"[{m['cpu']}; {ext}; kernel {m['kernel_path']} compiled for {m['compiled_for_cpu']}]"


def load_average() -> list[float]:
    try:
        return [float(x) for x in Path("/proc/loadavg").read_text().split()[:3]]
    except OSError:
        return []


# -- kernel -----------------------------------------------------------------------------------

def make_gather(ntr: int, ns: int, rng) -> tuple[np.ndarray, np.ndarray]:
    """A CMP gather of hyperbolic Ricker events in noise; offsets 100 m to 2475 m (96 channels at
    25 m; the spread length is kept at every size). The kernel's cost does not depend on the
    sample values: no branch in it looks at them."""
    offsets = np.linspace(100.0, 2475.0, ntr)
    t = DT * np.arange(ns)
    data = 0.5 * rng.standard_normal((ntr, ns))
    for t0, v in ((0.5, 1700.0), (1.2, 2100.0), (2.0, 2600.0), (3.1, 3100.0), (4.5, 3500.0)):
        tx = np.sqrt(t0 * t0 + (offsets / v) ** 2)
        a = (np.pi * 25.0 * (t[None, :] - tx[:, None])) ** 2
        data += (1.0 - 2.0 * a) * np.exp(-a)
    return data.astype(np.float32), offsets


def live_fraction(offsets, ns, velocities) -> float:
    """Share of the t0 x velocity x trace samples inside the stretch mute and the trace."""
    x = np.abs(offsets)
    q_unit = (x * x / (DT * DT)).astype(np.float32)
    t0 = DT * np.arange(ns)
    tau2 = np.where(t0 > 0, (t0 / DT) ** 2, -1.0).astype(np.float32)
    trials = np.zeros((len(velocities), 2), dtype=np.float32)
    trials[:, 0] = 1.0 / np.asarray(velocities) ** 2
    mute_c = np.float32((1.0 + SCAN["stretch_limit"]) ** 2 - 1.0)
    live = kernels.live_count(q_unit, trials, 0, tau2, mute_c, np.float32(0.0), ns)
    return float(live.sum()) / (len(velocities) * ns * len(offsets))


def bench_kernels(sizes, seconds: float, ref_reps, nominal_ghz: float, clock_ghz: float, rng) -> list[dict]:
    """Kernel and NumPy reference on each gather size.

    Calls go round the sizes for ``seconds``, the reference calls spread among them, and each
    figure is the best call: this machine has slow spells lasting seconds (a busy host), which a
    short burst of repeats cannot escape."""
    kw = dict(window=SCAN["window"], stretch_limit=SCAN["stretch_limit"])
    threads = numba.get_num_threads()
    cases = []
    for ntr, ns, nv in sizes:
        data, offsets = make_gather(ntr, ns, rng)
        vels = velocity_axis(SCAN["vmin"], SCAN["vmax"], nv)
        cases.append((data, offsets, vels, scan_gather(data, offsets, DT, 0.0, vels, **kw)))
    ref_panels = [semblance_reference(d, o, DT, 0.0, v, **kw) for d, o, v, _ in cases]
    ktimes = [[] for _ in sizes]
    rtimes = [[] for _ in sizes]
    start = time.perf_counter()
    while True:
        for c, (data, offsets, vels, _) in enumerate(cases):
            t = time.perf_counter()
            scan_gather(data, offsets, DT, 0.0, vels, **kw)
            ktimes[c].append(time.perf_counter() - t)
        elapsed = time.perf_counter() - start
        for c, (data, offsets, vels, _) in enumerate(cases):
            # reference call number n is due once n / ref_reps of the time has passed
            if len(rtimes[c]) < ref_reps[c] and elapsed >= seconds * len(rtimes[c]) / ref_reps[c]:
                t = time.perf_counter()
                semblance_reference(data, offsets, DT, 0.0, vels, **kw)
                rtimes[c].append(time.perf_counter() - t)
        if elapsed >= seconds and all(len(r) >= n for r, n in zip(rtimes, ref_reps)):
            break
    out = []
    for (ntr, ns, nv), (_data, offsets, vels, panel), kt, rt, ref_panel in zip(sizes, cases, ktimes, rtimes, ref_panels):
        k = {"min_s": float(min(kt)), "median_s": float(np.median(kt)), "reps": len(kt)}
        r = {"min_s": float(min(rt)), "median_s": float(np.median(rt)), "reps": len(rt)}
        samples = ntr * ns * nv
        diff = np.abs(panel - ref_panel)
        out.append({
            "traces": ntr, "samples": ns, "velocities": nv, "threads": threads,
            "t0_vel_trace_samples": samples,
            "live_fraction": live_fraction(offsets, ns, vels),
            "kernel_s": k, "reference_s": r,
            "kernel_samples_per_s": samples / k["min_s"],
            "samples_per_core_cycle_nominal": samples / k["min_s"] / (threads * nominal_ghz * 1e9),
            "samples_per_core_cycle_measured_clock": samples / k["min_s"] / (threads * clock_ghz * 1e9),
            "ratio_to_reference": r["min_s"] / k["min_s"],
            "vs_reference_median_abs_diff": float(np.median(diff)),
            "vs_reference_share_within_1e-4": float(np.mean(diff < 1e-4)),
        })
    return out


@njit(cache=True, parallel=True, nogil=True, error_model="numpy")
def plain_numba_semblance(data, q_unit, trials, tau2, mute_c, tau_first, half):
    """The straightforward numba loop: same definition, live spans and interpolation as the
    kernel, one sample at a time (LLVM vectorises the square roots and gathers the samples)."""
    ntr, ns = data.shape
    nt = tau2.shape[0]
    out = np.empty((trials.shape[0], nt), dtype=np.float32)
    last = np.float32(ns - 1)
    for m in prange(trials.shape[0]):
        stack = np.zeros(nt, dtype=np.float32)
        energy = np.zeros(nt, dtype=np.float32)
        live = np.zeros(nt + 1, dtype=np.int32)
        for i in range(ntr):
            q = q_unit[i] * trials[m, 0]
            j0, j1 = hyperbolic_span(tau2, q, mute_c, tau_first, last)
            trace = data[i]
            for j in range(j0, j1):
                a = interp(trace, np.float32(np.sqrt(tau2[j] + q) - tau_first))
                stack[j] += a
                energy[j] += a * a
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


def bench_plain_loop(seconds: float, rng) -> dict:
    """Kernel against the straightforward numba loop on the standard gather, calls alternated."""
    ntr, ns, nv = STANDARD
    data, offsets = make_gather(ntr, ns, rng)
    vels = velocity_axis(SCAN["vmin"], SCAN["vmax"], nv)
    q_unit = (offsets * offsets / (DT * DT)).astype(np.float32)
    t0 = DT * np.arange(ns)
    tau2 = np.where(t0 > 0, (t0 / DT) ** 2, -1.0).astype(np.float32)
    trials = np.zeros((nv, 2), dtype=np.float32)
    trials[:, 0] = 1.0 / vels**2
    mute_c = np.float32((1.0 + SCAN["stretch_limit"]) ** 2 - 1.0)
    half = int(round(SCAN["window"] / DT / 2.0))
    plain_numba_semblance(data, q_unit, trials, tau2, mute_c, np.float32(0.0), half)
    kt, pt = [], []
    start = time.perf_counter()
    while time.perf_counter() - start < seconds or len(pt) < 5:
        t = time.perf_counter()
        plain_numba_semblance(data, q_unit, trials, tau2, mute_c, np.float32(0.0), half)
        pt.append(time.perf_counter() - t)
        t = time.perf_counter()
        scan_gather(data, offsets, DT, 0.0, vels, window=SCAN["window"], stretch_limit=SCAN["stretch_limit"])
        kt.append(time.perf_counter() - t)
    return {"plain_loop_min_s": min(pt), "kernel_min_s": min(kt), "ratio": min(pt) / min(kt), "reps": len(pt)}


_STARTUP_CHILD = """
import time
t = time.perf_counter()
import numpy as np
from velspec.scan import kernels, scan_gather, velocity_axis
t_import = time.perf_counter() - t
rng = np.random.default_rng(1)
data = rng.standard_normal((96, 1500)).astype(np.float32)
offsets = np.linspace(100.0, 2475.0, 96)
vels = velocity_axis(1400.0, 6000.0, 120)
t = time.perf_counter()
scan_gather(data, offsets, 0.004, 0.0, vels)
t_first = time.perf_counter() - t
t = time.perf_counter()
scan_gather(data, offsets, 0.004, 0.0, vels)
t_second = time.perf_counter() - t
st = kernels.semblance_panel.stats
print(repr({"import_s": t_import, "first_call_s": t_first, "second_call_s": t_second,
            "cache_hits": sum(st.cache_hits.values()), "cache_misses": sum(st.cache_misses.values()),
            "path": kernels.TARGET.path}))
"""


def bench_startup() -> dict:
    """``import velspec.scan`` and the first ``scan_gather`` in fresh processes: with an empty
    numba cache (the first run after install: everything compiled) and again with the cache
    that run left (a warm start: compiled kernels loaded)."""
    import ast

    out = {}
    with tempfile.TemporaryDirectory(prefix="velspec-numba-cache-") as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        for name in ("empty_cache", "warm_cache", "warm_cache_again"):
            t = time.perf_counter()
            proc = subprocess.run([sys.executable, "-c", _STARTUP_CHILD], env=env, capture_output=True, text=True)
            wall = time.perf_counter() - t
            if proc.returncode != 0:
                out[name] = {"error": proc.stderr[-400:]}
                continue
            out[name] = {**ast.literal_eval(proc.stdout.strip().splitlines()[-1]), "process_wall_s": wall}
    return out


def bench_threads(seconds: float, rng) -> list[dict]:
    """Standard gather at 1 .. all threads, the counts taken in turn for ``seconds``."""
    ntr, ns, nv = STANDARD
    data, offsets = make_gather(ntr, ns, rng)
    vels = velocity_axis(SCAN["vmin"], SCAN["vmax"], nv)
    top = numba.config.NUMBA_NUM_THREADS
    counts = list(range(1, top + 1))
    times = {n: [] for n in counts}
    panels = {}
    start = time.perf_counter()
    while time.perf_counter() - start < seconds or len(times[top]) < 5:
        for n in counts:
            numba.set_num_threads(n)
            t = time.perf_counter()
            panels[n] = scan_gather(data, offsets, DT, 0.0, vels)
            times[n].append(time.perf_counter() - t)
    numba.set_num_threads(top)
    best = {n: min(times[n]) for n in counts}
    return [{"threads": n, "kernel_min_s": best[n], "kernel_median_s": float(np.median(times[n])),
             "reps": len(times[n]), "speedup": best[1] / best[n], "efficiency": best[1] / best[n] / n,
             "same_bits_as_1_thread": bool(np.array_equal(panels[n], panels[1]))} for n in counts]


# -- velspec run on a line --------------------------------------------------------------------

def _profile_buckets(prof: cProfile.Profile) -> dict:
    """Cumulative seconds in the parts of a run, from a cProfile of run_line + write_result."""
    st = pstats.Stats(prof).stats

    def ct(suffix, name):
        return sum(v[3] for (f, _, n), v in st.items() if f.replace("\\", "/").endswith(suffix) and n == name)

    total = ct("benchmarks/run.py", "_profiled_run")
    parts = {
        "semblance kernel (numba)": ct("velspec/scan/kernels.py", "semblance"),
        "scan_gather outside the kernel": ct("velspec/scan/__init__.py", "scan_gather")
        - ct("velspec/scan/kernels.py", "semblance"),
        "picking (velspec/pick pick_panel)": ct("velspec/pick/__init__.py", "pick_panel"),
        "spectrum smoothing (smoothed_panel)": ct("velspec/smoothing.py", "smoothed_panel"),
        "conditioning (condition_gather)": ct("velspec/condition.py", "condition_gather"),
        "sea floor (sea_floor_pass)": ct("velspec/pipeline.py", "sea_floor_pass"),
        "regularised field (regularise_result)": ct("velspec/pipeline.py", "regularise_result"),
        "reading gathers (SegyLine.read_gather)": ct("velspec/io/segy.py", "read_gather"),
        "opening the line: header survey (open_line)": ct("velspec/io/segy.py", "open_line"),
        "input checksum (SegyLine.identity)": ct("velspec/io/segy.py", "identity"),
        "line pass: Dix, lateral outliers, quality (line_pass)": ct("velspec/linepass.py", "line_pass"),
        "writing the result (write_result)": ct("velspec/io/hdf5.py", "write_result"),
    }
    parts["everything else"] = total - sum(parts.values())
    return {"total_s": total, "parts_s": parts}


def _profiled_run(path, out, params):
    from velspec.io.hdf5 import write_result
    from velspec.pipeline import run_line

    write_result(out, run_line(path, params), force=True)


# The two lines of issue-sized gathers: small (48-fold, 4 ms, 2.4 s) and large (120-fold, 2 ms, 6 s),
# shot-ordered as a crew writes them; 25 m groups, so fold = channels * 25 / (2 * shot interval).
LINES = {
    "small": dict(channels=96, shot_interval=25.0, nsamples=600, dt=0.004, snr=4.0),
    "large": dict(channels=120, shot_interval=12.5, nsamples=3000, dt=0.002, snr=4.0),
}


def bench_line(short: int, long: int, reps: int, workdir: Path, with_cli: bool, spec: dict) -> dict:
    from velspec.io.segy import open_line
    from velspec.params import RunParams
    from velspec.synth import LineSpec, make_line

    params = RunParams()
    dt = spec["dt"]
    paths = {}
    t_make = {}
    for n in (short, long):
        paths[n] = workdir / f"line{n}.sgy"
        t = time.perf_counter()
        truth = make_line(paths[n], LineSpec(ncmp=n, **spec))
        t_make[n] = time.perf_counter() - t
    fold = int(np.median(truth.fold))
    out = workdir / "result.h5"
    _profiled_run(paths[short], out, params)          # compile / load the numba caches first

    with open_line(paths[long], params.read) as line:
        g = line.read_gather(line.ncmp // 2)
        t_first = float(line.times[0])
    sp = params.scan
    vels = velocity_axis(sp.vmin, sp.vmax, sp.nvel, sp.axis)
    kw = dict(window=sp.window, stretch_limit=sp.stretch_limit)

    # Rounds of: short line, long line, the NumPy reference and the kernel on one gather of the
    # line; every figure is the best of its rounds (slow spells of the machine last seconds).
    times = {short: [], long: []}
    ref_t, kern_t = [], []
    for _ in range(reps):
        for n in (short, long):
            t = time.perf_counter()
            _profiled_run(paths[n], out, params)
            times[n].append(time.perf_counter() - t)
        t = time.perf_counter()
        semblance_reference(g.data, g.offsets, dt, t_first, vels, **kw)
        ref_t.append(time.perf_counter() - t)
        for _ in range(10):
            t = time.perf_counter()
            scan_gather(g.data, g.offsets, dt, t_first, vels, **kw)
            kern_t.append(time.perf_counter() - t)
    best = {n: min(v) for n, v in times.items()}
    marginal = (best[long] - best[short]) / (long - short)
    ref = {"min_s": min(ref_t), "median_s": float(np.median(ref_t)), "reps": len(ref_t)}
    kern = {"min_s": min(kern_t), "median_s": float(np.median(kern_t)), "reps": len(kern_t)}

    # cProfile of each line twice; each part's best, long minus short, per extra CMP.
    prof_parts = {}
    for n in (short, long):
        for _ in range(2):
            prof = cProfile.Profile()
            prof.runcall(_profiled_run, paths[n], out, params)
            for name, v in _profile_buckets(prof)["parts_s"].items():
                prof_parts.setdefault(n, {}).setdefault(name, []).append(v)
    parts = {name: (min(prof_parts[long][name]) - min(prof_parts[short][name])) / (long - short)
             for name in prof_parts[long]}
    prof_marginal = sum(parts.values())

    cli = None
    if with_cli:
        exe = Path(sys.executable).with_name("velspec")
        cmd = [str(exe)] if exe.exists() else [
            sys.executable, "-c", "import sys; from velspec.cli import main; sys.exit(main())"]
        cmd += ["run", str(paths[long]), "--out", str(workdir / "cli.h5"), "--quiet", "--force"]
        wall = 1e9
        for _ in range(2):
            t = time.perf_counter()
            proc = subprocess.run(cmd, capture_output=True, text=True)
            wall = min(wall, time.perf_counter() - t)
        cli = {"command": "velspec run LINE --out R.h5 --quiet --force", "cmps": long, "wall_s": wall,
               "cmps_per_s": long / wall, "returncode": proc.returncode, "stderr_tail": proc.stderr[-400:]}

    kernel_share = parts["semblance kernel (numba)"] / prof_marginal
    return {
        "line": {**spec, "fold": fold, "short_cmps": short, "long_cmps": long,
                 "traces_per_cmp": int(g.data.shape[0]), "make_line_s": t_make},
        "run_s": {"short_min": best[short], "long_min": best[long], "all": {str(k): v for k, v in times.items()}},
        "marginal_s_per_cmp": marginal,
        "cmps_per_s_marginal": 1.0 / marginal,
        "cmps_per_s_long_line": long / best[long],
        "reference_scan_one_gather_s": ref,
        "kernel_one_gather_s": kern,
        "reference_over_marginal": ref["min_s"] / marginal,
        "profile_marginal_s_per_cmp": parts,
        "profile_marginal_total_s_per_cmp": prof_marginal,
        "profile_overhead_factor": prof_marginal / marginal,
        "kernel_share_of_marginal": kernel_share,
        "outside_kernel_s_per_cmp": marginal * (1.0 - kernel_share),
        "outside_kernel_budget_for_25x_s_per_cmp": ref["min_s"] / 25.0 - marginal * kernel_share,
        "cli": cli,
    }


# -- report -----------------------------------------------------------------------------------

def markdown(res: dict) -> str:
    m = res["machine"]
    c = res["clock"]
    lines = [f"Machine: {m['cpu']} (family {m['family_model_stepping'][0]} model {m['family_model_stepping'][1]}), "
             f"{m['logical_cpus']} cores, vector extensions {' '.join(m['vector_extensions']) or 'none listed'}; "
             f"kernel path **{m['kernel_path']}** (compiled for {m['compiled_for_cpu']}"
             + (", forced by NUMBA_CPU_NAME" if m["numba_cpu_env"].get("NUMBA_CPU_NAME") else "")
             + f"); numba {m['numba']}, "
             f"NumPy {m['numpy']}. Clock: nominal {c['nominal_ghz']:.2f} GHz ({c['nominal_source']}); "
             f"measured {c['measured_ghz_before']:.2f} / {c['measured_ghz_after']:.2f} GHz per core "
             f"before / after the kernel runs. Mode: {res['mode']}. Other processes used "
             + ", ".join(f"{100 * v.get('others_share', float('nan')):.0f}%" for v in res["other_load"].values())
             + " of the CPUs during the " + ", ".join(res["other_load"]) + " parts (figures are best of "
             "repeats, so a busy spell costs repeats, not accuracy, unless it lasts).", ""]
    lines += ["| gather (traces x samples x velocities) | live share | kernel | samples/s | per core-cycle "
              "(nominal / measured clock) | NumPy reference | ratio |",
              "|---|---|---|---|---|---|---|"]
    for k in res["kernel"]:
        tag = " (standard)" if (k["traces"], k["samples"], k["velocities"]) == STANDARD else ""
        lines.append(f"| {k['traces']} x {k['samples']} x {k['velocities']}{tag} | {k['live_fraction']:.2f} "
                     f"| {k['kernel_s']['min_s'] * 1e3:.2f} ms | {k['kernel_samples_per_s'] / 1e9:.2f} G "
                     f"| {k['samples_per_core_cycle_nominal']:.2f} / {k['samples_per_core_cycle_measured_clock']:.2f} "
                     f"| {k['reference_s']['min_s'] * 1e3:.0f} ms | {k['ratio_to_reference']:.0f}x |")
    pl = res.get("plain_loop")
    if pl:
        lines += ["", f"Straightforward numba loop on the standard gather (one sample at a time, LLVM's gathers): "
                  f"{pl['plain_loop_min_s'] * 1e3:.2f} ms; the kernel {pl['kernel_min_s'] * 1e3:.2f} ms in the same "
                  f"rounds, {pl['ratio']:.1f}x faster."]
    lines += ["", "| threads | kernel, standard gather | speed-up | efficiency | same bits as 1 thread |",
              "|---|---|---|---|---|"]
    for t in res["threads"]:
        lines.append(f"| {t['threads']} | {t['kernel_min_s'] * 1e3:.2f} ms | {t['speedup']:.2f}x "
                     f"| {t['efficiency']:.2f} | {'yes' if t['same_bits_as_1_thread'] else 'NO'} |")
    bd = res.get("bounds")
    if bd:
        hot = bd.get("hot_loop") or {}
        lanes = bd["variants"][0].get("lanes", 16)
        lines += ["", f"What the {lanes}-sample block costs (one thread, cycles at the measured {bd['clock_ghz']:.2f} GHz; "
                  f"the kernel's steady-state loop is {hot.get('instructions_per_block', float('nan')):.0f} "
                  f"instructions per block, {hot.get('vector_instructions_per_block', float('nan')):.0f} of them "
                  "vector or mask):", "",
                  "| block variant | ns per block | cycles per block | cycles per sample |", "|---|---|---|---|"]
        for v in bd["variants"]:
            lines.append(f"| {v['variant']} | {v['ns_per_block']:.2f} | {v['cycles_per_block']:.1f} "
                         f"| {v['cycles_per_block'] / lanes:.2f} |")
    su = res.get("startup")
    if su:
        lines += ["", "Start-up in a fresh process (`import velspec.scan`, then `scan_gather` on the standard gather):",
                  "", "| numba cache | import | first call | second call | kernel loaded from cache |",
                  "|---|---|---|---|---|"]
        for name, v in su.items():
            if "error" in v:
                lines.append(f"| {name.replace('_', ' ')} | failed | | | |")
                continue
            lines.append(f"| {name.replace('_', ' ')} | {v['import_s']:.2f} s | {v['first_call_s']:.2f} s "
                         f"| {v['second_call_s'] * 1e3:.1f} ms | {'yes' if v['cache_hits'] else 'no'} |")
    for name, ln in res.get("lines", {}).items():
        L = ln["line"]
        lines += ["", f"`velspec run` on the {name} generated line ({L['traces_per_cmp']} traces per CMP, "
                  f"{L['nsamples']} samples at {L['dt'] * 1e3:.0f} ms, default parameters), "
                  f"{L['short_cmps']} and {L['long_cmps']} CMPs:", "",
                  "| figure | value |", "|---|---|",
                  f"| run + write, short / long line | {ln['run_s']['short_min']:.2f} s / {ln['run_s']['long_min']:.2f} s |",
                  f"| marginal cost per CMP | {ln['marginal_s_per_cmp'] * 1e3:.2f} ms ({ln['cmps_per_s_marginal']:.0f} CMPs/s) |",
                  f"| CMPs per second over the long line (start-up and compilation excluded) | {ln['cmps_per_s_long_line']:.0f} |",
                  f"| semblance kernel, one gather of the line | {ln['kernel_one_gather_s']['min_s'] * 1e3:.2f} ms |",
                  f"| NumPy reference scan, same gather | {ln['reference_scan_one_gather_s']['min_s'] * 1e3:.0f} ms |",
                  f"| reference scan / marginal cost per CMP | {ln['reference_over_marginal']:.1f}x |",
                  f"| marginal cost outside the kernel | {ln['outside_kernel_s_per_cmp'] * 1e3:.2f} ms per CMP "
                  f"({100 * (1 - ln['kernel_share_of_marginal']):.0f}%) |",
                  f"| what that part may cost for 25x | {ln['outside_kernel_budget_for_25x_s_per_cmp'] * 1e3:.2f} ms per CMP |",
                  f"| kernel share of the marginal cost (profiled) | {100 * ln['kernel_share_of_marginal']:.0f}% |"]
        if ln.get("cli"):
            cl = ln["cli"]
            lines.append(f"| CLI `velspec run`, {cl['cmps']} CMPs, wall time with start-up | {cl['wall_s']:.2f} s "
                         f"({cl['cmps_per_s']:.0f} CMPs/s) |")
        lines += ["", "Where the marginal cost per CMP goes (cProfile, long minus short line, best of two runs each; "
                  f"profiled total {ln['profile_marginal_total_s_per_cmp'] * 1e3:.2f} ms per CMP):", "",
                  "| part | ms per CMP | share |", "|---|---|---|"]
        tot = ln["profile_marginal_total_s_per_cmp"]
        for name, v in sorted(ln["profile_marginal_s_per_cmp"].items(), key=lambda kv: -kv[1]):
            lines.append(f"| {name} | {v * 1e3:.2f} | {100 * v / tot:.0f}% |")
    return "\n".join(lines) + "\n"


def main() -> int:
    args = ARGS or _parse_args([])
    quick = args.quick
    started = time.perf_counter()
    res = {"mode": "quick" if quick else "full",
           "utc": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
           "load_average_start": load_average(), "machine": machine()}
    m = res["machine"]
    if args.clock_ghz:
        nominal, source = args.clock_ghz, "--clock-ghz"
    elif m["cpuinfo_mhz"]:
        nominal, source = m["cpuinfo_mhz"] / 1000.0, "/proc/cpuinfo 'cpu MHz'"
    else:
        nominal, source = 2.6, "assumed"
    nthreads = numba.config.NUMBA_NUM_THREADS
    tg = tag(m)
    print(f"velspec benchmarks ({res['mode']}), {nthreads} threads {tg}", flush=True)
    spin_up(nthreads, 1.5)
    clock_before = effective_clock(nthreads)
    rng = np.random.default_rng(2024)
    # seconds of repeated calls per part (best call taken)
    budget = ({"kernel": 6.0, "threads": 3.0, "bounds": 3.0} if quick
              else {"kernel": 60.0, "threads": 30.0, "bounds": 15.0})
    res["budget_s"] = budget
    res["other_load"] = {}
    with OtherLoad() as w:
        res["kernel"] = bench_kernels(SIZES, budget["kernel"], [3, 3, 3, 1] if quick else [8, 8, 8, 3],
                                      nominal, clock_before, rng)
    res["other_load"]["kernel"] = w.result
    for r in res["kernel"]:
        print(f"  kernel {r['traces']} x {r['samples']} x {r['velocities']}: {r['kernel_s']['min_s'] * 1e3:.2f} ms, "
              f"{r['kernel_samples_per_s'] / 1e9:.2f} G samples/s, {r['samples_per_core_cycle_nominal']:.2f} per "
              f"core-cycle at {nominal:.2f} GHz ({r['samples_per_core_cycle_measured_clock']:.2f} at the measured "
              f"{clock_before:.2f} GHz), {r['ratio_to_reference']:.0f}x the NumPy reference {tg}", flush=True)
    with OtherLoad() as w:
        res["threads"] = bench_threads(budget["threads"], rng)
    res["other_load"]["threads"] = w.result
    for t in res["threads"]:
        print(f"  {t['threads']} thread(s): {t['kernel_min_s'] * 1e3:.2f} ms, speed-up {t['speedup']:.2f}x, "
              f"same bits as 1 thread: {t['same_bits_as_1_thread']} {tg}", flush=True)
    res["plain_loop"] = bench_plain_loop(budget["threads"] / 2, rng)
    pl = res["plain_loop"]
    print(f"  straightforward numba loop {pl['plain_loop_min_s'] * 1e3:.2f} ms, kernel {pl['kernel_min_s'] * 1e3:.2f} ms: "
          f"{pl['ratio']:.1f}x {tg}", flush=True)
    numba.set_num_threads(1)
    clock_one = effective_clock(1)
    res["bounds"] = {"clock_ghz": clock_one, "variants": bounds.measure(clock_one, seconds=budget["bounds"]),
                     "hot_loop": bounds.hot_loop_instructions()}
    numba.set_num_threads(nthreads)
    for b in res["bounds"]["variants"]:
        print(f"  block variant {b['variant']!r}: {b['cycles_per_block']:.1f} cycles per {b['lanes']} samples "
              f"at {clock_one:.2f} GHz {tg}", flush=True)
    res["startup"] = bench_startup()
    for name, v in res["startup"].items():
        if "error" in v:
            print(f"  start-up, {name}: failed: {v['error']}", flush=True)
            continue
        print(f"  start-up, {name}: import {v['import_s']:.2f} s, first scan_gather {v['first_call_s']:.2f} s, "
              f"second {v['second_call_s'] * 1e3:.1f} ms, kernel cache hits {v['cache_hits']} misses "
              f"{v['cache_misses']} {tg}", flush=True)
    clock_after = effective_clock(nthreads)
    res["clock"] = {"nominal_ghz": nominal, "nominal_source": source,
                    "measured_ghz_before": clock_before, "measured_ghz_after": clock_after,
                    "measured_how": "dependent chain of shift+add steps (2 cycles each) on every core at once"}
    if not args.skip_line:
        res["lines"] = {}
        for name, spec in LINES.items():
            with tempfile.TemporaryDirectory(prefix="velspec-bench-") as tmp, OtherLoad() as w:
                if name == "small":
                    short, long = (8, 60) if quick else (16, 216)
                else:
                    short, long = (4, 16) if quick else (8, 56)
                res["lines"][name] = bench_line(short, long, 2 if quick else 4, Path(tmp),
                                                with_cli=not quick and name == "small", spec=spec)
            res["other_load"][f"line {name}"] = w.result
            ln = res["lines"][name]
            print(f"  velspec run, {name} line ({ln['line']['traces_per_cmp']} traces x {spec['nsamples']} samples): "
                  f"marginal {ln['marginal_s_per_cmp'] * 1e3:.2f} ms per CMP "
                  f"({ln['cmps_per_s_marginal']:.0f} CMPs/s), NumPy reference scan of one gather "
                  f"{ln['reference_scan_one_gather_s']['min_s'] * 1e3:.0f} ms "
                  f"= {ln['reference_over_marginal']:.1f}x the marginal cost; kernel "
                  f"{100 * ln['kernel_share_of_marginal']:.0f}% of it {tg}", flush=True)
    res["load_average_end"] = load_average()
    res["wall_s"] = time.perf_counter() - started
    outdir = Path(args.out) if args.out else HERE / "results"
    outdir.mkdir(parents=True, exist_ok=True)
    stem = f"{res['mode']}-{res['utc'].replace(':', '').replace('-', '')}"
    if args.cpu:
        stem += f"-{args.cpu}"
    (outdir / f"{stem}.json").write_text(json.dumps(res, indent=2) + "\n")
    md = markdown(res)
    (outdir / f"{stem}.md").write_text(md)
    print()
    print(md)
    print(f"written: {outdir / (stem + '.json')} and .md ({res['wall_s']:.0f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
