"""``velspec demo``: a synthetic line, the whole analysis, a result file and a QC picture."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import numpy as np

from .caution import CAUTION
from .errors import InputError
from .io.hdf5 import write_result
from .params import RunParams
from .pipeline import run_line
from .qc import coherence_panel_png
from .result import LineAnalysis
from .synth import demo_spec, make_line


def run_demo(out: str | Path = "velspec-demo", *, threads: int = 0, force: bool = False,
             progress=None) -> str:
    """Build the demo folder ``out`` (line, result, picture) and return a short summary.

    Everything is made in ``OUT.partial`` and renamed into place at the end, so an interrupted
    demo leaves no half-made folder behind.

    Parameters
    ----------
    out : str or Path
        Folder to create.
    threads : int
        Kernel threads, 0 for all cores.
    force : bool
        Replace an existing folder.
    progress : callable, optional
        As for :func:`velspec.run_line`.
    """
    out = Path(out)
    if out.exists() and not force:
        raise InputError(f"{out} exists; use --force to replace it or --out to choose another folder")
    tmp = out.with_name(out.name + ".partial")
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir(parents=True)
    try:
        line_path = tmp / "demo_line.sgy"
        truth = make_line(line_path, demo_spec())
        params = RunParams(threads=threads).validate()
        result = run_line(line_path, params, progress=progress)
        write_result(tmp / "result.h5", result)
        kept = result.spectra.cmp
        cmp = int(kept[len(kept) // 2])
        row = int(np.flatnonzero(np.asarray(truth.cmp) == cmp)[0])
        picture = coherence_panel_png(result, cmp, tmp / f"cmp_{cmp}_coherence.png",
                                      truth=(truth.t0[row], truth.vrms[row]))
        summary = _summary(result, truth, cmp, params.scan.stretch_limit)
        if out.exists():
            shutil.rmtree(out) if out.is_dir() else out.unlink()
        os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    files = "\n".join(f"  {out / p.name}" for p in (line_path, Path("result.h5"), picture))
    return f"{summary}\nwrote:\n{files}\n{CAUTION}"


def _summary(result: LineAnalysis, truth, cmp: int, stretch_limit: float) -> str:
    row = result.row(cmp)
    trow = int(np.flatnonzero(np.asarray(truth.cmp) == cmp)[0])
    t0, vrms = result.t0, result.vrms[row]
    # The exact answer for a picker: the best-fit hyperbola of the ray-traced times over the
    # offsets that pass the run's stretch mute (the RMS velocity is its short-spread limit).
    vstack, _ = truth.stacking_velocity(stretch_limit=stretch_limit)
    used = result.used
    quality = np.bincount(result.qc["quality"], minlength=3)
    lines = [f"velspec demo: {len(result.cmp)} CMPs analysed, {int(used.sum())} picks used, "
             f"{int((~used).sum())} left out or flagged as likely multiples; "
             f"CMP quality good/fair/poor {quality[0]}/{quality[1]}/{quality[2]}",
             f"CMP {cmp}: picked stacking velocity against the model (m/s)",
             "   t0 (s)   model RMS   exact stacking   picked   picked - exact"]
    for tt, vt, vs in zip(truth.t0[trow], truth.vrms[trow], vstack[trow]):
        if tt <= t0[-1]:
            vp = float(np.interp(tt, t0, vrms))
            lines.append(f"   {tt:6.3f}   {vt:9.0f}   {vs:14.0f}   {vp:6.0f}   {100 * (vp - vs) / vs:+12.1f} %")
    return "\n".join(lines)
