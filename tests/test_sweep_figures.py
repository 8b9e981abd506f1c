"""Sweeps that say what they did (warnings, errors, refused overrides) and export any figure;
detectors with an angular acceptance.  Run through `raytrace.cli.main`, as a user does."""
import csv
import json
from pathlib import Path

import pytest

from raytrace import trace
from raytrace.cli import main
from raytrace.scene_io import scene_from_dict

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "samples"


def read_rows(path: Path) -> list[dict]:
    return list(csv.DictReader(path.open(encoding="utf-8")))


def test_sweep_keeps_each_points_warnings_and_prints_them_once(tmp_path, capsys):
    out = tmp_path / "pipe.csv"
    code = main(["sweep", str(SAMPLES / "light-pipe-90.json"), "--vary", "guide.segments[1].bend.radius=3,6",
                 "--max-generations", "15", "--rays", "300", "--workers", "1", "--csv", str(out), "--quiet"])
    assert code == 0
    rows = read_rows(out)
    assert all("cut by the generation limit (15)" in r["warnings"] for r in rows)
    err = capsys.readouterr().err
    assert "warning: point 0:" in err and "warning: point 1:" in err
    # the warned share is the truncated bucket of that row (printed to 4 significant digits)
    for r in rows:
        assert f"{100 * float(r['share: truncated: generation limit']):.4g} %" in r["warnings"]


@pytest.mark.parametrize("vary,flag", [("trace.rays=100,200", ["--rays", "500"]),
                                       ("$.trace.seed=1,2", ["--seed", "3"]),
                                       ("trace.max_generations=5,10", ["--max-generations", "20"])])
def test_a_flag_that_overrides_a_varied_setting_is_refused(tmp_path, capsys, vary, flag):
    out = tmp_path / "x.csv"
    code = main(["sweep", str(SAMPLES / "oblique-window.json"), "--vary", vary, *flag, "--csv", str(out)])
    assert code == 2
    err = capsys.readouterr().err
    assert flag[0] in err and vary.split("=")[0] in err and "one or the other" in err
    assert not out.exists()


def test_sweep_columns_carry_errors_and_asked_figures(tmp_path):
    """--figure and --route columns: the accepted share of a retro detector and one route's share,
    equal to what `trace` reports for the same scene."""
    data = json.loads((SAMPLES / "roof-prism-retroreflector.json").read_text())
    data["detectors"][0]["acceptance"] = {"half_angle_deg": 0.5, "back_to_source": "emitter beam"}
    scene_file = tmp_path / "retro.json"
    scene_file.write_text(json.dumps(data))
    glint = "reflect off roof prism / hypotenuse"
    out = tmp_path / "retro.csv"
    code = main(["sweep", str(scene_file), "--vary", "emitter beam.direction_deg=85,90", "--workers", "1",
                 "--figure", "return.accepted", "--figure", "return.centroid_mm",
                 "--route", f"return={glint}", "--csv", str(out), "--quiet"])
    assert code == 0
    rows = read_rows(out)
    head = list(rows[0])
    assert head.index("efficiency error: return") == head.index("efficiency: return") + 1
    for r in rows:
        s = scene_from_dict({**data, "sources": [{**data["sources"][0],
                                                   "direction_deg": float(r["emitter beam.direction_deg"])}]})
        res = trace(s)
        assert float(r["return.accepted"]) == pytest.approx(res.accepted("return"), rel=1e-12)
        from raytrace.routes import route_groups
        want = sum(g.share_of_source for g in route_groups(res) if g.bucket == "detector return" and g.text == glint)
        assert float(r[f"route: return: {glint}"]) == pytest.approx(want, rel=1e-12)
        assert want > 0.03      # the hypotenuse glint, about 4 % (Fresnel at n = 1.51)
    # at 85 degrees the glint leaves 10 degrees off the way back: not accepted; at 90 it is
    off, normal = rows
    assert float(off["return.accepted"]) < float(off["efficiency: return"]) - 0.03
    assert float(normal["return.accepted"]) == pytest.approx(float(normal["efficiency: return"]), rel=1e-9)


@pytest.mark.parametrize("bad,words", [(["--figure", "nowhere.accepted"], "DETECTOR.FIELD"),
                                        (["--figure", "return.colour"], "a detector figure"),
                                        (["--route", "return"], "BUCKET=STEPS")])
def test_bad_figure_names_say_what_was_expected(tmp_path, capsys, bad, words):
    code = main(["sweep", str(SAMPLES / "roof-prism-retroreflector.json"), "--vary",
                 "emitter beam.direction_deg=85,90", *bad, "--csv", str(tmp_path / "x.csv")])
    assert code == 2
    assert words in capsys.readouterr().err


@pytest.mark.parametrize("bucket", ["retrun", "detector nowhere", "escaped via "])
def test_route_with_a_misspelt_bucket_is_refused_not_a_column_of_zeros(tmp_path, capsys, bucket):
    out = tmp_path / "x.csv"
    code = main(["sweep", str(SAMPLES / "roof-prism-retroreflector.json"), "--vary",
                 "emitter beam.direction_deg=85,90", "--route", f"{bucket}=reflect off roof prism / hypotenuse",
                 "--csv", str(out)])
    assert code == 2 and not out.exists()
    err = capsys.readouterr().err
    assert "--route" in err and "'return'" in err and "escaped via PART / FACE" in err


def _free_beam(direction_deg: float, acceptance: dict) -> dict:
    """A beam in air travelling at `direction_deg`, wholly caught by a long detector across it."""
    import math
    a = math.radians(direction_deg)
    ux, uy = math.cos(a), math.sin(a)
    cx, cy = 20 * ux, 20 * uy
    return {"format": "raytrace2d-scene", "version": 1, "units": {"length": "mm", "wavelength": "nm"},
            "parts": [], "sources": [{"name": "beam", "kind": "beam", "position": [0.0, 0.0],
                                      "direction_deg": direction_deg, "width": 1.0}],
            "detectors": [{"name": "wall", "start": [cx - 10 * uy, cy + 10 * ux], "end": [cx + 10 * uy, cy - 10 * ux],
                           "acceptance": acceptance}],
            "trace": {"rays": 50}}


@pytest.mark.parametrize("start_end_swapped", [False, True])
def test_acceptance_is_about_the_direction_of_travel(start_end_swapped):
    """Directions in degrees counter-clockwise from +x, the way the light travels (common
    practice); the detector's orientation must not matter."""
    def accepted(direction, acc):
        d = _free_beam(direction, acc)
        if start_end_swapped:
            det = d["detectors"][0]
            det["start"], det["end"] = det["end"], det["start"]
        return trace(scene_from_dict(d)).accepted("wall")
    assert accepted(30.0, {"half_angle_deg": 0.5, "direction_deg": 30.0}) == pytest.approx(1.0)
    assert accepted(30.0, {"half_angle_deg": 1.0, "direction_deg": 32.0}) == 0.0
    assert accepted(30.0, {"half_angle_deg": 1.01, "direction_deg": 31.0}) == pytest.approx(1.0)
    assert accepted(-170.0, {"half_angle_deg": 1.0, "direction_deg": 190.5}) == pytest.approx(1.0)
    assert accepted(30.0, {"half_angle_deg": 1.0, "back_to_source": "beam"}) == 0.0   # it goes away


def test_true_retroreflection_is_the_two_tir_routes():
    """published: two reflections off perpendicular faces reverse a direction in their plane (the
    2D corner reflector; Hecht, Optics, sec. 4.7 / 5.4).  In the roof prism at 5 degrees off
    normal the light going straight back within 0.01 degrees is exactly the routes with an even
    number of reflections (each a mirror image; two make a half turn, since the faces are
    perpendicular or the same face seen twice), and the hypotenuse glint (one) is not in it."""
    from raytrace.routes import route_groups

    import re

    def reflections(steps):        # steps may be collapsed runs: "3 x TIR at ..."
        count = 0
        for step in steps:
            m = re.match(r"(\d+) x (.*)$", step)
            times, what = (int(m.group(1)), m.group(2)) if m else (1, step)
            if what.startswith(("TIR at", "reflect off")):
                count += times
        return count
    data = json.loads((SAMPLES / "roof-prism-retroreflector.json").read_text())
    data["detectors"][0]["acceptance"] = {"half_angle_deg": 0.01, "back_to_source": "emitter beam"}
    res = trace(scene_from_dict(data), route_flux_floor=1e-9)
    groups = [g for g in route_groups(res) if g.bucket == "detector return"]
    assert not any(g.lumped for g in groups)
    retro = sum(g.share_of_source for g in groups if reflections(g.steps) % 2 == 0)
    assert retro > 0.9
    assert res.accepted("return") == pytest.approx(retro, abs=1e-9)


def test_acceptance_needs_one_direction_and_a_known_source():
    from raytrace.errors import SceneError
    base = _free_beam(0.0, {"half_angle_deg": 1.0, "back_to_source": "lamp"})
    with pytest.raises(SceneError) as e:
        scene_from_dict(base)
    assert any(p.path == "$.detectors[0].acceptance.back_to_source" and "'beam'" in p.expected
               for p in e.value.problems)
    base["detectors"][0]["acceptance"] = {"half_angle_deg": 1.0}
    with pytest.raises(SceneError) as e:
        scene_from_dict(base)
    assert any("exactly one of direction_deg" in p.expected for p in e.value.problems)


@pytest.mark.parametrize("bucket,words", [
    ("escaped via roof prism / hypotenusee", "a face of part 'roof prism': 'hypotenuse'"),
    ("escaped via roof prsm / hypotenuse", "parts: 'roof prism'"),
    ("absorbed in bulk of roof", "a part of the scene: 'roof prism'"),
    ("truncated: flux", '"truncated: below flux floor"'),
])
def test_route_naming_a_part_or_face_the_scene_lacks_is_refused(tmp_path, capsys, bucket, words):
    """A bucket of the right form with a misspelt part or face (or truncation reason) matched no
    route either and gave the same silent column of zeros; it is refused naming what there is."""
    out = tmp_path / "x.csv"
    code = main(["sweep", str(SAMPLES / "roof-prism-retroreflector.json"), "--vary",
                 "emitter beam.direction_deg=85,90", "--route", f"{bucket}=reflect off roof prism / hypotenuse",
                 "--csv", str(out)])
    assert code == 2 and not out.exists()
    assert words in capsys.readouterr().err


def test_route_with_the_scenes_own_bucket_is_a_column(tmp_path):
    """The same route through a real bucket of the scene is accepted and written."""
    out = tmp_path / "x.csv"
    assert main(["sweep", str(SAMPLES / "roof-prism-retroreflector.json"), "--vary",
                 "emitter beam.direction_deg=85,90", "--route",
                 "escaped via roof prism / hypotenuse=reflect off roof prism / hypotenuse",
                 "--rays", "50", "--csv", str(out), "--quiet"]) == 0
    assert "route: escaped via roof prism / hypotenuse: reflect off roof prism / hypotenuse" in \
        out.read_text().splitlines()[0]


@pytest.mark.parametrize("bucket,steps,words", [
    ("return", "reflect off roof prism / hypotenusee", "a face of part 'roof prism'"),
    ("return", "refelct off roof prism / hypotenuse", "step 'refelct off roof prism / hypotenuse' is none of"),
    ("return", "pass detector retrun", "a detector of the scene: 'return'"),
])
def test_route_steps_naming_what_the_scene_lacks_are_refused(tmp_path, capsys, bucket, steps, words):
    out = tmp_path / "x.csv"
    code = main(["sweep", str(SAMPLES / "roof-prism-retroreflector.json"), "--vary",
                 "emitter beam.direction_deg=85,90", "--route", f"{bucket}={steps}", "--csv", str(out)])
    assert code == 2 and not out.exists()
    assert words in capsys.readouterr().err


@pytest.mark.parametrize("path", sorted(SAMPLES.glob("*.json")), ids=lambda p: p.stem)
def test_every_route_a_trace_prints_passes_the_route_check(path):
    """The check must refuse only what no trace prints: every (bucket, steps) of a 300-ray
    trace of each sample, as `trace --routes` lists them, is accepted as a --route."""
    import raytrace
    from raytrace.compile import compile_scene
    from raytrace.figures import parse_route, scene_faces
    from raytrace.routes import route_groups
    from raytrace.scene_io import load_scene
    scene = load_scene(path)
    result = raytrace.trace(scene, rays=300, track_paths=True)
    detectors = [d.name for d in scene.detectors]
    faces = scene_faces(compile_scene(scene))
    groups = route_groups(result)
    assert groups
    for g in groups:
        bucket = g.bucket[len("detector "):] if g.bucket.startswith("detector ") else g.bucket
        parse_route(f"{bucket}={g.text}", detectors, faces=faces)
