"""Traces spread over a process pool give exactly the single-process result for the same seed.

common practice: chunk seeds come from (trace seed, chunk index) and chunks are merged in
chunk order, so the number of workers cannot change anything: ledgers, detector hits, path
tries and ray tables are compared for exact equality.
"""
from pathlib import Path

import numpy as np
import pytest

from raytrace import trace
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
