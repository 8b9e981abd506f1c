"""The ray table: rows per segment, readable labels, bounded recording, CSV round trips."""
from __future__ import annotations

import csv
import io
import math

import numpy as np
import pandas as pd
import pytest
import tmm

import raytrace
from raytrace import shapes
from raytrace.geometry import Part, ShapeSpec
from raytrace.materials import ConstantIndex
from raytrace.raytable import COLUMNS, NONE, RayTable, read_csv, ray_table
from raytrace.scene import Detector, Scene, Source, TraceSettings
from raytrace.scene_io import load_scene

SAMPLES = __import__("pathlib").Path(__file__).resolve().parent.parent / "samples"
N_GLASS = 1.5


def window_scene(angle_deg=30.0, name="plate, front", rays=20, **settings):
    """A 2 mm plate of n = 1.5 in n = 1, a beam at `angle_deg`, detectors on both sides."""
    mats = {"outside": ConstantIndex("outside", n=1.0), "glass": ConstantIndex("glass", n=N_GLASS)}
    spec = ShapeSpec("window", {"thickness": 2.0, "height": 200.0}, (0.0, 0.0), 0.0)
    plate = Part(name, "glass", shapes.build(spec), shape=spec)
    a = math.radians(angle_deg)
    src = Source("probe", kind="beam", position=(-5.0, -5.0 * math.tan(a)), direction_deg=angle_deg, width=1.0)
    dets = [Detector("through", (20.0, -100.0), (20.0, 100.0)),
            Detector("back", (-10.0, 100.0), (-10.0, -100.0))]
    return Scene(parts=[plate], sources=[src], detectors=dets, materials=mats, ambient="outside",
                 settings=TraceSettings(rays=rays, **settings))


def test_columns_have_units_and_labels_are_readable():
    r = raytrace.trace(window_scene(), record="all")
    t = ray_table(r)
    assert tuple(t.columns) == COLUMNS
    for name in ("x0_mm", "y0_mm", "x1_mm", "y1_mm", "length_mm", "wavelength_nm", "optical_path_mm"):
        assert name in COLUMNS
    first = {k: v for k, v in zip(COLUMNS, next(iter(t.rows())))}
    assert first["began"] == "source" and first["source"] == "probe" and first["parent_id"] == -1
    assert first["medium"] == "ambient (outside)"
    assert first["ended"] == "refracted" and first["ended_part"] == "plate, front" and first["ended_face"] == "front"
    assert set(t["ended"]) <= {"refracted", "reflected", "total internal reflection", "absorbed", "escaped",
                               "detected", "truncated", "passed detector"}
    det_rows = t["ended"] == "detected"
    assert set(t["ended_detector"][det_rows]) == {"through", "back"}
    assert set(t["ended_part"][det_rows]) == {NONE}


def test_children_start_where_parents_end_and_carry_the_fresnel_split():
    """reference library: tmm.coh_tmm for the reflectance of a single n = 1 -> 1.5 interface
    at 30 degrees (s and p); the first reflected child carries Rs and Rp of its parent's flux."""
    r = raytrace.trace(window_scene(30.0), record="all", flux_floor=0.0, max_generations=6)
    t = ray_table(r)
    row_of = {rid: i for i, rid in enumerate(t["ray_id"].tolist())}
    kids = np.flatnonzero(t["parent_id"] >= 0)
    assert len(kids) > 0
    for i in kids:
        p = row_of[int(t["parent_id"][i])]
        assert t["x0_mm"][i] == pytest.approx(t["x1_mm"][p], abs=1e-12)
        assert t["y0_mm"][i] == pytest.approx(t["y1_mm"][p], abs=1e-12)
        assert t["generation"][i] == t["generation"][p] + 1
        assert (t["began_part"][i], t["began_face"][i]) == (t["ended_part"][p], t["ended_face"][p])
    src_rows = np.flatnonzero(t["generation"] == 0)
    rs = tmm.coh_tmm("s", [1.0, N_GLASS], [np.inf, np.inf], math.radians(30.0), 633.0)["R"]
    rp = tmm.coh_tmm("p", [1.0, N_GLASS], [np.inf, np.inf], math.radians(30.0), 633.0)["R"]
    for p in src_rows:
        kids_of = np.flatnonzero(t["parent_id"] == t["ray_id"][p])
        refl = [k for k in kids_of if t["began"][k] == "reflected"]
        thru = [k for k in kids_of if t["began"][k] == "refracted"]
        assert len(refl) == 1 and len(thru) == 1
        k = refl[0]
        assert t["flux_s"][k] / t["flux_s"][p] == pytest.approx(rs, rel=1e-12)
        assert t["flux_p"][k] / t["flux_p"][p] == pytest.approx(rp, rel=1e-12)
        # nothing is lost at the split: reflected + refracted = the parent's flux
        total = t["flux_s"][k] + t["flux_p"][k] + t["flux_s"][thru[0]] + t["flux_p"][thru[0]]
        assert total == pytest.approx(t["flux_s"][p] + t["flux_p"][p], rel=1e-12)
        assert t["medium"][thru[0]] == "plate, front"
        assert t["direction_deg"][k] == pytest.approx(150.0, abs=1e-9)


def test_recording_is_bounded_and_the_ledger_sees_every_ray():
    scene = load_scene(SAMPLES / "light-pipe-90.json")
    none = raytrace.trace(scene, rays=200, record="none")
    first = raytrace.trace(scene, rays=200, record="first", record_count=5)
    full = raytrace.trace(scene, rays=200, record="all")
    assert ray_table(none) is None
    t5, tall = ray_table(first), ray_table(full)
    assert set(t5["source_ray"].tolist()) == set(range(5))
    assert len(t5) < len(tall) / 10
    assert np.array_equal(none.ledger.bins, first.ledger.bins)
    assert np.array_equal(none.ledger.bins, full.ledger.bins)
    # "all" holds every traced segment (nothing here is cut by depth or budget)
    assert len(tall) == full.stats["segments"]
    # the table for the first 5 source rays is the same rows as in the full table
    sel = tall["source_ray"] < 5
    for k in ("ray_id", "x1_mm", "flux_s", "ended"):
        assert np.array_equal(t5[k], tall[k][sel])


def test_csv_read_by_pandas_matches_the_table(tmp_path):
    """reference library: pandas.read_csv with default options reads every column back
    identical (floats bit for bit, ints as int64, text as text)."""
    r = raytrace.trace(window_scene(40.0), record="all")
    t = ray_table(r)
    path = tmp_path / "rays.csv"
    t.to_csv(path)
    df = pd.read_csv(path)
    assert list(df.columns) == list(COLUMNS)
    for k in COLUMNS:
        got = df[k].to_numpy()
        if k in ("ray_id", "parent_id", "generation", "source_ray"):
            assert df[k].dtype == np.int64
        assert np.array_equal(got, t[k]), k
    assert not df.isna().any().any()


def test_csv_read_by_the_csv_module_matches_the_table():
    r = raytrace.trace(window_scene(10.0, name='plate "A", front'), record="all")
    t = ray_table(r)
    text = t.to_csv()
    rows = list(csv.reader(io.StringIO(text)))
    assert tuple(rows[0]) == COLUMNS
    assert len(rows) == len(t) + 1
    back = read_csv(text, text=True)
    for k in COLUMNS:
        assert np.array_equal(back[k], t[k]), k
    assert 'plate "A", front' in set(back["ended_part"].tolist())
    assert [float(v) for v in (row[COLUMNS.index("x1_mm")] for row in rows[1:])] == t["x1_mm"].tolist()


def test_pandas_frame_from_table():
    t = ray_table(raytrace.trace(window_scene(), record="first", record_count=1))
    df = t.to_pandas()
    assert len(df) == len(t) and list(df.columns) == list(COLUMNS)


def test_empty_table_round_trip():
    t = RayTable({k: np.zeros(0, dtype=np.int64 if k in ("ray_id", "parent_id", "generation", "source_ray")
                             else float) if k not in ("source", "medium", "began", "began_part", "began_face",
                                                     "began_detector", "ended", "ended_part", "ended_face",
                                                     "ended_detector") else np.zeros(0, dtype=str)
                  for k in COLUMNS})
    assert len(read_csv(t.to_csv(), text=True)) == 0
