"""Sweeps: naming scene numbers, the grid, the table, executors (local processes and Dask)."""
from __future__ import annotations

import csv
import io
import json
import math
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
import tmm

from raytrace import cli
from raytrace.catalog import lookup
from raytrace.scene_io import load_scene, scene_to_dict
from raytrace.sweep import SweepError, Variable, parse_vary, resolve, run_point, sweep

SAMPLES = Path(__file__).resolve().parent.parent / "samples"


def sample(name: str) -> dict:
    return json.loads((SAMPLES / f"{name}.json").read_text())


def plate_dict(polarization: str) -> dict:
    """A 1 mm fused-silica plate in vacuum, a 633 nm beam from x = -2 toward it, a detector
    behind it and one in front catching every reflection."""
    return {
        "format": "raytrace2d-scene", "version": 1, "units": {"length": "mm", "wavelength": "nm"},
        "ambient": "vacuum",
        "parts": [{"name": "plate", "material": "fused silica",
                   "shape": {"kind": "window", "params": {"thickness": 1.0, "height": 400.0},
                             "position": [0.0, 0.0], "rotation_deg": 0.0}}],
        "sources": [{"name": "probe", "kind": "beam", "position": [-2.0, 0.0], "direction_deg": 0.0,
                     "width": 0.5, "flux": 1.0, "spectrum": {"wavelength_nm": 632.8},
                     "polarization": polarization}],
        "detectors": [{"name": "through", "start": [5.0, -200.0], "end": [5.0, 200.0]},
                      {"name": "back", "start": [-3.0, 200.0], "end": [-3.0, -200.0]}],
        "trace": {"rays": 4, "flux_floor": 1e-13, "max_generations": 400},
    }


@pytest.mark.parametrize("pol", ["s", "p"])
def test_window_transmission_vs_angle_matches_incoherent_tmm(pol):
    """reference library: tmm.inc_tmm(pol, [1, n, 1], [inf, 1 mm, inf], ['i', 'i', 'i'], th, lam)
    gives T and R of a thick (incoherent) plate with all internal reflections summed; the
    sweep's efficiencies behind and in front of the plate must equal them over 0..85 deg."""
    n = float(lookup("fused silica").index(632.8))
    res = sweep(plate_dict(pol), [parse_vary("probe.direction_deg=0:85:18")], workers=1)
    assert [row["status"] for row in res.rows] == ["ok"] * 18
    for row in res.rows:
        th = math.radians(row["probe.direction_deg"])
        ref = tmm.inc_tmm(pol, [1.0, n, 1.0], [np.inf, 1e6, np.inf], ["i", "i", "i"], th, 632.8)
        assert row["efficiency: through"] == pytest.approx(ref["T"], abs=1e-9)
        assert row["efficiency: back"] == pytest.approx(ref["R"], abs=1e-9)


def test_parse_vary_ranges_and_lists():
    v = parse_vary("guide.segments[1].bend.radius=2:8:7")
    assert v.name == "guide.segments[1].bend.radius"
    assert v.values == (2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0)
    assert parse_vary("x=0:0.3:4").values[-1] == 0.3          # the stop value exactly
    assert parse_vary("LED.direction_deg = -5,0,5").values == (-5.0, 0.0, 5.0)
    assert parse_vary("a.b=1:2:1").values == (1.0,)
    for bad in ("radius", "=1:2:3", "a.b=1:2", "a.b=1:2:0", "a.b=1:x:3", "a.b=1:2:2.5", "a.b=nan:1:2", "a.b="):
        with pytest.raises(SweepError) as e:
            parse_vary(bad)
        assert "--vary" in str(e.value) and "expected" in str(e.value)


def test_names_resolve_to_scene_fields():
    d = sample("light-pipe-90")
    cases = {
        "guide.segments[1].bend.radius": ("parts", 0, "shape", "params", "segments", 1, "bend", "radius"),
        "guide.width": ("parts", 0, "shape", "params", "width"),
        "part:guide.position[1]": ("parts", 0, "shape", "position", 1),
        "panel window.thickness": ("parts", 1, "shape", "params", "thickness"),
        "panel window.rotation_deg": ("parts", 1, "shape", "rotation_deg"),
        "LED.direction_deg": ("sources", 0, "direction_deg"),
        "source:LED.position[0]": ("sources", 0, "position", 0),
        "LED.wavelength": ("sources", 0, "spectrum", "band", "center_nm"),
        "viewer side.end[0]": ("detectors", 0, "end", 0),
        "$.parts[0].shape.params.width": ("parts", 0, "shape", "params", "width"),
        "trace.seed": ("trace", "seed"),
    }
    for name, path in cases.items():
        assert resolve(d, name).paths == (path,), name
    assert resolve(d, "trace.rays").whole and not resolve(d, "guide.width").whole


def test_wavelength_makes_every_source_one_line():
    """`wavelength` replaces each source's spectrum (here a list of lines and a band) by one
    line; SOURCE.wavelength moves a band's centre, and a list of lines needs a JSON path."""
    d = sample("cemented-prism-pair")
    d["sources"].append(dict(d["sources"][0], name="second", spectrum={"band": {"center_nm": 500.0, "fwhm_nm": 20.0}}))
    t = resolve(d, "wavelength")
    assert t.paths == (("sources", 0, "spectrum"), ("sources", 1, "spectrum"))
    out = run_point(d, [(t.paths, 633.0)], {"rays": 5})
    assert out["status"] == "ok"
    assert resolve(d, "second.wavelength").paths == (("sources", 1, "spectrum", "band", "center_nm"),)
    with pytest.raises(SweepError) as e:
        resolve(d, "white beam.wavelength")
    assert "$.sources[0].spectrum.lines[0][0]" in str(e.value)


@pytest.mark.parametrize("name, words", [
    ("guide.radius", "parameter of the light_pipe shape"),
    ("nobody.x", "part 'guide'"),
    ("LED.spectrum", "a source field"),
    ("trace.mode", "trace.FIELD"),
    ("$.parts[7].x", "does not exist"),
    ("guide.segments[1].bend", "addresses a number"),
    ("viewer side.absorbing", "a detector field"),
])
def test_bad_names_say_what_was_expected(name, words):
    with pytest.raises(SweepError) as e:
        resolve(sample("light-pipe-90"), name)
    msg = str(e.value)
    assert f"--vary {name}" in msg and words in msg


def test_clashing_names_need_a_kind_prefix():
    d = sample("oblique-window")
    d["detectors"][0]["name"] = "probe beam"
    with pytest.raises(SweepError) as e:
        resolve(d, "probe beam.start[0]")
    assert "source:probe beam.start[0]" in str(e.value) or "KIND" in str(e.value) or "prefix" in str(e.value)
    assert resolve(d, "detector:probe beam.start[0]").paths == (("detectors", 0, "start", 0),)
    assert resolve(d, "source:probe beam.width").paths == (("sources", 0, "width"),)


def test_whole_number_fields_refuse_fractions():
    with pytest.raises(SweepError) as e:
        sweep(sample("oblique-window"), [parse_vary("trace.rays=10:20:4")], workers=1)
    assert "whole numbers" in str(e.value)
    res = sweep(sample("oblique-window"), [parse_vary("trace.rays=10:20:2")], workers=1)
    assert [row["trace.rays"] for row in res.rows] == [10, 20]


def test_two_names_make_a_grid_first_slowest_and_bad_points_are_reported():
    res = sweep(sample("light-pipe-90"),
                [Variable("gap", (0.5, -1.0)), Variable("LED.direction_deg", (-5.0, 0.0, 5.0))],
                {"rays": 100}, workers=1)
    assert [(r["gap"], r["LED.direction_deg"]) for r in res.rows] == \
        [(0.5, -5.0), (0.5, 0.0), (0.5, 5.0), (-1.0, -5.0), (-1.0, 0.0), (-1.0, 5.0)]
    ok = [r for r in res.rows if r["status"] == "ok"]
    assert len(ok) == 3           # a gap of -1 mm pushes the panel window into the guide
    assert all(r["status"].startswith("invalid: ") and "overlapping" in r["status"] for r in res.failed)
    for r in ok:   # efficiency and loss shares account for all the flux
        total = sum(v for k, v in r.items() if k.startswith(("efficiency: ", "share: ")))
        assert total == pytest.approx(1.0, rel=1e-9)
    rows = list(csv.reader(io.StringIO(res.to_csv())))
    assert rows[0][:4] == ["point", "gap", "LED.direction_deg", "status"]
    assert len(rows) == 7 and rows[4][4:] == [""] * (len(rows[0]) - 4)


def test_sweep_accepts_a_scene_object_and_any_executor():
    scene = load_scene(SAMPLES / "roof-prism-retroreflector.json")
    v = [parse_vary("emitter beam.direction_deg=84:96:5")]
    local = sweep(scene, v, {"rays": 50}, workers=1)
    with ThreadPoolExecutor(2) as ex:
        threaded = sweep(scene_to_dict(scene), v, {"rays": 50}, executor=ex)
    assert local.to_csv() == threaded.to_csv()


def test_process_pool_and_dask_cluster_give_the_same_table(tmp_path):
    """The same sweep in this process, in a local process pool and on a two-worker Dask
    LocalCluster (processes) must give identical CSV text, row for row."""
    distributed = pytest.importorskip("distributed")
    d = sample("light-pipe-90")
    v = [parse_vary("guide.segments[1].bend.radius=2:8:4")]
    serial = sweep(d, v, {"rays": 300}, workers=1)
    pooled = sweep(d, v, {"rays": 300}, workers=2)
    assert pooled.to_csv() == serial.to_csv()
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        on_dask = sweep(d, v, {"rays": 300}, executor=client.get_executor())
        # the command line reaches the same cluster by its scheduler address
        out = tmp_path / "dask.csv"
        code = cli.main(["sweep", str(SAMPLES / "light-pipe-90.json"), "--vary", v[0].name + "=2:8:4",
                         "--rays", "300", "--csv", str(out), "--dask", cluster.scheduler_address, "--quiet"])
    assert on_dask.rows == serial.rows
    assert on_dask.to_csv() == serial.to_csv()
    assert code == cli.EXIT_OK and out.read_text() == serial.to_csv()


def test_roof_prism_in_plane_acceptance_edge():
    """published (Snell's law and the TIR condition, e.g. Hecht, Optics, ch. 4): in a 90 deg
    roof prism a ray entering the hypotenuse at external angle a from its normal travels
    inside at b = asin(sin a / n) and meets the legs at 45 deg +- b; both legs reflect totally
    only while 45 deg - b > the critical angle asin(1 / n), i.e. a < asin(n sin(45 deg - asin(1/n)))
    with n the index of the glass relative to the surrounding air.
    Sweeping the bundled sample's beam across that edge: no flux may escape through a leg just
    inside it, and some must just outside."""
    d = sample("roof-prism-retroreflector")
    wl = d["sources"][0]["spectrum"]["wavelength_nm"]
    n = float(lookup(d["parts"][0]["material"]).index(wl)) / float(lookup(d["ambient"]).index(wl))
    edge = math.degrees(math.asin(n * math.sin(math.radians(45.0) - math.asin(1.0 / n))))
    step = 0.02   # deg; the air around the prism (n = 1.00027) moves the edge by 0.014 deg
    res = sweep(d, [Variable("emitter beam.direction_deg", (90.0 - (edge - step), 90.0 - (edge + step),
                                                             90.0 + (edge - step), 90.0 + (edge + step)))],
                {"rays": 200}, workers=1)
    legs = [sum(v for k, v in row.items() if k.startswith("share: escaped via roof prism /") and "leg" in k)
            for row in res.rows]
    assert legs[0] == 0.0 and legs[2] == 0.0
    assert legs[1] > 0.01 and legs[3] > 0.01
