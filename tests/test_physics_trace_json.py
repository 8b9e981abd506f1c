"""docs/trace-json.md describes what `raytrace trace --json` writes; check a real file against it."""
import json
from pathlib import Path

import pytest

from raytrace.cli import main

ROOT = Path(__file__).resolve().parent.parent
KINDS = {"detector": {"detector"}, "escaped": {"part", "face"}, "absorbed": {"part", "face"},
         "truncated": {"reason"}}
REASONS = {"flux below threshold", "maximum depth", "segment budget"}
STATS = {"source_rays", "segments", "events", "generations", "tir_events", "vertex_hits",
         "grazing_hits", "medium_mismatches", "elapsed_s"}
SETTINGS = {"rays", "mode", "seed", "min_relative_flux", "max_depth", "max_segments", "sampling",
            "source_names", "source_positions"}


@pytest.mark.parametrize("sample,extra", [("light-pipe-90", []), ("microprism-strip", ["--mode", "monte_carlo"]),
                                          ("oblique-window", ["--max-depth", "2"])])
def test_json_summary_has_the_documented_fields(tmp_path, sample, extra):
    out = tmp_path / "summary.json"
    assert main(["trace", str(ROOT / "samples" / f"{sample}.json"), "--quiet", "--json", str(out), *extra]) == 0
    data = json.loads(out.read_text(encoding="utf-8"))
    assert {"source_flux", "mode", "buckets", "efficiency", "stats", "settings"} <= set(data)
    assert data["source_flux"] > 0
    total = 0.0
    for b in data["buckets"]:
        assert b["kind"] in KINDS
        assert set(b) - {"kind", "flux"} <= KINDS[b["kind"]]          # only the fields that apply
        assert all(b[k] != "" for k in set(b) - {"kind", "flux"})     # left out, never empty
        assert b["flux"] >= 0
        if b["kind"] == "truncated":
            assert b["reason"] in REASONS
        if b["kind"] == "absorbed":
            assert "part" in b and "face" in b
        total += b["flux"]
    # common practice: energy conservation, the documented closure within 1e-9 relative
    assert abs(total - data["source_flux"]) <= 1e-9 * data["source_flux"]
    assert STATS <= set(data["stats"])
    assert SETTINGS <= set(data["settings"])
    assert data["mode"] == data["settings"]["mode"]
    detectors = {d["name"] for d in json.loads((ROOT / "samples" / f"{sample}.json").read_text())["detectors"]}
    assert set(data["efficiency"]) == detectors
    for name, eff in data["efficiency"].items():
        flux = sum(b["flux"] for b in data["buckets"] if b.get("detector") == name)
        assert eff == pytest.approx(flux / data["source_flux"], rel=1e-12)
    if "--max-depth" in extra:
        assert any(b.get("reason") == "maximum depth" for b in data["buckets"])
