"""Chunked (streaming) traces: tallies accumulate across chunks and match the one-chunk trace.

common practice: a branching trace is deterministic per source ray, so splitting the source
rays into chunks may only change the order of floating-point sums: the ledger agrees to 1e-12
of the source flux, detector hits are the same records (compared after sorting), path tallies
give the same flux per readable path, and the ray table's ids stay unique with every parent
present.  Histogram mode bins the same hits: per detector, its total equals the ledger bucket.
"""
from pathlib import Path

import numpy as np
import pytest

from raytrace import trace
from raytrace.scene_io import load_scene
from raytrace.streaming import plan_chunks
from raytrace.tracer import Limits

SAMPLES = {p.stem: p for p in (Path(__file__).parent.parent / "samples").glob("*.json")}


def path_table(r):
    out = {}
    for (b, node), f in r.raw.path_flux.items():
        key = (b, " / ".join(r.describe_path(node)))
        out[key] = out.get(key, 0.0) + f
    return out


def sorted_hits(h):
    order = np.lexsort((h["position"], h["root"]))
    return {k: v[order] for k, v in h.items() if k != "path"}


@pytest.mark.parametrize("name", ["light-pipe-90", "microprism-strip", "oblique-window"])
def test_chunked_branching_equals_one_chunk(name):
    scene = load_scene(SAMPLES[name])
    one = trace(scene, rays=3000)
    many = trace(scene, rays=3000, chunk_size=700)
    assert many.stats["chunks"] == 5
    assert np.abs(one.ledger.bins - many.ledger.bins).max() <= 1e-12 * one.source_flux
    assert one.stats["segments"] == many.stats["segments"]
    a, b = sorted_hits(one.raw.hits), sorted_hits(many.raw.hits)
    for k in a:
        np.testing.assert_allclose(a[k], b[k], rtol=0, atol=1e-12, err_msg=k)
    pa, pb = path_table(one), path_table(many)
    assert pa.keys() == pb.keys()
    for k in pa:
        assert abs(pa[k] - pb[k]) <= 1e-12 * one.source_flux


def test_chunked_ray_table_ids_unique_and_parents_present():
    scene = load_scene(SAMPLES["light-pipe-90"])
    r = trace(scene, rays=300, record="all", chunk_size=64)
    seg = r.segments
    ids = seg["ray_id"]
    assert len(np.unique(ids)) == len(ids)
    parents = seg["parent_id"][seg["parent_id"] >= 0]
    assert np.isin(parents, ids).all()
    assert set(np.unique(seg["source_ray"]).tolist()) == set(range(300))
    one = trace(scene, rays=300, record="all")
    assert len(one.segments["ray_id"]) == len(ids)


def test_record_first_only_records_the_first_rays_across_chunks():
    scene = load_scene(SAMPLES["light-pipe-90"])
    r = trace(scene, rays=400, record="first", record_count=150, chunk_size=100)
    assert set(np.unique(r.segments["source_ray"]).tolist()) == set(range(150))


def test_histograms_accumulate_across_chunks():
    scene = load_scene(SAMPLES["oblique-window"])
    r = trace(scene, rays=2000, chunk_size=300, hits="histogram")
    assert r.raw.hits == {}
    for det in scene.detectors:
        h = r.raw.histograms[det.name]
        assert h["flux_s"].shape == (det.bins, det.angle_bins)
        total = float(h["flux_s"].sum() + h["flux_p"].sum())
        assert abs(total - r.ledger.flux("detector", detector=det.name)) <= 1e-12 * r.source_flux
    kept = trace(scene, rays=2000, chunk_size=300, hits="keep")
    assert sum(r.raw.histograms[d.name]["hits"] for d in scene.detectors) == len(kept.raw.hits["position"])


def test_segment_budget_is_shared_by_chunk_size():
    jobs = plan_chunks(1000, 300, seed=4, limits=Limits(segment_budget=10_000))
    assert [j.hi - j.lo for j in jobs] == [300, 300, 300, 100]
    assert [j.limits.segment_budget for j in jobs] == [3000, 3000, 3000, 1000]
    assert [j.seed for j in jobs] == [[4, 0], [4, 1], [4, 2], [4, 3]]


def test_monte_carlo_chunked_is_repeatable_and_close_to_one_chunk():
    """Different chunkings draw different random numbers; with seed 5 and 20,000 rays the
    detector efficiency agrees within 4 standard errors (binomial estimate, common practice)."""
    scene = load_scene(SAMPLES["oblique-window"])
    a = trace(scene, rays=20000, mode="monte_carlo", chunk_size=3000, seed=5)
    b = trace(scene, rays=20000, mode="monte_carlo", chunk_size=3000, seed=5)
    np.testing.assert_array_equal(a.ledger.bins, b.ledger.bins)
    c = trace(scene, rays=20000, mode="monte_carlo", seed=5)
    for det in scene.detectors:
        p = c.efficiency(det.name)
        se = np.sqrt(max(p * (1 - p), 1e-6) / 20000)
        assert abs(a.efficiency(det.name) - p) < 4 * se


@pytest.mark.parametrize("expected", [0, 10, 1000, 10**6])
@pytest.mark.parametrize("dtype", [np.float64, np.int64, np.bool_])
def test_growing_column_equals_numpy_concatenate(expected, dtype):
    """The merged detector records are written in place (streaming.GrowingColumn), sized from an
    estimate that may be too low (grown by realloc) or too high (cut at the end): the result is
    np.concatenate's, the same values, order, dtype and length.  Seed 2, 40 pieces of 0-400 rows."""
    from raytrace.streaming import GrowingColumn
    rng = np.random.default_rng(2)
    chunks = [[(rng.random(rng.integers(0, 400)) * 1000).astype(dtype) for _ in range(rng.integers(1, 5))]
              for _ in range(10)]
    column = GrowingColumn()
    for pieces in chunks:
        column.extend(pieces, expected)
    got = column.result()
    want = np.concatenate([p for pieces in chunks for p in pieces])
    assert got.dtype == want.dtype and got.flags.owndata
    np.testing.assert_array_equal(got, want)


def test_a_one_worker_chunked_trace_is_cancelled_within_its_first_chunk():
    """The desktop app cancels a trace by raising from its progress callback.  On one worker a
    chunked trace (any trace of more than 20,000 branching rays now) called it only when a chunk
    was merged, so a cancelled trace ran on to the end of its chunk; now it is called at every
    generation too: the exception stops the trace in its first chunk, after 3 generations.
    The figures reported grow with every call (merged chunks plus the chunk in hand)."""
    class Stop(Exception):
        pass

    scene = load_scene(SAMPLES["light-pipe-90"])
    seen = []

    def progress(stats):
        seen.append((stats["chunks_done"], stats["chunks"], stats["segments"]))
        if len(seen) == 3:
            raise Stop

    with pytest.raises(Stop):
        trace(scene, rays=3000, chunk_size=1000, progress=progress)
    assert [(done, chunks) for done, chunks, _ in seen] == [(0, 3)] * 3
    assert seen[0][2] == 1000 and seen[0][2] < seen[1][2] < seen[2][2]

    seen.clear()
    progress_all = lambda stats: seen.append((stats["chunks_done"], stats["segments"]))  # noqa: E731
    r = trace(scene, rays=3000, chunk_size=1000, progress=progress_all)
    segments = [s for _, s in seen]
    assert segments == sorted(segments) and seen[-1] == (3, r.stats["segments"])
    assert sorted({done for done, _ in seen}) == [0, 1, 2, 3]
