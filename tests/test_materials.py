"""Material models: formulas, nd/Vd fit, absorption, input checking, round-trip, catalog lookup."""
import math
import pickle

import numpy as np
import pytest

from raytrace.catalog import CATALOG, catalog_table, close_matches, lookup
from raytrace.errors import Problems
from raytrace.materials import AbbeGlass, Cauchy, ConstantIndex, Sellmeier, material_from_dict

PATH = "$.materials.m"


def load(data, name="m"):
    problems = Problems(file="scene.json")
    return material_from_dict(name, data, PATH, problems), problems


# ------------------------------------------------------------------ formulas

def test_constant_index_is_the_same_at_every_wavelength():
    """common practice: a non-dispersive medium."""
    n = ConstantIndex("m", 1.49).index(np.array([[350.0, 587.56], [800.0, 1100.0]]))
    assert n.shape == (2, 2)
    assert np.all(n == 1.49)


def test_cauchy_two_terms_hand_evaluated():
    """from memory: BK7 Cauchy coefficients A = 1.5046, B = 0.00420 um^2 (common textbook table);
    by hand n(500 nm) = 1.5046 + 0.00420/0.5^2 = 1.5214 and n(400 nm) = 1.5046 + 0.0042/0.16
    = 1.53085.  The coefficients are cross-checked against N-BK7 in
    test_materials_reference.py."""
    n = Cauchy("bk7", (1.5046, 0.00420)).index(np.array([500.0, 400.0]))
    assert n == pytest.approx([1.5214, 1.53085], abs=1e-12)


def test_cauchy_three_terms_hand_evaluated():
    """published formula (Cauchy): n = A + B/l^2 + C/l^4.  By hand at 400 nm with A=1.5,
    B=0.004, C=0.0001: 1.5 + 0.004/0.16 + 0.0001/0.0256 = 1.52890625."""
    assert Cauchy("m", (1.5, 0.004, 0.0001)).index(400.0) == pytest.approx(1.52890625, abs=1e-12)


def test_sellmeier_hand_evaluated():
    """published formula (Sellmeier): n^2 - 1 = sum b l^2/(l^2 - c).  By hand, b=(0.75, 0.5),
    c=(0.04, 0): at 400 nm 0.75*0.16/0.12 + 0.5 = 1.5 so n^2 = 2.5; at 1000 nm
    0.75/0.96 + 0.5 = 1.28125 so n^2 = 2.28125."""
    n = Sellmeier("m", (0.75, 0.5), (0.04, 0.0)).index(np.array([400.0, 1000.0]))
    assert n == pytest.approx([math.sqrt(2.5), math.sqrt(2.28125)], abs=1e-12)


def test_index_accepts_a_scalar_and_keeps_array_shape():
    m = CATALOG["fused silica"]
    assert np.ndim(m.index(550.0)) == 0
    assert m.index(np.full((3, 4, 2), 550.0)).shape == (3, 4, 2)


@pytest.mark.parametrize("nd, vd", [(1.5168, 64.17), (1.6200, 36.37), (1.4585, 67.8), (1.9, 20.0)])
def test_abbe_glass_gives_back_nd_and_vd(nd, vd):
    """common practice: Vd = (nd - 1)/(nF - nC), d 587.56 nm, F 486.13 nm, C 656.27 nm.
    Vd is a quotient by nF - nC ~ 0.01, so it is compared relatively (1e-12)."""
    n_d, n_f, n_c = AbbeGlass("g", nd, vd).index(np.array([587.56, 486.13, 656.27]))
    assert n_d == pytest.approx(nd, abs=1e-12)
    assert (n_d - 1.0) / (n_f - n_c) == pytest.approx(vd, rel=1e-12)


def test_abbe_glass_is_a_two_term_cauchy():
    """common practice: the fit is n = A + B/l^2; three wavelengths must lie on that curve."""
    glass = AbbeGlass("g", 1.62, 36.37)
    a, b = glass.cauchy_coefficients
    l_nm = np.array([400.0, 700.0, 1100.0])
    assert glass.index(l_nm) == pytest.approx(a + b / (l_nm / 1000.0) ** 2, abs=1e-12)
    assert glass.index(l_nm) == pytest.approx(Cauchy("c", (a, b)).index(l_nm), abs=1e-12)


# ------------------------------------------------------------------ absorption

def test_internal_transmittance_gives_beer_lambert_alpha():
    """published: Beer-Lambert law, tau = exp(-alpha d), so alpha = -ln(tau)/d."""
    m, problems = load({"model": "constant", "n": 1.5,
                        "internal_transmittance": {"transmittance": 0.9, "thickness_mm": 10}})
    assert not problems.items
    assert m.absorption_per_mm == pytest.approx(-math.log(0.9) / 10.0, rel=1e-15)
    assert math.exp(-m.absorption_per_mm * 10.0) == pytest.approx(0.9, rel=1e-14)
    assert m.to_dict()["internal_transmittance"] == {"transmittance": 0.9, "thickness_mm": 10.0}


def test_absorption_coefficient_given_directly():
    m, problems = load({"model": "constant", "n": 1.5, "absorption_per_mm": 0.002})
    assert not problems.items and m.absorption_per_mm == 0.002 and m.transmittance_spec is None


def test_lossless_by_default():
    m, _ = load({"model": "constant", "n": 1.5})
    assert m.absorption_per_mm == 0.0
    assert "absorption_per_mm" not in m.to_dict() and "internal_transmittance" not in m.to_dict()


# ------------------------------------------------------------------ bad input

NAN, INF = float("nan"), float("inf")
T = "internal_transmittance"


@pytest.mark.parametrize("data, path, expected", [
    ([1.5], PATH, "an object"),
    ({"n": 1.5}, PATH + ".model", "one of 'constant', 'cauchy', 'sellmeier', 'abbe'"),
    ({"model": "glass", "n": 1.5}, PATH + ".model", "one of 'constant'"),
    ({"model": "constant"}, PATH + ".n", "a number greater than 0"),
    ({"model": "constant", "n": "1.5"}, PATH + ".n", "a number greater than 0"),
    ({"model": "constant", "n": True}, PATH + ".n", "a number greater than 0"),
    ({"model": "constant", "n": NAN}, PATH + ".n", "a number greater than 0"),
    ({"model": "constant", "n": INF}, PATH + ".n", "a number greater than 0"),
    ({"model": "constant", "n": 0}, PATH + ".n", "a number greater than 0"),
    ({"model": "constant", "n": 0.8}, PATH + ".n", "an index of at least 1"),
    ({"model": "constant", "n": 1.5, "colour": "red"}, PATH + ".colour",
     "one of the keys accepted for model 'constant': model, source, absorption_per_mm"),
    ({"model": "abbe", "vd": 60}, PATH + ".nd", "a number of at least 1"),
    ({"model": "abbe", "nd": 0.9, "vd": 60}, PATH + ".nd", "a number of at least 1"),
    ({"model": "abbe", "nd": 1.5, "vd": 0}, PATH + ".vd", "a number greater than 0"),
    ({"model": "abbe", "nd": 1.5, "vd": -30}, PATH + ".vd", "a number greater than 0"),
    ({"model": "cauchy", "coefficients": []}, PATH + ".coefficients", "a non-empty list"),
    ({"model": "cauchy", "coefficients": 1.5}, PATH + ".coefficients", "a non-empty list"),
    ({"model": "cauchy", "coefficients": [1.5, NAN]}, PATH + ".coefficients[1]",
     "a finite number"),
    ({"model": "cauchy", "coefficients": [0.98, 0.001]}, PATH, "an index of at least 1"),
    ({"model": "sellmeier", "b": [1.0], "c": [0.36]}, PATH + ".c[0]", "outside 350-2500 nm"),
    ({"model": "sellmeier", "b": [1.0], "c": [4.0]}, PATH + ".c[0]", "outside 350-2500 nm"),
    ({"model": "sellmeier", "b": [1.0], "c": [-0.01]}, PATH + ".c[0]", "a number of at least 0"),
    ({"model": "sellmeier", "b": [1.0, 0.5], "c": [0.01]}, PATH + ".c", "as many values as 'b'"),
    ({"model": "sellmeier", "b": [-3.0], "c": [0.01], "allow_index_below_one": True}, PATH,
     "a real index"),
    ({"model": "constant", "n": 1.5, "source": 7}, PATH + ".source", "a text"),
    ({"model": "constant", "n": 1.5, "allow_index_below_one": "yes"},
     PATH + ".allow_index_below_one", "true or false"),
    ({"model": "constant", "n": 1.5, "absorption_per_mm": -0.1}, PATH + ".absorption_per_mm",
     "a number of at least 0"),
    ({"model": "constant", "n": 1.5, "absorption_per_mm": False}, PATH + ".absorption_per_mm",
     "a number of at least 0"),
    ({"model": "constant", "n": 1.5, "absorption_per_mm": 0.1,
      T: {"transmittance": 0.9, "thickness_mm": 1}}, PATH, "only one of"),
    ({"model": "constant", "n": 1.5, T: 0.9}, f"{PATH}.{T}", "an object"),
    ({"model": "constant", "n": 1.5, T: {"transmittance": 0, "thickness_mm": 1}},
     f"{PATH}.{T}.transmittance", "a number greater than 0 and at most 1"),
    ({"model": "constant", "n": 1.5, T: {"transmittance": 1.2, "thickness_mm": 1}},
     f"{PATH}.{T}.transmittance", "a number greater than 0 and at most 1"),
    ({"model": "constant", "n": 1.5, T: {"transmittance": 0.9, "thickness_mm": 0}},
     f"{PATH}.{T}.thickness_mm", "a number greater than 0"),
    ({"model": "constant", "n": 1.5, T: {"transmittance": 0.9}},
     f"{PATH}.{T}.thickness_mm", "a number greater than 0"),
    ({"model": "constant", "n": 1.5, T: {"transmittance": 0.9, "thickness_mm": 1, "thickness": 2}},
     f"{PATH}.{T}.thickness", "transmittance, thickness_mm"),
])
def test_each_bad_field_is_reported_with_its_path(data, path, expected):
    m, problems = load(data)
    assert m is None
    [problem] = problems.errors  # one mistake, one message
    assert problem.path == path
    assert expected in problem.expected, problem
    assert problem.file == "scene.json"


def test_found_value_is_shown():
    _, problems = load({"model": "constant", "n": True})
    assert problems.errors[0].found == "true"
    _, problems = load({"model": "constant"})
    assert problems.errors[0].found == "<missing>"
    _, problems = load({"model": "constant", "n": 1.5, "refrac": 1})
    assert "refrac" in problems.errors[0].found


def test_unknown_key_suggests_the_close_one():
    _, problems = load({"model": "sellmeier", "b": [1.0], "c": [0.01], "sorce": "x"})
    assert "did you mean 'source'" in problems.errors[0].expected


def test_pole_message_names_the_pole_wavelength():
    _, problems = load({"model": "sellmeier", "b": [1.0], "c": [0.36]})
    assert "600 nm" in problems.errors[0].expected


def test_all_problems_in_one_material_are_reported():
    data = {"model": "sellmeier", "b": [1.0, True], "c": [0.36], "absorption_per_mm": -1,
            "sorce": "typo", T: {"transmittance": 2}}
    m, problems = load(data)
    assert m is None
    assert {p.path for p in problems.errors} == {
        PATH, PATH + ".b[1]", PATH + ".c", PATH + ".c[0]", PATH + ".absorption_per_mm",
        PATH + ".sorce", f"{PATH}.{T}.transmittance", f"{PATH}.{T}.thickness_mm"}


def test_edge_values_are_accepted():
    for data in ({"model": "constant", "n": 1},
                 {"model": "abbe", "nd": 1.5, "vd": 60, T: {"transmittance": 1, "thickness_mm": 3}},
                 {"model": "constant", "n": 0.8, "allow_index_below_one": True},
                 {"model": "cauchy", "coefficients": [1.5]},
                 {"model": "sellmeier", "b": [1.0], "c": [0.0]}):
        m, problems = load(data)
        assert m is not None and not problems.items, (data, problems.items)


def test_problems_before_do_not_spoil_a_good_material():
    problems = Problems()
    problems.add("$.other", 1, "something else")
    assert material_from_dict("m", {"model": "constant", "n": 1.5}, PATH, problems) is not None


# ------------------------------------------------------------------ round-trip and pickling

USER_MATERIALS = [
    ConstantIndex("clear", 1.49, source="datasheet"),
    Cauchy("resin", (1.55, 0.0041, 2e-5), absorption_per_mm=0.004),
    AbbeGlass("glass", 1.5168, 64.17, transmittance_spec=(0.95, 25)),
    Sellmeier("thin", (-0.2,), (0.01,), allow_index_below_one=True),
]


@pytest.mark.parametrize("material", list(CATALOG.values()) + USER_MATERIALS,
                         ids=lambda m: m.name)
def test_round_trip_through_json_form(material):
    import json
    data = json.loads(json.dumps(material.to_dict()))  # through text, as a saved file would
    assert "name" not in data
    again, problems = load(data, name=material.name)
    assert not problems.items, problems.items
    assert again == material


@pytest.mark.parametrize("material", list(CATALOG.values()) + USER_MATERIALS,
                         ids=lambda m: m.name)
def test_materials_pickle(material):
    again = pickle.loads(pickle.dumps(material))
    assert again == material
    wl = np.linspace(400.0, 1000.0, 7)
    assert np.array_equal(again.index(wl), material.index(wl))


# ------------------------------------------------------------------ catalog

def test_lookup_prefers_user_materials_and_is_case_sensitive():
    mine = ConstantIndex("PMMA", 1.5)
    assert lookup("PMMA", {"PMMA": mine}) is mine
    assert lookup("PMMA", {}) is CATALOG["PMMA"]
    assert lookup("PMMA") is CATALOG["PMMA"]
    assert lookup("pmma", {}) is None
    assert lookup("unobtainium", {"other": mine}) is None


def test_close_matches_suggest_names():
    assert close_matches("pmma", CATALOG)[0] == "PMMA"
    assert close_matches("fused silca", CATALOG)[0] == "fused silica"
    assert close_matches("polycarbonat", list(CATALOG) + ["resin"])[0] == "polycarbonate"
    assert close_matches("zzzz", CATALOG) == []


def test_catalog_has_the_promised_materials_with_sources():
    assert set(CATALOG) == {"air", "vacuum", "fused silica", "PMMA", "polycarbonate",
                            "crown glass", "flint glass", "water"}
    for name, m in CATALOG.items():
        assert m.name == name and m.source


def test_catalog_table_rows():
    rows = {r["name"]: r for r in catalog_table()}
    assert set(rows) == set(CATALOG)
    assert rows["crown glass"]["nd"] == pytest.approx(1.52, abs=1e-12)
    assert rows["crown glass"]["vd"] == pytest.approx(64.0, rel=1e-12)
    assert rows["vacuum"]["vd"] is None
    assert rows["fused silica"]["model"] == "sellmeier"
    for r in rows.values():
        assert r["nd"] == float(CATALOG[r["name"]].index(587.56))
