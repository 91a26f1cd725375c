import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
WELLS = ROOT.parent / "shared" / "data" / "wells"
sys.path.insert(0, str(ROOT / "benchmarks"))  # tests/test_targets.py imports benchmarks/picking.py


def ricker(t, f):
    """Ricker wavelet (Ricker, 1953, The form and laws of propagation of seismic wavelets, Geophysics 18)."""
    a = (np.pi * f * t) ** 2
    return (1.0 - 2.0 * a) * np.exp(-a)


@pytest.fixture
def rng():
    return np.random.default_rng(12345)
