"""The one result type: a line's velocity analysis with its axes, picks, QC and provenance.

Every stage and command takes and gives a :class:`LineAnalysis`: ``velspec.run`` makes one,
``velspec.revise`` makes a new one from another, ``velspec.write_result`` / ``velspec.read_result``
move it to and from HDF5 (layout in the README), and the picks CSV, the cross-check, the scorer
and the QC pictures read it. Its picks are one table: a numpy structured array with the named
columns of :data:`PICK_DTYPE`, one row per pick (likely multiples and rejected picks included,
flagged), sorted by CMP and then t0.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
from dataclasses import dataclass, field

import numpy as np

from .errors import InputError
from .flags import used_mask

PICK_COLUMNS = (
    # name, dtype, units, meaning
    ("cmp", np.int64, "1", "CMP number of the pick"),
    ("t0", np.float64, "s", "zero-offset two-way time of the pick"),
    ("vrms", np.float32, "m/s", "stacking velocity of the pick"),
    ("coherence", np.float32, "1", "coherence at the pick (NaN for a person's pick)"),
    ("sigma", np.float32, "m/s", "one-standard-deviation uncertainty of the pick's stacking velocity"),
    ("flags", np.uint16, "1", "why a pick is doubtful or left out: a sum of velspec.Flag bits"),
    ("vint_sigma", np.float32, "m/s", "uncertainty of the interval velocity ending at the pick (NaN if not used)"),
    ("eta", np.float32, "1", "anellipticity at the pick (nonhyperbolic scan only; else 0)"),
    ("misfit", np.float32, "1",
     "regularised field's stacking velocity at the pick minus the pick, in units of its sigma (NaN if not used)"),
)
PICK_DTYPE = np.dtype([(name, dtype) for name, dtype, _, _ in PICK_COLUMNS])
"""Columns of a pick table (numpy structured dtype)."""


def empty_picks(n: int = 0) -> np.ndarray:
    """A pick table of ``n`` rows: zeros, with ``coherence`` and ``vint_sigma`` NaN."""
    table = np.zeros(n, dtype=PICK_DTYPE)
    table["coherence"] = np.nan
    table["vint_sigma"] = np.nan
    table["misfit"] = np.nan
    return table


def sort_picks(table: np.ndarray) -> np.ndarray:
    """The table in CMP, then t0, then velocity order (stable)."""
    return table[np.lexsort((table["vrms"], table["t0"], table["cmp"]))]


@dataclass
class Spectra:
    """Coherence panels kept for QC, as they were picked (after the smoothing along the line).

    Attributes
    ----------
    cmp : int64 (nkeep,)
        CMP number of each panel.
    velocity : float64 (nv,)
        Trial stacking velocities, m/s.
    coherence : float32 (nkeep, nv, nt)
        The panels, on the result's t0 axis.
    """

    cmp: np.ndarray
    velocity: np.ndarray
    coherence: np.ndarray


@dataclass
class DepthFields:
    """Fields on a regular depth grid below the datum of the input times.

    Attributes
    ----------
    z : float64 (nz,)
        Depth, m.
    t0 : float32 (ncmp, nz)
        Two-way time at each depth, s.
    vint : float32 (ncmp, nz)
        Interval velocity at each depth, m/s.
    """

    z: np.ndarray
    t0: np.ndarray
    vint: np.ndarray
    vavg: np.ndarray | None = None


@dataclass
class RegularisedField:
    """Interval velocity of the whole line as one bounded least-squares problem (smooth in time
    and along the line, weighted by the picks' sigma), beside the per-CMP Dix of ``vint``.

    Attributes
    ----------
    vint : float32 (ncmp, nt)
        Regularised interval velocity in time, m/s, inside ``[vint_min, vint_max]``.
    vrms : float32 (ncmp, nt)
        The stacking velocity it predicts back, m/s.
    """

    vint: np.ndarray
    vrms: np.ndarray


@dataclass
class LineAnalysis:
    """The velocity analysis of a line: fields on (CMP, t0), picks, QC and where it came from.

    Attributes
    ----------
    cmp : int64 (ncmp,)
        CMP numbers analysed, ascending.
    cmp_x, cmp_y : float64 (ncmp,)
        CMP coordinates, m.
    t0 : float64 (nt,)
        Zero-offset two-way time axis, s.
    vrms : float32 (ncmp, nt)
        Stacking velocity, m/s, no NaN.
    vint : float32 (ncmp, nt)
        Constrained Dix interval velocity in time, m/s, inside the physical range.
    vint_sigma : float32 (ncmp, nt)
        One-standard-deviation uncertainty of ``vint``, m/s.
    vrms_sigma : float32 (ncmp, nt) or None
        One-standard-deviation uncertainty of ``vrms``, m/s: the picks' own, grown between
        distant picks.
    picks : structured ndarray of :data:`PICK_DTYPE`
        Every pick and likely multiple, sorted by CMP and t0.
    qc : dict of ndarray
        Per-CMP QC (the ``/qc`` group: ``quality``, ``live_traces``, ``path`` ...; README).
    spectra : Spectra
        Kept coherence panels.
    depth : DepthFields or None
        Fields in depth.
    regularised : RegularisedField or None
        The line-wide regularised interval field (``/regularised``).
    eta : float32 (ncmp, nt) or None
        Anellipticity field of a nonhyperbolic scan; ``vrms`` then holds the NMO velocity.
    inline, crossline : int64 (ncmp,) or None
        Inline and crossline number of each CMP bin of 3D-binned input (None for a 2D line).
    attrs : dict
        Provenance, the file's root attributes: ``parameters`` (dict of every parameter used),
        ``input`` (dict: path, size, checksum ...), ``velspec_version``, ``created``, and
        counts such as ``skipped_cmps``; a revised result also ``revised_from``, ``edited_cmps``.
    warnings : list of str
        Recoverable oddities met while making it (not stored).
    """

    cmp: np.ndarray
    cmp_x: np.ndarray
    cmp_y: np.ndarray
    t0: np.ndarray
    vrms: np.ndarray
    vint: np.ndarray
    vint_sigma: np.ndarray
    picks: np.ndarray
    vrms_sigma: np.ndarray | None = None
    qc: dict = field(default_factory=dict)
    spectra: Spectra | None = None
    depth: DepthFields | None = None
    regularised: RegularisedField | None = None
    eta: np.ndarray | None = None
    attrs: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    inline: np.ndarray | None = None
    crossline: np.ndarray | None = None

    @property
    def used(self) -> np.ndarray:
        """Mask of the picks that entered the fields."""
        return used_mask(self.picks["flags"])

    @property
    def params(self):
        """The run's parameters as a :class:`velspec.params.RunParams`.

        Raises
        ------
        InputError
            When the stored parameters cannot be read by this version of velspec.
        """
        from .errors import ParameterError
        from .params import RunParams

        try:
            return RunParams.from_dict(self.attrs["parameters"])
        except (KeyError, TypeError, ParameterError) as exc:
            raise InputError(f"the result's run parameters cannot be read by this velspec ({exc}); "
                             "rerun velspec run") from None

    def row(self, cmp: int) -> int:
        """Row of CMP number ``cmp`` in the fields.

        Raises
        ------
        InputError
            When the result has no such CMP.
        """
        k = int(np.searchsorted(self.cmp, cmp))
        if k >= self.cmp.size or self.cmp[k] != cmp:
            raise InputError(f"CMP {cmp} is not in the result (CMPs {self.cmp[0]}..{self.cmp[-1]})")
        return k

    def picks_of(self, cmp: int) -> np.ndarray:
        """The pick table rows of one CMP."""
        a, b = np.searchsorted(self.picks["cmp"], [cmp, cmp + 1])
        return self.picks[a:b]

    def replace(self, **changes) -> LineAnalysis:
        """A copy with some attributes replaced (arrays are shared, not copied)."""
        return dataclasses.replace(self, **changes)


def now_utc() -> str:
    """The ``created`` time stamp: ISO-8601, UTC, whole seconds."""
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat()
