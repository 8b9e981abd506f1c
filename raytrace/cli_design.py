"""The design-loop commands of `raytrace`: optimize, tolerance, import-dxf and export-dxf.

Registered by `add_commands` from cli.build_parser, so these commands live apart from the core
ones.  Exit codes are cli's: 0 ok, 1 scene problems, 2 usage (a name, bound or tolerance that
cannot be used), 4 an output file not written, 5 a run finished with samples or points that
could not be traced.
"""
from __future__ import annotations

import argparse
import json
import sys

NAME_HELP = ("NAME forms as in `raytrace sweep`: a named number of the scene file (bend_radius), "
             "PART.PARAM (guide.segments[1].bend.radius), "
             "SOURCE.FIELD (LED.direction_deg), DETECTOR.FIELD, trace.FIELD, $.JSON.PATH.  "
             "FIGURE: a detector's name (its efficiency), or efficiency: DET, centroid_mm: DET, "
             "mean_angle_deg: DET.")


def add_commands(sub) -> dict:
    """Add the subcommands to `sub` (argparse subparsers); returns {name: function}."""
    from .cli import add_trace_options, whole

    o = sub.add_parser("optimize", help="find the values of named numbers, within bounds, that maximize a "
                                        "detector figure", epilog=NAME_HELP,
                       description="Scan the bounds in parallel, then refine the best point with "
                                   "scipy.optimize (bounded Brent for one number, Powell for several).")
    o.add_argument("scene", metavar="SCENE", help="the scene file (.json)")
    o.add_argument("--vary", metavar="NAME=LOW:HIGH", action="append", required=True,
                   help="a number to tune and its bounds (repeat for several); the scene's value is the start")
    o.add_argument("--figure", metavar="FIGURE", required=True, help="the detector figure to maximize")
    o.add_argument("--minimize", action="store_true", help="minimize the figure instead")
    o.add_argument("--scan", type=whole(2), metavar="N", help="scan points per number (default 9 for one, 5 for two, 3 for more)")
    o.add_argument("--xtol", type=float, default=1e-3, metavar="F",
                   help="stop refining when the numbers are known to this fraction of their bounds (default 1e-3)")
    o.add_argument("--max-evaluations", type=whole(2), default=80, metavar="N",
                   help="traces in all, scan included (default 80)")
    o.add_argument("--csv", metavar="FILE", help="write every evaluation (the convergence history)")
    o.add_argument("--json", metavar="FILE", help="write the result as JSON")
    _add_parallel_options(o)
    add_trace_options(o)

    t = sub.add_parser("tolerance", help="Monte Carlo over +- tolerances of named numbers: spread and worst "
                                         "case of detector figures", epilog=NAME_HELP)
    t.add_argument("scene", metavar="SCENE", help="the scene file (.json)")
    t.add_argument("--tol", metavar="NAME=T", action="append", required=True,
                   help="a number and its tolerance: NAME=T for +-T, or NAME=-A,+B (repeat for several)")
    t.add_argument("--figure", metavar="FIGURE", action="append", required=True,
                   help="a detector figure to report (repeat for several)")
    t.add_argument("--samples", type=whole(2), default=200, metavar="N", help="random samples (default 200)")
    t.add_argument("--distribution", choices=("uniform", "normal"), default="uniform",
                   help="uniform over the band, or normal with the band as +-3 sigma (default uniform)")
    t.add_argument("--sample-seed", type=whole(0), default=1, metavar="S",
                   help="seed of the random deviations (default 1); --seed is the trace's")
    t.add_argument("--csv", metavar="FILE", help="write every sample: its deviations and figures")
    t.add_argument("--json", metavar="FILE", help="write the summary as JSON")
    _add_parallel_options(t)
    add_trace_options(t)

    i = sub.add_parser("import-dxf", help="turn the closed contours of a DXF drawing into the parts of a scene")
    i.add_argument("dxf", metavar="DRAWING.dxf")
    i.add_argument("-o", "--output", metavar="SCENE.json", required=True, help="the scene file to write")
    i.add_argument("--units", choices=("mm", "cm", "m", "in", "um"),
                   help="drawing units, when the file does not state them ($INSUNITS)")
    i.add_argument("--layer-material", metavar="LAYER=MATERIAL", action="append", default=[],
                   help="the material of a layer's parts (repeat); layers not named keep their own name")
    i.add_argument("--materials-file", metavar="FILE",
                   help='a JSON object {"LAYER": "MATERIAL", ...}; --layer-material entries win')
    i.add_argument("--tolerance", type=float, default=1e-6, metavar="MM",
                   help="endpoints closer than this join into one contour (default 1e-6 mm)")
    i.add_argument("--setup-from", metavar="SCENE.json", dest="setup_from",
                   help="take sources, detectors, materials and trace settings from this scene (not its parts)")

    e = sub.add_parser("export-dxf", help="write a scene's parts as a DXF drawing (one layer per material)")
    e.add_argument("scene", metavar="SCENE", help="the scene file (.json)")
    e.add_argument("-o", "--output", metavar="DRAWING.dxf", required=True)
    return {"optimize": cmd_optimize, "tolerance": cmd_tolerance, "import-dxf": cmd_import_dxf,
            "export-dxf": cmd_export_dxf}


def _add_parallel_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--workers", type=int, metavar="N",
                   help="local worker processes (default and most: the CPUs this process may use; 1 = in this process)")
    p.add_argument("--dask", metavar="ADDRESS", help="run the traces on the Dask scheduler at ADDRESS (dask extra)")


def open_dask(address: str):
    """(executor, client) for a Dask scheduler, or None after printing why not."""
    try:
        from distributed import Client
    except ImportError:
        print("error: --dask needs the optional dask extra (pip install 'raytrace2d[dask]')", file=sys.stderr)
        return None
    try:
        client = Client(address, timeout=30)
    except (OSError, TimeoutError) as exc:
        print(f"error: --dask: could not reach the scheduler at {address}: {exc}", file=sys.stderr)
        return None
    return client.get_executor(), client


def _run_parallel(args, run):
    """Call run(executor, workers, progress) with the executor the options ask for; exit code on
    a usage problem, else (EXIT_OK, result)."""
    from .cli import EXIT_USAGE
    from .report import Progress
    if args.workers is not None and args.workers < 1:
        print(f"error: --workers: found {args.workers}; expected a whole number >= 1", file=sys.stderr)
        return EXIT_USAGE, None
    executor = client = None
    if args.dask:
        opened = open_dask(args.dask)
        if opened is None:
            return EXIT_USAGE, None
        executor, client = opened
    progress = Progress(enabled=not args.quiet)
    try:
        return 0, run(executor, args.workers, progress.points)
    finally:
        progress.close()
        if client is not None:
            client.close()


def _usage_errors(exc) -> int:
    from .cli import EXIT_USAGE
    for p in exc.problems:
        print(f"error: {p}", file=sys.stderr)
    return EXIT_USAGE


def _design_command(args, run, history_csv, failed=lambda result: False) -> int:
    """Load the scene, run(scene, executor, workers, progress), print the report and write the
    --csv and --json files: what optimize and tolerance share."""
    from .cli import (EXIT_OK, EXIT_OUTPUT, EXIT_SWEEP_POINTS, EXIT_USAGE, print_notes, refuse_clashing_outputs,
                      refuse_two_on_stdout, write_output)
    from .scene_io import load_scene
    from .sweep import SweepError
    outputs = {"--csv": args.csv, "--json": args.json}
    if refuse_clashing_outputs({"scene": args.scene}, outputs) or refuse_two_on_stdout(outputs):
        return EXIT_USAGE          # before any trace: an output over the scene would destroy it
    scene = load_scene(args.scene)
    print_notes(scene)
    try:
        code, result = _run_parallel(args, lambda ex, workers, progress: run(scene, ex, workers, progress))
    except SweepError as exc:
        return _usage_errors(exc)
    if result is None:
        return code
    if not args.quiet:
        print(result.text())
    if args.csv and not write_output(args.csv, history_csv(result)):
        return EXIT_OUTPUT
    if args.json and not write_output(args.json, json.dumps(result.to_dict(), indent=2) + "\n"):
        return EXIT_OUTPUT
    return EXIT_SWEEP_POINTS if failed(result) else EXIT_OK


def cmd_optimize(args) -> int:
    from .cli import trace_kwargs
    from .optimize import optimize, parse_bound
    from .sweep import SweepError
    try:
        bounds = [parse_bound(v) for v in args.vary]
    except SweepError as exc:
        return _usage_errors(exc)
    return _design_command(args, lambda scene, ex, workers, progress: optimize(
        scene, bounds, args.figure, maximize=not args.minimize, options=trace_kwargs(args), executor=ex,
        workers=workers, scan=args.scan, xtol=args.xtol, max_evaluations=args.max_evaluations,
        progress=progress, file=args.scene), lambda result: result.history_csv())


def cmd_tolerance(args) -> int:
    from .cli import trace_kwargs
    from .sweep import SweepError
    from .tolerance import parse_tolerance, tolerance
    try:
        tols = [parse_tolerance(v) for v in args.tol]
    except SweepError as exc:
        return _usage_errors(exc)
    return _design_command(args, lambda scene, ex, workers, progress: tolerance(
        scene, tols, args.figure, samples=args.samples, distribution=args.distribution,
        sample_seed=args.sample_seed, options=trace_kwargs(args), executor=ex, workers=workers,
        progress=progress, file=args.scene), lambda result: result.samples_csv(), lambda result: bool(result.failed))


def cmd_import_dxf(args) -> int:
    from .cli import EXIT_OK, EXIT_OUTPUT, EXIT_SCENE, EXIT_USAGE, refuse_clashing_outputs
    from .dxf_io import import_dxf, layer_materials
    from .scene_io import load_scene, save_scene
    inputs = {"drawing": args.dxf, "--setup-from scene": args.setup_from, "--materials-file": args.materials_file}
    if refuse_clashing_outputs({k: v for k, v in inputs.items() if v}, {"-o": args.output}):
        return EXIT_USAGE
    try:
        mapping = layer_materials(args.layer_material, args.materials_file)
    except ValueError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    setup = load_scene(args.setup_from) if args.setup_from else None
    scene = import_dxf(args.dxf, units=args.units, layer_materials=mapping, tolerance=args.tolerance, setup=setup)
    try:
        save_scene(scene, args.output)
    except OSError as exc:
        print(f"error: could not write {args.output}: {exc.strerror or exc}", file=sys.stderr)
        return EXIT_OUTPUT
    from .cli import counted
    print(f"{args.output}: {counted(len(scene.parts), 'part')} from {args.dxf} "
          f"({', '.join(sorted({p.material for p in scene.parts}))})")
    from .compile import compile_scene
    from .errors import SceneError
    try:
        compile_scene(scene)          # overlapping parts and the like: say so now, not at the first trace
    except SceneError as exc:
        for p in exc.problems:
            print(f"error: {args.output}: {p}", file=sys.stderr)
        print(f"note: {args.output} was written; fix the drawing, or the parts in the scene file", file=sys.stderr)
        return EXIT_SCENE
    return EXIT_OK


def cmd_export_dxf(args) -> int:
    from .cli import EXIT_OK, EXIT_OUTPUT
    from .dxf_io import export_dxf
    from .cli import EXIT_USAGE, refuse_clashing_outputs
    from .scene_io import load_scene
    if refuse_clashing_outputs({"scene": args.scene}, {"-o": args.output}):
        return EXIT_USAGE
    scene = load_scene(args.scene)
    try:
        layers = export_dxf(scene, args.output)
    except OSError as exc:
        print(f"error: could not write {args.output}: {exc.strerror or exc}", file=sys.stderr)
        return EXIT_OUTPUT
    from .cli import counted
    print(f"{args.output}: {counted(len(scene.parts), 'part')} on {'layer' if len(layers) == 1 else 'layers'} "
          f"{', '.join(layers)}")
    return EXIT_OK
