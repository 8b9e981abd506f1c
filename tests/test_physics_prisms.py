"""2D roof prism (two legs at a right angle) and reversibility of refraction through a prism.

Sources:
- common practice / elementary geometry (references.md): two plane reflections off faces at a
  right angle turn a direction d in the plane into -d, whatever its angle; refraction in and
  out through the same face undoes itself (Snell, Hecht sec. 4.4), so a ray reflected once by
  each leg leaves exactly antiparallel to how it came;
- TIR on both legs at normal entry: the ray meets each leg at 45 deg, so it needs
  sin 45 >= 1/n, i.e. n >= sqrt 2 (critical angle, Hecht sec. 4.7);
- reversibility (Helmholtz; Hecht sec. 4.4, Snell's law is symmetric in the two media): a
  refracted path traced backwards from its end retraces itself.
"""
import math

import numpy as np
import pytest

from conftest import make_scene, shaped_part
from raytrace import trace
from raytrace.scene import Source
from raytrace.sources import StartRays
from raytrace.tracer import B_REFRACTED, B_REFLECTED, B_SOURCE, B_TIR, E_ESCAPED, E_REFRACTED

LEG = 20.0
HALF = LEG / math.sqrt(2.0)     # half the hypotenuse, and the apex height


def roof_scene(n: float, entry_deg: float, rays: int = 200):
    """Roof prism with its hypotenuse on y = 0; a beam from below aimed at the hypotenuse centre,
    `entry_deg` from the hypotenuse normal."""
    part = shaped_part("roof", "glass", "roof_prism", leg=LEG)
    direction = 90.0 + entry_deg
    ux, uy = math.cos(math.radians(direction)), math.sin(math.radians(direction))
    beam = Source("beam", kind="beam", position=(-6.0 * ux, -6.0 * uy), direction_deg=direction,
                  width=0.8 * HALF, sampling="even")
    return make_scene([part], [beam], materials={"glass": n}, rays=rays, flux_floor=1e-9), (ux, uy)


def retro_exits(result):
    """Rows of exit segments whose path was: in through the hypotenuse, one reflection at each
    leg, out through the hypotenuse.  Returns (row indices, source rows)."""
    seg = result.segments
    cs = result.compiled
    face = {e: cs.face_labels[cs.face[e]][1] for e in range(cs.n_edges) if cs.detector[e] < 0}
    face_of = np.array([face.get(int(e), "") if e >= 0 else "" for e in seg["end_edge"]])
    row_of = np.full(int(seg["ray_id"].max()) + 1, -1)
    row_of[seg["ray_id"]] = np.arange(len(seg["ray_id"]))
    # candidates: escaped segments of generation 4 born refracted
    c = np.flatnonzero((seg["generation"] == 4) & (seg["born"] == B_REFRACTED) & (seg["end"] == E_ESCAPED))
    chain = [c]
    for _ in range(4):
        chain.append(row_of[seg["parent_id"][chain[-1]]])
    exit_, g3, g2, g1, g0 = chain
    ok = (face_of[g0] == "hypotenuse") & (seg["end"][g0] == E_REFRACTED) & (seg["born"][g0] == B_SOURCE)
    ok &= (face_of[g3] == "hypotenuse") & (seg["end"][g3] == E_REFRACTED)
    legs = ("left leg", "right leg")
    ok &= np.isin(face_of[g1], legs) & np.isin(face_of[g2], legs) & (face_of[g1] != face_of[g2])
    ok &= np.isin(seg["born"][g2], (B_TIR, B_REFLECTED)) & np.isin(seg["born"][g3], (B_TIR, B_REFLECTED))
    return exit_[ok], g0[ok]


@pytest.mark.parametrize("n", [1.5, 1.3])
def test_roof_prism_returns_antiparallel_over_entry_angles(n):
    """Exit direction = -entry direction within 1e-9 for every ray reflected once by each leg,
    entry angles -30..30 deg (with n = 1.3 the legs reflect only partially: the geometry holds
    for any reflection, TIR or not)."""
    for entry in np.arange(-30.0, 30.1, 5.0):
        scene, (ux, uy) = roof_scene(n, float(entry))
        result = trace(scene, record="all")
        seg = result.segments
        rows, src = retro_exits(result)
        assert len(rows) >= 50, entry        # most of the beam takes this path
        np.testing.assert_allclose(seg["dx"][src], ux, atol=1e-15)
        np.testing.assert_allclose(seg["dx"][rows], -seg["dx"][src], rtol=0, atol=1e-9)
        np.testing.assert_allclose(seg["dy"][rows], -seg["dy"][src], rtol=0, atol=1e-9)


SQRT2 = math.sqrt(2.0)


@pytest.mark.parametrize("rel", [1e-4, 1e-2])
def test_roof_tir_condition_at_normal_entry(rel):
    """n slightly above sqrt 2: no flux leaves through the legs; slightly below: some does."""
    above = trace(roof_scene(SQRT2 * (1 + rel), 0.0)[0]).ledger
    for leg in ("left leg", "right leg"):
        assert above.flux("escaped", part="roof", face=leg) == 0.0
    assert above.flux("escaped", part="roof", face="hypotenuse") / above.source_flux > 1 - 1e-8
    below = trace(roof_scene(SQRT2 * (1 - rel), 0.0)[0]).ledger
    for leg in ("left leg", "right leg"):
        assert below.flux("escaped", part="roof", face=leg) > 0.0


def prism_scene(n=1.6):
    """60 deg prism (base on y = 0), a narrow beam from the left hitting the left face."""
    part = shaped_part("prism", "glass", "prism", apex_angle_deg=60.0, side=20.0)
    beam = Source("beam", kind="beam", position=(-15.0, 5.0), direction_deg=10.0, width=2.0, sampling="even")
    return make_scene([part], [beam], materials={"glass": n}, rays=11, flux_floor=1e-9)


def test_transmitted_ray_traced_backwards_returns_to_start():
    """reversibility (Hecht sec. 4.4): take each ray transmitted through both prism faces, start a
    new ray on its exit line 1 mm outside the exit point with the reversed exit direction, trace
    it, and follow its transmitted-transmitted branch: it must re-enter at the exit point and leave
    the prism at the original entry point along the original start line, reversed, within 1e-9
    (positions in mm, directions as unit vectors).  Starting exactly on the face is a separate
    check below."""
    scene = prism_scene()
    fwd = trace(scene, record="all")
    seg = fwd.segments
    row_of = np.full(int(seg["ray_id"].max()) + 1, -1)
    row_of[seg["ray_id"]] = np.arange(len(seg["ray_id"]))
    # path source -> refracted in -> refracted out -> escaped
    out = np.flatnonzero((seg["generation"] == 2) & (seg["born"] == B_REFRACTED) & (seg["end"] == E_ESCAPED))
    inside = row_of[seg["parent_id"][out]]
    out = out[seg["born"][inside] == B_REFRACTED]
    inside = row_of[seg["parent_id"][out]]
    first = row_of[seg["parent_id"][inside]]
    assert len(out) == 11
    # reversed start rays on the exit lines, 1 mm outside the exit points
    k = len(out)
    sx = seg["x0"][out] + 1.0 * seg["dx"][out]
    sy = seg["y0"][out] + 1.0 * seg["dy"][out]
    start = StartRays(sx, sy, -seg["dx"][out], -seg["dy"][out],
                      np.full(k, 550.0), np.full(k, 0.5), np.full(k, 0.5), np.zeros(k, dtype=np.int64))
    back = trace(scene, start=start, record="all")
    assert back.stats["medium_mismatches"] == 0
    bs = back.segments
    brow = np.full(int(bs["ray_id"].max()) + 1, -1)
    brow[bs["ray_id"]] = np.arange(len(bs["ray_id"]))
    # re-enters exactly where the forward ray left
    bfirst = np.flatnonzero(bs["generation"] == 0)
    np.testing.assert_allclose(bs["x1"][bfirst], seg["x0"][out], rtol=0, atol=1e-9)
    np.testing.assert_allclose(bs["y1"][bfirst], seg["y0"][out], rtol=0, atol=1e-9)
    bout = np.flatnonzero((bs["generation"] == 2) & (bs["born"] == B_REFRACTED) & (bs["end"] == E_ESCAPED))
    bin_ = brow[bs["parent_id"][bout]]
    bout = bout[bs["born"][bin_] == B_REFRACTED]
    assert len(bout) == k
    order = bs["source_ray"][bout]
    bout = bout[np.argsort(order)]
    # leaves antiparallel to the original source direction
    np.testing.assert_allclose(bs["dx"][bout], -seg["dx"][first], rtol=0, atol=1e-9)
    np.testing.assert_allclose(bs["dy"][bout], -seg["dy"][first], rtol=0, atol=1e-9)
    # leaves from the original entry point, and passes through the original start point
    np.testing.assert_allclose(bs["x0"][bout], seg["x0"][inside], rtol=0, atol=1e-9)
    np.testing.assert_allclose(bs["y0"][bout], seg["y0"][inside], rtol=0, atol=1e-9)
    px = seg["x0"][first] - bs["x0"][bout]
    py = seg["y0"][first] - bs["y0"][bout]
    cross = px * bs["dy"][bout] - py * bs["dx"][bout]
    np.testing.assert_allclose(cross, 0.0, rtol=0, atol=1e-9)
    # optical path (sum of n L; the ray table gives it at each segment's end) from the exit
    # point back to the entry point equals the forward one; the 1 mm lead-in is in n = 1
    np.testing.assert_allclose(bs["optical_path"][bout] - 1.0, seg["optical_path"][out] - seg["optical_path"][first],
                               rtol=1e-12)


def test_ray_started_exactly_on_a_face_refracts_there():
    """Snell (Hecht sec. 4.4): a ray starting on the outside of a face, heading in, must refract
    at that face: its first segment is inside the glass, bent by Snell's law."""
    scene = prism_scene()
    # a point on the right face of the 60 deg prism (base y = 0, side 20): from (10, 0) to (0, 17.32)
    px, py = 10.0 - 0.5 * 10.0, 0.5 * 17.320508075688775
    d = (-1.0, 0.0)
    start = StartRays(np.array([px]), np.array([py]), np.array([d[0]]), np.array([d[1]]),
                      np.array([550.0]), np.array([0.5]), np.array([0.5]), np.zeros(1, dtype=np.int64))
    result = trace(scene, start=start, record="all")
    assert result.stats["medium_mismatches"] == 0
    seg = result.segments
    # generation 0 is the 2-eps stub that brings the ray to the face from outside
    stub = np.flatnonzero(seg["generation"] == 0)[0]
    assert seg["medium"][stub] == 0
    assert math.hypot(seg["x1"][stub] - px, seg["y1"][stub] - py) <= 3 * result.compiled.eps
    first = np.flatnonzero((seg["generation"] == 1) & (seg["medium"] == 1))[0]
    # the ray meets the face at 30 deg from its normal; inside, sin t = sin 30 / 1.6
    nx, ny = math.cos(math.radians(30.0)), math.sin(math.radians(30.0))   # outward normal
    cos_in = -(seg["dx"][first] * nx + seg["dy"][first] * ny)
    assert math.sqrt(1 - cos_in ** 2) == pytest.approx(0.5 / 1.6, abs=1e-12)


MALITSON = ((0.6961663, 0.0684043), (0.4079426, 0.1162414), (0.8974794, 9.896161))


def malitson_index(wavelength_nm):
    """published: I. H. Malitson, J. Opt. Soc. Am. 55, 1205 (1965), fused silica, l in um."""
    l2 = (np.asarray(wavelength_nm) / 1000.0) ** 2
    return np.sqrt(1 + sum(b * l2 / (l2 - c * c) for b, c in MALITSON))


def test_dispersing_prism_deviation_per_wavelength():
    """published: Hecht sec. 5.5.1, deviation of a prism of apex angle A at incidence t1:
    delta = t1 + asin(sin A sqrt(n^2 - sin^2 t1) - sin t1 cos A) - A, with n of fused silica at
    the F, d and C lines from Malitson's formula (written out here, independent of the
    catalog).  Whole trace through the catalog's "fused silica"; exit directions within 1e-12 rad.
    Blue deviates most (normal dispersion)."""
    from raytrace.catalog import CATALOG
    from raytrace.scene import Spectrum
    apex, t1 = math.radians(60.0), math.radians(50.0)
    part = shaped_part("prism", "fused silica", "prism", apex_angle_deg=60.0, side=20.0)
    # left face runs from the apex (0, 17.32) to (-10, 0); its inward normal points at -30 deg
    direction = -30.0 + 50.0
    aim = (-5.0, 17.320508075688775 / 2)
    u = (math.cos(math.radians(direction)), math.sin(math.radians(direction)))
    lines = (486.13, 587.56, 656.27)
    beam = Source("beam", kind="beam", position=(aim[0] - 10 * u[0], aim[1] - 10 * u[1]), direction_deg=direction,
                  width=1.0, spectrum=Spectrum(lines, (1.0, 1.0, 1.0)), sampling="even")
    scene = make_scene([part], [beam], materials={"fused silica": CATALOG["fused silica"]}, rays=30)
    seg = trace(scene, record="all").segments
    row_of = np.full(int(seg["ray_id"].max()) + 1, -1)
    row_of[seg["ray_id"]] = np.arange(len(seg["ray_id"]))
    out = np.flatnonzero((seg["generation"] == 2) & (seg["born"] == B_REFRACTED) & (seg["end"] == E_ESCAPED))
    out = out[seg["born"][row_of[seg["parent_id"][out]]] == B_REFRACTED]
    assert len(out) == 30
    n = malitson_index(seg["wavelength_nm"][out])
    expected = t1 + np.arcsin(np.sin(apex) * np.sqrt(n * n - np.sin(t1) ** 2) - np.sin(t1) * np.cos(apex)) - apex
    got = math.radians(direction) - np.arctan2(seg["dy"][out], seg["dx"][out])
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-12)
    by_line = {w: got[seg["wavelength_nm"][out] == w].mean() for w in lines}
    assert by_line[486.13] > by_line[587.56] > by_line[656.27]
