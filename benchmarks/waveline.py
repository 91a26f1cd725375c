#!/usr/bin/env python
"""Make a wave-equation line of benchmark size, time it, and draw a shot and a CMP gather.

    python benchmarks/waveline.py                 # F03-02 model, 60 CMPs, fold 48, 3 s
    python benchmarks/waveline.py --score         # also run velspec on it and score the picks

The model is the open F03-02 sonic log (../shared/data/wells) blocked to ~20 m layers under
``--water`` m of sea water and an assumed 1650 m/s overburden (velspec.synth.sonic_wave_model),
with Gardner densities; past the middle CMP the sediments are ``--step`` faster (the second
part of the line). Without the log, velspec.synth.default_model stands in.

Writes ``benchmarks/results/waveline-<UTC time>.json`` and ``.md`` (timings, grid, load) and
``waveline-shot.png``, ``waveline-cmp.png``. Any velocity field found from such a line is a
first-pass field for qualified people to review; local regulations and licensed practice
prevail.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
WELLS = HERE.parent.parent / "shared" / "data" / "wells"


def parse_args(argv=None):
    ap = argparse.ArgumentParser(description="time a wave-equation line and draw its gathers")
    ap.add_argument("--las", default=str(WELLS / "F03-02.las"), help="sonic log (default the open F03-02)")
    ap.add_argument("--water", type=float, default=120.0, help="water depth, m (default 120)")
    ap.add_argument("--ncmp", type=int, default=60)
    ap.add_argument("--channels", type=int, default=96)
    ap.add_argument("--nsamples", type=int, default=751, help="at 4 ms (default 751: 3 s)")
    ap.add_argument("--snr", type=float, default=4.0)
    ap.add_argument("--step", type=float, default=0.03, help="fractional velocity step below the sea floor")
    ap.add_argument("--threads", type=int, default=0)
    ap.add_argument("--score", action="store_true", help="run velspec on the line and score it")
    ap.add_argument("--out", default=str(HERE / "results"))
    return ap.parse_args(argv)


def load():
    with open("/proc/loadavg") as fh:
        return float(fh.read().split()[0])


def main(argv=None):
    args = parse_args(argv)
    from velspec.synth import WaveLineSpec, default_model, make_wave_line, sonic_wave_model

    las = Path(args.las)
    if las.exists():
        h, v, rho = sonic_wave_model(las, water_depth=args.water)
        source = f"F03-02 sonic, {args.water:g} m water"
    else:
        h, v = default_model()
        rho = None
        source = "velspec.synth.default_model (F03-02 log not found)"
    vb = v * np.r_[1.0, np.full(v.size - 1, 1.0 + args.step)]
    rho_b = None if rho is None else np.r_[rho[0], 310.0 * vb[1:] ** 0.25]
    first = 1001
    spec = WaveLineSpec(ncmp=args.ncmp, channels=args.channels, nsamples=args.nsamples, snr=args.snr,
                        model=(h, v), density=rho, model_b=(h, vb), density_b=rho_b,
                        step_cmp=first + args.ncmp // 2, seed=3)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    with tempfile.TemporaryDirectory() as tmp:
        line = Path(tmp) / "wave.sgy"
        load_before = load()
        t0 = time.perf_counter()
        truth = make_wave_line(line, spec, threads=args.threads, progress=print)
        wall = time.perf_counter() - t0
        load_after = load()
        record = {
            "model": source, "layers": int(h.size), "ncmp": spec.ncmp, "fold": spec.fold(),
            "channels": spec.channels, "nsamples": spec.nsamples, "dt": spec.dt,
            "record_s": spec.delay + (spec.nsamples - 1) * spec.dt, "traces": truth.ntraces,
            "grid_spacing_m": truth.grid_spacing, "time_step_s": truth.time_step,
            "steps": int(round((spec.nsamples - 1) * spec.dt / truth.time_step)),
            "model_seconds": truth.model_seconds, "wall_seconds": wall,
            "load_before": load_before, "load_after": load_after, "threads": args.threads,
            "machine": {"cpus": os.cpu_count(), "python": platform.python_version()},
        }
        draw(line, truth, out)
        if args.score:
            record["score"] = score(line, truth)
    (out / f"waveline-{stamp}.json").write_text(json.dumps(record, indent=1))
    md = ["| figure | value |", "|---|---|"] + [f"| {k} | {v} |" for k, v in record.items()]
    (out / f"waveline-{stamp}.md").write_text("\n".join(md) + "\n")
    print("\n".join(md))


def draw(line, truth, out):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import segyio

    spec = truth.spec
    with segyio.open(line, ignore_geometry=True) as f:
        cdp = f.attributes(segyio.TraceField.CDP)[:]
        off = f.attributes(segyio.TraceField.offset)[:]
        data = f.trace.raw[:]
    t = np.arange(spec.nsamples) * spec.dt
    gain = np.where(t > 0, t, 0.0) ** spec.gain_power
    x_shot = spec.near_offset + np.arange(spec.channels) * spec.group_interval
    c = spec.first_cmp + (3 * spec.ncmp) // 4  # a CMP in the second part
    step = 100 * (truth.velocity[-1, 1] / truth.velocity[0, 1] - 1)
    panels = (("shot", truth.shots[0] * gain, x_shot,
               f"modelled shot of part 1, {spec.channels} channels, noise-free"),
              ("cmp", data[cdp == c], off[cdp == c], f"CMP {c} (part 2, {step:.0f} % faster), S/N {spec.snr:g}"))
    for name, g, x, title in panels:
        order = np.argsort(x)
        g, x = g[order], x[order]
        clip = np.percentile(np.abs(g), 99)
        fig, ax = plt.subplots(figsize=(7, 9))
        ax.imshow(g.T, aspect="auto", cmap="gray", vmin=-clip, vmax=clip,
                  extent=[x[0], x[-1], t[-1], t[0]])
        ax.set_xlabel("offset (m)")
        ax.set_ylabel("time (s)")
        ax.set_title(f"Synthetic wave-equation line: {title}\n"
                     f"(gain t^{spec.gain_power:g}, clip at the 99th percentile)",
                     fontsize=10)
        fig.tight_layout()
        fig.savefig(out / f"waveline-{name}.png", dpi=90)
        plt.close(fig)


def score(line, truth):
    from velspec.params import RunParams
    from velspec.pipeline import run_line
    from velspec.synth.score import score_line

    params = RunParams().validate()
    t0 = time.perf_counter()
    result = run_line(line, params)
    seconds = time.perf_counter() - t0
    multiples = truth.multiple_events(stretch_limit=params.scan.stretch_limit)
    s = score_line(result, truth, params.scan.stretch_limit, multiples=multiples).summary()
    s["run_seconds"] = seconds
    return s


if __name__ == "__main__":
    main()
