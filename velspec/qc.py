"""QC pictures of a result, drawn with matplotlib onto an ``Axes`` the caller gives.

Nothing here chooses a backend or imports pyplot: :func:`draw_coherence_panel` draws onto any
``Axes``, and :func:`coherence_panel_png` makes its own ``matplotlib.figure.Figure`` (rendered by
the Agg canvas) and writes a PNG, so a notebook, a GUI or a script keeps its own settings.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .errors import InputError
from .flags import Flag, used_mask
from .result import LineAnalysis

_GRADES = ("good", "fair", "poor")


def draw_coherence_panel(ax, result: LineAnalysis, cmp: int | None = None, truth: tuple | None = None):
    """Draw the coherence panel of one kept CMP with its picks, traced function and stacking velocity.

    Used picks are circles with bars of two standard deviations; likely multiples are crosses;
    other picks left out (lateral outliers, impossible interval velocities, replaced) are
    squares. The panel is the one picked: after the smoothing along the line.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Where to draw.
    result : LineAnalysis
        A result that kept coherence panels (``keep_spectra`` > 0).
    cmp : int, optional
        CMP number among the kept panels; None takes the middle one.
    truth : (t0, v) arrays, optional
        A reference velocity function drawn for comparison (for instance the model's).

    Returns
    -------
    image : the ``AxesImage`` of the panel (for a colour bar)
    """
    spectra = result.spectra
    if spectra is None or spectra.cmp.size == 0:
        raise InputError("the result keeps no coherence panels (keep_spectra = 0)")
    kept = np.asarray(spectra.cmp)
    if cmp is None:
        k = len(kept) // 2
    else:
        hit = np.flatnonzero(kept == cmp)
        if hit.size == 0:
            raise InputError(f"CMP {cmp} has no kept coherence panel; kept: {', '.join(map(str, kept))}")
        k = int(hit[0])
    cmp = int(kept[k])
    panel, vel, t0 = spectra.coherence[k], spectra.velocity, result.t0
    row = result.row(cmp)
    picks = result.picks_of(cmp)
    used = used_mask(picks["flags"])
    multiple = (picks["flags"] & int(Flag.likely_multiple)) != 0
    other = ~used & ~multiple
    pv, pt = picks["vrms"], picks["t0"]

    extent = (vel[0], vel[-1], t0[-1], t0[0])
    im = ax.imshow(panel.T, aspect="auto", extent=extent, cmap="cividis", vmin=0.0,
                   vmax=max(float(panel.max()), 1e-6), interpolation="nearest")
    if "path" in result.qc:
        ax.plot(result.qc["path"][row], t0, color="white", lw=0.8, ls=":", label="traced function")
    ax.plot(result.vrms[row], t0, color="#e8590c", lw=1.4, label="stacking velocity")
    # two standard deviations either side: where the pick could be
    ax.errorbar(pv[used], pt[used], xerr=2 * picks["sigma"][used], fmt="none", ecolor="#ffd43b",
                elinewidth=1.0, capsize=2)
    ax.plot(pv[used], pt[used], "o", ms=5, mfc="none", mec="#ffd43b", mew=1.5, label="picks (+-2 sigma)")
    if multiple.any():
        ax.plot(pv[multiple], pt[multiple], "x", ms=5, color="#74c0fc", mew=1.2, label="likely multiples")
    if other.any():
        ax.plot(pv[other], pt[other], "s", ms=4, mfc="none", mec="#adb5bd", mew=1.0, label="left out")
    if truth is not None:
        ax.plot(truth[1], truth[0], "+", color="#ff6b6b", ms=8, mew=1.5, label="model")
    ax.set_xlim(vel[0], vel[-1])
    ax.set_ylim(t0[-1], t0[0])
    ax.set_xlabel("stacking velocity (m/s)")
    ax.set_ylabel("t0 (s)")
    grade = f", quality {_GRADES[int(result.qc['quality'][row])]}" if "quality" in result.qc else ""
    ax.set_title(f"CMP {cmp}: coherence{grade}", fontsize=10)
    ax.legend(loc="lower left", fontsize=7, framealpha=0.6)
    return im


def coherence_panel_png(result: LineAnalysis, cmp: int | None, out: str | Path, truth: tuple | None = None) -> Path:
    """Write :func:`draw_coherence_panel` of one CMP as a PNG file; returns its path."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(5.0, 7.5), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    im = draw_coherence_panel(ax, result, cmp, truth)
    fig.colorbar(im, ax=ax, fraction=0.05, pad=0.02, label="coherence")
    fig.text(0.01, 0.005, "First-pass field for qualified review", fontsize=6, color="0.35")
    fig.tight_layout()
    out = Path(out)
    fig.savefig(out)
    return out
