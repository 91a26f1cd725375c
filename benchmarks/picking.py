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
from datetime import UTC, datetime
from pathlib import Path

from velspec.synth.scenarios import run_scenario, scenarios, variants

HERE = Path(__file__).resolve().parent


def main(argv: list[str]) -> int:
    table = {}
    with tempfile.TemporaryDirectory() as tmp:
        if argv == ["--variants"]:
            runs = variants()
        else:
            chosen = argv or list(scenarios())
            runs = {name: run for name, run in scenarios().items() if name in chosen}
        for name, (spec, params) in runs.items():
            table[name] = run_scenario(re.sub(r"[^A-Za-z0-9]+", "_", name), spec, Path(tmp), params)
            print(name, json.dumps(table[name]))
    stamp = ("variants-" if argv == ["--variants"] else "") + datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
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
