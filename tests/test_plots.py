"""--plot on trace and sweep: the files are real images, the plotted points are the table's, and
error bars appear exactly where the table has standard errors."""
from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from raytrace import cli
from raytrace.plots import standard_error_column, sweep_plot
from raytrace.sweep import SweepResult

ROOT = Path(__file__).resolve().parents[1]
PIPE = ROOT / "samples" / "light-pipe-90.json"
WINDOW = ROOT / "samples" / "oblique-window.json"


def test_trace_plot_png_with_a_ray_table(tmp_path):
    from matplotlib.image import imread
    png, rays = tmp_path / "pipe.png", tmp_path / "rays.csv"
    assert cli.main(["trace", str(PIPE), "--rays", "200", "--plot", str(png), "--csv", str(rays), "--quiet"]) == 0
    image = imread(png)
    assert image.shape[0] > 400 and image.shape[1] > 1000
    assert image[..., :3].std() > 0.05          # not a blank page
    import pandas
    assert pandas.read_csv(rays)["source_ray"].max() == 199   # the plot did not shrink the table asked for


def test_sweep_plot_svg_shows_the_table(tmp_path):
    svg, table = tmp_path / "window.svg", tmp_path / "window.csv"
    code = cli.main(["sweep", str(WINDOW), "--vary", "probe beam.direction_deg=0:50:6", "--csv", str(table),
                     "--plot", str(svg), "--quiet", "--workers", "1"])
    assert code == 0
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")
    import pandas
    rows = pandas.read_csv(table)
    result = SweepResult(["probe beam.direction_deg"], ["inside chamber", "back toward the beam"], list(rows.columns),
                         rows.to_dict("records"))
    fig = sweep_plot(result, str(tmp_path / "again.png"))
    lines = fig.axes[0].get_lines()
    assert np.allclose(lines[0].get_xdata(), rows["probe beam.direction_deg"])
    assert np.allclose(lines[0].get_ydata(), 100 * rows["efficiency: inside chamber"])
    # the sweep table carries standard errors: the plot shows them as +-1 se bars
    bars = fig.axes[0].containers[0]
    assert bars.has_yerr
    heights = [s[1][1] - s[0][1] for s in bars.lines[2][0].get_segments()]
    assert heights == pytest.approx(list(200 * rows["efficiency error: inside chamber"]))


def test_sweep_plot_draws_error_bars_from_standard_errors(tmp_path):
    col = "efficiency: d"
    rows = [{"point": i, "x": float(i), "status": "ok", col: 0.5 + 0.1 * i, standard_error_column(col): 0.01 * (i + 1)}
            for i in range(3)]
    fig = sweep_plot(SweepResult(["x"], ["d"], list(rows[0]), rows), str(tmp_path / "e.png"))
    bars = fig.axes[0].containers[0]
    assert bars.has_yerr
    segments = bars.lines[2][0].get_segments()
    assert [s[1][1] - s[0][1] for s in segments] == pytest.approx([2.0, 4.0, 6.0])   # +-1 se, in %


def test_bad_plot_name_is_refused_before_tracing(tmp_path, capsys):
    out = tmp_path / "pipe.jpg"
    assert cli.main(["trace", str(PIPE), "--plot", str(out)]) == cli.EXIT_USAGE
    assert "--plot" in capsys.readouterr().err and not out.exists()
    assert cli.main(["sweep", str(WINDOW), "--vary", "probe beam.direction_deg=0:50:2", "--csv",
                     str(tmp_path / "s.csv"), "--plot", str(tmp_path / "s.pdf")]) == cli.EXIT_USAGE
    assert not (tmp_path / "s.csv").exists()
    missing = tmp_path / "no-such-dir" / "p.png"
    assert cli.main(["trace", str(PIPE), "--rays", "20", "--plot", str(missing), "--quiet"]) == cli.EXIT_OUTPUT
