"""``velspec run --scheduler`` / ``--workers``: the streaming pass on a real dask.distributed
cluster on loopback (a scheduler and two worker processes) gives the bits of the local run, and
a worker killed mid-run has its blocks redone. The reference is the local run (invariance)."""

import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from test_scale import SLOW, VELSPEC, _wait_for_half, assert_same_bits

from velspec.io.hdf5 import partial_path
from velspec.streaming import run_to_file
from velspec.synth import LineSpec, make_line

distributed = pytest.importorskip("distributed")


def _dask(*argv) -> list[str]:
    script = Path(sys.executable).with_name("dask")
    if script.exists():
        return [str(script), *argv]
    module = {"scheduler": "distributed.cli.dask_scheduler", "worker": "distributed.cli.dask_worker"}[argv[0]]
    return [sys.executable, "-m", module, *argv[1:]]


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    """(address, worker processes) of a scheduler and two one-thread workers on 127.0.0.1."""
    d = tmp_path_factory.mktemp("cluster")
    file = d / "scheduler.json"
    procs = [subprocess.Popen(_dask("scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                                    "--scheduler-file", str(file)), stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL)]
    try:
        end = time.monotonic() + 60
        while not file.exists() and time.monotonic() < end:
            time.sleep(0.1)
        assert file.exists(), "the scheduler did not start"
        workers = [subprocess.Popen(_dask("worker", "--scheduler-file", str(file), "--nthreads", "1", "--no-nanny",
                                          "--no-dashboard", "--host", "127.0.0.1"),
                                    stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL) for _ in range(2)]
        procs += workers
        with distributed.Client(scheduler_file=str(file), timeout="30s") as client:
            client.wait_for_workers(2, timeout=60)
            address = client.scheduler.address
        yield address, workers
    finally:
        for p in procs:
            if p.poll() is None:
                p.send_signal(signal.SIGTERM)
        for p in procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()


@pytest.fixture(scope="module")
def line(tmp_path_factory):
    d = tmp_path_factory.mktemp("cluster-line")
    path = d / "line.sgy"
    make_line(path, LineSpec(ncmp=80, nsamples=750, snr=1.5, seed=4))
    (d / "slow.toml").write_text(SLOW)
    return path


@pytest.fixture(scope="module")
def local(line, tmp_path_factory):
    out = tmp_path_factory.mktemp("local") / "local.h5"
    run_to_file(line, out, line.parent / "slow.toml")
    return out


def test_cluster_run_has_the_bits_of_the_local_run(cluster, line, local, tmp_path):
    address, _ = cluster
    out = tmp_path / "cluster.h5"
    summary = run_to_file(line, out, line.parent / "slow.toml", scheduler=address)
    assert summary.cmps == 80
    assert_same_bits(out, local)


def test_local_cluster_of_two_processes_has_the_bits_of_the_local_run(line, local, tmp_path):
    out = tmp_path / "workers.h5"
    run_to_file(line, out, line.parent / "slow.toml", workers=2)
    assert_same_bits(out, local)


def test_a_worker_killed_mid_run_has_its_blocks_redone(cluster, line, local, tmp_path):
    # last in the file: the cluster is one worker short afterwards
    address, workers = cluster
    out = tmp_path / "killed.h5"
    proc = subprocess.Popen([*VELSPEC, "run", str(line), "--out", str(out), "--config", str(line.parent / "slow.toml"),
                             "--scheduler", address, "--quiet"], stderr=subprocess.PIPE, text=True)
    done, total = _wait_for_half(proc, partial_path(out))
    assert done < total
    workers[0].send_signal(signal.SIGKILL)
    workers[0].wait()
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    assert_same_bits(out, local)


def test_an_unreachable_scheduler_is_one_error_line(line, tmp_path):
    done = subprocess.run([*VELSPEC, "run", str(line), "--out", str(tmp_path / "r.h5"), "--scheduler",
                           "tcp://127.0.0.1:9", "--nvel", "20"], capture_output=True, text=True, timeout=120)
    lines = [ln for ln in done.stderr.splitlines() if ln.strip()]
    assert done.returncode == 2 and lines[-1].startswith("velspec: error:") and "scheduler" in lines[-1], done.stderr
    assert "Traceback" not in done.stderr
    assert not list(tmp_path.iterdir())
