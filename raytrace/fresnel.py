"""Interface physics as pure array functions: Snell's law, TIR, Fresnel power reflectance.

Cosines are of the angle between the ray and the surface normal, taken positive.  All
functions work elementwise on numpy arrays and never loop over rays.
"""
from __future__ import annotations

import numpy as np


def snell_cos_t(n1, n2, cos_i):
    """cos of the refraction angle, and a mask of total internal reflection.

    Snell: n1 sin ti = n2 sin tt (Hecht, Optics, sec. 4.4).  Where sin tt would exceed 1 the
    light is totally internally reflected and cos tt is returned as 0."""
    n1 = np.asarray(n1, dtype=float)
    n2 = np.asarray(n2, dtype=float)
    cos_i = np.asarray(cos_i, dtype=float)
    sin2_t = (n1 / n2) ** 2 * np.maximum(0.0, 1.0 - cos_i * cos_i)
    tir = sin2_t > 1.0
    cos_t = np.sqrt(np.maximum(0.0, 1.0 - sin2_t))
    return cos_t, tir


def fresnel_rs_rp(n1, n2, cos_i, cos_t, tir):
    """Power reflectances R_s and R_p (Hecht sec. 4.6); 1 under total internal reflection."""
    a = n1 * cos_i
    b = n2 * cos_t
    c = n2 * cos_i
    d = n1 * cos_t
    with np.errstate(invalid="ignore", divide="ignore"):
        rs = np.where(a + b > 0, (a - b) / (a + b), 1.0)
        rp = np.where(c + d > 0, (c - d) / (c + d), 1.0)
    Rs = np.where(tir, 1.0, rs * rs)
    Rp = np.where(tir, 1.0, rp * rp)
    return Rs, Rp


def fresnel_power(n1, n2, cos_i):
    """Convenience: (R_s, R_p, tir) for light going from index n1 into n2."""
    cos_t, tir = snell_cos_t(n1, n2, cos_i)
    Rs, Rp = fresnel_rs_rp(n1, n2, np.asarray(cos_i, dtype=float), cos_t, tir)
    return Rs, Rp, tir


def reflect(dx, dy, nx, ny):
    """Mirror direction about the unit normal (either orientation)."""
    dot = dx * nx + dy * ny
    return dx - 2 * dot * nx, dy - 2 * dot * ny


def refract(dx, dy, nx, ny, eta, cos_i, cos_t):
    """Refracted direction; (nx, ny) must point back into the incident medium, eta = n1/n2.

    t = eta d + (eta cos_i - cos_t) n, a unit vector when d and n are unit vectors."""
    k = eta * cos_i - cos_t
    return eta * dx + k * nx, eta * dy + k * ny


def critical_angle_deg(n1, n2):
    """Critical angle for light in n1 meeting n2 (Hecht sec. 4.7); NaN where n1 <= n2."""
    n1 = np.asarray(n1, dtype=float)
    n2 = np.asarray(n2, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.where(n1 > n2, np.degrees(np.arcsin(np.minimum(n2 / n1, 1.0))), np.nan)


def brewster_angle_deg(n1, n2):
    """tan tB = n2/n1 (Hecht sec. 4.6)."""
    return np.degrees(np.arctan2(n2, n1))
