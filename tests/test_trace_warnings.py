"""What a trace tells its user beyond the ledger: limits that cut flux, wavelengths outside a
material's data, wavelengths no material can take, and command-line values out of range."""
from __future__ import annotations

import json
from pathlib import Path

import pytest

import raytrace
from raytrace.cli import main
from raytrace.errors import SceneError
from raytrace.scene_io import load_scene

SAMPLES = Path(__file__).resolve().parent.parent / "samples"


def _with_wavelength(tmp_path, nm):
    data = json.loads((SAMPLES / "light-pipe-90.json").read_text())
    data["sources"][0]["spectrum"] = {"wavelength_nm": nm}
    path = tmp_path / f"pipe-{nm}.json"
    path.write_text(json.dumps(data))
    return path


def test_segment_budget_cut_is_a_warning_naming_the_option():
    scene = load_scene(SAMPLES / "light-pipe-90.json")
    r = raytrace.trace(scene, rays=200, segment_budget=2000)
    cut = r.ledger.flux("truncated", reason="segment budget")
    assert cut > 0
    assert any("segment budget" in w and "--segment-budget" in w for w in r.warnings)
    assert r.to_summary_dict()["warnings"] == r.warnings


def test_a_complete_trace_has_no_warnings():
    r = raytrace.trace(load_scene(SAMPLES / "oblique-window.json"))
    assert r.warnings == []


def test_wavelength_with_no_real_index_is_a_scene_error(tmp_path, capsys):
    """Sultanova's one-term PMMA formula has its pole at sqrt(0.011313) um = 106 nm, so at
    100 nm n^2 < 0 (published: Sultanova et al. 2009 coefficients)."""
    path = _with_wavelength(tmp_path, 100.0)
    with pytest.raises(SceneError) as err:
        raytrace.trace(load_scene(path))
    assert err.value.problems[0].path == "$.sources[0].spectrum"
    assert main(["trace", str(path)]) == 1
    text = capsys.readouterr().err
    assert str(path) in text and "$.sources[0].spectrum" in text and "PMMA" in text
    assert "Traceback" not in text


def test_wavelength_outside_the_catalog_data_is_a_warning(tmp_path, capsys):
    """Sultanova et al. 2009 measured PMMA and polycarbonate over 436.8-1052 nm."""
    path = _with_wavelength(tmp_path, 1500.0)
    r = raytrace.trace(load_scene(path))
    assert any("PMMA" in w and "436.8-1052" in w for w in r.warnings)
    assert main(["trace", str(path), "--quiet"]) == 0
    assert "warning:" in capsys.readouterr().err


@pytest.mark.parametrize("option", [["--rays", "-5"], ["--flux-floor", "2"], ["--flux-floor", "nan"],
                                    ["--segment-budget", "0"], ["--workers", "-3"], ["--max-generations", "0"]])
def test_command_line_values_follow_the_scene_file_rules(option, capsys):
    assert main(["trace", str(SAMPLES / "oblique-window.json"), *option]) == 2
    assert "expected" in capsys.readouterr().err


def test_paths_zero_lists_none(tmp_path, capsys):
    out = tmp_path / "s.json"
    assert main(["trace", str(SAMPLES / "oblique-window.json"), "--routes", "0", "--json", str(out)]) == 0
    assert "none listed" in capsys.readouterr().out
    assert json.loads(out.read_text())["routes"] == []
    assert main(["trace", str(SAMPLES / "oblique-window.json"), "--routes", "-1"]) == 2
