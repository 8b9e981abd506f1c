"""docs/trace-json.md describes what `raytrace trace --json` writes; check a real file against it."""
import json
from pathlib import Path

import pytest

from raytrace.cli import main

ROOT = Path(__file__).resolve().parent.parent
KINDS = {"detector": {"detector"}, "escaped": {"part", "face"}, "absorbed": {"part", "face"},
         "truncated": {"reason"}}
REASONS = {"below flux floor", "generation limit", "segment budget"}
STATS = {"source_rays", "segments", "events", "generations", "tir_events", "vertex_hits",
         "grazing_hits", "medium_mismatches", "elapsed_s"}
SETTINGS = {"rays", "mode", "seed", "flux_floor", "max_generations", "segment_budget", "sampling",
            "source_names", "source_positions"}


@pytest.mark.parametrize("sample,extra", [("light-pipe-90", []), ("microprism-strip", ["--mode", "monte_carlo"]),
                                          ("oblique-window", ["--max-generations", "2"])])
def test_json_summary_has_the_documented_fields(tmp_path, sample, extra):
    out = tmp_path / "summary.json"
    assert main(["trace", str(ROOT / "samples" / f"{sample}.json"), "--quiet", "--json", str(out), *extra]) == 0
    data = json.loads(out.read_text(encoding="utf-8"))
    assert {"source_flux", "mode", "buckets", "efficiency", "efficiency_error", "errors", "stats",
            "settings"} <= set(data)
    assert set(data["efficiency_error"]) == set(data["efficiency"])
    assert data["errors"]["sub_batches"] >= 2 and data["errors"]["meaning"]
    assert data["source_flux"] > 0
    total = 0.0
    for b in data["buckets"]:
        assert b["kind"] in KINDS
        common = {"kind", "flux", "share", "share_error"}
        assert set(b) - common <= KINDS[b["kind"]]                    # only the fields that apply
        assert all(b[k] != "" for k in set(b) - common)               # left out, never empty
        assert b["share"] == pytest.approx(b["flux"] / data["source_flux"], rel=1e-12)
        assert b["share_error"] is None or 0.0 <= b["share_error"] <= 0.5   # a share's error is at most 1/2
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
    if "--max-generations" in extra:
        assert any(b.get("reason") == "generation limit" for b in data["buckets"])


def _documented(section: str) -> set[str]:
    """Keys in the first column of the table under '## <section>' in docs/trace-json.md
    (a cell may list several: `a`, `b`)."""
    import re
    text = (ROOT / "docs" / "trace-json.md").read_text(encoding="utf-8")
    body = text.split(f"\n## {section}\n", 1)[1].split("\n## ", 1)[0]
    keys: set[str] = set()
    for line in body.splitlines():
        if line.startswith("| `"):
            keys |= set(re.findall(r"`([^`]+)`", line.split("|")[1]))
    assert keys, section
    return keys


def test_documented_keys_match_the_written_file(tmp_path):
    """Every key the JSON file has at the top level, per detector, per wavelength and per path
    is documented, and every documented one is written (cemented prism pair, --routes 2)."""
    out = tmp_path / "summary.json"
    scene = ROOT / "samples" / "cemented-prism-pair.json"
    assert main(["trace", str(scene), "--quiet", "--json", str(out), "--routes", "2"]) == 0
    data = json.loads(out.read_text(encoding="utf-8"))
    assert set(data) == _documented("Top-level fields")
    assert data["detectors"] and data["routes"]
    for d in data["detectors"]:
        assert set(d) == _documented("`detectors`")
        assert set(d["uniformity"]) == {"central_fraction", "bins", "min_over_mean", "max_over_mean"}
        assert set(d["arrival_ps"]) == {"first", "last", "spread", "mean", "rms"}
        assert [w["wavelength_nm"] for w in d["per_wavelength"]] == [486.13, 587.56, 656.27]
        for w in d["per_wavelength"]:
            assert set(w) == {"wavelength_nm", "hits", "flux", "share", "centroid_mm", "mean_angle_deg"}
    for g in data["routes"]:
        assert set(g) == _documented("`routes`")
    per_bucket: dict[str, int] = {}
    for g in data["routes"]:
        per_bucket[g["bucket"]] = per_bucket.get(g["bucket"], 0) + 1
    assert max(per_bucket.values()) == 2      # "the N path groups with the most flux" per bucket
    assert STATS <= _documented("`stats`") and SETTINGS <= _documented("`settings`")
    assert _documented("`stats`") <= set(data["stats"])
    assert "routes" not in json.loads(_run_json(tmp_path, scene).read_text(encoding="utf-8"))


def _run_json(tmp_path, scene, *extra):
    out = tmp_path / "plain.json"
    assert main(["trace", str(scene), "--quiet", "--json", str(out), *extra]) == 0
    return out


@pytest.mark.parametrize("depth", [1, 2, 5])
def test_max_generations_counts_generations(tmp_path, depth):
    """As documented: the source ray is generation 0, rays of generation max_generations + 1 are not
    traced, so the loop runs max_generations + 1 generations when the depth limit is what stops it
    (the light pipe's rays TIR many more times than 5)."""
    out = _run_json(tmp_path, ROOT / "samples" / "light-pipe-90.json", "--max-generations", str(depth))
    data = json.loads(out.read_text(encoding="utf-8"))
    assert data["stats"]["generations"] == depth + 1
    assert any(b.get("reason") == "generation limit" and b["flux"] > 0 for b in data["buckets"])
