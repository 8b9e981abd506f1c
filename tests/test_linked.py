"""Linked numbers: named numbers and expressions, values builders expose, aimed and pivoted
sources, repeated parts with per-copy face names; their errors, round trips and sweeps."""
from __future__ import annotations

import json
import math
import os
from dataclasses import replace
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from raytrace import cli
from raytrace.errors import SceneError
from raytrace.expressions import ExpressionError, evaluate, parse
from raytrace.scene_io import load_scene, save_scene, scene_from_dict, scene_to_dict, scene_to_text
from raytrace.sweep import parse_vary, run_point, sweep

SAMPLES = Path(__file__).resolve().parent.parent / "samples"
PIPE = SAMPLES / "light-pipe-90.json"
SHEET = SAMPLES / "retroreflective-sheet.json"


def value(text: str) -> float:
    return evaluate(parse(text), lambda ref: pytest.fail(f"no reference expected, got {ref}"))


# ----------------------------------------------------------------------------- the evaluator

@pytest.mark.parametrize("text,expected", [
    # from memory: the precedence of ordinary mathematics, as Python's own operators have it
    ("1 + 2 * 3", 7.0), ("(1 + 2) * 3", 9.0), ("2 ** 3 ** 2", 512.0), ("-2 ** 2", -4.0),
    ("2 ** -1", 0.5), ("7 / 2 - 1", 2.5), ("1.5e-3 * 2e3", 3.0), ("max(1, 4, 2) - min(3, 5)", 1.0),
    ("degrees(asin(1))", 90.0), ("sqrt(2) ** 2 / 2", math.sqrt(2) ** 2 / 2),
    ("sin(radians(30))", math.sin(math.radians(30))), ("tan(pi / 4)", math.tan(math.pi / 4)),
])
def test_arithmetic_follows_ordinary_precedence(text, expected):
    assert value(text) == expected


@pytest.mark.parametrize("text,words", [
    ("1 +", "found the end"), ("2 3", "expected an operator"), ("sin 3", "sin is a function"),
    ("foo(2)", "foo is not a function"), ("1 / 0", "division by zero"),
    ("sqrt(-1)", "at least 0"), ("asin(2)", "between -1 and 1"), ("10 ** 400", "too large"),
    ("(-8) ** 0.5", "no real value"), ("__import__('os')", "not a function"),
    ("().__class__", "expected a number"), ("1 $ 2", "'$' at character 3"), ("'open", "unclosed quote"),
    ("(" * 100 + "1" + ")" * 100, "nested more than"),
])
def test_bad_expressions_say_what_was_expected(text, words):
    """Nothing in an expression runs Python: names are only looked up, calls only reach the
    listed functions."""
    with pytest.raises(ExpressionError) as e:
        value(text)
    assert words in str(e.value)


# ----------------------------------------------------------------------------- the light pipe

def pipe_by_hand(radius: float, gap: float = 0.5) -> dict:
    """The light-pipe sample as a user would edit it by hand for a bend radius: the window and
    the detector placed over the output face, worked out from the geometry of the path
    (from memory: after a straight run L1 heading +x, a left 90 degree bend of centreline
    radius R + w/2 and a straight run L2, the output face's centre is at
    (L1 + R + w/2, R + w/2 + L2), facing +y)."""
    d = json.loads(PIPE.read_text())
    del d["numbers"]
    w, l1, l2 = 3.0, 10.0, 12.0
    ox, oy = l1 + (radius + w / 2), (radius + w / 2) + l2
    d["parts"][0]["shape"]["params"]["segments"][1]["bend"]["radius"] = radius
    d["parts"][1]["shape"]["position"] = [ox, oy + gap]
    y = oy + gap + 1.5 + 2
    d["detectors"][0]["start"], d["detectors"][0]["end"] = [ox - 6, y], [ox + 6, y]
    return d


def test_pipe_sample_places_window_and_detector_over_the_output():
    scene = load_scene(PIPE)
    by_hand = scene_from_dict(pipe_by_hand(8.0))
    assert scene == by_hand


def test_sweep_over_a_named_number_equals_hand_edited_scenes_exactly():
    res = sweep(json.loads(PIPE.read_text()), [parse_vary("bend_radius=2,5,11")], {"rays": 200}, workers=1)
    for row in res.rows:
        hand = run_point(pipe_by_hand(row["bend_radius"]), [], {"rays": 200})
        assert row["status"] == hand["status"] == "ok"
        assert row["efficiency: viewer side"] == hand["efficiency"]["viewer side"]
        assert {k[7:]: v for k, v in row.items() if k.startswith("share: ") and v} == \
            {k: v for k, v in hand["shares"].items() if v}


def test_sweeping_the_linked_field_itself_still_moves_what_is_linked_to_the_guide():
    res = sweep(load_scene(PIPE), [parse_vary("guide.segments[1].bend.radius=3")], {"rays": 100}, workers=1)
    hand = run_point(pipe_by_hand(3.0), [], {"rays": 100})
    assert res.rows[0]["efficiency: viewer side"] == hand["efficiency"]["viewer side"]


def test_linked_sample_saves_its_expressions_and_reopens_the_same(tmp_path):
    scene = load_scene(PIPE)
    out = tmp_path / "pipe.json"
    save_scene(scene, out)
    data = json.loads(out.read_text())
    assert data["numbers"] == {"bend_radius": 8.0, "gap": 0.5}
    assert data["parts"][1]["shape"]["position"] == ["= guide.output_x", "= guide.output_y + gap"]
    assert load_scene(out) == scene


def test_a_linked_field_edited_by_hand_becomes_a_plain_number(tmp_path):
    """What the GUI does: a dragged window keeps its new place, the detector (linked to the
    guide, which did not change) stays linked."""
    from gui import edits
    scene = load_scene(PIPE)
    moved = edits.replace_part(scene, 1, edits.move_part(scene.parts[1], 2.0, 0.0))
    data = scene_to_dict(moved)
    assert data["parts"][1]["shape"]["position"] == [21.5, "= guide.output_y + gap"]
    assert data["detectors"][0]["start"][0] == "= guide.output_x - 6"
    out = tmp_path / "moved.json"
    save_scene(moved, out)
    assert load_scene(out) == moved


def test_editing_what_others_link_to_keeps_them_where_they_were_shown():
    """A bend radius typed in by hand: the window and detector, linked to the guide's output,
    would move on reopening, so they are saved as the plain numbers the user saw."""
    from gui import edits
    scene = load_scene(PIPE)
    guide = scene.parts[0]
    params = json.loads(json.dumps(guide.shape.params))
    params["segments"][1]["bend"]["radius"] = 5.0
    edited = edits.replace_part(scene, 0, edits.rebuild(guide, replace(guide.shape, params=params)))
    data = scene_to_dict(edited)
    assert data["parts"][0]["shape"]["params"]["segments"][1]["bend"]["radius"] == 5.0
    assert data["parts"][1]["shape"]["position"] == [19.5, 22.0]
    assert data["detectors"][0]["start"] == [13.5, 25.5]
    assert data["numbers"]["bend_radius"] == 8.0       # the named numbers are kept as written
    assert scene_from_dict(data) == edited


# ----------------------------------------------------------------------------- errors

def base_scene(numbers: dict | None = None) -> dict:
    d = json.loads(PIPE.read_text())
    d["numbers"].update(numbers or {})
    return d


def problems_of(data: dict) -> dict[str, str]:
    with pytest.raises(SceneError) as e:
        scene_from_dict(data)
    return {p.path: f"found {p.found}; expected {p.expected}" for p in e.value.problems}


def test_a_cycle_is_reported_once_with_its_chain():
    d = base_scene({"a": "b + 1", "b": "2 * a"})
    got = problems_of(d)
    assert list(got) == ["$.numbers.a"]
    assert "a -> b -> a" in got["$.numbers.a"]


def test_a_cycle_through_part_values_names_the_fields():
    d = base_scene()
    d["parts"][0]["shape"]["params"]["width"] = "= 'panel window'.x / 10"
    got = problems_of(d)
    assert list(got) == ["$.parts[0].shape.params.width"]
    msg = got["$.parts[0].shape.params.width"]
    assert "part 'panel window' -> $.parts[1].shape.position[0] -> part 'guide'" in msg


@pytest.mark.parametrize("expr,words", [
    ("= bend_raduis + 1", "unknown name bend_raduis: expected a named number (bend_radius, gap)"),
    ("= guide.output_z", "part 'guide' offers x, y, rotation_deg, width, input_x"),
    ("= gide.x", "no part is called 'gide' (parts: 'guide', 'panel window')"),
    ("= guide", "guide is a part: expected one of its values"),
    ("= guide[2].x", "part 'guide' is not repeated"),
    ("= 2 *", "found the end"),
])
def test_unknown_names_and_bad_syntax_name_the_field(expr, words):
    d = base_scene()
    d["detectors"][0]["bins"] = expr
    got = problems_of(d)
    assert list(got) == ["$.detectors[0].bins"]
    assert words in got["$.detectors[0].bins"]


def test_named_numbers_must_be_usable_names_and_numbers():
    d = base_scene({"sin": 1, "wavelength": 500, "2x": 1, "ok": [1]})
    got = problems_of(d)
    assert set(got) == {"$.numbers.sin", "$.numbers.wavelength", "$.numbers.2x", "$.numbers.ok"}


def test_check_reports_link_problems_with_file_and_path(tmp_path, capsys):
    d = base_scene()
    d["parts"][1]["shape"]["position"][1] = "= guide.output_y + gapp"
    path = tmp_path / "typo.json"
    path.write_text(json.dumps(d))
    before = path.read_bytes()
    code = cli.main(["check", str(path)])
    captured = capsys.readouterr()
    err = captured.out + captured.err
    assert code == cli.EXIT_SCENE
    assert f"{path}: $.parts[1].shape.position[1]: found '= guide.output_y + gapp'" in err
    assert "unknown name gapp" in err
    assert err.count("error:") == 1      # the detector linked to the window is not reported again
    assert path.read_bytes() == before


# ----------------------------------------------------------------------------- sources

def beam_scene(**source) -> dict:
    d = json.loads((SAMPLES / "roof-prism-retroreflector.json").read_text())
    d["sources"][0].update(source)
    return d


def test_aim_at_turns_the_source_to_face_the_point():
    d = beam_scene(position=[3.0, -6.0], aim_at=[0.0, 4.0])
    del d["sources"][0]["direction_deg"]
    src = scene_from_dict(d).sources[0]
    # from memory: the direction from P to A is atan2(Ay - Py, Ax - Px)
    assert src.direction_deg == math.degrees(math.atan2(10.0, -3.0))
    assert src.position == (3.0, -6.0)


def test_pivot_turns_position_and_direction_about_the_pivot():
    d = beam_scene(position=[0.0, -6.0], direction_deg=90.0, pivot=[0.0, 0.0], turn_deg=30.0)
    src = scene_from_dict(d).sources[0]
    # from memory: a point at distance 6 below the pivot, turned 30 deg counter-clockwise,
    # lands at (6 sin 30, -6 cos 30); the beam still heads through the pivot
    assert src.position == pytest.approx((3.0, -6.0 * math.cos(math.radians(30))), abs=1e-12)
    assert src.direction_deg == 120.0
    along = (math.cos(math.radians(120)), math.sin(math.radians(120)))
    cross = -src.position[0] * along[1] + src.position[1] * along[0]
    assert cross == pytest.approx(0.0, abs=1e-12)


def test_aim_and_direction_together_is_an_error():
    got = problems_of(beam_scene(aim_at=[0.0, 0.0]))
    assert "no direction_deg beside aim_at" in got["$.sources[0].direction_deg"]
    got = problems_of(beam_scene(turn_deg=5.0))
    assert "a point [x, y] to turn the source about" in got["$.sources[0].pivot"]


def test_angle_sweep_by_turn_equals_hand_placed_beams():
    res = sweep(json.loads(SHEET.read_text()), [parse_vary("entry_deg=-6,3")], {"rays": 200}, workers=1)
    for row in res.rows:
        d = json.loads(SHEET.read_text())
        src = d["sources"][0]
        for key in ("aim_at", "pivot", "turn_deg"):
            del src[key]
        t = math.radians(row["entry_deg"])
        x, y = 0.0, -6.0       # below the middle prism, which sits at the origin
        src["position"] = [math.cos(t) * x - math.sin(t) * y, math.sin(t) * x + math.cos(t) * y]
        src["direction_deg"] = 90.0 + row["entry_deg"]
        hand = run_point(d, [], {"rays": 200})
        assert row["efficiency: return"] == pytest.approx(hand["efficiency"]["return"], abs=1e-12)


# ----------------------------------------------------------------------------- repeats

def test_repeated_part_copies_sit_a_pitch_apart_with_their_own_face_names():
    scene = load_scene(SHEET)
    names = [p.name for p in scene.parts]
    assert names == [f"sheet[{k}]" for k in range(7)]
    pitch = 2.0 * math.sqrt(2.0)       # the hypotenuse of a 2 mm leg right-angle prism
    for k, p in enumerate(scene.parts):
        assert p.shape.position == pytest.approx(((k - 3) * pitch, 0.0), abs=1e-12)
    faces = {(p.name, e.face): e.treatment.kind for p in scene.parts for e in p.outer.edges}
    assert faces[("sheet[0]", "sealed end")] == faces[("sheet[6]", "sealed end")] == "absorber"
    assert ("sheet[0]", "left leg") not in faces and faces[("sheet[1]", "left leg")] == "bare"
    assert faces[("sheet[6]", "left leg")] == "bare"


def test_copy_faces_show_in_the_ledger_and_routes():
    import raytrace
    from raytrace.routes import routes_text
    scene = load_scene(SHEET)
    d = json.loads(SHEET.read_text())
    d["sources"][0]["width"] = 24.0    # the whole strip lit: light reaches the sealed ends
    result = raytrace.trace(scene_from_dict(d), rays=300, track_paths=True)
    labels = {b.label for b in result.ledger.buckets if b.flux > 0}
    assert "absorbed at sheet[0] / sealed end" in labels
    assert "enter through sheet[3] / hypotenuse" in routes_text(result, 10)
    assert scene.parts  # loaded once more unchanged


def test_a_copy_that_does_not_exist_is_reported_at_the_faces_key():
    d = json.loads(SHEET.read_text())
    d["parts"][0]["faces"]["sheet[9].hypotenuse"] = {"treatment": "absorber"}
    got = problems_of(d)
    assert "sheet[0] .. sheet[6]" in got['$.parts[0].faces."sheet[9].hypotenuse"']
    d = json.loads(SHEET.read_text())
    d["sources"][0]["aim_at"][0] = "= sheet[7].x"
    assert "copies sheet[0] .. sheet[6]" in problems_of(d)["$.sources[0].aim_at[0]"]
    d = json.loads(SHEET.read_text())
    d["parts"][0]["repeat"]["pitch"] = "= 0.5 * sheet[0].hypotenuse"
    assert "overlap" in " ".join(problems_of(d).values())


def test_problems_in_copies_name_the_part_written_in_the_file():
    d = json.loads(SHEET.read_text())
    d["parts"][0]["material"] = "unobtainium"
    got = problems_of(d)
    assert set(got) == {"$.parts[0].material"}


def test_sweeping_the_count_equals_writing_the_copies_by_hand():
    """Five copies written out one by one (sealed ends on the first and last) trace like the
    sample swept to count 5: sheet[-1] is the last copy whatever the count."""
    res = sweep(json.loads(SHEET.read_text()), [parse_vary("count=5")], {"rays": 100}, workers=1)
    d = json.loads(SHEET.read_text())
    template = d["parts"].pop(0)
    pitch = 2.0 * math.sqrt(2.0)
    sealed = {"name": "sealed end", "treatment": "absorber"}
    for k in range(5):
        p = json.loads(json.dumps(template))
        del p["repeat"], p["faces"]
        p["name"] = f"sheet[{k}]"
        p["shape"]["params"]["leg"] = 2.0
        p["shape"]["position"] = [(k - 2) * pitch, 0.0]
        if k in (0, 4):
            p["faces"] = {("left leg" if k == 0 else "right leg"): sealed}
        d["parts"].append(p)
    del d["numbers"]
    d["sources"][0].update(position=[0.0, -6.0], direction_deg=90.0, pivot=[0.0, 0.0], turn_deg=5.0)
    del d["sources"][0]["aim_at"]
    hand = run_point(d, [], {"rays": 100})
    assert res.rows[0]["status"] == hand["status"] == "ok"
    assert res.rows[0]["efficiency: return"] == pytest.approx(hand["efficiency"]["return"], abs=1e-12)
    d["sources"][0]["width"] = 24.0
    hand = run_point(d, [], {"rays": 100})
    wide = json.loads(SHEET.read_text())
    wide["sources"][0]["width"] = 24.0
    res = sweep(wide, [parse_vary("count=5")], {"rays": 100}, workers=1)
    sealed_share = res.rows[0]["share: absorbed at sheet[4] / sealed end"]
    assert sealed_share > 0
    assert sealed_share == pytest.approx(hand["shares"]["absorbed at sheet[4] / sealed end"], abs=1e-12)


def test_sheet_sample_round_trips_as_written(tmp_path):
    scene = load_scene(SHEET)
    assert scene_to_text(scene) == SHEET.read_text()
    moved = replace(scene, parts=[scene.parts[0]] + [
        replace(p, shape=replace(p.shape, position=(p.shape.position[0], 0.5)), outer=p.outer.transformed(0, 0.5, 0))
        if p.name == "sheet[3]" else p for p in scene.parts[1:]])
    data = scene_to_dict(moved)      # one copy moved by hand: the row is written copy by copy
    assert [p["name"] for p in data["parts"]] == [f"sheet[{k}]" for k in range(7)]
    assert "repeat" not in json.dumps(data["parts"])


# ----------------------------------------------------------------------------- fuzzed links

EXPRESSION_TEXT = st.text(alphabet="0123456789.e+-*/()[], '_abcdghinoprstuwxy", max_size=30)
LINKED_SPOTS = [
    (PIPE, ("parts", 1, "shape", "position", 0)), (PIPE, ("numbers", "gap")),
    (PIPE, ("detectors", 0, "bins")), (SHEET, ("parts", 0, "repeat", "count")),
    (SHEET, ("parts", 0, "repeat", "pitch")), (SHEET, ("sources", 0, "aim_at", 1)),
    (SHEET, ("sources", 0, "turn_deg")), (SHEET, ("numbers", "leg")),
]


@settings(max_examples=int(os.environ.get("RAYTRACE_FUZZ_EXAMPLES", "300")), deadline=None,
          derandomize=True)
@given(spot=st.sampled_from(LINKED_SPOTS), text=EXPRESSION_TEXT, eq=st.booleans())
def test_random_expressions_load_or_fail_cleanly(spot, text, eq):
    """Any text in a linked field ends in a Scene or in problems that each name a JSON path
    (never another exception), and a scene that loads saves and reloads the same."""
    path, where = spot
    d = json.loads(path.read_text())
    target = d
    for k in where[:-1]:
        target = target[k]
    target[where[-1]] = ("= " if eq else "") + text
    try:
        scene = scene_from_dict(d)
    except SceneError as e:
        assert e.problems and all(p.path.startswith("$") for p in e.problems)
        return
    assert scene_from_dict(scene_to_dict(scene)) == scene


def test_a_detector_laid_along_one_copys_face():
    """Face values of a copy place a detector just under the middle prism's hypotenuse: from
    memory, a right-angle prism with 2 mm legs has a 2 sqrt 2 mm hypotenuse, here centred on
    x = 0 (copy 3 of 7 at pitch 2 sqrt 2, the first at -3 pitches)."""
    d = json.loads(SHEET.read_text())
    d["detectors"].append({"name": "under prism 3",
                           "start": ["= sheet[3].hypotenuse.start_x", "= sheet[3].hypotenuse.start_y - 0.5"],
                           "end": ["= sheet[3].'hypotenuse'.end_x", "= sheet[3].hypotenuse.end_y - 0.5"],
                           "absorbing": False})
    det = scene_from_dict(d).detectors[1]
    half = math.sqrt(2.0)
    assert det.start == pytest.approx((-half, -0.5), abs=1e-12)
    assert det.end == pytest.approx((half, -0.5), abs=1e-12)
    d["detectors"][1]["end"][0] = "= sheet[3].'left leg'.middle_x"
    msg = problems_of(d)["$.detectors[1].end[0]"]
    assert "FACE.start_x (start_y, end_x, end_y, mid_x, mid_y) for its faces 'hypotenuse'" in msg


def test_renaming_a_part_others_link_to_saves_them_as_plain_numbers():
    scene = load_scene(PIPE)
    renamed = replace(scene, parts=[replace(scene.parts[0], name="light guide"), scene.parts[1]])
    data = scene_to_dict(renamed)
    assert data["parts"][1]["shape"]["position"] == [19.5, 22.0]
    assert data["detectors"][0]["end"] == [25.5, 25.5]
    assert scene_from_dict(data) == renamed
