"""Minimal reader for LAS 2.0 well-log files (the ASCII log format of the Canadian Well Logging
Society), enough to take a sonic log into a layered velocity model.

Handled: the ~Version, ~Well, ~Curve, ~Parameter and ~Other sections, ``WRAP NO`` (one line per
depth step) and ``WRAP YES`` (a depth step spread over several lines), the NULL value and the
common absent-value markers, and an index that runs either up or down the hole.

References
----------
Canadian Well Logging Society, 1992 (rev. 2009), LAS Version 2.0: a digital standard for logging
data.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from velspec.errors import InputError

__all__ = ["read_las", "read_sonic", "ABSENT_VALUES"]

ABSENT_VALUES = (-999.25, -9999.0, -9999.25)
"""Values taken as absent besides the file's own NULL: files often use one but declare another."""

_FOOT = 0.3048  # m, exact by definition
_UNIT = re.compile(r"(\S*)\s*(.*)", re.S)


def _decode(raw: bytes) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        return raw.decode("latin-1")  # older files carry single-byte symbols such as a degree sign


def _header_line(line: str):
    """Split ``MNEM.UNIT  DATA : DESCRIPTION`` into its four parts, or None if it has no dot."""
    dot = line.find(".")
    if dot < 0:
        return None
    mnem = line[:dot].strip()
    unit, rest = _UNIT.match(line[dot + 1 :]).groups()
    colon = rest.rfind(":")  # the description follows the last colon, so times like 12:30 survive
    value, desc = (rest[:colon], rest[colon + 1 :]) if colon >= 0 else (rest, "")
    return mnem, unit.strip(), value.strip(), desc.strip()


def read_las(path, absent_values=ABSENT_VALUES):
    """Read a LAS 2.0 file.

    Parameters
    ----------
    path : str or Path
        The ``.las`` file.
    absent_values : sequence of float
        Values read as NaN in addition to the NULL value the ~Well section declares.

    Returns
    -------
    curves : dict[str, ndarray]
        Each curve by its mnemonic, float64, in the order of the ~Curve section; the first is the
        index (usually depth). Rows are sorted by increasing index whatever the file's direction,
        rows with an absent index are dropped, absent values are NaN.
    units : dict[str, str]
        Unit string of each curve as written in the file (e.g. ``"M"``, ``"US/F"``).
    well : dict[str, str]
        The ~Version and ~Well entries (``VERS``, ``WRAP``, ``STRT``, ``NULL``, ``WELL``, ...),
        values as written.

    Raises
    ------
    InputError
        If the file is missing, has no ~Curve or ~Ascii section, or its data do not fit the curves.

    References
    ----------
    Canadian Well Logging Society, 1992, LAS Version 2.0.
    """
    path = Path(path)
    try:
        text = _decode(path.read_bytes())
    except OSError as exc:
        raise InputError(f"cannot read LAS file {path}: {exc.strerror}") from exc

    well: dict[str, str] = {}
    names: list[str] = []
    units: dict[str, str] = {}
    section = None
    data_lines: list[str] = []
    for raw in text.splitlines():
        line = raw.strip()
        if section == "A":
            if line and not line.startswith("#"):
                data_lines.append(line)
            continue
        if not line or line.startswith("#"):
            continue
        if line.startswith("~"):
            section = line[1:2].upper()
            continue
        parts = _header_line(line)
        if parts is None:
            continue
        mnem, unit, value, _ = parts
        if section in ("V", "W"):
            well[mnem.upper()] = value
        elif section == "C":
            name, k = mnem, 2
            while name in units:  # LAS allows repeated mnemonics; keep both
                name, k = f"{mnem}_{k}", k + 1
            names.append(name)
            units[name] = unit

    if not names:
        raise InputError(f"{path}: no ~Curve section; is this a LAS 2.0 file?")
    if section != "A":
        raise InputError(f"{path}: no ~Ascii data section")
    wrapped = well.get("WRAP", "NO").split()[0:1] == ["YES"]
    ncurves = len(names)
    if not wrapped:
        for i, line in enumerate(data_lines):
            if len(line.split()) != ncurves:
                raise InputError(
                    f"{path}: data line {i + 1} has {len(line.split())} values for {ncurves} "
                    "curves (WRAP NO means one line per depth step)"
                )
    tokens = " ".join(data_lines).split()
    if len(tokens) % ncurves:
        raise InputError(f"{path}: {len(tokens)} data values do not fill rows of {ncurves} curves")
    try:
        data = np.array(tokens, dtype=np.float64).reshape(-1, ncurves)
    except ValueError as exc:
        raise InputError(f"{path}: non-numeric value in the ~Ascii section ({exc})") from exc

    absent = list(absent_values)
    try:
        absent.append(float(well.get("NULL", "nan")))
    except ValueError:
        pass
    data[np.isin(data, absent)] = np.nan
    data = data[np.isfinite(data[:, 0])]
    data = data[np.argsort(data[:, 0], kind="stable")]
    curves = {name: data[:, j].copy() for j, name in enumerate(names)}
    return curves, units, well


def read_sonic(path, curve="DT"):
    """Depth and P-sonic slowness from a LAS file, in metres and microseconds per foot.

    Parameters
    ----------
    path : str or Path
        The ``.las`` file.
    curve : str
        Mnemonic of the sonic curve.

    Returns
    -------
    depth_m : ndarray
        Depth of each sample with a sonic value, m, increasing.
    dt_us_per_ft : ndarray
        Sonic slowness, us/ft (converted from us/m if the file says so).

    Raises
    ------
    InputError
        If the curve is missing or its units or the index units are not understood.
    """
    curves, units, _ = read_las(path)
    if curve not in curves:
        raise InputError(f"{path}: no {curve} curve; curves are {', '.join(curves)}")
    index = next(iter(curves))
    zu = units[index].upper()
    if zu in ("M", "METER", "METERS", "METRE", "METRES"):
        zscale = 1.0
    elif zu in ("F", "FT", "FEET", "FOOT"):
        zscale = _FOOT
    else:
        raise InputError(f"{path}: index unit {units[index]!r} is neither metres nor feet")
    su = units[curve].upper().replace(" ", "")
    if su in ("US/F", "US/FT", "USEC/FT", "US/FOOT"):
        sscale = 1.0
    elif su in ("US/M", "USEC/M"):
        sscale = _FOOT  # us/m * 0.3048 m/ft = us/ft
    else:
        raise InputError(f"{path}: sonic unit {units[curve]!r} is neither us/ft nor us/m")
    dt = curves[curve] * sscale
    ok = np.isfinite(dt) & (dt > 0)
    return curves[index][ok] * zscale, dt[ok]
