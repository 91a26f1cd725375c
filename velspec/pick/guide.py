"""Guide functions: a regional trend, a CSV function, or a person's picks, per CMP.

A guide narrows the velocity corridor of the traced function to a band around it
(``PickParams.guide_below`` / ``guide_above``).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ..io.picks_csv import function_on_axis, read_functions
from ..params import RunParams

GuideFor = Callable[[int], "np.ndarray | None"]
"""``guide_for(cmp)``: the guide stacking velocity (m/s on the t0 axis) of a CMP, or None."""


def regional_trend(t0: np.ndarray, v0: float, gradient: float) -> np.ndarray:
    """Stacking (RMS) velocity of an earth whose velocity rises linearly with depth, m/s.

    For v(z) = v0 + k z the one-way time to depth z is ln(1 + k z / v0) / k, so the velocity at
    two-way time t is v0 exp(k t / 2) and the RMS velocity (Dix, 1955) down to t is

        V(t) = v0 sqrt((exp(k t) - 1) / (k t)),   V(0) = v0.

    Parameters
    ----------
    t0 : ndarray
        Two-way times, s.
    v0 : float
        Velocity at the datum, m/s.
    gradient : float
        k, the rise of velocity with depth, 1/s ((m/s) per m); 0 gives a constant v0.
    """
    t = np.maximum(np.asarray(t0, dtype=np.float64), 0.0)
    kt = gradient * t
    # expm1(x)/x -> 1 as x -> 0; written so that a zero gradient or zero time is exact
    ratio = np.where(kt > 1e-12, np.expm1(kt) / np.where(kt > 1e-12, kt, 1.0), 1.0 + 0.5 * kt)
    return v0 * np.sqrt(ratio)


def guide_source(params: RunParams, t0: np.ndarray) -> GuideFor:
    """The guide function of each CMP (m/s on ``t0``, or None), from ``params.pick``.

    The regional trend or a guide CSV serves every CMP; in ``edit_mode = "guide"`` the functions
    of a person's pick file take over at the CMPs it names.
    """
    pp = params.pick
    base: GuideFor = lambda cmp: None  # noqa: E731
    if pp.guide == "regional":
        trend = regional_trend(t0, pp.regional_v0, pp.regional_gradient)
        base = lambda cmp: trend  # noqa: E731
    elif pp.guide:
        functions = read_functions(pp.guide)
        base = lambda cmp: function_on_axis(functions, cmp, t0)  # noqa: E731
    if pp.edits and pp.edit_mode == "guide":
        edits = read_functions(pp.edits, need_cmp=True)
        return lambda cmp: np.interp(t0, *edits[cmp]) if cmp in edits else base(cmp)
    return base
