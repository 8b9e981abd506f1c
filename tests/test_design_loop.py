"""raytrace optimize and raytrace tolerance, checked against figures worked out independently:
the Brewster angle (published), a fine sweep, finite-difference sensitivities times the
tolerance, a re-trace of the worst sample, and the two-mirror rotation of a roof prism."""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

import raytrace
from raytrace import cli
from raytrace.catalog import lookup
from raytrace.optimize import Bound, optimize
from raytrace.scene_io import load_scene, scene_from_dict, scene_to_dict
from raytrace.sweep import Variable, sweep
from raytrace.tolerance import Tolerance, tolerance

ROOT = Path(__file__).resolve().parents[1]
WINDOW = ROOT / "samples" / "oblique-window.json"
ROOF = ROOT / "samples" / "roof-prism-retroreflector.json"


def malitson_fused_silica(wl_nm: float) -> float:
    """published: I. H. Malitson, JOSA 55, 1205 (1965), Sellmeier fit for fused silica."""
    x = (wl_nm / 1000.0) ** 2
    terms = ((0.6961663, 0.0684043), (0.4079426, 0.1162414), (0.8974794, 9.896161))
    return math.sqrt(1 + sum(b * x / (x - c * c) for b, c in terms))


def p_window() -> dict:
    """The sample viewport lit by a p-polarized probe, moved so the beam reaches the chamber
    detector at every angle tried here."""
    d = scene_to_dict(load_scene(WINDOW))
    d["sources"][0].update(polarization="p", position=[-10.0, -18.0])
    d["detectors"][0].update(start=[30.0, -40.0], end=[30.0, 80.0])
    return d


def test_optimize_finds_the_brewster_angle():
    # published: Hecht, Optics, sec 4.6: p light crosses a face without reflection at tan(theta_B) = n,
    # so a plate's p transmission peaks there (both faces at Brewster's angle)
    expected = math.degrees(math.atan(malitson_fused_silica(632.8)))
    res = optimize(p_window(), [Bound("probe beam.direction_deg", 40.0, 70.0)], "inside chamber",
                   options={"rays": 8}, workers=1, xtol=1e-5)
    assert res.converged, res.message
    assert res.optimum[0] == pytest.approx(expected, abs=0.02)
    assert res.value == pytest.approx(1.0, abs=1e-6)
    assert res.evaluations[0].stage == "start" and res.evaluations[0].values == (45.0,)


def test_optimize_optimum_matches_a_fine_sweep_and_is_deterministic():
    data = p_window()
    fine = sweep(data, [Variable("probe beam.direction_deg", tuple(np.linspace(50, 60, 101)))],
                 {"rays": 8}, workers=1)
    best = max(fine.rows, key=lambda r: r["efficiency: inside chamber"])
    res = optimize(data, [Bound("probe beam.direction_deg", 40.0, 70.0)], "efficiency: inside chamber",
                   options={"rays": 8}, workers=2)
    # the optimizer beats or equals every point of the sweep, and lands within one sweep step of its best
    assert res.value >= best["efficiency: inside chamber"] - 1e-12
    assert abs(res.optimum[0] - best["probe beam.direction_deg"]) <= 0.1
    again = optimize(data, [Bound("probe beam.direction_deg", 40.0, 70.0)], "efficiency: inside chamber",
                     options={"rays": 8}, workers=1)
    assert again.optimum == res.optimum and [e.values for e in again.evaluations] == [e.values for e in res.evaluations]


def test_optimize_two_numbers_with_powell_minimizes_the_ghost():
    # minimizing the light sent back toward the beam also finds Brewster's angle (common practice:
    # reflection of p light vanishes there); the second number, the plate's thickness, does not matter
    expected = math.degrees(math.atan(malitson_fused_silica(632.8)))
    res = optimize(p_window(), [Bound("probe beam.direction_deg", 40.0, 70.0), Bound("viewport.thickness", 8.0, 12.0)],
                   "efficiency: inside chamber", options={"rays": 4}, workers=1, xtol=1e-4)
    assert res.optimum[0] == pytest.approx(expected, abs=0.05)
    assert len(res.evaluations) <= 80


def test_optimize_cli_reports_and_writes_history(tmp_path, capsys):
    scene = tmp_path / "p.json"
    scene.write_text(json.dumps(p_window()))
    out = tmp_path / "history.csv"
    code = cli.main(["optimize", str(scene), "--vary", "probe beam.direction_deg=40:70", "--figure",
                     "inside chamber", "--rays", "8", "--workers", "1", "--csv", str(out), "--json",
                     str(tmp_path / "o.json")])
    text = capsys.readouterr().out
    assert code == 0
    assert "probe beam.direction_deg: 55.5" in text and "convergence: converged" in text
    import pandas
    rows = pandas.read_csv(out)
    assert list(rows["stage"][:2]) == ["start", "scan"] and rows["efficiency: inside chamber"].max() == pytest.approx(1.0)
    summary = json.loads((tmp_path / "o.json").read_text())
    assert summary["optimum"][0] == pytest.approx(55.5, abs=0.05)


@pytest.mark.parametrize("args, words", [
    (["--vary", "probe beam.direction_deg=50:70"], ["--vary probe beam.direction_deg", "start point 45"]),
    (["--vary", "probe beam.direction_deg=70:50"], ["LOW < HIGH"]),
    (["--vary", "probe beam.nope=40:70"], ["--vary probe beam.nope", "a source field"]),
    (["--vary", "trace.rays=1:100"], ["counts things"]),
])
def test_optimize_bad_input_is_a_usage_error(args, words, capsys):
    code = cli.main(["optimize", str(WINDOW), "--figure", "inside chamber", *args])
    err = capsys.readouterr().err
    assert code == cli.EXIT_USAGE
    assert all(w in err for w in words), err
    assert "Traceback" not in err


def test_unknown_figure_names_the_detectors(capsys):
    """A misspelt --figure is a usage error (exit 2), as it is for sweep --figure."""
    code = cli.main(["optimize", str(WINDOW), "--vary", "probe beam.direction_deg=40:70", "--figure", "chamber"])
    err = capsys.readouterr().err
    assert code == cli.EXIT_USAGE and "--figure" in err and "'inside chamber'" in err
    code = cli.main(["tolerance", str(WINDOW), "--tol", "probe beam.direction_deg=1", "--figure", "chamber"])
    assert code == cli.EXIT_USAGE and "'inside chamber'" in capsys.readouterr().err


def finite_difference_slope(data: dict, name: str, x0: float, h: float) -> float:
    """Central difference of the chamber efficiency, traced by the sweep module (not tolerance)."""
    res = sweep(data, [Variable(name, (x0 - h, x0 + h))], {"rays": 8}, workers=1)
    lo, hi = (r["efficiency: inside chamber"] for r in res.rows)
    return (hi - lo) / (2 * h)


@pytest.mark.parametrize("distribution, sigma_of_band", [("uniform", 1 / math.sqrt(3)), ("normal", 1 / 3)])
def test_tolerance_spread_matches_finite_difference_sensitivity(distribution, sigma_of_band):
    # common practice (first-order tolerancing): sigma_f = sqrt(sum (df/dx_i * sigma_i)^2), with
    # sigma = T / sqrt 3 for a uniform +-T band and T / 3 for a normal one held to +-3 sigma
    data = scene_to_dict(load_scene(WINDOW))
    t_angle, t_wl = 1.0, 20.0
    s_angle = finite_difference_slope(data, "probe beam.direction_deg", 45.0, 0.25)
    s_wl = finite_difference_slope(data, "probe beam.wavelength", 632.8, 5.0)
    predicted = math.hypot(s_angle * t_angle, s_wl * t_wl) * sigma_of_band
    res = tolerance(data, [Tolerance("probe beam.direction_deg", t_angle, t_angle),
                           Tolerance("probe beam.wavelength", t_wl, t_wl)],
                    ["inside chamber"], samples=200, distribution=distribution, sample_seed=3,
                    options={"rays": 8}, workers=2)
    spread = res.spreads[0]
    # a 200-sample standard deviation has a relative standard error of 1/sqrt(2 * 199) = 5 %;
    # seed 3, tolerance 12 % (2.4 of those standard errors)
    assert spread.std == pytest.approx(predicted, rel=0.12)
    # the fitted slope is the finite-difference one (the response is nearly linear over +-1 deg)
    assert spread.slopes[0] == pytest.approx(s_angle, rel=0.02)
    assert res.names[int(np.argmax(spread.shares))] == "probe beam.direction_deg"
    assert spread.nominal == pytest.approx(raytrace.trace(scene_from_dict(data), rays=8).efficiency("inside chamber"))


def test_tolerance_worst_case_retraces_to_the_same_figure():
    data = scene_to_dict(load_scene(WINDOW))
    res = tolerance(data, [Tolerance("probe beam.direction_deg", 2.0, 2.0), Tolerance("viewport.thickness", 0.1, 0.1)],
                    ["inside chamber"], samples=30, options={"rays": 8}, workers=1)
    s = res.spreads[0]
    w = s.worst_index
    assert s.values[w] == s.ok.min()
    d = json.loads(json.dumps(data))
    d["sources"][0]["direction_deg"] += res.deviations[w][0]
    d["parts"][0]["shape"]["params"]["thickness"] += res.deviations[w][1]
    assert raytrace.trace(scene_from_dict(d), rays=8).efficiency("inside chamber") == pytest.approx(s.values[w], abs=1e-12)
    assert np.all(np.abs(res.deviations[:, 0]) <= 2.0) and np.all(np.abs(res.deviations[:, 1]) <= 0.1)
    again = tolerance(data, [Tolerance("probe beam.direction_deg", 2.0, 2.0), Tolerance("viewport.thickness", 0.1, 0.1)],
                      ["inside chamber"], samples=30, options={"rays": 8}, workers=2)
    assert np.array_equal(again.spreads[0].values, s.values)


def test_tolerance_cli_and_bad_tolerances(tmp_path, capsys):
    out = tmp_path / "samples.csv"
    code = cli.main(["tolerance", str(ROOF), "--tol", "roof prism.roof_angle_deg=0.5", "--figure", "return",
                     "--samples", "12", "--workers", "1", "--csv", str(out)])
    text = capsys.readouterr().out
    assert code == 0 and "worst case" in text and "drivers" in text and "nominal" in text
    assert len(out.read_text().splitlines()) == 13
    for bad, word in (("roof prism.roof_angle_deg=0", "T > 0"), ("roof prism.roof_angle_deg=1,2", "A, B >= 0"),
                      ("roof prism.apex=0.5", "--tol roof prism.apex")):
        code = cli.main(["tolerance", str(ROOF), "--tol", bad, "--figure", "return"])
        err = capsys.readouterr().err
        assert code == cli.EXIT_USAGE and word in err, err


def test_roof_angle_error_splits_the_return_into_two_beams():
    # from the two-mirror rule (Hecht, Optics, sec 5.4: two mirrors at angle phi turn a ray by 2 phi):
    # legs at 90 deg - d send light back turned by 2 d one way or the other, depending on which leg
    # it meets first, so a roof error splits the return in two; outside, Snell's law at the hypotenuse
    d = scene_to_dict(load_scene(ROOF))
    delta = 0.1
    d["parts"][0]["shape"]["params"]["roof_angle_deg"] = 90.0 - delta
    scene = scene_from_dict(d)
    result = raytrace.trace(scene, rays=200)
    n, n_air = (float(np.asarray(lookup(m).index(np.array([850.0])))[0]) for m in ("crown glass", "air"))
    inside = math.asin(n_air * math.sin(math.radians(5.0)) / n)
    expected = sorted(-math.degrees(math.asin(n / n_air * math.sin(inside + s * math.radians(2 * delta)))) for s in (-1, 1))
    hits = result.detector("return")
    angles, where = np.unique(np.round(hits.angle_deg, 6), return_inverse=True)
    flux = np.bincount(where, weights=hits.flux)
    two = sorted(angles[np.argsort(-flux)[:2]])
    assert two == pytest.approx(expected, abs=1e-5)


def test_dask_cluster_gives_the_same_tolerance_and_optimum(tmp_path, capsys):
    """Tolerance samples and the optimizer's scan on a two-worker Dask LocalCluster (processes)
    equal the run in this process, sample for sample; the command line reaches it by --dask."""
    distributed = pytest.importorskip("distributed")
    data = p_window()
    tols = [Tolerance("probe beam.direction_deg", 2.0, 2.0)]
    here = tolerance(data, tols, ["inside chamber"], samples=8, options={"rays": 4}, workers=1)
    best_here = optimize(data, [Bound("probe beam.direction_deg", 40.0, 70.0)], "inside chamber",
                         options={"rays": 4}, workers=1, max_evaluations=20)
    scene = tmp_path / "p.json"
    scene.write_text(json.dumps(data))
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        there = tolerance(data, tols, ["inside chamber"], samples=8, options={"rays": 4},
                          executor=client.get_executor())
        best_there = optimize(data, [Bound("probe beam.direction_deg", 40.0, 70.0)], "inside chamber",
                              options={"rays": 4}, executor=client.get_executor(), max_evaluations=20)
        code = cli.main(["optimize", str(scene), "--vary", "probe beam.direction_deg=40:70", "--figure",
                         "inside chamber", "--rays", "4", "--max-evaluations", "20", "--dask",
                         cluster.scheduler_address, "--quiet", "--json", str(tmp_path / "o.json")])
    assert np.array_equal(there.spreads[0].values, here.spreads[0].values)
    assert best_there.optimum == best_here.optimum and best_there.value == best_here.value
    assert code == 0 and json.loads((tmp_path / "o.json").read_text())["optimum"] == list(best_here.optimum)


def test_readme_tolerance_example_reproduces(capsys):
    """The README's roof-angle example, run as written there: its figures are these."""
    readme = (ROOT / "README.md").read_text()
    command = 'raytrace tolerance samples/roof-prism-retroreflector.json --tol "roof prism.roof_angle_deg=0.5" --figure return'
    assert command in readme
    assert cli.main(["tolerance", str(ROOF), "--tol", "roof prism.roof_angle_deg=0.5", "--figure", "return",
                     "--workers", "2"]) == 0
    out = capsys.readouterr().out
    for line, figure in (("nominal", "100.000 +- 0.000 %"), ("mean", "96.054 %"), ("standard deviation", "5.972 %"),
                         ("worst case", "80.974 %")):
        assert f"{line} {figure}" in out
        assert figure.replace(" +- 0.000", "") in readme


def test_figure_standard_error_matches_the_spread_over_seeds():
    """In a Monte Carlo trace each source ray either reaches the chamber or not, so the efficiency's
    standard error is the binomial sqrt(p (1 - p) / N) (common practice), and over many trace seeds
    the efficiencies scatter by that much.  40 seeds, N = 400: the scatter's own relative error is
    1/sqrt(78) = 11 %, tolerance 30 %."""
    from raytrace.design_points import evaluate_point
    from raytrace.merit import Figure
    data = scene_to_dict(load_scene(WINDOW))
    fig = Figure("efficiency", "inside chamber")
    runs = [evaluate_point(data, [], {"rays": 400, "mode": "monte_carlo", "seed": s}, [fig])["figures"][fig.label]
            for s in range(1, 41)]
    values, errors = np.array(runs).T
    p = values.mean()
    assert errors.mean() == pytest.approx(math.sqrt(p * (1 - p) / 400), rel=0.05)
    assert values.std(ddof=1) == pytest.approx(errors.mean(), rel=0.30)


def test_named_and_linked_numbers_start_from_their_evaluated_values(capsys):
    """The light-pipe sample names its bend radius (bend_radius = 8) and links the bend to it; the
    window follows the guide's output.  Both names start from 8 and trace the sample as it is."""
    pipe = ROOT / "samples" / "light-pipe-90.json"
    plain = raytrace.trace(load_scene(pipe), rays=60).efficiency("viewer side")
    for name in ("bend_radius", "guide.segments[1].bend.radius"):
        res = optimize(load_scene(pipe) if name == "bend_radius" else json.loads(pipe.read_text()),
                       [Bound(name, 4.0, 14.0)], "viewer side", options={"rays": 60}, workers=1,
                       scan=2, max_evaluations=4)
        assert res.start == (8.0,)
        assert res.evaluations[0].value == pytest.approx(plain, abs=1e-12)
    # a source placed by aim_at / turn_deg moves as a whole: its linked turn is varied by its name
    sheet = ROOT / "samples" / "retroreflective-sheet.json"
    code = cli.main(["tolerance", str(sheet), "--tol", "emitter beam.turn_deg=0.5", "--figure", "return"])
    err = capsys.readouterr().err
    assert code == cli.EXIT_USAGE and "'= entry_deg'" in err and "named number" in err


def test_readme_optimize_example_reproduces_with_the_traces_own_errors(tmp_path, capsys):
    """The README's bend-radius example, run as written there: its figures are these, and the
    start point's +- is the one `raytrace trace` prints for the same scene (both from the
    trace's 32 sub-batches, raytrace/uncertainty.py), not a second estimate of its own."""
    readme = (ROOT / "README.md").read_text()
    pipe = ROOT / "samples" / "light-pipe-90.json"
    command = 'raytrace optimize samples/light-pipe-90.json --vary "bend_radius=4:14" --figure "viewer side"'
    assert command in readme
    assert cli.main(["optimize", str(pipe), "--vary", "bend_radius=4:14", "--figure", "viewer side",
                     "--workers", "2", "--json", str(tmp_path / "o.json")]) == 0
    out = capsys.readouterr().out
    # the README quotes what the run prints (read from the output, so no figure is written
    # into this test: a change of the engine's result shows up as a README to re-run)
    import re
    radius = float(re.search(r"bend_radius: ([0-9.]+)  \(start 8\)", out).group(1))
    best, start = re.search(r"figure at the optimum: ([0-9.]+ \+- [0-9.]+) %  \(start ([0-9.]+ \+- [0-9.]+) %\)",
                            out).groups()
    total, scan, refine = re.search(r"evaluations: (\d+) \(the start, (\d+) in the scan, (\d+) refining\)",
                                    out).groups()
    text = " ".join(readme.split())
    assert (f"the best radius is {radius:.2f} mm, with {best} % on the viewer side, against {start} % at the "
            f"sample's 8 mm. It took {total} traces: the start, {scan} in the scan and {refine} to refine") in text
    start = json.loads((tmp_path / "o.json").read_text())["evaluations"][0]
    assert cli.main(["trace", str(pipe), "--json", str(tmp_path / "t.json"), "--quiet"]) == 0
    traced = json.loads((tmp_path / "t.json").read_text())
    assert start["stage"] == "start"
    assert start["value"] == traced["efficiency"]["viewer side"]
    assert start["se"] == traced["efficiency_error"]["viewer side"]
    capsys.readouterr()


def test_centroid_standard_error_matches_the_spread_over_seeds():
    """A centroid's standard error (the sub-batch ratio estimate, Cochran 1977 sec. 6.4) against
    the scatter of the centroid over 40 Monte Carlo trace seeds of 400 rays each: the scatter's
    own relative error is 1/sqrt(78) = 11 %, tolerance 30 %."""
    from raytrace.design_points import evaluate_point
    from raytrace.merit import Figure
    data = scene_to_dict(load_scene(WINDOW))
    fig = Figure("centroid_mm", "inside chamber")
    runs = [evaluate_point(data, [], {"rays": 400, "mode": "monte_carlo", "seed": s}, [fig])["figures"][fig.label]
            for s in range(1, 41)]
    values, errors = np.array(runs).T
    assert np.all(np.isfinite(errors)) and np.all(errors > 0)
    assert values.std(ddof=1) == pytest.approx(errors.mean(), rel=0.30)


def test_tolerance_with_too_few_samples_to_fit_says_so(capsys):
    """Two numbers and 3 samples: a least-squares fit of two slopes and an offset needs at least
    4 points, so the report says the drivers were not fitted (it printed 'nan %' before)."""
    pipe = ROOT / "samples" / "light-pipe-90.json"
    assert cli.main(["tolerance", str(pipe), "--tol", "guide.width=0.1", "--tol", "guide.segments[1].bend.radius=0.1",
                     "--figure", "viewer side", "--rays", "50", "--samples", "3", "--workers", "1"]) == 0
    out = capsys.readouterr().out
    assert "drivers: not fitted, 3 traced samples for 2 numbers; the fit needs at least 4 (raise --samples)" in out
    assert "nan" not in out


def test_too_few_samples_for_one_number_is_said_in_the_singular(capsys):
    """One number and two samples: '2 traced samples for 1 number' (it said '1 numbers'); a
    fit of one slope and an offset needs at least 3 points to leave a residual."""
    pipe = ROOT / "samples" / "light-pipe-90.json"
    assert cli.main(["tolerance", str(pipe), "--tol", "guide.width=0.1", "--figure", "viewer side",
                     "--rays", "20", "--samples", "2", "--workers", "1"]) == 0
    out = capsys.readouterr().out
    assert "drivers: not fitted, 2 traced samples for 1 number; the fit needs at least 3 (raise --samples)" in out


@pytest.mark.parametrize("command", [
    ["optimize", "--vary", "probe beam.direction_deg=40:70", "--figure", "inside chamber"],
    ["tolerance", "--tol", "probe beam.direction_deg=1", "--figure", "inside chamber", "--samples", "3"],
])
@pytest.mark.parametrize("flag", ["--csv", "--json"])
def test_optimize_and_tolerance_refuse_an_output_over_the_scene(tmp_path, capsys, command, flag):
    """--csv or --json naming the scene file wrote the table over the scene after the run; now it
    is refused before any trace, and the scene stays byte for byte."""
    scene = tmp_path / "window.json"
    scene.write_bytes(WINDOW.read_bytes())
    args = [command[0], str(scene), *command[1:], "--rays", "20", "--workers", "1", flag, str(scene)]
    assert cli.main(args) == cli.EXIT_USAGE
    assert f"{flag} {scene}: found the same file as the scene" in capsys.readouterr().err
    assert scene.read_bytes() == WINDOW.read_bytes()
