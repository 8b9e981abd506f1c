"""Small helpers shared by the physics checks: build scenes in Python without JSON."""
from __future__ import annotations

from raytrace import shapes
from raytrace.geometry import Part, ShapeSpec
from raytrace.materials import ConstantIndex
from raytrace.scene import Scene, TraceSettings

# An ambient of exactly n = 1, so checks against formulas are not off by air's 1.0003.
OUTSIDE = "outside (n = 1)"


def shaped_part(name: str, material: str, kind: str, position=(0.0, 0.0), rotation_deg: float = 0.0,
                **params) -> Part:
    """A part made by a shape builder, placed like a scene file places it."""
    spec = ShapeSpec(kind, dict(params), tuple(position), float(rotation_deg))
    return Part(name, material, shapes.build(spec), shape=spec)


def make_scene(parts, sources, detectors=(), materials=None, ambient_n: float = 1.0,
               **settings) -> Scene:
    """A scene in an ambient of constant index `ambient_n`; `materials` maps name -> n or Material."""
    mats = {OUTSIDE: ConstantIndex(OUTSIDE, n=ambient_n)}
    for name, m in (materials or {}).items():
        mats[name] = m if not isinstance(m, (int, float)) else ConstantIndex(name, n=float(m))
    return Scene(parts=list(parts), sources=list(sources), detectors=list(detectors),
                 materials=mats, ambient=OUTSIDE, settings=TraceSettings(**settings))
