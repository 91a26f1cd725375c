"""Time and peak memory of the line-wide regularised interval-velocity field.

A synthetic line: ``--cmps`` CMPs x 1500 samples at 4 ms, flat-lying layers whose interval
velocities and two-way times drift slowly along the line, about ten picks per CMP at the layer
bases with the exact RMS velocity (Dix, 1955) plus Gaussian noise of 1.5 % (the pick's sigma),
one CMP in twenty with no pick, and a slow layer under vint_min on part of the line so that the
bounds are active. Each size runs in a fresh process (compilation is done first on a small line
and not timed); the process's peak resident set size is read before and after the solve.

usage: python benchmarks/regularised.py [--cmps 500 1000 2000] [--threads 0] [--repeat 1] [--out DIR]

The table (best of ``--repeat`` fresh processes per size) is printed and written to
``DIR/regularised-<UTC time>.md`` (default benchmarks/results), with the load averages.
"""

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np


def synthetic_picks(ncmp: int, nt: int = 1500, dt: float = 0.004, seed: int = 7):
    """t0 axis and picks of a drifting layered line (see the module notes)."""
    rng = np.random.default_rng(seed)
    t0 = np.arange(nt) * dt
    nl = 10
    s = np.linspace(0.0, 1.0, ncmp)[:, None]
    thick_t = np.linspace(0.35, 0.75, nl)[None, :] * (1.0 + 0.15 * np.sin(2 * np.pi * (s + np.arange(nl) / nl)))
    tb = np.cumsum(thick_t, axis=1)
    tb *= (t0[-1] - 0.05) / tb[:, -1:].max()
    v = np.linspace(1600.0, 4600.0, nl)[None, :] * (1.0 + 0.08 * np.cos(2 * np.pi * (1.5 * s + np.arange(nl) / 7)))
    v[(s[:, 0] > 0.3) & (s[:, 0] < 0.5), 3] = 1250.0    # gas: slower than vint_min
    dtk = np.diff(np.concatenate((np.zeros((ncmp, 1)), tb), axis=1), axis=1)
    vrms = np.sqrt(np.cumsum(v * v * dtk, axis=1) / tb)
    rows = np.repeat(np.arange(ncmp), nl)
    keep = (rows % 20) != 10
    pt, pv = tb.ravel()[keep], vrms.ravel()[keep]
    sigma = 0.015 * pv
    pv = pv + sigma * rng.standard_normal(pv.size)
    return t0, rows[keep], pt, pv, sigma


def child(ncmp: int, threads: int) -> dict:
    import numba

    from velspec.params import IntervalParams
    from velspec.regularised import regularised_dix

    if threads:
        numba.set_num_threads(threads)
    params = IntervalParams()
    regularised_dix(*synthetic_picks(40, nt=200), 40, params)        # compile outside the timing
    args = synthetic_picks(ncmp)
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    start = time.perf_counter()
    out = regularised_dix(*args, ncmp, params)
    seconds = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    # the windowed form a run uses (velspec.linepass.regularise_line: 256 CMPs a solve, with the
    # picks of 64 more on each side), timed, and compared with the whole-line solve
    from velspec.linepass import cmp_slices, regularise_line
    from velspec.params import RunParams
    from velspec.result import PICK_DTYPE

    t0, pc, pt, pv, ps = args
    order = np.lexsort((pt, pc))
    picks = np.zeros(pc.size, dtype=PICK_DTYPE)
    picks["cmp"], picks["t0"], picks["vrms"], picks["sigma"] = pc[order], pt[order], pv[order], ps[order]
    picks["misfit"] = np.nan
    cmp = np.arange(ncmp)
    fallback = np.full((ncmp, t0.size), 2000.0, np.float32)
    start = time.perf_counter()
    w_vint, _, _ = regularise_line(t0, picks, cmp_slices(cmp, picks), fallback, fallback, RunParams())
    windowed = time.perf_counter() - start
    rel = np.abs(w_vint.astype(np.float64) / out.vint - 1.0)
    return {"cmps": ncmp, "samples": int(args[0].size), "picks": int(args[1].size), "seconds": seconds,
            "windowed_seconds": windowed, "window_diff_p99": float(np.quantile(rel, 0.99)),
            "window_diff_max": float(rel.max()),
            "rss_before_MiB": before / 2**20, "rss_peak_MiB": after / 2**20,
            "iterations": out.iterations, "passes": out.passes, "converged": out.converged,
            "at_bound": int(out.at_bound.sum()), "misfit_rms": float(np.sqrt(np.mean(out.misfit ** 2))),
            "threads": numba.get_num_threads()}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cmps", type=int, nargs="+", default=[500, 1000, 2000])
    ap.add_argument("--threads", type=int, default=0, help="numba threads, 0 for all cores")
    ap.add_argument("--repeat", type=int, default=1, help="fresh processes per size; the fastest is reported")
    ap.add_argument("--out", default=str(Path(__file__).resolve().parent / "results"))
    ap.add_argument("--child", type=int, default=0, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        print(json.dumps(child(args.child, args.threads)))
        return 0
    load_before = open("/proc/loadavg").read().split()[:3]
    rows = []
    for n in args.cmps:
        runs = []
        for _ in range(max(args.repeat, 1)):
            out = subprocess.run([sys.executable, __file__, "--child", str(n), "--threads", str(args.threads)],
                                 check=True, capture_output=True, text=True, env=os.environ)
            runs.append(json.loads(out.stdout.strip().splitlines()[-1]))
        best = min(runs, key=lambda r: r["seconds"])
        best["all_seconds"] = [round(r["seconds"], 1) for r in runs]
        rows.append(best)
    load_after = open("/proc/loadavg").read().split()[:3]
    lines = [f"Load average (1, 5, 15 min) before: {' '.join(load_before)}; after: {' '.join(load_after)}.", "",
             "| CMPs x samples | picks | threads | seconds (best; all runs) | CG iterations | active-set passes "
             "| converged | samples at a bound | pick misfit RMS (sigmas) | RSS before solve | peak RSS "
             "| one (ncmp, nt) float64 | in windows (as a run solves it): seconds | vint in windows against "
             "whole line: p99, max |",
             "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in rows:
        field = r["cmps"] * r["samples"] * 8 / 2**20
        runs = ", ".join(f"{v:.1f}" for v in r["all_seconds"])
        lines.append(f"| {r['cmps']} x {r['samples']} | {r['picks']} | {r['threads']} | {r['seconds']:.1f} ({runs}) "
                     f"| {r['iterations']} | {r['passes']} | {r['converged']} | {r['at_bound']} "
                     f"| {r['misfit_rms']:.2f} | {r['rss_before_MiB']:.0f} MiB | {r['rss_peak_MiB']:.0f} MiB "
                     f"| {field:.0f} MiB | {r['windowed_seconds']:.1f} "
                     f"| {100 * r['window_diff_p99']:.3f} %, {100 * r['window_diff_max']:.3f} % |")
    text = "\n".join(lines) + "\n"
    print(text, end="")
    out_dir = Path(args.out)
    out_dir.mkdir(parents=True, exist_ok=True)
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    (out_dir / f"regularised-{stamp}.md").write_text("# Regularised interval velocity: time and memory\n\n" + text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
