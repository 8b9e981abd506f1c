"""Escape rings as drawn: one ring per face where flux escapes, except where rings of faces with
the same name would crowd each other on screen (a prism film's 0.5 mm teeth, a dozen faces
within a few pixels).  Those are merged into one ring for their summed share, so the drawing
reads like the ledger's row for that name; zoomed in, the faces spread apart and get their own
rings again."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

# rings of same-named faces closer than this many of their diameters are merged
CROWD_DIAMETERS = 2.0


@dataclass(frozen=True)
class Ring:
    x: float            # scene mm
    y: float
    share: float        # of the source flux, summed over the faces it stands for
    label: str          # "part / face"
    faces: int          # how many faces it stands for


def _to_segment(p, a, b) -> float:
    ax, ay = a
    dx, dy = b[0] - ax, b[1] - ay
    L2 = dx * dx + dy * dy
    t = 0.0 if L2 == 0 else max(0.0, min(1.0, ((p[0] - ax) * dx + (p[1] - ay) * dy) / L2))
    return math.dist(p, (ax + t * dx, ay + t * dy))


def _crowded_groups(rings: list[Ring], size_px, px_mm: float) -> list[list[Ring]]:
    """The rings in groups: same-named rings closer than CROWD_DIAMETERS of the larger one's
    diameter are in one group, as are their neighbours' neighbours.  Arrays, not pairs in
    Python: a scene can have up to a thousand rings (each is at least 0.1 % of the flux)."""
    if len(rings) < 2:
        return [[r] for r in rings]
    xy = np.array([(r.x, r.y) for r in rings], float)
    size = np.array([size_px(r.share) for r in rings], float) * px_mm
    names = {}
    label = np.array([names.setdefault(r.label, len(names)) for r in rings])
    near = (np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
            < CROWD_DIAMETERS * np.maximum(size[:, None], size[None, :])) & (label[:, None] == label[None, :])
    group = np.arange(len(rings))
    while True:     # each ring takes the least group number among its neighbours, until none changes
        new = np.where(near, group[None, :], len(rings)).min(axis=1)
        new = np.minimum(new, group)
        new = new[new]          # (and jumps along: a long chain of faces takes a few rounds)
        if np.array_equal(new, group):
            break
        group = new
    return [[rings[i] for i in np.flatnonzero(group == g)] for g in np.unique(group)]


def merge_crowded(rings: list[Ring], size_px, px_mm: float, clear_of=((), 0.0)) -> list[Ring]:
    """`rings` (one per face) with crowded same-named neighbours merged.  `size_px(share)` is a
    ring's diameter on screen, `px_mm` the view's mm per pixel; a merged ring sits on the member
    nearest the group's flux-weighted centre that keeps clear of the source glyphs: `clear_of`
    is (segments (a, b) in mm, the px they need around them)."""
    groups = _crowded_groups(rings, size_px, px_mm)
    segments, clear_px = clear_of
    out = []
    for members in groups:
        if len(members) == 1:
            out.append(members[0])
            continue
        share = sum(r.share for r in members)
        cx = sum(r.x * r.share for r in members) / share if share > 0 else members[0].x
        cy = sum(r.y * r.share for r in members) / share if share > 0 else members[0].y
        clear_mm = (0.5 * size_px(share) + clear_px) * px_mm

        def free(r):
            return all(_to_segment((r.x, r.y), a, b) >= clear_mm for a, b in segments)
        spots = sorted(members, key=lambda r: math.dist((r.x, r.y), (cx, cy)))
        at = next((r for r in spots if free(r)), spots[0])
        out.append(Ring(at.x, at.y, share, members[0].label, sum(r.faces for r in members)))
    return out
