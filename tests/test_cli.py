"""The command line: the result layout of interface.md, and bad input giving one
``velspec: error:`` line, exit status 2 and nothing half-written."""

import hashlib
import json
import shutil
import subprocess
import sys

import h5py
import numpy as np
import pytest
import segyio
from clitools import assert_user_error, no_output, run

from velspec.synth import LineSpec, make_line


@pytest.fixture(scope="module")
def line(tmp_path_factory):
    path = tmp_path_factory.mktemp("line") / "line.sgy"
    make_line(path, LineSpec(ncmp=8, snr=6.0, nsamples=600, seed=2))
    return path








def test_result_file_follows_the_interface(line, tmp_path, capsys):
    out = tmp_path / "r.h5"
    status, _, err = run(["run", line, "--out", out, "--quiet", "--nvel", "80"], capsys)
    assert status == 0, err
    with h5py.File(out, "r") as h5:
        assert h5.attrs["format_version"] == 1
        params = json.loads(h5.attrs["parameters"])
        assert params["scan"]["nvel"] == 80 and params["scan"]["vmin"] == 1400.0
        ident = json.loads(h5.attrs["input"])
        assert ident["size"] == line.stat().st_size
        assert ident["checksum"] == "sha256:" + hashlib.sha256(line.read_bytes()).hexdigest()  # hashlib: reference
        assert "T" in h5.attrs["created"] and isinstance(h5.attrs["velspec_version"], str)
        ncmp, nt = h5["vrms"].shape
        assert ncmp == 8 and nt == 600
        expect = {"cmp": ("int64", (ncmp,)), "cmp_x": ("float64", (ncmp,)), "cmp_y": ("float64", (ncmp,)),
                  "t0": ("float64", (nt,)), "vrms": ("float32", (ncmp, nt)), "vint": ("float32", (ncmp, nt))}
        for name, (dtype, shape) in expect.items():
            assert h5[name].dtype == dtype and h5[name].shape == shape, name
        npick = h5["picks/t0"].shape[0]
        assert npick > 0
        for name, dtype in (("cmp", "int64"), ("t0", "float64"), ("vrms", "float32"), ("coherence", "float32")):
            assert h5[f"picks/{name}"].dtype == dtype and h5[f"picks/{name}"].shape == (npick,)
        assert np.all(np.diff(h5["cmp"][:]) > 0)
        assert np.isfinite(h5["vrms"][:]).all() and np.isfinite(h5["vint"][:]).all()
        vint = h5["vint"][:]
        bounds = params["interval"]
        assert vint.min() >= bounds["vint_min"] - 1e-3 and vint.max() <= bounds["vint_max"] + 1e-3
        assert np.all((h5["picks/coherence"][:] >= 0) & (h5["picks/coherence"][:] <= 1))
        # Every dataset carries a units attribute (interface.md).
        missing = []
        h5.visititems(lambda n, o: missing.append(n)
                      if isinstance(o, h5py.Dataset) and "units" not in o.attrs else None)
        assert not missing, missing
        # CMP x from the CDP X header with its scalar (SEG-Y rev 1 bytes 181 and 71).
        with segyio.open(line, ignore_geometry=True) as f:
            cdpx = f.attributes(181)[:] * 0.01   # the generator writes scalar -100
            cdp = f.attributes(21)[:]
        assert np.allclose(h5["cmp_x"][0], cdpx[cdp == h5["cmp"][0]].mean())
        # t0 from the traces' time zero, sampled at the header interval (SEG-Y rev 1 byte 3217).
        assert np.allclose(np.diff(h5["t0"][:]), 0.004)
    assert no_output(tmp_path) == ["r.h5"]


def test_existing_output_needs_force(line, tmp_path, capsys):
    out = tmp_path / "r.h5"
    out.write_bytes(b"keep me")
    status, _, err = run(["run", line, "--out", out, "--quiet"], capsys)
    assert_user_error(status, err, "exists", "--force")
    assert out.read_bytes() == b"keep me"


def test_text_file_is_not_segy(tmp_path, capsys):
    bad = tmp_path / "notes.sgy"
    bad.write_text("this is a processing report, not seismic data\n" * 200)
    status, _, err = run(["run", bad, "--out", tmp_path / "r.h5"], capsys)
    assert_user_error(status, err, "SEG-Y")
    assert no_output(tmp_path) == []


def test_truncated_segy(line, tmp_path, capsys):
    cut = tmp_path / "cut.sgy"
    data = line.read_bytes()
    cut.write_bytes(data[: len(data) - 1000])
    status, _, err = run(["run", cut, "--out", tmp_path / "r.h5"], capsys)
    assert_user_error(status, err, "truncated")
    assert no_output(tmp_path) == []


def test_file_with_no_traces(line, tmp_path, capsys):
    empty = tmp_path / "empty.sgy"
    empty.write_bytes(line.read_bytes()[:3600])   # textual + binary header only (SEG-Y rev 1)
    status, _, err = run(["run", empty, "--out", tmp_path / "r.h5"], capsys)
    assert_user_error(status, err, "no traces")
    assert no_output(tmp_path) == []


def test_cdp_and_coordinates_all_zero(line, tmp_path, capsys):
    blank = tmp_path / "blank.sgy"
    shutil.copy(line, blank)
    with segyio.open(blank, "r+", ignore_geometry=True) as f:
        zero = {segyio.TraceField.CDP: 0, segyio.TraceField.SourceX: 0, segyio.TraceField.SourceY: 0,
                segyio.TraceField.GroupX: 0, segyio.TraceField.GroupY: 0, segyio.TraceField.CDP_X: 0,
                segyio.TraceField.CDP_Y: 0}
        for i in range(f.tracecount):
            f.header[i].update(zero)
    status, _, err = run(["run", blank, "--out", tmp_path / "r.h5"], capsys)
    assert_user_error(status, err, "CDP", "coordinates")
    assert no_output(tmp_path) == []


def test_vmin_not_below_vmax(line, tmp_path, capsys):
    status, _, err = run(["run", line, "--out", tmp_path / "r.h5", "--vmin", "3000", "--vmax", "2000"], capsys)
    assert_user_error(status, err, "vmin", "vmax")
    assert no_output(tmp_path) == []


def test_bad_option_and_bad_config(line, tmp_path, capsys):
    status, _, err = run(["run", line, "--out", tmp_path / "r.h5", "--nvel", "many"], capsys)
    assert_user_error(status, err, "--nvel")
    cfg = tmp_path / "p.toml"
    cfg.write_text("[scan]\nwindwo = 0.05\n")
    status, _, err = run(["run", line, "--out", tmp_path / "r.h5", "--config", cfg], capsys)
    assert_user_error(status, err, "windwo")
    assert no_output(tmp_path) == []


@pytest.mark.parametrize("pick, words", [
    ("bounds = [[0.0, 2000.0]]", ["bounds", "three numbers"]),
    ("bounds = [[1.0, 2000.0, 3000.0], [0.5, 2100.0, 3100.0]]", ["increasing t0"]),
    ("bounds = [[0.0, 3000.0, 2000.0]]", ["vmin < vmax"]),
    ("guide_below = 1.5", ["guide_below"]),
    ("edit_mode = \"merge\"", ["edit_mode"]),
    ("smooth_cmps = -1", ["smooth_cmps"]),
    ("multiple_velocity_tolerance = 0", ["multiple_velocity_tolerance"]),
])
def test_impossible_pick_parameters(line, tmp_path, capsys, pick, words):
    cfg = tmp_path / "p.toml"
    cfg.write_text(f"[pick]\n{pick}\n")
    status, _, err = run(["run", line, "--out", tmp_path / "r.h5", "--config", cfg], capsys)
    assert_user_error(status, err, *words)
    assert no_output(tmp_path) == []


def test_missing_input(tmp_path, capsys):
    status, _, err = run(["run", tmp_path / "nothere.sgy", "--out", tmp_path / "r.h5"], capsys)
    assert_user_error(status, err, "no such file")


def test_config_file_is_used_and_command_line_wins(line, tmp_path, capsys):
    cfg = tmp_path / "p.toml"
    cfg.write_text("keep_spectra = 2\n[scan]\nnvel = 50\nwindow = 0.032\n[interval]\nvint_min = 1450.0\n")
    out = tmp_path / "r.h5"
    status, _, err = run(["run", line, "--out", out, "--config", cfg, "--nvel", "60", "--quiet"], capsys)
    assert status == 0, err
    with h5py.File(out, "r") as h5:
        p = json.loads(h5.attrs["parameters"])
        assert p["scan"]["nvel"] == 60 and p["scan"]["window"] == 0.032 and p["interval"]["vint_min"] == 1450.0
        assert h5["spectra/coherence"].shape == (2, 60, 600)


def test_dead_cmp_and_nan_traces_warn_and_are_counted(line, tmp_path, capsys):
    odd = tmp_path / "odd.sgy"
    shutil.copy(line, odd)
    with segyio.open(odd, "r+", ignore_geometry=True) as f:
        cdp = f.attributes(segyio.TraceField.CDP)[:]
        first = np.flatnonzero(cdp == cdp.min())
        for i in first[1:]:
            f.trace[int(i)] = np.zeros(f.samples.size, dtype=np.float32)   # one live trace left
        other = np.flatnonzero(cdp == cdp.max())[:3]
        for i in other:
            t = f.trace[int(i)].copy()
            t[100] = np.nan
            f.trace[int(i)] = t
    out = tmp_path / "r.h5"
    status, _, err = run(["run", odd, "--out", out, "--quiet"], capsys)
    assert status == 0
    warnings = [ln for ln in err.splitlines() if ln.startswith("velspec: warning:")]
    assert any("fewer than 2 live traces" in w for w in warnings)
    assert any("NaN" in w for w in warnings)
    with h5py.File(out, "r") as h5:
        assert int(cdp.min()) not in h5["cmp"][:]
        assert list(h5["qc/skipped_cmp"][:]) == [int(cdp.min())]
        assert h5.attrs["nan_traces"] == 3
        row = int(np.flatnonzero(h5["cmp"][:] == cdp.max())[0])
        assert h5["qc/nan_traces"][row] == 3 and h5["qc/live_traces"][row] == len(np.flatnonzero(cdp == cdp.max())) - 3


def test_no_traceback_from_the_installed_command(tmp_path):
    # One line and status 2 from a real process too (no Python traceback on stderr).
    bad = tmp_path / "x.sgy"
    bad.write_bytes(b"\0" * 100)
    proc = subprocess.run([sys.executable, "-m", "velspec.cli", "run", str(bad), "--out", str(tmp_path / "r.h5")],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert proc.stderr.startswith("velspec: error:") and "Traceback" not in proc.stderr


def test_inspect_reports_the_line(line, capsys):
    status, out, _ = run(["inspect", line], capsys)
    assert status == 0
    assert "CMPs" in out and "8 from 1001 to 1008" in out and "4 ms" in out


def test_demo_builds_its_folder(tmp_path, capsys):
    out = tmp_path / "demo"
    status, text, err = run(["demo", "--out", out, "--quiet"], capsys)
    assert status == 0, err
    names = sorted(p.name for p in out.iterdir())
    assert "result.h5" in names and "demo_line.sgy" in names
    png = [n for n in names if n.endswith(".png")]
    assert len(png) == 1 and (out / png[0]).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "first-pass" in text and "qualified" in text
    assert not (tmp_path / "demo.partial").exists()
    status, _, err = run(["demo", "--out", out], capsys)
    assert_user_error(status, err, "exists", "--force")


def test_thread_count_does_not_change_the_result(line, tmp_path, capsys):
    for n in (1, 2):
        status, _, err = run(["run", line, "--out", tmp_path / f"t{n}.h5", "--threads", n, "--quiet"], capsys)
        assert status == 0, err
    with h5py.File(tmp_path / "t1.h5", "r") as a, h5py.File(tmp_path / "t2.h5", "r") as b:
        for name in ("vrms", "vint", "picks/t0", "picks/vrms", "spectra/coherence"):
            assert np.array_equal(a[name][:], b[name][:]), name


def test_line_with_no_usable_trace(line, tmp_path, capsys):
    nan = tmp_path / "nan.sgy"
    shutil.copy(line, nan)
    with segyio.open(nan, "r+", ignore_geometry=True) as f:
        for i in range(f.tracecount):
            f.trace[i] = np.full(f.samples.size, np.nan, dtype=np.float32)
    status, _, err = run(["run", nan, "--out", tmp_path / "r.h5"], capsys)
    lines = [ln for ln in err.splitlines() if ln.startswith("velspec: error:")]
    assert status == 2 and len(lines) == 1 and "live traces" in lines[0]
    assert "Traceback" not in err
    assert no_output(tmp_path) == []
