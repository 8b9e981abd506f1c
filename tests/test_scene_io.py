"""Scene files round-trip losslessly: load -> save -> load gives an equal Scene, and
save -> load -> save gives identical text, for every sample and for random scenes."""
from __future__ import annotations

import json
import os
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings

from raytrace.errors import SceneError
from raytrace.scene_io import load_scene, save_scene, scene_from_text, scene_to_text
from test_reliability_scenes import scenes

SAMPLES = sorted((Path(__file__).parent.parent / "samples").glob("*.json"))


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_sample_round_trips(sample, tmp_path):
    scene = load_scene(sample)
    out = tmp_path / sample.name
    save_scene(scene, out)
    again = load_scene(out)
    assert again == scene
    assert scene_to_text(again) == out.read_text(encoding="utf-8")


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_samples_are_saved_as_they_are_written(sample):
    """The bundled samples are in the saver's own form, so saving one changes nothing."""
    assert scene_to_text(load_scene(sample)) == sample.read_text(encoding="utf-8")


@settings(max_examples=int(os.environ.get("RAYTRACE_PROPERTY_EXAMPLES", "250")), deadline=None,
          derandomize=True, suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(scene=scenes())
def test_random_scenes_round_trip(scene):
    text = scene_to_text(scene)
    loaded = scene_from_text(text)
    assert loaded == scene
    assert scene_to_text(loaded) == text
    json.loads(text)   # strict JSON: no NaN or Infinity tokens


def test_save_is_atomic_and_keeps_the_old_file_on_failure(tmp_path, monkeypatch):
    scene = load_scene(SAMPLES[0])
    target = tmp_path / "scene.json"
    target.write_text("old contents", encoding="utf-8")

    def broken_replace(src, dst):
        raise OSError(28, "No space left on device")
    monkeypatch.setattr(os, "replace", broken_replace)
    with pytest.raises(OSError):
        save_scene(scene, target)
    assert target.read_text(encoding="utf-8") == "old contents"
    assert [p.name for p in tmp_path.iterdir()] == ["scene.json"], "temporary file left behind"


def test_format_name_and_version_are_checked(tmp_path):
    data = json.loads(SAMPLES[0].read_text(encoding="utf-8"))
    data["format"], data["version"] = "some-other-format", 2
    with pytest.raises(SceneError) as info:
        scene_from_text(json.dumps(data))
    assert {p.path for p in info.value.problems} == {"$.format", "$.version"}


def _documented_example() -> str:
    import re
    doc = (Path(__file__).parent.parent / "docs" / "scene-format.md").read_text(encoding="utf-8")
    return re.findall(r"```json\n(.*?)```", doc, re.S)[-1]


def test_documented_example_loads_uses_every_key_and_round_trips():
    from raytrace import scene_io as io
    text = _documented_example()
    scene = scene_from_text(text)
    data = json.loads(text)
    assert set(data) == set(io.TOP_KEYS)
    part_keys = {k for p in data["parts"] for k in p}
    assert part_keys == set(io.PART_KEYS)
    edge_keys = {k for p in data["parts"] for loop in [p.get("boundary", [])] + p.get("holes", [])
                 for e in loop for k in e}
    assert edge_keys == set(io.EDGE_KEYS)
    assert {k for s in data["sources"] for k in s} == set(io.SOURCE_KEYS)
    assert {k for d in data["detectors"] for k in d} == set(io.DETECTOR_KEYS)
    assert set(data["trace"]) == set(io.TRACE_KEYS)
    assert {m["model"] for m in data["materials"].values()} == {"constant", "cauchy", "sellmeier", "abbe"}
    assert {s["kind"] for s in data["sources"]} == {"beam", "point", "emitter"}
    saved = scene_to_text(scene)
    assert scene_from_text(saved) == scene
    assert scene_to_text(scene_from_text(saved)) == saved


def test_documented_example_traces():
    from raytrace import trace
    result = trace(scene_from_text(_documented_example()), rays=100)
    assert abs(sum(b.flux for b in result.ledger.buckets) - result.source_flux) <= 1e-9 * result.source_flux
    assert result.detector("pipe output").total > 0     # a monitor: it records, the flux goes on


def test_flat_lens_given_as_infinite_radius_saves_as_zero():
    import math
    from raytrace.geometry import Part, ShapeSpec
    from raytrace.scene import Scene
    from raytrace.shapes import build
    spec = ShapeSpec("lens", {"r1": math.inf, "r2": -40.0, "center_thickness": 4.0, "aperture": 10.0})
    scene = Scene(parts=[Part("plano-convex", "PMMA", build(spec), shape=spec)])
    loaded = scene_from_text(scene_to_text(scene))
    assert loaded.parts[0].shape.params["r1"] == 0.0
    assert loaded.parts[0].outer == scene.parts[0].outer


def test_saving_a_nan_is_a_scene_error_naming_the_field():
    from dataclasses import replace
    scene = load_scene(SAMPLES[0])
    scene.sources[0] = replace(scene.sources[0], direction_deg=float("nan"))
    with pytest.raises(SceneError) as info:
        scene_to_text(scene)
    assert [p.path for p in info.value.problems] == ["$.sources[0].direction_deg"]
