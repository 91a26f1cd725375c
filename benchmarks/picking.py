"""Accuracy of the automatic picker on generated lines, against exact ray-traced answers.

    python benchmarks/picking.py            # every scenario, figures to results/picking-*.md|json
    python benchmarks/picking.py reverb     # one scenario
    python benchmarks/picking.py --variants # robustness: other seeds, water depths, noise

Scenarios (all invented or built from the open logs in ../shared/data/wells):

- ``demo``: the built-in demo line (S/N 4, 3 % lateral change, no multiples).
- ``reverb``: S/N 1, 180 m of water over a hard sea floor (R = 0.4), sea-floor reverberations to
  order 6 and peg-legs to 3 extra water round trips, 3 % lateral change (velspec.synth.reverb_spec).
- ``f03``: a line over the F03-02 sonic log blocked to 40 ms layers; overburden assumed: 40 m of
  sea water at 1480 m/s, then 1650 m/s down to the first log sample at 305 m; S/N 2, 2 % lateral.
- ``p135``: a short-time line over the P-135 sonic log (fast rock, 259-939 m) blocked to 40 ms
  layers; overburden assumed: 259 m at 2800 m/s from the surface; S/N 2, 2 ms, 40 Hz; the
  picker's rise limit raised to 8000 (m/s)/s and picks allowed 60 ms apart (fast shallow rock).

Errors are those of :func:`velspec.synth.score.score_line`: stacking velocity at reflector times
against the best-fit hyperbola of exact Snell's-law times over the spread the run used (a value
between that and the RMS velocity counts as right); interval velocity as 150 ms time averages
against the model's layer velocities.
"""

from __future__ import annotations

import json
import re
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from velspec.io.las import read_las
from velspec.params import RunParams
from velspec.pipeline import run_line
from velspec.synth import LineSpec, blocked_model_from_sonic, demo_spec, make_line, reverb_spec
from velspec.synth.score import score_line

HERE = Path(__file__).resolve().parent
WELLS = HERE.parent.parent / "shared" / "data" / "wells"


def sonic_line_spec(las_path, water=0.0, water_velocity=1480.0, overburden_velocity=1650.0,
                    block=0.04, ncmp=20, snr=2.0, lateral=0.02, nsamples=700, seed=11, **extra) -> LineSpec:
    """A line over a sonic log: the log blocked to layers of ``block`` s two-way time, under
    ``water`` m of water and an overburden of ``overburden_velocity`` down to the first sample."""
    curves, _, _ = read_las(las_path)
    thickness, velocity = blocked_model_from_sonic(curves["DEPT"], curves["DT"], overburden_velocity=overburden_velocity,
                                                   min_two_way=block, datum_depth=water)
    if water > 0:
        thickness = np.concatenate(([water], thickness))
        velocity = np.concatenate(([water_velocity], velocity))
    return LineSpec(ncmp=ncmp, model=(thickness, velocity), snr=snr, nsamples=nsamples, seed=seed, lateral=lateral,
                    **extra)


def p135_spec(**kw) -> LineSpec:
    """Short-time line over P-135: 2 ms sampling and a 40 Hz wavelet, as a shallow survey would
    record; overburden assumed 259 m at 2800 m/s."""
    args = dict(overburden_velocity=2800.0, block=0.04, nsamples=300, lateral=0.0, dt=0.002, peak_frequency=40.0)
    args.update(kw)
    return sonic_line_spec(WELLS / "P-135.las", **args)


def p135_params() -> RunParams:
    """Fast shallow rock: the stacking velocity rises by ~6000 (m/s)/s below the overburden, so
    the rate limit is raised (a processor would do the same) and picks may lie 60 ms apart."""
    return RunParams().with_overrides(pick__max_increase=8000.0, pick__min_separation=0.06).validate()


def scenarios() -> dict:
    out = {"demo": demo_spec(), "reverb": reverb_spec()}
    if (WELLS / "F03-02.las").exists():
        out["f03"] = sonic_line_spec(WELLS / "F03-02.las", water=40.0)
    if (WELLS / "P-135.las").exists():
        out["p135"] = p135_spec()
    return out


def variants() -> dict:
    """Robustness: the reverberant scenario under other seeds, water depths and noise (50 CMPs
    each), and the F03-02 line at S/N 1 and with first-order multiples."""
    from velspec.synth import reverb_model

    out = {}
    for seed in (1, 2, 3):
        sp = reverb_spec()
        sp.seed, sp.ncmp = seed, 50
        out[f"reverb seed {seed}"] = (sp, None)
    h, v = reverb_model()
    for water, given in ((100.0, False), (100.0, True), (250.0, False)):
        hh = h.copy()
        hh[0] = water
        sp = reverb_spec()
        sp.model, sp.ncmp = (hh, v), 50
        params = (RunParams().with_overrides(pick__water_bottom=2 * water / v[0], pick__water_velocity=float(v[0]))
                  .validate() if given else None)
        out[f"reverb water {water:.0f} m{' (water_bottom given)' if given else ''}"] = (sp, params)
    sp = reverb_spec()
    sp.snr, sp.ncmp = 0.5, 50
    out["reverb S/N 0.5"] = (sp, None)
    if (WELLS / "F03-02.las").exists():
        out["f03 S/N 1"] = (sonic_line_spec(WELLS / "F03-02.las", water=40.0, snr=1.0), None)
        out["f03 + first-order multiples"] = (sonic_line_spec(WELLS / "F03-02.las", water=40.0, multiples=True), None)
    return out


def measure(name: str, spec: LineSpec, workdir: Path, params: RunParams | None = None) -> dict:
    path = workdir / f"{name}.sgy"
    truth = make_line(path, spec)
    params = params or RunParams().validate()
    start = time.perf_counter()
    result = run_line(path, params)
    elapsed = time.perf_counter() - start
    multiples = truth.multiple_events(stretch_limit=params.scan.stretch_limit)
    score = score_line(result, truth, params.scan.stretch_limit, multiples=multiples)
    summary = score.summary()
    summary.update(cmps=int(len(result.cmp)), seconds=round(elapsed, 2),
                   quality_counts=np.bincount(result.qc["quality"], minlength=3).tolist(),
                   outliers=int(((result.picks["flags"] & 16) != 0).sum()))
    return summary


def main(argv: list[str]) -> int:
    table = {}
    with tempfile.TemporaryDirectory() as tmp:
        if argv == ["--variants"]:
            runs = variants()
        else:
            chosen = argv or list(scenarios())
            runs = {name: (spec, p135_params() if name == "p135" else None)
                    for name, spec in scenarios().items() if name in chosen}
        for name, (spec, params) in runs.items():
            table[name] = measure(re.sub(r"[^A-Za-z0-9]+", "_", name), spec, Path(tmp), params)
            print(name, json.dumps(table[name]))
    stamp = ("variants-" if argv == ["--variants"] else "") + datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    results = HERE / "results"
    results.mkdir(exist_ok=True)
    (results / f"picking-{stamp}.json").write_text(json.dumps(table, indent=2))
    lines = ["| scenario | CMPs | vrms median % | vrms p95 % | vrms max % | vint median % | vint p90 % "
             "| used picks | picks on multiples | flagged multiples | quality good/fair/poor |",
             "|---|---|---|---|---|---|---|---|---|---|---|"]
    for name, s in table.items():
        q = "/".join(map(str, s["quality_counts"]))
        lines.append(f"| {name} | {s['cmps']} | {s['vrms_median_pct']:.2f} | {s['vrms_p95_pct']:.2f} | "
                     f"{s['vrms_max_pct']:.2f} | {s['vint_median_pct']:.2f} | {s['vint_p90_pct']:.2f} | "
                     f"{s['used_picks']} | {s['picks_on_multiples']} | {s['flagged_multiples']} | {q} |")
    (results / f"picking-{stamp}.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
