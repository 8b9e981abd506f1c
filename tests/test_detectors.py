"""Detector figures: efficiency, irradiance and angular profiles, uniformity, arrival times."""
from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np
import pytest

import raytrace
from raytrace import shapes
from raytrace.detectors import C_MM_PER_PS, PROFILE_HEADER, detector_report, detector_reports, profiles_csv
from raytrace.geometry import Part, ShapeSpec
from raytrace.materials import ConstantIndex
from raytrace.scene import Detector, Scene, Source, TraceSettings
from raytrace.sources import StartRays

VACUUM = "n1"


def scene_of(parts=(), sources=(), detectors=(), materials=None, ambient_n=1.0, **settings):
    mats = {VACUUM: ConstantIndex(VACUUM, n=ambient_n)}
    for k, n in (materials or {}).items():
        mats[k] = ConstantIndex(k, n=n)
    return Scene(parts=list(parts), sources=list(sources), detectors=list(detectors), materials=mats,
                 ambient=VACUUM, settings=TraceSettings(**settings))


def rect_part(name, material, width, height, position=(0.0, 0.0)):
    spec = ShapeSpec("rectangle", {"width": width, "height": height}, position, 0.0)
    return Part(name, material, shapes.build(spec), shape=spec)


def test_lambertian_point_source_fraction_on_a_flat_detector():
    """common practice: a 2D Lambertian source puts sin t of its flux within +-t; a flat
    detector of half-length a at distance d subtends t = atan(a / d).  Random sampling,
    seed 9, N = 40000, tolerance 4 binomial standard deviations."""
    n, a, d = 40000, 7.0, 10.0
    src = Source("pt", kind="point", distribution="lambertian", direction_deg=0.0, sampling="random")
    det = Detector("screen", (d, -a), (d, a))
    r = raytrace.trace(scene_of(sources=[src], detectors=[det], rays=n, seed=9))
    p = math.sin(math.atan(a / d))
    rep = detector_report(r, "screen")
    assert rep.efficiency == pytest.approx(p, abs=4 * math.sqrt(p * (1 - p) / n))
    assert rep.total_flux == pytest.approx(r.ledger.flux("detector", detector="screen"), rel=1e-12)


def test_point_source_irradiance_profile_bins():
    """common practice (2D inverse distance with obliquity): a source uniform in angle with
    intensity I per radian puts I * (atan(x1/d) - atan(x0/d)) on the detector stretch
    [x0, x1] at distance d.  Even fan of 36001 rays over +-90 deg: each bin's flux within the
    flux of one ray (1/36001 of the total) of the formula."""
    d, half = 5.0, 10.0
    n = 36001
    src = Source("pt", kind="point", half_angle_deg=90.0, sampling="even")
    det = Detector("screen", (d, -half), (d, half), bins=20, central_fraction=0.5)
    r = raytrace.trace(scene_of(sources=[src], detectors=[det], rays=n))
    rep = detector_report(r, "screen")
    intensity = 1.0 / math.pi
    y = rep.irradiance.edges - half          # detector runs from y = -10 up to y = +10
    expected = intensity * np.diff(np.arctan(y / d))
    assert np.allclose(rep.irradiance.flux, expected, atol=1.0 / n)
    assert np.allclose(rep.irradiance.density, rep.irradiance.flux / 1.0)   # 1 mm bins
    assert rep.irradiance.flux.sum() == pytest.approx(rep.total_flux, rel=1e-12)
    # uniformity over the central half: 10 bins of 1 mm from y = -5 to 5
    yc = np.linspace(-5.0, 5.0, 11)
    central = intensity * np.diff(np.arctan(yc / d))
    assert rep.uniformity.bins == 10
    assert rep.uniformity.min_over_mean == pytest.approx(central.min() / central.mean(), abs=2e-3)
    assert rep.uniformity.max_over_mean == pytest.approx(central.max() / central.mean(), abs=2e-3)
    assert rep.centroid_mm == pytest.approx(half, abs=1e-3)      # symmetric about the middle


def test_collimated_beam_profile_uniformity_and_angle():
    """A beam 10 mm wide (even sampling, 1000 rays) hitting a 20 mm detector at 30 degrees from
    its normal, travelling toward the detector's end point: all flux in the angle bin around
    +30 deg, flux per mm = beam flux / footprint where the beam lands (footprint =
    width / cos 30, common practice), and a flat profile inside it."""
    tilt = 30.0
    src = Source("beam", kind="beam", position=(0.0, 0.0), direction_deg=tilt, width=10.0 * math.cos(math.radians(tilt)))
    det = Detector("screen", (20.0, 20.0 * math.tan(math.radians(tilt)) - 10.0),
                   (20.0, 20.0 * math.tan(math.radians(tilt)) + 10.0), bins=40, angle_bins=36,
                   central_fraction=0.4)
    r = raytrace.trace(scene_of(sources=[src], detectors=[det], rays=1000))
    rep = detector_report(r, "screen")
    assert rep.efficiency == pytest.approx(1.0, abs=1e-12)
    assert rep.mean_angle_deg == pytest.approx(tilt, abs=1e-9)
    k = int(np.argmax(rep.angular.flux))
    assert rep.angular.edges[k] <= tilt <= rep.angular.edges[k + 1]
    assert rep.angular.flux[k] == pytest.approx(1.0, abs=1e-12)
    # footprint: 10 mm centred on the detector; 0.5 mm bins, 50 rays in each inner bin
    inner = (rep.irradiance.edges[:-1] >= 5.0) & (rep.irradiance.edges[1:] <= 15.0)
    assert np.allclose(rep.irradiance.density[inner], 1.0 / 10.0, rtol=1e-9)
    assert np.all(rep.irradiance.flux[~inner] == 0.0)
    assert rep.uniformity.min_over_mean == pytest.approx(1.0, abs=1e-9)
    assert rep.uniformity.max_over_mean == pytest.approx(1.0, abs=1e-9)
    assert rep.flux_s == pytest.approx(0.5) and rep.flux_p == pytest.approx(0.5)


def test_step_index_guide_multipath_time_spread():
    """published: G. Keiser, Optical Fiber Communications (multipath / modal delay of a
    step-index guide): the axial ray arrives after L n1 / c, the ray at the critical angle
    after L n1^2 / (c n2); the spread is their difference.  A core of n1 = 1.50 in a
    lower-index ambient n2 = 1.46, L = 100 mm, with a detector inside the core."""
    n1, n2, L, w = 1.50, 1.46, 100.0, 1.0
    core = rect_part("core", "core glass", L + 2.0, w, position=(L / 2, 0.0))
    det = Detector("end", (L, -0.49 * w), (L, 0.49 * w))
    scene = scene_of(parts=[core], detectors=[det], materials={"core glass": n1}, ambient_n=n2,
                     sources=[Source("launch", kind="point")])
    theta = math.acos(n2 / n1) * (1 - 1e-9)    # just inside the critical angle: guided by TIR
    ang = np.array([0.0, theta, -theta])
    z = np.zeros(3)
    start = StartRays(z.copy(), z.copy(), np.cos(ang), np.sin(ang), np.full(3, 850.0),
                      np.full(3, 0.5), np.full(3, 0.5), np.zeros(3, dtype=np.int64))
    r = raytrace.trace(scene, start=start, flux_floor=0.0)
    rep = detector_report(r, "end")
    assert rep.efficiency == pytest.approx(1.0, abs=1e-12)     # TIR is lossless
    c = C_MM_PER_PS
    assert rep.times.first_ps == pytest.approx(L * n1 / c, rel=1e-9)
    assert rep.times.last_ps == pytest.approx(L * n1 ** 2 / (c * n2), rel=1e-9)
    assert rep.times.spread_ps == pytest.approx(L * n1 / c * (n1 / n2 - 1), rel=1e-6)
    assert c == 0.299792458     # published: SI definition of the metre, c = 299 792 458 m/s


def test_monitoring_detector_lets_rays_pass_and_both_record():
    src = Source("beam", kind="beam", width=2.0)
    first = Detector("monitor", (5.0, -3.0), (5.0, 3.0), absorbing=False)
    last = Detector("sensor", (10.0, -3.0), (10.0, 3.0))
    r = raytrace.trace(scene_of(sources=[src], detectors=[first, last], rays=50))
    reps = {d.name: d for d in detector_reports(r)}
    assert reps["monitor"].total_flux == pytest.approx(1.0)
    assert reps["sensor"].total_flux == pytest.approx(1.0)
    assert r.ledger.efficiency("sensor") == pytest.approx(1.0)
    assert reps["sensor"].times.first_ps == pytest.approx(10.0 / C_MM_PER_PS, rel=1e-12)


def test_empty_detector_reports_zero_and_nan():
    src = Source("beam", kind="beam", direction_deg=180.0)
    det = Detector("behind", (5.0, -1.0), (5.0, 1.0))
    rep = detector_report(raytrace.trace(scene_of(sources=[src], detectors=[det], rays=10)), "behind")
    assert rep.total_flux == 0.0 and rep.hits == 0 and rep.efficiency == 0.0
    assert math.isnan(rep.uniformity.min_over_mean) and math.isnan(rep.times.spread_ps)
    assert "behind: 0" in rep.summary_line()


def test_profiles_csv_reads_back():
    src = Source("beam", kind="beam", width=2.0)
    det = Detector("sensor, left", (10.0, -3.0), (10.0, 3.0), bins=6, angle_bins=4)
    r = raytrace.trace(scene_of(sources=[src], detectors=[det], rays=40))
    reps = detector_reports(r)
    rows = list(csv.reader(io.StringIO(profiles_csv(reps))))
    assert tuple(rows[0]) == PROFILE_HEADER
    body = rows[1:]
    assert len(body) == 6 + 4
    irr = [row for row in body if row[1] == "irradiance"]
    assert all(row[0] == "sensor, left" for row in body)
    assert [float(row[7]) for row in irr] == reps[0].irradiance.flux.tolist()
    assert sum(float(row[7]) for row in irr) == pytest.approx(1.0)


def test_histogram_hits_give_the_same_profiles_as_kept_hits():
    """Long traces may bin detector hits instead of keeping them; the profiles and totals from
    the bins equal those from the kept hits (same bins), and times are then unknown (nan)."""
    from raytrace.scene_io import load_scene
    from pathlib import Path
    scene = load_scene(Path(__file__).resolve().parent.parent / "samples" / "light-pipe-90.json")
    kept = detector_report(raytrace.trace(scene, rays=400, hits="keep"), "viewer side")
    binned = detector_report(raytrace.trace(scene, rays=400, hits="histogram"), "viewer side")
    assert binned.total_flux == pytest.approx(kept.total_flux, rel=1e-12)
    assert np.allclose(binned.irradiance.flux, kept.irradiance.flux, rtol=1e-12, atol=1e-15)
    assert np.allclose(binned.angular.flux, kept.angular.flux, rtol=1e-12, atol=1e-15)
    assert binned.hits == kept.hits
    assert math.isnan(binned.times.spread_ps) and not math.isnan(kept.times.spread_ps)


# ----------------------------------------------------------------------------- colours apart

def _abbe_index(nd, vd, wl_nm):
    """published: the Abbe number Vd = (nd - 1) / (nF - nC) with the d, F, C lines at 587.56,
    486.13 and 656.27 nm (ISO 7944); a two-term Cauchy law n = A + B / l^2 through nd with that
    nF - nC, written here from the definition (the catalog's own fit is not used)."""
    lf, ld, lc = 0.48613, 0.58756, 0.65627
    b = (nd - 1) / vd / (1 / lf ** 2 - 1 / lc ** 2)
    return nd + b * (1 / (wl_nm / 1000) ** 2 - 1 / ld ** 2)


def _air_index(wl_nm):
    """published: P. E. Ciddor, Appl. Opt. 35, 1566 (1996), eq. (1), standard dry air."""
    s2 = (1000 / wl_nm) ** 2
    return 1 + 5792105e-8 / (238.0185 - s2) + 167917e-8 / (57.362 - s2)


def _refract(d, normal, n1, n2):
    """published: vector form of Snell's law, t = r d + (r c - sqrt(1 - r^2 (1 - c^2))) n with
    c = -n.d, r = n1/n2 (normal against the ray)."""
    d = d / np.linalg.norm(d)
    nrm = normal / np.linalg.norm(normal)
    c = -nrm @ d
    if c < 0:
        nrm, c = -nrm, -c
    r = n1 / n2
    return r * d + (r * c - math.sqrt(1 - r * r * (1 - c * c))) * nrm


def _meet(p, d, a, b):
    """Where the ray p + t d crosses the line through a and b."""
    e = b - a
    t = ((a[0] - p[0]) * e[1] - (a[1] - p[1]) * e[0]) / (d[0] * e[1] - d[1] * e[0])
    return p + t * d


def _by_hand(wl_nm):
    """The beam's central ray through the cemented pair, face by face: crown triangle
    (-10, 0), (10, 0), (0, 10 sqrt 3); flint triangle (0, 10 sqrt 3), (20, 10 sqrt 3), (10, 0)
    (the sample's 60-degree prisms, side 20, the flint turned 180 degrees); screen x = 60 from
    y = -30 upward.  Returns (position along the screen mm, angle of arrival deg)."""
    h = 10 * math.sqrt(3)
    air, crown, flint = _air_index(wl_nm), _abbe_index(1.52, 64.0, wl_nm), _abbe_index(1.62, 36.0, wl_nm)
    p, d = np.array([-20.0, 6.0]), np.array([1.0, 0.0])
    faces = [((-10.0, 0.0), (0.0, h), air, crown), ((10.0, 0.0), (0.0, h), crown, flint),
             ((10.0, 0.0), (20.0, h), flint, air)]
    for a, b, n1, n2 in faces:
        a, b = np.array(a), np.array(b)
        p = _meet(p, d, a, b)
        e = b - a
        d = _refract(d, np.array([-e[1], e[0]]), n1, n2)
    hit = _meet(p, d, np.array([60.0, -30.0]), np.array([60.0, 40.0]))
    return hit[1] + 30.0, math.degrees(math.atan2(d[1], d[0]))


def test_cemented_pair_separates_the_colours_as_snell_says():
    """The bundled cemented crown-flint pair: each colour's centroid and mean angle on the
    screen equal those of the beam's central ray traced by hand with Snell's law.  The beam is
    narrowed to 1e-7 mm, so all its rays are the central ray to within 1e-7 mm (with the full
    1 mm beam the three colours take turns across it, and each colour's rays centre up to a
    ray pitch away from the middle).  flux_floor = 0.1 drops the Fresnel ghosts
    (R ~ 4 %), which land elsewhere; tolerances 1e-6 mm and 1e-7 deg."""
    from dataclasses import replace as dc_replace
    from raytrace.report import detectors_text
    from raytrace.scene_io import load_scene
    scene = load_scene(Path(__file__).resolve().parent.parent / "samples" / "cemented-prism-pair.json")
    scene.sources[0] = dc_replace(scene.sources[0], width=1e-7)
    r = raytrace.trace(scene, flux_floor=0.1)
    rep = detector_report(r, "screen")
    assert [w.wavelength_nm for w in rep.per_wavelength] == [486.13, 587.56, 656.27]
    for w in rep.per_wavelength:
        pos, ang = _by_hand(w.wavelength_nm)
        assert w.centroid_mm == pytest.approx(pos, abs=1e-6)
        # the screen's normal (right of start -> end) points along -x; arrival angles are
        # positive toward the end point, i.e. upward here
        assert w.mean_angle_deg == pytest.approx(ang, abs=1e-7)
        assert w.share == pytest.approx(w.flux / rep.total_flux, rel=1e-12)
    assert sum(w.flux for w in rep.per_wavelength) == pytest.approx(rep.total_flux, rel=1e-12)
    blue, red = _by_hand(486.13)[0], _by_hand(656.27)[0]
    assert rep.centroid_spread_mm == pytest.approx(abs(blue - red), abs=1e-6)
    assert abs(blue - red) > 0.1            # the colours really are apart on this screen
    text = detectors_text(r)
    assert "486.13 nm: " in text and f"centroid {rep.per_wavelength[0].centroid_mm:.3f} mm" in text
    assert f"centroids spread over {abs(blue - red):.3f} mm" in text
    assert rep.to_dict()["per_wavelength"][2]["centroid_mm"] == rep.per_wavelength[2].centroid_mm


def test_no_per_wavelength_figures_for_a_band_or_a_single_line():
    from raytrace.scene import Spectrum
    from raytrace.scene_io import load_scene
    scene = load_scene(Path(__file__).resolve().parent.parent / "samples" / "cemented-prism-pair.json")
    src = scene.sources[0]
    from dataclasses import replace as dc_replace
    scene.sources[0] = dc_replace(src, spectrum=Spectrum.band(587.56, 100.0))
    assert detector_report(raytrace.trace(scene, rays=50), "screen").per_wavelength == []
    scene.sources[0] = dc_replace(src, spectrum=Spectrum.line(587.56))
    rep = detector_report(raytrace.trace(scene, rays=50), "screen")
    assert rep.per_wavelength == [] and rep.to_dict()["per_wavelength"] == []


def test_a_detector_counts_rays_from_both_sides():
    """As the docs say: swapping a detector's start and end changes nothing in the flux; the
    positions are then measured from the other end (s -> L - s), angles change sign, and the
    raw hits' front flag flips (common practice: a reversed segment's right-hand normal is
    the opposite one)."""
    from dataclasses import replace as dc_replace
    from raytrace.scene_io import load_scene
    scene = load_scene(Path(__file__).resolve().parent.parent / "samples" / "cemented-prism-pair.json")
    a = raytrace.trace(scene)
    d = scene.detectors[0]
    scene.detectors[0] = dc_replace(d, start=d.end, end=d.start)
    b = raytrace.trace(scene)
    ha, hb = a.detector("screen"), b.detector("screen")
    assert ha.total > 0.5 and hb.total == pytest.approx(ha.total, rel=1e-12)
    order_a, order_b = np.argsort(ha.position), np.argsort(ha.length - hb.position)
    assert np.allclose(ha.length - hb.position[order_b], ha.position[order_a], atol=1e-9)
    assert np.allclose(hb.angle_deg[order_b], -ha.angle_deg[order_a], atol=1e-9)
    assert a.raw.hits["front"].any() != b.raw.hits["front"].any()
    assert (a.raw.hits["front"] == ~b.raw.hits["front"]).all()
