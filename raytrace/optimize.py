"""Find the values of named numbers, within bounds, that maximize (or minimize) a detector figure.

Two stages, both deterministic for a given trace seed:
1. scan: the scene as it is (the start point) and an even grid over the bounds (both ends
   included), traced in parallel on local processes or any concurrent.futures executor (Dask);
2. refine: scipy.optimize from the best scanned point, one trace at a time: the bounded Brent
   method (`minimize_scalar(method="bounded")`) within one scan step of it for one number,
   Powell's method with bounds for several (numbers scaled to 0..1 over their bounds).
The optimum is the best point traced in either stage.  A point that cannot be traced (parts
that overlap, a shape that cannot be built) counts as the worst possible, so the search stays
inside the designs that exist.
"""
from __future__ import annotations

import csv
import io
import itertools
import math
from dataclasses import dataclass, field
from typing import Callable

from .design_points import (figure_of, problem as _problem, resolve_continuous, run_points,
                            scene_data, trace_options)
from .errors import Problems
from .merit import Figure, parse_figure
from .sweep import SweepError, _refuse_shared_number

INVALID_OBJECTIVE = 1e12     # what an untraceable point scores in the minimized objective


@dataclass(frozen=True)
class Bound:
    name: str
    low: float
    high: float


@dataclass
class Evaluation:
    stage: str                  # "start", "scan" or "refine"
    values: tuple[float, ...]
    value: float                # nan when the point could not be traced
    se: float
    status: str


@dataclass
class OptimizeResult:
    names: list[str]
    figure: Figure
    maximize: bool
    start: tuple[float, ...]
    optimum: tuple[float, ...]
    value: float
    se: float
    evaluations: list[Evaluation] = field(default_factory=list)
    converged: bool = False
    message: str = ""
    iterations: int = 0
    bounds: list[tuple[float, float]] = field(default_factory=list)

    @property
    def start_value(self) -> tuple[float, float]:
        e = self.evaluations[0]
        return e.value, e.se

    def text(self) -> str:
        f = self.figure
        goal = "maximize" if self.maximize else "minimize"
        lines = [f"{goal} {f.label}"]
        for k, (name, x0, x) in enumerate(zip(self.names, self.start, self.optimum)):
            edge = ""
            if k < len(self.bounds):
                lo, hi = self.bounds[k]
                if abs(x - lo) <= 1e-9 * (hi - lo) or abs(x - hi) <= 1e-9 * (hi - lo):
                    which = "lower" if abs(x - lo) <= abs(x - hi) else "upper"
                    edge = f"; on the {which} bound: the best design may lie beyond it"
            lines.append(f"  {name}: {x:.6g}  (start {x0:.6g}{edge})")
        v0, se0 = self.start_value
        lines.append(f"  figure at the optimum: {f.format(self.value, self.se)}  (start {f.format(v0, se0)})")
        gain = self.value - v0
        se = math.hypot(self.se, se0)
        if math.isfinite(gain) and math.isfinite(se):
            lines.append(f"  change from the start: {f.format(gain)}" + (
                f" ({abs(gain) / se:.1f} standard errors)" if se > 1e-9 * max(abs(gain), 1e-300) else
                " (every source ray gives the same figure: no sampling error)"))
        stages = {s: sum(e.stage == s for e in self.evaluations) for s in ("start", "scan", "refine")}
        failed = sum(e.status != "ok" for e in self.evaluations)
        lines.append(f"  evaluations: {len(self.evaluations)} (the start, {stages['scan']} in the scan, "
                     f"{stages['refine']} refining)" + (f", {failed} could not be traced" if failed else ""))
        lines.append(f"  convergence: {'converged' if self.converged else 'NOT converged'}: {self.message} "
                     f"({self.iterations} iterations)")
        scanned = [e.value for e in self.evaluations if e.stage != "refine" and math.isfinite(e.value)]
        refine = [e for e in self.evaluations if e.stage == "refine" and math.isfinite(e.value)]
        if scanned and refine:
            best = max(scanned) if self.maximize else min(scanned)
            trail = [f.format(best)]
            for e in refine:
                if (e.value > best) if self.maximize else (e.value < best):
                    best = e.value
                    trail.append(f.format(best))
            lines.append("  best figure, from the scan on: " + " -> ".join(trail[:1] + trail[1:][-5:])
                         if len(trail) > 1 else "  the refinement found nothing better than the scan's best point")
        return "\n".join(lines)

    def to_dict(self) -> dict:
        return {"figure": self.figure.label, "maximize": self.maximize, "names": self.names,
                "bounds": [list(b) for b in self.bounds],
                "start": list(self.start), "optimum": list(self.optimum), "value": self.value, "se": self.se,
                "converged": self.converged, "message": self.message, "iterations": self.iterations,
                "evaluations": [{"stage": e.stage, "values": list(e.values), "value": e.value, "se": e.se,
                                 "status": e.status} for e in self.evaluations]}

    def history_csv(self) -> str:
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["evaluation", "stage", *self.names, "status", self.figure.label, "standard error"])
        for i, e in enumerate(self.evaluations):
            w.writerow([i, e.stage, *[repr(v) for v in e.values], e.status, repr(e.value), repr(e.se)])
        return buf.getvalue()


def parse_bound(text: str, where: str = "--vary") -> Bound:
    """NAME=LOW:HIGH -> Bound."""
    name, sep, spec = text.rpartition("=")
    parts = spec.split(":")
    try:
        if not sep or not name.strip() or len(parts) != 2:
            raise ValueError
        low, high = float(parts[0]), float(parts[1])
        if not (math.isfinite(low) and math.isfinite(high) and low < high):
            raise ValueError
    except ValueError:
        problems = Problems()
        problems.add(f"{where} {name.strip()}".strip(), text, "NAME=LOW:HIGH with finite numbers, LOW < HIGH")
        raise SweepError(problems.items) from None
    return Bound(name.strip(), low, high)


class _Budget(Exception):
    pass


def optimize(scene, bounds: list[Bound], figure: str | Figure, maximize: bool = True,
             options: dict | None = None, executor=None, workers: int | None = None,
             scan: int | None = None, xtol: float = 1e-3, max_evaluations: int = 80,
             progress: Callable[[int, int], None] | None = None, file: str = "") -> OptimizeResult:
    """Optimize `figure` ('efficiency: DETECTOR', a detector name, ...) over `bounds`.

    scan: grid points per number (default 9 for one number, 5 for two, 3 for more).
    xtol: the refinement stops when the numbers are known to this fraction of their bounds.
    max_evaluations: traces in all (start and scan included); reaching it ends the refinement
    unconverged.  options: trace options (rays, seed, mode, ...)."""
    from scipy.optimize import minimize, minimize_scalar

    data = scene_data(scene)
    if not bounds:
        raise SweepError([_problem("--vary", "no names", "at least one NAME=LOW:HIGH")])
    if len({b.name for b in bounds}) != len(bounds):
        raise SweepError([_problem("--vary", [b.name for b in bounds], "different names")])
    targets, start = [], []
    for b in bounds:
        target, x0 = resolve_continuous(data, b.name, "--vary", file)
        if not b.low <= x0 <= b.high:
            raise SweepError([_problem(f"--vary {b.name}", f"bounds {b.low:g}:{b.high:g}",
                                       f"bounds that contain the start point {x0:g}, the scene's value "
                                       "(widen them, or change the value in the scene first)", file)])
        targets.append(target)
        start.append(x0)
    _refuse_shared_number(targets, "--vary", data)    # two names for one number, or a number and a field linked to it
    fig = figure if isinstance(figure, Figure) else parse_figure(
        figure, [d.get("name", "") for d in data.get("detectors", [])], file=file)
    opts = trace_options(options)
    n = len(bounds)
    scan = scan if scan is not None else (9 if n == 1 else 5 if n == 2 else 3)
    if scan < 2:
        raise SweepError([_problem("--scan", scan, "at least 2 points per number")])
    if not (xtol > 0 and math.isfinite(xtol)):
        raise SweepError([_problem("--xtol", xtol, "a number greater than 0, e.g. 1e-3")])
    lows = [b.low for b in bounds]
    spans = [b.high - b.low for b in bounds]
    axes = [[b.low + (b.high - b.low) * k / (scan - 1) for k in range(scan)] for b in bounds]
    for ax, b in zip(axes, bounds):
        ax[-1] = b.high
    grid = [tuple(p) for p in itertools.product(*axes) if tuple(p) != tuple(start)]   # the start is traced once
    if 1 + len(grid) > max_evaluations:
        raise SweepError([_problem("--max-evaluations", max_evaluations,
                                   f"more than the {1 + len(grid)} traces of the start and the scan")])

    evaluations: list[Evaluation] = []
    cache: dict[tuple, Evaluation] = {}

    def settings(x):
        return [(t.paths, float(v)) for t, v in zip(targets, x)]

    def record(stage, x, point):
        value, se = figure_of(point, fig)
        e = Evaluation(stage, tuple(float(v) for v in x), value, se, point.get("status", ""))
        evaluations.append(e)
        cache[e.values] = e
        return e

    first = [tuple(start)] + grid
    points = run_points(data, [settings(x) for x in first], opts, [fig], executor, workers, progress)
    for k, (x, p) in enumerate(zip(first, points)):
        record("start" if k == 0 else "scan", x, p)

    sign = -1.0 if maximize else 1.0

    def objective_of(e: Evaluation) -> float:
        return sign * e.value if math.isfinite(e.value) else INVALID_OBJECTIVE

    def objective(u) -> float:
        x = tuple(float(min(max(lo + span * ui, lo), lo + span)) for lo, span, ui in zip(lows, spans, _seq(u)))
        if x in cache:
            return objective_of(cache[x])
        if len(evaluations) >= max_evaluations:
            raise _Budget()
        point = run_points(data, [settings(x)], opts, [fig], executor, workers=1)[0]
        e = record("refine", x, point)
        if progress:
            progress(len(evaluations), max_evaluations)
        return objective_of(e)

    best = min(evaluations, key=objective_of)
    converged, message, iterations = False, "", 0
    if not math.isfinite(best.value):
        message = "no point of the scan could be traced: " + best.status
    else:
        u0 = [(x - lo) / span for x, lo, span in zip(best.values, lows, spans)]
        try:
            if n == 1:
                step = 1.0 / (scan - 1)
                res = minimize_scalar(objective, bounds=(max(0.0, u0[0] - step), min(1.0, u0[0] + step)),
                                      method="bounded", options={"xatol": xtol, "maxiter": max_evaluations})
            else:
                res = minimize(objective, u0, method="Powell", bounds=[(0.0, 1.0)] * n,
                               options={"xtol": xtol, "ftol": 1e-9, "maxfev": max_evaluations})
            converged, message, iterations = bool(res.success), str(res.message), int(getattr(res, "nit", 0))
        except _Budget:
            message = f"stopped at the budget of {max_evaluations} evaluations"
    best = min(evaluations, key=objective_of)
    return OptimizeResult([b.name for b in bounds], fig, maximize, tuple(start), best.values, best.value,
                          best.se, evaluations, converged, message, iterations, [(b.low, b.high) for b in bounds])


def _seq(u):
    try:
        return list(u)
    except TypeError:
        return [u]
