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


def draw_coherence_panel(ax, result: LineAnalysis, cmp: int | None = None, truth: tuple | None = None,
                         bounds: tuple | None = None):
    """Draw the coherence panel of one kept CMP with its picks, traced function and stacking velocity.

    Used picks are circles with bars of two standard deviations; likely multiples are crosses;
    other picks left out (lateral outliers, impossible interval velocities, replaced) are
    squares. The panel is the one picked: after the smoothing along the line. With ``bounds``
    the corridor the traced function had to keep to is drawn as two dashed lines.

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
    bounds : (lower, upper) arrays, optional
        Stacking-velocity bounds on ``result.t0``, m/s (e.g. from
        :func:`velspec.pick.velocity_bounds` with the run's parameters).

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
    if bounds is not None:
        ax.plot(bounds[0], t0, color="#f8f9fa", lw=0.9, ls="--", label="velocity corridor")
        ax.plot(bounds[1], t0, color="#f8f9fa", lw=0.9, ls="--")
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


# -- pictures of the whole line and of gathers (``velspec report``) ------------------------------

# Okabe & Ito (2008) colours, told apart with the common colour-vision deficiencies
PALETTE = {"black": "#000000", "orange": "#E69F00", "sky": "#56B4E9", "green": "#009E73", "yellow": "#F0E442",
           "blue": "#0072B2", "vermillion": "#D55E00", "purple": "#CC79A7"}
_FLAG_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442", "#999999")


def _clip(data: np.ndarray, percentile: float = 99.0) -> float:
    """Symmetric display clip: the given percentile of |amplitude| (1 where all is zero)."""
    a = np.abs(np.asarray(data, dtype=np.float64))
    a = a[np.isfinite(a) & (a > 0)]
    return float(np.percentile(a, percentile)) if a.size else 1.0


def draw_velocity_function(ax, result: LineAnalysis, cmp: int, interval: np.ndarray | None = None) -> None:
    """One CMP's stacking and interval velocity against t0, with its used picks and 2-sigma bars.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    result : LineAnalysis
    cmp : int
        CMP number.
    interval : ndarray (nt,), optional
        Interval velocity to draw, m/s; default ``result.vint`` of that CMP.
    """
    row = result.row(cmp)
    t0 = result.t0
    picks = result.picks_of(cmp)
    used = used_mask(picks["flags"])
    vint = result.vint[row] if interval is None else interval
    ax.plot(vint, t0, color=PALETTE["green"], lw=1.0, drawstyle="steps-pre", label="interval velocity")
    ax.plot(result.vrms[row], t0, color=PALETTE["blue"], lw=1.4, label="stacking velocity")
    ax.errorbar(picks["vrms"][used], picks["t0"][used], xerr=2 * picks["sigma"][used], fmt="o", ms=4, mfc="white",
                mec=PALETTE["blue"], ecolor=PALETTE["blue"], elinewidth=0.9, capsize=2, label="picks (+-2 sigma)")
    ax.set_ylim(t0[-1], t0[0])
    ax.set_xlabel("velocity (m/s)")
    ax.set_ylabel("t0 (s)")
    ax.grid(True, lw=0.3, color="0.8")
    ax.legend(loc="lower left", fontsize=7, framealpha=0.8)


def draw_gather(ax, data: np.ndarray, offsets: np.ndarray, t: np.ndarray, *, title: str = "",
                picks: tuple | None = None, corrected: bool = False, mute: tuple | None = None,
                clip: float | None = None):
    """A CMP gather as a grey image (offset across, time down), with picked events and the mute.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    data : ndarray (ntr, nt)
        Traces, sorted by offset.
    offsets : ndarray (ntr,)
        Offsets, m.
    t : ndarray (nt,)
        Sample times, s (t0 for a corrected gather).
    title : str
    picks : (t0, v) arrays, optional
        Picked events, s and m/s: drawn as their hyperbolas t = sqrt(t0^2 + x^2 / v^2) on an
        uncorrected gather (only where the mute keeps them), as ticks at t0 beside a corrected
        one.
    corrected : bool
        The gather is NMO-corrected (on the t0 axis).
    mute : (velocity (nt,) m/s, stretch_limit), optional
        Draws the stretch-mute edge: offsets beyond x = v t0 sqrt((1 + s)^2 - 1) are muted,
        at time t0 (corrected) or t0 (1 + s) (uncorrected).
    clip : float, optional
        Amplitude shown as full black or white; default the 99th percentile of |data|.

    Returns
    -------
    image : the ``AxesImage`` (for a colour bar)

    References
    ----------
    Yilmaz, O., 2001, Seismic Data Analysis, SEG (NMO, stretch mute).
    """
    offsets = np.asarray(offsets, dtype=np.float64)
    clip = _clip(data) if clip is None else clip
    half = 0.5 * float(np.median(np.diff(offsets))) if offsets.size > 1 else 1.0
    extent = (offsets[0] - half, offsets[-1] + half, t[-1], t[0]) if offsets.size else (0, 1, t[-1], t[0])
    im = ax.imshow(np.asarray(data).T, aspect="auto", extent=extent, cmap="gray", vmin=-clip, vmax=clip,
                   interpolation="nearest")
    factor = None
    if mute is not None:
        velocity, stretch = mute
        factor = np.sqrt((1.0 + stretch) ** 2 - 1.0)
        edge = np.asarray(velocity) * np.maximum(t, 0.0) * factor
        shown = edge <= offsets[-1] + half if offsets.size else edge < 0
        ax.plot(edge[shown], (t if corrected else t * (1.0 + stretch))[shown], color=PALETTE["sky"], lw=1.2,
                ls="--", label="stretch-mute edge")
    if picks is not None and corrected:
        # ticks beside the gather rather than lines over it, so that the flatness stays visible
        from matplotlib.transforms import blended_transform_factory

        side = blended_transform_factory(ax.transAxes, ax.transData)
        ax.plot(np.full(len(picks[0]), 0.0), picks[0], ">", ms=6, color=PALETTE["orange"], mec="black", mew=0.5,
                transform=side, clip_on=False, ls="none", label="pick times")
    elif picks is not None:
        x = np.linspace(offsets[0], offsets[-1], 64) if offsets.size else np.zeros(1)
        first = True
        for tp, vp in zip(*picks):
            keep = np.ones(x.size, bool) if factor is None else x <= vp * tp * factor
            if not keep.any():
                continue
            tt = np.sqrt(tp * tp + (x / vp) ** 2)
            ax.plot(x[keep], tt[keep], color=PALETTE["orange"], lw=0.9, ls=(0, (4, 3)),
                    label="hyperbolas of the picks" if first else None)
            first = False
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(t[-1], t[0])
    ax.set_xlabel("offset (m)")
    ax.set_ylabel("t0 (s)" if corrected else "time (s)")
    if title:
        ax.set_title(title, fontsize=10)
    if picks is not None or mute is not None:
        ax.legend(loc="lower left", fontsize=7, framealpha=0.8)
    return im


def _cmp_extent(cmp: np.ndarray, t0: np.ndarray) -> tuple:
    half = 0.5 * (float(np.median(np.diff(cmp))) if cmp.size > 1 else 1.0)
    step = 0.5 * (t0[1] - t0[0] if t0.size > 1 else 1.0)
    return (cmp[0] - half, cmp[-1] + half, t0[-1] + step, t0[0] - step)


def draw_field(ax, result: LineAnalysis, values: np.ndarray, *, label: str, cmap: str = "cividis",
               forced: bool = False, outliers: bool = False, grades: bool = True, picks: bool = False):
    """A velocity field along the line (CMP across, t0 down) with the places velspec flagged.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
    result : LineAnalysis
    values : ndarray (ncmp, nt)
        The field, m/s.
    label : str
        Title of the panel.
    cmap : str
        A perceptually uniform, colour-blind-safe colour map (cividis, viridis).
    forced : bool
        Outline where the physical bounds forced the interval velocity (``/qc/vint_forced``).
    outliers : bool
        Mark the picks left out as lateral outliers.
    grades : bool
        Mark fair and poor CMPs (``/qc/quality``) above the panel.
    picks : bool
        Mark the used picks.

    Returns
    -------
    image : the ``AxesImage`` (for a colour bar)
    """
    from matplotlib.transforms import blended_transform_factory

    cmp, t0 = result.cmp, result.t0
    im = ax.imshow(np.asarray(values).T, aspect="auto", extent=_cmp_extent(cmp, t0), cmap=cmap,
                   interpolation="nearest")
    if forced and "vint_forced" in result.qc and np.any(result.qc["vint_forced"]) and cmp.size > 1:
        mask = np.asarray(result.qc["vint_forced"], dtype=np.float32).T
        for width, colour in ((2.4, "black"), (1.0, "white")):   # a halo that shows on any colour
            ax.contour(cmp, t0, mask, levels=[0.5], colors=colour, linewidths=width)
        from matplotlib import patheffects

        ax.plot([], [], color="white", lw=1.0, label="Dix forced into bounds",
                path_effects=[patheffects.Stroke(linewidth=2.4, foreground="black"), patheffects.Normal()])
    if picks:
        # on a long line every CMP's picks would merge into lines: show those of every n-th CMP
        every = max(1, int(np.ceil(cmp.size / 150)))
        use = result.used & np.isin(result.picks["cmp"], cmp[::every])
        ax.plot(result.picks["cmp"][use], result.picks["t0"][use], "o", ms=2.2, mfc="white", mec="black", mew=0.3,
                ls="none", label="used picks" + (f" (every {every}th CMP)" if every > 1 else ""))
    if outliers:
        bad = (result.picks["flags"] & int(Flag.lateral_outlier)) != 0
        if bad.any():
            ax.plot(result.picks["cmp"][bad], result.picks["t0"][bad], "X", ms=6, mfc="white", mec="black",
                    mew=0.8, ls="none", label="lateral outliers (left out)")
    if grades and "quality" in result.qc:
        q = np.asarray(result.qc["quality"])
        top = blended_transform_factory(ax.transData, ax.transAxes)
        for grade, face, name in ((1, "white", "fair CMP"), (2, "black", "poor CMP")):
            sel = q == grade
            if sel.any():
                ax.plot(cmp[sel], np.full(sel.sum(), 1.015), "v", ms=5, mfc=face, mec="black", mew=0.8, ls="none",
                        transform=top, clip_on=False, label=name)
    ax.set_xlabel("CMP")
    ax.set_ylabel("t0 (s)")
    ax.set_title(label, fontsize=10, loc="left", pad=12)
    handles, _ = ax.get_legend_handles_labels()
    if handles:
        ax.legend(loc="lower left", fontsize=7, framealpha=0.85)
    return im


def draw_quality(ax_grade, ax_counts, result: LineAnalysis) -> None:
    """Per-CMP quality (good, fair, poor) and the counts of flagged picks along the line.

    The upper axes show the grade of every CMP (``/qc/quality``); the lower the number of
    picks per CMP carrying each flag that occurs on the line (``velspec.Flag``), the picks used,
    and the pick intervals whose Dix velocity the bounds forced (``/qc/forced_count``).
    """
    cmp = result.cmp
    if "quality" in result.qc:
        q = np.asarray(result.qc["quality"], dtype=np.int64)
        colours = (PALETTE["green"], PALETTE["orange"], PALETTE["vermillion"])
        # one collection of runs per grade (not a bar per CMP: thousands of patches draw slowly)
        edges = np.concatenate(([cmp[0] - 0.5], 0.5 * (cmp[1:] + cmp[:-1]), [cmp[-1] + 0.5]))
        for grade in range(3):
            hit = np.concatenate(([0], (q == grade).astype(np.int8), [0]))
            starts, stops = np.flatnonzero(np.diff(hit) == 1), np.flatnonzero(np.diff(hit) == -1)
            if starts.size:
                ax_grade.broken_barh(list(zip(edges[starts], edges[stops] - edges[starts])), (grade - 0.45, 0.9),
                                     facecolors=colours[grade], linewidth=0)
        counts = np.bincount(q, minlength=3)
        ax_grade.set_title(f"CMP quality: {counts[0]} good, {counts[1]} fair, {counts[2]} poor", fontsize=10,
                           loc="left")
    ax_grade.set_yticks([0, 1, 2], list(_GRADES))
    ax_grade.set_ylim(2.6, -0.6)
    ax_grade.set_ylabel("quality")
    ax_grade.set_xlim(cmp[0] - 0.5, cmp[-1] + 0.5)

    # a long line is summed over bins of n CMPs (and shown per CMP), else the curves are spikes
    n = max(1, int(np.ceil(cmp.size / 250)))
    bins = np.arange(cmp.size) // n
    nbin = int(bins[-1]) + 1
    width = np.bincount(bins, minlength=nbin)
    centre = np.bincount(bins, weights=cmp, minlength=nbin) / width
    rows = bins[np.searchsorted(cmp, result.picks["cmp"])]

    def per_cmp(sel):
        return np.bincount(rows[sel], minlength=nbin) / width

    ax_counts.step(centre, per_cmp(result.used), where="mid", color="0.55", lw=1.6, label="picks used")
    for k, flag in enumerate(Flag):
        has = (result.picks["flags"] & int(flag)) != 0
        if has.any():
            ax_counts.step(centre, per_cmp(has), where="mid", color=_FLAG_COLOURS[k % len(_FLAG_COLOURS)], lw=1.0,
                           label=flag.name.replace("_", " "))
    if "forced_count" in result.qc and np.any(result.qc["forced_count"]):
        forced = np.bincount(bins, weights=result.qc["forced_count"], minlength=nbin) / width
        ax_counts.step(centre, forced, where="mid", color="black", lw=1.0, ls="--", label="Dix intervals forced")
    ax_counts.set_xlim(cmp[0] - 0.5, cmp[-1] + 0.5)
    ax_counts.set_ylim(bottom=0)
    ax_counts.set_xlabel("CMP")
    ax_counts.set_ylabel("picks per CMP (count)" if n == 1 else f"picks per CMP (count, mean over {n} CMPs)")
    ax_counts.grid(True, lw=0.3, color="0.85")
    ax_counts.legend(loc="upper left", bbox_to_anchor=(1.005, 1.0), fontsize=7, frameon=False)


def draw_stack(ax, cmp: np.ndarray, t0: np.ndarray, stack: np.ndarray, *, title: str = "", clip: float | None = None):
    """A stacked section (CMP across, t0 down) as a grey image; returns the ``AxesImage``."""
    clip = _clip(stack) if clip is None else clip
    im = ax.imshow(np.asarray(stack).T, aspect="auto", extent=_cmp_extent(cmp, t0), cmap="gray", vmin=-clip,
                   vmax=clip, interpolation="nearest")
    ax.set_xlabel("CMP")
    ax.set_ylabel("t0 (s)")
    if title:
        ax.set_title(title, fontsize=10, loc="left")
    return im
