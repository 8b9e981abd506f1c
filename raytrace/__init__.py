"""2D ray tracing for prisms, light guides and windows: Snell refraction, total internal
reflection, Fresnel s/p losses, bulk absorption, dispersion and an energy ledger."""
from .api import trace
from .compile import compile_scene
from .errors import RaytraceError, SceneError
from .geometry import Edge, Loop, Part, ShapeSpec, Treatment
from .scene import Detector, Scene, Source, Spectrum, TraceSettings

__version__ = "0.1.0"
__all__ = ["trace", "compile_scene", "RaytraceError", "SceneError", "Edge", "Loop", "Part",
           "ShapeSpec", "Treatment", "Detector", "Scene", "Source", "Spectrum", "TraceSettings"]
