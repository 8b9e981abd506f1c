"""How the C heap (glibc malloc) serves long traces: freed memory kept for reuse, one arena
for the chunk threads, freed pages handed back around threaded traces.  Linux with glibc
only (mallopt, malloc_trim); elsewhere every function does nothing.

Each setting is made only by the traces that gain from it, never by a short trace (the
desktop app's are a few thousand rays on one worker), because glibc cannot take them back:
once the mmap threshold is set its own adaptive threshold stays off, and the arena limit is
fixed at the next arena a thread asks for.
"""
from __future__ import annotations

import sys

M_TRIM_THRESHOLD, M_MMAP_THRESHOLD, M_ARENA_MAX = -1, -3, -8

_done: set[str] = set()


def _libc():
    if not sys.platform.startswith("linux"):
        return None
    try:
        import ctypes
        libc = ctypes.CDLL("libc.so.6")
    except OSError:
        return None
    return libc if hasattr(libc, "mallopt") and hasattr(libc, "malloc_trim") else None


def keep_freed_memory() -> None:
    """Keep freed memory in the process instead of handing it back to the system at once
    (called by `api.trace` for a trace of more than one chunk, before it samples the rays).

    A generation allocates and frees many arrays of a few hundred kB to a few MB; with glibc's
    defaults each is a fresh mapping whose pages fault in again on first touch, which costs as
    much as the arithmetic on a virtual machine.  Raising the mmap and trim thresholds makes
    the next generations and chunks reuse the memory: 300,000 light-pipe rays on one worker,
    46,000 page faults and 0.06-0.12 s of system time against 109,000-124,000 and 0.21-0.29 s."""
    libc = _libc()
    if libc is None or "thresholds" in _done:
        return
    _done.add("thresholds")
    libc.mallopt(M_MMAP_THRESHOLD, 32 * 1024 * 1024)     # the largest glibc allows
    libc.mallopt(M_TRIM_THRESHOLD, 128 * 1024 * 1024)


def one_arena() -> None:
    """One malloc arena for the threads of this process (set by `parallel.run_parallel` before
    its chunk threads start): they reuse each other's freed generation arrays instead of each
    growing its own arena page by page.  1e6 light-pipe rays on 2 threads (records still joined
    at the end): 102,000-105,000 page faults with it and the raised thresholds, 130,000-200,000
    with the thresholds only, 270,000-300,000 with neither."""
    libc = _libc()
    if libc is None or "arena" in _done:
        return
    _done.add("arena")
    libc.mallopt(M_ARENA_MAX, 1)


def release_free_memory() -> None:
    """Hand the heap's freed pages back to the system (malloc_trim).

    Called by `parallel.run_parallel` just before its chunk threads start and once they have
    ended and the chunks are merged, never while they run: malloc_trim holds each arena's lock
    while it walks it, so other threads' allocations wait.  A threaded trace runs in this
    process, so what earlier traces freed but the raised trim threshold kept (and the gaps
    between kept results) would add to the next one's peak: the 1e7-ray window right after
    the 1e6-ray light pipe in one bench process peaked at 2,010 MB without this, 1,710 MB with it."""
    libc = _libc()
    if libc is not None:
        libc.malloc_trim(0)
