"""Cemented parts: the shared face of samples/cemented-prism-pair.json is one glass-glass interface.

Sources:
- published: Hecht sec. 4.6, Fresnel power reflectance between the two glass indices, per
  polarization, at the angle each ray meets the cemented face; at normal incidence
  ((n1 - n2)/(n1 + n2))^2, about 0.001 for crown 1.5168 / flint 1.62 versus 0.042 for air/crown;
- common practice: cemented (optically bonded) faces have no air gap, so no air medium
  between them.
"""
from pathlib import Path

import numpy as np
import pytest

from raytrace import compile_scene, fresnel, trace
from raytrace.scene_io import load_scene
from raytrace.tracer import B_REFLECTED, E_REFLECTED, E_REFRACTED

SAMPLE = Path(__file__).resolve().parent.parent / "samples" / "cemented-prism-pair.json"


@pytest.fixture(scope="module")
def scene():
    return load_scene(SAMPLE)


def cemented_edges(cs):
    return [e for e in range(cs.n_edges) if cs.detector[e] < 0 and cs.other_part[e] >= 0]


def test_shared_face_is_one_edge_between_the_two_glasses(scene):
    cs = compile_scene(scene)
    crown = cs.medium_names.index("crown prism")
    flint = cs.medium_names.index("flint prism")
    shared = cemented_edges(cs)
    assert len(shared) == 1
    e = shared[0]
    assert {int(cs.med_plus[e]), int(cs.med_minus[e])} == {crown, flint}
    # no second copy of that face facing air: every other boundary edge has the ambient on one side
    # and lies elsewhere
    for other in range(cs.n_edges):
        if other == e or cs.detector[other] >= 0:
            continue
        assert 0 in (int(cs.med_plus[other]), int(cs.med_minus[other]))
        mid = ((cs.x0[other] + cs.x1[other]) / 2, (cs.y0[other] + cs.y1[other]) / 2)
        ex, ey = cs.x1[e] - cs.x0[e], cs.y1[e] - cs.y0[e]
        off_line = abs((mid[0] - cs.x0[e]) * ey - (mid[1] - cs.y0[e]) * ex) / np.hypot(ex, ey)
        assert off_line > 1e-6
    # the normal points to med_plus: on the flint side here, the flint prism lies right of the edge
    nx, ny = ey / np.hypot(ex, ey), -ex / np.hypot(ex, ey)
    probe = (cs.x0[e] + ex / 2 + 0.1 * nx, cs.y0[e] + ey / 2 + 0.1 * ny)
    flint_part = scene.part("flint prism").to_shapely(1e-6)
    import shapely
    plus_is_flint = flint_part.contains(shapely.Point(probe))
    assert (int(cs.med_plus[e]) == flint) == plus_is_flint


def test_reflection_at_cemented_face_is_glass_glass_fresnel(scene):
    """Every ray meeting the cemented face reflects (fs Rs + fp Rp) with R from Hecht 4.6 between the
    two glass indices at its own wavelength and angle (1e-12 relative); on the beam's first pass
    that is under 5% of what the face would reflect with an air gap."""
    result = trace(scene, record="all", track_paths=False)
    cs = result.compiled
    seg = result.segments
    e = cemented_edges(cs)[0]
    hit = np.flatnonzero((seg["end_edge"] == e) & np.isin(seg["end"], (E_REFLECTED, E_REFRACTED)))
    assert len(hit) >= 100
    ex, ey = cs.x1[e] - cs.x0[e], cs.y1[e] - cs.y0[e]
    L = np.hypot(ex, ey)
    nx, ny = ey / L, -ex / L
    cos_i = np.abs(seg["dx"][hit] * nx + seg["dy"][hit] * ny)
    med_from = seg["medium"][hit]
    med_to = np.where(med_from == cs.med_plus[e], cs.med_minus[e], cs.med_plus[e])
    wl = seg["wavelength_nm"][hit]
    n1 = np.array([cs.media[m].index(w) for m, w in zip(med_from, wl)], dtype=float)
    n2 = np.array([cs.media[m].index(w) for m, w in zip(med_to, wl)], dtype=float)
    assert set(np.unique(np.stack([med_from, med_to]))) == {cs.medium_names.index("crown prism"),
                                                             cs.medium_names.index("flint prism")}
    # Hecht 4.6 written out here from the angles (independent of raytrace.fresnel)
    sin_t = n1 / n2 * np.sqrt(1 - cos_i ** 2)
    assert np.all(sin_t < 1)
    cos_t = np.sqrt(1 - sin_t ** 2)
    Rs = ((n1 * cos_i - n2 * cos_t) / (n1 * cos_i + n2 * cos_t)) ** 2
    Rp = ((n2 * cos_i - n1 * cos_t) / (n2 * cos_i + n1 * cos_t)) ** 2
    expected = seg["flux_s"][hit] * Rs + seg["flux_p"][hit] * Rp
    # the reflected children (those above the flux threshold were kept)
    refl = np.flatnonzero((seg["born"] == B_REFLECTED) & np.isin(seg["parent_id"], seg["ray_id"][hit]))
    got = {int(seg["parent_id"][i]): seg["flux_s"][i] + seg["flux_p"][i] for i in refl}
    threshold = result.settings["flux_floor"]
    checked = 0
    for k, idx in enumerate(hit):
        rid = int(seg["ray_id"][idx])
        if rid in got:
            assert got[rid] == pytest.approx(expected[k], rel=1e-12)
            checked += 1
        else:   # dropped as too faint: then it was below the threshold
            assert expected[k] < threshold * (1.0 / len(np.unique(seg["source_ray"]))) * 1.0000001
    assert checked >= 100
    # far below what the same face would reflect with an air gap (glass n1 to air at the same
    # angle, Hecht 4.6; total reflection, R = 1, beyond the critical angle, Hecht 4.7)
    sin_air = n1 * np.sqrt(1 - cos_i ** 2)
    ct_air = np.sqrt(np.clip(1 - sin_air ** 2, 0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        Rs_air = np.where(sin_air < 1, ((n1 * cos_i - ct_air) / (n1 * cos_i + ct_air)) ** 2, 1.0)
        Rp_air = np.where(sin_air < 1, ((cos_i - n1 * ct_air) / (cos_i + n1 * ct_air)) ** 2, 1.0)
    # (for the beam's first pass; faint high-order rays graze the face at ~79 deg, where even a
    # glass-glass interface reflects strongly)
    first = seg["generation"][hit] == 1
    assert first.sum() == len(np.unique(seg["source_ray"]))
    assert np.all(0.5 * (Rs + Rp)[first] < 0.05 * 0.5 * (Rs_air + Rp_air)[first])


def test_normal_incidence_values():
    """published: Hecht 4.6 normal incidence: crown 1.5168 / flint 1.62 about 0.0011; air/crown 0.042."""
    Rs, _, _ = fresnel.fresnel_power(1.5168, 1.62, 1.0)
    assert float(Rs) == pytest.approx(((1.62 - 1.5168) / (1.62 + 1.5168)) ** 2, rel=1e-14)
    assert float(Rs) == pytest.approx(0.00108, abs=1e-5)
    Ra, _, _ = fresnel.fresnel_power(1.0, 1.5168, 1.0)
    assert float(Ra) == pytest.approx(0.0422, abs=1e-4)
