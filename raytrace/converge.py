"""Trace until the figures are known well enough: `trace_to_error(scene, 0.001)`.

A trace is run, every reported figure's standard error is read (each ledger share, each
detector's efficiency and accepted share, see `uncertainty`), and while the largest (or the
named figure's) is above the target the scene is traced again with more rays, up to a cap.
Each round starts afresh with more rays (an even fan must be laid out anew), growing by the
1/sqrt(n) law of a statistical error, at least 2x and at most 8x per round.

A deterministic trace (branching mode, every source sampled evenly) must also have settled: the
figures may have moved by at most the target since the round before.  Its sub-batch error cannot
see an error that every sub-fan shares: an even emitter lays its rays on a grid of about sqrt(n)
positions by sqrt(n) angles, and every sub-fan samples that same grid (the light pipe sample at
2,000 rays is 1.4 points off at a 9 mm bend, with an error of +-0.49).  The change between two fans of
different sizes does see it.
"""
from __future__ import annotations

import math

from .errors import Problems

DEFAULT_RAY_CAP = 2_000_000
GROWTH_MIN, GROWTH_MAX = 2.0, 8.0


def figure_errors(result) -> dict[str, tuple[float, float]]:
    """Every reported figure of a result by name: (value, standard error).  Names: a detector's
    name (its efficiency), "DETECTOR.accepted" for one with an acceptance, and each other
    ledger bucket's label ("escaped via guide / input", "truncated: below flux floor")."""
    out: dict[str, tuple[float, float]] = {}
    for i, d in enumerate(result.compiled.detectors):
        out[d.name] = (result.efficiency(d.name), result.efficiency_error(d.name))
        if result.compiled.acceptance and result.compiled.acceptance[i] is not None:
            out[f"{d.name}.accepted"] = (result.accepted(d.name), result.accepted_error(d.name))
    for b in result.ledger.buckets:
        if b.kind != "detector":
            out[b.label] = (result.share(b.label), result.share_error(b.label))
    return out


def largest_error(result, figure: str | None = None) -> tuple[str, float]:
    """The figure with the largest standard error (or the named one) and that error; an error
    that cannot be estimated counts as infinite."""
    errors = figure_errors(result)
    if figure is not None:
        if figure not in errors:
            from .figures import no_acceptance_problem
            cs = result.compiled
            has = [bool(cs.acceptance) and cs.acceptance[i] is not None for i in range(len(cs.detectors))]
            refused = no_acceptance_problem("--target-figure", figure,
                                            [(d.name, h) for d, h in zip(cs.detectors, has)], list(errors))
            if refused is not None:
                from .sweep import SweepError
                raise SweepError(refused.problems)
            p = Problems()
            p.add("--target-figure", figure, "a detector's name, DETECTOR.accepted or a ledger bucket label: "
                  + ", ".join(repr(k) for k in errors))
            from .sweep import SweepError      # a name that cannot be used: a usage error
            raise SweepError(p.items)
        errors = {figure: errors[figure]}
    if not errors:
        return "", 0.0
    name, (_, err) = max(errors.items(), key=lambda kv: math.inf if kv[1][1] != kv[1][1] else kv[1][1])
    return name, (math.inf if err != err else err)


def trace_to_error(scene, target_error: float, figure: str | None = None, ray_cap: int = DEFAULT_RAY_CAP,
                   rays: int | None = None, **options):
    """Trace `scene` with more and more rays until the largest standard error of its figures (or
    of `figure`) is at most `target_error` (a fraction of the source flux: 0.001 = 0.1 points of
    %), or `ray_cap` rays were traced.  Other options go to `raytrace.trace`.  The result's
    settings["target_error"] records the rounds; a warning says when the cap stopped it."""
    from .api import trace
    if not target_error > 0:
        raise ValueError(f"target_error: expected a number > 0, found {target_error!r}")
    n = min(int(rays if rays is not None else scene.settings.rays), int(ray_cap))
    rounds = []
    before = None
    while True:
        result = trace(scene, rays=n, **options)
        name, err = largest_error(result, figure)
        values = {k: v for k, (v, _) in figure_errors(result).items() if figure is None or k == figure}
        deterministic = "sampling error" in result.error_meaning
        change = None if before is None else max(
            [abs(values.get(k, 0.0) - before.get(k, 0.0)) for k in set(values) | set(before)] or [0.0])
        rounds.append({"rays": n, "largest_error": None if math.isinf(err) else err, "figure": name,
                       "largest_change": change})
        settled = not deterministic or (change is not None and change <= target_error)
        if (err <= target_error and settled) or n >= ray_cap:
            break
        before = values
        growth = GROWTH_MAX if math.isinf(err) else 1.1 * (err / target_error) ** 2
        n = min(int(ray_cap), int(math.ceil(n * min(GROWTH_MAX, max(GROWTH_MIN, growth)))))
    reached = err <= target_error and settled
    result.settings["target_error"] = {"target": target_error, "figure": figure, "ray_cap": int(ray_cap),
                                       "reached": reached, "rounds": rounds}
    if not reached:
        shown = "unknown" if math.isinf(err) else f"{100 * err:.3g} points of %"
        moved = "" if settled else (f" and the figures still moved by {100 * change:.3g} points since the "
                                    f"round before" if change is not None else " and there was no round before to compare with")
        result.warnings.append(f"the target error {100 * target_error:.3g} points of % was not reached: "
                               f"the error of {name!r} is {shown}{moved} at the ray cap of {int(ray_cap):,} rays; "
                               f"raise --ray-cap or accept a larger --target-error")
    return result
