"""Large lines: peak memory on a line of several GB, the cost of a resume, and Dask against threads.

Parts (each in fresh child processes, one at a time, so every figure is a ratio within one run):

- ``big``: a line of at least ``--gb`` GB (default 5) made by ``velspec.synth.make_line`` in a
  temporary folder (deleted after); peak RSS of ``velspec run`` on it
  (``ru_maxrss`` of the child). Refuses to start with less than 2.4 x the line free on disk.
- ``resume``: a whole run, then a run killed with SIGKILL once half its blocks are recorded done
  (read from the partial file), then ``--resume``: the resume's time over the whole run's.
- ``dask``: the same line on ``--threads 2`` in one process and on ``--workers 2`` (a local
  Dask cluster of two one-thread processes, its start-up included): throughput ratio.

The load average is recorded before and after each part (the machine is shared).
Writes ``results/scale-<UTC time>.md`` and ``.json``.

usage: python benchmarks/scale.py [--part big resume dask] [--gb 5] [--cmps 1200]
"""

import argparse
import datetime
import json
import os
import platform
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from velspec.io.hdf5 import partial_path
from velspec.partial import partial_state
from velspec.synth import LineSpec, make_line

HERE = Path(__file__).resolve().parent
VELSPEC = str(Path(sys.executable).with_name("velspec"))


def cpu_model() -> str:
    for row in Path("/proc/cpuinfo").read_text().splitlines():
        if row.startswith("model name"):
            return row.split(":", 1)[1].strip()
    return platform.processor()


def load() -> float:
    return float(Path("/proc/loadavg").read_text().split()[0])


def timed_rss(cmd: list[str]) -> tuple[float, int]:
    """Wall time (s) and peak RSS (bytes) of one child process."""
    script = ("import resource, subprocess, sys, time; t = time.perf_counter(); "
              "subprocess.run(sys.argv[1:], check=True, stdout=subprocess.DEVNULL); "
              "print(time.perf_counter() - t, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")
    out = subprocess.run([sys.executable, "-c", script, *cmd], check=True, capture_output=True, text=True)
    wall, kib = out.stdout.split()
    return float(wall), int(kib) * 1024


def part_big(tmp: Path, gb: float, nvel: int) -> dict:
    nsamples = 1500
    per_cmp = 48 * (240 + 4 * nsamples)     # 96 channels, 25 m shots and groups: 48-fold CMPs
    ncmp = int(gb * 1e9 / per_cmp) + 1
    free = shutil.disk_usage(tmp).free
    if free < 2.4 * gb * 1e9:
        raise SystemExit(f"only {free / 1e9:.1f} GB free in {tmp}; the big part needs {2.4 * gb:.1f} GB")
    line = tmp / "big.sgy"
    t = time.perf_counter()
    make_line(line, LineSpec(ncmp=ncmp, nsamples=nsamples, snr=4.0, seed=1))
    made = time.perf_counter() - t
    before = load()
    wall, rss = timed_rss([VELSPEC, "run", str(line), "--out", str(tmp / "big.h5"), "--quiet", "--nvel", str(nvel)])
    row = {"cmps": ncmp, "line_bytes": line.stat().st_size, "result_bytes": (tmp / "big.h5").stat().st_size,
           "peak_rss": rss, "wall_s": wall, "make_s": made, "nvel": nvel, "load_before": before, "load_after": load()}
    line.unlink()
    (tmp / "big.h5").unlink()
    return row


def _killed_at_half(cmd: list[str], out: Path) -> tuple[float, int, int]:
    t = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    state = None
    while proc.poll() is None:
        state = partial_state(partial_path(out)) if partial_path(out).exists() else None
        if state and state[0] >= state[1] // 2:
            proc.send_signal(signal.SIGKILL)
            break
        time.sleep(0.05)
    proc.wait()
    return time.perf_counter() - t, *(state or (0, 0))


def part_resume(tmp: Path, ncmp: int, nvel: int) -> dict:
    line = tmp / "line.sgy"
    make_line(line, LineSpec(ncmp=ncmp, nsamples=1500, snr=4.0, seed=2))
    base = [VELSPEC, "run", str(line), "--quiet", "--nvel", str(nvel)]
    before = load()
    whole, _ = timed_rss([*base, "--out", str(tmp / "whole.h5")])
    cut_s, done, total = _killed_at_half([*base, "--out", str(tmp / "cut.h5")], tmp / "cut.h5")
    resume, _ = timed_rss([*base, "--out", str(tmp / "cut.h5"), "--resume"])
    same = subprocess.run([VELSPEC, "compare", str(tmp / "cut.h5"), str(tmp / "whole.h5"), "--exact", "--quiet"]).returncode
    return {"cmps": ncmp, "nvel": nvel, "whole_s": whole, "killed_after_s": cut_s, "blocks_done_at_kill": done,
            "blocks": total, "resume_s": resume, "resume_over_whole": resume / whole, "bit_identical": same == 0,
            "load_before": before, "load_after": load()}


def part_dask(tmp: Path, ncmp: int, nvel: int) -> dict:
    line = tmp / "line.sgy"
    if not line.exists():
        make_line(line, LineSpec(ncmp=ncmp, nsamples=1500, snr=4.0, seed=2))
    base = [VELSPEC, "run", str(line), "--quiet", "--nvel", str(nvel), "--force"]
    before = load()
    threads, rss_t = timed_rss([*base, "--out", str(tmp / "t.h5"), "--threads", "2"])
    workers, rss_w = timed_rss([*base, "--out", str(tmp / "w.h5"), "--workers", "2"])
    same = subprocess.run([VELSPEC, "compare", str(tmp / "w.h5"), str(tmp / "t.h5"), "--exact", "--quiet"]).returncode
    return {"cmps": ncmp, "nvel": nvel, "threads_s": threads, "workers_s": workers,
            "throughput_workers_over_threads": threads / workers, "client_rss_threads": rss_t,
            "client_rss_workers": rss_w, "bit_identical": same == 0, "load_before": before, "load_after": load()}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--part", nargs="+", default=["big", "resume", "dask"], choices=["big", "resume", "dask"])
    ap.add_argument("--gb", type=float, default=5.0)
    ap.add_argument("--cmps", type=int, default=1200)
    ap.add_argument("--nvel", type=int, default=60)
    ap.add_argument("--tmp", default=None, help="folder for the generated lines (default: the system's)")
    args = ap.parse_args()
    rows = {"cpu": cpu_model(), "cores": os.cpu_count()}
    with tempfile.TemporaryDirectory(dir=args.tmp) as tmp:
        tmp = Path(tmp)
        if "big" in args.part:
            rows["big"] = part_big(tmp, args.gb, args.nvel)
        if "resume" in args.part:
            rows["resume"] = part_resume(tmp, args.cmps, args.nvel)
        if "dask" in args.part:
            rows["dask"] = part_dask(tmp, args.cmps, args.nvel)
    md = [f"CPU: {rows['cpu']}, {rows['cores']} cores", ""]
    if "big" in rows:
        b = rows["big"]
        md += ["| line | CMPs | result | peak RSS of `velspec run` | wall | load before/after |", "|---|---|---|---|---|---|",
               f"| {b['line_bytes'] / 1e9:.2f} GB | {b['cmps']} | {b['result_bytes'] / 1e6:.0f} MB | "
               f"{b['peak_rss'] / 2**20:.0f} MiB | {b['wall_s']:.0f} s | {b['load_before']:.1f}/{b['load_after']:.1f} |", ""]
    if "resume" in rows:
        r = rows["resume"]
        md += ["| CMPs | whole run | killed at blocks | resume | resume / whole | same bits | load before/after |",
               "|---|---|---|---|---|---|---|",
               f"| {r['cmps']} | {r['whole_s']:.1f} s | {r['blocks_done_at_kill']} of {r['blocks']} | "
               f"{r['resume_s']:.1f} s | {r['resume_over_whole']:.2f} | {r['bit_identical']} | "
               f"{r['load_before']:.1f}/{r['load_after']:.1f} |", ""]
    if "dask" in rows:
        d = rows["dask"]
        md += ["| CMPs | `--threads 2` | `--workers 2` | throughput workers / threads | same bits | load before/after |",
               "|---|---|---|---|---|---|",
               f"| {d['cmps']} | {d['threads_s']:.1f} s | {d['workers_s']:.1f} s | "
               f"{d['throughput_workers_over_threads']:.2f} | {d['bit_identical']} | "
               f"{d['load_before']:.1f}/{d['load_after']:.1f} |", ""]
    text = "\n".join(md)
    print(text)
    stamp = datetime.datetime.now(datetime.UTC).strftime("%Y%m%dT%H%M%SZ")
    results = HERE / "results"
    results.mkdir(exist_ok=True)
    (results / f"scale-{stamp}.md").write_text(text + "\n")
    (results / f"scale-{stamp}.json").write_text(json.dumps(rows, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
