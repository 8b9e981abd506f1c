"""Path analysis: flux grouped by event sequence, readable and collapsed."""
from __future__ import annotations

import math
from collections import defaultdict
from pathlib import Path

import numpy as np
import pytest
import tmm

import raytrace
from raytrace import shapes
from raytrace.geometry import Loop, Part, ShapeSpec
from raytrace.materials import ConstantIndex
from raytrace.routes import route_groups, routes_text, top_routes
from raytrace.scene import Detector, Scene, Source, TraceSettings
from raytrace.scene_io import load_scene
from raytrace.sources import StartRays

SAMPLES = Path(__file__).resolve().parent.parent / "samples"
N_GLASS = 1.5


def plate_scene(angle_deg, polarization):
    mats = {"outside": ConstantIndex("outside", n=1.0), "glass": ConstantIndex("glass", n=N_GLASS)}
    spec = ShapeSpec("window", {"thickness": 2.0, "height": 400.0}, (0.0, 0.0), 0.0)
    a = math.radians(angle_deg)
    src = Source("probe", kind="beam", position=(-5.0, -5.0 * math.tan(a)), direction_deg=angle_deg,
                 width=1.0, polarization=polarization)
    dets = [Detector("through", (20.0, -200.0), (20.0, 200.0)),
            Detector("back", (-10.0, 200.0), (-10.0, -200.0))]
    return Scene(parts=[Part("plate", "glass", shapes.build(spec), shape=spec)], sources=[src], detectors=dets,
                 materials=mats, ambient="outside", settings=TraceSettings(rays=10, flux_floor=1e-12))


# cases where the first ghost carries more than 1e-3 of its source ray: the tracer may lump
# fainter paths into "other routes" to keep the path table small
@pytest.mark.parametrize("pol, angle", [("s", 0.0), ("p", 0.0), ("s", 35.0), ("s", 70.0), ("p", 70.0),
                                        ("s", 80.0), ("p", 80.0)])
def test_window_direct_and_ghost_paths_match_fresnel(pol, angle):
    """reference library: tmm.coh_tmm for the reflectance R of one n = 1 -> 1.5 interface.
    The direct path carries (1 - R)^2, the first ghost (two inner reflections) (1 - R)^2 R^2,
    the front reflection R and the first back-side ghost (1 - R) R (1 - R) (the plate's two
    faces are parallel, so R is the same at both, common practice)."""
    r = raytrace.trace(plate_scene(angle, pol))
    R = tmm.coh_tmm(pol, [1.0, N_GLASS], [np.inf, np.inf], math.radians(angle), 633.0)["R"]
    to_through = top_routes(r, 3, bucket="through")
    assert to_through[0].text == "enter through plate / front, leave through plate / back"
    assert to_through[0].share_of_source == pytest.approx((1 - R) ** 2, rel=1e-12)
    assert to_through[1].text == ("enter through plate / front, reflect off plate / back, "
                                  "reflect off plate / front, leave through plate / back")
    assert to_through[1].share_of_source == pytest.approx((1 - R) ** 2 * R ** 2, rel=1e-9)
    back = top_routes(r, 2, bucket="back")
    assert back[0].text == "reflect off plate / front"
    assert back[0].share_of_source == pytest.approx(R, rel=1e-12)
    assert back[1].text == "enter through plate / front, reflect off plate / back, leave through plate / front"
    assert back[1].share_of_source == pytest.approx((1 - R) * R * (1 - R), rel=1e-9)


def test_group_flux_adds_up_to_each_ledger_bucket():
    scene = load_scene(SAMPLES / "light-pipe-90.json")
    r = raytrace.trace(scene, rays=300)
    sums = defaultdict(float)
    shares = defaultdict(float)
    for g in route_groups(r):
        sums[g.bucket] += g.flux
        shares[g.bucket] += g.share_of_bucket
    for b in r.ledger.buckets:
        if b.flux > 0:
            assert sums[b.label] == pytest.approx(b.flux, rel=1e-9), b.label
            assert shares[b.label] == pytest.approx(1.0, rel=1e-9)
    assert set(sums) == {b.label for b in r.ledger.buckets if b.flux > 0}


def test_repeats_on_one_face_are_collapsed_and_counted():
    """A slab guide whose two long sides are one face, "wall": a ray from the middle of the
    core at 10 deg meets the walls at axial distances (w/2 + k w) / tan 10 deg; before a
    detector at 50 mm that is k = 0..8, nine TIRs (n = 1.5 in n = 1: 80 deg incidence is far
    beyond the 41.8 deg critical angle)."""
    mats = {"outside": ConstantIndex("outside", n=1.0), "glass": ConstantIndex("glass", n=1.5)}
    loop = Loop.polygon([(-1.0, -0.5), (60.0, -0.5), (60.0, 0.5), (-1.0, 0.5)],
                        ["wall", "output", "wall", "input"])
    scene = Scene(parts=[Part("guide", "glass", loop)], sources=[Source("inside", kind="point")],
                  detectors=[Detector("end", (50.0, -0.45), (50.0, 0.45))], materials=mats, ambient="outside")
    a = math.radians(10.0)
    start = StartRays(np.zeros(1), np.zeros(1), np.array([math.cos(a)]), np.array([math.sin(a)]),
                      np.array([550.0]), np.array([0.5]), np.array([0.5]), np.zeros(1, dtype=np.int64))
    r = raytrace.trace(scene, start=start)
    (g,) = top_routes(r, 5, bucket="end")
    assert g.steps == ("9 x TIR at guide / wall",)
    assert g.share_of_source == pytest.approx(1.0, rel=1e-12)


def test_cemented_faces_and_monitors_are_named():
    scene = load_scene(SAMPLES / "cemented-prism-pair.json")
    r = raytrace.trace(scene, rays=30)
    texts = [g.text for g in route_groups(r)]
    assert any(" into flint prism" in t and "cross " in t for t in texts)
    # a monitoring detector shows up as a step
    mats = {"outside": ConstantIndex("outside", n=1.0)}
    s2 = Scene(sources=[Source("b", kind="beam")], materials=mats, ambient="outside",
               detectors=[Detector("monitor", (5.0, -2.0), (5.0, 2.0), absorbing=False),
                          Detector("sensor", (9.0, -2.0), (9.0, 2.0))])
    (g,) = top_routes(raytrace.trace(s2, rays=5), 3, bucket="sensor")
    assert g.steps == ("pass detector monitor",)


def test_routes_text_lists_detectors_and_losses():
    scene = load_scene(SAMPLES / "light-pipe-90.json")
    r = raytrace.trace(scene, rays=200)
    text = routes_text(r, 3)
    assert "Top routes to detector viewer side:" in text
    assert "Top loss routes:" in text
    assert "enter through guide / input" in text
    lines = [ln for ln in text.splitlines() if ln.startswith("  ")]
    assert len(lines) == 6
    # the loss list is sorted by flux
    loss = top_routes(r, 3, kind=("escaped", "absorbed", "truncated"))
    assert [g.flux for g in loss] == sorted((g.flux for g in loss), reverse=True)


def test_no_paths_when_not_tracked():
    scene = load_scene(SAMPLES / "oblique-window.json")
    r = raytrace.trace(scene, rays=10, track_paths=False)
    assert route_groups(r) == []
    assert "not tracked" in routes_text(r)


def test_faint_ghosts_are_followed_when_the_path_threshold_is_lowered():
    """reference library: tmm.coh_tmm for R.  At normal incidence on n = 1.5 the ghost into
    'through' carries (1 - R)^2 R^2 = 1.5e-3 and the next one (1 - R)^2 R^4 = 2.4e-6 of the
    beam: below the default path threshold (1e-3 of a ray) the second is lumped into "other
    paths", with route_flux_floor=1e-8 it is a path of its own with that share."""
    R = tmm.coh_tmm("s", [1.0, N_GLASS], [np.inf, np.inf], 0.0, 633.0)["R"]
    ghost2 = ("enter through plate / front, reflect off plate / back, reflect off plate / front, "
              "reflect off plate / back, reflect off plate / front, leave through plate / back")
    default = raytrace.trace(plate_scene(0.0, "s"))
    assert ghost2 not in [g.text for g in top_routes(default, 10, bucket="through")]
    deep = raytrace.trace(plate_scene(0.0, "s"), route_flux_floor=1e-8)
    found = {g.text: g for g in top_routes(deep, 10, bucket="through")}
    assert found[ghost2].share_of_source == pytest.approx((1 - R) ** 2 * R ** 4, rel=1e-9)


def _two_source_window():
    """The plate lit by two beams, so path rows carry a source prefix."""
    scene = plate_scene(0.0, "s")
    second = Source("second probe", kind="beam", position=(-5.0, 50.0), direction_deg=0.0, width=1.0,
                    polarization="s")
    scene.sources.append(second)
    return scene


def test_the_lumped_paths_read_once_and_plainly():
    """Ghosts past the first are under the default 1e-3 path threshold (R^2 (1 - R)^2 R^2 ~ 2e-6
    for n = 1.5 at normal incidence, published: Fresnel normal-incidence R = ((n-1)/(n+1))^2),
    so the 'through' detector has an "other routes" row: it names no source and says
    "other routes" once."""
    r = raytrace.trace(_two_source_window())
    lumped = [g for g in route_groups(r) if g.lumped]
    assert lumped, "expected faint ghosts lumped into other routes"
    text = routes_text(r, 10)
    rows = [line for line in text.splitlines() if "other routes" in line]
    assert rows
    for line in rows:
        assert line.count("other routes") == 1, line
        assert "(" + "other routes" not in line and "probe:" not in line, line
        assert line.strip().split("  ", 1)[1].lstrip().startswith("other routes: too faint"), line


def test_zero_paths_lists_none():
    r = raytrace.trace(plate_scene(0.0, "s"))
    text = routes_text(r, 0)
    assert text == "Paths: none listed (0 asked for)"
    with pytest.raises(ValueError):
        routes_text(r, -1)
    # n = 1: two detector headings with one row each, then the loss heading with one row
    assert len(routes_text(r, 1).splitlines()) == 2 * 2 + 2
