"""Optical materials: refractive index versus wavelength, and bulk absorption.

Wavelengths are given in nanometres everywhere in the program; the dispersion formulas take
micrometres because that is how their coefficients are published.  Materials are frozen
dataclasses so they compare by value, hash, and pickle for worker processes.
"""
from __future__ import annotations

import difflib
import math
from dataclasses import KW_ONLY, dataclass
from typing import Callable, ClassVar

import numpy as np

from .errors import Problems

# Fraunhofer lines used for nd and the Abbe number Vd (common practice).
D_LINE_NM, F_LINE_NM, C_LINE_NM = 587.56, 486.13, 656.27
# The index must be a real number >= 1 over the band the tracer uses ...
INDEX_CHECK_NM = (350.0, 1100.0)
# ... and a Sellmeier pole (where the index is infinite) must lie outside this wider band.
POLE_FREE_NM = (350.0, 2500.0)


@dataclass(frozen=True)
class Material:
    """Base class.  `absorption_per_mm` is alpha in flux(L) = flux(0) exp(-alpha L), L in mm.

    When `transmittance_spec` = (internal transmittance, thickness in mm) is given, alpha is
    derived from it as -ln(tau)/d; the pair itself is kept so saving writes back what the
    user typed.
    """

    MODEL: ClassVar[str] = ""
    name: str
    _: KW_ONLY
    source: str = ""
    absorption_per_mm: float = 0.0
    transmittance_spec: tuple[float, float] | None = None
    allow_index_below_one: bool = False

    def __post_init__(self) -> None:
        if self.transmittance_spec is not None:
            tau, thickness_mm = (float(v) for v in self.transmittance_spec)
            object.__setattr__(self, "transmittance_spec", (tau, thickness_mm))
            object.__setattr__(self, "absorption_per_mm", -math.log(tau) / thickness_mm)
        object.__setattr__(self, "absorption_per_mm", float(self.absorption_per_mm))

    def index(self, wavelength_nm) -> np.ndarray:
        """Refractive index at each wavelength (nm); works on numpy arrays of any shape."""
        return self._index_um(np.asarray(wavelength_nm, dtype=float) / 1000.0)

    def _index_um(self, l_um: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def _model_fields(self) -> dict:
        raise NotImplementedError

    def to_dict(self) -> dict:
        """The JSON form read by `material_from_dict` (the name is the key it is stored under)."""
        data = {"model": self.MODEL, **self._model_fields()}
        if self.source:
            data["source"] = self.source
        if self.transmittance_spec is not None:
            tau, thickness_mm = self.transmittance_spec
            data["internal_transmittance"] = {"transmittance": tau, "thickness_mm": thickness_mm}
        elif self.absorption_per_mm != 0.0:
            data["absorption_per_mm"] = self.absorption_per_mm
        if self.allow_index_below_one:
            data["allow_index_below_one"] = True
        return data


@dataclass(frozen=True)
class ConstantIndex(Material):
    MODEL: ClassVar[str] = "constant"
    n: float

    def __post_init__(self) -> None:
        super().__post_init__()
        object.__setattr__(self, "n", float(self.n))

    def _index_um(self, l_um):
        return np.full_like(l_um, self.n)

    def _model_fields(self):
        return {"n": self.n}


@dataclass(frozen=True)
class Cauchy(Material):
    """n = A + B/l^2 + C/l^4 + ..., l in micrometres (B in um^2, C in um^4)."""

    MODEL: ClassVar[str] = "cauchy"
    coefficients: tuple[float, ...]

    def __post_init__(self) -> None:
        super().__post_init__()
        object.__setattr__(self, "coefficients", tuple(float(a) for a in self.coefficients))

    def _index_um(self, l_um):
        inv_l2 = 1.0 / (l_um * l_um)
        n = np.zeros_like(l_um)
        for a in reversed(self.coefficients):  # Horner's rule in 1/l^2
            n = n * inv_l2 + a
        return n

    def _model_fields(self):
        return {"coefficients": list(self.coefficients)}


@dataclass(frozen=True)
class Sellmeier(Material):
    """n^2 - 1 = sum b_i l^2 / (l^2 - c_i), l in micrometres, c_i in um^2."""

    MODEL: ClassVar[str] = "sellmeier"
    b: tuple[float, ...]
    c: tuple[float, ...]

    def __post_init__(self) -> None:
        super().__post_init__()
        object.__setattr__(self, "b", tuple(float(v) for v in self.b))
        object.__setattr__(self, "c", tuple(float(v) for v in self.c))
        if len(self.b) != len(self.c):
            raise ValueError(f"Sellmeier {self.name!r}: b and c differ in length")

    def _index_um(self, l_um):
        l2 = (l_um * l_um)[..., np.newaxis]
        n2 = 1.0 + np.sum(np.asarray(self.b) * l2 / (l2 - np.asarray(self.c)), axis=-1)
        return np.sqrt(n2)

    def _model_fields(self):
        return {"b": list(self.b), "c": list(self.c)}


@dataclass(frozen=True)
class AbbeGlass(Material):
    """A glass known only by nd and Vd: two-term Cauchy n = A + B/l^2 that meets both exactly."""

    MODEL: ClassVar[str] = "abbe"
    nd: float
    vd: float

    def __post_init__(self) -> None:
        super().__post_init__()
        object.__setattr__(self, "nd", float(self.nd))
        object.__setattr__(self, "vd", float(self.vd))

    @property
    def cauchy_coefficients(self) -> tuple[float, float]:
        """(A, B) of n = A + B/l^2, l in um."""
        b = self._cauchy_b()
        return self.nd - b / (D_LINE_NM / 1000.0) ** 2, b

    def _cauchy_b(self) -> float:
        # nF - nC = B (1/lF^2 - 1/lC^2) must equal (nd - 1)/Vd.
        span = 1.0 / (F_LINE_NM / 1000.0) ** 2 - 1.0 / (C_LINE_NM / 1000.0) ** 2
        return (self.nd - 1.0) / (self.vd * span)

    def _index_um(self, l_um):
        # Written around the d line, n(d) = nd holds to the last bit.
        return self.nd + self._cauchy_b() * (1.0 / (l_um * l_um) - 1.0 / (D_LINE_NM / 1000.0) ** 2)

    def _model_fields(self):
        return {"nd": self.nd, "vd": self.vd}


# ---------------------------------------------------------------- reading the JSON form

MODELS: dict[str, type[Material]] = {
    cls.MODEL: cls for cls in (ConstantIndex, Cauchy, Sellmeier, AbbeGlass)}
_COMMON_KEYS = ("model", "source", "absorption_per_mm", "internal_transmittance",
                "allow_index_below_one")
_MODEL_KEYS = {"constant": ("n",), "cauchy": ("coefficients",), "sellmeier": ("b", "c"),
               "abbe": ("nd", "vd")}
_MISSING = object()

# A rule is (test, text naming what is accepted); the text goes into the message.
Rule = tuple[Callable[[float], bool], str]
FINITE: Rule = (lambda x: True, "a finite number")
POSITIVE: Rule = (lambda x: x > 0, "a number greater than 0")
NON_NEGATIVE: Rule = (lambda x: x >= 0, "a number of at least 0")
AT_LEAST_ONE: Rule = (lambda x: x >= 1, "a number of at least 1")
FRACTION: Rule = (lambda x: 0 < x <= 1, "a number greater than 0 and at most 1")


def material_from_dict(name: str, data, path: str, problems: Problems) -> Material | None:
    """Build a material from its JSON form; report every problem found, return None if any."""
    errors_before = len(problems.errors)
    if not isinstance(data, dict):
        problems.add(path, data, 'an object such as {"model": "constant", "n": 1.49}')
        return None
    model = data.get("model", _MISSING)
    known = isinstance(model, str) and model in MODELS
    if not known:
        problems.add(f"{path}.model", "<missing>" if model is _MISSING else model,
                     "one of " + ", ".join(repr(m) for m in MODELS))
    accepted = _COMMON_KEYS + (_MODEL_KEYS[model] if known else
                               tuple(k for keys in _MODEL_KEYS.values() for k in keys))
    _check_keys(data, accepted, path, problems, f"for model {model!r}" if known else "")
    common = _read_common(data, path, problems)
    fields = _read_model_fields(model, data, path, problems) if known else None
    if len(problems.errors) > errors_before or fields is None:
        return None
    material = MODELS[model](name, **fields, **common)
    _check_index_range(material, f"{path}.n" if model == "constant" else path, problems)
    return material if len(problems.errors) == errors_before else None


def _read_common(data: dict, path: str, problems: Problems) -> dict:
    common = {}
    if "source" in data:
        if isinstance(data["source"], str):
            common["source"] = data["source"]
        else:
            problems.add(f"{path}.source", data["source"], "a text naming the published data")
    if "allow_index_below_one" in data:
        flag = data["allow_index_below_one"]
        if isinstance(flag, bool):
            common["allow_index_below_one"] = flag
        else:
            problems.add(f"{path}.allow_index_below_one", flag, "true or false")
    if "absorption_per_mm" in data and "internal_transmittance" in data:
        problems.add(path, "<both 'absorption_per_mm' and 'internal_transmittance'>",
                     "only one of 'absorption_per_mm' or 'internal_transmittance'")
    if "absorption_per_mm" in data:
        alpha = _number(data, "absorption_per_mm", path, problems, NON_NEGATIVE, " (per mm)")
        if alpha is not None:
            common["absorption_per_mm"] = alpha
    if "internal_transmittance" in data:
        spec = data["internal_transmittance"]
        where = f"{path}.internal_transmittance"
        if not isinstance(spec, dict):
            problems.add(where, spec,
                         'an object such as {"transmittance": 0.9, "thickness_mm": 10}')
        else:
            _check_keys(spec, ("transmittance", "thickness_mm"), where, problems, "here")
            tau = _number(spec, "transmittance", where, problems, FRACTION)
            thickness = _number(spec, "thickness_mm", where, problems, POSITIVE, " (mm)")
            if tau is not None and thickness is not None:
                common["transmittance_spec"] = (tau, thickness)
    return common


def _read_model_fields(model: str, data: dict, path: str, problems: Problems) -> dict | None:
    if model == "constant":
        fields = {"n": _number(data, "n", path, problems, POSITIVE)}
    elif model == "abbe":
        fields = {"nd": _number(data, "nd", path, problems, AT_LEAST_ONE),
                  "vd": _number(data, "vd", path, problems, POSITIVE)}
    elif model == "cauchy":
        fields = {"coefficients": _number_list(data, "coefficients", path, problems, FINITE)}
    else:
        b = _number_list(data, "b", path, problems, FINITE)
        c = _number_list(data, "c", path, problems, NON_NEGATIVE, " (um^2)")
        fields = {"b": b, "c": c}
        raw_b, raw_c = data.get("b"), data.get("c")
        if isinstance(raw_b, list) and isinstance(raw_c, list) and len(raw_b) != len(raw_c):
            problems.add(f"{path}.c", f"<{len(raw_c)} values>",
                         f"as many values as 'b' has ({len(raw_b)})")
        if c is not None:
            _check_poles(c, f"{path}.c", problems)
    return None if any(v is None for v in fields.values()) else fields


def _check_poles(c: tuple[float, ...], where: str, problems: Problems) -> None:
    lo, hi = POLE_FREE_NM
    for i, ci in enumerate(c):
        pole_nm = math.sqrt(ci) * 1000.0
        if lo <= pole_nm <= hi:
            problems.add(f"{where}[{i}]", ci,
                         f"a pole sqrt(c) outside {lo:g}-{hi:g} nm; this one puts it at "
                         f"{pole_nm:.0f} nm, where the index is infinite")


def _check_index_range(material: Material, where: str, problems: Problems) -> None:
    lo, hi = INDEX_CHECK_NM
    grid = np.arange(lo, hi + 0.5, 1.0)
    with np.errstate(all="ignore"):
        n = material.index(grid)
    not_real = ~np.isfinite(n) | (n <= 0)
    if not_real.any():
        problems.add(where, f"<no real index at {grid[not_real][0]:g} nm>",
                     f"a real index greater than 0 everywhere in {lo:g}-{hi:g} nm")
    elif not material.allow_index_below_one and n.min() < 1.0:
        k = int(np.argmin(n))
        problems.add(where, f"<n = {n[k]:.6g} at {grid[k]:g} nm>",
                     f"an index of at least 1 everywhere in {lo:g}-{hi:g} nm "
                     f"(or set \"allow_index_below_one\": true)")


def _check_keys(data: dict, accepted: tuple[str, ...], path: str, problems: Problems,
                context: str) -> None:
    for key in data:
        if key not in accepted:
            hint = difflib.get_close_matches(str(key), accepted, n=1)
            label = f"one of the keys accepted {context}" if context else "one of the keys"
            problems.add(f"{path}.{key}", f"<unknown key {key!r}>",
                         f"{label}: {', '.join(accepted)}"
                         + (f" (did you mean {hint[0]!r}?)" if hint else ""))


def _is_number(value) -> bool:
    # bool is a subclass of int in Python, but true/false in a file is never meant as a number
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _number(data: dict, key: str, path: str, problems: Problems, rule: Rule,
            unit: str = "") -> float | None:
    where = f"{path}.{key}"
    if key not in data:
        problems.add(where, "<missing>", rule[1] + unit)
        return None
    return _checked(data[key], where, problems, rule, unit)


def _checked(value, where: str, problems: Problems, rule: Rule, unit: str) -> float | None:
    test, text = rule
    if not _is_number(value) or not math.isfinite(value) or not test(value):
        problems.add(where, value, text + unit)
        return None
    return float(value)


def _number_list(data: dict, key: str, path: str, problems: Problems, rule: Rule,
                 unit: str = "") -> tuple[float, ...] | None:
    where = f"{path}.{key}"
    expected = f"a non-empty list of numbers, each {rule[1]}{unit}"
    values = data.get(key, _MISSING)
    if values is _MISSING or not isinstance(values, list) or not values:
        problems.add(where, "<missing>" if values is _MISSING else values, expected)
        return None
    checked = [_checked(v, f"{where}[{i}]", problems, rule, unit) for i, v in enumerate(values)]
    return None if any(v is None for v in checked) else tuple(checked)
