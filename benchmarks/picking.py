"""Accuracy of the automatic picker on generated lines, against exact answers, default parameters.

    python benchmarks/picking.py             # every scenario, figures to results/picking-*.md|json
    python benchmarks/picking.py reverb      # one scenario (names as in the table)
    python benchmarks/picking.py --variants  # robustness: seeds never used while tuning, other depths, noise

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

from velspec.synth.scenarios import run_scenario, scenarios, variants, wave_scenarios

HERE = Path(__file__).resolve().parent


def main(argv: list[str]) -> int:
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
