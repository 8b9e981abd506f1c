"""Interface physics of raytrace.fresnel against published formulas and a reference library.

Sources:
- published: E. Hecht, Optics, 5th ed., sec. 4.4 (Snell), 4.6 (Fresnel equations, Brewster
  angle, normal incidence), 4.7 (critical angle);
- reference library: tmm.coh_tmm(pol, [n1, n2], [inf, inf], theta, lam)['R'] (PyPI `tmm`), a
  transfer-matrix code whose single interface reduces to the Fresnel coefficients.
"""
import math

import numpy as np
import pytest

from raytrace import fresnel

tmm = pytest.importorskip("tmm")

INDICES = (1.33, 1.5, 2.0)
ANGLES_DEG = np.concatenate([np.arange(0.0, 89.0, 0.5), np.linspace(89.0, 89.9, 10)])
TOL = 1e-12


def hecht_rs_rp(n1, n2, theta_i):
    """published: Hecht sec. 4.6, written out independently of the engine from the angles:
    r_s = (n1 cos ti - n2 cos tt)/(n1 cos ti + n2 cos tt), r_p = (n2 cos ti - n1 cos tt)/(...),
    with tt from Snell's law n1 sin ti = n2 sin tt (sec. 4.4)."""
    tt = np.arcsin(n1 * np.sin(theta_i) / n2)
    ci, ct = np.cos(theta_i), np.cos(tt)
    rs = (n1 * ci - n2 * ct) / (n1 * ci + n2 * ct)
    rp = (n2 * ci - n1 * ct) / (n2 * ci + n1 * ct)
    return rs * rs, rp * rp


def pairs():
    """Both directions: from air into each index, and from each index out into air."""
    for n in INDICES:
        yield 1.0, n
        yield n, 1.0


def angles_below_critical(n1, n2):
    """All test angles for n1 < n2; for n1 > n2 the ones below the critical angle (Hecht 4.7),
    up to 1e-6 rad short of it.  Closer than that R is ill-conditioned (dR/dcos_i grows like
    1/sqrt(tc - t)), so rounding in cos_i alone moves R by more than 1e-12; 30 deg for n = 2
    is such a point (asin(0.5) rounds to 30.000000000000004 deg) and is left out."""
    if n1 < n2:
        return ANGLES_DEG
    tc = math.degrees(math.asin(n2 / n1))
    a = ANGLES_DEG[ANGLES_DEG < tc - math.degrees(1e-6)]
    return np.concatenate([a, [tc - 0.1, tc - 1e-3, math.degrees(math.asin(n2 / n1) - 1e-6)]])


@pytest.mark.parametrize("n1,n2", list(pairs()))
def test_rs_rp_match_hecht_formulas(n1, n2):
    """published: Hecht sec. 4.6; 0 to 89.9 deg (below the critical angle from the dense side)."""
    deg = angles_below_critical(n1, n2)
    th = np.radians(deg)
    Rs, Rp, tir = fresnel.fresnel_power(n1, n2, np.cos(th))
    hs, hp = hecht_rs_rp(n1, n2, th)
    assert not tir.any()
    np.testing.assert_allclose(Rs, hs, rtol=0, atol=TOL)
    np.testing.assert_allclose(Rp, hp, rtol=0, atol=TOL)


@pytest.mark.parametrize("n1,n2", list(pairs()))
def test_rs_rp_match_tmm_single_interface(n1, n2):
    """reference library: tmm.coh_tmm('s'/'p', [n1, n2], [inf, inf], theta, 550)['R']."""
    deg = angles_below_critical(n1, n2)
    Rs, Rp, _ = fresnel.fresnel_power(n1, n2, np.cos(np.radians(deg)))
    ref_s = np.array([tmm.coh_tmm("s", [n1, n2], [np.inf, np.inf], math.radians(a), 550.0)["R"] for a in deg])
    ref_p = np.array([tmm.coh_tmm("p", [n1, n2], [np.inf, np.inf], math.radians(a), 550.0)["R"] for a in deg])
    np.testing.assert_allclose(Rs, ref_s, rtol=0, atol=TOL)
    np.testing.assert_allclose(Rp, ref_p, rtol=0, atol=TOL)


@pytest.mark.parametrize("n", INDICES)
def test_transmittance_is_complement_and_tmm_T_agrees(n):
    """reference library: tmm.coh_tmm(...)['T'] (power transmittance, with the n cos factor) equals
    1 - R of the engine: the engine's lossless T = 1 - R (Hecht sec. 4.6) is energy conserving."""
    deg = ANGLES_DEG
    Rs, Rp, _ = fresnel.fresnel_power(1.0, n, np.cos(np.radians(deg)))
    Ts = np.array([tmm.coh_tmm("s", [1.0, n], [np.inf, np.inf], math.radians(a), 550.0)["T"] for a in deg])
    Tp = np.array([tmm.coh_tmm("p", [1.0, n], [np.inf, np.inf], math.radians(a), 550.0)["T"] for a in deg])
    np.testing.assert_allclose(1 - Rs, Ts, rtol=0, atol=TOL)
    np.testing.assert_allclose(1 - Rp, Tp, rtol=0, atol=TOL)


def test_normal_incidence_glass():
    """published: Hecht sec. 4.6, R = ((n1-n2)/(n1+n2))^2; n = 1.5 in air gives 0.04 exactly."""
    for n1, n2 in ((1.0, 1.5), (1.5, 1.0)):
        Rs, Rp, tir = fresnel.fresnel_power(n1, n2, 1.0)
        assert not tir
        assert float(Rs) == pytest.approx(0.04, abs=1e-15)
        assert float(Rp) == pytest.approx(0.04, abs=1e-15)


@pytest.mark.parametrize("n1,n2", list(pairs()))
def test_brewster_angle_zero_p_reflectance(n1, n2):
    """published: Hecht sec. 4.6, tan tB = n2/n1 and R_p(tB) = 0; n = 1.5 from air: 56.31 deg.
    R_p is quadratic in (t - tB) near its zero, so 1e-12 holds with a rounding-level angle."""
    tb_deg = fresnel.brewster_angle_deg(n1, n2)
    assert tb_deg == pytest.approx(math.degrees(math.atan(n2 / n1)), abs=1e-12)
    Rs, Rp, tir = fresnel.fresnel_power(n1, n2, math.cos(math.radians(tb_deg)))
    assert not tir
    assert float(Rp) < TOL
    assert float(Rs) > 1e-3          # s light is still reflected there
    # and it is a minimum: R_p is larger 1 degree either side
    for off in (-1.0, 1.0):
        _, rp_off, _ = fresnel.fresnel_power(n1, n2, math.cos(math.radians(tb_deg + off)))
        assert float(rp_off) > 1e-6


def test_brewster_glass_value():
    """published: Hecht sec. 4.6 and ../shared/references.md: n = 1.5 from air, 56.31 deg."""
    assert fresnel.brewster_angle_deg(1.0, 1.5) == pytest.approx(56.31, abs=0.005)


@pytest.mark.parametrize("n", INDICES)
def test_critical_angle_total_reflection_above_partial_below(n):
    """published: Hecht sec. 4.7, tc = asin(n2/n1); R = 1 (both polarizations) above it and
    T = 1 - R > 0 just below it; n = 1.5 to air: 41.81 deg (references.md)."""
    tc = math.asin(1.0 / n)
    assert fresnel.critical_angle_deg(n, 1.0) == pytest.approx(math.degrees(tc), abs=1e-12)
    above = np.array([tc + 1e-9, tc + 1e-6, tc + 0.01, 1.2, 1.5, math.radians(89.9)])
    above = above[above > tc]
    Rs, Rp, tir = fresnel.fresnel_power(n, 1.0, np.cos(above))
    assert tir.all()
    assert np.all(Rs == 1.0) and np.all(Rp == 1.0)
    below = np.array([tc - 1e-4, tc - 1e-3, tc - 1e-2])
    Rs, Rp, tir = fresnel.fresnel_power(n, 1.0, np.cos(below))
    assert not tir.any()
    assert np.all(1 - Rs > 0) and np.all(1 - Rp > 0)
    # agrees with tmm just below as well (tmm handles the evanescent side, so only below)
    for th, rs, rp in zip(below, Rs, Rp):
        assert rs == pytest.approx(tmm.coh_tmm("s", [n, 1.0], [np.inf, np.inf], th, 550.0)["R"], abs=1e-10)
        assert rp == pytest.approx(tmm.coh_tmm("p", [n, 1.0], [np.inf, np.inf], th, 550.0)["R"], abs=1e-10)
    # and tmm also gives R = 1 above the critical angle
    assert tmm.coh_tmm("s", [n, 1.0], [np.inf, np.inf], tc + 0.01, 550.0)["R"] == pytest.approx(1.0, abs=1e-12)


def test_glass_critical_angle_value():
    """published: Hecht sec. 4.7 (references.md): n = 1.5 to air, 41.81 deg; none from the thin side."""
    assert fresnel.critical_angle_deg(1.5, 1.0) == pytest.approx(41.81, abs=0.005)
    assert math.isnan(float(fresnel.critical_angle_deg(1.0, 1.5)))


def test_refract_obeys_snell_and_stays_unit():
    """published: Hecht sec. 4.4, n1 sin t1 = n2 sin t2 for the direction refract() returns."""
    n1, n2 = 1.0, 1.5
    th = np.radians(np.linspace(0.0, 89.9, 200))
    dx, dy = np.sin(th), -np.cos(th)      # travelling down onto the surface y = 0
    nx, ny = np.zeros_like(th), np.ones_like(th)   # normal back into the incident medium
    ci = np.cos(th)
    ct, tir = fresnel.snell_cos_t(n1, n2, ci)
    tx, ty = fresnel.refract(dx, dy, nx, ny, n1 / n2, ci, ct)
    np.testing.assert_allclose(np.hypot(tx, ty), 1.0, rtol=0, atol=1e-14)
    np.testing.assert_allclose(n2 * tx, n1 * dx, rtol=0, atol=1e-14)   # tangential component
    assert np.all(ty < 0)
