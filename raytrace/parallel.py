"""Spread the chunks of a trace over threads (compiled kernel) or a process pool (array kernel).

With the compiled kernel the hit search and the interface step release the GIL (`nogil`), and
what holds it between them is a small share of a generation, so threads in this one process
share the cores: no fork, no copy-on-write faults, no detector records pickled back.  The
array kernel holds the GIL for most of its work, so it gets processes: forked where the platform
allows it, so the compiled scene (and its cached acceleration grid) is inherited rather than
sent; elsewhere it is sent once per worker.  Either way results come back in chunk order
(`Executor.map`), so merging does not depend on which worker finished first, and the result
does not depend on the number or kind of workers.
"""
from __future__ import annotations

import multiprocessing as mp
import os
from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

from . import heap, kernel
from .streaming import run_chunk
from .tracer import prepare_scene

_STATE: dict = {}


def default_workers() -> int:
    """All cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


def capped_workers(requested: int | None) -> int:
    """Processes to use: the CPUs this process may use when not given, and never more (extra
    processes only add memory: 1000 asked on 2 cores gave 21 processes and 4.6 GB)."""
    usable = default_workers()
    return usable if requested is None else max(1, min(int(requested), usable))


def die_with_parent() -> None:
    """Worker initializer: end this worker when the parent process ends, however it ends
    (SIGTERM, SIGKILL, a crash), instead of waiting forever for work as an orphan.  Linux
    only (prctl PR_SET_PDEATHSIG); elsewhere a no-op."""
    import ctypes
    import signal
    parent = os.getppid()
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGTERM), 0, 0, 0)   # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        return
    if os.getppid() != parent:     # the parent ended before the request took hold
        os._exit(1)


def _init(cs, start, args):
    _STATE.update(cs=cs, start=start, args=args)


def _init_worker(cs, start, args):
    die_with_parent()
    _init(cs, start, args)


def _work(job):
    s = _STATE
    return run_chunk(s["cs"], s["start"], job, *s["args"])


POOLS = ("threads", "processes")


def pool_kind() -> str:
    """Threads where the kernel releases the GIL (the compiled one), else processes."""
    return "threads" if kernel.compiled() else "processes"


def run_parallel(cs, start, jobs, mode, record, track_paths, n_sources, keep_hits, accel, workers,
                 pool: str | None = None):
    """Yield each chunk's RawTrace in chunk order.  pool: "threads" or "processes" (default:
    `pool_kind()`)."""
    pool = pool or pool_kind()
    if pool not in POOLS:
        raise ValueError(f"pool: expected one of {', '.join(POOLS)}, found {pool!r}")
    args = (mode, record, track_paths, n_sources, keep_hits, accel)
    prepare_scene(cs, accel)           # the scene's lookups, built once before the workers start
    n_workers = min(capped_workers(workers), len(jobs))
    if pool == "threads":
        heap.one_arena()               # set before the threads first allocate
        heap.release_free_memory()     # what earlier traces freed does not count against this one
        try:
            with ThreadPoolExecutor(max_workers=n_workers, thread_name_prefix="raytrace-chunk") as ex:
                yield from ex.map(lambda job: run_chunk(cs, start, job, *args), jobs)
        finally:
            # closed by trace_chunked once the chunks are merged, or when the trace stops early
            # (an error, a cancel from the progress callback): the pending chunks are cancelled
            # (Executor.map) and the running ones finished before the memory is handed back
            heap.release_free_memory()
        return
    methods = mp.get_all_start_methods()
    if "fork" in methods:
        ctx = mp.get_context("fork")
        _init(cs, start, args)          # inherited by the forked workers
        init, initargs = die_with_parent, ()
    else:
        ctx = mp.get_context("spawn")
        init, initargs = _init_worker, (cs, start, args)
    try:
        with ProcessPoolExecutor(max_workers=n_workers, mp_context=ctx, initializer=init,
                                 initargs=initargs) as ex:
            yield from ex.map(_work, jobs)
    finally:
        _STATE.clear()
