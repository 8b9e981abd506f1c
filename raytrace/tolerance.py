"""Monte Carlo tolerancing: trace the scene at random deviations of named numbers within their
+- tolerances and report what the deviations do to detector figures.

Each sample draws every number's deviation independently:
- uniform: anywhere in [-minus, +plus] with equal likelihood;
- normal: centred on the middle of the band, with the band spanning 6 standard deviations
  (+-3 sigma, common practice for a process that holds its tolerance), not truncated.
Draws come from numpy's default generator seeded with `sample_seed`, so a run is repeatable;
the traces use the scene's own trace seed.  Samples are traced in parallel like a sweep.

For each figure the report gives the nominal value (with its standard error), the mean, the
standard deviation, the range, the worst sample (lowest efficiency; for a position or an angle the
one farthest from nominal) with its deviations, and which number drives the spread: a least-
squares fit of the figure to the deviations gives each number a slope, and slope^2 * variance of
the deviation is that number's share of the variance the fit explains.
"""
from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from .design_points import figure_of, problem as _problem, resolve_continuous, run_points, scene_data, trace_options
from .errors import Problems
from .merit import UNITS, Figure, parse_figure
from .sweep import SweepError, _refuse_shared_number

DISTRIBUTIONS = ("uniform", "normal")


@dataclass(frozen=True)
class Tolerance:
    name: str
    minus: float      # the number may fall this far below nominal
    plus: float       # ... and rise this far above


@dataclass
class FigureSpread:
    figure: Figure
    nominal: float
    nominal_se: float
    values: np.ndarray          # per sample (nan where a sample could not be traced)
    slopes: list[float]         # figure change per unit of each number (linear fit)
    shares: list[float]         # share of the fitted variance from each number
    fit_r2: float               # how much of the spread the linear fit explains
    worst_index: int

    @property
    def ok(self) -> np.ndarray:
        return self.values[np.isfinite(self.values)]

    @property
    def mean(self) -> float:
        return float(self.ok.mean()) if len(self.ok) else math.nan

    @property
    def std(self) -> float:
        return float(self.ok.std(ddof=1)) if len(self.ok) > 1 else math.nan


@dataclass
class ToleranceResult:
    tolerances: list[Tolerance]
    nominal_values: list[float]
    distribution: str
    sample_seed: int
    deviations: np.ndarray      # samples x numbers
    statuses: list[str]
    spreads: list[FigureSpread] = field(default_factory=list)

    @property
    def names(self) -> list[str]:
        return [t.name for t in self.tolerances]

    @property
    def failed(self) -> list[int]:
        return [i for i, s in enumerate(self.statuses) if s != "ok"]

    def text(self) -> str:
        n = len(self.statuses)
        lines = [f"{n} samples, {self.distribution} deviations (sample seed {self.sample_seed}):"]
        for t, v in zip(self.tolerances, self.nominal_values):
            lines.append(f"  {t.name} = {v:.6g} -{t.minus:g} / +{t.plus:g}")
        if self.failed:
            lines.append(f"  {len(self.failed)} sample(s) could not be traced (first: {self.statuses[self.failed[0]]})")
        for s in self.spreads:
            f = s.figure
            lines.append(f"{f.label}")
            lines.append(f"  nominal {f.format(s.nominal, s.nominal_se)}")
            lines.append(f"  mean {f.format(s.mean)}, standard deviation {f.format(s.std)}")
            if len(s.ok):
                lines.append(f"  range {f.format(float(s.ok.min()))} to {f.format(float(s.ok.max()))}")
                w = s.worst_index
                devs = ", ".join(f"{name} {d:+.4g}" for name, d in zip(self.names, self.deviations[w]))
                lines.append(f"  worst case {f.format(float(s.values[w]))} (sample {w}: {devs})")
                order = sorted(range(len(self.names)), key=lambda j: -s.shares[j])
                if not any(math.isfinite(x) for x in s.slopes):
                    # a least-squares fit of k slopes and an offset needs more than k + 1 samples
                    from .cli import counted
                    lines.append(f"  drivers: not fitted, {counted(len(s.ok), 'traced sample')} for "
                                 f"{counted(len(self.names), 'number')}; the fit needs at least "
                                 f"{len(self.names) + 2} (raise --samples)")
                    continue
                lines.append("  drivers (share of the spread, slope): " + "; ".join(
                    f"{self.names[j]} {100 * s.shares[j]:.0f} %, {_slope(f, s.slopes[j])}" for j in order)
                    + f" (linear fit explains {100 * s.fit_r2:.0f} %)")
        return "\n".join(lines)

    def samples_csv(self) -> str:
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["sample", *[f"deviation: {n}" for n in self.names], "status",
                    *[s.figure.label for s in self.spreads]])
        for i, status in enumerate(self.statuses):
            w.writerow([i, *[repr(float(d)) for d in self.deviations[i]], status,
                        *[repr(float(s.values[i])) for s in self.spreads]])
        return buf.getvalue()

    def to_dict(self) -> dict:
        return {"distribution": self.distribution, "sample_seed": self.sample_seed, "samples": len(self.statuses),
                "tolerances": [{"name": t.name, "nominal": v, "minus": t.minus, "plus": t.plus}
                               for t, v in zip(self.tolerances, self.nominal_values)],
                "failed": len(self.failed),
                "figures": [{"figure": s.figure.label, "nominal": s.nominal, "nominal_se": s.nominal_se,
                             "mean": s.mean, "std": s.std,
                             "min": float(s.ok.min()) if len(s.ok) else None,
                             "max": float(s.ok.max()) if len(s.ok) else None,
                             "worst": {"sample": s.worst_index, "value": float(s.values[s.worst_index]),
                                       "deviations": dict(zip(self.names, map(float, self.deviations[s.worst_index])))},
                             "drivers": [{"name": n, "share": sh, "slope": sl}
                                         for n, sh, sl in zip(self.names, s.shares, s.slopes)],
                             "fit_r2": s.fit_r2} for s in self.spreads]}


def _slope(f: Figure, slope: float) -> str:
    if f.kind == "efficiency":
        return f"{100 * slope:+.4g} % per unit"
    return f"{slope:+.4g} {UNITS[f.kind]} per unit"


def parse_tolerance(text: str, where: str = "--tol") -> Tolerance:
    """NAME=T (+-T) or NAME=-A,+B -> Tolerance."""
    name, sep, spec = text.rpartition("=")
    try:
        if not sep or not name.strip():
            raise ValueError
        parts = [p.strip() for p in spec.split(",")]
        if len(parts) == 1:
            minus = plus = abs(float(parts[0]))
            ok = float(parts[0]) > 0
        elif len(parts) == 2:
            minus, plus = -float(parts[0]), float(parts[1])
            ok = minus >= 0 and plus >= 0 and minus + plus > 0
        else:
            raise ValueError
        if not ok or not (math.isfinite(minus) and math.isfinite(plus)):
            raise ValueError
    except ValueError:
        problems = Problems()
        problems.add(f"{where} {name.strip()}".strip(), text,
                     "NAME=T for +-T (T > 0), or NAME=-A,+B with A, B >= 0")
        raise SweepError(problems.items) from None
    return Tolerance(name.strip(), minus, plus)


def draw_deviations(tolerances: list[Tolerance], samples: int, distribution: str, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    lo = np.array([-t.minus for t in tolerances])
    hi = np.array([t.plus for t in tolerances])
    if distribution == "uniform":
        return lo + (hi - lo) * rng.random((samples, len(tolerances)))
    return rng.normal((lo + hi) / 2, (hi - lo) / 6, (samples, len(tolerances)))


def tolerance(scene, tolerances: list[Tolerance], figures: list[str | Figure], samples: int = 200,
              distribution: str = "uniform", sample_seed: int = 1, options: dict | None = None,
              executor=None, workers: int | None = None,
              progress: Callable[[int, int], None] | None = None, file: str = "") -> ToleranceResult:
    """Trace the nominal scene and `samples` random deviations of the `tolerances`."""
    data = scene_data(scene)
    if not tolerances:
        raise SweepError([_problem("--tol", "no names", "at least one NAME=T")])
    if len({t.name for t in tolerances}) != len(tolerances):
        raise SweepError([_problem("--tol", [t.name for t in tolerances], "different names")])
    if distribution not in DISTRIBUTIONS:
        raise SweepError([_problem("--distribution", distribution, "uniform or normal")])
    if samples < 2:
        raise SweepError([_problem("--samples", samples, "at least 2 samples")])
    resolved = [resolve_continuous(data, t.name, "--tol", file) for t in tolerances]
    _refuse_shared_number([t for t, _ in resolved], "--tol", data)   # one number under two names
    detectors = [d.get("name", "") for d in data.get("detectors", [])]
    figs = [f if isinstance(f, Figure) else parse_figure(f, detectors, file=file) for f in figures]
    if not figs:
        raise SweepError([_problem("--figure", "no figures", "at least one detector figure")])
    nominal = np.array([v for _, v in resolved])
    dev = draw_deviations(tolerances, samples, distribution, sample_seed)
    points = [[]] + [[(t.paths, float(x)) for (t, _), x in zip(resolved, nominal + d)] for d in dev]
    results = run_points(data, points, trace_options(options), figs, executor, workers, progress)
    out = ToleranceResult(tolerances, nominal.tolist(), distribution, sample_seed, dev,
                          [r["status"] for r in results[1:]])
    for f in figs:
        v0, se0 = figure_of(results[0], f)
        values = np.array([figure_of(r, f)[0] for r in results[1:]])
        out.spreads.append(_spread(f, v0, se0, values, dev))
    return out


def _spread(f: Figure, v0: float, se0: float, values: np.ndarray, dev: np.ndarray) -> FigureSpread:
    ok = np.isfinite(values)
    k = dev.shape[1]
    slopes, shares, r2 = [math.nan] * k, [0.0] * k, math.nan
    if ok.sum() > k + 1:
        x, y = dev[ok], values[ok]
        design = np.column_stack([np.ones(len(y)), x])
        coef, *_ = np.linalg.lstsq(design, y, rcond=None)
        slopes = [float(c) for c in coef[1:]]
        parts = np.array([c * c * x[:, j].var() for j, c in enumerate(coef[1:])])
        total = float(y.var())
        shares = (parts / parts.sum()).tolist() if parts.sum() > 0 else [0.0] * k
        r2 = float(1.0 - (y - design @ coef).var() / total) if total > 0 else math.nan
    if not ok.any():
        worst = 0
    elif f.kind == "efficiency":
        worst = int(np.nanargmin(values))
    else:
        worst = int(np.nanargmax(np.abs(values - v0)))
    return FigureSpread(f, v0, se0, values, slopes, shares, r2, worst)
