"""The result file (HDF5, format_version 1): writing it atomically and reading it back.

The layout is the outside contract of ``../shared/design/interface.md`` (also in the README):
root attributes, ``/cmp``, ``/cmp_x``, ``/cmp_y``, ``/t0``, ``/vrms``, ``/vint``, ``/picks/*``,
and the optional ``/qc``, ``/spectra`` and ``/depth`` groups. Every dataset has a ``units``
attribute. The file is written as ``NAME.partial`` beside the output and renamed into place only
when complete, so a reader never sees half a result.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import h5py
import numpy as np

from .. import FORMAT_VERSION
from ..errors import InputError

UNITS = {
    "cmp": "1", "cmp_x": "m", "cmp_y": "m", "t0": "s", "vrms": "m/s", "vint": "m/s",
    "picks/cmp": "1", "picks/t0": "s", "picks/vrms": "m/s", "picks/coherence": "1", "picks/sigma": "m/s", "eta": "1", "picks/eta": "1",
    "picks/flags": "1", "picks/used": "1", "picks/vint_sigma": "m/s", "vint_sigma": "m/s", "qc/quality": "1",
    "qc/live_traces": "1", "qc/nan_traces": "1", "qc/dead_traces": "1", "qc/no_picks": "1",
    "qc/forced_count": "1", "qc/vint_forced": "1", "qc/vint_raw": "m/s", "qc/path": "m/s",
    "qc/skipped_cmp": "1", "qc/skipped_nan_traces": "1",
    "spectra/cmp": "1", "spectra/velocity": "m/s", "spectra/coherence": "1",
    "depth/z": "m", "depth/t0": "s", "depth/vint": "m/s",
}

DESCRIPTIONS = {
    "vrms": "stacking velocity: best-fit hyperbola over the offsets used; t0*vrms^2 linear between picks",
    "vint": "constrained Dix interval velocity in time, inside the physical range",
    "eta": "anellipticity of the nonhyperbolic moveout (Alkhalifah & Tsvankin, 1995), linear between picks",
    "qc/vint_raw": "unconstrained Dix interval velocity, signed square root (negative: imaginary)",
    "qc/vint_forced": "1 where the physical bounds changed vint by more than 1 m/s",
    "qc/path": "traced dynamic-programming velocity function on every t0 sample",
    "qc/no_picks": "1 where no pick passed the thresholds and the traced function was used",
    "vint_sigma": "one-standard-deviation uncertainty of vint, propagated from the picks' sigma through Dix",
    "picks/sigma": "one-standard-deviation uncertainty of the pick's stacking velocity, from its peak's shape",
    "picks/vint_sigma": "uncertainty of the interval velocity ending at the pick (NaN where not used)",
    "picks/used": "1 where the pick entered the velocity fields",
    "qc/quality": "per CMP: 0 good, 1 fair, 2 poor (README: quality flag)",
}


def partial_path(path: str | Path) -> Path:
    path = Path(path)
    return path.with_name(path.name + ".partial")


def write_result(path: str | Path, result, force: bool = False) -> Path:
    """Write a :class:`velspec.pipeline.LineResult` to ``path`` atomically.

    Raises
    ------
    InputError
        ``path`` exists and ``force`` is false.
    """
    path = Path(path)
    if path.exists() and not force:
        raise InputError(f"{path} exists; use --force to overwrite it")
    tmp = partial_path(path)
    try:
        with h5py.File(tmp, "w") as h5:
            h5.attrs["format_version"] = FORMAT_VERSION
            for key, value in result.attrs.items():
                h5.attrs[key] = json.dumps(value, sort_keys=True) if isinstance(value, dict) else value
            for name in ("cmp", "cmp_x", "cmp_y", "t0", "vrms", "vint"):
                _put(h5, name, getattr(result, name))
            if getattr(result, "eta", None) is not None:
                _put(h5, "eta", result.eta)
            if getattr(result, "vint_sigma", None) is not None:
                _put(h5, "vint_sigma", result.vint_sigma)
            for group, content in (("picks", result.picks), ("qc", result.qc), ("spectra", result.spectra),
                                   ("depth", result.depth)):
                for name, value in content.items():
                    _put(h5, f"{group}/{name}", value)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def _put(h5: h5py.File, name: str, value: np.ndarray) -> None:
    value = np.asarray(value)
    big = value.ndim == 2 and value.size > 4096
    # gzip is readable by every HDF5 tool; level 1 with byte shuffling keeps most of the gain
    # on smooth velocity fields at a fraction of the time of higher levels.
    ds = h5.create_dataset(name, data=value, compression="gzip" if big else None,
                           compression_opts=1 if big else None, shuffle=big)
    ds.attrs["units"] = UNITS.get(name, "1")
    if name in DESCRIPTIONS:
        ds.attrs["description"] = DESCRIPTIONS[name]
    if name == "picks/flags":
        from ..pick import FLAG_NAMES

        ds.attrs["bits"] = json.dumps({str(bit): label for bit, label in FLAG_NAMES.items()})
        ds.attrs["description"] = "why a pick is doubtful or left out: a sum of the bits named in 'bits'"


def read_result(path: str | Path) -> dict:
    """Read a result file into a flat dict of arrays (``"picks/t0"`` style keys) plus ``"attrs"``."""
    path = Path(path)
    try:
        h5 = h5py.File(path, "r")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except OSError:
        raise InputError(f"{path}: not an HDF5 result file") from None
    with h5:
        if "format_version" not in h5.attrs:
            raise InputError(f"{path}: not a velspec result (no format_version attribute)")
        out: dict = {"attrs": {k: (v.item() if hasattr(v, "item") else v) for k, v in h5.attrs.items()}}
        h5.visititems(lambda name, obj: out.__setitem__(name, obj[()]) if isinstance(obj, h5py.Dataset) else None)
    for key in ("parameters", "input"):
        if isinstance(out["attrs"].get(key), (str, bytes)):
            out["attrs"][key] = json.loads(out["attrs"][key])
    return out
