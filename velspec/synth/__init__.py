"""Synthetic data with a known answer: exact flat-layer traveltimes, prestack 2D lines written
as SEG-Y (ray-traced events, or the 2D acoustic wave equation), and layered models blocked from
sonic logs."""

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
from velspec.synth.wave import model_shot
from velspec.synth.waveline import WaveLineSpec, WaveLineTruth, make_wave_line, sonic_wave_model
from velspec.synth.wells import blocked_model_from_sonic, sonic_velocity

__all__ = [
    "LineSpec",
    "LineTruth",
    "MultipleEvents",
    "WaveLineSpec",
    "WaveLineTruth",
    "best_fit_stacking_velocity",
    "blocked_model_from_sonic",
    "critical_fade",
    "default_model",
    "demo_spec",
    "event_times",
    "gardner_density",
    "incidence_sine",
    "make_line",
    "make_wave_line",
    "model_shot",
    "multiple_times",
    "path_crossings",
    "reflection_coefficients",
    "reflection_times",
    "reverb_model",
    "reverb_spec",
    "ricker",
    "rms_velocity",
    "sonic_velocity",
    "sonic_wave_model",
    "stacking_velocity",
    "trace_rays",
    "zero_offset_times",
]
