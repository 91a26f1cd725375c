"""Synthetic data with a known answer: exact flat-layer traveltimes, a prestack 2D line written
as SEG-Y, and layered models blocked from sonic logs."""

from velspec.synth.layers import (
    best_fit_stacking_velocity,
    critical_fade,
    gardner_density,
    incidence_sine,
    multiple_times,
    reflection_coefficients,
    reflection_times,
    rms_velocity,
    stacking_velocity,
    trace_rays,
    zero_offset_times,
)
from velspec.synth.line import LineSpec, LineTruth, default_model, demo_spec, make_line, ricker
from velspec.synth.wells import blocked_model_from_sonic, sonic_velocity

__all__ = [
    "LineSpec",
    "LineTruth",
    "best_fit_stacking_velocity",
    "blocked_model_from_sonic",
    "critical_fade",
    "default_model",
    "demo_spec",
    "gardner_density",
    "incidence_sine",
    "make_line",
    "multiple_times",
    "reflection_coefficients",
    "reflection_times",
    "ricker",
    "rms_velocity",
    "sonic_velocity",
    "stacking_velocity",
    "trace_rays",
    "zero_offset_times",
]
