"""Bad scene files: every problem is reported at once, readably, and the file is left alone.

Each problem must name the file, the JSON path of the field, what was found and what was
expected (common practice for validators: report all problems, point at the field).
"""
from __future__ import annotations

import copy
import json
import os
from pathlib import Path

import pytest

from raytrace.cli import main
from raytrace.errors import SceneError
from raytrace.scene_io import load_scene

SAMPLES = Path(__file__).parent.parent / "samples"
WINDOW = json.loads((SAMPLES / "oblique-window.json").read_text(encoding="utf-8"))


def _square(name, x0, y0, side, material="PMMA"):
    pts = [[x0, y0], [x0 + side, y0], [x0 + side, y0 + side], [x0, y0 + side]]
    return {"name": name, "material": material, "boundary": [{"from": p} for p in pts]}


def _write(tmp_path: Path, data=None, text: str | None = None, name="scene.json") -> Path:
    f = tmp_path / name
    f.write_text(text if text is not None else json.dumps(data, indent=2), encoding="utf-8")
    return f


def _problems(f: Path):
    """Load `f`, expecting failure; check the file is unchanged and every message is complete."""
    before, mtime = f.read_bytes(), os.stat(f).st_mtime_ns
    with pytest.raises(SceneError) as info:
        load_scene(f)
    assert f.read_bytes() == before and os.stat(f).st_mtime_ns == mtime, "a failed load changed the file"
    for p in info.value.problems:
        text = str(p)
        assert text.startswith(f"{f}: $"), text
        assert "found " in text and "; expected " in text, text
        assert "Traceback" not in text
    return info.value.problems


def _one(problems, path):
    hits = [p for p in problems if p.path == path]
    assert len(hits) == 1, [str(p) for p in problems]
    return hits[0]


def _scene(**changes):
    d = copy.deepcopy(WINDOW)
    d.update(changes)
    return d


def test_malformed_json_names_line_and_column(tmp_path):
    f = _write(tmp_path, text='{\n  "format": "raytrace2d-scene",\n  "version": 1,,\n}\n')
    (p,) = _problems(f)
    assert p.path == "$"
    assert "line 3 column 16" in p.found, p.found   # the second comma
    assert p.expected == "valid JSON"


def test_truncated_file_is_malformed_json(tmp_path):
    text = (SAMPLES / "oblique-window.json").read_text(encoding="utf-8")
    f = _write(tmp_path, text=text[: len(text) // 2])
    (p,) = _problems(f)
    assert "malformed JSON at line" in p.found


def test_missing_field_is_named(tmp_path):
    d = _scene()
    del d["parts"][0]["material"]
    p = _one(_problems(_write(tmp_path, d)), "$.parts[0].material")
    assert p.found == "<missing>"


def test_mistyped_field_says_what_was_found(tmp_path):
    d = _scene()
    d["detectors"][0]["bins"] = "sixty"
    d["sources"][0]["position"] = "here"
    probs = _problems(_write(tmp_path, d))
    assert "'sixty'" in _one(probs, "$.detectors[0].bins").found
    p = _one(probs, "$.sources[0].position")
    assert "'here'" in p.found and "point [x, y]" in p.expected


def test_unknown_keys_are_reported_with_the_accepted_ones(tmp_path):
    d = _scene()
    d["colour"] = "red"
    d["sources"][0]["power"] = 2
    probs = _problems(_write(tmp_path, d))
    assert "flux" in _one(probs, "$.sources[0].power").expected
    assert "parts" in _one(probs, "$.colour").expected


def test_unknown_material_suggests_close_names(tmp_path):
    d = _scene()
    d["parts"][0]["material"] = "fused silca"
    p = _one(_problems(_write(tmp_path, d)), "$.parts[0].material")
    assert p.found == "'fused silca'"
    assert "'fused silica'" in p.expected


def test_unknown_material_in_another_case_suggests_the_right_case(tmp_path):
    d = _scene()
    d["parts"][0]["material"] = "pmma"
    p = _one(_problems(_write(tmp_path, d)), "$.parts[0].material")
    assert "'PMMA'" in p.expected


@pytest.mark.parametrize("where, value", [
    (("parts", 0, "shape", "params", "thickness"), 0),
    (("parts", 0, "shape", "params", "height"), -4.0),
    (("sources", 0, "width"), 0),
    (("detectors", 0, "bins"), 0),
])
def test_non_positive_sizes_are_rejected(tmp_path, where, value):
    d = _scene()
    node = d
    for k in where[:-1]:
        node = node[k]
    node[where[-1]] = value
    path = "$." + ".".join(f"{k}" if isinstance(k, str) else f"[{k}]" for k in where).replace(".[", "[")
    p = _one(_problems(_write(tmp_path, d)), path)
    assert p.found == json.dumps(value)
    assert "greater than 0" in p.expected or "at least 1" in p.expected


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity"])
def test_non_finite_numbers_are_rejected(tmp_path, token):
    text = json.dumps(_scene(), indent=2)
    text = text.replace('"direction_deg": 45.0', f'"direction_deg": {token}')
    text = text.replace('"thickness": 10.0', f'"thickness": {token}')
    text = text.replace('"start": [\n        30.0', f'"start": [\n        {token}')
    probs = _problems(_write(tmp_path, text=text))
    assert token in _one(probs, "$.sources[0].direction_deg").found
    assert token in _one(probs, "$.parts[0].shape.params.thickness").found
    assert token in _one(probs, "$.detectors[0].start").found


def test_self_intersecting_boundary(tmp_path):
    # a bow tie: the edges (0,0)-(10,10) and (10,0)-(0,10) cross at (5,5)
    d = _scene(parts=[{"name": "bow tie", "material": "PMMA", "boundary": [
        {"from": [0, 0]}, {"from": [10, 10]}, {"from": [10, 0]}, {"from": [0, 10]}]}])
    p = _one(_problems(_write(tmp_path, d)), "$.parts[0].boundary")
    assert "crosses itself at (5, 5) mm" in p.found
    assert "simple" in p.expected


def test_overlapping_parts_name_both_and_the_overlap_area(tmp_path):
    # squares [0,10]^2 and [6,16]x[7,17] overlap in a 4 x 3 = 12 mm^2 rectangle
    a = _square("left block", 0, 0, 10)
    b = _square("right block", 6, 7, 10)
    d = _scene(parts=[a, b])
    p = _one(_problems(_write(tmp_path, d)), "$.parts[1]")
    assert "'left block'" in p.found and "'right block'" in p.found
    assert "by 12 mm^2" in p.found


@pytest.mark.parametrize("second", ["polycarbonate", "PMMA"], ids=["other material", "same material"])
def test_coincident_parts_are_refused_naming_both(tmp_path, second):
    """Two parts over the same 10 mm square (a part pasted twice, or a window drawn over a
    guide): which material fills the square would depend on the order of the parts, so the
    file is refused, naming both parts, their materials and the first part's path."""
    d = _scene(parts=[_square("guide", 0, 0, 10), _square("copy", 0, 0, 10, material=second)])
    p = _one(_problems(_write(tmp_path, d)), "$.parts[1]")
    assert "'copy' (" + second + ")" in p.found and "'guide' (PMMA, $.parts[0])" in p.found
    assert "same region" in p.found and "do not coincide" in p.expected
    # listed the other way round, the same refusal names the parts the other way round
    d = _scene(parts=[_square("copy", 0, 0, 10, material=second), _square("guide", 0, 0, 10)])
    p = _one(_problems(_write(tmp_path, d, name="swapped.json")), "$.parts[1]")
    assert "'guide' (PMMA)" in p.found and "'copy' (" + second + ", $.parts[0])" in p.found


def test_coincident_parts_within_the_flattening_slack_are_refused(tmp_path):
    """A second square 1e-9 mm off the first still covers the same region to within the
    tolerance the overlap check measures with."""
    d = _scene(parts=[_square("guide", 0, 0, 10), _square("copy", 1e-9, 0, 10, material="polycarbonate")])
    p = _one(_problems(_write(tmp_path, d)), "$.parts[1]")
    assert "same region" in p.found


def test_a_part_nested_inside_a_larger_one_is_not_coincident(tmp_path):
    d = _scene(parts=[_square("cladding", 0, 0, 10), _square("core", 2, 2, 6, material="polycarbonate")])
    scene = load_scene(_write(tmp_path, d))
    assert [p.name for p in scene.parts] == ["cladding", "core"]


def test_index_below_one_needs_to_be_asked_for(tmp_path):
    d = _scene(materials={"plasma": {"model": "constant", "n": 0.9}})
    d["parts"][0]["material"] = "plasma"
    p = _one(_problems(_write(tmp_path, d)), "$.materials.plasma.n")
    assert "allow_index_below_one" in p.expected
    # the same material with the flag set loads
    d["materials"]["plasma"]["allow_index_below_one"] = True
    scene = load_scene(_write(tmp_path, d, name="asked.json"))
    assert scene.materials["plasma"].allow_index_below_one


def test_failed_user_material_is_not_also_reported_as_unknown(tmp_path):
    d = _scene(materials={"resin": {"model": "constant", "n": "1.5"}})
    d["parts"][0]["material"] = "resin"
    probs = _problems(_write(tmp_path, d))
    assert [p.path for p in probs] == ["$.materials.resin.n"]


def test_five_distinct_problems_give_five_messages(tmp_path):
    d = _scene()
    d["parts"][0]["material"] = "crown glas"                # unknown material
    d["sources"][0]["flux"] = -1                            # negative flux
    d["detectors"][0]["central_fraction"] = 2               # out of range
    d["trace"]["mode"] = "fast"                             # not a mode
    d["parts"].append({"name": "bow tie", "material": "PMMA", "boundary": [   # crosses itself
        {"from": [50, 0]}, {"from": [60, 10]}, {"from": [60, 0]}, {"from": [50, 10]}]})
    probs = _problems(_write(tmp_path, d))
    assert sorted(p.path for p in probs) == sorted([
        "$.parts[0].material", "$.sources[0].flux", "$.detectors[0].central_fraction",
        "$.trace.mode", "$.parts[1].boundary"])


def test_missing_file_is_a_scene_error(tmp_path):
    with pytest.raises(SceneError) as info:
        load_scene(tmp_path / "nope.json")
    assert "no such file" in str(info.value)


def test_not_utf8_is_a_scene_error(tmp_path):
    f = tmp_path / "latin1.json"
    f.write_bytes(b'{"name": "caf\xe9"}')
    with pytest.raises(SceneError) as info:
        load_scene(f)
    assert "UTF-8" in info.value.problems[0].expected


def test_check_command_prints_every_problem_and_fails(tmp_path, capsys):
    d = _scene()
    d["parts"][0]["material"] = "fused silca"
    d["sources"][0]["flux"] = "bright"
    bad = _write(tmp_path, d, name="bad.json")
    good = SAMPLES / "oblique-window.json"
    code = main(["check", str(good), str(bad)])
    out = capsys.readouterr().out
    assert code == 1
    assert f"{good}: ok" in out
    lines = [ln for ln in out.splitlines() if ln.startswith("error:")]
    assert len(lines) == 2, out
    assert any(f"{bad}: $.parts[0].material: found 'fused silca'" in ln for ln in lines)
    assert any(f"{bad}: $.sources[0].flux: found <'bright'>" in ln for ln in lines)
    assert "Traceback" not in out


def test_check_command_on_malformed_json(tmp_path, capsys):
    bad = _write(tmp_path, text="{\n  \"format\": }\n", name="broken.json")
    assert main(["check", str(bad)]) == 1
    out = capsys.readouterr().out
    assert "line 2 column 13" in out and str(bad) in out


def test_check_command_passes_on_every_sample(capsys):
    samples = sorted(str(p) for p in SAMPLES.glob("*.json"))
    assert main(["check", *samples]) == 0
    assert capsys.readouterr().out.count(": ok (") == len(samples)


@pytest.mark.parametrize("literal", ["1" + "0" * 400, "-" + "9" * 5000, "1e400"])
def test_absurdly_large_numbers_are_rejected(tmp_path, literal):
    """JSON allows any number of digits: Python refuses to read more than 4300 of them and a
    float overflows past 1e308; neither may surface as a traceback."""
    text = json.dumps(_scene(), indent=2).replace('"thickness": 10.0', f'"thickness": {literal}')
    text = text.replace('"bins": 60', f'"bins": {literal}', 1)
    probs = _problems(_write(tmp_path, text=text))
    assert _one(probs, "$.parts[0].shape.params.thickness")
    assert _one(probs, "$.detectors[0].bins")


def test_coordinates_beyond_a_kilometre_are_rejected(tmp_path):
    d = _scene()
    d["sources"][0]["position"] = [1e9, 0.0]
    d["parts"][0]["shape"]["params"]["height"] = 1e308
    probs = _problems(_write(tmp_path, d))
    assert "at most 1e+06" in _one(probs, "$.sources[0].position").expected
    assert "at most 1e+06" in _one(probs, "$.parts[0].shape.params.height").expected


def test_a_billion_microprisms_is_refused_before_building(tmp_path):
    d = json.loads((SAMPLES / "microprism-strip.json").read_text(encoding="utf-8"))
    d["parts"][0]["shape"]["params"]["count"] = 10**9
    p = _one(_problems(_write(tmp_path, d)), "$.parts[0].shape.params.count")
    assert "at most 100000" in p.expected


def _sq(name, x):
    return _square(name, x, 0, 1)


def _case(edit):
    d = _scene()
    edit(d)
    return d


def _set(d, path, value):
    node = d
    for k in path[:-1]:
        node = node[k]
    node[path[-1]] = value


BAD_STRUCTURE = {
    "both boundary and shape": (lambda d: _set(d, ("parts", 0, "boundary"), _sq("a", 0)["boundary"]),
                                "$.parts[0]", "both 'boundary' and 'shape'"),
    "neither boundary nor shape": (lambda d: d["parts"][0].pop("shape"), "$.parts[0]", "neither"),
    "arc centre off the bisector": (lambda d: (_set(d, ("parts",), [_sq("a", 0)]),
                                               _set(d, ("parts", 0, "boundary", 1, "arc"),
                                                    {"center": [0.3, 3], "direction": "ccw"})),
                                    "$.parts[0].boundary[1].arc.center", "[0.3, 3.0]"),
    "arc direction": (lambda d: (_set(d, ("parts",), [_sq("a", 0)]),
                                 _set(d, ("parts", 0, "boundary", 1, "arc"), {"center": [2, 0.5], "direction": "left"})),
                      "$.parts[0].boundary[1].arc.direction", "'left'"),
    "hole outside the part": (lambda d: _set(d, ("parts",), [dict(_sq("a", 0), holes=[_sq("h", 5)["boundary"]])]),
                              "$.parts[0].holes[0]", "outside"),
    "duplicate part names": (lambda d: _set(d, ("parts",), [_sq("a", 0), _sq("a", 3)]), "$.parts[1].name", "'a'"),
    "duplicate source names": (lambda d: d["sources"].append(copy.deepcopy(d["sources"][0])),
                               "$.sources[1].name", "'probe beam'"),
    "unknown face": (lambda d: _set(d, ("parts", 0, "faces"), {"frnt": {"treatment": "absorber"}}),
                     "$.parts[0].faces.frnt", "'frnt'"),
    "unknown treatment": (lambda d: _set(d, ("parts", 0, "faces"), {"front": {"treatment": "paint"}}),
                          "$.parts[0].faces.front.treatment", "'paint'"),
    "reflectance above 1": (lambda d: _set(d, ("parts", 0, "faces"),
                                           {"front": {"treatment": {"kind": "mirror", "reflectance": 1.5}}}),
                            "$.parts[0].faces.front.treatment.reflectance", "1.5"),
    "two-point boundary": (lambda d: _set(d, ("parts",), [dict(_sq("a", 0), boundary=_sq("a", 0)["boundary"][:2])]),
                           "$.parts[0].boundary", "2 edge(s)"),
    "zero-length edge": (lambda d: (_set(d, ("parts",), [_sq("a", 0)]), _set(d, ("parts", 0, "boundary", 2, "from"), [1, 0])),
                         "$.parts[0].boundary[1]", "zero length"),
    "zero-length detector": (lambda d: _set(d, ("detectors", 0, "end"), d["detectors"][0]["start"]),
                             "$.detectors[0].end", "[30.0, -20.0]"),
    "wavelength out of range": (lambda d: _set(d, ("sources", 0, "spectrum"), {"wavelength_nm": 50}),
                                "$.sources[0].spectrum.wavelength_nm", "50"),
    "Sellmeier pole in band": (lambda d: (_set(d, ("materials",), {"g": {"model": "sellmeier", "b": [1.0], "c": [0.25]}}),
                                          _set(d, ("parts", 0, "material"), "g")),
                               "$.materials.g.c[0]", "0.25"),
    "other format version": (lambda d: _set(d, ("version",), 2), "$.version", "2"),
    "other units": (lambda d: _set(d, ("units",), {"length": "in"}), "$.units", '"in"'),
}


@pytest.mark.parametrize("name", sorted(BAD_STRUCTURE))
def test_structural_problems_name_the_field(tmp_path, name):
    edit, path, found = BAD_STRUCTURE[name]
    p = _one(_problems(_write(tmp_path, _case(edit))), path)
    assert found in p.found, str(p)


def test_a_byte_order_mark_is_accepted(tmp_path):
    """Some Windows editors start UTF-8 files with a byte-order mark; that is not an error."""
    f = tmp_path / "bom.json"
    f.write_bytes(b"\xef\xbb\xbf" + (SAMPLES / "oblique-window.json").read_bytes())
    assert load_scene(f).name == WINDOW["name"]


def test_a_directory_is_a_scene_error(tmp_path):
    with pytest.raises(SceneError) as info:
        load_scene(tmp_path)
    assert info.value.problems[0].found == "<a directory>"
    assert info.value.problems[0].expected == "a regular scene file"


def _holed(holes):
    outer = _square("holed block", 0, 0, 10)
    outer["holes"] = [_square("h", *h)["boundary"] for h in holes]
    return _scene(parts=[outer])


def _no_library_words(text):
    # shapely's own validity texts, e.g. "Hole lies outside shell[58 23]", must not reach the user
    import re
    for word in ("shell", "Self-intersection", "Interior is disconnected", "Holes are nested"):
        assert word not in text, text
    assert not re.search(r"\[\S+ \S+\]", text), text   # the library's "[x y]" location


@pytest.mark.parametrize("holes, path, words", [
    # a 5 mm square hole at (50, 20): wholly outside the 10 mm block, first vertex (50, 20)
    ([(50, 20, 5)], "$.parts[0].holes[0]", "a hole lying outside the part's outer boundary at (50, 20) mm"),
    # second hole in the list is the one outside: the path names it, not the list
    ([(2, 2, 2), (50, 20, 5)], "$.parts[0].holes[1]", "outside the part's outer boundary at (50, 20) mm"),
    # [8, 13] x [2, 7] crosses the block's right face x = 10
    ([(8, 2, 5)], "$.parts[0].holes[0]", "a hole crossing the part's outer boundary at (10, "),
    # [1, 5]^2 and [3, 7]^2 share the square [3, 5]^2
    ([(1, 1, 4), (3, 3, 4)], "$.parts[0].holes[1]", "a hole overlapping hole 0 ($.parts[0].holes[0]) at ("),
    ([(1, 1, 6), (2, 2, 2)], "$.parts[0].holes[1]", "inside or around hole 0"),
])
def test_hole_problems_name_the_hole_in_plain_words(tmp_path, holes, path, words):
    p = _one(_problems(_write(tmp_path, _holed(holes))), path)
    assert words in p.found, str(p)
    _no_library_words(p.found)


def test_validity_reasons_are_translated():
    from raytrace.compile import plain_validity
    assert plain_validity("Hole lies outside shell[58 23]") == \
        "a hole lying outside the part's outer boundary at (58, 23) mm"
    assert plain_validity("Self-intersection[10 10]") == "boundaries that cross at (10, 10) mm"
    assert plain_validity("Interior is disconnected[2.5 -1e-07]") == \
        "holes that cut the part into pieces at (2.5, -1e-07) mm"
    assert plain_validity("something new[1 2]") == "an invalid shape at (1, 2) mm"
    _no_library_words(plain_validity("Too few distinct points in geometry component"))


@pytest.mark.parametrize("centre,where", [([20, 10], "start"), ([0, 10], "end")])
def test_an_arc_centred_on_its_own_start_or_end_gets_one_clear_message(tmp_path, capsys, centre, where):
    """A centre on the arc's start (or end) is a radius of zero: one message at the arc's centre
    field saying so, not a second one about a zero-length edge that follows from it."""
    data = copy.deepcopy(WINDOW)
    data["parts"] = [{"name": "domed window", "material": "fused silica", "boundary": [
        {"from": [0, 0]}, {"from": [20, 0]},
        {"from": [20, 10], "face": "dome", "arc": {"center": centre, "direction": "ccw"}},
        {"from": [0, 10]}]}]
    f = _write(tmp_path, data)
    assert main(["check", str(f)]) == 1
    lines = [ln for ln in capsys.readouterr().out.splitlines() if ln.startswith("error:")]
    assert len(lines) == 1, lines
    assert lines[0].startswith(f"error: {f}: $.parts[0].boundary[2].arc.center: found {[float(c) for c in centre]}")
    assert f"a centre off the arc's {where}" in lines[0] and "radius of zero" in lines[0]
    assert "zero length" not in lines[0]


def test_a_binary_dxf_given_as_a_scene_says_what_it_is_not_a_decoding_error(tmp_path, capsys):
    """The bundled drawing saved as binary DXF by ezdxf (the reference DXF library): `raytrace
    check` said "unreadable file: 'utf-8' codec can't decode byte"; now it names a binary DXF
    drawing and the import command, whatever the file's suffix."""
    import ezdxf
    for name in ("pipe.dxf", "pipe.json"):
        binary = tmp_path / name
        ezdxf.readfile(SAMPLES / "light-pipe.dxf").saveas(binary, fmt="bin")
        assert main(["check", str(binary)]) == 1
        out = capsys.readouterr().out
        assert f"error: {binary}: $: found <a binary DXF drawing, not a scene file>" in out
        assert f"raytrace import-dxf {binary} -o pipe.json" in out and "codec" not in out


def test_a_dxf_drawing_given_as_a_scene_says_how_to_import_it(capsys):
    """`raytrace check` (or trace) on the bundled DXF drawing: not 'malformed JSON' but what the
    file is and the import command that makes a scene of it."""
    drawing = SAMPLES / "light-pipe.dxf"
    assert main(["check", str(drawing)]) == 1
    out = capsys.readouterr().out
    assert f"error: {drawing}: $: found <a DXF drawing, not a scene file>" in out
    assert f"raytrace import-dxf {drawing} -o light-pipe.json" in out and "malformed JSON" not in out
    assert main(["trace", str(drawing)]) == 1
    assert "a DXF drawing, not a scene file" in capsys.readouterr().err


def test_check_counts_in_plain_words(capsys):
    """One source is '1 source', two detectors '2 detectors'."""
    assert main(["check", str(SAMPLES / "microprism-strip.json")]) == 0
    assert "ok (1 part, 1 source, 2 detectors)" in capsys.readouterr().out
