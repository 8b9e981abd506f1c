"""ns per nearest-hit query: the blocked compiled search against the one-ray-at-a-time one.

The queries are the ones the tracer really makes: every generation's rays (start points on
edges, start edges, directions after refraction and reflection), recorded while tracing a few
thousand source rays.  Both formulations run on the same queries in this one process, best of
3 CPU times each (other load on a shared machine only ever adds time), and must agree bit for
bit.  Run: .venv/bin/python bench/hit_search.py [--asm]

--asm compiles into a fresh temporary cache (numba cannot show the machine code of cached
functions) and counts brute_all's vector instructions, to check that it still vectorizes.
"""
from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
if "--asm" in sys.argv:
    import tempfile
    os.environ["NUMBA_CACHE_DIR"] = tempfile.mkdtemp(prefix="hit-search-asm-")

from raytrace import kernel                                    # noqa: E402
from raytrace.bench import strip_scene                         # noqa: E402
from raytrace.compile import compile_scene                     # noqa: E402
from raytrace.kernel_hits import brute_all, brute_all_scalar, edge_lists   # noqa: E402
from raytrace.scene_io import load_scene                       # noqa: E402
from raytrace.sources import sample_sources                    # noqa: E402
from raytrace.tracer import Limits, trace_rays                 # noqa: E402


def recorded_queries(scene, rays: int):
    """(compiled scene, x, y, dx, dy, start) of every hit query a trace of `rays` makes."""
    from raytrace.kernel_hits import compiled_hit_function
    cs = compile_scene(scene)
    search = compiled_hit_function(cs, "plain")
    got = []

    def record(_cs, x, y, dx, dy, start):
        got.append([np.array(a) for a in (x, y, dx, dy, start)])
        return search(_cs, x, y, dx, dy, start)
    s = scene.settings
    with kernel.using("numba"):
        trace_rays(cs, sample_sources(scene.sources, rays, seed=s.seed), mode=s.mode,
                   limits=Limits(flux_floor=s.flux_floor, max_generations=s.max_generations),
                   seed=s.seed, hit_fn=record, n_sources=len(scene.sources), track_paths=False)
    cols = [np.ascontiguousarray(np.concatenate([g[i] for g in got])) for i in range(5)]
    cols[4] = cols[4].astype(np.int64)
    return cs, cols


def best_cpu(fn, repeats=3):
    best = float("inf")
    for _ in range(repeats):
        t0 = time.process_time()
        fn()
        best = min(best, time.process_time() - t0)
    return best


def measure(name, scene, rays):
    cs, (x, y, dx, dy, start) = recorded_queries(scene, rays)
    edges = edge_lists(cs, np.arange(cs.n_edges))
    n = len(x)
    out = {}
    for label, fn in (("scalar", brute_all_scalar), ("blocked", brute_all)):
        t = np.empty(n)
        e = np.empty(n, dtype=np.int64)
        call = lambda: fn(x, y, dx, dy, start, *edges, float(cs.eps), t, e)
        call()                                      # compile or load from the cache
        out[label] = (best_cpu(call) / n * 1e9, t.copy(), e.copy())
    same = (np.array_equal(out["scalar"][1].view(np.int64), out["blocked"][1].view(np.int64))
            and np.array_equal(out["scalar"][2], out["blocked"][2]))
    s_ns, b_ns = out["scalar"][0], out["blocked"][0]
    print(f"{name:<16} {cs.n_edges:>6} {n:>10,} {s_ns:>10.1f} {b_ns:>10.1f} {s_ns / b_ns:>7.2f}x  "
          f"{'same bits' if same else 'DIFFERENT'}")
    return same


def vector_instructions() -> str:
    """Counts of packed-double division / square root and of 256- and 512-bit registers in
    brute_all's machine code (compiled for the signature the tracer calls it with)."""
    import re
    asm = "".join(brute_all.inspect_asm().values())
    counts = {w: len(re.findall(r"\b" + w + r"\b", asm)) for w in ("vdivpd", "vsqrtpd")}
    counts.update({r: len(re.findall(r"%" + r + r"\d", asm)) for r in ("ymm", "zmm")})
    return ", ".join(f"{k} {v}" for k, v in counts.items())


def main() -> int:
    os.environ.setdefault("RAYTRACE_KERNEL", "numba")
    print(f"load average {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} {os.getloadavg()[2]:.2f}, "
          f"best of 3 CPU times, one core")
    print(f"{'scene':<16} {'edges':>6} {'queries':>10} {'scalar ns':>10} {'blocked ns':>10} {'ratio':>8}")
    ok = True
    ok &= measure("light pipe", load_scene(ROOT / "samples" / "light-pipe-90.json"), 5_000)
    ok &= measure("oblique window", load_scene(ROOT / "samples" / "oblique-window.json"), 50_000)
    ok &= measure("film, 100 edges", strip_scene(100), 5_000)
    if "--asm" in sys.argv:
        print("brute_all machine code:", vector_instructions())
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
