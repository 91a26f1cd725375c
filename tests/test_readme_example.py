"""The README's Python example runs as written on a generated line, with ``import velspec`` alone."""

import os
import re
from pathlib import Path

import numpy as np

import velspec
from velspec.synth import LineSpec, make_line

README = Path(__file__).resolve().parents[1] / "README.md"


def python_example() -> str:
    blocks = re.findall(r"```python\n(.*?)```", README.read_text(), flags=re.S)
    assert blocks, "the README has no Python example"
    return blocks[0]


def test_the_readme_example_runs(tmp_path, capsys):
    make_line(tmp_path / "line.sgy", LineSpec(ncmp=4, snr=4.0, nsamples=600, seed=2))
    # a person's picks for one CMP, 2 % faster than the model's RMS velocity at four times
    rows = ["cmp,t0_s,vrms_m_s", "1002,0.5,1600", "1002,1.0,1800", "1002,1.5,2000", "1002,2.0,2200"]
    (tmp_path / "edits.csv").write_text("\n".join(rows) + "\n")
    code = python_example()
    assert re.findall(r"^\s*(?:import|from)\s+(\S+)", code, flags=re.M) == ["velspec"]
    here = os.getcwd()
    os.chdir(tmp_path)
    try:
        exec(compile(code, str(README), "exec"), {})
    finally:
        os.chdir(here)
    for name in ("line.h5", "picks.csv", "line-revised.h5"):
        assert (tmp_path / name).is_file(), name
    revised = velspec.read_result(tmp_path / "line-revised.h5")
    assert revised.attrs["edited_cmps"] == 1
    edited = revised.picks_of(1002)
    assert np.allclose(np.sort(edited["vrms"][revised.used[revised.picks["cmp"] == 1002]]), [1600, 1800, 2000, 2200])
    assert "1 CMP(s) edited" in capsys.readouterr().out


def test_the_namespace_lists_every_command():
    for name in ("run_line", "revise_result", "read_result", "write_result", "write_picks", "read_picks",
                 "crosscheck_line", "scan_gather", "survey_line", "run_demo", "RunParams", "LineAnalysis", "Flag"):
        assert name in velspec.__all__ and callable(getattr(velspec, name)), name
        assert getattr(velspec, name).__doc__, name
    from velspec.scan import scan_gather
    assert velspec.scan_gather is scan_gather
