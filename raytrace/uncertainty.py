"""Standard errors of the figures of a trace, from sub-batches of source rays.

Every source ray belongs to one of SUB_BATCHES sub-batches: ray k (numbered over the whole
trace) goes to sub-batch floor(SUB_BATCHES * frac(k * golden ratio)).  The sub-batches are
interleaved: each takes about every 32nd ray, but not on a fixed stride, so a fan whose
structure repeats every 32 rays (an emitter's fans) does not put one direction in one
sub-batch.  The tracer tallies the ledger bins, the source flux and the detector flux of each
sub-batch (`RawTrace.batch_bins`, `batch_flux`).

A share is a ratio, flux in a bucket over source flux, so its standard error is that of a
ratio estimate from k clusters (published: Cochran, Sampling Techniques, 3rd ed., 1977,
sec. 6.4, the variance of the ratio estimate; also the usual batch-means estimate):

    SE(y/x)^2 = k / (k - 1) * sum_b (y_b - (y/x) x_b)^2 / x^2

For rays of equal flux each landing in the bucket with probability p, this is the binomial
sqrt(p (1 - p) / n), within the scatter of an estimate from k sub-batches.

What the figure means depends on how the rays were chosen:
- random sampling or Monte Carlo mode: a statistical standard error; the share from another
  seed differs by about that much (stratified random sampling makes it a slight overestimate);
- branching mode with even sampling: the trace is deterministic, and the figure is the spread
  of the 32 interleaved sub-fans treated as independent, a *sampling* error: how much the
  share depends on where the rays of the fan happen to fall.  It does not see an error that
  every sub-fan shares: an even emitter lays its rays on a grid of about sqrt(n) positions by
  sqrt(n) angles, and every sub-fan samples that grid (the light pipe sample at 2,000 rays is
  1.4 points off at a 9 mm bend with an error of +-0.49).  Compare two ray counts, or use
  `converge.trace_to_error`, which also waits for the figures to stop moving.
"""
from __future__ import annotations

import math

import numpy as np

SUB_BATCHES = 32
_GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0


def sub_batch(source_ray: np.ndarray) -> np.ndarray:
    """Sub-batch of each source ray, from its number over the whole trace."""
    k = np.asarray(source_ray, dtype=np.float64)
    return np.minimum((np.mod(k * _GOLDEN, 1.0) * SUB_BATCHES).astype(np.int64), SUB_BATCHES - 1)


def batch_sums(source_ray: np.ndarray, flux: np.ndarray) -> np.ndarray:
    """Flux summed per sub-batch."""
    return np.bincount(sub_batch(source_ray), weights=flux, minlength=SUB_BATCHES)


def ratio_error(num: np.ndarray, den: np.ndarray) -> float:
    """Standard error of sum(num) / sum(den) from per-sub-batch sums (nan with fewer than two
    sub-batches holding rays)."""
    num = np.asarray(num, dtype=float)
    den = np.asarray(den, dtype=float)
    total = den.sum()
    used = den > 0
    k = int(used.sum())
    if k < 2 or total <= 0:
        return float("nan")
    ratio = num.sum() / total
    resid = num[used] - ratio * den[used]
    return float(math.sqrt(k / (k - 1) * float((resid ** 2).sum())) / total)


def error_meaning(mode: str, samplings: list[str]) -> str:
    """One sentence: what the standard errors of this trace mean."""
    if mode == "branching" and samplings and all(s == "even" for s in samplings):
        return (f"sampling error: the spread of {SUB_BATCHES} interleaved sub-fans of the even fan, "
                "treated as independent (the trace is deterministic; an error all sub-fans share, "
                "such as a coarse emitter grid, is not in it: compare with more rays or use "
                "--target-error)")
    return f"standard error from {SUB_BATCHES} independent sub-batches of source rays"


def format_error(share: float, error: float) -> str:
    """'19.40 % +- 0.15' style text for a share and its error, both fractions."""
    if error != error:
        return f"{100 * share:7.3f} %"
    return f"{100 * share:7.3f} % +- {100 * error:.3f}"
