"""`raytrace trace --set NAME=VALUE` and `--target-error`, run as a user runs them."""
import json
from pathlib import Path

import pytest

import raytrace
from raytrace.cli import main
from raytrace.converge import trace_to_error
from raytrace.scene_io import load_scene, scene_from_dict

ROOT = Path(__file__).resolve().parent.parent
PIPE = str(ROOT / "samples" / "light-pipe-90.json")
WINDOW = str(ROOT / "samples" / "oblique-window.json")


def test_set_changes_the_traced_scene_like_an_edited_file(tmp_path, capsys):
    """--set gives the same ledger as the same change made in the file, and leaves the file alone."""
    before = Path(PIPE).read_bytes()
    out = tmp_path / "set.json"
    assert main(["trace", PIPE, "--set", "guide.segments[1].bend.radius=4", "--set", "trace.rays=600",
                 "--quiet", "--json", str(out)]) == 0
    assert Path(PIPE).read_bytes() == before
    data = json.loads(Path(PIPE).read_text())
    data["parts"][0]["shape"]["params"]["segments"][1]["bend"]["radius"] = 4.0
    data["trace"]["rays"] = 600
    edited = tmp_path / "edited.json"
    edited.write_text(json.dumps(data))
    ref = tmp_path / "ref.json"
    assert main(["trace", str(edited), "--quiet", "--json", str(ref)]) == 0
    a, b = json.loads(out.read_text()), json.loads(ref.read_text())
    assert a["buckets"] == b["buckets"] and a["settings"]["rays"] == 600


@pytest.mark.parametrize("args,code,words", [
    (["--set", "guide.nothing=1"], 2, "a parameter of the light_pipe shape"),
    (["--set", "guide.width"], 2, "NAME=VALUE"),
    (["--set", "trace.rays=10.5"], 2, "a whole number"),
    (["--set", "trace.rays=100", "--rays", "300"], 2, "one or the other"),
    (["--set", "gap=-1"], 1, "after --set gap=-1"),           # the window pushed into the guide
    (["--set", "gap=1", "--set", "gap=2"], 2, "gap given twice"),   # the second silently won
    (["--set", "wavelength=500", "--set", "LED.wavelength=520"], 2, "two names for two different numbers"),
])
def test_set_refuses_what_it_cannot_do(capsys, args, code, words):
    assert main(["trace", PIPE, *args]) == code
    assert words in capsys.readouterr().err


def test_target_error_traces_until_the_monte_carlo_error_is_reached():
    """Monte Carlo through the window: the share's error must fall as 1/sqrt(n) (binomial,
    sqrt(p (1 - p) / n); common practice), so reaching 0.1 points needs about
    p (1 - p) / 0.001^2 rays, here about 75,000 for p = 0.082 (reflected).  The trace must stop
    at or above the target-met count and not beyond 8x growth past it; seed 1."""
    scene = load_scene(WINDOW)
    result = trace_to_error(scene, 0.001, mode="monte_carlo", seed=1)
    t = result.settings["target_error"]
    p = result.efficiency("back toward the beam")
    need = p * (1 - p) / 0.001 ** 2
    assert t["reached"] and t["rounds"][-1]["largest_error"] <= 0.001
    assert 0.5 * need <= t["rounds"][-1]["rays"] <= 8 * need
    assert [r["rays"] for r in t["rounds"]] == sorted(r["rays"] for r in t["rounds"])
    assert result.warnings == []


def test_target_error_stops_at_the_ray_cap_and_says_so(capsys, tmp_path):
    assert main(["trace", WINDOW, "--mode", "monte_carlo", "--target-error", "0.01%", "--ray-cap", "5000"]) == 0
    err = capsys.readouterr().err
    assert "NOT reached" in err and "raise --ray-cap" in err
    assert main(["trace", WINDOW, "--target-error", "0.1%", "--target-figure", "nowhere", "--quiet"]) == 2
    assert "'inside chamber'" in capsys.readouterr().err
    assert main(["trace", WINDOW, "--target-error", "2"]) == 2
    for alone in (["--ray-cap", "1000"], ["--target-figure", "inside chamber"]):
        assert main(["trace", WINDOW, *alone]) == 2
        assert "--target-error E as well" in capsys.readouterr().err
        assert main(["sweep", WINDOW, "--vary", "probe beam.direction_deg=0,45", *alone, "--csv", str(tmp_path / "x.csv")]) == 2
        assert "--target-error E as well" in capsys.readouterr().err


def test_sweep_with_target_error_reaches_it_at_every_point(tmp_path):
    out = tmp_path / "w.csv"
    assert main(["sweep", WINDOW, "--vary", "probe beam.direction_deg=0,45", "--mode", "monte_carlo",
                 "--target-error", "0.5%", "--workers", "1", "--csv", str(out), "--quiet"]) == 0
    import csv
    for row in csv.DictReader(out.open()):
        assert float(row["efficiency error: inside chamber"]) <= 0.005
        assert row["warnings"] == ""


def test_target_error_of_an_even_fan_also_waits_for_the_figures_to_settle():
    """An even emitter fan's sub-batch error cannot see the error every sub-fan shares (its grid of
    about sqrt(n) x sqrt(n) positions and angles), so a coarse fan can be further off than its error
    says (README: the light pipe at 2,000 rays and a 9 mm bend).  A deterministic trace therefore stops only when
    the figures also moved by at most the target since the round before; the figure it stops at
    must be within twice the target of a trace with 8x its rays (common practice: a converged
    quadrature agrees with a finer one)."""
    from raytrace.scene_io import scene_to_dict
    from raytrace.sweep import apply_settings
    scene = scene_from_dict(apply_settings(scene_to_dict(load_scene(PIPE)), [("guide.segments[1].bend.radius", 4.0)]))
    result = trace_to_error(scene, 0.01, rays=300)
    t = result.settings["target_error"]
    assert t["reached"] and len(t["rounds"]) >= 2
    assert t["rounds"][-1]["largest_change"] <= 0.01 and t["rounds"][0]["largest_change"] is None
    finer = raytrace.trace(scene, rays=8 * t["rounds"][-1]["rays"])
    assert abs(result.efficiency("viewer side") - finer.efficiency("viewer side")) <= 0.02


@pytest.mark.parametrize("args,words", [
    (["trace", PIPE, "--target-error", "-1%"], ["--target-error", "'-1%'", "positive", "0.1%"]),
    (["trace", PIPE, "--target-error", "-1e-3"], ["--target-error", "'-1e-3'", "positive", "0.001"]),
    (["trace", PIPE, "--flux-floor", "-1e-3"], ["--flux-floor", "from 0 to 1", "-1e-3"]),
    (["trace", PIPE, "--max-memory-mb", "-5"], ["--max-memory-mb", "above 0", "'-5'"]),
    (["trace", PIPE, "--routes", "-1"], ["--routes", "at least 0", "-1"]),
    (["sweep", PIPE, "--vary", "bend_radius=4:8:2", "--csv", "x.csv", "--target-error", "-0.5%"],
     ["--target-error", "'-0.5%'", "positive"]),
])
def test_a_negative_value_is_refused_by_its_option_with_what_it_expects(capsys, args, words):
    """A value typed with a minus sign reaches the option's own check (argparse alone reads '-1%'
    as an unknown option and says only 'expected one argument')."""
    assert main(args) == 2
    err = capsys.readouterr().err
    assert "expected one argument" not in err
    for w in words:
        assert w in err


def test_negative_numbers_where_they_are_legitimate(tmp_path, capsys):
    """Negative values inside NAME=VALUE texts (--set, a sweep range, an uneven --tol band) are
    read as numbers: the probe beam's direction at -10 degrees through --set equals the sweep's
    first point, which starts at -10."""
    out = tmp_path / "t.json"
    assert main(["trace", WINDOW, "--set", "probe beam.direction_deg=-10", "--rays", "100", "--quiet",
                 "--json", str(out)]) == 0
    traced = json.loads(out.read_text())["efficiency"]["inside chamber"]
    table = tmp_path / "s.csv"
    assert main(["sweep", WINDOW, "--vary", "probe beam.direction_deg=-10:10:3", "--rays", "100",
                 "--csv", str(table), "--quiet"]) == 0
    rows = table.read_text().splitlines()
    header, first = rows[0].split(","), rows[1].split(",")
    assert float(first[header.index("probe beam.direction_deg")]) == -10.0
    assert float(first[header.index("efficiency: inside chamber")]) == pytest.approx(traced, rel=1e-12)
    roof = str(ROOT / "samples" / "roof-prism-retroreflector.json")
    assert main(["tolerance", roof, "--tol", "roof prism.roof_angle_deg=-0.5,+0", "--figure", "return",
                 "--samples", "4", "--rays", "50", "--workers", "1", "--csv", str(tmp_path / "tol.csv")]) == 0
    rows = (tmp_path / "tol.csv").read_text().splitlines()
    column = rows[0].split(",").index("deviation: roof prism.roof_angle_deg")
    deviations = [float(r.split(",")[column]) for r in rows[1:]]
    assert deviations and all(-0.5 <= d <= 0 for d in deviations)


@pytest.mark.parametrize("args", [
    ["trace", PIPE, "--target-error", "1%", "--target-figure", "viewer side.accepted"],
    ["sweep", PIPE, "--vary", "bend_radius=4:8:2", "--csv", "never-written.csv", "--figure", "viewer side.accepted"],
    ["sweep", PIPE, "--vary", "bend_radius=4:8:2", "--csv", "never-written.csv", "--target-error", "5%",
     "--target-figure", "viewer side.accepted"],
])
def test_accepted_share_of_a_detector_without_acceptance_says_how_to_set_one(tmp_path, monkeypatch, capsys, args):
    """The light pipe's detector has no acceptance cone: asking for its accepted share is a usage
    error naming the detector, the scene field that sets a cone and the figures there are,
    before anything is traced (the sweep used to write an empty column, or fail every point)."""
    monkeypatch.chdir(tmp_path)
    assert main(args) == 2
    err = capsys.readouterr().err
    assert "detector 'viewer side' has no acceptance cone set" in err
    assert f"{PIPE} at $.detectors[0].acceptance" in err and '"half_angle_deg"' in err
    assert "'viewer side" in err.split("available:")[1]
    assert not (tmp_path / "never-written.csv").exists()


def test_accepted_share_of_a_detector_with_acceptance_is_still_a_target(capsys):
    """The roof prism's return detector has an acceptance: its accepted share is a valid target."""
    roof = str(ROOT / "samples" / "roof-prism-retroreflector.json")
    assert main(["trace", roof, "--target-error", "5%", "--target-figure", "return.accepted", "--quiet"]) == 0


def test_json_records_each_set_so_the_result_can_be_traced_again(tmp_path):
    """`trace --set ... --json` lists every --set (name, value as typed, value used, fields set);
    writing those values at those fields of the scene file and tracing it gives the same ledger."""
    out = tmp_path / "set.json"
    assert main(["trace", PIPE, "--set", "bend_radius=5", "--set", "trace.rays=6e2", "--set", "guide.width=3.25",
                 "--quiet", "--json", str(out)]) == 0
    summary = json.loads(out.read_text())
    recorded = summary["settings"]["set"]
    assert recorded == [
        {"name": "bend_radius", "given": "5", "value": 5.0, "fields": ["$.numbers.bend_radius"]},
        {"name": "trace.rays", "given": "6e2", "value": 600, "fields": ["$.trace.rays"]},
        {"name": "guide.width", "given": "3.25", "value": 3.25, "fields": ["$.parts[0].shape.params.width"]}]
    data = json.loads(Path(PIPE).read_text())
    for entry in recorded:
        for field in entry["fields"]:
            keys = [int(k) if k.isdigit() else k
                    for k in field[2:].replace("[", ".").replace("]", "").split(".")]
            node = data
            for k in keys[:-1]:
                node = node[k]
            node[keys[-1]] = entry["value"]
    edited = tmp_path / "edited.json"
    edited.write_text(json.dumps(data))
    ref = tmp_path / "ref.json"
    assert main(["trace", str(edited), "--quiet", "--json", str(ref)]) == 0
    again = json.loads(ref.read_text())
    assert again["buckets"] == summary["buckets"] and again["settings"]["rays"] == 600
    assert "set" not in again["settings"]


BEND = "guide.segments[1].bend.radius"      # linked in the sample by "= bend_radius"


@pytest.mark.parametrize("args,named,linked", [
    (["trace", PIPE, "--set", "bend_radius=5", "--set", f"{BEND}=6"], "--set bend_radius", f"--set {BEND}"),
    (["trace", PIPE, "--set", f"{BEND}=6", "--set", "bend_radius=5"], "--set bend_radius", f"--set {BEND}"),
    (["trace", PIPE, "--set", "gap=1", "--set", "panel window.position[1]=6"], "--set gap",
     "--set panel window.position[1]"),
    (["sweep", PIPE, "--vary", "bend_radius=4:8:2", "--vary", f"{BEND}=4:8:2", "--csv", "never-written.csv"],
     "--vary bend_radius", f"--vary {BEND}"),
    (["optimize", PIPE, "--vary", "bend_radius=4:9", "--vary", f"{BEND}=4:9", "--figure", "viewer side"],
     "--vary bend_radius", f"--vary {BEND}"),
    (["tolerance", PIPE, "--tol", "bend_radius=0.1", "--tol", f"{BEND}=0.1", "--figure", "viewer side"],
     "--tol bend_radius", f"--tol {BEND}"),
])
def test_a_named_number_and_a_field_linked_to_it_are_refused_together(tmp_path, monkeypatch, capsys,
                                                                      args, named, linked):
    """Setting a named number and a field linked to it: the field's value replaces its link, so
    the named number's never reaches it.  Refused as a usage error (exit 2) naming both."""
    monkeypatch.chdir(tmp_path)
    assert main(args) == 2
    err = capsys.readouterr().err
    assert f"error: {linked}: found <linked to the named number" in err
    assert f"{named} alone" in err and f"{linked} alone" in err
    assert not (tmp_path / "never-written.csv").exists()


def test_a_named_number_linked_through_another_is_refused_with_it(tmp_path, capsys):
    """Named numbers may follow each other ("gap": "radius / 16"): setting radius and gap, or
    radius and a field "= gap", leaves one of them ignored too; two unrelated numbers pass."""
    data = json.loads(Path(PIPE).read_text())
    data["numbers"] = {"bend_radius": 8.0, "gap": "bend_radius / 16"}
    scene = tmp_path / "chain.json"
    scene.write_text(json.dumps(data))
    assert main(["trace", str(scene), "--set", "bend_radius=6", "--set", "gap=1", "--quiet"]) == 2
    assert "error: --set gap: found <linked to the named number bend_radius by 'bend_radius / 16'" in \
        capsys.readouterr().err
    assert main(["trace", str(scene), "--set", "bend_radius=6", "--set", "panel window.position[1]=9",
                 "--quiet"]) == 2
    assert "by '= guide.output_y + gap'" in capsys.readouterr().err
    assert main(["trace", PIPE, "--set", "bend_radius=6", "--set", "guide.width=3.2", "--rays", "50",
                 "--quiet"]) == 0
