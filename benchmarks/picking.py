"""Accuracy of the automatic picker on generated lines, against exact answers, default parameters.

    python benchmarks/picking.py             # every scenario, figures to results/picking-*.md|json
    python benchmarks/picking.py reverb      # one scenario (names as in the table)
    python benchmarks/picking.py --variants  # robustness: seeds never used while tuning, other depths, noise
    python benchmarks/picking.py --condition-steps [DIR]   # each conditioning step switched on the wave-equation
                                                           # lines (DIR: lines made before, DIR/<name>/line.sgy
                                                           # and truth.pkl, else made afresh)

The scenarios are those of :mod:`velspec.synth.scenarios` (invented, or built from the open logs
in ../shared/data/wells), ray-traced (:func:`velspec.synth.make_line`) or modelled by the 2D
acoustic wave equation (:mod:`velspec.synth.waveline`). Scoring is
:func:`velspec.synth.score.score_line`: the stacking-velocity field on every t0 sample from 0.3 s to
the deepest reflector against the band from the true RMS velocity to the best-fit hyperbolic
velocity of the exact times ("field"), and the same at reflector times only; interval velocity as
150 ms time averages against the model's layers; picks on modelled multiples; the sea floor found
against the model's; the share of samples whose error lies within twice the stated vrms_sigma.
"""

from __future__ import annotations

import json
import re
import sys
import tempfile
from datetime import UTC, datetime
from pathlib import Path

from velspec.synth.scenarios import make_scenario_line, run_scenario, scenarios, variants, wave_scenarios

HERE = Path(__file__).resolve().parent


# What each conditioning step does: the default, then one step changed at a time (the rest default).
CONDITION_STEPS = {
    "defaults": {},
    "no top mute": {"condition__mute": "off"},
    "no gain": {"condition__gain": "none"},
    "AGC instead of spherical gain": {"condition__gain": "agc"},
    "no trace editing": {"condition__edit": False},
    "band-pass 4-60 Hz on": {"condition__bandpass": True},
    "supergathers of 3 CMPs": {"condition__supergather_cmps": 3},
}


def condition_steps(reuse: str | None = None) -> int:
    """Each wave-equation line made once, run with each entry of CONDITION_STEPS, scored."""
    import pickle

    import numpy as np

    from velspec.params import RunParams
    from velspec.pipeline import run_line
    from velspec.synth.score import score_line

    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for name, (spec, params) in wave_scenarios().items():
            made = Path(reuse or tmp) / name.replace(" ", "_")
            if reuse and (made / "truth.pkl").exists():
                path = made / "line.sgy"
                with open(made / "truth.pkl", "rb") as fh:
                    truth = pickle.load(fh)
            else:
                path = Path(tmp) / (re.sub(r"[^A-Za-z0-9]+", "_", name) + ".sgy")
                truth = make_scenario_line(path, spec)
            for step, over in CONDITION_STEPS.items():
                p = (params or RunParams()).with_overrides(**over).validate() if over else (params or RunParams())
                result = run_line(path, p)
                multiples = truth.multiple_events(stretch_limit=p.scan.stretch_limit)
                sm = score_line(result, truth, p.scan.stretch_limit, multiples=multiples).summary()
                sm["quality_counts"] = np.bincount(result.qc["quality"], minlength=3).tolist()
                rows.append((name, step, sm))
                print(name, step, json.dumps(sm), flush=True)
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    results = HERE / "results"
    results.mkdir(exist_ok=True)
    (results / f"picking-condition-{stamp}.json").write_text(json.dumps(
        [{"scenario": n, "step": st, **sm} for n, st, sm in rows], indent=2))
    lines = ["| scenario | conditioning | field median % | field p95 % | vint median % | used picks "
             "| picks on multiples | quality good/fair/poor |", "|---|---|---|---|---|---|---|---|"]
    for n, st, sm in rows:
        lines.append(f"| {n} | {st} | {sm['field_median_pct']:.2f} | {sm['field_p95_pct']:.2f} "
                     f"| {sm['vint_median_pct']:.2f} | {sm['used_picks']} | {sm['picks_on_multiples']} "
                     f"| {'/'.join(map(str, sm['quality_counts']))} |")
    (results / f"picking-condition-{stamp}.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


def main(argv: list[str]) -> int:
    if argv[:1] == ["--condition-steps"]:
        return condition_steps(argv[1] if len(argv) > 1 else None)
    table = {}
    with tempfile.TemporaryDirectory() as tmp:
        if argv == ["--variants"]:
            runs = variants()
        else:
            every = {**scenarios(), **wave_scenarios()}
            chosen = argv or list(every)
            runs = {name: run for name, run in every.items() if name in chosen}
        for name, (spec, params) in runs.items():
            table[name] = run_scenario(re.sub(r"[^A-Za-z0-9]+", "_", name), spec, Path(tmp), params)
            print(name, json.dumps(table[name]))
    stamp = ("variants-" if argv == ["--variants"] else "") + datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    results = HERE / "results"
    results.mkdir(exist_ok=True)
    (results / f"picking-{stamp}.json").write_text(json.dumps(table, indent=2))
    lines = ["| scenario | CMPs | field median % | field p95 % | field max % | at reflectors median / p95 % "
             "| vint median % | used picks | picks on multiples | sea floor within 8 ms | within 2 sigma "
             "| quality good/fair/poor |",
             "|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for name, s in table.items():
        q = "/".join(map(str, s["quality_counts"]))
        wb = f"{s['sea_floor_within_8ms_pct']:.0f} %" if "sea_floor_within_8ms_pct" in s else "-"
        lines.append(f"| {name} | {s['cmps']} | {s['field_median_pct']:.2f} | {s['field_p95_pct']:.2f} | "
                     f"{s['field_max_pct']:.2f} | {s['vrms_median_pct']:.2f} / {s['vrms_p95_pct']:.2f} | "
                     f"{s['vint_median_pct']:.2f} | {s['used_picks']} | {s['picks_on_multiples']} | {wb} | "
                     f"{s.get('field_within_2sigma_pct', float('nan')):.0f} % | {q} |")
    (results / f"picking-{stamp}.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
