"""The trace worker shows a coarse fan first when a full trace is slow, then the full trace.

common practice for interactive viewers (progressive refinement): a quick low-detail image of
the newest state first, the full one after; the final result must be exactly the full trace of
the newest state, and a coarse result never replaces a full one of the same or a newer state.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import raytrace
from gui import worker as worker_mod
from gui.tracing import TraceOptions
from gui.worker import TraceWorker
from raytrace.scene_io import load_scene

LIGHT_PIPE = Path(__file__).parent.parent / "samples" / "light-pipe-90.json"
TIMEOUT_MS = 60_000


@pytest.fixture
def worker(qtbot):
    w = TraceWorker()
    shown = []
    w.finished.connect(shown.append)
    yield w, shown
    w.shutdown()


def _wait(qtbot, w, shown, n):
    qtbot.waitUntil(lambda: len(shown) >= n and w.is_idle(), timeout=TIMEOUT_MS)


def test_slow_trace_shows_a_coarse_fan_then_the_full_trace(qtbot, worker, monkeypatch):
    w, shown = worker
    # any full trace counts as slow, and a coarse fan may take a tenth of one: 100 of 1,000 rays
    monkeypatch.setattr(worker_mod, "COARSE_WHEN_OVER_S", 0.0)
    scene = load_scene(LIGHT_PIPE)
    opts = TraceOptions(rays=1000, drawn_rays=1000)
    w.submit(scene, opts)
    _wait(qtbot, w, shown, 1)
    assert [o.coarse for o in shown] == [False]          # nothing known yet: the full trace
    epoch, rays, cpu = w._last_full
    monkeypatch.setattr(worker_mod, "COARSE_TRACE_S", cpu / 10)
    moved = scene.copy()
    w.submit(moved, opts)
    _wait(qtbot, w, shown, 3)
    coarse, full = shown[1], shown[2]
    assert coarse.coarse and not full.coarse
    assert coarse.request is full.request
    n = coarse.result.stats["source_rays"]
    assert 32 <= n <= 250 and full.result.stats["source_rays"] == 1000
    # the full result is the trace of that state (same ledger as tracing it directly)
    ref = raytrace.trace(moved, rays=1000, track_paths=False)
    np.testing.assert_array_equal(full.result.ledger.bins, ref.ledger.bins)


def test_a_coarse_result_never_replaces_a_full_one(qtbot, worker):
    w, _ = worker
    scene = load_scene(LIGHT_PIPE)
    req = worker_mod.TraceRequest(5, 0, scene, TraceOptions(), 0.0)
    w.delivered_epoch, w.delivered_id, w.delivered_stage = 0, 5, worker_mod.FULL
    assert not w.accepts(worker_mod.TraceOutcome(req, coarse=True))
    assert not w.accepts(worker_mod.TraceOutcome(req))
    newer = worker_mod.TraceRequest(6, 0, scene, TraceOptions(), 0.0)
    assert w.accepts(worker_mod.TraceOutcome(newer, coarse=True))
    w.delivered_id, w.delivered_stage = 6, worker_mod.COARSE
    assert w.accepts(worker_mod.TraceOutcome(newer))                 # its refinement


def test_a_newer_state_stops_the_refinement_at_once(qtbot, worker, monkeypatch):
    """During a drag: each new state cancels the full trace of the previous one, so what is
    shown follows the newest state, and the last thing shown is its full trace."""
    w, shown = worker
    monkeypatch.setattr(worker_mod, "COARSE_WHEN_OVER_S", 0.0)
    monkeypatch.setattr(worker_mod, "COARSE_TRACE_S", 1e9)    # coarse = a quarter of the rays
    scene = load_scene(LIGHT_PIPE)
    opts = TraceOptions(rays=4000, drawn_rays=100)
    w.submit(scene, opts)
    _wait(qtbot, w, shown, 1)
    states = [scene.copy() for _ in range(4)]
    for s in states:
        w.submit(s, opts)
        qtbot.wait(5)
    _wait(qtbot, w, shown, 2)
    final = shown[-1]
    assert final.request.scene is states[-1] and not final.coarse
    assert final.result.stats["source_rays"] == 4000
    assert all(o.result.stats["source_rays"] == 1000 for o in shown[1:-1])
