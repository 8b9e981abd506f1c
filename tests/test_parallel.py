"""Traces spread over threads or a process pool give exactly the single-worker result for the same seed.

common practice: chunk seeds come from (trace seed, chunk index) and chunks are merged in
chunk order, so the number of workers cannot change anything: ledgers, detector hits, path
tries and ray tables are compared for exact equality.
"""
import multiprocessing
import threading
from pathlib import Path

import numpy as np
import pytest

from raytrace import kernel, parallel, trace
from raytrace.parallel import default_workers
from raytrace.scene_io import load_scene

SAMPLES = {p.stem: p for p in (Path(__file__).parent.parent / "samples").glob("*.json")}


@pytest.mark.parametrize("mode", ["branching", "monte_carlo"])
def test_two_workers_equal_one(mode):
    scene = load_scene(SAMPLES["light-pipe-90"])
    one = trace(scene, rays=2400, mode=mode, chunk_size=500, workers=1, seed=9, record="first", record_count=700)
    two = trace(scene, rays=2400, mode=mode, chunk_size=500, workers=2, seed=9, record="first", record_count=700)
    np.testing.assert_array_equal(one.ledger.bins, two.ledger.bins)
    for k in one.raw.hits:
        np.testing.assert_array_equal(one.raw.hits[k], two.raw.hits[k])
    np.testing.assert_array_equal(one.raw.path_parent, two.raw.path_parent)
    assert dict(one.raw.path_flux) == dict(two.raw.path_flux)
    for k in one.segments:
        np.testing.assert_array_equal(one.segments[k], two.segments[k])
    assert one.stats["segments"] == two.stats["segments"]


def test_three_workers_on_a_film():
    scene = load_scene(SAMPLES["microprism-strip"])
    a = trace(scene, rays=3000, chunk_size=400, workers=1)
    b = trace(scene, rays=3000, chunk_size=400, workers=3)
    np.testing.assert_array_equal(a.ledger.bins, b.ledger.bins)


def test_default_workers_is_at_least_one():
    assert default_workers() >= 1


@pytest.fixture
def pool(request, monkeypatch):
    """Force the pool kind run_parallel uses (threads are the compiled kernel's default)."""
    original = parallel.run_parallel
    monkeypatch.setattr(parallel, "run_parallel",
                        lambda *a, **k: original(*a, **{**k, "pool": request.param}))
    return request.param


def chunk_threads() -> list[threading.Thread]:
    return [t for t in threading.enumerate() if t.name.startswith("raytrace-chunk")]


def pool_watch(seen: list):
    """A progress callback (called in this thread after each merged chunk) noting the worker
    processes and chunk threads alive at that moment."""
    return lambda stats: seen.append((len(multiprocessing.active_children()), len(chunk_threads())))


@pytest.mark.parametrize("pool", ["threads", "processes"], indirect=True)
@pytest.mark.parametrize("mode", ["branching", "monte_carlo"])
def test_thread_and_process_pools_equal_one_worker(mode, pool):
    """Both pool kinds, with the compiled kernel, against one worker: the same ledger, the same
    detector records and the same tallies; and the pool asked for is the one that ran."""
    scene = load_scene(SAMPLES["light-pipe-90"])
    seen = []
    with kernel.using("numba"):
        one = trace(scene, rays=3000, mode=mode, chunk_size=400, workers=1, seed=4)
        two = trace(scene, rays=3000, mode=mode, chunk_size=400, workers=2, seed=4, progress=pool_watch(seen))
    assert len(seen) == 8       # one call per chunk
    if pool == "threads":
        assert all(procs == 0 and threads >= 1 for procs, threads in seen), seen
    else:
        assert all(procs >= 1 and threads == 0 for procs, threads in seen), seen
    assert not chunk_threads() and not multiprocessing.active_children()   # all ended with the trace
    np.testing.assert_array_equal(one.ledger.bins, two.ledger.bins)
    assert sorted(one.raw.hits) == sorted(two.raw.hits) and len(one.raw.hits["root"]) > 0
    for k in one.raw.hits:
        np.testing.assert_array_equal(one.raw.hits[k], two.raw.hits[k])
    np.testing.assert_array_equal(one.raw.path_parent, two.raw.path_parent)
    assert dict(one.raw.path_flux) == dict(two.raw.path_flux)
    np.testing.assert_array_equal(one.raw.batch_bins, two.raw.batch_bins)
    assert one.stats["segments"] == two.stats["segments"]


def test_default_pool_follows_the_kernel():
    """Threads only where the kernel releases the GIL between generations' Python steps."""
    with kernel.using("numba"):
        assert parallel.pool_kind() == "threads"
    with kernel.using("numpy"):
        assert parallel.pool_kind() == "processes"


@pytest.mark.parametrize("mode", ["branching", "monte_carlo"])
@pytest.mark.parametrize("name", sorted(SAMPLES))
def test_threaded_compiled_chunks_match_the_array_reference(name, mode):
    """Every sample, both modes: the compiled kernel on two threads over several chunks against
    the numpy reference kernel on one worker.  Integers and the Monte Carlo choices (the same
    draws go to the same rays) equal; fluxes within 1e-12 relative (bulk absorption's exp comes
    from another maths library and may differ in the last bit)."""
    scene = load_scene(SAMPLES[name])
    kw = dict(rays=450, mode=mode, chunk_size=150, seed=3, track_paths=True)
    with kernel.using("numpy"):
        ref = trace(scene, workers=1, **kw)
    with kernel.using("numba"):
        assert parallel.pool_kind() == "threads"
        got = trace(scene, workers=2, **kw)
    assert ref.stats["segments"] == got.stats["segments"] > 450
    np.testing.assert_allclose(got.ledger.bins, ref.ledger.bins, rtol=1e-12, atol=0)
    np.testing.assert_allclose(got.raw.batch_bins, ref.raw.batch_bins, rtol=1e-12, atol=0)
    # the ledger accounts for every unit of source flux
    assert got.ledger.bins.sum() == pytest.approx(got.raw.source_flux, rel=1e-12)
    assert sorted(ref.raw.hits) == sorted(got.raw.hits)
    for k in ref.raw.hits:
        a, b = np.asarray(ref.raw.hits[k]), np.asarray(got.raw.hits[k])
        if a.dtype.kind == "f":
            np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-12 if k == "angle_deg" else 0, err_msg=k)
        else:
            np.testing.assert_array_equal(b, a, err_msg=k)
    np.testing.assert_array_equal(got.raw.path_code, ref.raw.path_code)
    pg, pr = dict(got.raw.path_flux), dict(ref.raw.path_flux)
    assert pg.keys() == pr.keys() and len(pr) > 0
    for key in pr:
        assert pg[key] == pytest.approx(pr[key], rel=1e-12, abs=0), key


class Stop(Exception):
    """What a caller's progress callback raises to cancel a trace (as the desktop app does)."""


@pytest.mark.parametrize("pool", ["threads", "processes"], indirect=True)
def test_a_cancelled_parallel_trace_stops_its_workers(pool):
    """A progress callback that raises stops the trace at once: the exception reaches the
    caller, and no chunk thread or worker process is left tracing the remaining chunks
    behind its back, even while the caller still holds the exception (and its traceback)."""
    scene = load_scene(SAMPLES["light-pipe-90"])
    seen = []

    def progress(stats):
        pool_watch(seen)(stats)
        if stats["chunks_done"] >= 2:
            raise Stop

    with kernel.using("numba"):
        with pytest.raises(Stop) as info:
            trace(scene, rays=60_000, chunk_size=1000, workers=2, progress=progress)
    assert len(seen) == 2 and all(procs + threads >= 1 for procs, threads in seen), seen
    assert info.value.__traceback__ is not None
    assert not chunk_threads() and not multiprocessing.active_children()


def test_heap_settings_only_for_the_traces_that_gain_from_them():
    """glibc cannot take its heap settings back, so a short one-worker trace (the desktop
    app's) changes none; a trace of more than one chunk keeps freed memory; a threaded one
    also gets the one arena (raytrace/heap.py).  In a fresh process, so no earlier test counts."""
    import subprocess
    import sys
    code = "\n".join([
        "from raytrace import heap, kernel, trace",
        "from raytrace.scene_io import load_scene",
        f"scene = load_scene({str(SAMPLES['light-pipe-90'])!r})",
        "print(heap._libc() is not None)",
        "with kernel.using('numba'):",
        "    trace(scene, rays=2000, workers=1); print(sorted(heap._done))",
        "    trace(scene, rays=3000, chunk_size=1000, workers=1); print(sorted(heap._done))",
        "    trace(scene, rays=3000, chunk_size=1000, workers=2); print(sorted(heap._done))"])
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split("\n")
    if out[0] != "True":
        pytest.skip("not glibc: the heap settings do nothing here")
    assert out[1:4] == ["[]", "['thresholds']", "['arena', 'thresholds']"]


def test_scene_lookups_are_built_before_the_chunk_threads_start(monkeypatch):
    """The lookups a trace caches on the compiled scene are built once, before the threads
    share it, not by whichever chunk thread comes first (two could build one at once)."""
    from raytrace.compile import compile_scene
    scene = load_scene(SAMPLES["light-pipe-90"])
    cs = compile_scene(scene)
    seen = []
    original = parallel.run_chunk

    def spy(cs_, *args):
        seen.append(set(cs_.__dict__.get("_accel_cache", {})))
        return original(cs_, *args)

    monkeypatch.setattr(parallel, "run_chunk", spy)
    with kernel.using("numba"):
        trace(scene, rays=3000, chunk_size=1000, workers=2, compiled=cs)
    assert len(seen) == 3 and all({"tracer", "vertex_groups"} <= keys for keys in seen), seen
