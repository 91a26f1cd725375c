"""Run parameters as a TOML configuration: written out, so a run can be repeated from it.

:func:`to_toml` writes a :class:`~velspec.params.RunParams` in the layout
:func:`velspec.params.load_toml` reads (top-level keys, then ``[read]``, ``[read.headers]``,
``[scan]``, ``[pick]``, ``[interval]``), every parameter included, defaults too, so that
``load_toml`` of the text gives back an equal ``RunParams``. ``velspec run --print-config``
prints it; ``velspec config RESULT.h5`` writes the parameters a result was made with.
TOML (v1.0.0, 2021) is read by Python's ``tomllib``; the writer is here because the standard
library has none.
"""

from __future__ import annotations

import dataclasses
import math
import os
import textwrap
from pathlib import Path

from . import __version__
from .caution import CAUTION
from .errors import InputError, ParameterError
from .params import RunParams


def to_toml(params: RunParams, header: str = "") -> str:
    """The parameters as TOML text that :func:`velspec.params.load_toml` reads back equal.

    Parameters
    ----------
    params : RunParams
        What to write.
    header : str
        Comment lines put first (each prefixed with ``#``); the caution is always there.

    Returns
    -------
    str

    Raises
    ------
    ParameterError
        A value TOML cannot hold (for instance a string with a lone surrogate character).
    """
    lines = [f"# velspec {__version__} run parameters (TOML); give back with velspec run --config FILE"]
    lines += [f"# {row}" for row in header.splitlines()]
    lines += [f"# {row}" for row in textwrap.wrap(CAUTION, 96)] + [""]
    _table(params, "", lines)
    return "\n".join(lines).rstrip("\n") + "\n"


def write_config(path: str | Path, params: RunParams, force: bool = False, header: str = "") -> Path:
    """Write :func:`to_toml` of ``params`` to ``path`` atomically (``PATH.partial``, then renamed).

    Raises
    ------
    InputError
        ``path`` exists and ``force`` is false, or it cannot be written.
    """
    text = to_toml(params, header)
    path = Path(path)
    if path.exists() and not force:
        raise InputError(f"{path} exists; use --force to overwrite it")
    tmp = path.with_name(path.name + ".partial")
    try:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise InputError(f"{path}: cannot write ({exc.strerror}); check the folder exists and is writable") from None
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def _table(obj, name: str, lines: list) -> None:
    """Scalars of a dataclass first (TOML puts keys before sub-tables), then its sub-tables."""
    subtables = []
    if name:
        lines.append(f"[{name}]")
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        if dataclasses.is_dataclass(value):
            subtables.append((f.name, value))
            continue
        if f.type == "float" and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)   # as typed: 1400 in a file is printed 1400.0
        lines.append(f"{_key(f.name)} = {_value(value, f'{name}.{f.name}'.lstrip('.'))}")
    lines.append("")
    for sub, value in subtables:
        _table(value, f"{name}.{sub}" if name else sub, lines)


def _key(name: str) -> str:
    bare = name and all(c.isascii() and (c.isalnum() or c in "_-") for c in name)
    return name if bare else _string(name)


def _value(v, where: str) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        text = repr(v)   # the shortest text that reads back the same float
        return text if any(c in text for c in ".en") else text + ".0"
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x, where) for x in v) + "]"
    raise ParameterError(f"parameter {where} = {v!r} cannot be written as TOML")


def _string(s: str) -> str:
    """A TOML basic string (v1.0.0: quote, backslash and control characters escaped)."""
    out = ['"']
    for c in s:
        code = ord(c)
        if c == '"':
            out.append('\\"')
        elif c == "\\":
            out.append("\\\\")
        elif c in "\b\t\n\f\r":
            out.append({"\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}[c])
        elif code < 0x20 or code == 0x7F:
            out.append(f"\\u{code:04X}")
        elif 0xD800 <= code <= 0xDFFF:
            raise ParameterError(f"the text {s!r} holds a character TOML cannot store; use plain text")
        else:
            out.append(c)
    out.append('"')
    return "".join(out)


__all__ = ["to_toml", "write_config"]
