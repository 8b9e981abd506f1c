"""What a trace gives back to a user: the ledger, detector records, the ray table, paths, stats."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .compile import CompiledScene
from .ledger import Ledger
from .tracer import EVENT_KINDS, N_EVENT_KINDS, RawTrace, within_acceptance
from .uncertainty import SUB_BATCHES, batch_sums, error_meaning, ratio_error


@dataclass
class DetectorHits:
    """Every ray that reached one detector (arrays of equal length)."""

    name: str
    length: float
    position: np.ndarray        # mm from the detector's start point
    angle_deg: np.ndarray       # from the detector normal, signed
    flux_s: np.ndarray
    flux_p: np.ndarray
    wavelength_nm: np.ndarray
    optical_path: np.ndarray    # sum of n*L in mm; divide by c for the time of flight
    path: np.ndarray            # path node of each hit
    source_ray: np.ndarray

    @property
    def flux(self) -> np.ndarray:
        return self.flux_s + self.flux_p

    @property
    def total(self) -> float:
        return float(self.flux.sum())


@dataclass
class TraceResult:
    compiled: CompiledScene
    raw: RawTrace
    ledger: Ledger
    mode: str
    settings: dict = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)   # what a user should know about this result

    @property
    def source_flux(self) -> float:
        return self.ledger.source_flux

    @property
    def stats(self) -> dict:
        return self.raw.stats

    def detector(self, name: str) -> DetectorHits:
        cs = self.compiled
        index = next(i for i, d in enumerate(cs.detectors) if d.name == name)
        det = cs.detectors[index]
        h = self.raw.hits
        if not h:
            sel = np.zeros(0, dtype=bool)
            h = {k: np.zeros(0) for k in ("position", "angle_deg", "flux_s", "flux_p", "wavelength_nm",
                                          "optical_path", "path", "root", "detector")}
        sel = h["detector"] == index
        length = float(np.hypot(det.end[0] - det.start[0], det.end[1] - det.start[1]))
        return DetectorHits(name, length, h["position"][sel], h["angle_deg"][sel], h["flux_s"][sel],
                            h["flux_p"][sel], h["wavelength_nm"][sel], h["optical_path"][sel],
                            h["path"][sel].astype(np.int64), h["root"][sel].astype(np.int64))

    def efficiency(self, detector: str) -> float:
        """Flux that reached (absorbing) or crossed (monitoring) the detector, over the source flux."""
        det = next(d for d in self.compiled.detectors if d.name == detector)
        if not det.absorbing:
            hist = (getattr(self.raw, "histograms", None) or {}).get(detector)
            crossed = (float(hist["flux_s"].sum() + hist["flux_p"].sum()) if hist is not None
                       else self.detector(detector).total)   # long traces keep only histograms
            return crossed / self.source_flux if self.source_flux else 0.0
        return self.ledger.efficiency(detector)

    def efficiency_error(self, detector: str) -> float:
        """Standard error of `efficiency(detector)`, from sub-batches of source rays (see
        `raytrace.uncertainty` for what it means with even sampling); nan when unknown."""
        det = next(d for d in self.compiled.detectors if d.name == detector)
        if det.absorbing:
            return self.ledger.share_error(f"detector {detector}")
        if self.raw.batch_flux is None:
            return float("nan")
        hist = (getattr(self.raw, "histograms", None) or {}).get(detector)
        if hist is not None:
            per_batch = hist["batch_flux"]
        else:
            hits = self.detector(detector)
            per_batch = batch_sums(hits.source_ray, hits.flux)
        return ratio_error(per_batch, self.raw.batch_flux)

    def accepted(self, detector: str) -> float:
        """Share of the source flux that reached the detector travelling within its angular
        acceptance (nan for a detector without one)."""
        return self._accepted(detector)[0]

    def accepted_error(self, detector: str) -> float:
        """Standard error of `accepted(detector)`."""
        return self._accepted(detector)[1]

    def _accepted(self, detector: str) -> tuple[float, float]:
        cs = self.compiled
        index = next(i for i, d in enumerate(cs.detectors) if d.name == detector)
        acc = cs.acceptance[index] if cs.acceptance else None
        nan = float("nan")
        if acc is None or not self.source_flux:
            return nan, nan
        hist = (getattr(self.raw, "histograms", None) or {}).get(detector)
        if hist is not None:
            per_batch = hist["accepted_batch"]
        else:
            h = self.raw.hits
            if not h:
                return 0.0, 0.0
            sel = h["detector"] == index
            det = cs.detectors[index]
            tx, ty = det.end[0] - det.start[0], det.end[1] - det.start[1]
            length = float(np.hypot(tx, ty))
            tx, ty = tx / length, ty / length
            # rebuild each arrival's direction of travel from its angle to the normal (ty, -tx)
            # and the side it came from (front: travelling against the normal)
            ang = np.radians(h["angle_deg"][sel])
            along_n = np.where(h["front"][sel], -1.0, 1.0) * np.cos(ang)
            dx = along_n * ty + np.sin(ang) * tx
            dy = -along_n * tx + np.sin(ang) * ty
            inside = within_acceptance(dx, dy, *acc)
            flux = (h["flux_s"][sel] + h["flux_p"][sel])[inside]
            per_batch = batch_sums(h["root"][sel][inside], flux)
        err = ratio_error(per_batch, self.raw.batch_flux) if self.raw.batch_flux is not None else nan
        return float(np.sum(per_batch)) / self.source_flux, err

    def share(self, label: str) -> float:
        """A ledger bucket's share of the source flux, by its label (e.g. "escaped via guide / input")."""
        return self.ledger.share(label)

    def share_error(self, label: str) -> float:
        """Standard error of a ledger bucket's share of the source flux, by its label."""
        return self.ledger.share_error(label)

    @property
    def error_meaning(self) -> str:
        """What the standard errors of this trace stand for (sampling or statistical)."""
        return error_meaning(self.mode, self.settings.get("source_samplings", []))

    @property
    def segments(self) -> dict[str, np.ndarray] | None:
        """Recorded ray segments as columns, or None when recording was off."""
        return self.raw.segments

    def describe_path(self, node: int) -> list[str]:
        """Readable events of a path node, from the source onward."""
        cs = self.compiled
        parent, code = self.raw.path_parent, self.raw.path_code
        steps: list[str] = []
        while node >= 0 and parent[node] != -1_000_000:
            c = code[node]
            if c < 0:
                steps.append(f"from source {_source_name(self, -1 - parent[node])}")
                break
            edge, kind = divmod(int(c), N_EVENT_KINDS)
            steps.append(f"{EVENT_KINDS[kind]} {_edge_name(cs, edge)}")
            node = parent[node]
        else:
            if node >= 0:
                steps.append("(other routes)")
        return steps[::-1]

    def to_summary_dict(self) -> dict:
        def num(x):
            return None if x != x else x
        total = self.source_flux
        return {
            "source_flux": self.source_flux,
            "mode": self.mode,
            "buckets": [{**b.to_dict(), "share": b.flux / total if total else 0.0,
                         "share_error": num(self.share_error(b.label))} for b in self.ledger.buckets],
            "efficiency": {d.name: self.efficiency(d.name) for d in self.compiled.detectors},
            "efficiency_error": {d.name: num(self.efficiency_error(d.name)) for d in self.compiled.detectors},
            "errors": {"sub_batches": SUB_BATCHES, "meaning": self.error_meaning},
            "stats": {k: v for k, v in self.stats.items()},
            "settings": self.settings,
            "warnings": list(self.warnings),
        }


def _source_name(result: TraceResult, index: int) -> str:
    names = result.settings.get("source_names", [])
    return names[index] if 0 <= index < len(names) else str(index)


def _edge_name(cs: CompiledScene, edge: int) -> str:
    if cs.detector[edge] >= 0:
        return f"detector {cs.detectors[cs.detector[edge]].name}"
    part, face = cs.face_labels[cs.face[edge]]
    return f"{part} / {face}"

