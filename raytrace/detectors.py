"""Per-detector figures from a trace: total flux and efficiency, irradiance and angular profiles,
uniformity over the central part, and the spread of arrival times.

Conventions (2D, so "irradiance" is flux per mm of detector length):
- position is measured in mm from the detector's start point toward its end point;
- the angle of arrival is in degrees from the detector normal, signed (positive when the ray
  runs toward the detector's end point), in [-90, 90];
- the irradiance profile uses the detector's `bins` equal bins over its length; the angular
  profile uses `angle_bins` equal bins over [-90, 90] degrees (flux per degree);
- uniformity is computed over the central `central_fraction` of the length, binned with
  round(bins * central_fraction) bins of its own so the figure covers exactly that part;
- arrival time = optical path (sum of n * L, mm) / c.  All rays start at time zero;
- per-wavelength figures (flux, share, centroid, mean angle of each wavelength) are given when
  the hits are kept and carry 2 to MAX_WAVELENGTHS distinct wavelengths, i.e. for line spectra
  (a dispersing prism's colours); not for bands, whose sampled wavelengths are all different.
"""
from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field

import numpy as np

from .results import DetectorHits, TraceResult
from .uncertainty import format_error

C_MM_PER_PS = 0.299792458   # speed of light in vacuum, mm per picosecond (exact by definition)
MAX_WAVELENGTHS = 12        # more distinct wavelengths than this: a band, or too many to list


@dataclass
class WavelengthFigures:
    """The part of a detector's flux carried by one wavelength."""

    wavelength_nm: float
    hits: int
    flux: float
    share: float              # of the detector's flux
    centroid_mm: float        # flux-weighted mean position
    mean_angle_deg: float     # flux-weighted mean angle of arrival

    def to_dict(self) -> dict:
        return {"wavelength_nm": self.wavelength_nm, "hits": self.hits, "flux": self.flux,
                "share": self.share, "centroid_mm": self.centroid_mm, "mean_angle_deg": self.mean_angle_deg}

    def line(self) -> str:
        return (f"{self.wavelength_nm:.2f} nm: {self.flux:.6g} ({100 * self.share:.2f} % of detector), "
                f"centroid {self.centroid_mm:.3f} mm, mean angle {self.mean_angle_deg:+.3f} deg")


@dataclass
class Profile:
    """A binned distribution: `flux` per bin and `density` = flux / bin width."""

    edges: np.ndarray        # bin edges, len(flux) + 1
    flux: np.ndarray
    axis_unit: str           # "mm" or "deg"

    @property
    def centers(self) -> np.ndarray:
        return 0.5 * (self.edges[1:] + self.edges[:-1])

    @property
    def density(self) -> np.ndarray:
        return self.flux / np.diff(self.edges)

    @property
    def density_unit(self) -> str:
        return f"flux/{self.axis_unit}"


@dataclass
class Uniformity:
    min_over_mean: float      # nan when nothing reached the central part
    max_over_mean: float
    fraction: float           # the central fraction used
    bins: int                 # bins across the central part


@dataclass
class ArrivalTimes:
    """Arrival times in ps of the rays that reached the detector (nan when none did)."""

    first_ps: float
    last_ps: float
    mean_ps: float            # flux-weighted
    rms_ps: float             # flux-weighted standard deviation about the mean

    @property
    def spread_ps(self) -> float:
        return self.last_ps - self.first_ps


@dataclass
class DetectorReport:
    name: str
    length_mm: float
    absorbing: bool
    hits: int                 # ray arrivals counted (rays carrying no flux are skipped)
    total_flux: float
    flux_s: float
    flux_p: float
    efficiency: float         # total flux / source flux
    centroid_mm: float        # flux-weighted mean position (nan when empty)
    mean_angle_deg: float     # flux-weighted mean angle of arrival (nan when empty)
    irradiance: Profile
    angular: Profile
    uniformity: Uniformity
    times: ArrivalTimes
    per_wavelength: list[WavelengthFigures] = field(default_factory=list)   # empty: not applicable
    efficiency_error: float = float("nan")   # standard error of `efficiency` (see raytrace.uncertainty)
    acceptance: tuple[float, float] | None = None   # (direction of travel, half angle), degrees
    accepted: float = float("nan")           # share of source flux arriving within the acceptance
    accepted_error: float = float("nan")

    @property
    def centroid_spread_mm(self) -> float:
        """Distance between the outermost per-wavelength centroids (nan without them)."""
        if len(self.per_wavelength) < 2:
            return float("nan")
        c = [w.centroid_mm for w in self.per_wavelength]
        return max(c) - min(c)

    def to_dict(self) -> dict:
        """The figures (not the profiles) as plain JSON-ready values; nan becomes None."""
        def num(x):
            return None if x != x else x
        u, t = self.uniformity, self.times
        return {"name": self.name, "length_mm": self.length_mm, "absorbing": self.absorbing, "hits": self.hits,
                "total_flux": self.total_flux, "flux_s": self.flux_s, "flux_p": self.flux_p,
                "efficiency": self.efficiency, "efficiency_error": num(self.efficiency_error),
                "centroid_mm": num(self.centroid_mm),
                "mean_angle_deg": num(self.mean_angle_deg),
                "uniformity": {"central_fraction": u.fraction, "bins": u.bins,
                               "min_over_mean": num(u.min_over_mean), "max_over_mean": num(u.max_over_mean)},
                "arrival_ps": {"first": num(t.first_ps), "last": num(t.last_ps), "spread": num(t.spread_ps),
                               "mean": num(t.mean_ps), "rms": num(t.rms_ps)},
                "per_wavelength": [w.to_dict() for w in self.per_wavelength],
                **({"acceptance": {"direction_deg": self.acceptance[0], "half_angle_deg": self.acceptance[1]},
                    "accepted": self.accepted, "accepted_error": num(self.accepted_error)}
                   if self.acceptance is not None else {})}

    def summary_line(self) -> str:
        u, t = self.uniformity, self.times
        parts = [f"{self.name}: {self.total_flux:.6g} ({format_error(self.efficiency, self.efficiency_error).strip()})"]
        if self.acceptance is not None:
            parts.append(f"within +-{self.acceptance[1]:g} deg of {self.acceptance[0]:g} deg: "
                         f"{format_error(self.accepted, self.accepted_error).strip()} of source")
        if self.hits:
            parts.append(f"centroid {self.centroid_mm:.3f} mm, mean angle {self.mean_angle_deg:+.3f} deg")
            parts.append(f"uniformity (central {100 * u.fraction:.0f} %) min/mean {u.min_over_mean:.3f} "
                         f"max/mean {u.max_over_mean:.3f}")
            parts.append(f"arrival {t.first_ps:.4g}..{t.last_ps:.4g} ps (spread {t.spread_ps:.4g} ps)")
        return "; ".join(parts)


def detector_report(result: TraceResult, name: str) -> DetectorReport:
    """All figures for the detector called `name`.

    Long traces may keep detector hits only as histograms (position bin x angle bin); the
    figures then come from the bins: centroid and mean angle from bin centres, uniformity from
    the bins whose centres lie in the central part, and no arrival times (nan)."""
    det = next(d for d in result.compiled.detectors if d.name == name)
    hist = (getattr(result.raw, "histograms", None) or {}).get(name)
    if hist is not None:
        return _report_from_histogram(result, det, hist)
    hits = result.detector(name)
    f = hits.flux
    live = f > 0
    total = float(f.sum())
    irr = _profile(hits.position, f, 0.0, hits.length, det.bins, "mm")
    ang = _profile(hits.angle_deg, f, -90.0, 90.0, det.angle_bins, "deg")
    return DetectorReport(
        name=name, length_mm=hits.length, absorbing=det.absorbing, hits=int(live.sum()),
        total_flux=total, flux_s=float(hits.flux_s.sum()), flux_p=float(hits.flux_p.sum()),
        efficiency=total / result.source_flux if result.source_flux else 0.0,
        centroid_mm=_weighted_mean(hits.position, f), mean_angle_deg=_weighted_mean(hits.angle_deg, f),
        irradiance=irr, angular=ang, uniformity=uniformity(hits, det.bins, det.central_fraction),
        times=arrival_times(hits),
        per_wavelength=[] if result.settings.get("band_spectrum") else per_wavelength(hits),
        **_error_fields(result, name))


def _report_from_histogram(result: TraceResult, det, hist: dict) -> DetectorReport:
    pe, ae = np.asarray(hist["position_edges"], float), np.asarray(hist["angle_edges"], float)
    fs, fp = np.asarray(hist["flux_s"], float), np.asarray(hist["flux_p"], float)
    f = fs + fp
    total = float(f.sum())
    irr = Profile(pe, f.sum(axis=1), "mm")
    ang = Profile(ae, f.sum(axis=0), "deg")
    length = float(pe[-1])
    c = irr.centers
    central = (c >= 0.5 * (1 - det.central_fraction) * length) & (c <= 0.5 * (1 + det.central_fraction) * length)
    counts = irr.flux[central]
    mean = counts.mean() if len(counts) else 0.0
    uni = (Uniformity(float(counts.min() / mean), float(counts.max() / mean), det.central_fraction, len(counts))
           if mean > 0 else Uniformity(float("nan"), float("nan"), det.central_fraction, len(counts)))
    nan = float("nan")
    return DetectorReport(
        name=det.name, length_mm=length, absorbing=det.absorbing, hits=int(hist.get("hits", 0)),
        total_flux=total, flux_s=float(fs.sum()), flux_p=float(fp.sum()),
        efficiency=total / result.source_flux if result.source_flux else 0.0,
        centroid_mm=_weighted_mean(c, irr.flux), mean_angle_deg=_weighted_mean(ang.centers, ang.flux),
        irradiance=irr, angular=ang, uniformity=uni, times=ArrivalTimes(nan, nan, nan, nan),
        **_error_fields(result, det.name))


def _error_fields(result: TraceResult, name: str) -> dict:
    """The efficiency's error and the acceptance figures of one detector."""
    index = next(i for i, d in enumerate(result.compiled.detectors) if d.name == name)
    acc = result.compiled.acceptance[index] if result.compiled.acceptance else None
    return {"efficiency_error": result.efficiency_error(name), "acceptance": acc,
            "accepted": result.accepted(name), "accepted_error": result.accepted_error(name)}


def detector_reports(result: TraceResult) -> list[DetectorReport]:
    return [detector_report(result, d.name) for d in result.compiled.detectors]


def _profile(values: np.ndarray, flux: np.ndarray, lo: float, hi: float, bins: int, unit: str) -> Profile:
    edges = np.linspace(lo, hi, int(bins) + 1)
    # values exactly at the upper edge belong to the last bin (np.histogram does the same)
    counts, _ = np.histogram(np.clip(values, lo, hi), bins=edges, weights=flux)
    return Profile(edges, counts.astype(float), unit)


def per_wavelength(hits: DetectorHits, max_wavelengths: int = MAX_WAVELENGTHS) -> list[WavelengthFigures]:
    """Figures per distinct wavelength, shortest first; [] with fewer than 2 or more than
    `max_wavelengths` distinct wavelengths among the hits that carry flux."""
    f = hits.flux
    live = f > 0
    wl = hits.wavelength_nm[live]
    values, which = np.unique(wl, return_inverse=True)
    if not 2 <= len(values) <= max_wavelengths:
        return []
    w = f[live]
    flux = np.bincount(which, weights=w, minlength=len(values))
    pos = np.bincount(which, weights=w * hits.position[live], minlength=len(values))
    ang = np.bincount(which, weights=w * hits.angle_deg[live], minlength=len(values))
    count = np.bincount(which, minlength=len(values))
    total = float(w.sum())
    return [WavelengthFigures(float(values[k]), int(count[k]), float(flux[k]), float(flux[k] / total),
                              float(pos[k] / flux[k]), float(ang[k] / flux[k])) for k in range(len(values))]


def uniformity(hits: DetectorHits, bins: int, fraction: float) -> Uniformity:
    """min/mean and max/mean of the irradiance over the central `fraction` of the detector."""
    n = max(1, int(round(bins * fraction)))
    lo = 0.5 * (1.0 - fraction) * hits.length
    hi = lo + fraction * hits.length
    inside = (hits.position >= lo) & (hits.position <= hi)
    counts, _ = np.histogram(hits.position[inside], bins=np.linspace(lo, hi, n + 1),
                             weights=hits.flux[inside])
    mean = counts.mean()
    if mean <= 0:
        return Uniformity(float("nan"), float("nan"), fraction, n)
    return Uniformity(float(counts.min() / mean), float(counts.max() / mean), fraction, n)


def arrival_times(hits: DetectorHits) -> ArrivalTimes:
    f = hits.flux
    live = f > 0
    if not live.any():
        nan = float("nan")
        return ArrivalTimes(nan, nan, nan, nan)
    t = hits.optical_path[live] / C_MM_PER_PS
    w = f[live]
    mean = float(np.average(t, weights=w))
    rms = float(np.sqrt(np.average((t - mean) ** 2, weights=w)))
    return ArrivalTimes(float(t.min()), float(t.max()), mean, rms)


def _weighted_mean(values: np.ndarray, flux: np.ndarray) -> float:
    total = flux.sum()
    return float((values * flux).sum() / total) if total > 0 else float("nan")


# ----------------------------------------------------------------------------- CSV export

PROFILE_HEADER = ("detector", "profile", "bin", "low", "high", "center", "axis_unit", "flux",
                  "density", "density_unit")


def profiles_rows(reports: list[DetectorReport], block: int = 50_000):
    """Long-format rows: one per bin of each detector's irradiance and angular profile.
    Yielded a block of bins at a time, so a million-bin detector never sits in memory as
    Python lists."""
    for r in reports:
        for kind, prof in (("irradiance", r.irradiance), ("angular", r.angular)):
            lows, highs, centers, density = prof.edges[:-1], prof.edges[1:], prof.centers, prof.density
            for lo in range(0, len(prof.flux), block):
                sl = slice(lo, lo + block)
                for i, (a, b, c, fl, de) in enumerate(zip(lows[sl].tolist(), highs[sl].tolist(),
                                                          centers[sl].tolist(), prof.flux[sl].tolist(),
                                                          density[sl].tolist()), start=lo):
                    yield [r.name, kind, i, a, b, c, prof.axis_unit, fl, de, prof.density_unit]


def write_profiles(reports: list[DetectorReport], fh) -> None:
    """The profiles CSV written into the open text file `fh` (streamed)."""
    w = csv.writer(fh, lineterminator="\n")
    w.writerow(PROFILE_HEADER)
    w.writerows(profiles_rows(reports))


def profiles_csv(reports: list[DetectorReport]) -> str:
    buf = io.StringIO()
    write_profiles(reports, buf)
    return buf.getvalue()
