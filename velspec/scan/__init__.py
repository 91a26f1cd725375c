"""The scan stage: coherence over trial moveouts and every t0 sample of a CMP gather.

Public functions take and return numpy arrays. The measure and the moveout law are looked up by
name in :data:`MEASURES` and :data:`velspec.scan.moveout.LAWS`; the numba kernels are in
:mod:`velspec.scan.kernels` (semblance) and :mod:`velspec.scan.measures` (the others).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from . import kernels, measures
from .moveout import LAWS


@dataclass(frozen=True)
class Measure:
    """A coherence measure: its kernel and what its values mean."""

    kernel: Callable
    summary: str
    bounded: bool = True  # values lie in 0..1


MEASURES: dict[str, Measure] = {
    "semblance": Measure(kernels.semblance, "classic semblance (Neidell & Taner, 1971)"),
    "ab-semblance": Measure(
        measures.ab_semblance,
        "semblance of an A + B x^2 amplitude trend, polarity reversal included "
        "(Sarkar et al., 2002; Fomel, 2009)"),
    "cross-correlation": Measure(
        measures.crosscorrelation_sum,
        "mean normalised cross-correlation of trace pairs, -1/(M-1)..1 (Neidell & Taner, 1971)",
        bounded=False),
    "weighted-semblance": Measure(
        measures.weighted_semblance,
        "experimental: AB semblance with each sample weighted by its fit, narrower peaks (in the "
        "spirit of Luo & Hale, 2012; not checked against their published definition)"),
}


def velocity_axis(vmin: float, vmax: float, nvel: int, axis: str = "velocity") -> np.ndarray:
    """Trial stacking velocities, m/s, ascending.

    ``axis="velocity"`` spaces them uniformly in v; ``"slowness2"`` uniformly in 1/v^2, which
    spaces the moveout at the far offset evenly and so samples slow shallow events more finely.
    """
    if axis == "velocity":
        return np.linspace(vmin, vmax, nvel)
    if axis == "slowness2":
        return 1.0 / np.sqrt(np.linspace(1.0 / vmin**2, 1.0 / vmax**2, nvel))
    raise ValueError(f"unknown velocity axis {axis!r}")


def scan_gather(data: np.ndarray, offsets: np.ndarray, dt: float, t_first: float,
                velocities: np.ndarray, *, measure: str = "semblance", window: float = 0.040,
                stretch_limit: float = 0.5, etas: np.ndarray | None = None) -> np.ndarray:
    """Coherence panel of one CMP gather.

    Parameters
    ----------
    data : ndarray (ntr, ns)
        Traces of the gather (converted to C-contiguous float32).
    offsets : ndarray (ntr,)
        Source-receiver offsets, m (sign ignored).
    dt : float
        Sample interval, s.
    t_first : float
        Time of the first sample, s (delay recording time); the panel's t0 axis is the traces'
        own sample times.
    velocities : ndarray (nv,)
        Trial stacking (NMO) velocities, m/s.
    measure : str
        Name in :data:`MEASURES`.
    window : float
        Sliding window length, s; rounded to an odd number of samples (at least 1).
    stretch_limit : float
        NMO-stretch mute: a sample is used while (t - t0)/t0 <= stretch_limit.
    etas : ndarray (ne,), optional
        Anellipticity values; when given, the nonhyperbolic law of Alkhalifah & Tsvankin (1995)
        is scanned and the panel has shape (ne, nv, nt).

    Returns
    -------
    ndarray, float32, (nv, nt) or (ne, nv, nt)
    """
    data = np.ascontiguousarray(data, dtype=np.float32)
    ntr, ns = data.shape
    if ns < 2:
        raise ValueError("traces need at least two samples")
    velocities = np.asarray(velocities, dtype=np.float64)
    x = np.abs(np.asarray(offsets, dtype=np.float64))
    q_unit = (x * x / (dt * dt)).astype(np.float32)
    t0 = t_first + dt * np.arange(ns)
    tau2 = np.where(t0 > 0, (t0 / dt) ** 2, -1.0).astype(np.float32)
    mute_c = np.float32((1.0 + stretch_limit) ** 2 - 1.0)
    half = max(int(round(window / dt / 2.0)), 0)
    if etas is None:
        law = LAWS["hyperbolic"]
        eta_axis = np.zeros(1)
    else:
        law = LAWS["nonhyperbolic"]
        eta_axis = np.asarray(etas, dtype=np.float64)
    trials = np.empty((eta_axis.size * velocities.size, 2), dtype=np.float32)
    trials[:, 0] = np.tile(1.0 / velocities**2, eta_axis.size)
    trials[:, 1] = np.repeat(eta_axis, velocities.size)
    kernel = MEASURES[measure].kernel
    panel = kernel(data, q_unit, trials, law, tau2, mute_c, np.float32(t_first / dt), half)
    if etas is None:
        return panel
    return panel.reshape(eta_axis.size, velocities.size, ns)
