"""Figures of merit read from one trace, each with its standard error, for optimizing and
tolerancing.

A figure is named as `KIND: DETECTOR` (the sweep table's column style) or by the detector's
name alone, which means its efficiency:

    efficiency: viewer side     flux reaching the detector / source flux
    centroid_mm: screen         flux-weighted mean position along the detector (mm from its start)
    mean_angle_deg: return      flux-weighted mean angle of arrival (degrees from its normal)

Standard errors are the trace's own, from its 32 sub-batches of source rays
(`raytrace.uncertainty`), so a figure shows the same +- here as in `raytrace trace`, the JSON and
a sweep.  An efficiency takes the trace's `efficiency_error`; a centroid or mean angle is a ratio
of two flux sums, and takes the same ratio-estimate error over the same sub-batches.  With even
sampling this is a sampling error of the fan (see `raytrace.uncertainty`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import Problems
from .uncertainty import batch_sums, ratio_error

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


def measure(result, figure: Figure) -> tuple[float, float]:
    """(value, standard error) of `figure` in a trace: the figures and errors `raytrace trace`
    reports for the same scene."""
    if figure.kind == "efficiency":
        return result.efficiency(figure.detector), result.efficiency_error(figure.detector)
    hits = result.detector(figure.detector)
    f = hits.flux
    total = f.sum()
    if not total > 0:
        return float("nan"), float("nan")
    values = hits.position if figure.kind == "centroid_mm" else hits.angle_deg
    value = float((values * f).sum() / total)     # as the detector report's centroid and mean angle
    return value, ratio_error(batch_sums(hits.source_ray, f * values), batch_sums(hits.source_ray, f))
