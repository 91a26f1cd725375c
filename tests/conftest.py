import sys
from pathlib import Path

import numpy as np
import pytest

from velspec.synth.scenarios import WELLS  # noqa: F401  ($VELSPEC_WELLS, else ../shared/data/wells): one place

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))  # tests/test_targets.py imports benchmarks/picking.py


def ricker(t, f):
    """Ricker wavelet (Ricker, 1953, The form and laws of propagation of seismic wavelets, Geophysics 18)."""
    a = (np.pi * f * t) ** 2
    return (1.0 - 2.0 * a) * np.exp(-a)


def need_well(name):
    """Path of an open well log in WELLS, or skip the test saying where it was looked for."""
    path = WELLS / name
    if not path.exists():
        pytest.skip(f"open well log {path} not present (set VELSPEC_WELLS to the folder of the open logs)")
    return path


@pytest.fixture
def rng():
    return np.random.default_rng(12345)
