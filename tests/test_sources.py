"""Source sampling: angular distributions, positions, spectra, polarization, ray counts."""
from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np
import pytest

from raytrace.scene import Source, Spectrum
from raytrace.sources import allocate_rays, sample_source, sample_sources


def angles_deg(rays, base_deg=0.0):
    return np.degrees(np.arctan2(rays.dy, rays.dx)) - base_deg


def fraction_within(rays, t_deg, base_deg=0.0):
    a = np.abs(angles_deg(rays, base_deg))
    return rays.flux[a <= t_deg].sum() / rays.flux.sum()


@pytest.mark.parametrize("t_deg", [10.0, 30.0, 45.0, 60.0, 80.0])
def test_lambertian_random_fraction_within_t_is_sin_t(t_deg):
    """common practice: a 2D Lambertian emitter (intensity ~ cos t over +-90 deg) puts the
    fraction sin t of its flux within +-t.  Random sampling, seed 7, N = 20000; tolerance is
    4 binomial standard deviations, sqrt(p (1 - p) / N) (stratification makes the true error
    smaller, so this cannot pass by luck of a loose bound on a biased sampler)."""
    n = 20000
    src = Source("die", kind="emitter", width=1.0, direction_deg=30.0, distribution="lambertian",
                 sampling="random")
    rays = sample_sources([src], n, seed=7)
    p = math.sin(math.radians(t_deg))
    tol = 4 * math.sqrt(p * (1 - p) / n)
    assert fraction_within(rays, t_deg, 30.0) == pytest.approx(p, abs=tol)


def test_lambertian_even_fan_weights_give_sin_t():
    """common practice: as above, for the evenly spaced fan whose rays carry cos-weighted flux;
    the only error is the fan's angle step (0.09 deg here), so the tolerance is 1e-3."""
    src = Source("pt", kind="point", distribution="lambertian", half_angle_deg=90.0, sampling="even")
    rays = sample_sources([src], 2001)
    for t in (5.0, 20.0, 45.0, 70.0, 89.0):
        assert fraction_within(rays, t) == pytest.approx(math.sin(math.radians(t)), abs=1e-3)


@pytest.mark.parametrize("sampling", ["even", "random"])
def test_cos_power_fraction_matches_integral(sampling):
    """published: integral of cos^2 t dt = t/2 + sin(2t)/4 (standard table integral); over
    [-90, 90] deg it is pi/2, so the fraction within +-t is (2t + sin 2t) / pi.
    Random: seed 3, N = 20000, 4 binomial standard deviations; even: the fan step, 2e-3."""
    n = 20000
    src = Source("pt", kind="point", distribution="cos_power", cos_power=2.0, half_angle_deg=90.0,
                 sampling=sampling)
    rays = sample_sources([src], n, seed=3)
    for t_deg in (15.0, 40.0, 65.0):
        t = math.radians(t_deg)
        p = (2 * t + math.sin(2 * t)) / math.pi
        tol = 4 * math.sqrt(p * (1 - p) / n) if sampling == "random" else 2e-3
        assert fraction_within(rays, t_deg) == pytest.approx(p, abs=tol)


def test_uniform_point_source_limits_and_flux():
    src = Source("pt", kind="point", half_angle_deg=20.0, direction_deg=-90.0, flux=3.5)
    rays = sample_sources([src], 400)
    a = angles_deg(rays, -90.0)
    assert a.min() > -20.0 and a.max() < 20.0
    assert rays.flux.sum() == pytest.approx(3.5, rel=1e-12)
    assert np.allclose(rays.flux, 3.5 / 400, rtol=1e-12)     # uniform: equal flux per ray
    assert np.allclose(np.hypot(rays.dx, rays.dy), 1.0, atol=1e-15)


@pytest.mark.parametrize("sampling", ["even", "random"])
def test_beam_positions_across_width(sampling):
    src = Source("beam", kind="beam", position=(1.0, 2.0), direction_deg=90.0, width=4.0, sampling=sampling)
    rays = sample_sources([src], 1000, seed=5)
    assert np.allclose(rays.dx, 0.0, atol=1e-15) and np.allclose(rays.dy, 1.0)
    assert np.allclose(rays.y, 2.0)
    # across the direction: x spans the width about the centre, one ray per 1/1000 stratum
    offs = np.sort(-(rays.x - 1.0))
    strata = np.floor((offs + 2.0) / 4.0 * 1000).astype(int)
    assert np.array_equal(strata, np.arange(1000))
    if sampling == "even":
        assert np.allclose(np.diff(offs), 4.0 / 1000)


@pytest.mark.parametrize("n", [1, 2, 7, 97, 101, 1000])
def test_even_emitter_exact_count_and_equal_flux_per_point(n):
    src = Source("die", kind="emitter", width=0.6, distribution="lambertian", flux=2.0)
    rays = sample_sources([src], n)
    assert len(rays) == n
    assert rays.flux.sum() == pytest.approx(2.0, rel=1e-12)
    pos = np.round(rays.y, 12)
    points = np.unique(pos)
    per_point = np.array([rays.flux[pos == p].sum() for p in points])
    assert np.allclose(per_point, 2.0 / len(points), rtol=1e-12)
    assert rays.y.min() > -0.3 and rays.y.max() < 0.3


def test_even_emitter_angular_distribution_is_lambertian():
    """common practice: the fraction sin t within +-t, for the even emitter grid (fans of ~45
    rays at each point, so the angle step is 4 deg: tolerance 2e-2)."""
    src = Source("die", kind="emitter", width=0.6, distribution="lambertian")
    rays = sample_sources([src], 2000)
    for t in (20.0, 45.0, 70.0):
        assert fraction_within(rays, t) == pytest.approx(math.sin(math.radians(t)), abs=2e-2)


def test_weighted_lines_even_are_exact_and_interleaved():
    spec = Spectrum((450.0, 550.0, 650.0), (1.0, 2.0, 1.0))
    src = Source("b", kind="beam", width=10.0, spectrum=spec)
    rays = sample_sources([src], 400)
    counts = [int((rays.wavelength == w).sum()) for w in (450.0, 550.0, 650.0)]
    assert counts == [100, 200, 100]
    # not in blocks: each side of the beam holds every line in about the same proportion
    left = rays.wavelength[:200]
    assert [int((left == w).sum()) for w in (450.0, 550.0, 650.0)] == pytest.approx([50, 100, 50], abs=3)


def test_weighted_lines_random_proportions():
    """Stratified then shuffled: proportions within one ray of exact; seed 11."""
    spec = Spectrum((500.0, 600.0), (3.0, 1.0))
    src = Source("b", kind="beam", spectrum=spec, sampling="random")
    rays = sample_sources([src], 1001, seed=11)
    assert int((rays.wavelength == 500.0).sum()) == pytest.approx(0.75 * 1001, abs=1)


@pytest.mark.parametrize("sampling", ["even", "random"])
def test_band_centre_and_fwhm(sampling):
    """published: a Gaussian's FWHM is 2 sqrt(2 ln 2) sigma.  Random: seed 2, N = 40000, mean
    within 4 sigma/sqrt(N) and the sample standard deviation within 2 %; even: 64 quantiles of
    the Gaussian, whose spread is within 3 % of sigma."""
    src = Source("led", kind="point", spectrum=Spectrum.band(525.0, 30.0), sampling=sampling)
    rays = sample_sources([src], 40000, seed=2)
    sigma = 30.0 / (2 * math.sqrt(2 * math.log(2)))
    assert rays.wavelength.mean() == pytest.approx(525.0, abs=4 * sigma / math.sqrt(40000))
    assert rays.wavelength.std() == pytest.approx(sigma, rel=0.02 if sampling == "random" else 0.03)
    if sampling == "even":
        # the distinct wavelengths are the Gaussian quantiles at the centres of 64 strata
        q = [NormalDist(525.0, sigma).inv_cdf((i + 0.5) / 64) for i in range(64)]
        assert np.allclose(np.unique(rays.wavelength), q, rtol=1e-12)


def test_polarization_split():
    for pol, s_share in (("s", 1.0), ("p", 0.0), ("unpolarized", 0.5)):
        rays = sample_sources([Source("b", polarization=pol, flux=2.0)], 10)
        assert rays.flux_s.sum() == pytest.approx(2.0 * s_share)
        assert rays.flux_p.sum() == pytest.approx(2.0 * (1 - s_share))


def test_allocate_in_proportion_to_flux_and_at_least_one():
    a = Source("a", flux=3.0)
    b = Source("b", flux=1.0)
    c = Source("c", flux=0.0)
    assert allocate_rays([a, b, c], 101) == [75, 25, 1]
    assert sum(allocate_rays([a, b], 7)) == 7


def test_random_sampling_is_reproducible_and_seed_dependent():
    src = Source("die", kind="emitter", distribution="lambertian", sampling="random")
    r1 = sample_sources([src], 100, seed=4)
    r2 = sample_sources([src], 100, seed=4)
    r3 = sample_sources([src], 100, seed=5)
    assert np.array_equal(r1.dx, r2.dx) and np.array_equal(r1.y, r2.y)
    assert not np.array_equal(r1.dx, r3.dx)


def test_sampling_override_and_source_index():
    a = Source("a", kind="point", sampling="even")
    b = Source("b", kind="beam", sampling="even")
    rays = sample_sources([a, b], 20, sampling="random", seed=1)
    assert list(rays.source[:10]) == [0] * 10 and list(rays.source[10:]) == [1] * 10
    even = sample_source(a, 10, np.random.default_rng(1), "even")
    assert not np.array_equal(rays.dx[:10], even.dx)
