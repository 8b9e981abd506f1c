"""A whole trace through a thick plane-parallel window, against published and reference values.

The window is traced with full branching and a very low flux threshold, so the tree of internal
reflections is followed until what is left is below 1e-15 of each source ray; that remainder is
booked as truncated and bounds how far the detector totals can be from the infinite sums.

Sources:
- published: M. Born & E. Wolf, Principles of Optics, incoherent plate: summing the internal
  reflections with R per face gives T = (1-R)^2 / (1-R^2) = (1-R)/(1+R), per polarization;
  with bulk internal transmittance tau per pass, T = (1-R)^2 tau / (1 - R^2 tau^2)
  (same summation; Beer-Lambert tau = exp(-alpha L), any optics handbook);
- reference library: tmm.inc_tmm(pol, [1, n, 1], [inf, d, inf], ['i', 'i', 'i'], theta, lam)['T'].
"""
import math
from dataclasses import replace

import numpy as np
import pytest

from conftest import make_scene, shaped_part
from raytrace import trace
from raytrace.geometry import ANTI_REFLECTION, MIRROR, Treatment
from raytrace.materials import ConstantIndex
from raytrace.scene import Detector, Source
from raytrace.tracer import B_MIRROR

tmm = pytest.importorskip("tmm")

N_GLASS = 1.5
THICKNESS = 2.0         # mm
WAVELENGTH_NM = 550.0
THRESHOLD = 1e-15


def window_scene(angle_deg: float, polarization: str, n: float = N_GLASS, alpha_per_mm: float = 0.0,
                 thickness: float = THICKNESS):
    """Window from x = 0 to THICKNESS, 600 mm tall so no internal ray reaches its top edge; a beam
    from the left at `angle_deg` to the normal; absorbing detectors on both sides."""
    glass = ConstantIndex("slab", n=n, absorption_per_mm=alpha_per_mm)
    part = shaped_part("window", "slab", "window", position=(0.0, 0.0), thickness=thickness, height=600.0)
    beam = Source("beam", kind="beam", position=(-5.0, -200.0), direction_deg=angle_deg, width=0.5,
                  polarization=polarization, sampling="even")
    beam = _with_line(beam)
    detectors = [Detector("transmitted", (thickness + 20.0, -2000.0), (thickness + 20.0, 2000.0)),
                 Detector("reflected", (-20.0, 2000.0), (-20.0, -2000.0))]
    return make_scene([part], [beam], detectors, materials={"slab": glass},
                      rays=4, flux_floor=THRESHOLD, max_generations=500)


def _with_line(src: Source) -> Source:
    from raytrace.scene import Spectrum
    return replace(src, spectrum=Spectrum.line(WAVELENGTH_NM))


def traced(angle_deg, polarization, **kw):
    result = trace(window_scene(angle_deg, polarization, **kw))
    led = result.ledger
    T = led.flux("detector", detector="transmitted")
    R = led.flux("detector", detector="reflected")
    truncated = led.flux("truncated")
    other = led.source_flux - T - R - truncated - led.flux("absorbed")
    # nothing may leave any other way: the window is tall enough to hold every bounce
    assert abs(other) < 1e-12 * led.source_flux, [b for b in led.buckets]
    return T / led.source_flux, R / led.source_flux, truncated / led.source_flux, led


@pytest.mark.parametrize("polarization", ["s", "p"])
def test_normal_incidence_transmittance_is_one_minus_r_over_one_plus_r(polarization):
    """published: Born & Wolf incoherent plate, T = (1-R)/(1+R), R = ((n-1)/(n+1))^2 (Hecht 4.6);
    n = 1.5: 0.923077 (references.md).  Tolerance: the truncated remainder plus 1e-13."""
    T, R, trunc, _ = traced(0.0, polarization)
    r = ((N_GLASS - 1) / (N_GLASS + 1)) ** 2
    expected_T = (1 - r) / (1 + r)
    assert trunc < 1e-14
    assert abs(T - expected_T) <= trunc + 1e-13
    assert abs(R - 2 * r / (1 + r)) <= trunc + 1e-13
    assert T == pytest.approx(0.92308, abs=5e-6)


ANGLES = (10.0, 30.0, 45.0, 56.31, 70.0, 80.0)


@pytest.mark.parametrize("polarization", ["s", "p"])
@pytest.mark.parametrize("angle", ANGLES)
def test_oblique_window_matches_tmm_incoherent(angle, polarization):
    """reference library: tmm.inc_tmm(pol, [1, 1.5, 1], [inf, 2, inf], ['i','i','i'], theta, 550e-6)
    ['T'] and ['R'] (lengths in mm).  Tolerance: truncated remainder + 1e-12."""
    T, R, trunc, _ = traced(angle, polarization)
    ref = tmm.inc_tmm(polarization, [1.0, N_GLASS, 1.0], [np.inf, THICKNESS, np.inf], ["i", "i", "i"],
                      math.radians(angle), WAVELENGTH_NM * 1e-6)
    assert trunc < 1e-13
    assert abs(T - ref["T"]) <= trunc + 1e-12
    assert abs(R - ref["R"]) <= trunc + 1e-12


ALPHA = 0.2     # per mm: internal transmittance exp(-0.4) = 0.67 per normal pass


@pytest.mark.parametrize("polarization", ["s", "p"])
def test_absorbing_window_normal_incidence_closed_form(polarization):
    """published: Born & Wolf incoherent plate with internal transmittance tau = exp(-alpha d)
    (Beer-Lambert): T = (1-R)^2 tau / (1 - R^2 tau^2), R_total = R + (1-R)^2 R tau^2/(1 - R^2 tau^2).
    The rest is absorbed in the bulk.  Tolerance: truncated remainder + 1e-13."""
    T, Rt, trunc, led = traced(0.0, polarization, alpha_per_mm=ALPHA)
    r = ((N_GLASS - 1) / (N_GLASS + 1)) ** 2
    tau = math.exp(-ALPHA * THICKNESS)
    expected_T = (1 - r) ** 2 * tau / (1 - r * r * tau * tau)
    expected_R = r + (1 - r) ** 2 * r * tau * tau / (1 - r * r * tau * tau)
    assert abs(T - expected_T) <= trunc + 1e-13
    assert abs(Rt - expected_R) <= trunc + 1e-13
    absorbed = led.flux("absorbed", part="window", face="bulk") / led.source_flux
    assert abs(absorbed - (1 - expected_T - expected_R)) <= trunc + 1e-13


@pytest.mark.parametrize("polarization", ["s", "p"])
@pytest.mark.parametrize("angle", (0.0, 30.0, 60.0, 80.0))
def test_absorbing_window_matches_tmm_incoherent(angle, polarization):
    """reference library: tmm.inc_tmm(pol, [1, n + i k, 1], [inf, d, inf], ['i','i','i'], theta, lam).

    Units: tmm takes lengths in any one unit; here mm, so lam = 550e-6 mm and the extinction
    coefficient is k = alpha lam / (4 pi) with alpha per mm (intensity decays as
    exp(-4 pi k z / lam) = exp(-alpha z)); k = 8.75e-6 here.

    Path length: tmm's incoherent layer passes P = exp(-4 pi d Im(n~ cos t~) / lam), with the
    complex angle t~ from n0 sin t0 = n~ sin t~.  To first order in k, Im(n~ cos t~) = k / cos t,
    so P = exp(-alpha d / cos t): the slant path d / cos t of the refracted ray, the same length
    the tracer's rays travel inside the slab (a hand formula using d instead would be ~5% off
    at 60 deg; the closed form below checks the slant path directly).

    Model gap: the tracer uses the real index for Fresnel and alpha for the bulk; tmm uses the
    complex index throughout.  Fresnel |r|^2 and tmm's T_from_t change with k only at order
    k^2 (the first derivative is the real part of i times a real number, zero below the critical
    angle), and so does Im(n~ cos t~) - k / cos t.  So at 550 nm the two may differ by up to
    k^2 = 7.7e-11 (seen: 6e-12), and with k made 100 times smaller (the same alpha given with
    lam / 100) the gap must fall below 1e-12, which shows the tracer is the k -> 0 limit of tmm.
    """
    T, R, trunc, _ = traced(angle, polarization, alpha_per_mm=ALPHA)
    for lam_mm, gap in ((WAVELENGTH_NM * 1e-6, None), (WAVELENGTH_NM * 1e-8, 0.0)):
        k = ALPHA * lam_mm / (4 * math.pi)
        gap = k * k if gap is None else gap
        ref = tmm.inc_tmm(polarization, [1.0, N_GLASS + 1j * k, 1.0], [np.inf, THICKNESS, np.inf],
                          ["i", "i", "i"], math.radians(angle), lam_mm)
        assert abs(T - ref["T"]) <= trunc + 1e-12 + gap, lam_mm
        assert abs(R - ref["R"]) <= trunc + 1e-12 + gap, lam_mm
    # and the slant path: the single-pass transmittance tmm uses is exp(-alpha d / cos t)
    cos_t = math.sqrt(1 - (math.sin(math.radians(angle)) / N_GLASS) ** 2)
    single_pass = math.exp(-ALPHA * THICKNESS / cos_t)
    r_face = _face_R(angle, polarization)
    closed = (1 - r_face) ** 2 * single_pass / (1 - (r_face * single_pass) ** 2)
    assert abs(T - closed) <= trunc + 1e-12


def _face_R(angle_deg, polarization):
    """published: Hecht sec. 4.6, one air-glass face."""
    ti = math.radians(angle_deg)
    tt = math.asin(math.sin(ti) / N_GLASS)
    ci, ct = math.cos(ti), math.cos(tt)
    if polarization == "s":
        r = (ci - N_GLASS * ct) / (ci + N_GLASS * ct)
    else:
        r = (N_GLASS * ci - ct) / (N_GLASS * ci + ct)
    return r * r


def test_unpolarized_is_mean_of_s_and_p():
    """common practice: unpolarized light is an equal incoherent mix of s and p, so T is their mean
    (reference library: tmm.inc_tmm for each)."""
    T, _, trunc, _ = traced(60.0, "unpolarized")
    ref = [tmm.inc_tmm(p, [1.0, N_GLASS, 1.0], [np.inf, THICKNESS, np.inf], ["i", "i", "i"],
                       math.radians(60.0), WAVELENGTH_NM * 1e-6)["T"] for p in "sp"]
    assert abs(T - 0.5 * (ref[0] + ref[1])) <= trunc + 1e-12


def _window_with_faces(treatment, material, angle_deg=0.0, polarization="unpolarized", thickness=THICKNESS):
    scene = window_scene(angle_deg, polarization, thickness=thickness)
    part = scene.parts[0]
    loop = part.outer
    for i, e in enumerate(loop.edges):
        if e.face in ("front", "back"):
            loop = loop.with_edge(i, treatment=treatment)
    scene.parts[0] = replace(part, outer=loop, material=material.name)
    scene.materials[material.name] = material
    return scene


@pytest.mark.parametrize("angle", [0.0, 40.0, 75.0])
def test_ideal_anti_reflection_faces_transmit_everything(angle):
    """common practice: an ideal anti-reflection coating has R = 0 (below the critical angle), so
    a clear window with both faces coated transmits all the flux, any angle, within 1e-12."""
    scene = _window_with_faces(Treatment(ANTI_REFLECTION), ConstantIndex("coated", n=N_GLASS), angle)
    led = trace(scene).ledger
    assert led.flux("detector", detector="transmitted") / led.source_flux == pytest.approx(1.0, abs=1e-12)
    assert led.flux("detector", detector="reflected") == 0.0


@pytest.mark.parametrize("tau,thickness", [(0.9, 10.0), (0.5, 2.0)])
def test_internal_transmittance_through_coated_window_is_beer_lambert(tau, thickness):
    """published: Beer-Lambert law (references.md): a material given by internal transmittance tau
    over thickness d has alpha = -ln(tau)/d; a window of that same thickness with ideal AR faces
    passes exactly tau at normal incidence (1e-12) and tau^(1/cos t) at an angle, t inside."""
    glass = ConstantIndex("filter", n=N_GLASS, transmittance_spec=(tau, thickness))
    for angle in (0.0, 50.0):
        scene = _window_with_faces(Treatment(ANTI_REFLECTION), glass, angle, thickness=thickness)
        led = trace(scene).ledger
        cos_t = math.sqrt(1 - (math.sin(math.radians(angle)) / N_GLASS) ** 2)
        T = led.flux("detector", detector="transmitted") / led.source_flux
        assert T == pytest.approx(tau ** (1 / cos_t), abs=1e-12)
        assert led.flux("absorbed", part="window", face="bulk") / led.source_flux == pytest.approx(1 - T, abs=1e-12)


@pytest.mark.parametrize("reflectance", [1.0, 0.9, 0.0])
def test_mirror_face_reflects_its_reflectance_and_absorbs_the_rest(reflectance):
    """common practice: a mirror of reflectance rho reflects rho of the flux (law of reflection,
    Hecht sec. 4.3: angle out = angle in) and the rest is absorbed at that face; 1e-12."""
    scene = _window_with_faces(Treatment(MIRROR, reflectance), ConstantIndex("metal", n=N_GLASS), 30.0)
    result = trace(scene, record="all")
    led = result.ledger
    assert led.flux("detector", detector="reflected") / led.source_flux == pytest.approx(reflectance, abs=1e-12)
    assert led.flux("absorbed", part="window", face="front") / led.source_flux == pytest.approx(1 - reflectance, abs=1e-12)
    seg = result.segments
    if reflectance > 0:
        refl = seg["born"] == B_MIRROR
        src = seg["generation"] == 0
        np.testing.assert_allclose(seg["dx"][refl], -seg["dx"][src][: refl.sum()], atol=1e-15)
        np.testing.assert_allclose(seg["dy"][refl], seg["dy"][src][: refl.sum()], atol=1e-15)
