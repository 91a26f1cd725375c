"""Synthetic data with a known answer: exact flat-layer traveltimes, a prestack 2D line written
as SEG-Y, and layered models blocked from sonic logs."""

from velspec.synth.layers import (
    best_fit_stacking_velocity,
    critical_fade,
    event_times,
    gardner_density,
    incidence_sine,
    multiple_times,
    path_crossings,
    reflection_coefficients,
    reflection_times,
    rms_velocity,
    stacking_velocity,
    trace_rays,
    zero_offset_times,
)
from velspec.synth.line import (
    LineSpec,
    LineTruth,
    MultipleEvents,
    default_model,
    demo_spec,
    make_line,
    reverb_model,
    reverb_spec,
    ricker,
)
from velspec.synth.wells import blocked_model_from_sonic, sonic_velocity

__all__ = [
    "LineSpec",
    "LineTruth",
    "MultipleEvents",
    "best_fit_stacking_velocity",
    "blocked_model_from_sonic",
    "critical_fade",
    "default_model",
    "demo_spec",
    "event_times",
    "gardner_density",
    "incidence_sine",
    "make_line",
    "multiple_times",
    "path_crossings",
    "reflection_coefficients",
    "reflection_times",
    "reverb_model",
    "reverb_spec",
    "ricker",
    "rms_velocity",
    "sonic_velocity",
    "stacking_velocity",
    "trace_rays",
    "zero_offset_times",
]
