"""Peak memory of ``velspec run`` against line length.

Generates shot-ordered lines of several lengths (96-trace CMPs, 1500 samples at 4 ms), runs
``velspec run`` on each in a fresh process and reads that process's peak resident set size
(``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss`` after it exits, one child at a time). Prints
a Markdown table: line size, peak RSS, and the size of the output fields (ncmp x nt float32
arrays) that a run holding them would need: ``velspec run`` streams them to disk, so its peak
should not follow that column.

usage: python benchmarks/memory.py [--cmps 50 200 800]
"""

import argparse
import os
import subprocess
import sys
import tempfile
from pathlib import Path

from velspec.synth import LineSpec, make_line

# vrms, vint, vint_sigma, qc/vint_raw, qc/path, qc/vint_forced (uint8, counted as 4 B), depth t0/vint, ...
FIELDS_PER_CMP = 10


def peak_rss_of(cmd: list[str]) -> int:
    """Peak RSS in bytes of one child process (Linux reports ru_maxrss in KiB)."""
    script = ("import resource, subprocess, sys; subprocess.run(sys.argv[1:], check=True, "
              "stdout=subprocess.DEVNULL); print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")
    out = subprocess.run([sys.executable, "-c", script, *cmd], check=True, capture_output=True, text=True)
    return int(out.stdout.strip()) * 1024


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cmps", type=int, nargs="+", default=[50, 200, 800])
    args = ap.parse_args()
    velspec = str(Path(sys.executable).with_name("velspec"))
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.cmps:
            line = Path(tmp) / f"line{n}.sgy"
            make_line(line, LineSpec(ncmp=n, shot_interval=12.5, nsamples=1500, snr=4.0, seed=1))
            rss = peak_rss_of([velspec, "run", str(line), "--out", str(Path(tmp) / f"r{n}.h5"), "--quiet"])
            fields = n * 1500 * 4 * FIELDS_PER_CMP
            rows.append((n, os.path.getsize(line), rss, fields))
            line.unlink()
    print("| CMPs | line size | peak RSS of `velspec run` | output fields if held (approx.) |")
    print("|---|---|---|---|")
    for n, size, rss, fields in rows:
        print(f"| {n} | {size / 2**20:.0f} MiB | {rss / 2**20:.0f} MiB | {fields / 2**20:.0f} MiB |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
