"""The command line: trace outputs, sweep, materials, progress display and exit codes."""
from __future__ import annotations

import csv
import io
import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import raytrace
from raytrace import cli
from raytrace.catalog import CATALOG
from raytrace.raytable import COLUMNS, ray_table
from raytrace.report import Progress
from raytrace.scene_io import load_scene

SAMPLES = Path(__file__).resolve().parent.parent / "samples"
WINDOW = str(SAMPLES / "oblique-window.json")
PIPE = str(SAMPLES / "light-pipe-90.json")


def run(args, capsys):
    code = cli.main(args)
    out, err = capsys.readouterr()
    return code, out, err


def test_trace_writes_ray_table_profiles_and_routes(tmp_path, capsys):
    rays, prof = tmp_path / "rays.csv", tmp_path / "profiles.csv"
    code, out, err = run(["trace", WINDOW, "--csv", str(rays), "--detectors-csv", str(prof), "--routes", "2"], capsys)
    assert code == cli.EXIT_OK, err
    assert "Top routes to detector inside chamber:" in out
    assert "enter through viewport / front, leave through viewport / back" in out
    assert "Detector figures:" in out
    # the CSV is the table of the same trace done through the API (200 rays < first:1000)
    expected = ray_table(raytrace.trace(load_scene(WINDOW), record="first", record_count=1000))
    df = pd.read_csv(rays)
    assert list(df.columns) == list(COLUMNS) and len(df) == len(expected)
    for k in ("ray_id", "x1_mm", "flux_p", "ended", "ended_face"):
        assert np.array_equal(df[k].to_numpy(), expected[k]), k
    rows = list(csv.reader(prof.open()))
    assert rows[0][:3] == ["detector", "profile", "bin"]
    assert len(rows) == 1 + 2 * (60 + 36)


def test_record_bounds_the_table(tmp_path, capsys):
    rays = tmp_path / "rays.csv"
    code, out, err = run(["trace", PIPE, "--rays", "100", "--csv", str(rays), "--record", "first:3"], capsys)
    assert code == 0
    assert set(pd.read_csv(rays)["source_ray"]) == {0, 1, 2}
    assert "first 3 of 100 source rays" in err
    for bad in ("some", "first:0", "first:x", "first"):
        code, out, err = run(["trace", PIPE, "--record", bad], capsys)
        assert code == cli.EXIT_USAGE and "--record" in err


def test_sweep_writes_the_table(tmp_path, capsys):
    out_csv = tmp_path / "sweep.csv"
    code, out, err = run(["sweep", str(SAMPLES / "roof-prism-retroreflector.json"), "--vary",
                          "emitter beam.direction_deg=85:95:3", "--csv", str(out_csv), "--rays", "50",
                          "--workers", "1"], capsys)
    assert code == cli.EXIT_OK, err
    df = pd.read_csv(out_csv)
    assert list(df["emitter beam.direction_deg"]) == [85.0, 90.0, 95.0]
    assert list(df["status"]) == ["ok"] * 3
    assert "efficiency: return" in df.columns
    assert "eff. return" in out


def test_sweep_exit_codes(tmp_path, capsys):
    out_csv = tmp_path / "s.csv"
    code, out, err = run(["sweep", PIPE, "--vary", "guide.bend=1:2:2", "--csv", str(out_csv)], capsys)
    assert code == cli.EXIT_USAGE and "--vary guide.bend" in err and "expected" in err
    code, out, err = run(["sweep", PIPE, "--vary", "guide.width=1:2", "--csv", str(out_csv)], capsys)
    assert code == cli.EXIT_USAGE and "START:STOP:COUNT" in err
    code, out, err = run(["sweep", PIPE, "--vary", "gap=0.5,-1", "--csv", str(out_csv),
                          "--rays", "50", "--workers", "1"], capsys)
    assert code == cli.EXIT_SWEEP_POINTS and "overlapping" in err
    assert list(pd.read_csv(out_csv)["status"].str.startswith("ok")) == [True, False]
    code, out, err = run(["sweep", PIPE, "--vary", "guide.width=2:3:2", "--csv", str(tmp_path / "no" / "s.csv"),
                          "--rays", "20", "--workers", "1"], capsys)
    assert code == cli.EXIT_OUTPUT and "could not write" in err
    code, out, err = run(["sweep", str(tmp_path / "missing.json"), "--vary", "a.b=1:2:2", "--csv", str(out_csv)], capsys)
    assert code == cli.EXIT_SCENE and "missing.json" in err


def test_materials_lists_the_catalog_with_sources(capsys):
    code, out, err = run(["materials"], capsys)
    assert code == 0
    for name, m in CATALOG.items():
        line = next(ln for ln in out.splitlines() if ln.startswith(name + " "))
        assert m.source in line


def test_exit_codes_are_documented():
    doc = cli.__doc__
    for name in ("EXIT_OK", "EXIT_SCENE", "EXIT_USAGE", "EXIT_LIMIT", "EXIT_OUTPUT", "EXIT_SWEEP_POINTS"):
        assert re.search(rf"^\s+{getattr(cli, name)}\s+\S", doc, re.M), name


def test_bad_scene_and_unwritable_output(tmp_path, capsys):
    bad = tmp_path / "bad.json"
    bad.write_text("{")
    code, out, err = run(["trace", str(bad)], capsys)
    assert code == cli.EXIT_SCENE and "bad.json" in err and "Traceback" not in err
    code, out, err = run(["trace", WINDOW, "--quiet", "--detectors-csv", str(tmp_path / "no" / "d.csv")], capsys)
    assert code == cli.EXIT_OUTPUT and out == ""


class FakeTerminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_only_on_a_terminal_and_not_when_quiet():
    tty = FakeTerminal()
    p = Progress(enabled=True, stream=tty, delay_s=0.0, interval_s=0.0)
    p.trace({"generations": 3, "segments": 1234})
    p.points(2, 4)
    p.trace({"chunks_done": 2, "chunks": 5, "segments": 99})
    p.close()
    text = tty.getvalue()
    assert "generation 3, 1,234 segments" in text and "2/4 points" in text and text.endswith("\r")
    assert "chunk 2/5, 99 segments" in text
    pipe = io.StringIO()                       # not a terminal: nothing at all
    p = Progress(enabled=True, stream=pipe, delay_s=0.0, interval_s=0.0)
    p.trace({"generations": 1, "segments": 1})
    p.close()
    assert pipe.getvalue() == ""
    quiet = FakeTerminal()                     # --quiet: nothing even on a terminal
    p = Progress(enabled=False, stream=quiet, delay_s=0.0)
    p.points(1, 1)
    assert quiet.getvalue() == ""


def test_console_script_quiet_when_piped(tmp_path):
    """Run as a user would: stderr is a pipe here, so no progress line may appear."""
    exe = Path(sys.executable).with_name("raytrace")
    proc = subprocess.run([str(exe), "trace", PIPE, "--rays", "200", "--json", str(tmp_path / "s.json")],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0
    assert "\r" not in proc.stderr and "tracing" not in proc.stderr
    assert json.loads((tmp_path / "s.json").read_text())["efficiency"]["viewer side"] > 0


def test_json_summary_carries_detector_figures_and_top_routes(tmp_path, capsys):
    out = tmp_path / "s.json"
    code, _, err = run(["trace", WINDOW, "--json", str(out), "--routes", "1", "--quiet"], capsys)
    assert code == 0, err
    data = json.loads(out.read_text())
    figs = {d["name"]: d for d in data["detectors"]}
    assert figs["inside chamber"]["efficiency"] == pytest.approx(data["efficiency"]["inside chamber"], rel=1e-12)
    assert figs["inside chamber"]["arrival_ps"]["spread"] >= 0
    # one path (the top one) per ledger bucket
    buckets = [p["bucket"] for p in data["routes"]]
    assert len(buckets) == len(set(buckets)) == len([b for b in data["buckets"] if b["flux"] > 0])


@pytest.mark.parametrize("old, new, value", [("--min-flux", "--flux-floor", "0.001"),
                                             ("--max-depth", "--max-generations", "5"),
                                             ("--max-segments", "--segment-budget", "100000"),
                                             ("--paths", "--routes", "2"),
                                             ("--paths-min-flux", "--routes-min-flux", "0.01")])
def test_earlier_option_names_still_work_with_a_note(tmp_path, capsys, old, new, value):
    """An option's earlier name gives the same summary as its new name, and says the new name."""
    out_old, out_new = tmp_path / "old.json", tmp_path / "new.json"
    code, _, err = run(["trace", WINDOW, "--rays", "50", "--quiet", "--json", str(out_old), old, value], capsys)
    assert code == cli.EXIT_OK, err
    assert f"{old} is now called {new}" in err
    code, _, err = run(["trace", WINDOW, "--rays", "50", "--quiet", "--json", str(out_new), new, value], capsys)
    assert code == cli.EXIT_OK and "now called" not in err
    a, b = json.loads(out_old.read_text()), json.loads(out_new.read_text())
    assert a["buckets"] == b["buckets"] and a["settings"] == b["settings"] and a.get("routes") == b.get("routes")


def test_record_spread_covers_the_whole_even_fan(tmp_path, capsys):
    """--record spread:N (the default with --csv) keeps N source rays spread evenly over the
    source: the middle ray of each of N equal runs, so the recorded beam of the window spans its
    full 2 mm width (the first N would span one tenth of it), and the note says which."""
    rays = tmp_path / "rays.csv"
    code, out, err = run(["trace", WINDOW, "--rays", "200", "--csv", str(rays), "--record", "spread:20"], capsys)
    assert code == 0
    df = pd.read_csv(rays)
    assert sorted(set(df["source_ray"])) == list(range(5, 200, 10))
    assert "20 of 200 source rays, spread evenly" in err and "source rays 5, 15, 25, ..., 195" in err
    starts = df[df["generation"] == 0]
    # the beam's rays cross a 2 mm wide beam at 45 degrees: the recorded ones span 19/20 of it
    span = np.hypot(np.ptp(starts["x0_mm"]), np.ptp(starts["y0_mm"]))
    assert span == pytest.approx(2.0 * 19 / 20, rel=1e-9)
    for kind, count in (("spread", 7), ("spread", 200), ("spread", 500)):
        got = raytrace.trace(load_scene(WINDOW), rays=200, record=kind, record_count=count)
        assert len(set(ray_table(got)["source_ray"].tolist())) == min(count, 200)
