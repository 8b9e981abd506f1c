"""Rules docs/scene-format.md states, checked on traced and built scenes."""
import pytest

import raytrace
from raytrace.geometry import ShapeSpec
from raytrace.scene_io import scene_from_dict
from raytrace.shapes import build


def cemented(first_treatment, second_treatment) -> dict:
    """Two PMMA blocks sharing the edge x = 0; a beam from the left crosses it."""
    def block(name, x, face, treatment):
        part = {"name": name, "material": "PMMA",
                "shape": {"kind": "rectangle", "params": {"width": 2, "height": 4}, "position": [x, 0]}}
        if treatment:
            part["faces"] = {face: {"treatment": treatment}}
        return part
    return {"format": "raytrace2d-scene", "version": 1, "units": {"length": "mm", "wavelength": "nm"},
            "parts": [block("A", -1, "right", first_treatment), block("B", 1, "left", second_treatment)],
            "sources": [{"name": "b", "kind": "beam", "position": [-3, 0], "direction_deg": 0, "width": 1}],
            "detectors": [{"name": "d", "start": [3, -5], "end": [3, 5]}]}


@pytest.mark.parametrize("first,second,absorbed", [
    (None, "absorber", True),          # bare on the first: the second part's treatment applies
    ("absorber", "mirror", True),      # both treated: the first part's wins
    ("mirror", "absorber", False),
    ("anti-reflection", "absorber", False),
])
def test_shared_edge_treatment_rule(first, second, absorbed):
    r = raytrace.trace(scene_from_dict(cemented(first, second)), rays=10)
    labels = {b.label for b in r.ledger.buckets if b.flux > 0}
    assert ("absorbed at A / right" in labels) == absorbed       # named after the first part
    assert not any(label.startswith(("absorbed at B", "escaped via B / left")) for label in labels)


@pytest.mark.parametrize("kind,params,centre_x,centre_y", [
    ("rectangle", {"width": 3, "height": 5}, True, True),
    ("regular_polygon", {"sides": 6, "circumradius": 2}, True, True),
    ("prism", {"apex_angle_deg": 60, "side": 4}, True, False),
    ("roof_prism", {"leg": 4}, True, False),
    ("microprism_strip", {"pitch": 1, "prism_angle_deg": 90, "count": 5, "slab_thickness": 1}, True, False),
    ("window", {"thickness": 2, "height": 6}, False, True),
])
def test_builder_frames_are_centred_as_documented(kind, params, centre_x, centre_y):
    x0, y0, x1, y1 = build(ShapeSpec(kind, params)).bounds()
    assert (abs(x0 + x1) < 1e-12) == centre_x
    assert (abs(y0 + y1) < 1e-12) == centre_y
