"""Bent slab guide: the bend-radius condition for total internal reflection, through a whole trace.

Threshold (common practice; derived here).  A slab guide of width d bends about a centre C with
inner-wall radius R and outer-wall radius R + d.  A ray entering the bend parallel to the axis at
distance b from C (R < b < R + d) travels along a straight line whose distance from C is b.
It meets the outer wall (radius R + d) at an angle of incidence t with sin t = b / (R + d)
(the normal there is radial).  Reflection off a circle centred on C keeps the line's distance
from C, so every later outer-wall hit in the bend has the same t, and since b > R the line
never reaches the inner wall.  The smallest angle belongs to the ray along the inner wall,
b -> R:  sin t_min = R / (R + d).  TIR everywhere needs sin t_min >= 1 / n (critical angle,
Hecht sec. 4.7, n = n_core / n_out):  n R >= R + d,  i.e.  R / d >= 1 / (n - 1).
For n = 1.49 (PMMA-like) in air this is R / d >= 2.0408 (references.md: "about 2.04").
Rays that do fail TIR are exactly those with b < (R + d) / n.

The output face is an absorber so no light comes back into the bend (a flat end face sends
rays back with a different distance from C, which the condition above does not cover).
"""
from dataclasses import replace

import numpy as np
import pytest

from conftest import make_scene, shaped_part
from raytrace import fresnel, trace
from raytrace.geometry import ABSORBER, Treatment
from raytrace.scene import Source
from raytrace.sources import StartRays
from raytrace.tracer import B_REFRACTED, E_ABSORBED, E_REFRACTED

N_CORE = 1.49
WIDTH = 3.0
LEAD_IN = 2.0
THRESHOLD_R_OVER_D = 1.0 / (N_CORE - 1.0)
RAYS = 3000


def bent_guide_scene(r_over_d: float):
    R = r_over_d * WIDTH
    part = shaped_part("guide", "core", "light_pipe", width=WIDTH,
                       segments=[{"straight": LEAD_IN}, {"bend": {"radius": R, "angle": 90.0}}])
    k = next(i for i, e in enumerate(part.outer.edges) if e.face == "output")
    part = replace(part, outer=part.outer.with_edge(k, treatment=Treatment(ABSORBER)))
    # collimated beam along the axis, filling the input face (even sampling: stratum centres,
    # never exactly on the corners)
    beam = Source("beam", kind="beam", position=(-1.0, 0.0), direction_deg=0.0, width=WIDTH,
                  sampling="even")
    return make_scene([part], [beam], materials={"core": N_CORE}, rays=RAYS,
                      flux_floor=1e-12), R


def test_threshold_value():
    """common practice (references.md): PMMA in air, R/d about 2.04."""
    assert THRESHOLD_R_OVER_D == pytest.approx(2.04, abs=0.005)


@pytest.mark.parametrize("factor", [1.0005, 1.01])
def test_just_above_threshold_nothing_leaves_the_bend(factor):
    """R/d just above 1/(n-1): no flux escapes through the outer wall (or any wall); all that
    entered reaches the output face: 1 - R0 with R0 = ((n-1)/(n+1))^2 at the input face
    (published: Hecht sec. 4.6), within 1e-12."""
    scene, _ = bent_guide_scene(factor * THRESHOLD_R_OVER_D)
    led = trace(scene).ledger
    for wall in ("outer wall", "inner wall", "left wall", "right wall"):
        assert led.flux("escaped", part="guide", face=wall) == 0.0, wall
    r0 = ((N_CORE - 1) / (N_CORE + 1)) ** 2
    delivered = led.flux("absorbed", part="guide", face="output") / led.source_flux
    assert abs(delivered - (1 - r0)) < 1e-12
    assert led.flux("escaped", part="guide", face="input") / led.source_flux == pytest.approx(r0, abs=1e-12)


@pytest.mark.parametrize("factor", [0.9995, 0.99])
def test_just_below_threshold_some_flux_escapes_through_outer_wall(factor):
    """R/d just below 1/(n-1): some flux escapes through the outer wall, and it comes only from
    rays that entered at a distance b < (R + d)/n from the bend centre (derived above)."""
    scene, R = bent_guide_scene(factor * THRESHOLD_R_OVER_D)
    result = trace(scene, record="all")
    led = result.ledger
    escaped = led.flux("escaped", part="guide", face="outer wall")
    assert escaped > 0.0
    # which source rays leaked: those with a segment refracted out at the outer wall
    seg = result.segments
    cs = result.compiled
    outer = [e for e in range(cs.n_edges) if cs.detector[e] < 0 and cs.face_labels[cs.face[e]] == ("guide", "outer wall")]
    out = (seg["end"] == E_REFRACTED) & np.isin(seg["end_edge"], outer)
    leaked = np.unique(seg["source_ray"][out])
    # entry height of each even-sampled beam ray, and its distance from the bend centre
    y = ((np.arange(RAYS) + 0.5) / RAYS - 0.5) * WIDTH
    b = (R + WIDTH / 2) - y
    limit = (R + WIDTH) / N_CORE
    assert len(leaked) > 0
    assert np.all(b[leaked] < limit)
    # and every ray below the limit leaks at its first outer-wall hit (partial transmission)
    assert set(leaked.tolist()) == set(np.flatnonzero(b < limit).tolist())


def test_escape_angle_condition_matches_fresnel_transmission_at_first_hit():
    """The flux leaving at the first outer-wall hit, ray by ray, is (1 - R0)(1 - R(t)) with
    sin t = b / (R + d) (published: Hecht 4.6 Fresnel, unpolarized mean of s and p), 1e-12."""
    factor = 0.99
    scene, R = bent_guide_scene(factor * THRESHOLD_R_OVER_D)
    result = trace(scene, record="all")
    seg = result.segments
    cs = result.compiled
    outer = [e for e in range(cs.n_edges) if cs.detector[e] < 0 and cs.face_labels[cs.face[e]] == ("guide", "outer wall")]
    # generation 0 runs from the source to the input face, generation 1 from there to the
    # first outer-wall hit; the flux leaving there is carried by its refracted child
    hits = np.isin(seg["end_edge"], outer)
    first = hits & (seg["generation"] == 1)
    y = ((np.arange(RAYS) + 0.5) / RAYS - 0.5) * WIDTH
    b = (R + WIDTH / 2) - y
    sin_t = b[seg["source_ray"][first]] / (R + WIDTH)
    Rs, Rp, tir = fresnel.fresnel_power(N_CORE, 1.0, np.sqrt(1 - sin_t ** 2))
    flux_in = (seg["flux_s"] + seg["flux_p"])[first]
    r0 = ((N_CORE - 1) / (N_CORE + 1)) ** 2
    np.testing.assert_allclose(flux_in, (1 - r0) / RAYS, rtol=1e-12)
    expect_out = 0.5 * flux_in * ((1 - Rs) + (1 - Rp))
    # children of these segments that refracted out
    ids = seg["ray_id"][first]
    child = (seg["born"] == B_REFRACTED) & np.isin(seg["parent_id"], ids)
    got = dict(zip(seg["parent_id"][child].tolist(), (seg["flux_s"] + seg["flux_p"])[child].tolist()))
    for rid, want in zip(ids.tolist(), expect_out.tolist()):
        assert abs(got.get(rid, 0.0) - want) <= 1e-12 * (1 - r0) / RAYS
    assert (~tir).sum() == (sin_t < 1 / N_CORE).sum() > 0


@pytest.mark.parametrize("n_clad", [1.0, 1.33])
def test_straight_guide_multipath_optical_path(n_clad):
    """published: G. Keiser, Optical Fiber Communications, ch. 2 (intermodal dispersion, 2D form in
    references.md): over a guide length L an axial ray has optical path n1 L (time n1 L / c), a
    ray at the critical angle n1^2 L / n2 (time n1^2 L / (c n2)).  Rays start inside a straight
    guide at x0 = 1 mm and end on an absorbing output face; the ray table gives the optical path
    at each segment's end.  Checked: the axial ray and a ray 1e-9 rad inside the critical angle,
    each against n1 (L - x0) / cos(phi) within 1e-12 relative (Snell geometry, Hecht 4.4), and the
    second against Keiser's n1^2 (L - x0) / n2 within 1e-8 (the 1e-9 rad offset)."""
    n1, length, width, x0 = 1.5, 50.0, 2.0, 1.0
    part = shaped_part("guide", "core", "light_pipe", width=width, segments=[{"straight": length}])
    k = next(i for i, e in enumerate(part.outer.edges) if e.face == "output")
    part = replace(part, outer=part.outer.with_edge(k, treatment=Treatment(ABSORBER)))
    scene = make_scene([part], [], materials={"core": n1}, ambient_n=n_clad, flux_floor=1e-12)
    phi_c = np.pi / 2 - np.arcsin(n_clad / n1)        # ray angle to the axis at the critical angle
    phi = np.array([0.0, phi_c - 1e-9])
    start = StartRays(np.full(2, x0), np.zeros(2), np.cos(phi), np.sin(phi), np.full(2, 550.0),
                      np.full(2, 0.5), np.full(2, 0.5), np.zeros(2, dtype=np.int64))
    result = trace(scene, start=start, record="all")
    seg = result.segments
    led = result.ledger
    assert led.flux("absorbed", part="guide", face="output") == pytest.approx(led.source_flux, rel=1e-12)  # all TIR
    done = np.flatnonzero(seg["end"] == E_ABSORBED)
    opl = seg["optical_path"][done][np.argsort(seg["source_ray"][done])]
    np.testing.assert_allclose(opl, n1 * (length - x0) / np.cos(phi), rtol=1e-12)
    assert opl[0] == pytest.approx(n1 * (length - x0), rel=1e-12)
    assert opl[1] == pytest.approx(n1 ** 2 * (length - x0) / n_clad, rel=1e-8)
