"""Turn source descriptions into starting rays (structure of arrays).

Two sampling styles:
- even:   a regular fan (for display and for deterministic figures); rays are spaced evenly in
          position and angle and each ray carries the flux its share of the distribution holds;
- random: seeded and stratified (one random point in each of n equal-probability strata), every
          ray carrying the same flux; this is what statistics want.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .scene import (BEAM, COS_POWER, EMITTER, EVEN, LAMBERTIAN, P_POL, POINT, S_POL, Source,
                    Spectrum)


@dataclass
class StartRays:
    x: np.ndarray
    y: np.ndarray
    dx: np.ndarray
    dy: np.ndarray
    wavelength: np.ndarray
    flux_s: np.ndarray
    flux_p: np.ndarray
    source: np.ndarray     # index of the source each ray came from

    def __len__(self) -> int:
        return len(self.x)

    @property
    def flux(self) -> np.ndarray:
        return self.flux_s + self.flux_p

    @classmethod
    def concat(cls, parts: list["StartRays"]) -> "StartRays":
        if not parts:
            z = np.zeros(0)
            return cls(z, z, z, z, z, z, z, np.zeros(0, dtype=np.int64))
        return cls(*(np.concatenate([getattr(p, f) for p in parts]) for f in
                     ("x", "y", "dx", "dy", "wavelength", "flux_s", "flux_p", "source")))

    def take(self, idx) -> "StartRays":
        return StartRays(*(getattr(self, f)[idx] for f in
                           ("x", "y", "dx", "dy", "wavelength", "flux_s", "flux_p", "source")))


def allocate_rays(sources: list[Source], n_rays: int) -> list[int]:
    """Split n_rays over the sources in proportion to their flux, at least one each."""
    fluxes = np.array([max(s.flux, 0.0) for s in sources], dtype=float)
    if len(sources) == 0 or n_rays <= 0:
        return [0] * len(sources)
    if fluxes.sum() <= 0:
        fluxes = np.ones(len(sources))
    share = fluxes / fluxes.sum() * n_rays
    counts = np.maximum(np.floor(share).astype(int), 1)
    # hand the remainder to the largest fractional parts, deterministically
    while counts.sum() < n_rays:
        counts[int(np.argmax(share - counts))] += 1
    return [int(c) for c in counts]


# Wavelengths a scene may hold (nm): the scene file's own rule for any wavelength.
WAVELENGTH_SPAN_NM = (100.0, 20000.0)
# A band whose Gaussian has less than this share outside the span is sampled untruncated.
TRUNCATED_SHARE = 2e-9


def sample_sources(sources: list[Source], n_rays: int, seed: int = 1,
                   sampling: str | None = None, span_nm: tuple[float, float] = WAVELENGTH_SPAN_NM) -> StartRays:
    """Starting rays for all sources.  `sampling` overrides each source's own style; band
    spectra are truncated to `span_nm` (see band_span_nm)."""
    rng = np.random.default_rng(seed)
    out = []
    for index, (src, count) in enumerate(zip(sources, allocate_rays(sources, n_rays))):
        if count == 0:
            continue
        rays = sample_source(src, count, rng, sampling or src.sampling, span_nm)
        rays.source[:] = index
        out.append(rays)
    return StartRays.concat(out)


def sample_source(src: Source, n: int, rng: np.random.Generator, sampling: str,
                  span_nm: tuple[float, float] | None = None) -> StartRays:
    even = sampling == EVEN
    base = math.radians(src.direction_deg)
    if src.kind == BEAM:
        offsets = _positions(src.width, n, rng, even)
        angles = np.zeros(n)
        weights = np.full(n, 1.0 / n)
    elif src.kind == POINT:
        offsets = np.zeros(n)
        angles, weights = _angles(src, n, rng, even)
    elif src.kind == EMITTER:
        if even:
            offsets, angles, weights = _even_emitter(src, n, rng)
        else:
            offsets = _positions(src.width, n, rng, False)
            angles, weights = _angles(src, n, rng, False)
            rng.shuffle(offsets)   # decorrelate the two stratifications
    else:
        raise ValueError(f"source {src.name!r}: unknown kind {src.kind!r}")

    theta = base + angles
    # positions spread along the line across the main direction
    px, py = -math.sin(base), math.cos(base)
    x = src.position[0] + offsets * px
    y = src.position[1] + offsets * py
    flux = src.flux * weights / weights.sum()
    wl = sample_spectrum(src.spectrum, n, rng, even, span_nm or WAVELENGTH_SPAN_NM)
    if src.polarization == S_POL:
        fs, fp = flux, np.zeros(n)
    elif src.polarization == P_POL:
        fs, fp = np.zeros(n), flux
    else:
        fs, fp = flux / 2, flux / 2
    return StartRays(x, y, np.cos(theta), np.sin(theta), wl, fs, fp, np.zeros(n, dtype=np.int64))


def _even_emitter(src: Source, n: int, rng) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A fan from each of ~sqrt(n) evenly spaced points across the die, exactly n rays.

    Every point carries the same flux; within a point's fan each ray carries the share of the
    angular distribution it stands for.  When n is not a product, the first points get one
    ray more than the others (their rays then carry a little less flux each)."""
    n_pos = max(1, min(n, int(round(math.sqrt(n)))))
    base, extra = divmod(n, n_pos)
    pos = _positions(src.width, n_pos, rng, True)
    counts = np.full(n_pos, base)
    counts[:extra] += 1
    offsets = np.repeat(pos, counts)
    fans = {}
    for k in set(counts.tolist()):    # at most two distinct fan sizes
        ang, w = _angles(src, k, rng, True)
        fans[k] = (ang, w / w.sum())
    angles = np.concatenate([fans[k][0] for k in counts.tolist()])
    weights = np.concatenate([fans[k][1] for k in counts.tolist()]) / n_pos
    return offsets, angles, weights


def _strata(n: int, rng: np.random.Generator, even: bool) -> np.ndarray:
    """n points in (0, 1): centres of n equal strata, or one random point in each."""
    k = np.arange(n)
    return (k + (0.5 if even else rng.random(n))) / n


def _positions(width: float, n: int, rng, even: bool) -> np.ndarray:
    return (_strata(n, rng, even) - 0.5) * width


def _intensity(src: Source, theta: np.ndarray) -> np.ndarray:
    c = np.clip(np.cos(theta), 0.0, None)
    if src.distribution == LAMBERTIAN:
        return c
    if src.distribution == COS_POWER:
        return c ** src.cos_power
    return np.ones_like(theta)


def _angles(src: Source, n: int, rng, even: bool) -> tuple[np.ndarray, np.ndarray]:
    """Angles about the source direction and the flux weight each carries."""
    h = math.radians(min(max(src.half_angle_deg, 0.0), 90.0 if src.distribution != "uniform" else 180.0))
    if even:
        # an even fan: equal angle steps, each ray weighted by the intensity it stands for
        theta = (_strata(n, rng, True) - 0.5) * 2 * h
        w = _intensity(src, theta)
        if w.sum() <= 0:
            w = np.ones(n)
        return theta, w
    u = _strata(n, rng, False)
    rng.shuffle(u)
    if src.distribution == LAMBERTIAN:
        # inverse CDF of cos t on [-h, h]: sin t is uniform
        s = math.sin(h)
        return np.arcsin((2 * u - 1) * s), np.ones(n)
    if src.distribution == COS_POWER:
        grid = np.linspace(-h, h, 4097)
        pdf = np.clip(np.cos(grid), 0, None) ** src.cos_power
        cdf = np.concatenate([[0.0], np.cumsum(0.5 * (pdf[1:] + pdf[:-1]) * np.diff(grid))])
        cdf /= cdf[-1]
        return np.interp(u, cdf, grid), np.ones(n)
    return (2 * u - 1) * h, np.ones(n)


def sample_spectrum(spec: Spectrum, n: int, rng, even: bool,
                    span_nm: tuple[float, float] | None = None) -> np.ndarray:
    """Wavelengths for n rays.

    even: the wavelengths sit at the centres of n equal-weight strata of the spectrum (so the
    proportions are exact), then are dealt out in a golden-ratio order rather than in blocks, so
    that wavelength is not tied to a ray's place in the fan (a two-line beam would otherwise be
    red on one side and blue on the other).
    random: drawn from the spectrum (lines: stratified, then shuffled; band: Gaussian draws).
    A band is a Gaussian truncated to `span_nm` (it never reaches 0 nm or below).
    """
    if spec.is_band:
        return _sample_band(spec, n, rng, even, span_nm or WAVELENGTH_SPAN_NM)
    wls = np.asarray(spec.wavelengths_nm, dtype=float)
    if len(wls) == 1:
        return np.full(n, wls[0])
    w = np.asarray(spec.weights, dtype=float)
    edges = np.cumsum(w / w.sum())
    edges[-1] = 1.0
    if even:
        return _golden_deal(wls[np.searchsorted(edges, _strata(n, rng, True))])
    return rng.permutation(wls[np.searchsorted(edges, _strata(n, rng, False))])


def band_span_nm(materials) -> tuple[float, float]:
    """Where band spectra are sampled: the wavelengths a scene file may hold, narrowed to where
    the data of every catalog material in use lie (when those ranges overlap)."""
    from .catalog import valid_range_nm
    lo, hi = WAVELENGTH_SPAN_NM
    for m in materials:
        r = valid_range_nm(m)
        if r is not None:
            lo, hi = max(lo, r[0]), min(hi, r[1])
    return (lo, hi) if lo < hi else WAVELENGTH_SPAN_NM


def band_share_outside(spec: Spectrum, span_nm: tuple[float, float]) -> float:
    """The share of a band's Gaussian that lies outside `span_nm` (and is not traced)."""
    from statistics import NormalDist
    dist = NormalDist(spec.band_center_nm, _sigma(spec))
    return 1.0 - (dist.cdf(span_nm[1]) - dist.cdf(span_nm[0]))


def band_warnings(sources, span_nm: tuple[float, float], problems) -> list[str]:
    """Warn for bands cut by the span; a Problem for a band with nothing inside it."""
    out = []
    for k, src in enumerate(sources):
        sp = src.spectrum
        if not sp.is_band:
            continue
        cut = band_share_outside(sp, span_nm)
        where = f"{span_nm[0]:g}-{span_nm[1]:g} nm"
        if cut > 1.0 - 1e-9:
            problems.add(f"$.sources[{k}].spectrum.band",
                         f"<centre {sp.band_center_nm:g} nm, FWHM {sp.band_fwhm_nm:g} nm: nothing within {where}>",
                         f"a band that overlaps {where}, the range of the materials' data")
        elif cut > TRUNCATED_SHARE:
            out.append(f"source {src.name!r}: {100 * cut:.3g} % of its band (centre {sp.band_center_nm:g} nm, "
                       f"FWHM {sp.band_fwhm_nm:g} nm) lies outside {where}, the range of the materials' data; "
                       "the band is truncated there and its flux carried by the rest")
    return out


def _sigma(spec: Spectrum) -> float:
    return spec.band_fwhm_nm / (2 * math.sqrt(2 * math.log(2)))


def _sample_band(spec: Spectrum, n: int, rng, even: bool, span_nm: tuple[float, float]) -> np.ndarray:
    from statistics import NormalDist
    sigma = _sigma(spec)
    dist = NormalDist(spec.band_center_nm, sigma)
    lo, hi = span_nm
    whole = band_share_outside(spec, span_nm) <= TRUNCATED_SHARE
    if whole and not even:
        # the span holds the whole band for any practical purpose: plain Gaussian draws
        return np.clip(rng.normal(spec.band_center_nm, sigma, n), lo, hi)
    c_lo, c_hi = (0.0, 1.0) if whole else (dist.cdf(lo), dist.cdf(hi))

    def quantiles(u: np.ndarray) -> np.ndarray:
        """Wavelengths at cumulative shares u of the band's part inside the span."""
        p = np.clip(c_lo + u * (c_hi - c_lo), 1e-300, 1 - 1e-16)
        return np.clip(np.array([dist.inv_cdf(float(x)) for x in p]), lo, hi)
    if not even:
        grid = np.linspace(0.0, 1.0, 4097)     # inverse CDF tabulated once, then interpolated
        return np.interp(rng.random(n), grid, quantiles(grid))
    # a fixed set of at most 64 quantiles: few distinct wavelengths keep the per-wavelength
    # index table small
    k = min(n, 64)
    q = quantiles((np.arange(k) + 0.5) / k)
    return _golden_deal(q[np.minimum((_strata(n, rng, True) * k).astype(int), k - 1)])


_GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0


def _golden_deal(sorted_values: np.ndarray) -> np.ndarray:
    """Reorder values so that ray k gets the value ranked by frac(k * golden ratio): each
    stretch of consecutive rays samples the whole spectrum."""
    n = len(sorted_values)
    rank = np.argsort(np.argsort((np.arange(n) * _GOLDEN) % 1.0, kind="stable"), kind="stable")
    return sorted_values[rank]
