"""``velspec report``: the QC pictures of a result and one HTML page that gathers them.

Pictures are PNG files drawn with :mod:`velspec.qc` on their own ``matplotlib.figure.Figure``
(Agg canvas; pyplot is never used), with colour-blind-safe colour maps (cividis, viridis, grey)
and every axis labelled with its unit. The page, ``index.html``, sits beside them and refers
only to pictures that were written; it holds the summary numbers, the run's parameters and the
caution. The folder is made as ``DIR.partial`` and renamed when complete.
"""

from __future__ import annotations

import html
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import __version__
from .caution import CAUTION
from .errors import VelspecError
from .export import (
    CONTENTS,
    Product,
    check_cmps,
    check_output_folder,
    corrected_gather,
    interval_field,
    iter_stack,
    load_result,
    open_matching_line,
    staged_folder,
    write_contents,
)
from .flags import DOUBTFUL, Flag
from .result import LineAnalysis, now_utc

__all__ = ["report_result", "Picture", "summary_numbers"]

_DPI = 110


@dataclass(frozen=True)
class Picture:
    """One picture of the report: file name, heading and caption."""

    name: str
    title: str
    caption: str


def _figure(width: float, height: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=_DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(fig, path: Path) -> None:
    fig.text(0.995, 0.002, "velspec first-pass field, for qualified review", fontsize=6, color="0.4",
             ha="right", va="bottom")
    fig.savefig(path)


def _bounds(result: LineAnalysis, cmp: int):
    """The velocity corridor of the traced function at a CMP from the stored parameters, and a note."""
    from .pick import velocity_bounds
    from .pick.guide import guide_source

    params = result.params
    velocity = result.spectra.velocity
    note = ""
    try:
        guide = guide_source(params, result.t0)(cmp)
    except VelspecError as exc:
        guide, note = None, f"guide band not drawn ({exc})"
    return velocity_bounds(result.t0, params.pick, float(velocity[0]), float(velocity[-1]), guide), note


def summary_numbers(result: LineAnalysis) -> list[tuple[str, str]]:
    """The report's summary as (label, value) rows."""
    picks, used = result.picks, result.used
    t0 = result.t0
    qc = result.qc
    rows = [("CMPs analysed", f"{result.cmp.size} (CMP {result.cmp[0]} to {result.cmp[-1]})"),
            ("CMPs left out (fewer than 2 live traces)", str(int(result.attrs.get("skipped_cmps", 0)))),
            ("time axis", f"{t0.size} samples of {(t0[1] - t0[0]) * 1e3 if t0.size > 1 else 0:g} ms, "
                          f"{t0[0]:g} to {t0[-1]:.3f} s"),
            ("picks", f"{picks.size} in all: {int(used.sum())} used, {int((~used).sum())} left out"),
            ("used picks marked doubtful", str(int((used & ((picks['flags'] & int(DOUBTFUL)) != 0)).sum())))]
    for flag in Flag:
        n = int(((picks["flags"] & int(flag)) != 0).sum())
        if n:
            rows.append((f"picks flagged {flag.name.replace('_', ' ')}", str(n)))
    if "quality" in qc:
        q = np.bincount(np.asarray(qc["quality"], dtype=np.int64), minlength=3)
        rows.append(("CMP quality good / fair / poor", f"{q[0]} / {q[1]} / {q[2]}"))
    if "no_picks" in qc:
        rows.append(("CMPs with no usable pick (traced function used)", str(int(np.sum(qc["no_picks"])))))
    if "forced_count" in qc:
        fc = np.asarray(qc["forced_count"])
        rows.append(("Dix forced into the physical range", f"{int(np.count_nonzero(fc))} CMPs, {int(fc.sum())} "
                     f"pick intervals, {int(np.sum(qc.get('vint_forced', 0)))} samples"))
    rows.append(("interval velocity shown", interval_field(result)[1]))
    if result.eta is not None:
        rows.append(("moveout", "nonhyperbolic (eta field present)"))
    return rows


def report_result(result: LineAnalysis | str | Path, out: str | Path, line: str | Path | None = None, *,
                  cmps=(), force: bool = False, progress=None) -> Path:
    """Write the QC pictures of a result and one HTML page into the folder ``out`` (``velspec report``).

    Pictures: the kept coherence panels with picks, traced function, velocity corridor and
    2-sigma bars (``coherence_CMP.png``); the stacking and interval velocity fields along the
    line with the flagged places (``fields.png``); the per-CMP quality and flag counts
    (``quality.png``); with ``line`` a gather before and after NMO beside its velocity
    function (``gather_CMP.png``) and the NMO-corrected stack (``stack.png``).

    Parameters
    ----------
    result : LineAnalysis, or the path of a result file
    out : str or Path
        Folder to create (made as ``OUT.partial`` and renamed when complete).
    line : str or Path, optional
        The prestack SEG-Y line the result was made from (checked against it).
    cmps : sequence of int
        CMPs to show: their kept coherence panels and, with ``line``, their gathers. Default:
        every kept panel, and the gather of the middle kept panel's CMP (else the middle CMP).
    force : bool
        Replace an existing folder that velspec wrote.
    progress : callable, optional
        ``progress(total) -> (update(n), close())`` while the line is stacked, in CMPs.

    Returns
    -------
    Path
        The page, ``OUT/index.html``.

    Raises
    ------
    InputError
        Unreadable result (e.g. another format version), a line that does not match it, a CMP
        the result lacks, an existing output without ``force``.
    """
    result, source = load_result(result)
    cmps = check_cmps(result, cmps)
    out = Path(out)
    check_output_folder(out, force, (source, line))
    segy = open_matching_line(line, result) if line is not None else None
    try:
        with staged_folder(out, force, (source, line)) as tmp:
            pictures, notes = _pictures(result, tmp, segy, cmps, progress)
            page = _page(result, source, pictures, notes, line)
            (tmp / "index.html").write_text(page, encoding="utf-8")
            products = [Product(p.name, p.title, "PNG", "") for p in pictures]
            products.append(Product("index.html", "the report page", "HTML", ""))
            write_contents(tmp, "report", products, source)
    finally:
        if segy is not None:
            segy.close()
    return out / "index.html"


def _pictures(result: LineAnalysis, folder: Path, segy, cmps: list[int], progress):
    pictures: list[Picture] = []
    notes: list[str] = []
    kept = [] if result.spectra is None else [int(c) for c in np.asarray(result.spectra.cmp)]
    chosen = [c for c in cmps if c in kept] if cmps else kept
    for c in cmps:
        if c not in kept:
            notes.append(f"CMP {c}: the result keeps no coherence panel there (a run with a larger keep_spectra "
                         "keeps more).")
    if not kept:
        notes.append("The result keeps no coherence panels (keep_spectra = 0).")
    for c in chosen:
        pictures.append(_coherence_picture(result, folder, c, notes))
    pictures.append(_fields_picture(result, folder))
    pictures.append(_quality_picture(result, folder))
    if segy is not None:
        show = cmps or [kept[len(kept) // 2] if kept else int(result.cmp[result.cmp.size // 2])]
        for c in show:
            pictures.append(_gather_picture(result, folder, segy, c))
        pictures.append(_stack_picture(result, folder, segy, progress))
    return pictures, notes


def _coherence_picture(result: LineAnalysis, folder: Path, cmp: int, notes: list[str]) -> Picture:
    from .qc import draw_coherence_panel

    bounds, note = _bounds(result, cmp)
    if note and note not in notes:
        notes.append(note)
    fig = _figure(5.2, 7.2)
    ax = fig.add_subplot()
    im = draw_coherence_panel(ax, result, cmp, bounds=bounds)
    fig.colorbar(im, ax=ax, fraction=0.05, pad=0.02, label=f"coherence ({result.params.scan.measure}, 1)")
    name = f"coherence_{cmp}.png"
    _save(fig, folder / name)
    return Picture(name, f"Coherence panel, CMP {cmp}",
                   "Coherence over trial stacking velocity and t0 as it was picked (after smoothing along the line). "
                   "Solid line: the stacking-velocity field; dotted: the traced function; dashed: the velocity "
                   "corridor it had to keep to; circles: used picks with bars of two standard deviations; crosses: "
                   "likely multiples; squares: other picks left out.")


def _fields_picture(result: LineAnalysis, folder: Path) -> Picture:
    from .qc import draw_field

    vint, source = interval_field(result)
    fig = _figure(11.0, 8.6)
    top, bottom = fig.subplots(2, 1, sharex=True)
    im = draw_field(top, result, result.vrms, label="stacking velocity (/vrms)", cmap="cividis", outliers=True,
                    picks=True)
    top.set_xlabel("")
    fig.colorbar(im, ax=top, label="stacking velocity (m/s)", pad=0.01)
    im = draw_field(bottom, result, vint, label=f"interval velocity in time ({source})", cmap="viridis",
                    forced=True, grades=False)
    fig.colorbar(im, ax=bottom, label="interval velocity (m/s)", pad=0.01)
    _save(fig, folder / "fields.png")
    return Picture("fields.png", "Velocity fields along the line",
                   "Stacking velocity (top) and interval velocity in time (bottom), CMP across and t0 down. "
                   "Dots: used picks; triangles above the top panel: fair (open) and poor (filled) CMPs; "
                   "filled crosses: picks left out "
                   "as lateral outliers; outlined areas in the lower panel: where the physical bounds forced the Dix "
                   "interval velocity.")


def _quality_picture(result: LineAnalysis, folder: Path) -> Picture:
    from .qc import draw_quality

    fig = _figure(11.0, 5.6)
    grade, counts = fig.subplots(2, 1, sharex=True, height_ratios=(1, 2.4))
    draw_quality(grade, counts, result)
    _save(fig, folder / "quality.png")
    return Picture("quality.png", "Quality and flags along the line",
                   "Top: the grade of every CMP (good, fair, poor; rule in the README). Bottom: picks per CMP that "
                   "were used and that carry each flag, and the pick intervals whose interval velocity the bounds "
                   "forced.")


def _gather_picture(result: LineAnalysis, folder: Path, segy, cmp: int) -> Picture:
    from .flags import used_mask
    from .qc import draw_gather, draw_velocity_function

    gather, corrected, _ = corrected_gather(segy, result, cmp)
    row = result.row(cmp)
    picks = result.picks_of(cmp)
    use = used_mask(picks["flags"])
    pt, pv = picks["t0"][use], picks["vrms"][use].astype(np.float64)
    stretch = result.params.scan.stretch_limit
    vint, _ = interval_field(result)
    fig = _figure(12.0, 7.6)
    left, mid, right = fig.subplots(1, 3, sharey=True, width_ratios=(1.0, 1.6, 1.6))
    draw_velocity_function(left, result, cmp, interval=vint[row])
    left.set_title(f"CMP {cmp}: velocity function", fontsize=10)
    level = float(np.percentile(np.abs(gather.data), 99)) if gather.data.size else 1.0
    draw_gather(mid, gather.data, gather.offsets, result.t0, title="before NMO, picked events", picks=(pt, pv),
                mute=(result.vrms[row], stretch), clip=level or 1.0)
    im = draw_gather(right, corrected, gather.offsets, result.t0, title="after NMO with the picked field",
                     picks=(pt, pv), corrected=True, mute=(result.vrms[row], stretch), clip=level or 1.0)
    mid.set_ylabel("time (s)")
    fig.colorbar(im, ax=right, label="amplitude (input units)", pad=0.01)
    name = f"gather_{cmp}.png"
    _save(fig, folder / name)
    return Picture(name, f"Gather before and after NMO, CMP {cmp}",
                   f"Left: stacking and interval velocity with the used picks (bars: two standard deviations). "
                   f"Middle: the gather as recorded with the hyperbolas of the used picks. Right: NMO-corrected "
                   f"with the picked field, the pick times marked beside it; samples stretched by more than "
                   f"{stretch:g} (the run's stretch mute) are "
                   f"zero, beyond the dashed edge. The same grey scale in both.")


def _stack_picture(result: LineAnalysis, folder: Path, segy, progress) -> Picture:
    from .qc import draw_stack

    stack = np.zeros((result.cmp.size, result.t0.size), dtype=np.float32)
    for row, trace, _ in iter_stack(segy, result, progress):
        stack[row] = trace
    fig = _figure(11.0, 6.4)
    ax = fig.add_subplot()
    im = draw_stack(ax, result.cmp, result.t0, stack, title="CMP stack, NMO-corrected with the picked stacking "
                    "velocity")
    fig.colorbar(im, ax=ax, label="stacked amplitude (input units)", pad=0.01)
    _save(fig, folder / "stack.png")
    return Picture("stack.png", "CMP stack",
                   f"Every CMP NMO-corrected with the stacking-velocity field, stretch mute "
                   f"{result.params.scan.stretch_limit:g} applied, and stacked; each sample divided by the number of "
                   "live traces. Grey scale clipped at the 99th percentile of |amplitude|.")


# -- the page ------------------------------------------------------------------------------------

_STYLE = """
body { font-family: Georgia, 'Times New Roman', serif; max-width: 1180px; margin: 1.5em auto; padding: 0 1em;
       color: #1d1d1d; background: #fbfaf7; line-height: 1.45; }
h1 { font-weight: normal; font-size: 1.7em; margin-bottom: 0.1em; }
h2 { font-weight: normal; font-size: 1.25em; border-bottom: 1px solid #c9c4b8; margin-top: 1.8em; }
.sub { color: #5b5b5b; margin-top: 0; }
.caution { border-left: 4px solid #8a5a00; background: #f3ead7; padding: 0.6em 0.9em; }
table { border-collapse: collapse; font-size: 0.92em; }
td, th { padding: 0.2em 0.9em 0.2em 0; vertical-align: top; text-align: left; }
th { font-weight: normal; color: #5b5b5b; }
tr + tr td { border-top: 1px solid #e6e1d6; }
figure { margin: 1.4em 0; }
figure img { max-width: 100%; border: 1px solid #d8d3c8; background: white; }
figcaption { font-size: 0.9em; color: #3b3b3b; max-width: 60em; }
.stage { display: inline-block; vertical-align: top; margin: 0 2.5em 1em 0; }
code { font-size: 0.95em; }
"""


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _table(rows) -> str:
    body = "".join(f"<tr><th>{_e(a)}</th><td>{_e(b)}</td></tr>" for a, b in rows)
    return f"<table>{body}</table>"


def _parameters(params: dict) -> str:
    general = [(k, json.dumps(v)) for k, v in sorted(params.items()) if not isinstance(v, dict)]
    parts = []
    if general:
        parts.append(f'<div class="stage"><h3>general</h3>{_table(general)}</div>')
    for stage, values in sorted((k, v) for k, v in params.items() if isinstance(v, dict)):
        rows = []
        for k, v in sorted(values.items()):
            if isinstance(v, dict):
                rows += [(f"{k}.{kk}", json.dumps(vv)) for kk, vv in sorted(v.items())]
            else:
                rows.append((k, json.dumps(v)))
        parts.append(f'<div class="stage"><h3>[{_e(stage)}]</h3>{_table(rows)}</div>')
    return "".join(parts)


def _page(result: LineAnalysis, source: str, pictures: list[Picture], notes: list[str], line) -> str:
    name = Path(source).name if source else "result in memory"
    ident = result.attrs.get("input") if isinstance(result.attrs.get("input"), dict) else {}
    params = result.attrs.get("parameters") if isinstance(result.attrs.get("parameters"), dict) else {}
    figures = "".join(f'<figure id="{_e(Path(p.name).stem)}"><h3>{_e(p.title)}</h3>'
                      f'<img src="{_e(p.name)}" alt="{_e(p.title)}"><figcaption>{_e(p.caption)}</figcaption>'
                      "</figure>" for p in pictures)
    contents = "".join(f'<li><a href="#{_e(Path(p.name).stem)}">{_e(p.title)}</a></li>' for p in pictures)
    note_html = "".join(f"<p>{_e(n)}</p>" for n in notes)
    provenance = [("result file", name), ("made", result.attrs.get("created", "?")),
                  ("by velspec", result.attrs.get("velspec_version", "?")),
                  ("input line", ident.get("path", "?")), ("input checksum", ident.get("checksum", "?")),
                  ("input size (bytes)", ident.get("size", "?"))]
    if result.attrs.get("revised_from"):
        provenance.append(("revised from", result.attrs["revised_from"]))
    if line is not None:
        provenance.append(("line used for gathers and stack", str(line)))
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="generator" content="velspec {_e(__version__)}">
<title>velspec report: {_e(name)}</title>
<style>{_STYLE}</style>
</head>
<body>
<h1>Velocity analysis of {_e(name)}</h1>
<p class="sub">Report written {_e(now_utc())} by velspec {_e(__version__)}</p>
<p class="caution"><strong>Caution.</strong> {_e(CAUTION)}</p>
<h2>Summary</h2>
{_table(summary_numbers(result))}
{note_html}
<h2>Pictures</h2>
<ul>{contents}</ul>
{figures}
<h2>Parameters of the run</h2>
<p>Every parameter the run used, defaults included, as stored in the result (<code>parameters</code>).</p>
{_parameters(params)}
<h2>Provenance</h2>
{_table(provenance)}
<p class="sub">Files of this folder are listed in {_e(CONTENTS)}.</p>
</body>
</html>
"""
