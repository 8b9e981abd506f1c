"""Readable text summary of a trace: efficiency per detector, loss per face, absorption, truncation."""
from __future__ import annotations

from .ledger import ABSORBED, DETECTOR, ESCAPED, TRUNCATED
from .results import TraceResult
from .uncertainty import format_error


def summary_text(result: TraceResult, title: str = "", story: str = "") -> str:
    L = result.ledger
    total = L.source_flux or 1.0
    st = result.stats
    lines = []
    if title:
        lines.append(f"Scene: {title}")
    if story:
        lines.append(f"  {story}")
    start = st.get("kernel_start_s", 0.0)
    start_note = f" ({start:.1f} s of it loading the compiled tracer, once per process)" if start >= 0.05 else ""
    lines.append(f"Traced {st['source_rays']:,} source rays ({result.mode}), {st['segments']:,} segments "
                 f"in {st['elapsed_s']:.2f} s{start_note}; source flux {L.source_flux:.6g}")
    sections = ((DETECTOR, "Reached detectors"), (ESCAPED, "Escaped (by the last face met)"),
                (ABSORBED, "Absorbed"), (TRUNCATED, "Truncated"))
    for kind, heading in sections:
        rows = [b for b in L.buckets if b.kind == kind]
        if not rows:
            continue
        lines.append(f"{heading}:")
        for b in rows:
            label = b.label
            for prefix in ("detector ", "escaped via ", "absorbed ", "truncated: "):
                if label.startswith(prefix) and kind != ABSORBED:
                    label = label[len(prefix):]
            lines.append(f"  {label:<46} {b.flux:>12.6g}  {format_error(b.flux / total, L.share_error(b.label))}")
    closure = L.total - L.source_flux
    lines.append(f"Ledger: buckets sum to {L.total:.12g} (difference {closure:.2e})")
    lines.append(f"Errors (+-, in points of %): {result.error_meaning}")
    if st.get("vertex_hits") or st.get("grazing_hits") or st.get("medium_mismatches"):
        def n(count, one, many):
            return f"{count:,} {one if count == 1 else many}"
        lines.append(f"Edge cases: {n(st['vertex_hits'], 'hit', 'hits')} at a vertex, "
                     f"{n(st['grazing_hits'], 'grazing hit', 'grazing hits')}, "
                     f"{n(st['medium_mismatches'], 'medium mismatch', 'medium mismatches')} (traced deterministically)")
    return "\n".join(lines)


def detectors_text(result: TraceResult) -> str:
    """One line per detector: flux, efficiency, centroid, uniformity, arrival times."""
    from .detectors import detector_reports
    reports = detector_reports(result)
    if not reports:
        return ""
    lines = ["Detector figures:"]
    for r in reports:
        lines.append("  " + r.summary_line())
        if r.per_wavelength:   # line spectra: where each colour lands
            lines += ["    " + w.line() for w in r.per_wavelength]
            first, last = r.per_wavelength[0], r.per_wavelength[-1]
            lines.append(f"    centroids spread over {r.centroid_spread_mm:.3f} mm "
                         f"({first.wavelength_nm:.2f} nm at {first.centroid_mm:.3f} mm, "
                         f"{last.wavelength_nm:.2f} nm at {last.centroid_mm:.3f} mm)")
    return "\n".join(lines)


def materials_text(rows: list[dict]) -> str:
    """The material catalog as a table: name, model, nd, Vd and where the data come from."""
    width = max([len("material")] + [len(r["name"]) for r in rows])
    mwidth = max([len("model")] + [len(r["model"]) for r in rows])
    lines = [f"{'material':<{width}}  {'model':<{mwidth}}  {'nd':>8}  {'Vd':>6}  source"]
    for r in rows:
        vd = f"{r['vd']:6.2f}" if r["vd"] is not None else f"{'-':>6}"
        lines.append(f"{r['name']:<{width}}  {r['model']:<{mwidth}}  {r['nd']:8.5f}  {vd}  {r['source']}")
    return "\n".join(lines)


class Progress:
    """A one-line progress display on stderr for long runs.

    Silent unless enabled and the stream is a terminal; shows nothing for the first
    `delay_s` seconds so quick runs stay clean; redraws at most every `interval_s`."""

    def __init__(self, enabled: bool = True, stream=None, delay_s: float = 0.5, interval_s: float = 0.1):
        import sys
        import time
        self.stream = stream if stream is not None else sys.stderr
        isatty = getattr(self.stream, "isatty", None)
        self.enabled = bool(enabled and isatty and isatty())
        self._clock = time.monotonic
        self._start = self._clock()
        self._last = 0.0
        self._shown = False
        self.delay_s, self.interval_s = delay_s, interval_s

    def _draw(self, text: str, force: bool = False) -> None:
        if not self.enabled:
            return
        now = self._clock()
        if not force and (now - self._start < self.delay_s or now - self._last < self.interval_s):
            return
        self._last = now
        self._shown = True
        self.stream.write("\r" + text[:79].ljust(79))
        self.stream.flush()

    def trace(self, stats: dict) -> None:
        """Callback for `raytrace.trace(progress=...)`: called once per generation."""
        text = f"tracing: generation {stats.get('generations', 0):,}, {stats.get('segments', 0):,} segments"
        if stats.get("chunks", 1) > 1:    # a chunked trace reports chunks as they finish
            text = f"tracing: chunk {stats.get('chunks_done', 0):,}/{stats['chunks']:,}, " \
                   f"{stats.get('segments', 0):,} segments"
        self._draw(text)

    def points(self, done: int, total: int) -> None:
        """Callback for sweeps: a bar of finished points."""
        n = 30
        filled = int(n * done / total) if total else n
        self._draw(f"sweep [{'#' * filled}{'-' * (n - filled)}] {done}/{total} points", force=done == total)

    def close(self) -> None:
        if self.enabled and self._shown:
            self.stream.write("\r" + " " * 79 + "\r")
            self.stream.flush()


def sweep_text(result) -> str:
    """The swept values and each detector's efficiency with its error, one line per point."""
    head = result.names + [f"eff. {d}" for d in result.detectors]
    widths = [max(12, len(h)) for h in result.names] + [max(20, len(h)) for h in head[len(result.names):]]
    lines = ["  ".join(f"{h:>{w}}" for h, w in zip(head, widths))]
    for row in result.rows:
        cells = [f"{row[n]:>{w}.6g}" for n, w in zip(result.names, widths)]
        if row["status"] == "ok":
            cells += [f"{format_error(row[f'efficiency: {d}'], _number(row[f'efficiency error: {d}'])).strip():>{w}}"
                      for d, w in zip(result.detectors, widths[len(result.names):])]
        else:
            cells.append("  (not traced: see below)")
        lines.append("  ".join(cells))
    return "\n".join(lines)


def _number(cell) -> float:
    return float("nan") if cell == "" or cell is None else float(cell)


def sweep_warnings(result) -> list[str]:
    """Each distinct warning of a sweep once, with the points that gave it."""
    seen: dict[str, list[int]] = {}
    for row in result.rows:
        for w in filter(None, row.get("warnings", "").split(" | ")):
            seen.setdefault(w, []).append(row["point"])
    out = []
    for w, points in seen.items():
        which = "every point" if len(points) == len(result.rows) > 1 else \
            ("point " if len(points) == 1 else "points ") + ", ".join(map(str, points))
        out.append(f"{which}: {w}")
    return out
