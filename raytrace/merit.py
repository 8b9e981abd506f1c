"""Figures of merit read from one trace, each with its standard error, for optimizing and
tolerancing.

A figure is named as `KIND: DETECTOR` (the sweep table's column style) or by the detector's
name alone, which means its efficiency:

    efficiency: viewer side     flux reaching the detector / source flux
    centroid_mm: screen         flux-weighted mean position along the detector (mm from its start)
    mean_angle_deg: return      flux-weighted mean angle of arrival (degrees from its normal)

Standard errors come from the spread of the source rays' own contributions: every source ray
(with all its branches) is one sample, and a figure is a ratio of two sums over source rays, so
its error is the ratio estimator's, sqrt(N/(N-1) sum (a_i - F b_i)^2) / sum b_i.  For random
sampling and Monte Carlo traces this is the statistical error; for even sampling, whose rays are
spread evenly rather than drawn, it overstates the error and reads as an upper estimate.

When detector figures carry their own standard errors in the trace result, `measure` is the one
place to switch to them.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import Problems

KINDS = ("efficiency", "centroid_mm", "mean_angle_deg")
UNITS = {"efficiency": "", "centroid_mm": "mm", "mean_angle_deg": "deg"}


@dataclass(frozen=True)
class Figure:
    kind: str
    detector: str

    @property
    def label(self) -> str:
        return f"{self.kind}: {self.detector}"

    def format(self, value: float, se: float | None = None) -> str:
        """A value as a user reads it: efficiencies in %, others in their unit."""
        if not math.isfinite(value):
            return "not traced"
        if self.kind == "efficiency":
            text = f"{100 * value:.3f} %"
            return text if se is None or not math.isfinite(se) else f"{100 * value:.3f} +- {100 * se:.3f} %"
        unit = UNITS[self.kind]
        text = f"{value:.4f} {unit}"
        return text if se is None or not math.isfinite(se) else f"{value:.4f} +- {se:.4f} {unit}"


def parse_figure(text: str, detectors: list[str], where: str = "--figure", file: str = "") -> Figure:
    """'KIND: DETECTOR' or 'DETECTOR' -> Figure; SweepError (a SceneError) naming the choices otherwise."""
    text = text.strip()
    kind, sep, det = text.partition(":")
    if sep and kind.strip() in KINDS:
        kind, det = kind.strip(), det.strip()
    else:
        kind, det = "efficiency", text
    if det not in detectors:
        problems = Problems(file=file)
        problems.add(where, text, "a detector of the scene (" + ", ".join(repr(d) for d in detectors)
                     + "), optionally after one of " + ", ".join(f"'{k}:'" for k in KINDS)
                     if detectors else "a scene with a detector to measure")
        from .sweep import SweepError      # a usage error (exit 2), like a bad --vary
        raise SweepError(problems.items)
    return Figure(kind, det)


def measure(result, figure: Figure, start_flux: np.ndarray) -> tuple[float, float]:
    """(value, standard error) of `figure` in a trace whose source ray i carried start_flux[i]."""
    hits = result.detector(figure.detector)
    n = len(start_flux)
    f = hits.flux
    if figure.kind == "efficiency":
        a = np.bincount(hits.source_ray, weights=f, minlength=n)
        return _ratio(a, np.asarray(start_flux, float))
    values = hits.position if figure.kind == "centroid_mm" else hits.angle_deg
    a = np.bincount(hits.source_ray, weights=f * values, minlength=n)
    b = np.bincount(hits.source_ray, weights=f, minlength=n)
    return _ratio(a, b)


def _ratio(a: np.ndarray, b: np.ndarray) -> tuple[float, float]:
    """sum a / sum b and its ratio-estimator standard error (nan when nothing arrived)."""
    total = float(b.sum())
    if total <= 0:
        return float("nan"), float("nan")
    value = float(a.sum()) / total
    n = len(b)
    if n < 2:
        return value, float("nan")
    resid = a - value * b
    return value, float(math.sqrt(n / (n - 1) * float(np.dot(resid, resid))) / total)
