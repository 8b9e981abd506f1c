"""DXF import and export: the sample pipe drawn by hand traces the ledger of the JSON builder
pipe, exports re-import to the same geometry, areas of bulged polylines match the circle
formula, and bad drawings get errors naming the entity."""
from __future__ import annotations

import math
from pathlib import Path

import ezdxf
import pytest

import raytrace
from raytrace import cli
from raytrace.dxf_io import export_dxf, import_dxf
from raytrace.errors import SceneError
from raytrace.geometry import Edge, Loop, Part, Treatment
from raytrace.scene import Scene
from raytrace.scene_io import load_scene, save_scene

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "samples"
PIPE_JSON = SAMPLES / "light-pipe-90.json"
PIPE_DXF = SAMPLES / "light-pipe.dxf"
MAPPING = {"guide": "PMMA", "panel window": "polycarbonate"}


def drawing(tmp_path, draw, units=4, name="d.dxf") -> Path:
    doc = ezdxf.new("R2010")
    if units is not None:
        doc.header["$INSUNITS"] = units
    draw(doc.modelspace())
    path = tmp_path / name
    doc.saveas(path)
    return path


def _distance_to_edge(p, e) -> float:
    if e.is_arc:
        c = e.arc_center
        return abs(math.dist(p, c) - e.radius)
    (x0, y0), (x1, y1) = e.start, e.end
    t = max(0.0, min(1.0, ((p[0] - x0) * (x1 - x0) + (p[1] - y0) * (y1 - y0)) / ((x1 - x0) ** 2 + (y1 - y0) ** 2)))
    return math.dist(p, (x0 + t * (x1 - x0), y0 + t * (y1 - y0)))


def test_dxf_pipe_traces_the_same_ledger_as_the_json_pipe():
    built = load_scene(PIPE_JSON)
    drawn = import_dxf(PIPE_DXF, layer_materials=MAPPING, setup=built)
    assert [(p.name, p.material) for p in drawn.parts] == [(p.name, p.material) for p in built.parts]
    a, b = raytrace.trace(built, rays=400), raytrace.trace(drawn, rays=400)
    assert b.efficiency("viewer side") == pytest.approx(a.efficiency("viewer side"), abs=1e-9)
    # the drawing's faces are unnamed ("edge N"): each builder face's loss is the sum of the drawn
    # edges lying on it (the builder joins a wall's straight and bent pieces into one face)
    on_face: dict[str, float] = {}
    for bucket in b.ledger.buckets:
        if bucket.kind != "escaped" or " / " not in bucket.label:
            on_face[bucket.label] = on_face.get(bucket.label, 0.0) + bucket.flux
            continue
        label = bucket.label.removeprefix("escaped via ")
        part_name, face = label.split(" / ", 1)
        part = drawn.part(part_name)
        edge = part.outer.edges[int(face.removeprefix("edge ")) - 1]
        mid = edge.point_at(0.5)
        target = built.part(part_name)
        from raytrace.shapes import build
        loop = build(target.shape)
        named = next(e.face for e in loop.edges if _distance_to_edge(mid, e) < 1e-9)
        key = bucket.label.replace(f"{part_name} / {face}", f"{part_name} / {named}")
        on_face[key] = on_face.get(key, 0.0) + bucket.flux
    expected = {bk.label: bk.flux for bk in a.ledger.buckets}
    assert set(on_face) == set(expected)
    for label, flux in expected.items():
        assert on_face[label] == pytest.approx(flux, abs=1e-9), label


def scene_with_everything() -> Scene:
    outer = Loop.polygon([(0, 0), (20, 0), (20, 10), (0, 10)], ["base", "right", "top", "left"],
                         [Treatment(), Treatment("mirror", 0.9), Treatment("absorber"), Treatment()])
    hole = Loop((Edge((12, 5), (8, 5), (10, 5), False), Edge((8, 5), (12, 5), (10, 5), False)))  # round, clockwise
    ring = Part("ring", "fused silica", outer, (hole,))
    return Scene(parts=[ring], name="ring")


@pytest.mark.parametrize("source", ["light-pipe-90.json", "roof-prism-retroreflector.json", "microprism-strip.json",
                                    "oblique-window.json", "cemented-prism-pair.json", None])
def test_export_reimports_to_the_same_geometry(tmp_path, source):
    scene = load_scene(SAMPLES / source) if source else scene_with_everything()
    out = tmp_path / "out.dxf"
    export_dxf(scene, out)
    back = import_dxf(out, setup=scene)
    assert [(p.name, p.material, len(p.holes)) for p in back.parts] == [(p.name, p.material, len(p.holes)) for p in scene.parts]
    for p, q in zip(scene.parts, back.parts):
        for la, lb in zip(p.loops, q.loops):
            assert len(la.edges) == len(lb.edges)
            for ea, eb in zip(la.edges, lb.edges):
                assert math.dist(ea.start, eb.start) < 1e-9 and math.dist(ea.end, eb.end) < 1e-9
                assert ea.is_arc == eb.is_arc and ea.face == eb.face and ea.treatment == eb.treatment
                if ea.is_arc:
                    assert math.dist(ea.arc_center, eb.arc_center) < 1e-9 and ea.ccw == eb.ccw
    doc = ezdxf.readfile(out)
    assert {layer.dxf.name for layer in doc.layers} >= {p.material for p in scene.parts}
    assert doc.header["$INSUNITS"] == 4
    if any(e.is_arc for p in scene.parts for lp in p.loops for e in lp.edges):
        assert len(doc.modelspace().query("ARC")) > 0      # arcs stay arcs


def test_bulged_polylines_and_circles_have_the_circle_area(tmp_path):
    # a bulge of 1 is a half circle (tan(180 deg / 4) = 1): two of them make a circle of area pi r^2
    r = 2.5

    def draw(msp):
        msp.add_lwpolyline([(0, 0, 0, 0, 1.0), (2 * r, 0, 0, 0, 1.0)], format="xyseb", close=True,
                           dxfattribs={"layer": "PMMA"})
        msp.add_polyline2d([(10, 0), (10 + 2 * r, 0)], close=True, dxfattribs={"layer": "water"})
        p = msp.query("POLYLINE")[0]
        for v in p.vertices:
            v.dxf.bulge = -1.0
        msp.add_lwpolyline([(20, -5), (30, -5), (30, 5), (20, 5)], close=True, dxfattribs={"layer": "fused silica"})
        msp.add_circle((25, 0), 1.5, dxfattribs={"layer": "fused silica"})
    scene = import_dxf(drawing(tmp_path, draw))
    areas = {p.material: p.area() for p in scene.parts}
    assert areas["PMMA"] == pytest.approx(math.pi * r * r, rel=1e-12)
    assert areas["water"] == pytest.approx(math.pi * r * r, rel=1e-12)
    assert areas["fused silica"] == pytest.approx(100 - math.pi * 1.5 ** 2, rel=1e-12)   # the circle is a hole


def test_units_are_read_from_the_file_or_asked_for(tmp_path):
    def square(msp):
        msp.add_lwpolyline([(0, 0), (1, 0), (1, 1), (0, 1)], close=True, dxfattribs={"layer": "PMMA"})
    cm = import_dxf(drawing(tmp_path, square, units=5, name="cm.dxf"))
    assert cm.parts[0].area() == pytest.approx(100.0)          # 1 cm square = 100 mm^2
    unitless = drawing(tmp_path, square, units=0, name="none.dxf")
    with pytest.raises(SceneError) as err:
        import_dxf(unitless)
    assert "$INSUNITS" in str(err.value.problems[0]) and "--units" in str(err.value.problems[0])
    assert import_dxf(unitless, units="in").parts[0].area() == pytest.approx(25.4 ** 2)


def test_bad_drawings_name_the_entity(tmp_path):
    handles = {}

    def draw(msp):
        handles["gap"] = msp.add_line((0, 0), (10, 0), dxfattribs={"layer": "PMMA"}).dxf.handle
        msp.add_line((10, 0), (10, 5), dxfattribs={"layer": "PMMA"})
        msp.add_line((10, 5.02), (0, 0), dxfattribs={"layer": "PMMA"})
        handles["spline"] = msp.add_spline([(0, 0), (1, 1), (2, 0)], dxfattribs={"layer": "curves"}).dxf.handle
        msp.add_text("note", dxfattribs={"layer": "notes"})        # annotation is skipped
    path = drawing(tmp_path, draw)
    with pytest.raises(SceneError) as err:
        import_dxf(path)
    text = [str(p) for p in err.value.problems]
    assert any(f"SPLINE (handle {handles['spline']}, layer 'curves')" in t and "unsupported" in t for t in text)
    gaps = [t for t in text if "open contour" in t]
    assert len(gaps) == 2 and any("(10, 5) mm" in t and "0.02 mm away" in t for t in gaps)
    assert all(str(path) in t for t in text)


def test_branches_and_unknown_materials(tmp_path):
    def draw(msp):
        msp.add_lwpolyline([(0, 0), (4, 0), (4, 4), (0, 4)], close=True, dxfattribs={"layer": "PMMa"})
        msp.add_line((4, 0), (8, 0), dxfattribs={"layer": "PMMa"})
    with pytest.raises(SceneError) as err:
        import_dxf(drawing(tmp_path, draw))
    text = " ".join(str(p) for p in err.value.problems)
    assert "3 ends meeting at (4, 0) mm" in text

    def draw2(msp):
        msp.add_lwpolyline([(0, 0), (4, 0), (4, 4), (0, 4)], close=True, dxfattribs={"layer": "PMMa"})
    with pytest.raises(SceneError) as err:
        import_dxf(drawing(tmp_path, draw2, name="m.dxf"))
    assert "layer 'PMMa'" in str(err.value.problems[0]) and "did you mean PMMA" in str(err.value.problems[0])


def test_cli_import_and_export_round_trip(tmp_path, capsys):
    scene = tmp_path / "pipe.json"
    mapping = tmp_path / "layers.json"
    mapping.write_text('{"guide": "PMMA", "panel window": "fused silica"}')
    code = cli.main(["import-dxf", str(PIPE_DXF), "-o", str(scene), "--materials-file", str(mapping),
                     "--layer-material", "panel window=polycarbonate", "--setup-from", str(PIPE_JSON)])
    assert code == 0, capsys.readouterr().err
    loaded = load_scene(scene)           # the written file reopens as a scene
    assert [p.material for p in loaded.parts] == ["PMMA", "polycarbonate"] and loaded.detectors
    out = tmp_path / "back.dxf"
    assert cli.main(["export-dxf", str(scene), "-o", str(out)]) == 0
    assert "PMMA" in capsys.readouterr().out
    assert cli.main(["import-dxf", str(out), "-o", str(tmp_path / "again.json")]) == 0
    assert cli.main(["import-dxf", str(PIPE_DXF), "-o", str(tmp_path / "x.json")]) == cli.EXIT_SCENE
    assert "--layer-material guide=MATERIAL" in capsys.readouterr().err
    assert cli.main(["import-dxf", str(PIPE_JSON), "-o", str(tmp_path / "x.json")]) == cli.EXIT_SCENE
    assert cli.main(["import-dxf", str(PIPE_DXF), "-o", str(tmp_path / "x.json"), "--layer-material", "guide"]) == cli.EXIT_USAGE
    assert "LAYER=MATERIAL" in capsys.readouterr().err
    save_scene(loaded, tmp_path / "saved.json")


def test_cli_import_of_overlapping_contours_writes_the_file_and_says_why(tmp_path, capsys):
    def draw(msp):
        msp.add_lwpolyline([(0, 0), (10, 0), (10, 10), (0, 10)], close=True, dxfattribs={"layer": "PMMA"})
        msp.add_lwpolyline([(5, 5), (15, 5), (15, 15), (5, 15)], close=True, dxfattribs={"layer": "water"})
    out = tmp_path / "o.json"
    assert cli.main(["import-dxf", str(drawing(tmp_path, draw)), "-o", str(out)]) == cli.EXIT_SCENE
    err = capsys.readouterr().err
    assert "overlapping" in err and "25 mm^2" in err and "was written" in err
    import json
    assert len(json.loads(out.read_text())["parts"]) == 2


def test_the_sample_drawing_is_what_its_script_draws(tmp_path):
    import subprocess
    import sys
    out = tmp_path / "pipe.dxf"
    subprocess.run([sys.executable, str(SAMPLES / "make-light-pipe-dxf.py"), str(out)], check=True)

    def entities(path):
        return [(e.dxftype(), e.dxf.layer, tuple(round(float(v), 12) for v in _numbers(e)))
                for e in ezdxf.readfile(path).modelspace()]
    assert entities(out) == entities(PIPE_DXF)


def _numbers(e):
    if e.dxftype() == "LINE":
        return (*e.dxf.start, *e.dxf.end)
    if e.dxftype() == "ARC":
        return (*e.dxf.center, e.dxf.radius, e.dxf.start_angle, e.dxf.end_angle)
    return tuple(v for p in e.get_points("xyb") for v in p) + (float(e.closed),)


def test_entities_seen_from_below_are_mirrored_into_the_plane(tmp_path):
    """Arcs and polylines with extrusion (0, 0, -1) keep their coordinates in an object frame
    whose x points along -x; reference library: ezdxf's own OCS conversion gives the world points."""
    from ezdxf.math import OCS
    ocs = OCS((0, 0, -1))
    below = {"layer": "PMMA", "extrusion": (0, 0, -1)}

    def draw(msp):       # a D shape: an arc from 270 to 90 deg closed by a line, all seen from below
        msp.add_arc((5, 0), 2, 270, 90, dxfattribs=below)
        a, b = ocs.to_wcs((5, -2, 0)), ocs.to_wcs((5, 2, 0))
        msp.add_line(b, a, dxfattribs={"layer": "PMMA"})
    part = import_dxf(drawing(tmp_path, draw)).parts[0]
    arc = next(e for e in part.outer.edges if e.is_arc)
    assert math.dist(arc.arc_center, tuple(ocs.to_wcs((5, 0, 0)))[:2]) < 1e-12
    for e in part.outer.edges:           # every end lies where ezdxf puts it in the world
        assert min(math.dist(e.start, tuple(ocs.to_wcs(p))[:2]) for p in ((5, -2, 0), (5, 2, 0))) < 1e-12
    assert part.area() == pytest.approx(math.pi * 2 ** 2 / 2, rel=1e-12)
    # the half disc bulges toward world -x, away from its chord at x = -5
    x0, _, x1, _ = part.outer.bounds()
    assert (x0, x1) == pytest.approx((-7.0, -5.0))


def test_setup_links_do_not_follow_into_the_imported_scene(tmp_path):
    """The JSON pipe links its window and detector to the guide's output and names bend_radius;
    the drawing's guide has no builder output, so the imported scene holds plain numbers: saved,
    reopened and traced like the JSON pipe."""
    out = tmp_path / "pipe.json"
    save_scene(import_dxf(PIPE_DXF, layer_materials=MAPPING, setup=load_scene(PIPE_JSON)), out)
    text = out.read_text()
    assert '"numbers"' not in text and '"= ' not in text
    again = load_scene(out)
    assert raytrace.trace(again, rays=100).efficiency("viewer side") == pytest.approx(
        raytrace.trace(load_scene(PIPE_JSON), rays=100).efficiency("viewer side"), abs=1e-9)


def test_export_says_one_part_on_one_layer_in_plain_words(tmp_path, capsys):
    """`raytrace export-dxf` on the roof prism sample: one part on one layer ('1 part on layer')."""
    from raytrace.cli import main as cli_main
    roof = Path(__file__).resolve().parents[1] / "samples" / "roof-prism-retroreflector.json"
    out = tmp_path / "roof.dxf"
    assert cli_main(["export-dxf", str(roof), "-o", str(out)]) == 0
    assert capsys.readouterr().out.strip() == f"{out}: 1 part on layer crown glass"


def test_materials_whose_layer_names_would_clash_get_layers_of_their_own(tmp_path, capsys):
    """Materials "glass/A" and "glass:A" both become layer "glass_A" (a layer name cannot hold '/'
    or ':'), and "Glass/a" the same name without case, as DXF compares layer names; a material
    "0" is the name of every drawing's own layer 0.  The export gave a traceback from the DXF
    library ("LAYER 'glass_A' already exists"); now each material has its own layer, ezdxf (the
    reference DXF reader) reads them back, and the import gives every part its own material."""
    import json
    data = json.loads(PIPE_JSON.read_text())
    data["materials"] = {m: {"model": "constant", "n": 1.5 + 0.01 * k}
                         for k, m in enumerate(["glass/A", "glass:A", "Glass/a", "0"])}
    window = data["parts"][1]
    data["parts"] = [data["parts"][0]] + [
        dict(window, name=f"window {k}", shape=dict(window["shape"], position=[-20.0 - 15 * k, 0.0]))
        for k in range(4)]
    data["parts"][1] = window                 # the detector's position is linked to this one
    for part, material in zip(data["parts"], ["glass/A", "glass:A", "Glass/a", "0", "glass/A"]):
        part["material"] = material
    scene_file = tmp_path / "clash.json"
    scene_file.write_text(json.dumps(data))
    out = tmp_path / "clash.dxf"
    assert cli.main(["export-dxf", str(scene_file), "-o", str(out)]) == cli.EXIT_OK
    assert capsys.readouterr().out.strip() == f"{out}: 5 parts on layers glass_A, glass_A 2, Glass_a 3, 0 2"
    doc = ezdxf.readfile(out)
    layers = [layer.dxf.name for layer in doc.layers]
    assert len({n.casefold() for n in layers}) == len(layers) == 6     # "0", "Defpoints" and the four above
    back = import_dxf(out, setup=load_scene(scene_file))
    assert {p.name: p.material for p in back.parts} == {p["name"]: p["material"] for p in data["parts"]}


@pytest.mark.parametrize("size", [50, 200, 4000])
def test_a_drawing_cut_short_is_an_error_naming_the_file_not_a_traceback(tmp_path, capsys, size):
    """The sample drawing cut off after `size` bytes (a copy that stopped early): the DXF
    library's reader ended in a StopIteration traceback; now one error names the file and says
    what it expected."""
    cut = tmp_path / "cut.dxf"
    cut.write_bytes(PIPE_DXF.read_bytes()[:size])
    assert cli.main(["import-dxf", str(cut), "-o", str(tmp_path / "cut.json")]) == cli.EXIT_SCENE
    err = capsys.readouterr().err
    assert f"error: {cut}: file: found <not a whole DXF drawing: it ends early or is damaged>" in err
    assert "a complete DXF file" in err and "Traceback" not in err
    assert not (tmp_path / "cut.json").exists()


def test_export_and_import_refuse_to_write_over_their_own_input(tmp_path, capsys):
    """`export-dxf scene.json -o scene.json` wrote the drawing over the scene, and `import-dxf
    d.dxf -o d.dxf` (or -o the --setup-from scene) the scene over the drawing: the user's file was
    gone.  Now each is a usage error naming both, and the input stays byte for byte."""
    scene = tmp_path / "pipe.json"
    scene.write_bytes(PIPE_JSON.read_bytes())
    drawn = tmp_path / "pipe.dxf"
    drawn.write_bytes(PIPE_DXF.read_bytes())
    for args, words in (
            (["export-dxf", str(scene), "-o", str(scene)], f"-o {scene}: found the same file as the scene"),
            (["import-dxf", str(drawn), "-o", str(drawn)], f"-o {drawn}: found the same file as the drawing"),
            (["import-dxf", str(drawn), "-o", str(scene), "--setup-from", str(scene)],
             "found the same file as the --setup-from scene")):
        assert cli.main(args) == cli.EXIT_USAGE
        err = capsys.readouterr().err
        assert words in err and "writing it would destroy the other" in err
    assert scene.read_bytes() == PIPE_JSON.read_bytes() and drawn.read_bytes() == PIPE_DXF.read_bytes()


@pytest.mark.parametrize("record", ['["glass"]', '"glass"', "3"])
def test_our_xdata_that_is_not_a_record_is_ignored_like_unreadable_xdata(tmp_path, record):
    """The export writes a JSON object under the app id; an edited drawing may carry other
    JSON there (a list, a string, a number).  It is ignored as unreadable JSON is: the layer
    names the material (no AttributeError traceback from the import or from the GUI's preset
    of each layer's material, `recorded_materials`)."""
    from raytrace.dxf_io import APP, recorded_materials

    def draw(msp):
        msp.doc.appids.add(APP)
        e = msp.add_lwpolyline([(0, 0), (4, 0), (4, 4), (0, 4)], close=True, dxfattribs={"layer": "PMMA"})
        e.set_xdata(APP, [(1000, record)])
    path = drawing(tmp_path, draw)
    assert recorded_materials(path) == {}
    scene = import_dxf(path)
    assert [(p.name, p.material) for p in scene.parts] == [("PMMA", "PMMA")]
