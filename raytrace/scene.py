"""The scene a user draws: parts, materials, sources, detectors and trace settings.

Plain dataclasses, no physics.  `compile.compile_scene` turns a Scene into the arrays the
tracer consumes; `scene_io` reads and writes the JSON form.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

from .geometry import Part, Point
from .materials import Material

# Source kinds, angular distributions, polarizations and sampling styles.
BEAM, POINT, EMITTER = "beam", "point", "emitter"
SOURCE_KINDS = (BEAM, POINT, EMITTER)
UNIFORM, LAMBERTIAN, COS_POWER = "uniform", "lambertian", "cos_power"
DISTRIBUTIONS = (UNIFORM, LAMBERTIAN, COS_POWER)
UNPOLARIZED, S_POL, P_POL = "unpolarized", "s", "p"
POLARIZATIONS = (UNPOLARIZED, S_POL, P_POL)
EVEN, RANDOM = "even", "random"
SAMPLINGS = (EVEN, RANDOM)


@dataclass(frozen=True)
class Spectrum:
    """One wavelength, a weighted list, or a band given by centre and FWHM (Gaussian)."""

    wavelengths_nm: tuple[float, ...] = (550.0,)
    weights: tuple[float, ...] = (1.0,)
    band_center_nm: float | None = None
    band_fwhm_nm: float | None = None

    @classmethod
    def line(cls, wavelength_nm: float) -> "Spectrum":
        return cls((float(wavelength_nm),), (1.0,))

    @classmethod
    def band(cls, center_nm: float, fwhm_nm: float) -> "Spectrum":
        return cls((float(center_nm),), (1.0,), float(center_nm), float(fwhm_nm))

    @property
    def is_band(self) -> bool:
        return self.band_center_nm is not None

    @property
    def mean_nm(self) -> float:
        if self.is_band:
            return float(self.band_center_nm)  # type: ignore[arg-type]
        total = sum(self.weights)
        return sum(w * l for w, l in zip(self.weights, self.wavelengths_nm)) / total


@dataclass(frozen=True)
class Source:
    """A light source.

    beam:    collimated, `width` mm wide, centred on `position`, travelling along `direction_deg`.
    point:   rays from `position` within +-`half_angle_deg` of `direction_deg`.
    emitter: a flat emitting segment `width` mm wide centred on `position`, emitting about its
             normal `direction_deg` within +-`half_angle_deg` (an LED die).
    """

    name: str
    kind: str = BEAM
    position: Point = (0.0, 0.0)
    direction_deg: float = 0.0
    width: float = 1.0
    half_angle_deg: float = 90.0
    distribution: str = UNIFORM
    cos_power: float = 1.0
    flux: float = 1.0
    spectrum: Spectrum = field(default_factory=Spectrum)
    polarization: str = UNPOLARIZED
    sampling: str = EVEN
    note: str = ""    # free text, e.g. a safety class the user wants on record


@dataclass(frozen=True)
class Acceptance:
    """An angular acceptance: a detector also reports the flux arriving within +-half_angle_deg
    of one direction of travel, given as `direction_deg` or as `back_to_source` (the reverse of
    that source's direction, for true retroreflection: light going back the way it came)."""

    half_angle_deg: float
    direction_deg: float | None = None
    back_to_source: str = ""

    def direction(self, sources: list["Source"]) -> float:
        """The accepted direction of travel in degrees."""
        if self.back_to_source:
            src = next(s for s in sources if s.name == self.back_to_source)
            return (src.direction_deg + 180.0) % 360.0
        return float(self.direction_deg)


@dataclass(frozen=True)
class Detector:
    """A segment that records the rays crossing it.

    absorbing: rays end there (a sensor); monitoring: rays are recorded and pass on unchanged.
    acceptance: optional; the detector then also reports the share arriving within it.
    """

    name: str
    start: Point
    end: Point
    absorbing: bool = True
    bins: int = 50
    angle_bins: int = 36
    central_fraction: float = 0.8    # part of the detector used for the uniformity figures
    acceptance: Acceptance | None = None


@dataclass(frozen=True)
class TraceSettings:
    """Limits and mode of a trace; every field can be overridden per trace."""

    rays: int = 1000
    mode: str = "branching"          # "branching" (deterministic tree) or "monte_carlo"
    flux_floor: float = 1e-4  # children below this share of their source ray's flux end
    max_generations: int = 200             # generations after which a ray ends
    segment_budget: int = 1_000_000_000  # total ray segments in one trace: a guard against runaway
                                       # traces (10 million light-pipe rays need about 660 million)
    seed: int = 1
    max_memory_mb: float = 4096.0    # memory a trace may use; past it, it stops and says so


# Largest max_generations a file or flag may ask for: a ray's flux after a million events is
# zero in double precision, so a larger bound only promises work that never ends.
MAX_GENERATIONS = 1_000_000


@dataclass
class Scene:
    """Everything that describes one optical setup."""

    parts: list[Part] = field(default_factory=list)
    sources: list[Source] = field(default_factory=list)
    detectors: list[Detector] = field(default_factory=list)
    materials: dict[str, Material] = field(default_factory=dict)  # user-defined materials
    ambient: str = "air"
    settings: TraceSettings = field(default_factory=TraceSettings)
    story: str = ""       # one line: what this scene is for
    name: str = ""
    # the file's linked numbers (linked.Links), so saving writes them back; values above are
    # always the evaluated ones
    links: Any = field(default=None, compare=False, repr=False)
    # notes from loading (earlier key names read, for example); not saved, not compared
    notes: list[str] = field(default_factory=list, compare=False, repr=False)

    def copy(self) -> "Scene":
        return replace(self, parts=list(self.parts), sources=list(self.sources),
                       detectors=list(self.detectors), materials=dict(self.materials))

    def part(self, name: str) -> Part:
        return next(p for p in self.parts if p.name == name)

    def size_hint(self) -> float:
        """A length that sets the scale of tolerances: the extent of everything in the scene."""
        xs: list[float] = []
        ys: list[float] = []
        for p in self.parts:
            x0, y0, x1, y1 = p.outer.bounds()
            xs += [x0, x1]
            ys += [y0, y1]
        for s in self.sources:
            xs.append(s.position[0])
            ys.append(s.position[1])
        for d in self.detectors:
            xs += [d.start[0], d.end[0]]
            ys += [d.start[1], d.end[1]]
        if not xs:
            return 1.0
        return max(max(xs) - min(xs), max(ys) - min(ys), 1e-6)
