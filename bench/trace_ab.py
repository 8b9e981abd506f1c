"""CPU time per event of `tracer.trace_rays`: this checkout against another git revision, in one
process, alternately on the same starting rays.

The other revision's `raytrace/` is extracted (`git archive`) into a temporary folder as the
package `raytrace_other`; its relative imports make it a complete second tracer.  Each round
traces once with each, in alternating order, and the best CPU time of each is kept (other load on
a shared machine only ever adds time); the ledger, detector records and ray table must be the
same bits, or the script says so.  Figures between separate processes drift by 10-15 % on a
loaded 2-core machine; the ratio printed here is what a change is judged by (a revision against
itself gave 1.08 in 3 rounds of 2,000 rays at load 4: give small changes more rounds).

    .venv/bin/python bench/trace_ab.py REV [--rays N] [--rounds K] [--sample NAME]
        [--record] [--paths] [--mc] [--floor F] [--inner J]

--inner J traces J times per timing (for small fans: 100 rays at --floor 1e-3 --record --inner 20
is the desktop app's coarse fan).  The first trace of each compiles or loads its kernel.
"""
from __future__ import annotations

import argparse
import atexit
import importlib
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


def other_package(rev: str) -> str:
    """Extract `rev`'s raytrace/ as the package raytrace_other; returns its name."""
    where = Path(tempfile.mkdtemp(prefix="trace-ab-"))
    atexit.register(shutil.rmtree, where, ignore_errors=True)      # (its compile cache too)
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "raytrace"], check=True,
                             capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", str(where)], input=archive, check=True)
    (where / "raytrace").rename(where / "raytrace_other")
    sys.path.insert(0, str(where))
    return "raytrace_other"


def setup(pkg: str, sample: str, rays: int, floor: float | None):
    mod = lambda name: importlib.import_module(f"{pkg}.{name}")
    scene = mod("scene_io").load_scene(ROOT / "samples" / sample)
    cs = mod("compile").compile_scene(scene)
    s = scene.settings
    start = mod("sources").sample_sources(scene.sources, rays, seed=s.seed)
    tracer = mod("tracer")
    limits = tracer.Limits(flux_floor=floor or s.flux_floor, max_generations=s.max_generations,
                           segment_budget=10**10)
    return tracer, cs, start, limits, scene


def run(env, mode: str, record: bool, paths: bool):
    tracer, cs, start, limits, scene = env
    rec = tracer.Recording("all" if record else "none", 0, len(start))
    return tracer.trace_rays(cs, start, mode=mode, limits=limits, seed=scene.settings.seed, record=rec,
                             n_sources=len(scene.sources), track_paths=paths)


def same(a, b) -> bool:
    ok = np.array_equal(a.bins, b.bins) and np.array_equal(a.batch_bins, b.batch_bins)
    ok = ok and a.stats["segments"] == b.stats["segments"] and a.hits.keys() == b.hits.keys()
    ok = ok and all(np.array_equal(a.hits[k], b.hits[k]) for k in a.hits)
    if a.segments is not None:
        ok = ok and all(np.array_equal(a.segments[k], b.segments[k]) for k in a.segments)
    return bool(ok and a.path_flux == b.path_flux)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("rev", help="git revision to compare this checkout against")
    ap.add_argument("--rays", type=int, default=20_000)
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--inner", type=int, default=1)
    ap.add_argument("--sample", default="light-pipe-90.json")
    ap.add_argument("--floor", type=float, default=None)
    ap.add_argument("--record", action="store_true", help="keep a ray table of every ray")
    ap.add_argument("--paths", action="store_true", help="path tallies on")
    ap.add_argument("--mc", action="store_true", help="Monte Carlo mode")
    a = ap.parse_args()
    mode = "monte_carlo" if a.mc else "branching"
    envs = [setup(other_package(a.rev), a.sample, a.rays, a.floor), setup("raytrace", a.sample, a.rays, a.floor)]
    first = [run(e, mode, a.record, a.paths) for e in envs]
    best = [float("inf"), float("inf")]
    for k in range(a.rounds):
        for j in ((0, 1) if k % 2 == 0 else (1, 0)):
            t0 = time.process_time()
            for _ in range(a.inner):
                run(envs[j], mode, a.record, a.paths)
            best[j] = min(best[j], (time.process_time() - t0) / a.inner)
    events, gens = first[0].stats["segments"], first[0].stats["generations"]
    print(f"{a.sample}, {a.rays:,} rays, {mode}, ray table {'on' if a.record else 'off'}, path tallies "
          f"{'on' if a.paths else 'off'}: {events:,} events, {gens} generations; same bits: {same(*first)}")
    for name, t in zip((a.rev, "this checkout"), best):
        print(f"  {name:>14}: {t * 1e3:9.2f} ms  {t / events * 1e9:7.1f} ns per event  "
              f"{t / gens * 1e6:8.1f} us per generation")
    print(f"  ratio (this / {a.rev}): {best[1] / best[0]:.3f}   load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
