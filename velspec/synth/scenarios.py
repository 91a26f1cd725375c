"""The generated scenarios that tests and benchmarks score the picker on, and how they are run.

Each scenario is a :class:`~velspec.synth.line.LineSpec` (invented, or built from the open logs in
``../shared/data/wells``) with, where a processor would set them before seeing the answer, its
run parameters. :func:`run_scenario` makes the line, runs velspec on it and scores the result
against the exact ray-traced answers (:func:`velspec.synth.score.score_line`).
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np

from velspec.flags import Flag
from velspec.io.las import read_las
from velspec.params import RunParams
from velspec.synth.line import LineSpec, demo_spec, make_line, reverb_spec
from velspec.synth.score import score_line
from velspec.synth.wells import blocked_model_from_sonic


def _wells() -> Path:
    # $VELSPEC_WELLS, else ../shared/data/wells beside the checkout (found from the package when
    # installed in place, or from the working folder, as tests and benchmarks run from the root)
    if os.environ.get("VELSPEC_WELLS"):
        return Path(os.environ["VELSPEC_WELLS"])
    for base in (Path(__file__).resolve().parents[2], Path.cwd()):
        candidate = base.parent / "shared" / "data" / "wells"
        if candidate.is_dir():
            return candidate
    return Path.cwd().parent / "shared" / "data" / "wells"


WELLS = _wells()
"""Where the open well logs are: ``$VELSPEC_WELLS``, else ``../shared/data/wells`` beside the checkout."""


def sonic_line_spec(las_path, water=0.0, water_velocity=1480.0, overburden_velocity=1650.0,
                    block=0.04, ncmp=20, snr=2.0, lateral=0.02, nsamples=700, seed=11, **extra) -> LineSpec:
    """A line over a sonic log: the log blocked to layers of ``block`` s two-way time, under
    ``water`` m of water and an overburden of ``overburden_velocity`` down to the first sample."""
    curves, _, _ = read_las(las_path)
    thickness, velocity = blocked_model_from_sonic(curves["DEPT"], curves["DT"],
                                                   overburden_velocity=overburden_velocity, min_two_way=block,
                                                   datum_depth=water)
    if water > 0:
        thickness = np.concatenate(([water], thickness))
        velocity = np.concatenate(([water_velocity], velocity))
    return LineSpec(ncmp=ncmp, model=(thickness, velocity), snr=snr, nsamples=nsamples, seed=seed, lateral=lateral,
                    **extra)


def gradient_layers(top: float, bottom: float, v_top: float, v_bottom: float, step: float = 20.0):
    """Layers of ``step`` m (or less) from depth ``top`` to ``bottom`` whose velocity rises
    linearly from ``v_top`` to ``v_bottom``, m/s: a compacting soft-sediment overburden."""
    n = max(1, int(np.ceil((bottom - top) / step - 1e-9)))
    edges = np.linspace(top, bottom, n + 1)
    mid = 0.5 * (edges[1:] + edges[:-1])
    return np.diff(edges), v_top + (v_bottom - v_top) * (mid - top) / max(bottom - top, 1e-9)


def f03_marine_spec(water: float = 60.0, *, hard: bool = True, snr: float = 1.5, seed: int = 21, ncmp: int = 48,
                    block_depth: float = 20.0, sediment_velocity: float = 1600.0, water_velocity: float = 1490.0,
                    lateral: float = 0.02, nsamples: int = 700, **extra) -> LineSpec:
    """A marine line over the F03-02 log at its own resolution, under a soft-sediment gradient.

    The log (305-2146 m, its velocity inversion near 1.1-1.6 km kept) blocked to ``block_depth``
    layers; above it, from the sea floor down to the first log sample, a compacting overburden
    whose velocity rises linearly from ``sediment_velocity`` to the log's first block (assumed:
    the log says nothing above 305 m); ``water`` m of sea water on top. A ``hard`` sea floor has
    a reflection coefficient of 0.4 with reverberations to order 6 and peg-legs of every
    reflector to 3 extra water round trips; a soft one 0.2 with reverberations and peg-legs to
    order 2 (weak multiples).
    """
    curves, _, _ = read_las(WELLS / "F03-02.las")
    h_log, v_log = blocked_model_from_sonic(curves["DEPT"], curves["DT"], overburden_velocity=sediment_velocity,
                                            block_depth=block_depth, datum_depth=water)
    # the log starts at 305 m; its first layer is the assumed overburden, replaced by a gradient
    top_log = water + h_log[0]
    h_grad, v_grad = gradient_layers(water, top_log, sediment_velocity, float(v_log[1]), step=block_depth)
    thickness = np.concatenate(([water], h_grad, h_log[1:]))
    velocity = np.concatenate(([water_velocity], v_grad, v_log[1:]))
    multiples = dict(seafloor_reflection=0.4, reverberation_order=6, pegleg_order=3, multiples=False) if hard else \
        dict(seafloor_reflection=0.2, reverberation_order=2, pegleg_order=2)
    multiples.update(extra)
    return LineSpec(ncmp=ncmp, model=(thickness, velocity), snr=snr, nsamples=nsamples, seed=seed, lateral=lateral,
                    **multiples)


def gas_sand_spec(*, snr: float = 2.0, seed: int = 23, ncmp: int = 48, **extra) -> LineSpec:
    """An invented shelf model with a gas sand 20 % slower than the shale above it.

    200 m of water, soft clastics, a 2300 m/s shale over a 150 m gas sand at 1840 m/s (20 %
    slower), then faster clastics and carbonates; the sea floor's own impedance contrast with
    reverberations and peg-legs to order 2.
    """
    thickness = np.array([200.0, 350.0, 450.0, 500.0, 150.0, 600.0, 700.0, 900.0])
    velocity = np.array([1500.0, 1750.0, 2000.0, 2300.0, 1840.0, 2600.0, 3100.0, 3600.0, 4200.0])
    args = dict(reverberation_order=2, pegleg_order=2, lateral=0.02, nsamples=800)
    args.update(extra)
    return LineSpec(ncmp=ncmp, model=(thickness, velocity), snr=snr, seed=seed, **args)


def wave_f03_spec(water: float = 60.0, *, snr: float = 2.0, step: float = 0.03, seed: int = 31, ncmp: int = 48,
                  nsamples: int = 625):
    """A line modelled by the 2D acoustic wave equation over the F03-02 log (20 m blocks, an
    assumed 1650 m/s overburden, Gardner densities, 1025 kg/m^3 water), with ``water`` m of sea
    water and, past the middle CMP, sediments ``step`` faster (a fault or facies change): direct
    and head waves, guided waves, ghosts and every multiple come from the physics.
    """
    from velspec.synth.waveline import WaveLineSpec, sonic_wave_model

    h, v, rho = sonic_wave_model(WELLS / "F03-02.las", water_depth=water)
    vb = v * np.r_[1.0, np.full(v.size - 1, 1.0 + step)]
    rho_b = np.r_[rho[0], 310.0 * vb[1:] ** 0.25]
    return WaveLineSpec(ncmp=ncmp, nsamples=nsamples, snr=snr, model=(h, v), density=rho, model_b=(h, vb),
                        density_b=rho_b, step_cmp=1001 + ncmp // 2, seed=seed)


def make_scenario_line(path, spec):
    """Write the line of a scenario spec (ray-traced or wave-equation) and return its truth."""
    if type(spec).__name__ == "WaveLineSpec":
        from velspec.synth.waveline import make_wave_line

        return make_wave_line(path, spec)
    return make_line(path, spec)


def p135_spec(**kw) -> LineSpec:
    """Short-time line over P-135: 2 ms sampling and a 40 Hz wavelet, as a shallow survey would
    record; overburden assumed 259 m at 2800 m/s."""
    args = dict(overburden_velocity=2800.0, block=0.04, nsamples=300, lateral=0.0, dt=0.002, peak_frequency=40.0)
    args.update(kw)
    return sonic_line_spec(WELLS / "P-135.las", **args)


def p135_params() -> RunParams:
    """A record of 0.6 s over thin fast layers: picks may lie 60 ms apart (a processor sets the
    separation to the record and its layering before any analysis); everything else default."""
    return RunParams().with_overrides(pick__min_separation=0.06).validate()


def scenarios() -> dict:
    """``{name: (spec, params or None)}`` of the scenarios in the README's accuracy table."""
    out = {"demo": (demo_spec(), None), "reverb": (reverb_spec(), None), "gas sand": (gas_sand_spec(), None)}
    if (WELLS / "F03-02.las").exists():
        out["f03"] = (sonic_line_spec(WELLS / "F03-02.las", water=40.0), None)
        out["f03 shallow water"] = (f03_marine_spec(60.0, hard=False, snr=2.0), None)
        for water in (60.0, 120.0, 250.0):
            out[f"f03 water {water:.0f} m"] = (f03_marine_spec(water, hard=True, snr=1.0 if water == 120 else 1.5),
                                              None)
    if (WELLS / "P-135.las").exists():
        out["p135"] = (p135_spec(), p135_params())
    return out


def wave_scenarios() -> dict:
    """The wave-equation lines over F03-02 (60, 150 and 300 m of water, a 3 % step)."""
    if not (WELLS / "F03-02.las").exists():
        return {}
    return {f"wave water {w:.0f} m": (wave_f03_spec(w, snr=snr), None)
            for w, snr in ((60.0, 2.0), (150.0, 1.5), (300.0, 2.0))}


def variants() -> dict:
    """Robustness, on seeds never used while the picker was tuned (101-103): the reverberant line,
    the F03-02 marine lines and the gas sand under other noise; other water depths; S/N 0.5; and
    the wave-equation line at 150 m under another seed."""
    from velspec.synth.line import reverb_model

    out = {}
    for seed in (101, 102, 103):
        sp = reverb_spec()
        sp.seed, sp.ncmp = seed, 50
        out[f"reverb seed {seed}"] = (sp, None)
    h, v = reverb_model()
    for water in (100.0, 250.0):
        hh = h.copy()
        hh[0] = water
        sp = reverb_spec()
        sp.model, sp.ncmp, sp.seed = (hh, v), 50, 101
        out[f"reverb water {water:.0f} m"] = (sp, None)
    sp = reverb_spec()
    sp.snr, sp.ncmp, sp.seed = 0.5, 50, 101
    out["reverb S/N 0.5"] = (sp, None)
    out["gas sand seed 101"] = (gas_sand_spec(seed=101), None)
    if (WELLS / "F03-02.las").exists():
        out["f03 shallow water seed 101"] = (f03_marine_spec(60.0, hard=False, snr=2.0, seed=101), None)
        for water in (60.0, 120.0, 250.0):
            out[f"f03 water {water:.0f} m seed 102"] = (
                f03_marine_spec(water, hard=True, snr=1.0 if water == 120 else 1.5, seed=102), None)
        out["wave water 150 m seed 103"] = (wave_f03_spec(150.0, snr=1.5, seed=103), None)
    return out


def run_scenario(name: str, spec: LineSpec, workdir: str | Path, params: RunParams | None = None) -> dict:
    """Make the line of ``spec`` in ``workdir``, run velspec on it and score it: a summary dict
    (:meth:`velspec.synth.score.Score.summary` plus CMPs, seconds, quality counts, outliers)."""
    from velspec.pipeline import run_line

    path = Path(workdir) / f"{name}.sgy"
    truth = make_scenario_line(path, spec)
    params = params or RunParams().validate()
    start = time.perf_counter()
    result = run_line(path, params)
    elapsed = time.perf_counter() - start
    multiples = truth.multiple_events(stretch_limit=params.scan.stretch_limit)
    score = score_line(result, truth, params.scan.stretch_limit, multiples=multiples)
    summary = score.summary()
    summary.update(cmps=int(len(result.cmp)), seconds=round(elapsed, 2),
                   quality_counts=np.bincount(result.qc["quality"], minlength=3).tolist(),
                   outliers=int(((result.picks["flags"] & int(Flag.lateral_outlier)) != 0).sum()))
    return summary
