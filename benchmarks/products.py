"""Time and peak memory of ``velspec export`` and ``velspec report`` on a 2000-CMP result.

Generates a shot-ordered line of ``--cmps`` CMPs with few samples (48 channels, 25 m shots, so
24-trace CMPs; ``--samples`` samples at 4 ms, S/N 4, 3 % lateral change), runs ``velspec run`` on
it once, then runs each product command ``--repeat`` times, each in a fresh process, and reads
the wall time (measured around the child), the child's CPU time (user + system, which a busy
shared host disturbs less than the wall time) and its peak resident set size
(``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss``, one child at a time, as in memory.py):

- ``velspec export R.h5 --out DIR`` (fields, smoothed field, CSV; no line),
- ``velspec export R.h5 --out DIR --line L.sgy --cmp N`` (plus the NMO-corrected stack of the
  whole line, streamed one gather at a time, and one corrected gather),
- ``velspec report R.h5 --out DIR`` and ``velspec report R.h5 --out DIR --line L.sgy --cmp N``.

A process that only imports the modules (Python, NumPy, numba, h5py, segyio, matplotlib) is
timed the same way, for the share of start-up in each figure. Writes
``results/products-<UTC time>.json|md``.

usage: python benchmarks/products.py [--cmps 2000] [--samples 500] [--repeat 3]
"""

import argparse
import datetime as dt
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from velspec.synth import LineSpec, make_line

HERE = Path(__file__).resolve().parent


def timed_child(cmd: list[str]) -> tuple[float, float, int]:
    """(wall seconds, CPU seconds, peak RSS in bytes) of one child process."""
    script = ("import resource, subprocess, sys, time; t = time.perf_counter(); "
              "subprocess.run(sys.argv[1:], check=True, stdout=subprocess.DEVNULL); "
              "u = resource.getrusage(resource.RUSAGE_CHILDREN); "
              "print(time.perf_counter() - t, u.ru_utime + u.ru_stime, u.ru_maxrss)")
    out = subprocess.run([sys.executable, "-c", script, *cmd], check=True, capture_output=True, text=True)
    seconds, cpu, kib = out.stdout.split()
    return float(seconds), float(cpu), int(kib) * 1024


def size_of(folder: Path) -> int:
    return sum(p.stat().st_size for p in folder.iterdir())


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cmps", type=int, default=2000)
    ap.add_argument("--samples", type=int, default=500)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    velspec = str(Path(sys.executable).with_name("velspec"))
    load_before = os.getloadavg()
    record = {"cmps": args.cmps, "samples": args.samples, "fold": 24, "dt_s": 0.004, "repeat": args.repeat,
              "cpus": os.cpu_count(), "loadavg_before": load_before, "rows": []}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        line, result = tmp / "line.sgy", tmp / "result.h5"
        t = time.perf_counter()
        make_line(line, LineSpec(ncmp=args.cmps, channels=48, shot_interval=25.0, nsamples=args.samples,
                                 snr=4.0, lateral=0.03, seed=1))
        record["make_line_s"] = time.perf_counter() - t
        record["line_bytes"] = line.stat().st_size
        seconds, _, rss = timed_child([velspec, "run", str(line), "--out", str(result), "--quiet"])
        record["run_s"], record["run_peak_rss"] = seconds, rss
        mid = str(1001 + args.cmps // 2)
        imports = "import velspec.export, velspec.report, matplotlib.figure, matplotlib.backends.backend_agg"
        cases = [("imports only (no work)", [sys.executable, "-c", imports], None),
                 ("export", [velspec, "export", str(result)], "e"),
                 ("export --line --cmp", [velspec, "export", str(result), "--line", str(line), "--cmp", mid], "el"),
                 ("report", [velspec, "report", str(result)], "r"),
                 ("report --line --cmp", [velspec, "report", str(result), "--line", str(line), "--cmp", mid], "rl")]
        for label, cmd, out in cases:
            times, cpus, peaks, size = [], [], [], 0
            for _ in range(args.repeat):
                full = cmd + (["--out", str(tmp / out), "--force", "--quiet"] if out else [])
                seconds, cpu, rss = timed_child(full)
                times.append(seconds)
                cpus.append(cpu)
                peaks.append(rss)
            if out:
                size = size_of(tmp / out)
            record["rows"].append({"case": label, "seconds": times, "median_s": statistics.median(times),
                                   "best_s": min(times), "cpu_s": cpus, "median_cpu_s": statistics.median(cpus),
                                   "peak_rss": max(peaks), "output_bytes": size})
            print(label, f"{statistics.median(times):.2f} s", f"{max(peaks) / 2**20:.0f} MiB", flush=True)
    record["loadavg_after"] = os.getloadavg()
    stamp = dt.datetime.now(dt.UTC).strftime("%Y%m%dT%H%M%SZ")
    results = HERE / "results"
    results.mkdir(exist_ok=True)
    (results / f"products-{stamp}.json").write_text(json.dumps(record, indent=2))
    lines = [f"{args.cmps} CMPs x {args.samples} samples (4 ms), 24-trace CMPs, line {record['line_bytes'] / 2**20:.0f}"
             f" MiB; velspec run {record['run_s']:.1f} s, {record['run_peak_rss'] / 2**20:.0f} MiB; load average "
             f"before {load_before[0]:.2f}, after {record['loadavg_after'][0]:.2f}", "",
             f"| command | wall, median of {args.repeat} (s) | wall, best (s) | CPU, median (s) | peak RSS | output |",
             "|---|---|---|---|---|---|"]
    for row in record["rows"]:
        name = row["case"] if row["case"].startswith("imports") else f"`velspec {row['case']}`"
        output = f"{row['output_bytes'] / 2**20:.1f} MiB" if row["output_bytes"] else "-"
        lines.append(f"| {name} | {row['median_s']:.2f} | {row['best_s']:.2f} | {row['median_cpu_s']:.2f} | "
                     f"{row['peak_rss'] / 2**20:.0f} MiB | {output} |")
    (results / f"products-{stamp}.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
