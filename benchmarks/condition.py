"""What gather conditioning costs per CMP, step by step, beside the scan of the same gather.

    python benchmarks/condition.py            # about 30 s; prints a Markdown table

The gather is the standard one of the README: 96 traces, 1500 samples at 4 ms (offsets 100 m to
2475 m), here with a direct wave at 1500 m/s, three primaries at their Snell's-law times, weak
noise, one spike, one noisy and one dead trace. Each figure is the best call over a window of
seconds (this machine has slow spells), wall and process CPU time; the scan is ``scan_gather``
with the default ``ScanParams`` on all cores, the conditioning steps are serial.
"""

from __future__ import annotations

import os
import time

import numpy as np

from velspec.condition import (
    agc,
    apply_top_mute,
    bandpass,
    clip_spikes,
    condition_gather,
    first_breaks,
    fit_first_breaks,
    spherical_divergence_gain,
    trace_outliers,
)
from velspec.params import ConditionParams, ScanParams
from velspec.scan import scan_gather, velocity_axis
from velspec.synth.layers import reflection_times
from velspec.synth.line import ricker

DT, NS, NTR = 0.004, 1500, 96


def gather(seed: int = 1) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = 100.0 + 25.0 * np.arange(NTR)
    t = DT * np.arange(NS)
    times, _ = reflection_times([400.0, 600.0, 800.0], [1500.0, 1900.0, 2400.0, 3000.0], x)
    tau = t[None, :] - x[:, None] / 1500.0
    data = 5.0 * np.where(tau >= 0, np.sin(2 * np.pi * 25 * tau) * np.exp(-37.5 * np.maximum(tau, 0)), 0.0)
    for k in range(times.shape[0]):
        data += ricker(t[None, :] - times[k][:, None], 25.0)
    data += 0.05 * rng.standard_normal(data.shape)
    data[30] *= 12.0
    data[50] = 0.0
    data[70, 900] = 80.0
    return data.astype(np.float32), x


def best(fn, seconds: float = 3.0) -> tuple[float, float]:
    """Best wall time and best process CPU time of ``fn`` over ``seconds``, s.

    The conditioning steps are serial, so their CPU time is what they cost wherever the
    scheduler puts them; the scan uses every core, so its CPU time is summed over threads.
    """
    fn()
    wall, cpu, end = np.inf, np.inf, time.perf_counter() + seconds
    while time.perf_counter() < end:
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall, cpu = min(wall, time.perf_counter() - t0), min(cpu, time.process_time() - c0)
    return wall, cpu


def main() -> None:
    print(f"load before: {open('/proc/loadavg').read().split()[:3]}, cores {os.cpu_count()}")
    data, x = gather()
    p = ConditionParams()
    sp = ScanParams()
    v = velocity_axis(sp.vmin, sp.vmax, sp.nvel, sp.axis)
    filtered = bandpass(data, DT)
    rows = [
        ("spike clipping", lambda: clip_spikes(data, DT)),
        ("noisy / dead traces", lambda: trace_outliers(data)),
        ("band-pass 4-60 Hz", lambda: bandpass(data, DT)),
        ("first breaks + fit", lambda: fit_first_breaks(x, first_breaks(filtered, DT, 0.0, 0.03), 7, 0.008)),
        ("top mute, applied", lambda: apply_top_mute(filtered, DT, 0.0, x / 1500.0 + 0.06, 0.03)),
        ("spherical gain", lambda: filtered * spherical_divergence_gain(NS, DT, 0.0, p.gain_velocity)[None, :]),
        ("AGC 0.5 s", lambda: agc(data, DT, 0.5)),
        ("condition_gather, defaults", lambda: condition_gather(data, x, DT, 0.0, p)),
        ("condition_gather, AGC", lambda: condition_gather(data, x, DT, 0.0, ConditionParams(gain="agc"))),
        ("scan_gather, default scan", lambda: scan_gather(data, x, DT, 0.0, v, window=sp.window,
                                                          stretch_limit=sp.stretch_limit)),
    ]
    times = {name: best(fn) for name, fn in rows}
    scan = times["scan_gather, default scan"][0]
    print(f"\nGather {NTR} x {NS} at {DT * 1000:g} ms; best call over 3 s each\n")
    print("| step | wall ms per gather | CPU ms per gather | wall, share of the scan's |\n|---|---:|---:|---:|")
    for name, (wall, cpu) in times.items():
        print(f"| {name} | {wall * 1000:.2f} | {cpu * 1000:.2f} | {wall / scan:.0%} |")
    print(f"\nload after: {open('/proc/loadavg').read().split()[:3]}")


if __name__ == "__main__":
    main()
