"""Figures for reports, drawn with matplotlib (no display needed): a sweep's figures against the
varied number, and a trace's drawing with its rays beside the detector profiles.

The file's extension picks the format (.png or .svg).  Writes are atomic, like every output.
"""
from __future__ import annotations

import os

import numpy as np

FORMATS = (".png", ".svg")
def standard_error_column(column: str) -> str:
    """The sweep table's column holding the standard error of `column` ("efficiency: D" ->
    "efficiency error: D")."""
    kind, sep, rest = column.partition(": ")
    return f"{kind} error: {rest}" if sep else f"{column} error"


# the app's colours (gui/style.py), so a report's plot reads like the screen
RAY_COLOURS = {"ray": "#de7600", "tir": "#146ee6", "escaping": "#d6285a"}
DETECTOR_COLOUR = "#008078"


def check_plot_path(path: str) -> str | None:
    """None when `path` can take a plot, else what is wrong (for a usage error)."""
    ext = os.path.splitext(path)[1].lower()
    if ext not in FORMATS:
        return f"--plot: found {path!r}; expected a file name ending in .png or .svg"
    return None


def _figure(*args, **kwargs):
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure
    return Figure(*args, **kwargs)


def _save(fig, path: str) -> None:
    from .atomic import atomic_write
    fmt = os.path.splitext(path)[1].lower().lstrip(".")
    atomic_write(path, lambda tmp: fig.savefig(tmp, format=fmt, dpi=130, bbox_inches="tight"))


def sweep_plot(result, path: str, title: str = ""):
    """Efficiency of every detector against the varied number (one line per value of a second
    varied number), with error bars where the table has standard errors; returns the figure."""
    fig = _figure(figsize=(7, 4.2))
    ax = fig.add_subplot()
    x_name = result.names[0]
    ok = [r for r in result.rows if r["status"] == "ok"]
    groups: list[tuple[str, list[dict]]] = [("", ok)]
    if len(result.names) == 2:
        second = result.names[1]
        groups = [(f", {second} = {v:g}", [r for r in ok if r[second] == v])
                  for v in dict.fromkeys(r[second] for r in ok)]
    for det in result.detectors:
        col = f"efficiency: {det}"
        for suffix, rows in groups:
            x = np.array([r[x_name] for r in rows], float)
            y = np.array([100 * r[col] for r in rows], float)
            se_col = standard_error_column(col)
            err = (np.array([100 * float(r[se_col]) for r in rows])
                   if rows and all(isinstance(r.get(se_col), (int, float)) for r in rows)
                   else None)
            ax.errorbar(x, y, yerr=err, marker="o", ms=4, capsize=3 if err is not None else 0,
                        label=f"{det}{suffix}")
    failed = len(result.rows) - len(ok)
    ax.set_xlabel(x_name)
    ax.set_ylabel("efficiency (% of source flux)")
    ax.set_title((title or "Sweep") + (f" ({failed} point(s) not traced)" if failed else ""), fontsize=10)
    ax.grid(alpha=0.3)
    if result.detectors:
        ax.legend(fontsize=8)
    _save(fig, path)
    return fig


def trace_plot(scene, result, path: str, title: str = ""):
    """Left: parts, sources, detectors and the recorded ray segments (fading with flux, TIR and
    escaping legs in their own colours).  Right: each detector's irradiance and angular profile."""
    from .detectors import detector_reports
    reports = detector_reports(result)
    rows = max(1, len(reports))
    fig = _figure(figsize=(12, max(4.5, 2.4 * rows)))
    grid = fig.add_gridspec(rows, 3, width_ratios=(2.2, 1, 1), wspace=0.35, hspace=0.6)
    ax = fig.add_subplot(grid[:, 0])
    _draw_scene(ax, scene, result)
    ax.set_title(title or scene.name or "trace", fontsize=10)
    for k, rep in enumerate(reports):
        irr, ang = fig.add_subplot(grid[k, 1]), fig.add_subplot(grid[k, 2])
        irr.stairs(rep.irradiance.density, rep.irradiance.edges, fill=True, alpha=0.6)
        irr.set_title(f"{rep.name}: {100 * rep.efficiency:.2f} %", fontsize=9)
        irr.set_xlabel("position along the detector (mm)", fontsize=8)
        irr.set_ylabel("irradiance (flux/mm)", fontsize=8)
        ang.stairs(rep.angular.density, rep.angular.edges, fill=True, alpha=0.6, color="#2ca02c")
        ang.set_title(f"{rep.name}: angle of arrival", fontsize=9)
        ang.set_xlabel("angle from the normal (deg)", fontsize=8)
        ang.set_ylabel("intensity (flux/deg)", fontsize=8)
        for a in (irr, ang):
            a.tick_params(labelsize=7)
            a.grid(alpha=0.3)
    _save(fig, path)
    return fig


def _draw_scene(ax, scene, result) -> None:
    from matplotlib.collections import LineCollection
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MPath
    for part in scene.parts:
        tol = max(part.size_hint(), 1e-6) * 2e-3
        verts, codes = [], []
        for loop in part.loops:
            pts = loop.coords(tol)
            verts += pts + [pts[0]]
            codes += [MPath.MOVETO] + [MPath.LINETO] * (len(pts) - 1) + [MPath.CLOSEPOLY]
        ax.add_patch(PathPatch(MPath(verts, codes), facecolor="#cfe3f3", edgecolor="#355f85", lw=1.0, alpha=0.8))
        x0, y0, x1, y1 = part.outer.bounds()
        ax.annotate(f"{part.name} ({part.material})", (x1, 0.5 * (y0 + y1)), fontsize=7, ha="left",
                    va="center", color="#23415c", xytext=(4, 0), textcoords="offset points",
                    bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.7))
    seg = result.segments
    if seg is not None and len(seg["x0"]):
        from .tracer import B_TIR, E_ESCAPED
        flux = seg["flux_s"] + seg["flux_p"]
        rel = flux / max(float(flux.max()), 1e-300)
        alpha = np.clip(0.03 + 0.6 * np.sqrt(rel), 0.03, 0.7)
        kind = np.where(seg["born"] == B_TIR, "tir", np.where(seg["end"] == E_ESCAPED, "escaping", "ray"))
        for name in ("ray", "escaping", "tir"):
            sel = kind == name
            if not sel.any():
                continue
            lines = np.stack([np.column_stack([seg["x0"][sel], seg["y0"][sel]]),
                              np.column_stack([seg["x1"][sel], seg["y1"][sel]])], axis=1)
            rgba = np.zeros((int(sel.sum()), 4))
            rgba[:, :3] = _rgb(RAY_COLOURS[name])
            # thousands of overlapping legs would paint a solid block: thin them out by their count
            rgba[:, 3] = alpha[sel] * float(np.clip(3000.0 / sel.sum(), 0.1, 1.0))
            ax.add_collection(LineCollection(lines, colors=rgba, linewidths=0.5))
    for det in scene.detectors:
        ax.plot([det.start[0], det.end[0]], [det.start[1], det.end[1]], color=DETECTOR_COLOUR, lw=3,
                solid_capstyle="butt")
        ax.annotate(det.name, det.end, fontsize=7, color=DETECTOR_COLOUR, xytext=(3, 3), textcoords="offset points")
    for src in scene.sources:
        ax.plot(*src.position, marker="*", ms=10, color="#ffc400", mec="#785000")
        ax.annotate(src.name, src.position, fontsize=7, xytext=(4, -10), textcoords="offset points")
    ax.set_aspect("equal")
    # frame the scene itself: escaping rays run on to the edge of the frame
    (x0, y0, x1, y1), pad = _extent(scene), 0.12 * scene.size_hint()
    ax.set_xlim(x0 - pad, x1 + pad)
    ax.set_ylim(y0 - pad, y1 + pad)
    ax.set_xlabel("x (mm)")
    ax.set_ylabel("y (mm)")
    if seg is not None and len(seg["x0"]):
        from matplotlib.lines import Line2D
        ax.legend([Line2D([], [], color=RAY_COLOURS[k], lw=1.5) for k in ("ray", "tir", "escaping")],
                  ["rays", "after TIR", "escaping"], fontsize=7, loc="best")


def _extent(scene) -> tuple[float, float, float, float]:
    xs, ys = [], []
    for p in scene.parts:
        x0, y0, x1, y1 = p.outer.bounds()
        xs += [x0, x1]
        ys += [y0, y1]
    for pt in [s.position for s in scene.sources] + [q for d in scene.detectors for q in (d.start, d.end)]:
        xs.append(pt[0])
        ys.append(pt[1])
    return (min(xs), min(ys), max(xs), max(ys)) if xs else (-1.0, -1.0, 1.0, 1.0)


def _rgb(hex_colour: str) -> tuple[float, float, float]:
    h = hex_colour.lstrip("#")
    return tuple(int(h[i:i + 2], 16) / 255 for i in (0, 2, 4))  # type: ignore[return-value]


def record_for_plot(record: tuple[str, int]) -> tuple[str, int]:
    """The ray table a plot needs: the user's choice, or the first 300 source rays when none."""
    return record if record[0] != "none" else ("first", 300)

