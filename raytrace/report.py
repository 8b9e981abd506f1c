"""Readable text summary of a trace: efficiency per detector, loss per face, absorption, truncation."""
from __future__ import annotations

from .ledger import ABSORBED, DETECTOR, ESCAPED, TRUNCATED
from .results import TraceResult


def summary_text(result: TraceResult, title: str = "", story: str = "") -> str:
    L = result.ledger
    total = L.source_flux or 1.0
    st = result.stats
    lines = []
    if title:
        lines.append(f"Scene: {title}")
    if story:
        lines.append(f"  {story}")
    lines.append(f"Traced {st['source_rays']:,} source rays ({result.mode}), {st['segments']:,} segments "
                 f"in {st['elapsed_s']:.2f} s; source flux {L.source_flux:.6g}")
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
            lines.append(f"  {label:<46} {b.flux:>12.6g}  {100 * b.flux / total:7.3f} %")
    closure = L.total - L.source_flux
    lines.append(f"Ledger: buckets sum to {L.total:.12g} (difference {closure:.2e})")
    if st.get("vertex_hits") or st.get("grazing_hits") or st.get("medium_mismatches"):
        lines.append(f"Edge cases: {st['vertex_hits']} hits at a vertex, {st['grazing_hits']} grazing hits, "
                     f"{st['medium_mismatches']} medium mismatches (traced deterministically)")
    return "\n".join(lines)
