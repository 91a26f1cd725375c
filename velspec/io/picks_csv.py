"""Velocity functions as CSV: picks a person edits, and guide functions.

One header line names the columns; lines starting with ``#`` are comments. Columns:

- ``cmp`` (integer CMP number; absent in a guide that holds one function for the whole line),
- ``t0_s`` (zero-offset two-way time, s),
- ``vrms_m_s`` (stacking velocity, m/s),

and any others (``sigma_m_s``, ``coherence``, ``flags``, ``used`` as written by
:func:`write_picks`), which are otherwise ignored, except that a row whose ``used`` is 0 is skipped:
a file written by :func:`write_picks` can be given back as it is, and its likely multiples
and rejected picks stay out unless a person sets ``used`` to 1. Times within one CMP must
increase; rows may come in any CMP order.
"""

from __future__ import annotations

import csv
import math
import os
from pathlib import Path

import numpy as np

from ..errors import InputError

REQUIRED = ("t0_s", "vrms_m_s")


def read_functions(path: str | Path, need_cmp: bool = False) -> dict[int | None, tuple[np.ndarray, np.ndarray]]:
    """Read velocity functions from CSV.

    Parameters
    ----------
    path : str or Path
        The file.
    need_cmp : bool
        Require a ``cmp`` column (picks for chosen CMPs); otherwise a file without it holds one
        function, returned under the key None.

    Returns
    -------
    dict
        ``{cmp: (t0 (s, float64, increasing), vrms (m/s, float64))}``.

    Raises
    ------
    InputError
        Missing file or column, a value that is not a number, a time that does not increase
        within a CMP, or a velocity that is not positive; the message names the line.
    """
    path = Path(path)
    try:
        fh = open(path, newline="", encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from None
    with fh:
        lines = (row for row in fh if row.strip() and not row.lstrip().startswith("#"))
        try:
            reader = csv.DictReader(lines)
            fields = [f.strip() for f in (reader.fieldnames or [])]
        except (csv.Error, UnicodeDecodeError) as exc:
            raise InputError(f"{path}: not a readable CSV file ({exc})") from None
        missing = [c for c in REQUIRED + (("cmp",) if need_cmp else ()) if c not in fields]
        if missing:
            raise InputError(f"{path}: missing column(s) {', '.join(missing)}; the header must name "
                             f"{'cmp,' if need_cmp else '[cmp,]'}t0_s,vrms_m_s")
        has_cmp = "cmp" in fields
        rows: dict[int | None, list[tuple[float, float]]] = {}
        try:
            for number, row in enumerate(reader, start=2):
                row = {k.strip(): (v or "").strip() for k, v in row.items() if k is not None}
                if row.get("used", "1") in ("0", "0.0", "false", "False"):
                    continue
                try:
                    key = int(row["cmp"]) if has_cmp else None
                    t, v = float(row["t0_s"]), float(row["vrms_m_s"])
                except (TypeError, ValueError):
                    raise InputError(f"{path}: data row {number - 1}: cmp, t0_s and vrms_m_s must be numbers") from None
                if not (math.isfinite(t) and t >= 0):
                    raise InputError(f"{path}: data row {number - 1}: t0_s must be a time >= 0 s")
                if not (math.isfinite(v) and v > 0):
                    raise InputError(f"{path}: data row {number - 1}: vrms_m_s must be a velocity > 0 m/s")
                rows.setdefault(key, []).append((t, v))
        except (csv.Error, UnicodeDecodeError) as exc:
            raise InputError(f"{path}: not a readable CSV file ({exc})") from None
    if not rows:
        raise InputError(f"{path}: no data rows")
    out = {}
    for key, pairs in rows.items():
        t = np.array([p[0] for p in pairs])
        v = np.array([p[1] for p in pairs])
        if np.any(np.diff(t) <= 0):
            where = f"CMP {key}" if key is not None else "the function"
            raise InputError(f"{path}: times of {where} must increase from row to row")
        out[key] = (t, v)
    return out


def function_on_axis(functions: dict, cmp: int, t0: np.ndarray) -> np.ndarray | None:
    """A guide function sampled on ``t0`` at ``cmp``, m/s.

    A single function (key None) serves every CMP. Per-CMP functions are interpolated linearly
    in CMP number between the two nearest CMPs given, and held beyond the first and last; each
    function is linear in t0 between its rows and held beyond its ends.
    """
    if None in functions:
        t, v = functions[None]
        return np.interp(t0, t, v)
    keys = np.array(sorted(functions))
    if keys.size == 0:
        return None
    if cmp <= keys[0] or cmp >= keys[-1] or cmp in functions:
        near = int(keys[np.argmin(np.abs(keys - cmp))])
        t, v = functions[near]
        return np.interp(t0, t, v)
    k = int(np.searchsorted(keys, cmp))
    a, b = int(keys[k - 1]), int(keys[k])
    w = (cmp - a) / (b - a)
    return (1 - w) * np.interp(t0, *functions[a]) + w * np.interp(t0, *functions[b])


def write_picks(path: str | Path, picks, force: bool = False) -> Path:
    """Write the picks of a result as CSV, atomically (``velspec picks``).

    Columns ``cmp,t0_s,vrms_m_s,sigma_m_s,coherence,flags,used``: a person may edit, delete or
    add rows and give the file back (:func:`read_functions`); only the first three are needed.

    Parameters
    ----------
    path : str or Path
        The CSV file to write.
    picks : LineAnalysis or pick table
        A result, or its pick table (:data:`velspec.result.PICK_DTYPE`).
    force : bool
        Replace an existing file.
    """
    from ..flags import used_mask

    table = getattr(picks, "picks", picks)
    path = Path(path)
    if path.exists() and not force:
        raise InputError(f"{path} exists; use --force to overwrite it")
    tmp = path.with_name(path.name + ".partial")
    used = used_mask(table["flags"]).astype(np.uint8)
    try:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            fh.write("# velspec picks: stacking velocity (m/s) at zero-offset time (s) per CMP; "
                     "first-pass values, to be reviewed by qualified people\n")
            w = csv.writer(fh)
            w.writerow(["cmp", "t0_s", "vrms_m_s", "sigma_m_s", "coherence", "flags", "used"])
            for row, u in zip(table, used):
                w.writerow([int(row["cmp"]), f"{row['t0']:.6f}", f"{row['vrms']:.2f}", f"{row['sigma']:.2f}",
                            f"{row['coherence']:.4f}", int(row["flags"]), int(u)])
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def read_picks(path: str | Path) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """A person's picks for chosen CMPs: ``{cmp: (t0 s, vrms m/s)}`` from a CSV with a ``cmp``
    column (such as an edited output of :func:`write_picks`; rows with ``used`` = 0 skipped)."""
    return read_functions(path, need_cmp=True)
