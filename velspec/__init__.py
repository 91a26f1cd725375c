"""velspec: first-pass velocity analysis of prestack 2D seismic lines on the CPU.

Every command is one call here::

    import velspec

    result = velspec.run_line("line.sgy", {"scan": {"nvel": 160}})   # the whole result in memory
    velspec.run_to_file("line.sgy", "line.h5", {"scan": {"nvel": 160}})  # velspec run: streamed, resumable
    velspec.write_result("line.h5", result)
    velspec.write_picks("picks.csv", result)                         # velspec picks
    revised = velspec.revise_result("line.h5", edits="edits.csv")     # velspec revise
    check = velspec.crosscheck_line("line.sgy", result)              # t^2-x^2 cross-check
    velspec.export_result("line.h5", "products", line="line.sgy")    # velspec export
    velspec.report_result("line.h5", "report")                       # velspec report
    report = velspec.compare_results("new.h5", "line.h5", rtol=1e-3)  # velspec compare
    velspec.write_config("line.toml", result.params)                 # velspec config

The data flow is read (``velspec.io``) -> scan (``velspec.scan``) -> pick (``velspec.pick``) ->
line pass and interval velocities (``velspec.linepass``, ``velspec.interval``) -> write
(``velspec.io.hdf5``); ``velspec.pipeline`` strings the stages together. The result of every
stage and command is one :class:`LineAnalysis`. Names are loaded on first use, so
``import velspec`` stays quick.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_PUBLIC = {
    "run_line": "velspec.pipeline",
    "run_to_file": "velspec.streaming",
    "RunSummary": "velspec.streaming",
    "revise_result": "velspec.pipeline",
    "read_result": "velspec.io.hdf5",
    "write_result": "velspec.io.hdf5",
    "write_picks": "velspec.io.picks_csv",
    "read_picks": "velspec.io.picks_csv",
    "crosscheck_line": "velspec.crosscheck",
    "tx2_velocity": "velspec.crosscheck",
    "scan_gather": "velspec.scan",
    "velocity_axis": "velspec.scan",
    "pick_panel": "velspec.pick",
    "survey_line": "velspec.inspect",
    "run_demo": "velspec.demo",
    "export_result": "velspec.export",
    "report_result": "velspec.report",
    "nmo_correct": "velspec.nmo",
    "nmo_stack": "velspec.nmo",
    "compare_results": "velspec.compare",
    "ComparisonReport": "velspec.compare",
    "CompareParams": "velspec.compare",
    "to_toml": "velspec.config",
    "write_config": "velspec.config",
    "load_toml": "velspec.params",
    "RunParams": "velspec.params",
    "LineAnalysis": "velspec.result",
    "PICK_DTYPE": "velspec.result",
    "Flag": "velspec.flags",
    "VelspecError": "velspec.errors",
    "CAUTION": "velspec.caution",
    "FORMAT_VERSION": "velspec.io.hdf5",
}

__all__ = sorted(_PUBLIC) + ["__version__"]


def __getattr__(name: str):
    if name in _PUBLIC:
        value = getattr(importlib.import_module(_PUBLIC[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'velspec' has no attribute {name!r}")


def __dir__():
    return __all__
