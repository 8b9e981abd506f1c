"""Chunked tracing: source rays in chunks of bounded size, tallies merged across chunks.

The starting rays are split into consecutive chunks of `chunk_size` source rays.  Each chunk is
traced on its own (`tracer.trace_rays`) with a seed derived from the trace seed and the chunk
index, then the tallies are merged *in chunk order*: ledger bins add up, detector records (or
histograms) are concatenated (or summed), path tries are merged node by node, ray-table ids are
renumbered.  Nothing depends on how many processes traced the chunks (`parallel`), so the
same seed gives the same ledger with 1 or 8 workers.

Limits shared by the whole trace are split deterministically: each chunk gets the share of the
segment budget that its source rays are of the total.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np

from .compile import CompiledScene
from .pathtrie import PathTrie, merge_tries
from .sources import StartRays
from .tracer import (MAX_PATH_NODES, N_EVENT_KINDS, RawTrace, Recording, Limits, merge_histograms,
                     trace_rays)

# Source rays per chunk, so that the arrays of a generation stay in the CPU cache.  A branching
# trace's figures do not depend on the chunk size (only the order of the ledger's sums, in the
# last bit; its detector records and path nodes do come in chunk order), so it takes the size
# that is fastest: one worker on the light pipe costs 74 ns of CPU per event at 5,000-20,000
# rays against 88 at 50,000 and 111 at 100,000, and two threads on 1e6 rays fault in fewer
# fresh pages (see DEVELOPERS.md, "Streaming").  A Monte Carlo trace draws its random numbers
# per chunk (seed [seed, chunk index]), so its chunk size is part of its result: it stays at
# 50,000, which the published figures and tests were traced with.
BRANCHING_CHUNK = 20_000
MONTE_CARLO_CHUNK = 50_000
DEFAULT_CHUNK = MONTE_CARLO_CHUNK     # the Monte Carlo default, kept for callers of the old name


def default_chunk(mode: str) -> int:
    """Source rays per chunk when the caller does not say: see BRANCHING_CHUNK."""
    from .tracer import MONTE_CARLO
    return MONTE_CARLO_CHUNK if mode == MONTE_CARLO else BRANCHING_CHUNK


@dataclass
class ChunkJob:
    index: int
    lo: int
    hi: int
    seed: list[int]
    limits: Limits


def plan_chunks(n_rays: int, chunk_size: int, seed: int, limits: Limits) -> list[ChunkJob]:
    chunk_size = max(1, int(chunk_size))
    jobs = []
    for k, lo in enumerate(range(0, max(n_rays, 1), chunk_size)):
        hi = min(n_rays, lo + chunk_size)
        share = limits.segment_budget if n_rays <= chunk_size else \
            max(1, int(limits.segment_budget * (hi - lo) // max(n_rays, 1)))
        jobs.append(ChunkJob(k, lo, hi, [int(seed), k], replace(limits, segment_budget=share)))
    return jobs


def chunk_seed(seed: int, index: int) -> list[int]:
    """The random seed of chunk `index`: a SeedSequence entropy list, independent streams."""
    return [int(seed), int(index)]


def run_chunk(cs: CompiledScene, start: StartRays, job: ChunkJob, mode: str, record: Recording,
              track_paths: bool, n_sources: int, keep_hits: bool, accel: str, progress=None) -> RawTrace:
    sub = start if (job.lo == 0 and job.hi == len(start)) else start.take(slice(job.lo, job.hi))
    rec = record
    if record.mode == "first" and job.lo >= record.count:
        rec = Recording()           # no ray of this chunk is wanted in the table
    return trace_rays(cs, sub, mode=mode, limits=job.limits, seed=job.seed, record=rec,
                      track_paths=track_paths, n_sources=n_sources, accel=accel,
                      root_offset=job.lo, keep_hits=keep_hits, join_hits=False, progress=progress)


class GrowingColumn:
    """One field of the detector records, written once, in place, as the chunks arrive.

    Joining pieces at the end writes every record a second time into fresh memory, and on a
    virtual machine a fresh page costs more than the copy: joining the 1e6-ray light pipe's
    4.1 M records took 0.7 s, in the one thread, after the chunks were done.  Here the array
    is sized from the first chunks' records per source ray (an estimate, with a margin; the
    pages past the end are never touched) and grown by realloc when that falls short, which
    for a large array moves the pages instead of copying them, but numpy's resize zero-fills
    what it adds (80 MB in about 70 ms), so after a growth the slack is resident until the
    end, where the array is cut to length.  (No growth on the light pipe, the window or the
    prism film at 200,000 rays: their first chunk's rate holds.)"""

    MARGIN = 1.05

    def __init__(self):
        self.data: np.ndarray | None = None
        self.n = 0

    def extend(self, pieces: list[np.ndarray], expected_total: int) -> None:
        if not pieces:
            return
        add = sum(len(p) for p in pieces)
        if self.data is None:
            dtype = np.result_type(*pieces)
            self.data = np.empty(max(add, int(expected_total * self.MARGIN)), dtype=dtype)
        elif any(p.dtype != self.data.dtype for p in pieces):      # never seen; as concatenate would
            self.data = self.data[:self.n].astype(np.result_type(self.data, *pieces))
        if self.n + add > len(self.data):
            self.data.resize(max(self.n + add, int(expected_total * self.MARGIN), 2 * len(self.data)),
                             refcheck=False)        # no views of it exist until result()
        for p in pieces:
            self.data[self.n:self.n + len(p)] = p
            self.n += len(p)

    def result(self) -> np.ndarray:
        if self.data is None:
            return np.zeros(0)
        self.data.resize(self.n, refcheck=False)
        out, self.data = self.data, None
        return out


class Merger:
    """Adds chunk results in chunk order."""

    def __init__(self, cs: CompiledScene, n_sources: int, track_paths: bool, max_memory_mb: float = 4096.0,
                 kept_mb: float | None = None, n_rays: int = 0):
        self.cs = cs
        self.n_rays = n_rays          # source rays of the whole trace: sizes the detector records
        self.rays_done = 0
        self.max_memory_mb = max_memory_mb
        self.kept_mb = max_memory_mb if kept_mb is None else kept_mb   # what merged results may use
        self.kept_bytes = 0
        self.n_codes = cs.n_edges * N_EVENT_KINDS
        self.trie = PathTrie(n_sources, track_paths, MAX_PATH_NODES, n_bins=0)
        self.bins = None
        self.batch_bins = None       # per sub-batch of source rays (uncertainty)
        self.batch_flux = None
        self.source_flux = 0.0
        self.hits: dict[str, GrowingColumn] = {}
        self.segments: dict[str, list[np.ndarray]] | None = None
        self.histograms = None
        self.wavelengths: list[np.ndarray] = []
        self.stats: dict = {}
        self.next_id = 0
        self.chunks = 0
        self.t0 = time.perf_counter()

    def add(self, raw: RawTrace, n_source_rays: int, lo: int) -> None:
        from .errors import BudgetExceeded, memory_limit_text
        from .tracer import BYTES_PER_HIT, BYTES_PER_SEGMENT_ROW, KEPT_COPIES
        self.chunks += 1
        self.kept_bytes += BYTES_PER_HIT * sum(len(v) for v in raw.hits.get("root", ())) + \
            BYTES_PER_SEGMENT_ROW * (len(raw.segments["ray_id"]) if raw.segments is not None else 0)
        need = KEPT_COPIES * self.kept_bytes      # the pieces and, at the end, their joined copy
        if need > self.kept_mb * 1e6:
            raise BudgetExceeded(
                f"after {self.chunks} chunks the kept detector records and ray-table rows need about "
                f"{need / 1e6:,.0f} MB, more than the {self.kept_mb:,.0f} MB left for them by "
                f"{memory_limit_text(self.max_memory_mb)}; or record fewer rays (--record first:N, "
                f"record=\"first\" in Python) or bin detector hits (hits=\"histogram\" in Python)")
        self.bins = raw.bins.copy() if self.bins is None else self.bins + raw.bins
        self.batch_bins = raw.batch_bins.copy() if self.batch_bins is None else self.batch_bins + raw.batch_bins
        self.batch_flux = raw.batch_flux.copy() if self.batch_flux is None else self.batch_flux + raw.batch_flux
        self.source_flux += raw.source_flux
        remap = None
        if self.trie.enabled:
            remap = merge_tries(self.trie, raw.path_parent, raw.path_code, self.n_codes)
            b, node, f = _flux_arrays(raw.path_flux)
            if len(b):
                self.trie.deposit(b, remap[node], f)
        # a chunk hands over its per-generation pieces (run_chunk: join_hits=False), written
        # straight into the merged records instead of joined per chunk and then again here
        # (4.1 M records, 330 MB, on the 1e6-ray light pipe: each join fills fresh memory)
        self.rays_done += n_source_rays
        for k, pieces in raw.hits.items():
            if k == "path" and remap is not None:
                pieces = [remap[v] for v in pieces]
            column = self.hits.setdefault(k, GrowingColumn())
            rows = column.n + sum(len(p) for p in pieces)
            # the whole trace's records at this chunk's rate, at most what the memory limit allows
            expected = min(rows * self.n_rays // max(self.rays_done, 1),
                           int(self.kept_mb * 1e6 / (KEPT_COPIES * BYTES_PER_HIT)))
            column.extend(pieces, expected)
        self.histograms = merge_histograms(self.histograms, raw.histograms)
        if raw.segments is not None:
            if self.segments is None:
                self.segments = {}
            seg = dict(raw.segments)
            n_ids = _id_count(seg, n_source_rays)
            # chunk-local ids run from lo; make them consecutive across chunks
            shift = self.next_id - lo
            seg["ray_id"] = seg["ray_id"] + shift
            seg["parent_id"] = np.where(seg["parent_id"] >= 0, seg["parent_id"] + shift, -1)
            self.next_id += n_ids
            for k, v in seg.items():
                self.segments.setdefault(k, []).append(v)
        self.wavelengths.append(raw.wavelengths)
        for k, v in raw.stats.items():
            # the compile is shared: chunks on threads each see the same one, so take the most
            if k in ("generations", "kernel_start_s"):
                self.stats[k] = max(self.stats.get(k, 0), v)
            elif isinstance(v, (int, float)) and k != "elapsed_s":
                self.stats[k] = self.stats.get(k, 0) + v

    def result(self) -> RawTrace:
        stats = dict(self.stats)
        stats["elapsed_s"] = time.perf_counter() - self.t0
        stats["chunks"] = self.chunks
        stats["events"] = stats.get("segments", 0)
        wl = np.unique(np.concatenate(self.wavelengths)) if self.wavelengths else np.zeros(0)
        segments = None
        if self.segments is not None:
            segments = {k: np.concatenate(v) for k, v in self.segments.items()}
        hits = {k: column.result() for k, column in self.hits.items()}
        self.hits = {}
        return RawTrace(
            bins=self.bins, source_flux=self.source_flux, segments=segments, hits=hits,
            path_parent=self.trie.parent.copy(), path_code=self.trie.code.copy(),
            path_flux=self.trie.flux_dict() if self.trie.enabled else {}, wavelengths=wl, stats=stats,
            histograms=self.histograms, batch_bins=self.batch_bins, batch_flux=self.batch_flux)


def start_bytes(start: StartRays) -> int:
    """Memory held by the starting rays' arrays."""
    return sum(v.nbytes for v in vars(start).values() if isinstance(v, np.ndarray))


def _flux_arrays(path_flux) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    if hasattr(path_flux, "arrays"):
        return path_flux.arrays()
    if not path_flux:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), np.zeros(0)
    keys = np.array(list(path_flux.keys()), dtype=np.int64)
    return keys[:, 0], keys[:, 1], np.array(list(path_flux.values()), dtype=float)


def _id_count(seg: dict, n_source_rays: int) -> int:
    """How many ray ids a chunk used: its source rays plus every child id it handed out."""
    if len(seg["ray_id"]) == 0:
        return n_source_rays
    return max(n_source_rays, int(seg["ray_id"].max()) + 1 - int(seg["ray_id"].min()))


def trace_chunked(cs: CompiledScene, start: StartRays, mode: str, limits: Limits, seed: int,
                  record: Recording, track_paths: bool, n_sources: int, chunk_size: int = DEFAULT_CHUNK,
                  workers: int = 1, keep_hits: bool = True, accel: str = "auto", progress=None) -> RawTrace:
    """Trace in chunks, on `workers` processes when more than one, and merge in chunk order."""
    jobs = plan_chunks(len(start), chunk_size, seed, limits)
    # the memory limit covers the starting rays, the chunks being traced and the merged
    # results together: each gets a fixed share, so their sum never passes it
    free_mb = limits.max_memory_mb - start_bytes(start) / 1e6
    if len(jobs) == 1:
        # one chunk: the plain single trace (seed as given, so small traces are unchanged, and
        # the same whatever the number of workers)
        return trace_rays(cs, start, mode=mode, limits=replace(limits, memory_share_mb=max(free_mb, 0.0)),
                          seed=seed, record=record, track_paths=track_paths, n_sources=n_sources,
                          accel=accel, keep_hits=keep_hits, progress=progress)
    from .parallel import capped_workers
    running = min(capped_workers(workers), len(jobs)) if workers > 1 else 1
    share = max(free_mb, 0.0) / (2 * running)     # half for the chunks in flight, half for the merged
    for job in jobs:
        job.limits = replace(job.limits, memory_share_mb=share)
    merger = Merger(cs, n_sources, track_paths, limits.max_memory_mb, kept_mb=max(free_mb, 0.0) / 2,
                    n_rays=len(start))
    if workers > 1 and len(jobs) > 1:
        from .parallel import run_parallel
        results = run_parallel(cs, start, jobs, mode, record, track_paths, n_sources, keep_hits, accel, workers)
    else:
        # one worker: the progress callback is called at every generation of the chunk being
        # traced too (the merged figures plus the chunk's segments so far), so a caller that
        # cancels from it (the desktop app) stops within a generation, not at the chunk's end
        def in_chunk(stats):
            done = merger.stats.get("segments", 0)
            progress({**merger.stats, "segments": done + stats["segments"],
                      "chunks_done": merger.chunks, "chunks": len(jobs)})
        results = (run_chunk(cs, start, job, mode, record, track_paths, n_sources, keep_hits, accel,
                             in_chunk if progress is not None else None)
                   for job in jobs)
    try:
        for job, raw in zip(jobs, results):
            merger.add(raw, job.hi - job.lo, job.lo)
            del raw               # its pieces are copied into the merged records: free them now
            if progress is not None:
                progress({**merger.stats, "chunks_done": merger.chunks, "chunks": len(jobs)})
        return merger.result()
    finally:
        # at once, also when the merge or the progress callback (a cancel) raised: a pool stops
        # its pending chunks, and a threaded one hands the freed memory back (run_parallel)
        results.close()
