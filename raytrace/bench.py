"""`raytrace bench`: fixed workloads, their speed and memory, and the speedup over the plain tracer.

Workloads (full size; `--quick` shrinks every one to a smoke test of a few seconds):
    light-pipe-1e5     samples/light-pipe-90.json, 100,000 rays, full branching to 1e-4
    light-pipe-1e6     the same, 1,000,000 rays
    strip-100/1000/10000   microprism films of about 100, 1,000 and 10,000 edges, 100,000 rays
    window-mc-1e6      samples/oblique-window.json, 1,000,000 rays, Monte Carlo
    window-mc-1e7      the same with 10,000,000 rays, ray table off, hits binned: the memory check
    gui-1000           compile + trace + segment table for a 1,000-ray fan with record="all"

For each workload the accelerated tracer runs at full size on all cores (rays/s, events/s,
events/s per core, peak memory), and then, for the speedup, the accelerated and the plain
tracer (every ray against every edge, in the selected kernel) run the *same* smaller workload
on one core, one after the other in this process; the ratio of their times is reported because
absolute times drift on a shared machine.

The light pipe and the window are also measured against the "plain compiled" bar
(`bench_plain`): a straightforward compiled loop, one ray at a time, every edge tested, the
same physics, on the same starting rays.  Both run on one core, alternately, best of three CPU
times each, and the ratio of their costs per event is reported ("vs plain compiled").  The
first-call (compile or cache-load) time of the compiled kernel is reported too.

Events are segment ends (every traced segment ends in one).  Peak memory is the largest
proportional set size of this process plus its worker processes, read whenever their resident
size reaches a new high (checked every 50 ms; see PeakMemory).
Full-branching workloads run without a segment budget (`MAX_SEGMENTS`).
"""
from __future__ import annotations

import json
import os
import platform
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

SAMPLES = Path(__file__).resolve().parent.parent / "samples"


@dataclass
class Workload:
    name: str
    build: object            # () -> Scene
    rays: int
    mode: str = "branching"
    plain_rays: int = 0      # rays for the plain-vs-accelerated ratio (0: no ratio)
    hits: str = "auto"
    workers: int | None = None   # None: all cores
    paths: bool = False      # path tallies (off, as `raytrace trace` and the GUI run by default)
    note: str = ""
    bar_rays: int = 0        # rays for the ratio to the plain compiled loop (0: none)


def _sample(name):
    def build():
        from .scene_io import load_scene
        return load_scene(SAMPLES / name)
    return build


def strip_scene(edges: int, pitch: float = 0.05):
    """A 90 degree PMMA prism film of about `edges` edges over a Lambertian backlight, with a
    viewer detector above and a recycling detector below, both as wide as twice the film."""
    from .geometry import Part
    from .scene import Detector, Scene, Source
    from .shapes import microprism_strip
    count = max(1, (edges - 4) // 2)
    w = count * pitch
    part = Part("film", "PMMA", microprism_strip(pitch, 90.0, count, 0.3))
    src = Source("backlight", kind="emitter", position=(0.0, -0.5), direction_deg=90.0, width=0.9 * w,
                 half_angle_deg=90.0, distribution="lambertian")
    dets = [Detector("viewer", (-w, 2.0), (w, 2.0)), Detector("recycled", (w, -1.0), (-w, -1.0))]
    return Scene(parts=[part], sources=[src], detectors=dets, name=f"prism film, {2 * count + 4} edges")


def workloads(quick: bool) -> list[Workload]:
    q = quick
    return [
        Workload("light-pipe-1e5", _sample("light-pipe-90.json"), 2_000 if q else 100_000, plain_rays=300 if q else 10_000,
                 bar_rays=300 if q else 20_000),
        Workload("light-pipe-1e5-routes", _sample("light-pipe-90.json"), 2_000 if q else 100_000, paths=True,
                 note="with path tallies"),
        Workload("light-pipe-1e6", _sample("light-pipe-90.json"), 4_000 if q else 1_000_000, plain_rays=0),
        Workload("strip-100", lambda: strip_scene(100), 1_000 if q else 100_000, plain_rays=200 if q else 10_000),
        Workload("strip-1000", lambda: strip_scene(1000), 1_000 if q else 100_000, plain_rays=100 if q else 10_000),
        Workload("strip-10000", lambda: strip_scene(10000), 500 if q else 100_000, plain_rays=20 if q else 2_000),
        Workload("window-mc-1e6", _sample("oblique-window.json"), 5_000 if q else 1_000_000, "monte_carlo",
                 plain_rays=1_000 if q else 100_000, bar_rays=1_000 if q else 100_000),
        Workload("window-mc-1e7", _sample("oblique-window.json"), 20_000 if q else 10_000_000, "monte_carlo",
                 hits="histogram", note="memory check: ray table off, hits binned"),
    ]


class PeakMemory:
    """Largest memory in use by this process and its worker processes while running.

    Linux: the proportional set size (Pss in /proc/PID/smaps_rollup) of each process, summed;
    pages that forked workers share with this process are split among
    them rather than counted once per process, so the sum is the machine memory in use.

    Reading smaps_rollup walks every mapping of the process in the kernel: for a few GB it
    takes tens of ms, and at a fixed 50 ms the sampler took 5 s of system CPU of a 1e6-ray
    run (a quarter of the run's CPU, on a 2-core machine).  So every 50 ms only the resident
    sizes are read (statm, constant cost), and the proportional sizes are read when the summed
    resident size reaches a new high, at most as often as keeps the sampler under SAMPLER_SHARE
    of one core.  A process's PSS never exceeds its resident size, so what can be missed is a
    PSS rise while the resident sum stays below its high (shared pages changing hands), and a
    high that has passed again before the proportional reading it asked for: after a reading
    the next waits (that reading's CPU time) / SAMPLER_SHARE, e.g. 0.4 s after a 20 ms one."""

    SAMPLER_SHARE = 0.05
    PAGE = os.sysconf("SC_PAGE_SIZE") if hasattr(os, "sysconf") else 4096

    def __init__(self, interval: float = 0.05):
        self.interval = interval
        self.peak = 0
        self.samples = 0             # proportional-size readings taken
        self._rss_high = 0
        self._pending = False
        self._next_pss = 0.0
        self._stop = threading.Event()

    @staticmethod
    def _pss(pid) -> int:
        try:
            with open(f"/proc/{pid}/smaps_rollup") as f:
                for line in f:
                    if line.startswith("Pss:"):
                        return int(line.split()[1]) * 1024
        except OSError:
            pass
        return 0

    @classmethod
    def _rss(cls, pid) -> int:
        try:
            with open(f"/proc/{pid}/statm") as f:
                return int(f.read().split()[1]) * cls.PAGE
        except (OSError, IndexError, ValueError):
            return 0

    @staticmethod
    def _children() -> list[int]:
        try:
            with open(f"/proc/{os.getpid()}/task/{os.getpid()}/children") as f:
                return [int(p) for p in f.read().split()]
        except OSError:
            return []

    def sample(self) -> None:
        total = self._pss(os.getpid()) + sum(self._pss(p) for p in self._children())
        self.peak = max(self.peak, total)
        self.samples += 1

    def _tick(self) -> None:
        rss = self._rss(os.getpid()) + sum(self._rss(p) for p in self._children())
        if rss > self._rss_high:
            self._rss_high = rss
            self._pending = True
        now = time.monotonic()
        if self._pending and now >= self._next_pss:
            t0 = time.thread_time()
            self.sample()
            self._pending = False
            self._next_pss = now + (time.thread_time() - t0) / self.SAMPLER_SHARE

    def _run(self):
        while not self._stop.wait(self.interval):
            self._tick()

    def __enter__(self):
        self.sample()
        self._t = threading.Thread(target=self._run, daemon=True)
        self._t.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._t.join()
        self.sample()


# full branching: no segment budget cuts the tree short (the samples' own budget is 50 million)
MAX_SEGMENTS = 10**10


def _full_trace(scene, cs, rays, mode, workers, hits="auto", track_paths=False):
    from .api import trace
    return trace(scene, rays=rays, mode=mode, compiled=cs, workers=workers, hits=hits,
                 track_paths=track_paths, segment_budget=MAX_SEGMENTS).stats


def _start_and_limits(scene, rays):
    from .sources import sample_sources
    from .tracer import Limits
    s = scene.settings
    start = sample_sources(scene.sources, rays, seed=s.seed)
    return start, Limits(flux_floor=s.flux_floor, max_generations=s.max_generations, segment_budget=MAX_SEGMENTS)


def _ratio_traces(scene, cs, rays, mode):
    """Accelerated and plain tracer on the same starting rays, seed and limits, one core."""
    from .accel import hit_function
    from .tracer import trace_rays
    start, lim = _start_and_limits(scene, rays)
    out = []
    for hit_fn in (None, hit_function(cs, "plain")):
        t0 = time.process_time()
        raw = trace_rays(cs, start, mode=mode, limits=lim, seed=scene.settings.seed, hit_fn=hit_fn,
                         n_sources=len(scene.sources), track_paths=False)
        out.append((time.process_time() - t0, raw))
    (fast_s, fast), (plain_s, plain) = out
    same = bool(np.array_equal(fast.bins, plain.bins)) and fast.stats["segments"] == plain.stats["segments"]
    return fast_s, plain_s, int(plain.stats["segments"]), same


def _vs_plain_compiled(scene, cs, rays, mode, repeats: int = 3) -> dict:
    """The tracer and the plain compiled loop on the same starting rays, one core, alternately;
    best of `repeats` CPU times each (other load on a shared machine only ever adds time)."""
    from .bench_plain import run_plain
    from .tracer import trace_rays
    start, lim = _start_and_limits(scene, rays)
    seed = scene.settings.seed
    from .sources import sample_sources
    run_plain(cs, sample_sources(scene.sources, 20, seed=seed), mode, lim, seed)    # compile / load
    best_tracer = best_bar = float("inf")
    for _ in range(repeats):
        t0 = time.process_time()
        bar_events, _fates = run_plain(cs, start, mode, lim, seed)
        best_bar = min(best_bar, time.process_time() - t0)
        t0 = time.process_time()
        raw = trace_rays(cs, start, mode=mode, limits=lim, seed=seed, n_sources=len(scene.sources),
                         track_paths=False)
        best_tracer = min(best_tracer, time.process_time() - t0)
    events = int(raw.stats["segments"])
    tracer_ns = best_tracer / max(events, 1) * 1e9
    bar_ns = best_bar / max(bar_events, 1) * 1e9
    return {"bar_rays": rays, "bar_events": int(bar_events), "tracer_events": events,
            "tracer_ns_per_event": tracer_ns, "bar_ns_per_event": bar_ns,
            "vs_plain_compiled": tracer_ns / max(bar_ns, 1e-12)}


def _cpu() -> np.ndarray:
    """CPU seconds of this process and of its finished children (the pool's workers)."""
    import resource
    a = resource.getrusage(resource.RUSAGE_SELF)
    b = resource.getrusage(resource.RUSAGE_CHILDREN)
    return np.array([a.ru_utime + a.ru_stime, b.ru_utime + b.ru_stime])


def run_workload(w: Workload, workers: int, ratio: bool = True) -> dict:
    from .compile import compile_scene
    scene = w.build()
    cs = compile_scene(scene)
    n_workers = w.workers or workers
    _full_trace(scene, cs, min(200, w.rays), w.mode, 1)          # warm-up: caches, grid, imports
    with PeakMemory() as mem:
        t0, c0 = time.perf_counter(), _cpu()
        stats = _full_trace(scene, cs, w.rays, w.mode, n_workers, hits=w.hits, track_paths=w.paths)
        wall, (cpu_parent, cpu_workers) = time.perf_counter() - t0, _cpu() - c0
    cpu = cpu_parent + cpu_workers
    events = int(stats["segments"])
    row = {"name": w.name, "scene": scene.name, "edges": cs.n_edges, "rays": w.rays, "mode": w.mode,
           "workers": n_workers, "path_tallies": w.paths, "events": events,
           "events_per_ray": events / max(w.rays, 1), "wall_s": wall, "cpu_s": cpu,
           "parent_cpu_s": cpu_parent, "workers_cpu_s": cpu_workers,
           "rays_per_s": w.rays / wall, "events_per_s": events / wall,
           "events_per_s_per_core": events / wall / n_workers, "events_per_cpu_s": events / max(cpu, 1e-9),
           "peak_memory_mb": mem.peak / 1e6, "ns_per_event_cpu": cpu / max(events, 1) * 1e9, "note": w.note}
    if ratio and w.plain_rays:
        fast_s, plain_s, ev, same = _ratio_traces(scene, cs, w.plain_rays, w.mode)
        row.update(ratio_rays=w.plain_rays, ratio_events=ev, accel_cpu_s=fast_s, plain_cpu_s=plain_s,
                   speedup=plain_s / max(fast_s, 1e-12), same_ledger=same)
    if ratio and w.bar_rays:
        row.update(_vs_plain_compiled(scene, cs, w.bar_rays, w.mode))
    return row


def gui_redraw(repeats: int = 15) -> dict:
    """compile + trace + segment table of a 1,000-ray fan with the ray table on (median of runs)."""
    from .api import trace
    from .compile import compile_scene
    scene = _sample("light-pipe-90.json")()
    times, cpus = [], []
    for _ in range(repeats + 2):
        t0, c0 = time.perf_counter(), time.process_time()
        cs = compile_scene(scene)
        # as the GUI traces: one process, ray table on, no path tallies
        r = trace(scene, rays=1000, record="all", compiled=cs, track_paths=False)
        seg = r.segments
        lines = np.column_stack([seg["x0"], seg["y0"], seg["x1"], seg["y1"]])
        times.append(time.perf_counter() - t0)
        cpus.append(time.process_time() - c0)
    times, cpus = sorted(times[2:]), sorted(cpus[2:])
    return {"name": "gui-1000", "rays": 1000, "segments": int(len(lines)),
            "median_ms": 1e3 * times[len(times) // 2], "best_ms": 1e3 * times[0],
            "cpu_median_ms": 1e3 * cpus[len(cpus) // 2]}


TARGETS = (
    ("light-pipe 1e6 rays, full branching to 1e-4, wall time", "light-pipe-1e6", "wall_s", "<=", 4.0, "s"),
    ("light pipe: cost per event / plain compiled loop's (one core)", "light-pipe-1e5", "vs_plain_compiled", "<=",
     2.0, "x"),
    ("window: cost per event / plain compiled loop's (one core)", "window-mc-1e6", "vs_plain_compiled", "<=",
     2.0, "x"),
    ("events per second per core on that workload (wall)", "light-pipe-1e6", "events_per_s_per_core", ">=", 2e6, "/s"),
    ("events per CPU second on that workload", "light-pipe-1e6", "events_per_cpu_s", ">=", 2e6, "/s"),
    ("GUI edit-to-redraw, 1,000 rays, record all (wall, median)", "gui-1000", "median_ms", "<=", 33.0, "ms"),
    ("GUI edit-to-redraw, 1,000 rays, record all (CPU, median)", "gui-1000", "cpu_median_ms", "<=", 33.0, "ms"),
    ("per-event cost, 10,000-edge film / 100-edge film", "strip-ratio", "value", "<=", 3.0, "x"),
    ("10 million source rays, ray table off, peak memory", "window-mc-1e7", "peak_memory_mb", "<=", 2000.0, "MB"),
    ("100,000 rays through the light pipe (first floor)", "light-pipe-1e5", "wall_s", "<=", 5.0, "s"),
)


def check_targets(rows: dict) -> list[dict]:
    out = []
    for label, name, key, op, limit, unit in TARGETS:
        if name not in rows:
            continue
        if key not in rows[name]:
            continue
        v = rows[name][key]
        ok = v <= limit if op == "<=" else v >= limit
        out.append({"target": label, "value": v, "limit": limit, "unit": unit, "op": op, "met": bool(ok),
                    "off_by": (v / limit if op == "<=" else limit / max(v, 1e-300))})
    return out


_FIRST_TRACE = """
import time
t0 = time.perf_counter()
import raytrace
from raytrace.scene_io import load_scene
scene = load_scene({path!r})
raytrace.trace(scene, rays=50, record="all", track_paths=False)
t1 = time.perf_counter()
raytrace.trace(scene, rays=50, record="all", track_paths=False)
print(t1 - t0, time.perf_counter() - t1)
"""


def first_call_times(cold: bool = True) -> dict:
    """Start-up cost of the compiled kernel, each in a fresh process: import + first small trace
    with an empty cache folder (everything is compiled) and again with that folder filled (the
    second start), and the same trace once more in the process (nothing left to load)."""
    import subprocess
    import sys
    import tempfile
    from . import kernel
    out = {"kernel": kernel.selected()}
    code = _FIRST_TRACE.format(path=str(SAMPLES / "light-pipe-90.json"))
    with tempfile.TemporaryDirectory(prefix="raytrace-bench-cache-") as cache:
        # cold: an empty cache folder of its own; otherwise the cache the user's runs fill
        env = dict(os.environ, NUMBA_CACHE_DIR=cache) if cold else dict(os.environ)
        for label in (("cold_cache_s", "warm_cache_s") if cold else ("warm_cache_s",)):
            res = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True)
            if res.returncode != 0:
                out["error"] = res.stderr.strip().splitlines()[-1:] or ["failed"]
                break
            first, again = (float(v) for v in res.stdout.split())
            out[label] = first
            out["in_process_s"] = again
    return out


def run(quick: bool = False, workers: int | None = None, only: list[str] | None = None,
        ratio: bool = True, echo=print) -> dict:
    from . import kernel
    from .parallel import default_workers
    workers = workers or default_workers()
    rows: dict[str, dict] = {}
    echo("  start-up of the kernel ...", end="", flush=True)
    startup = first_call_times(cold=not quick)
    echo(" done")
    for w in workloads(quick):
        if only and w.name not in only:
            continue
        echo(f"  {w.name} ...", end="", flush=True)
        rows[w.name] = run_workload(w, workers, ratio)
        echo(f" {rows[w.name]['wall_s']:.2f} s")
    if not only or "gui-1000" in only:
        rows["gui-1000"] = gui_redraw(5 if quick else 15)
    if "strip-100" in rows and "strip-10000" in rows:
        # per-event cost in CPU time, so that other load on the machine cancels out
        rows["strip-ratio"] = {"name": "strip-ratio", "value": rows["strip-10000"]["ns_per_event_cpu"]
                               / rows["strip-100"]["ns_per_event_cpu"]}
    try:
        load = os.getloadavg()[0]
    except OSError:
        load = float("nan")
    return {"machine": {"cores": workers, "python": platform.python_version(), "numpy": np.__version__,
                        "platform": platform.platform(), "quick": quick, "kernel": kernel.selected(),
                        "numba": _numba_version(), "load_average_end": load},
            "startup": startup,
            "workloads": [r for r in rows.values() if "rays_per_s" in r],
            "gui": rows.get("gui-1000"), "strip_ratio": rows.get("strip-ratio", {}).get("value"),
            "targets": [] if quick else check_targets(rows)}


def _numba_version() -> str:
    try:
        import numba
        return numba.__version__
    except ImportError:
        return "-"


def format_table(report: dict) -> str:
    head = f"{'workload':<21}{'edges':>6}{'rays':>11}{'wkr':>4}{'events':>12}{'wall s':>8}{'cpu s':>7}{'rays/s':>10}" \
           f"{'events/s':>11}{'ev/s/core':>11}{'ev/cpu-s':>11}{'peak MB':>8}{'speedup':>9}"
    lines = [head, "-" * len(head)]
    for r in report["workloads"]:
        sp = f"{r['speedup']:.1f}x" if "speedup" in r else "-"
        lines.append(f"{r['name']:<21}{r['edges']:>6}{r['rays']:>11,}{r['workers']:>4}{r['events']:>12,}"
                     f"{r['wall_s']:>8.2f}{r['cpu_s']:>7.1f}{r['rays_per_s']:>10,.0f}{r['events_per_s']:>11,.0f}"
                     f"{r['events_per_s_per_core']:>11,.0f}{r['events_per_cpu_s']:>11,.0f}{r['peak_memory_mb']:>8,.0f}{sp:>9}")
    lines.append("")
    lines.append("ev/cpu-s: events per CPU second of all processes (what one core does when it has the "
                 "machine to itself; wall-clock figures suffer from other load)")
    lines.append("speedup: plain search (every edge) CPU time / accelerated CPU time, same starting rays, one core "
                 "(" + ", ".join(f"{r['name']}: {r['ratio_rays']:,} rays" for r in report["workloads"]
                                  if "ratio_rays" in r) + ")")
    for r in report["workloads"]:
        if "vs_plain_compiled" in r:
            lines.append(f"vs plain compiled, {r['name']}: {r['tracer_ns_per_event']:.0f} ns per event against the "
                         f"plain compiled loop's {r['bar_ns_per_event']:.0f} ns = {r['vs_plain_compiled']:.2f}x "
                         f"({r['bar_rays']:,} rays, {r['tracer_events']:,} / {r['bar_events']:,} events, "
                         f"one core, best of 3)")
    st = report.get("startup") or {}
    if "warm_cache_s" in st:
        cold = f"{st['cold_cache_s']:.1f} s with an empty compile cache, " if "cold_cache_s" in st else ""
        lines.append(f"kernel {st['kernel']}: import + first 50-ray trace {cold}{st['warm_cache_s']:.2f} s with the "
                     f"cache filled, {1e3 * st['in_process_s']:.0f} ms once loaded")
    elif st.get("error"):
        lines.append(f"kernel start-up not measured: {st['error'][0]}")
    g = report.get("gui")
    if g:
        lines.append(f"gui-1000: compile + trace + segment table, {g['segments']:,} segments: "
                     f"median {g['median_ms']:.1f} ms, best {g['best_ms']:.1f} ms, CPU median {g['cpu_median_ms']:.1f} ms")
    if report.get("strip_ratio") is not None:
        lines.append(f"per-event cost, 10,000-edge film / 100-edge film: {report['strip_ratio']:.2f}x")
    lines.append("")
    lines.append("targets:" if report["targets"] else "targets: not judged on --quick sizes")
    for t in report["targets"]:
        mark = "met" if t["met"] else f"MISSED (by a factor {t['off_by']:.2f})"
        lines.append(f"  {t['target']}: {t['value']:,.3g} {t['unit']} (target {t['op']} {t['limit']:,.3g}) {mark}")
    return "\n".join(lines)


def main(args) -> int:
    from .cli import write_output
    only = args.only.split(",") if getattr(args, "only", None) else None
    print(f"raytrace bench{' --quick' if args.quick else ''}: {os.cpu_count()} cores")
    report = run(quick=args.quick, workers=args.workers, only=only, ratio=not args.no_ratio)
    print(format_table(report))
    if args.json:
        if not write_output(args.json, json.dumps(report, indent=2) + "\n"):
            return 4
    return 0


def add_arguments(b) -> None:
    b.add_argument("--quick", action="store_true", help="tiny workloads: a smoke test of a few seconds")
    b.add_argument("--workers", type=int, help="processes for the full-size runs (default: all cores)")
    b.add_argument("--only", metavar="NAMES", help="comma-separated workload names")
    b.add_argument("--no-ratio", action="store_true", help="skip the plain-tracer comparison runs")
    b.add_argument("--json", metavar="FILE", help="write the figures as JSON")
