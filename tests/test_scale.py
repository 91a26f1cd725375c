"""Large lines: ``velspec run`` streams to disk, resumes after SIGKILL with the same bits, refuses
a partial file of another run, and never leaves a file that looks complete.

The references here are not numbers but invariances: the streamed file must hold the same
bits as the in-memory run (``run_line`` + ``write_result``) and an uninterrupted run; HDF5
content is read back with h5py (the reference library of the format).
"""

import json
import os
import signal
import subprocess
import sys
import time

import h5py
import numpy as np
import pytest
from clitools import assert_user_error, run

import velspec
import velspec.streaming
from velspec.errors import InputError
from velspec.io.hdf5 import partial_path
from velspec.partial import partial_state
from velspec.streaming import run_to_file
from velspec.synth import LineSpec, make_line

VELSPEC = [sys.executable, "-c", "import sys; from velspec.cli import main; sys.exit(main())"]
# a small line whose scan is slow enough (nonhyperbolic, 2-CMP blocks) to be killed half-way
SLOW = 'block = 2\nthreads = 1\n[scan]\nnvel = 40\nmoveout = "nonhyperbolic"\nneta = 10\n'


def datasets(path) -> dict:
    """Every dataset of an HDF5 file as (dtype, shape, bytes), read with h5py."""
    out = {}
    with h5py.File(path, "r") as f:
        f.visititems(lambda n, o: out.__setitem__(n, (o.dtype.str, o.shape, o[()].tobytes()))
                     if isinstance(o, h5py.Dataset) else None)
    return out


def assert_same_bits(a, b):
    da, db = datasets(a), datasets(b)
    assert sorted(da) == sorted(db)
    different = [k for k in da if da[k] != db[k]]
    assert not different, different


@pytest.fixture(scope="module")
def line(tmp_path_factory):
    d = tmp_path_factory.mktemp("scale")
    path = d / "line.sgy"
    make_line(path, LineSpec(ncmp=80, nsamples=750, snr=1.5, seed=4))
    (d / "slow.toml").write_text(SLOW)
    return path


def test_streamed_result_has_the_bits_of_the_in_memory_run(line, tmp_path, monkeypatch):
    # noisy enough that the lateral median flags picks; edits replace the picks of two CMPs
    edits = tmp_path / "edits.csv"
    edits.write_text("cmp,t0_s,vrms_m_s\n1005,0.5,1800\n1005,1.2,2300\n1040,0.8,2000\n")
    params = velspec.RunParams().with_overrides(scan__nvel=50, block=5, keep_spectra=4, pick__edits=str(edits),
                                                pick__lateral_cmps=3, pick__outlier_tolerance=0.003,
                                                pick__outlier_sigmas=0.0).validate()
    reference = tmp_path / "memory.h5"
    velspec.write_result(reference, velspec.run_line(line, params))
    with h5py.File(reference) as f:
        assert (f["picks/flags"][()] & int(velspec.Flag.lateral_outlier)).any()   # the halo matters
    # windows of the line pass far smaller than the line, so every window boundary is crossed
    monkeypatch.setattr(velspec.streaming, "LINE_BLOCK", 8)
    summary = run_to_file(line, tmp_path / "streamed.h5", params)
    assert summary.cmps == 80
    assert_same_bits(tmp_path / "streamed.h5", reference)
    assert not partial_path(tmp_path / "streamed.h5").exists()


def _wait_for_half(proc, partial, timeout=120.0):
    """Poll the completion records until about half the blocks are done; (done, total)."""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        state = partial_state(partial) if partial.exists() else None
        if state and state[0] >= state[1] // 2:
            return state
        if proc.poll() is not None:
            break
        time.sleep(0.01)
    raise AssertionError(f"the run ended or stalled before half-way: {state}")


def test_resume_after_sigkill_gives_the_bits_of_an_uninterrupted_run(line, tmp_path, capsys):
    config = line.parent / "slow.toml"
    whole = tmp_path / "whole.h5"
    status, _, err = run(["run", line, "--out", whole, "--config", config, "--quiet"], capsys)
    assert status == 0, err
    out = tmp_path / "cut.h5"
    proc = subprocess.Popen([*VELSPEC, "run", str(line), "--out", str(out), "--config", str(config), "--quiet"],
                            stderr=subprocess.PIPE)
    done, total = _wait_for_half(proc, partial_path(out))
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert done < total
    # nothing under the result's name, and what is there does not read as a result
    assert not out.exists()
    leftovers = sorted(p.name for p in tmp_path.iterdir() if p.name.startswith("cut"))
    assert leftovers == ["cut.h5.partial"]
    with pytest.raises(InputError):
        velspec.read_result(partial_path(out))
    status, _, err = run(["run", line, "--out", out, "--config", config, "--resume"], capsys)
    assert status == 0, err
    finished_before = int(err.split("; ")[-1].split(" of ")[0])
    assert finished_before >= done   # those blocks were not redone
    assert_same_bits(out, whole)
    assert not partial_path(out).exists()


def _interrupted(line, out, capsys, extra=()):
    """A partial file as an interrupted run leaves it: a run stopped after its streaming pass."""
    def stop(*args, **kwargs):
        raise KeyboardInterrupt

    import velspec.streaming as st

    keep = st._line_pass
    st._line_pass = stop
    try:
        status, _, err = run(["run", line, "--out", out, "--nvel", "30", "--quiet", *extra], capsys)
    finally:
        st._line_pass = keep
    assert status == 2 and "--resume" in err
    assert partial_path(out).exists() and not out.exists()


def test_a_partial_file_of_other_parameters_is_refused(line, tmp_path, capsys):
    out = tmp_path / "r.h5"
    _interrupted(line, out, capsys)
    before = partial_path(out).read_bytes()
    status, _, err = run(["run", line, "--out", out, "--nvel", "31", "--resume"], capsys)
    assert_user_error(status, err, "other parameters", "scan.nvel")
    assert partial_path(out).read_bytes() == before and not out.exists()
    # the thread count does not change the bits, so it may differ
    status, _, err = run(["run", line, "--out", out, "--nvel", "30", "--threads", "1", "--resume", "--quiet"], capsys)
    assert status == 0, err
    assert out.exists() and not partial_path(out).exists()


def test_a_partial_file_of_another_input_is_refused(line, tmp_path, capsys):
    out = tmp_path / "r.h5"
    _interrupted(line, out, capsys)
    other = tmp_path / "other.sgy"
    make_line(other, LineSpec(ncmp=80, nsamples=750, snr=1.5, seed=5))   # same geometry, other noise
    status, _, err = run(["run", other, "--out", out, "--nvel", "30", "--resume"], capsys)
    assert_user_error(status, err, "another input")
    assert partial_path(out).exists() and not out.exists()


def test_resume_and_fresh_runs_say_what_to_do_with_a_partial_file(line, tmp_path, capsys):
    out = tmp_path / "r.h5"
    status, _, err = run(["run", line, "--out", out, "--resume"], capsys)
    assert_user_error(status, err, "no interrupted run", "without --resume")
    _interrupted(line, out, capsys)
    status, _, err = run(["run", line, "--out", out, "--nvel", "30"], capsys)
    assert_user_error(status, err, "interrupted run", "--resume", "--force")
    status, _, err = run(["run", line, "--out", out, "--nvel", "30", "--force", "--quiet"], capsys)
    assert status == 0 and out.exists() and not partial_path(out).exists()


def test_a_block_cut_off_half_written_is_redone(line, tmp_path, capsys):
    # data of a block written without its completion record (the process died in between)
    out = tmp_path / "r.h5"
    _interrupted(line, out, capsys)
    with h5py.File(partial_path(out), "r+") as f:
        done = f["done"][()]
        f["done"][len(done) // 2] = 0
        n = f["picks"].shape[0]
        f["picks"].resize((n + 7,))   # rows after the recorded blocks, as a block cut off leaves them
        f["picks"][n:] = np.ones(7, f["picks"].dtype)
        f["path"][0] = 0.0
        f["done"][0] = 0
    status, _, err = run(["run", line, "--out", out, "--nvel", "30", "--resume"], capsys)
    assert status == 0, err
    assert f"{len(done) - 2} of {len(done)} blocks" in err
    reference = tmp_path / "ref.h5"
    run(["run", line, "--out", reference, "--nvel", "30", "--quiet"], capsys)
    assert_same_bits(out, reference)


def test_result_attributes_say_what_was_run(line, tmp_path):
    out = tmp_path / "r.h5"
    run_to_file(line, out, {"scan": {"nvel": 30}})
    with h5py.File(out) as f:
        assert f.attrs["format_version"] == velspec.FORMAT_VERSION
        identity = json.loads(f.attrs["input"])
        assert identity["checksum"].startswith("sha256:")
        assert f["vrms"].dims[0][0].name == "/cmp" and f["vrms"].dims[1][0].name == "/t0"
        assert f["depth/vint"].dims[1][0].name == "/depth/z"


_PEAK = """
import sys, tracemalloc
import velspec
import velspec.streaming
from velspec.streaming import run_to_file
import velspec.linepass
velspec.streaming.LINE_BLOCK = 16   # windows of the line pass smaller than both lines
velspec.linepass.REG_WINDOW, velspec.linepass.REG_HALO = 16, 8   # and those of the regularised field
velspec.run_line(sys.argv[1], {"scan": {"nvel": 30}, "keep_spectra": 0})   # compile and warm up outside the count
tracemalloc.start()
run_to_file(sys.argv[1], sys.argv[2], {"scan": {"nvel": 30}, "keep_spectra": 0, "threads": 1})
print(tracemalloc.get_traced_memory()[1])
"""


@pytest.mark.slow
def test_peak_memory_does_not_grow_with_the_line(tmp_path):
    # numpy reports its buffers to tracemalloc; a run that held its fields would grow by them.
    # What may grow is the header index (about 100 bytes a trace while the headers are surveyed).
    peaks, nt = {}, 1000
    # both lines longer than a block of gathers with its prefetched successor and smoothing halo,
    # so both reach the streaming pass's steady state
    for n in (80, 240):
        path = tmp_path / f"l{n}.sgy"
        make_line(path, LineSpec(ncmp=n, nsamples=nt, snr=4.0, seed=1))
        done = subprocess.run([sys.executable, "-c", _PEAK, str(path), str(tmp_path / f"r{n}.h5")],
                              capture_output=True, text=True, timeout=600, env=dict(os.environ, NUMBA_NUM_THREADS="1"))
        assert done.returncode == 0, done.stderr[-2000:]
        peaks[n] = int(done.stdout.split()[-1])
    # vrms, vint, vint_sigma, the traced path and qc/vint_raw of the 160 extra CMPs, float32
    fields = (240 - 80) * nt * 4 * 5
    assert peaks[240] - peaks[80] < 0.5 * fields, peaks
