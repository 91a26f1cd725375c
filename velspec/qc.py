"""QC pictures (PNG) drawn from a result file; matplotlib with the non-interactive Agg backend."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .pick import MULTIPLE


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def coherence_panel_png(result: dict, cmp: int | None, out: str | Path, truth: tuple | None = None) -> Path:
    """Coherence panel of one kept CMP with its picks, traced function and final stacking velocity.

    Used picks are circles with bars of two standard deviations; likely multiples are crosses;
    other picks left out (lateral outliers, impossible interval velocities, replaced) are
    squares. The panel is the one picked: after the smoothing along the line.

    Parameters
    ----------
    result : dict
        From :func:`velspec.io.result.read_result`.
    cmp : int or None
        CMP number among ``/spectra/cmp``; None takes the middle kept panel.
    out : path
        PNG file to write.
    truth : (t0, v) arrays, optional
        A reference velocity function drawn for comparison (for instance the model's).
    """
    plt = _pyplot()
    kept = np.asarray(result["spectra/cmp"])
    if kept.size == 0:
        raise ValueError("the result keeps no coherence panels (keep_spectra = 0)")
    k = int(np.argmin(np.abs(kept - kept[len(kept) // 2]))) if cmp is None else int(np.flatnonzero(kept == cmp)[0])
    cmp = int(kept[k])
    panel = result["spectra/coherence"][k]
    vel = result["spectra/velocity"]
    t0 = result["t0"]
    row = int(np.flatnonzero(result["cmp"] == cmp)[0])
    sel = result["picks/cmp"] == cmp

    fig, ax = plt.subplots(figsize=(5.0, 7.5), dpi=110)
    extent = (vel[0], vel[-1], t0[-1], t0[0])
    im = ax.imshow(panel.T, aspect="auto", extent=extent, cmap="cividis", vmin=0.0,
                   vmax=max(float(panel.max()), 1e-6), interpolation="nearest")
    ax.plot(result["qc/path"][row], t0, color="white", lw=0.8, ls=":", label="traced function")
    ax.plot(result["vrms"][row], t0, color="#e8590c", lw=1.4, label="stacking velocity")
    flags = result.get("picks/flags", np.zeros(sel.size, np.uint16))[sel]
    used = result.get("picks/used", np.ones(sel.size, np.uint8))[sel].astype(bool)
    pv, pt = result["picks/vrms"][sel], result["picks/t0"][sel]
    multiple = (flags & MULTIPLE) != 0
    other = ~used & ~multiple
    if "picks/sigma" in result:
        # two standard deviations either side: where the pick could be
        ax.errorbar(pv[used], pt[used], xerr=2 * result["picks/sigma"][sel][used], fmt="none",
                    ecolor="#ffd43b", elinewidth=1.0, capsize=2)
    ax.plot(pv[used], pt[used], "o", ms=5, mfc="none", mec="#ffd43b", mew=1.5, label="picks (+-2 sigma)")
    if multiple.any():
        ax.plot(pv[multiple], pt[multiple], "x", ms=5, color="#74c0fc", mew=1.2, label="likely multiples")
    if other.any():
        ax.plot(pv[other], pt[other], "s", ms=4, mfc="none", mec="#adb5bd", mew=1.0, label="left out")
    if truth is not None:
        ax.plot(truth[1], truth[0], "+", color="#ff6b6b", ms=8, mew=1.5, label="model")
    ax.set_xlabel("stacking velocity (m/s)")
    ax.set_ylabel("t0 (s)")
    grade = ""
    if "qc/quality" in result:
        grade = f", quality {('good', 'fair', 'poor')[int(result['qc/quality'][row])]}"
    ax.set_title(f"CMP {cmp}: coherence{grade}", fontsize=10)
    fig.colorbar(im, ax=ax, fraction=0.05, pad=0.02, label="coherence")
    ax.legend(loc="lower left", fontsize=7, framealpha=0.6)
    fig.text(0.01, 0.005, "First-pass field for qualified review", fontsize=6, color="0.35")
    fig.tight_layout()
    out = Path(out)
    fig.savefig(out)
    plt.close(fig)
    return out
