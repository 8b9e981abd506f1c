"""Which tracer kernel runs, and how the compiled one is compiled.

Two kernels give the same results (bit for bit, or within 1e-12 where a libm function such as
exp may differ in the last bit):

* "numba" (the default): the nearest-hit search and the interface step of each generation run
  as compiled loops (`kernel_hits`, `kernel_step`), one pass over the rays per step;
* "numpy": the array code in `intersect`, `accel` and `tracer`, the reference the tests compare
  the compiled kernel against.

Choose with the environment variable RAYTRACE_KERNEL=numba|numpy (worker processes inherit it)
or with `use(...)` in a program.  Compiled functions are cached on disk (`cache=True`), so only
the first start on a machine pays the compile; where the package folder is read-only the cache
goes to a temporary folder, and where no cache can be written at all the functions are compiled
in memory at every start instead.
"""
from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager
import time
from pathlib import Path

from .errors import RaytraceError

KERNELS = ("numba", "numpy")
ENV = "RAYTRACE_KERNEL"

_chosen: str | None = None
COMPILE_SECONDS: dict[str, float] = {}     # first-call time of each compiled entry point


def selected() -> str:
    """The kernel in use: set by `use`, else RAYTRACE_KERNEL, else "numba"."""
    if _chosen is not None:
        return _chosen
    value = os.environ.get(ENV, "numba").strip().lower() or "numba"
    if value not in KERNELS:
        raise RaytraceError(f"environment variable {ENV}: expected one of {', '.join(KERNELS)}, "
                            f"found {os.environ.get(ENV)!r}")
    return value


def use(kernel: str | None) -> None:
    """Select the kernel for this process ("numba", "numpy", or None for the environment's)."""
    global _chosen
    if kernel is not None and kernel not in KERNELS:
        raise RaytraceError(f"kernel: expected one of {', '.join(KERNELS)}, found {kernel!r}")
    _chosen = kernel


@contextmanager
def using(kernel: str):
    """`with using("numpy"): ...` runs the block with that kernel, then restores the choice."""
    before = _chosen
    use(kernel)
    try:
        yield
    finally:
        use(before)


def compiled() -> bool:
    return selected() == "numba"


def _prepare_cache_dir() -> None:
    """numba writes its cache beside the source (__pycache__); where that folder is read-only
    (an installed package, a CI image) point it at a writable temporary folder instead."""
    if os.environ.get("NUMBA_CACHE_DIR"):
        return
    here = Path(__file__).resolve().parent / "__pycache__"
    try:
        here.mkdir(exist_ok=True)
        probe = here / f".write-probe-{os.getpid()}"
        probe.write_bytes(b"")
        probe.unlink()
    except OSError:
        os.environ["NUMBA_CACHE_DIR"] = str(Path(tempfile.gettempdir()) / "raytrace-numba-cache")


def jit(fn=None, **kw):
    """numba.njit with the project's options: cached on disk, numpy's division rules (x/0 is
    inf or nan, as in the array code, never an exception), no fast-math (so every operation
    rounds as numpy's does), and the GIL released (the GUI's trace thread runs beside Qt)."""
    _prepare_cache_dir()
    import numba

    def wrap(f):
        opts = dict(cache=True, error_model="numpy", nogil=True, fastmath=False)
        opts.update(kw)
        try:
            return numba.njit(**opts)(f)
        except RuntimeError:        # no cache locator can write anywhere: compile in memory
            opts["cache"] = False
            return numba.njit(**opts)(f)
    return wrap(fn) if fn is not None else wrap


def timed_first_call(name: str, call):
    """Run `call()` and record its time under `name` if it is the first (compiling) call."""
    if name in COMPILE_SECONDS:
        return call()
    t0 = time.perf_counter()
    out = call()
    COMPILE_SECONDS[name] = time.perf_counter() - t0
    return out
