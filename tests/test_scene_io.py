"""Scene files round-trip losslessly: load -> save -> load gives an equal Scene, and
save -> load -> save gives identical text, for every sample and for random scenes."""
from __future__ import annotations

import json
import os
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings

from raytrace.errors import SceneError
from raytrace.scene_io import load_scene, save_scene, scene_from_text, scene_to_dict, scene_to_text
from test_reliability_scenes import scenes

SAMPLES = sorted((Path(__file__).parent.parent / "samples").glob("*.json"))
SAMPLE_DIR = Path(__file__).parent.parent / "samples"


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


def _cemented_with_faces(faces):
    d = json.loads((Path(__file__).parent.parent / "samples" / "cemented-prism-pair.json").read_text())
    d["parts"][1]["faces"] = faces
    return d


def test_builder_faces_can_be_renamed_and_round_trip():
    """The flint prism is turned 180 degrees, so its builder 'left face' is the light's exit:
    a file can call it that.  The rename survives save -> load, and saving writes it back
    under `faces` (the part stays a builder shape, not a list of edges)."""
    from raytrace.geometry import Treatment
    from raytrace.scene_io import scene_from_dict, scene_to_dict
    faces = {"right face": {"name": "cemented face"},
             "left face": {"name": "exit face", "treatment": "anti-reflection"}}
    scene = scene_from_dict(_cemented_with_faces(faces))
    flint = scene.parts[1].outer
    by_name = {e.face: e for e in flint.edges}
    assert set(by_name) == {"base", "cemented face", "exit face"}
    # the renamed exit face is the edge from the flint's lower apex (10, 0) up to (20, 17.32):
    # the 180-degree turn about (10, 17.32) maps the builder's left face there
    exit_face = by_name["exit face"]
    assert {tuple(round(c, 9) for c in p) for p in (exit_face.start, exit_face.end)} == \
        {(10.0, 0.0), (20.0, round(17.320508075688775, 9))}
    assert exit_face.treatment == Treatment("anti-reflection")
    saved = scene_to_dict(scene)["parts"][1]
    assert "shape" in saved and "boundary" not in saved
    assert saved["faces"] == {"right face": {"name": "cemented face"},
                              "left face": {"name": "exit face", "treatment": "anti-reflection"}}
    assert scene_from_text(scene_to_text(scene)) == scene


def test_renaming_faces_may_swap_names_but_not_merge_faces():
    from raytrace.scene_io import scene_from_dict
    swapped = scene_from_dict(_cemented_with_faces({"left face": {"name": "right face"},
                                                    "right face": {"name": "left face"}}))
    assert sorted(e.face for e in swapped.parts[1].outer.edges) == ["base", "left face", "right face"]
    with pytest.raises(SceneError) as info:
        scene_from_dict(_cemented_with_faces({"left face": {"name": "base"}}))
    (p,) = info.value.problems
    assert p.path == '$.parts[1].faces."left face".name' and p.found == "'base'"
    for bad in ("", "  ", 3, None):
        with pytest.raises(SceneError) as info:
            scene_from_dict(_cemented_with_faces({"left face": {"name": bad}}))
        assert [q.path for q in info.value.problems] == ['$.parts[1].faces."left face".name']
        assert info.value.problems[0].expected == "a non-empty text"


def test_a_face_name_edited_in_code_saves_under_faces():
    """A face renamed on the Part itself (as an editor would) is written as a faces entry."""
    from dataclasses import replace as dc_replace
    from raytrace.geometry import Loop
    from raytrace.scene_io import face_overrides, scene_from_dict, scene_to_dict
    scene = scene_from_dict(_cemented_with_faces({}))
    flint = scene.parts[1]
    renamed = Loop(tuple(dc_replace(e, face="top face") if e.face == "base" else e for e in flint.outer.edges))
    scene.parts[1] = dc_replace(flint, outer=renamed)
    assert face_overrides(scene.parts[1]) == {"base": {"name": "top face"}}
    assert scene_to_dict(scene)["parts"][1]["faces"] == {"base": {"name": "top face"}}
    assert scene_from_text(scene_to_text(scene)) == scene


# ------------------------------------------------------------------ earlier key names

def _with_trace(tmp_path, trace: dict) -> Path:
    data = json.loads((SAMPLE_DIR / "oblique-window.json").read_text(encoding="utf-8"))
    data["trace"] = trace
    path = tmp_path / "old.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    return path


def test_earlier_trace_key_names_are_read_with_a_note_and_saved_under_the_new(tmp_path):
    path = _with_trace(tmp_path, {"rays": 10, "min_relative_flux": 0.002, "max_depth": 7, "max_segments": 900})
    scene = load_scene(path)
    s = scene.settings
    assert (s.flux_floor, s.max_generations, s.segment_budget) == (0.002, 7, 900)
    assert len(scene.notes) == 3 and all(str(path) in n for n in scene.notes)
    assert any("$.trace.max_depth" in n and "'max_generations'" in n for n in scene.notes)
    saved = scene_to_dict(scene)["trace"]
    assert {"flux_floor", "max_generations", "segment_budget"} <= set(saved)
    assert not {"min_relative_flux", "max_depth", "max_segments"} & set(saved)


def test_earlier_and_new_name_together_is_an_error(tmp_path):
    path = _with_trace(tmp_path, {"max_depth": 7, "max_generations": 8})
    with pytest.raises(SceneError) as err:
        load_scene(path)
    (p,) = err.value.problems
    assert p.path == "$.trace.max_depth" and "max_generations" in p.expected
