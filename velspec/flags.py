"""Why a pick is doubtful or left out: one set of bits, one vocabulary in code and in the file.

Each member's name is the name written to the result file (``/picks/flags``, attribute ``bits``),
so code and file speak one language: ``Flag.likely_multiple`` is the bit named
``likely_multiple`` in every result.
"""

from __future__ import annotations

import enum

import numpy as np


class Flag(enum.IntFlag):
    """Bits of a pick's ``flags``.

    Members
    -------
    low_coherence
        Coherence below ``PickParams.doubtful_coherence``; used, but doubtful.
    likely_multiple
        A predicted surface multiple, an event much slower than the primary trend, or a recognised
        multiple's smear; never used.
    at_bound
        The peak lay beyond a velocity bound or at the end of the scanned range; picked at the
        edge, used, doubtful.
    impossible_interval_velocity
        With a neighbouring pick it implied an interval velocity outside the physical range; not
        used.
    lateral_outlier
        Far from the running median along the line (line pass); not used.
    edited
        Put there by a person; used.
    outside_guide
        Outside the band around a person's guide function; not used.
    wide_peak
        Uncertainty above ``PickParams.doubtful_sigma`` of the velocity; used, doubtful.
    replaced
        An automatic pick at a CMP whose picks a person replaced; not used.
    velocity_inversion
        Slower than the traced trend, but no multiple explains it and the interval velocity it
        implies is physical: a primary in a velocity inversion (overpressure, gas, under a fast
        bed); used.
    sea_floor
        The sea floor found in the data (or given), at the water velocity: the top of the field;
        used.
    """

    low_coherence = 1
    likely_multiple = 2
    at_bound = 4
    impossible_interval_velocity = 8
    lateral_outlier = 16
    edited = 32
    outside_guide = 64
    wide_peak = 128
    replaced = 256
    velocity_inversion = 512
    sea_floor = 1024


EXCLUDED = (Flag.likely_multiple | Flag.impossible_interval_velocity | Flag.lateral_outlier
            | Flag.outside_guide | Flag.replaced)
"""Picks with any of these bits never enter a velocity field."""

DOUBTFUL = Flag.low_coherence | Flag.at_bound | Flag.wide_peak
"""Picks with these bits are used but marked doubtful."""


def bit_names() -> dict[str, str]:
    """``{"1": "low_coherence", ...}``: the ``bits`` attribute written beside ``/picks/flags``."""
    return {str(int(f)): f.name for f in Flag}


def used_mask(flags: np.ndarray) -> np.ndarray:
    """True where a pick with these ``flags`` enters the velocity fields."""
    return (np.asarray(flags) & int(EXCLUDED)) == 0


def clear(flags: np.ndarray, bits: Flag) -> np.ndarray:
    """``flags`` with ``bits`` cleared, same dtype."""
    flags = np.asarray(flags)
    return flags & flags.dtype.type(~int(bits) & np.iinfo(flags.dtype).max)
