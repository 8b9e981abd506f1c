"""Standard errors of ledger shares and detector efficiencies (raytrace.uncertainty).

Outside references:
- published / common practice: the standard error of a binomial proportion, sqrt(p (1 - p) / n)
  (any statistics text, e.g. Rice, Mathematical Statistics and Data Analysis, sec. 7.3);
- published: Cochran, Sampling Techniques, 3rd ed., sec. 6.4, the ratio estimate's variance,
  checked here by hand on made-up sub-batch tallies.
"""
import math

import numpy as np
import pytest

from raytrace import trace
from raytrace.scene_io import scene_from_dict
from raytrace.uncertainty import SUB_BATCHES, ratio_error, sub_batch
from test_sweep import plate_dict

ANGLE_DEG = 75.0


def plate(absorbing_through: bool = True) -> dict:
    """test_sweep's 1 mm fused-silica plate in vacuum with an s-polarised beam at 75 degrees (R
    about 0.4 per face, so the shares are far from 0 and 1), a detector behind and one in front."""
    data = plate_dict("s")
    data["sources"][0]["direction_deg"] = ANGLE_DEG
    data["detectors"][0]["absorbing"] = absorbing_through
    return data


def test_monte_carlo_share_error_is_the_binomial_standard_error():
    """In Monte Carlo mode every ray ends wholly in one bucket, so the share through the plate is a
    binomial proportion: its standard error is sqrt(p (1 - p) / n), with p the exact branching
    share.  Seeds 1..40, n = 2000 rays each.  The mean of the 40 reported SE^2 must be within 12 %
    of p (1 - p) / n (one estimate from 32 sub-batches scatters by sqrt(2/31) = 25 % in SE^2; the
    mean of 40 by 4 %, so 12 % is 3 sigma).  The shares themselves must scatter about p as the
    binomial says: their mean squared deviation over p (1 - p) / n within 0.45..1.7 (a chi-square
    with 40 degrees of freedom over 40 lies there with probability above 99.5 %)."""
    scene = scene_from_dict(plate())
    p = trace(scene, rays=200, mode="branching").efficiency("through")
    n = 2000
    binomial_var = p * (1 - p) / n
    assert 0.2 < p < 0.8
    reported, deviations = [], []
    for seed in range(1, 41):
        r = trace(scene, rays=n, mode="monte_carlo", seed=seed)
        reported.append(r.efficiency_error("through") ** 2)
        deviations.append((r.efficiency("through") - p) ** 2)
        # every ray is in one of the two detectors: their errors are equal (shares add to 1)
        assert r.efficiency_error("back") == pytest.approx(r.efficiency_error("through"), rel=1e-9)
    assert np.mean(reported) == pytest.approx(binomial_var, rel=0.12)
    assert 0.45 < np.mean(deviations) / binomial_var < 1.7


def test_ratio_error_by_hand():
    """Cochran sec. 6.4 by hand: y = (1, 2, 3), x = (2, 2, 2): R = 6/6 = 1, residuals y - R x =
    (-1, 0, 1); SE^2 = 3/2 * (1 + 0 + 1) / 6^2."""
    assert ratio_error(np.array([1.0, 2.0, 3.0]), np.array([2.0, 2.0, 2.0])) == pytest.approx(
        math.sqrt(1.5 * 2.0) / 6.0, rel=1e-12)
    assert math.isnan(ratio_error(np.array([1.0, 0.0]), np.array([1.0, 0.0])))   # one sub-batch: unknown


def test_sub_batches_are_interleaved_and_near_equal():
    """Every run of 320 consecutive rays puts 10 +- 2 rays in each sub-batch (so a sub-batch is an
    evenly spread part of an even fan, not one end of it)."""
    b = sub_batch(np.arange(32_000))
    for lo in (0, 5_000, 31_680):
        counts = np.bincount(b[lo:lo + 320], minlength=SUB_BATCHES)
        assert counts.min() >= 8 and counts.max() <= 12


def test_monitoring_detector_error_is_the_same_from_hits_and_from_histograms():
    """A monitoring detector's error comes from its hit records, or from its histograms in long
    traces: both must give the same figure."""
    scene = scene_from_dict(plate(absorbing_through=False))
    kept = trace(scene, rays=3000, mode="monte_carlo", seed=3, hits="keep")
    binned = trace(scene, rays=3000, mode="monte_carlo", seed=3, hits="histogram")
    assert kept.efficiency_error("through") == pytest.approx(binned.efficiency_error("through"), rel=1e-9)
    assert kept.efficiency_error("through") > 0


def test_even_fan_sampling_error_covers_the_change_to_many_rays():
    """Branching with an even fan is deterministic; its error is a sampling error.  Common practice
    for such an estimate: the figure at n rays should lie within about 2 of its errors of the
    figure at 20 n rays.  Light pipe sample as it is (8 mm bend), 1000 vs 20000 rays, every bucket
    above 1 %.  (It cannot see an error all sub-fans share, as at a 9 mm bend: the target-error
    tests in test_trace_set_and_target.py check what covers that.)"""
    from pathlib import Path
    from raytrace.scene_io import load_scene
    scene = load_scene(Path(__file__).resolve().parent.parent / "samples" / "light-pipe-90.json")
    coarse = trace(scene, rays=1000)
    fine = trace(scene, rays=20000)
    assert "sampling error" in coarse.error_meaning
    for b in coarse.ledger.buckets:
        if b.flux / coarse.source_flux > 0.01:
            assert abs(coarse.share(b.label) - fine.share(b.label)) <= 2 * coarse.share_error(b.label), b.label


def test_errors_do_not_depend_on_chunks_or_workers():
    """Sub-batches go by a ray's number over the whole trace, so splitting the trace into chunks
    or spreading it over processes leaves every error as it was (branching: the same rays)."""
    scene = scene_from_dict(plate())
    whole = trace(scene, rays=3000)
    parts = trace(scene, rays=3000, chunk_size=400, workers=2)
    for b in whole.ledger.buckets:
        assert parts.share_error(b.label) == pytest.approx(whole.share_error(b.label), rel=1e-9, abs=1e-15)
    assert parts.efficiency_error("through") == pytest.approx(whole.efficiency_error("through"), rel=1e-9)
