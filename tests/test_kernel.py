"""The compiled kernel gives the numpy reference's results, and the compiled physics the
published values.

common practice: a compiled kernel must change how fast the tracer runs, never what it computes.
So every sample, in both modes, and random scenes of every kind (tests/test_reliability_scenes.py)
are traced with both kernels and compared: ledger bins, the ray table, detector records, path
tallies and counters are equal: integers exactly, floats to 1e-12 relative, because bulk
absorption (exp) and detector angles (atan2, compared to 1e-12 degrees) use a different maths
library; on the light pipe and the window the ledger and ray table are the same bits.  The compiled Fresnel step is also
checked against published values directly (Hecht, Optics, 5th ed., sec. 4.6-4.7).
"""
from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from raytrace import kernel, trace
from raytrace.errors import RaytraceError
from raytrace.kernel_step import dielectric
from raytrace.scene_io import load_scene
from raytrace.geometry import MIRROR, Treatment
from test_closed_enclosures import _enclosure, _start, convex_polygon, rays_in, rectilinear_polygon, star_polygon
from test_reliability_scenes import PROPERTY, scenes

SAMPLES = sorted((Path(__file__).parent.parent / "samples").glob("*.json"))
CLOSE = {"angle_deg": 1e-12}      # detector record fields compared with a tolerance (degrees)
KERNEL_EXAMPLES = min(PROPERTY.max_examples, int(os.environ.get("RAYTRACE_KERNEL_EXAMPLES", "60")))


def both(scene, **kw):
    kw.setdefault("record", "all")
    out = {}
    for name in kernel.KERNELS:
        with kernel.using(name):
            out[name] = trace(scene, **kw)
    return out["numpy"], out["numba"]


def _same(x, y, what, atol=0.0):
    """Integers (edges, media, codes, ids) equal; floats within 1e-12 relative: bulk absorption
    takes exp of another maths library, which may differ in the last bit."""
    x, y = np.asarray(x), np.asarray(y)
    if x.dtype.kind in "fc":
        np.testing.assert_allclose(x, y, rtol=1e-12, atol=atol, err_msg=what)
    else:
        np.testing.assert_array_equal(x, y, err_msg=what)


def assert_same(a, b):
    _same(a.ledger.bins, b.ledger.bins, "ledger")
    _same(a.raw.batch_bins, b.raw.batch_bins, "ledger per sub-batch")
    assert (a.segments is None) == (b.segments is None)      # None: no ray table asked for
    for k in a.segments or {}:
        _same(a.segments[k], b.segments[k], k)
    assert a.raw.hits.keys() == b.raw.hits.keys()
    for k in a.raw.hits:
        _same(a.raw.hits[k], b.raw.hits[k], k, atol=CLOSE.get(k, 0.0))
    assert a.raw.path_flux.keys() == b.raw.path_flux.keys()
    _same(list(a.raw.path_flux.values()), list(b.raw.path_flux.values()), "path flux")
    np.testing.assert_array_equal(a.raw.path_code, b.raw.path_code)
    sa = {k: v for k, v in a.stats.items() if not k.endswith("_s")}
    sb = {k: v for k, v in b.stats.items() if not k.endswith("_s")}
    assert sa == sb


def assert_bitwise(a, b):
    """Where no ray crosses an absorbing medium, the results are the same bits."""
    np.testing.assert_array_equal(a.ledger.bins, b.ledger.bins)
    for k in a.segments:
        np.testing.assert_array_equal(a.segments[k], b.segments[k], err_msg=k)


@pytest.mark.parametrize("mode", ["branching", "monte_carlo"])
@pytest.mark.parametrize("path", SAMPLES, ids=lambda p: p.stem)
def test_samples_same_with_both_kernels(path, mode):
    scene = load_scene(path)
    a, b = both(scene, rays=300, mode=mode, track_paths=True)
    assert a.stats["segments"] > 300
    assert_same(a, b)
    if path.stem in ("light-pipe-90", "oblique-window"):
        assert_bitwise(a, b)


@pytest.mark.parametrize("mode", ["branching", "monte_carlo"])
@pytest.mark.parametrize("stem", ["light-pipe-90", "oblique-window", "microprism-strip", "roof-prism-retroreflector"])
def test_kernels_agree_whichever_streams_are_recorded(stem, mode):
    """The compiled step writes the children's parent rows, events and birth codes only when a
    ray table, the corner rules or path tallies read them (kernel_step.STREAM_*): with neither
    ray table nor path tallies, with either and with both, the ledger and detector records are
    the numpy reference's and the same bits whatever is recorded."""
    path = next(p for p in SAMPLES if p.stem == stem)
    scene = load_scene(path)
    runs = {}
    for record in ("none", "all"):
        for paths in (False, True):
            for name in kernel.KERNELS:
                with kernel.using(name):
                    runs[name, record, paths] = trace(scene, rays=300, mode=mode, record=record,
                                                      track_paths=paths)
    for (name, record, paths), r in runs.items():
        ref = runs["numpy", "none", paths]     # a hit's path is "the source" without path tallies
        _same(r.ledger.bins, ref.ledger.bins, f"ledger {name} {record} {paths}")
        assert r.raw.hits.keys() == ref.raw.hits.keys()
        for k in ref.raw.hits:
            _same(r.raw.hits[k], ref.raw.hits[k], k, atol=CLOSE.get(k, 0.0))
        if name == "numba":
            np.testing.assert_array_equal(r.ledger.bins, runs["numba", "none", False].ledger.bins)
        if paths:
            assert r.raw.path_flux.keys() == runs["numpy", record, True].raw.path_flux.keys()
    assert_same(runs["numpy", "all", True], runs["numba", "all", True])


def test_dispersion_and_binned_hits_same_with_both_kernels():
    """A band of wavelengths (the index table per medium and wavelength) through the cemented
    prism pair, and detector hits binned into histograms instead of kept one by one."""
    from dataclasses import replace

    from raytrace.scene import Spectrum
    scene = load_scene(next(p for p in SAMPLES if "cemented" in p.stem))
    scene.sources = [replace(s, spectrum=Spectrum.band(550.0, 200.0)) for s in scene.sources]
    a, b = both(scene, rays=300, sampling="random")
    assert len(np.unique(a.segments["wavelength_nm"])) > 50
    assert_same(a, b)
    a, b = both(load_scene(SAMPLES[0]), rays=300, hits="histogram")
    np.testing.assert_array_equal(a.ledger.bins, b.ledger.bins)
    for name, h in a.raw.histograms.items():
        for k in ("flux_s", "flux_p", "batch_flux", "accepted_batch"):
            np.testing.assert_array_equal(h[k], b.raw.histograms[name][k])


@settings(PROPERTY, max_examples=KERNEL_EXAMPLES)
@given(scene=scenes(max_groups=2))
def test_random_scenes_same_with_both_kernels(scene):
    for mode in ("branching", "monte_carlo"):
        a, b = both(scene, mode=mode, sampling="random", track_paths=True)
        assert_same(a, b)


def _fresnel(n1, n2, theta_deg):
    """The compiled dielectric step for a ray in n1 meeting n2 at theta from the normal."""
    th = math.radians(theta_deg)
    n_flat = np.array([n1, n2])
    # the face's normal points to the +side (medium 0): the ray comes from there, travelling down
    return dielectric(math.sin(th), -math.cos(th), 0.0, 1.0, 0, 1, 0, 0, 1, n_flat, False)


def test_compiled_fresnel_matches_published_values():
    # published: Hecht, Optics, sec. 4.6: at normal incidence R = ((n1 - n2) / (n1 + n2))^2,
    # 0.04 for air to n = 1.5
    *_, tir, Rs, Rp, rx, ry, tx, ty = _fresnel(1.0, 1.5, 0.0)
    assert not tir and Rs == pytest.approx(0.04, abs=1e-15) and Rp == pytest.approx(0.04, abs=1e-15)
    # Brewster's angle tan(tB) = n2 / n1: R_p vanishes, R_s = 0.1479 (Hecht fig. 4.49 values)
    _, _, _, tir, Rs, Rp, *_ = _fresnel(1.0, 1.5, math.degrees(math.atan(1.5)))
    assert Rp == pytest.approx(0.0, abs=1e-15)
    assert Rs == pytest.approx(((1.0 - 1.5 ** 2) / (1.0 + 1.5 ** 2)) ** 2, rel=1e-12)
    # Snell (sec. 4.4): n1 sin(t1) = n2 sin(t2) for the transmitted direction
    *_, tx, ty = _fresnel(1.0, 1.5, 30.0)
    assert 1.5 * abs(tx) == pytest.approx(math.sin(math.radians(30.0)), rel=1e-14)
    # critical angle (sec. 4.7): asin(1 / 1.5) = 41.81 deg from the glass side
    crit = math.degrees(math.asin(1 / 1.5))
    assert not _fresnel(1.5, 1.0, crit - 0.01)[3]
    _, _, _, tir, Rs, Rp, *_ = _fresnel(1.5, 1.0, crit + 0.01)
    assert tir and Rs == 1.0 and Rp == 1.0


def test_unknown_kernel_is_a_clear_error(monkeypatch):
    monkeypatch.setenv(kernel.ENV, "fortran")
    with pytest.raises(RaytraceError, match="RAYTRACE_KERNEL: expected one of numba, numpy, found 'fortran'"):
        kernel.selected()
    with pytest.raises(RaytraceError, match="kernel: expected one of"):
        kernel.use("fortran")


def test_kernel_chosen_by_environment(monkeypatch):
    monkeypatch.setenv(kernel.ENV, "numpy")
    assert kernel.selected() == "numpy" and not kernel.compiled()
    monkeypatch.setenv(kernel.ENV, "Numba ")
    assert kernel.selected() == "numba"


def test_cache_goes_to_a_temporary_folder_where_the_package_is_read_only(monkeypatch, tmp_path):
    """numba caches beside the source; a read-only install must not stop the kernel."""
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)

    def refuse(self, *a, **k):
        raise PermissionError("read-only file system")
    monkeypatch.setattr(Path, "mkdir", refuse)
    kernel._prepare_cache_dir()
    assert os.environ["NUMBA_CACHE_DIR"].endswith("raytrace-numba-cache")


@settings(PROPERTY, max_examples=min(KERNEL_EXAMPLES, 40))
@given(data=st.data(), shape=st.sampled_from(("convex", "star", "rectilinear")),
       treatment=st.sampled_from(("mirror", "glass")))
def test_corner_rays_same_with_both_kernels(data, shape, treatment):
    """Rays exactly through, or a hair off, the vertices of closed mirror and glass enclosures
    (tests/test_closed_enclosures.py): the corner rules run on the compiled path too."""
    points = {"convex": lambda: data.draw(convex_polygon()), "star": lambda: data.draw(star_polygon()),
              "rectilinear": lambda: data.draw(rectilinear_polygon())[0]}[shape]()
    scene = (_enclosure(points, "cavity", Treatment(MIRROR, 0.95), cavity=1.0) if treatment == "mirror"
             else _enclosure(points, "glass", Treatment(), glass=1.5))
    rays = data.draw(rays_in(points))
    for mode in ("branching", "monte_carlo"):
        a, b = both(scene, start=_start(rays), mode=mode)
        assert_same(a, b)
        # without a ray table the corner rules alone ask the compiled step for the parent rows
        a, b = both(scene, start=_start(rays), mode=mode, record="none", track_paths=False)
        assert_same(a, b)


@pytest.mark.parametrize("mode", ["branching", "monte_carlo"])
def test_a_monitor_detector_same_with_both_kernels_whatever_is_recorded(mode):
    """No sample has a monitoring detector, yet it is the only case where a child's last edge
    (the one its escape is booked to) differs from its start edge, and the compiled step then
    writes a last-edge row it otherwise leaves out (kernel_step.STREAM_LAST).  A monitor across
    the light pipe's straight entry section, most rays crossing it: with and without ray table
    and path tallies, the ledger (escapes per face included), the detector records and the
    counters are the numpy reference's."""
    from raytrace.scene import Detector
    scene = load_scene(next(p for p in SAMPLES if p.stem == "light-pipe-90"))
    scene.detectors = list(scene.detectors) + [Detector("monitor", (5.0, -2.5), (5.0, 2.5), absorbing=False)]
    for record, paths in (("none", False), ("none", True), ("all", False), ("all", True)):
        a, b = both(scene, rays=300, mode=mode, record=record, track_paths=paths)
        assert a.stats["segments"] > 600
        assert np.count_nonzero(a.raw.hits["detector"] == 1) > 200      # the monitor: most rays
        assert_same(a, b)
