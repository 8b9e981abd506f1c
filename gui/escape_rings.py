"""Escape rings as drawn: one ring per face where flux escapes, except where rings of faces with
the same name would crowd each other on screen (a prism film's 0.5 mm teeth, a dozen faces
within a few pixels).  Those are merged into one ring for their summed share, so the drawing
reads like the ledger's row for that name; zoomed in, the faces spread apart and get their own
rings again."""
from __future__ import annotations

import math
from dataclasses import dataclass

# rings of same-named faces closer than this many of their diameters are merged
CROWD_DIAMETERS = 2.0


@dataclass(frozen=True)
class Ring:
    x: float            # scene mm
    y: float
    share: float        # of the source flux, summed over the faces it stands for
    label: str          # "part / face"
    faces: int          # how many faces it stands for


def merge_crowded(rings: list[Ring], size_px, px_mm: float, clear_of=()) -> list[Ring]:
    """`rings` (one per face) with crowded same-named neighbours merged.  `size_px(share)` is a
    ring's diameter on screen, `px_mm` the view's mm per pixel; a merged ring sits on the member
    nearest the group's flux-weighted centre that keeps clear of the points `clear_of` (source
    glyphs): `clear_of` is (points, px they need around them)."""
    n = len(rings)
    parent = list(range(n))

    def root(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i
    for i in range(n):
        for j in range(i + 1, n):
            a, b = rings[i], rings[j]
            reach = CROWD_DIAMETERS * max(size_px(a.share), size_px(b.share)) * px_mm
            if a.label == b.label and math.dist((a.x, a.y), (b.x, b.y)) < reach:
                parent[root(i)] = root(j)
    groups: dict[int, list[Ring]] = {}
    for i in range(n):
        groups.setdefault(root(i), []).append(rings[i])
    out = []
    for members in groups.values():
        if len(members) == 1:
            out.append(members[0])
            continue
        share = sum(r.share for r in members)
        cx = sum(r.x * r.share for r in members) / share if share > 0 else members[0].x
        cy = sum(r.y * r.share for r in members) / share if share > 0 else members[0].y
        clear_mm = (0.5 * size_px(share) + clear_of[1]) * px_mm if clear_of else 0.0
        points = clear_of[0] if clear_of else ()

        def free(r):
            return all(math.dist((r.x, r.y), q) >= clear_mm for q in points)
        spots = sorted(members, key=lambda r: math.dist((r.x, r.y), (cx, cy)))
        at = next((r for r in spots if free(r)), spots[0])
        out.append(Ring(at.x, at.y, share, members[0].label, sum(r.faces for r in members)))
    return out
