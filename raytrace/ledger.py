"""The energy ledger: where every unit of source flux ended.

During a trace, flux is added to integer-coded bins (fast, vectorized with bincount); the
`Ledger` turns the bins into named buckets.  Bin layout for D detectors, E edges, M media:
    [0, D)                  reached detector d
    [D, D+E)                escaped to infinity after last interacting with edge e
    D+E                     escaped without meeting anything
    [D+E+1, ...+M)          absorbed in the bulk of medium m
    next E                  absorbed at face (edge e)
    next len(TRUNCATION)    truncated, by reason
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .compile import CompiledScene
from .errors import LedgerError
from .uncertainty import ratio_error

TRUNCATION_REASONS = ("below flux floor", "generation limit", "segment budget")
TRUNC_FLUX, TRUNC_DEPTH, TRUNC_BUDGET = range(3)

DETECTOR, ESCAPED, ABSORBED, TRUNCATED = "detector", "escaped", "absorbed", "truncated"


class BinLayout:
    def __init__(self, cs: CompiledScene):
        self.D = len(cs.detectors)
        self.E = cs.n_edges
        self.M = len(cs.media)
        self.escape0 = self.D
        self.escape_none = self.D + self.E
        self.bulk0 = self.escape_none + 1
        self.face0 = self.bulk0 + self.M
        self.trunc0 = self.face0 + self.E
        self.size = self.trunc0 + len(TRUNCATION_REASONS)


@dataclass(frozen=True)
class Bucket:
    kind: str            # detector, escaped, absorbed, truncated
    flux: float
    part: str = ""       # part name ("" where none)
    face: str = ""       # face name ("" where none, "bulk" for bulk absorption)
    detector: str = ""
    reason: str = ""

    @property
    def label(self) -> str:
        if self.kind == DETECTOR:
            return f"detector {self.detector}"
        if self.kind == ESCAPED:
            return f"escaped via {self.part} / {self.face}" if self.part else "escaped without meeting anything"
        if self.kind == ABSORBED:
            return f"absorbed in bulk of {self.part}" if self.face == "bulk" else f"absorbed at {self.part} / {self.face}"
        return f"truncated: {self.reason}"

    def to_dict(self) -> dict:
        d = {"kind": self.kind, "flux": self.flux}
        for k in ("part", "face", "detector", "reason"):
            v = getattr(self, k)
            if v:
                d[k] = v
        return d


class Ledger:
    """Named buckets built from the bins; checks that they add up to the source flux."""

    def __init__(self, cs: CompiledScene, bins: np.ndarray, source_flux: float, check: bool = True,
                 batch_bins: np.ndarray | None = None, batch_flux: np.ndarray | None = None):
        """batch_bins, batch_flux: the same bins and the source flux per sub-batch of source rays
        (see `uncertainty`); with them every bucket share gets a standard error."""
        self.source_flux = float(source_flux)
        self.bins = bins
        self.batch_flux = batch_flux
        layout = BinLayout(cs)
        merged: dict[tuple, float] = {}
        merged_batch: dict[tuple, np.ndarray] = {}

        def add(key, b):
            flux = bins[b]
            if flux != 0.0:
                merged[key] = merged.get(key, 0.0) + float(flux)
                if batch_bins is not None:
                    merged_batch[key] = merged_batch.get(key, 0.0) + batch_bins[:, b]

        for d, det in enumerate(cs.detectors):
            add((DETECTOR, "", "", det.name, ""), d)
        for e in range(layout.E):
            part, face = _edge_label(cs, e)
            add((ESCAPED, part, face, "", ""), layout.escape0 + e)
            add((ABSORBED, part, face, "", ""), layout.face0 + e)
        add((ESCAPED, "", "", "", ""), layout.escape_none)
        for m in range(layout.M):
            add((ABSORBED, cs.medium_names[m], "bulk", "", ""), layout.bulk0 + m)
        for r, reason in enumerate(TRUNCATION_REASONS):
            add((TRUNCATED, "", "", "", reason), layout.trunc0 + r)
        # keep every absorbing detector listed, even when it received nothing; a monitoring
        # detector lets rays pass, so flux never ends there and it has no bucket
        for det in cs.detectors:
            if det.absorbing:
                merged.setdefault((DETECTOR, "", "", det.name, ""), 0.0)
        self.buckets = [Bucket(k[0], f, k[1], k[2], k[3], k[4]) for k, f in merged.items()]
        order = {DETECTOR: 0, ESCAPED: 1, ABSORBED: 2, TRUNCATED: 3}
        self.buckets.sort(key=lambda b: (order[b.kind], -b.flux))
        # standard error of each bucket's share of the source flux (nan without sub-batch tallies)
        self.errors: dict[str, float] = {}
        for b in self.buckets:
            key = (b.kind, b.part, b.face, b.detector, b.reason)
            self.errors[b.label] = float("nan") if batch_bins is None or batch_flux is None else \
                ratio_error(merged_batch.get(key, np.zeros(len(batch_flux))), batch_flux)
        if check:
            self.check()

    @property
    def total(self) -> float:
        return float(self.bins.sum())

    def check(self, rtol: float = 1e-9) -> None:
        total = self.total
        if abs(total - self.source_flux) > rtol * max(abs(self.source_flux), 1e-300):
            raise LedgerError(f"energy ledger does not close: buckets sum to {total!r}, "
                              f"source flux is {self.source_flux!r}")

    def flux(self, kind: str | None = None, **where) -> float:
        return sum(b.flux for b in self.buckets if (kind is None or b.kind == kind)
                   and all(getattr(b, k) == v for k, v in where.items()))

    def efficiency(self, detector: str) -> float:
        return self.flux(DETECTOR, detector=detector) / self.source_flux if self.source_flux else 0.0

    def share(self, label: str) -> float:
        """A bucket's flux over the source flux, by its label (0 for a bucket that got nothing)."""
        flux = sum(b.flux for b in self.buckets if b.label == label)
        return flux / self.source_flux if self.source_flux else 0.0

    def share_error(self, label: str) -> float:
        """Standard error of `share(label)` (see `uncertainty`); nan when it cannot be estimated."""
        return self.errors.get(label, float("nan"))


def _edge_label(cs: CompiledScene, e: int) -> tuple[str, str]:
    if cs.detector[e] >= 0:
        return ("", f"detector {cs.detectors[cs.detector[e]].name}")
    return cs.face_labels[cs.face[e]]
