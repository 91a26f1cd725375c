"""The machine the kernels run on: how many threads they use."""

from __future__ import annotations


def set_threads(threads: int) -> int:
    """Use ``threads`` threads in the numba kernels (0: all cores); returns the number set.

    The output bits do not depend on it: every kernel computes each output value on one thread.
    """
    import numba

    most = numba.config.NUMBA_NUM_THREADS
    n = min(threads, most) if threads > 0 else most
    numba.set_num_threads(n)
    return n


def host() -> dict:
    """The machine a result was made on, for its provenance: the CPU model, the LLVM CPU name
    numba compiles for, the semblance kernel's path (vector width and permute), versions.

    The bits of a result do not depend on any of it (every path gives the same bits); it is
    recorded so that a comparison can say where two results were made.
    """
    import platform

    import numba
    import numpy

    from .scan.kernels import TARGET

    model = platform.processor() or ""
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            for line in fh:
                if line.startswith("model name"):
                    model = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    return {"cpu_model": model, "llvm_cpu": TARGET.cpu, "kernel_path": TARGET.path, "arch": TARGET.arch,
            "threads": numba.get_num_threads(), "numba": numba.__version__, "numpy": numpy.__version__,
            "python": platform.python_version()}
