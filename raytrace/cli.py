"""Command line: `raytrace check`, `raytrace trace`, `raytrace sweep`, `raytrace materials`
(and, from cli_design, `optimize`, `tolerance`, `import-dxf`, `export-dxf`).

Exit codes (documented in the README):
    0  success
    1  the scene has problems (printed, one per line)
    2  bad command-line usage (including a --vary name or range that cannot be used)
    3  the trace stopped at a resource limit
    4  an output file could not be written
    5  a sweep finished but some points could not be traced (their rows in the CSV say why)
  130  interrupted (Ctrl-C)

A progress line is shown on stderr for long runs, only when stderr is a terminal and
--quiet is not given.
"""
from __future__ import annotations

import argparse
from dataclasses import replace
import json
import math
import re
import sys
from pathlib import Path

from .errors import BudgetExceeded, RaytraceError, SceneError
from .figures import DETECTOR_FIGURES
from .scene import MAX_GENERATIONS

EXIT_OK, EXIT_SCENE, EXIT_USAGE, EXIT_LIMIT, EXIT_OUTPUT, EXIT_SWEEP_POINTS = 0, 1, 2, 3, 4, 5


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="raytrace", description="2D ray tracing of prisms, light guides and windows.")
    sub = p.add_subparsers(dest="command", required=True)

    c = sub.add_parser("check", help="validate scene files and list every problem")
    c.add_argument("scenes", nargs="+", metavar="SCENE", help="scene files (.json) to check")

    t = sub.add_parser("trace", help="trace a scene and print the energy ledger")
    t.add_argument("scene", metavar="SCENE", help="the scene file (.json)")
    add_trace_options(t)
    add_error_options(t)
    t.add_argument("--set", metavar="NAME=VALUE", action="append", default=[], dest="set",
                   help="change one number of the scene for this trace, named as for sweep --vary "
                        "(e.g. guide.width=3.5; repeatable); the file is not changed")
    t.add_argument("--workers", type=whole(1), dest="trace_workers", metavar="N",
                   help="processes to trace on (default and most: the CPUs this process may use); "
                        "the result does not depend on it")
    t.add_argument("--json", metavar="FILE", help="write the summary (ledger, efficiencies, stats) as JSON (- for standard output)")
    t.add_argument("--csv", metavar="FILE", help="write the ray table (one row per segment) as CSV (- for standard output)")
    t.add_argument("--record", metavar="spread:N|first:N|all|none", type=parse_record, default=None,
                   help="which source rays the ray table holds: N spread evenly over the source, the "
                        "first N, all or none (default with --csv: spread:1000)")
    t.add_argument("--detectors-csv", metavar="FILE", dest="detectors_csv",
                   help="write each detector's irradiance and angular profiles as CSV")
    t.add_argument("--routes", metavar="N", type=whole(0), nargs="?", const=10, default=None,
                   help="print the N routes (event sequences) carrying the most flux to each detector and to losses (default 10)")
    t.add_argument("--routes-min-flux", metavar="F", type=fraction, dest="route_flux_floor", default=None,
                   help="follow routes down to this share of a source ray's flux (default 1e-3; "
                        "lower it to see faint ghosts)")
    add_earlier_name(t, "--paths", "--routes", "routes", type=whole(0), nargs="?", const=10)
    add_earlier_name(t, "--paths-min-flux", "--routes-min-flux", "route_flux_floor", type=fraction)
    t.add_argument("--plot", metavar="FILE.png|svg", help="draw the scene with rays and the detector profiles")

    w = sub.add_parser("sweep", help="trace a scene over a range of one or two named numbers",
                       description="Trace SCENE at every point of a range and write one CSV row per point: "
                                   "efficiency per detector and the share of every ledger bucket, each with its standard "
                                   "error, the point's warnings, and any --figure or --route asked for.",
                       epilog="NAME forms: a named number of the scene file (bend_radius), "
                              "PART.PARAM (guide.segments[1].bend.radius), SOURCE.FIELD "
                              "(LED.direction_deg), DETECTOR.FIELD (return.start[0]), wavelength, "
                              "trace.FIELD, $.JSON.PATH; KIND:NAME (part:, source:, detector:) when "
                              "names clash.  Values: START:STOP:COUNT or v1,v2,...")
    w.add_argument("scene", metavar="SCENE", help="the scene file (.json)")
    w.add_argument("--vary", metavar="NAME=START:STOP:COUNT", action="append", required=True,
                   help="a number to vary (once or twice; two make a grid)")
    w.add_argument("--csv", metavar="OUT", required=True, help="the table to write")
    w.add_argument("--workers", type=int, metavar="N", help="local worker processes (default and most: the CPUs this process may use; "
                        "1 = in this process)")
    w.add_argument("--dask", metavar="ADDRESS",
                   help="run the points on the Dask scheduler at ADDRESS (needs the dask extra)")
    w.add_argument("--plot", metavar="FILE.png|svg", help="plot the efficiencies against the varied number")
    w.add_argument("--figure", metavar="DETECTOR.FIELD", action="append", default=[],
                   help="add a column with a detector figure, e.g. \"return.accepted\" or "
                        "\"viewer side.centroid_mm\" (repeatable); FIELD is one of "
                        + ", ".join(DETECTOR_FIGURES))
    w.add_argument("--route", metavar="BUCKET=STEPS", action="append", default=[],
                   help="add a column with the share of one route, e.g. "
                        "\"return=reflect off roof prism / hypotenuse\" (the steps as trace --routes lists them)")
    add_trace_options(w)
    add_error_options(w)

    sub.add_parser("materials", help="list the material catalog with its sources")

    from .bench import add_arguments as add_bench_arguments
    add_bench_arguments(sub.add_parser("bench", help="run fixed workloads and report speed and memory"))
    from .cli_design import add_commands as add_design_commands
    COMMANDS.update(add_design_commands(sub))     # optimize, tolerance, import-dxf, export-dxf
    return p


def parse_record(text: str) -> tuple[str, int]:
    """--record value: none, all, spread:N or first:N."""
    text = text.strip()
    if text in ("none", "all"):
        return text, 0
    kind, _, count = text.partition(":")
    if kind in ("spread", "first") and count.isdigit() and int(count) > 0:
        return kind, int(count)
    raise argparse.ArgumentTypeError(f"found {text!r}; expected none, all, spread:N or first:N with N a "
                                     "whole number > 0")


def whole(minimum: int, maximum: int | None = None):
    """argparse type: a whole number of at least `minimum` (the scene file's own rule)."""
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, found {text!r}") from None
        if value < minimum or (maximum is not None and value > maximum):
            most = f" and at most {maximum:,}" if maximum is not None else ""
            raise argparse.ArgumentTypeError(f"expected a whole number of at least {minimum}{most}, found {value}")
        return value
    return parse


def positive(text: str) -> float:
    """argparse type: a finite number above 0."""
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not 0.0 < value < float("inf"):     # also refuses nan
        raise argparse.ArgumentTypeError(f"expected a number above 0, found {text!r}")
    return value


def fraction(text: str) -> float:
    """argparse type: a number from 0 to 1."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number from 0 to 1, found {text!r}") from None
    if not 0.0 <= value <= 1.0:     # also refuses nan
        raise argparse.ArgumentTypeError(f"expected a number from 0 to 1, found {text}")
    return value


class _EarlierName(argparse.Action):
    """An option's earlier name: still accepted, with a note naming the new one."""

    def __init__(self, option_strings, dest, new_name="", **kw):
        self.new_name = new_name
        super().__init__(option_strings, dest, **kw)

    def __call__(self, parser, namespace, values, option_string=None):
        print(f"note: {option_string} is now called {self.new_name}; the earlier name still works",
              file=sys.stderr)
        setattr(namespace, self.dest, values)


def add_earlier_name(parser: argparse.ArgumentParser, old: str, new: str, dest: str, **kw) -> None:
    parser.add_argument(old, dest=dest, action=_EarlierName, new_name=new, help=argparse.SUPPRESS,
                        default=argparse.SUPPRESS, **kw)


def print_notes(scene) -> None:
    for note in scene.notes:
        print(f"note: {note}", file=sys.stderr)


def add_trace_options(t: argparse.ArgumentParser) -> None:
    t.add_argument("--rays", type=whole(1), metavar="N", help="source rays (default: the scene's trace.rays)")
    t.add_argument("--mode", choices=("branching", "monte_carlo"), help="full branching tree or Monte Carlo")
    t.add_argument("--seed", type=whole(0), metavar="N", help="random seed for Monte Carlo and random sampling")
    t.add_argument("--flux-floor", type=fraction, dest="flux_floor", metavar="F",
                   help="end children below this fraction of their source ray's flux")
    t.add_argument("--max-generations", type=whole(1, MAX_GENERATIONS), metavar="N",
                   help="follow each ray for at most this many generations (the source ray is generation 0, "
                        "each interaction's children one more)")
    t.add_argument("--segment-budget", type=whole(1), metavar="N", help="most ray segments the whole trace may hold")
    add_earlier_name(t, "--min-flux", "--flux-floor", "flux_floor", type=fraction)
    add_earlier_name(t, "--max-depth", "--max-generations", "max_generations", type=whole(1))
    add_earlier_name(t, "--max-segments", "--segment-budget", "segment_budget", type=whole(1))
    t.add_argument("--max-memory-mb", type=positive, dest="max_memory_mb", metavar="MB",
                   help="memory the trace may use (default: the scene's trace.max_memory_mb, 4096); "
                        "past it the trace stops with exit code 3")
    t.add_argument("--sampling", choices=("even", "random"), help="override each source's sampling")
    t.add_argument("--quiet", action="store_true", help="print nothing but errors")


def add_error_options(t: argparse.ArgumentParser) -> None:
    t.add_argument("--target-error", metavar="E", type=target_error, dest="target_error",
                   help="trace more rays until every figure's standard error (or --target-figure's) is at "
                        "most E: a share such as 0.001, or points of %% such as 0.1%%")
    t.add_argument("--target-figure", metavar="NAME", dest="target_figure",
                   help="with --target-error: the one figure to judge, a detector's name, DETECTOR.accepted "
                        "or a ledger bucket label such as \"escaped via guide / input\"")
    t.add_argument("--ray-cap", metavar="N", type=whole(1), dest="ray_cap",
                   help="with --target-error: trace at most N rays (default 2,000,000)")


def target_error(text: str) -> float:
    """argparse type: a share (0.001) or points of % (0.1%), more than 0 and less than 1/2."""
    points = text.strip().endswith("%")
    try:
        value = float(text.strip().rstrip("%")) / (100.0 if points else 1.0)
    except ValueError:
        value = float("nan")
    if not 0.0 < value < 0.5:
        raise argparse.ArgumentTypeError(f"found {text!r}; expected a positive standard error below 0.5, as a "
                                         "share (0.001) or in points of % (0.1%)")
    return value


def refuse_target_figure(scene, args) -> None:
    """A --target-figure DETECTOR.accepted on a detector without an acceptance cone, refused
    before any ray is traced (a usage error: SweepError)."""
    figure = getattr(args, "target_figure", None)
    if figure is None:
        return
    from .figures import no_acceptance_problem
    from .sweep import SweepError
    detectors = [(d.name, d.acceptance is not None) for d in scene.detectors]
    available = [name for name, _ in detectors] + [f"{name}.accepted" for name, has in detectors if has]
    refused = no_acceptance_problem("--target-figure", figure, detectors,
                                    available + ["a ledger bucket label such as 'escaped via PART / FACE'"],
                                    args.scene)
    if refused is not None:
        raise SweepError(refused.problems)


def error_kwargs(args) -> dict:
    """--target-error, --target-figure, --ray-cap as keywords (empty without --target-error);
    SweepError when the other two come without it (they would do nothing)."""
    if getattr(args, "target_error", None) is None:
        alone = [flag for flag, key in (("--target-figure", "target_figure"), ("--ray-cap", "ray_cap"))
                 if getattr(args, key, None) is not None]
        if alone:
            from .sweep import SweepError, _problem
            raise SweepError([_problem(alone[0], f"{alone[0]} without --target-error",
                                       "--target-error E as well (it sets the error to reach)")])
        return {}
    return {k: getattr(args, k) for k in ("target_error", "target_figure", "ray_cap")
            if getattr(args, k, None) is not None}


_NUMBER_LIKE = re.compile(r"^-(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?%?$")


def value_options(parser: argparse.ArgumentParser) -> set[str]:
    """Every option string, of the parser and its subcommands, that takes a value."""
    found: set[str] = set()
    for action in parser._actions:          # argparse keeps no public list of them
        if isinstance(action, argparse._SubParsersAction):
            for sub in action.choices.values():
                found |= value_options(sub)
        elif action.option_strings and action.nargs != 0:
            found.update(action.option_strings)
    return found


def attach_negative_values(argv: list[str], options: set[str]) -> list[str]:
    """`--opt -1%` -> `--opt=-1%`: argparse takes only plain negatives such as -1 or -0.5 as values,
    and reads -1% or -1e-3 as an unknown option ("expected one argument").  Joined, the value
    reaches the option's own check, whose message says what the option expects."""
    out: list[str] = []
    for i, token in enumerate(argv):
        if out and _NUMBER_LIKE.match(token) and argv[i - 1] in options:
            out[-1] = f"{out[-1]}={token}"
        else:
            out.append(token)
    return out


def main(argv: list[str] | None = None) -> int:
    for stream in (sys.stdout, sys.stderr):
        try:    # a file name with bytes that are not UTF-8 prints escaped, never crashes a message
            stream.reconfigure(errors="backslashreplace")
        except (AttributeError, ValueError):
            pass
    parser = build_parser()
    try:
        args = parser.parse_args(attach_negative_values(sys.argv[1:] if argv is None else list(argv),
                                                         value_options(parser)))
    except SystemExit as exc:
        return EXIT_USAGE if exc.code else EXIT_OK
    try:
        return COMMANDS[args.command](args)
    except SceneError as exc:
        for p in exc.problems:
            print(f"error: {p}", file=sys.stderr)
        return EXIT_SCENE
    except BudgetExceeded as exc:
        print(f"stopped: {exc}", file=sys.stderr)
        return EXIT_LIMIT
    except MemoryError:
        # the machine ran out before the limit did (other programs, or a limit above the RAM)
        from .errors import memory_limit_text
        limit = getattr(args, "max_memory_mb", None) or 4096.0
        print(f"stopped: the machine ran out of memory; lower the work (fewer rays, --record first:N) or "
              f"set {memory_limit_text(limit)} below the free memory so the trace stops before it runs out",
              file=sys.stderr)
        return EXIT_LIMIT
    except RaytraceError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_SCENE
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # output piped into a reader that stopped early (| head): not an error
        import os
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK


def cmd_check(args) -> int:
    from .scene_io import load_scene
    worst = EXIT_OK
    for path in args.scenes:
        try:
            scene = load_scene(path)
        except SceneError as exc:
            for p in exc.problems:
                print(f"error: {p}")
            worst = EXIT_SCENE
            continue
        for note in scene.notes:
            print(f"note: {note}")
        print(f"{path}: ok ({counted(len(scene.parts), 'part')}, {counted(len(scene.sources), 'source')}, "
              f"{counted(len(scene.detectors), 'detector')})")
    return worst


def route_faces(scene) -> dict[str, list[str]] | None:
    """The scene's parts and their faces, for checking --route buckets (None when the scene
    does not compile: its points then report why)."""
    from .compile import compile_scene
    from .errors import RaytraceError
    from .figures import scene_faces
    try:
        return scene_faces(compile_scene(scene))
    except RaytraceError:
        return None


def counted(n: int, thing: str) -> str:
    """'1 part', '2 parts'."""
    return f"{n:,} {thing}" + ("" if n == 1 else "s")


def trace_kwargs(args) -> dict:
    return {k: getattr(args, k) for k in ("rays", "mode", "seed", "flux_floor", "max_generations",
                                         "segment_budget", "sampling", "max_memory_mb")
            if getattr(args, k, None) is not None}


def cmd_trace(args) -> int:
    from .api import trace
    from .parallel import capped_workers
    from .report import Progress, detectors_text, summary_text
    from .scene_io import load_scene
    from .sweep import SweepError
    outputs = {"--json": args.json, "--csv": args.csv, "--detectors-csv": args.detectors_csv}
    if refuse_clashing_outputs({"scene": args.scene}, dict(outputs, **{"--plot": args.plot})) \
            or refuse_two_on_stdout(outputs):
        return EXIT_USAGE
    # With an output on standard output the printed report goes to stderr, so that what is
    # piped on stays valid JSON or CSV.
    report = sys.stderr if "-" in outputs.values() else sys.stdout
    scene = load_scene(args.scene)
    print_notes(scene)
    overridden: list = []
    if args.set:
        scene = scene_with_settings(scene, args, overridden)
        if scene is None:
            return EXIT_USAGE
    record = args.record or (("spread", 1000) if args.csv else ("none", 0))
    if args.plot:
        if not plot_path_ok(args.plot):
            return EXIT_USAGE
        from .plots import record_for_plot
        record = record_for_plot(record)
    progress = Progress(enabled=not args.quiet)
    try:
        errors = error_kwargs(args)
        refuse_target_figure(scene, args)
        options = dict(record=record[0], record_count=record[1], progress=progress.trace,
                       track_paths=args.routes is not None, workers=capped_workers(args.trace_workers),
                       route_flux_floor=args.route_flux_floor, **trace_kwargs(args))
        if errors:
            from .converge import DEFAULT_RAY_CAP, trace_to_error
            result = trace_to_error(scene, errors["target_error"], errors.get("target_figure"),
                                    errors.get("ray_cap") or DEFAULT_RAY_CAP, **options)
            if not args.quiet:
                print(f"note: {target_note(result.settings['target_error'])}", file=sys.stderr)
        else:
            result = trace(scene, **options)
    except SweepError as exc:      # a --target-figure that names nothing, or one without --target-error
        for p in exc.problems:
            print(f"error: {p}", file=sys.stderr)
        return EXIT_USAGE
    except SceneError as exc:      # found while tracing (a wavelength no material can take)
        raise SceneError([replace(p, file=p.file or args.scene) for p in exc.problems]) from None
    finally:
        progress.close()
    for w in result.warnings:
        print(f"warning: {w}", file=sys.stderr)
    if not args.quiet:
        print(summary_text(result, title=scene.name or Path(args.scene).stem, story=scene.story), file=report)
        if scene.detectors:
            print(detectors_text(result), file=report)
        if args.routes is not None:
            from .routes import routes_text
            print(routes_text(result, args.routes), file=report)
    if args.json:
        from .detectors import detector_reports
        summary = result.to_summary_dict()
        if overridden:      # what --set changed, so the result can be traced again from the file
            summary["settings"]["set"] = overridden
        summary["detectors"] = [r.to_dict() for r in detector_reports(result)]
        if args.routes is not None:
            from .routes import route_groups
            kept: dict[str, int] = {}
            summary["routes"] = []    # the top N paths of every ledger bucket
            for g in route_groups(result):
                kept[g.bucket] = kept.get(g.bucket, 0) + 1
                if kept[g.bucket] <= args.routes:
                    summary["routes"].append(g.to_dict())
        if not write_output(args.json, standard_json(summary)):
            return EXIT_OUTPUT
    if args.csv:
        from .raytable import write_rows
        rows: list[int] = []
        if result.segments is None or not write_stream(args.csv, lambda fh: rows.append(write_rows(result, fh))):
            return EXIT_OUTPUT
        if not args.quiet:
            note = record_note(record, result.stats["source_rays"], rows[0])
            if note:
                print(f"note: {note}", file=sys.stderr)
    if args.detectors_csv:
        from .detectors import detector_reports, write_profiles
        reports = detector_reports(result)
        if not write_stream(args.detectors_csv, lambda fh: write_profiles(reports, fh)):
            return EXIT_OUTPUT
    if args.plot:
        from .plots import trace_plot
        if not write_plot(args.plot, lambda: trace_plot(scene, result, args.plot,
                                                         title=scene.name or Path(args.scene).stem)):
            return EXIT_OUTPUT
    return EXIT_OK


def option_flags() -> dict[str, str]:
    """The command-line flag of each trace option, by its keyword (rays -> --rays)."""
    p = argparse.ArgumentParser(add_help=False)
    add_trace_options(p)
    flags: dict[str, str] = {}
    for a in p._actions:          # the first flag of a keyword is its current name
        if a.option_strings:
            flags.setdefault(a.dest, a.option_strings[0])
    return flags


def scene_with_settings(scene, args, record: list | None = None):
    """The scene with each --set NAME=VALUE applied, or None after printing why not.  `record`
    gets what was set, one {"name", "given", "value", "fields"} per --set (the JSON's settings)."""
    from .errors import Problems
    from .scene_io import scene_from_dict, scene_to_dict
    from .sweep import SweepError, apply_settings, parse_set
    try:
        pairs = [parse_set(text) for text in args.set]
        applied: list = []
        data = apply_settings(scene_to_dict(scene), pairs, args.scene, trace_kwargs(args), option_flags(),
                              record=applied)
        if record is not None:
            record.extend({"name": a["name"], "given": text.rpartition("=")[2].strip(), "value": a["value"],
                           "fields": a["fields"]} for text, a in zip(args.set, applied))
    except SweepError as exc:
        for p in exc.problems:
            print(f"error: {p}", file=sys.stderr)
        return None
    try:
        return scene_from_dict(data, Problems(file=args.scene))
    except SceneError as exc:     # the value makes the scene invalid (a part pushed into another)
        changed = ", ".join(args.set)
        raise SceneError([replace(p, expected=f"{p.expected} (after --set {changed})") for p in exc.problems]) from None


def target_note(t: dict) -> str:
    """How many rays a --target-error trace took, round by round."""
    rounds = " -> ".join(f"{r['rays']:,}" for r in t["rounds"])
    last = t["rounds"][-1]
    err = "unknown" if last["largest_error"] is None else f"{100 * last['largest_error']:.3g}"
    verdict = "reached" if t["reached"] else "NOT reached"
    moved = "" if last.get("largest_change") is None else \
        f", largest change from the round before {100 * last['largest_change']:.3g} points"
    return (f"target error {100 * t['target']:.3g} points of % {verdict}: traced {rounds} rays; "
            f"largest error {err} points ({last['figure']}){moved}")


def record_note(record: tuple[str, int], total: int, segments: int) -> str:
    """Which source rays a partial ray table holds ("" when it holds them all)."""
    kind, count = record
    if kind not in ("first", "spread") or count >= total:
        return ""
    if kind == "first":
        return (f"the ray table holds the first {count:,} of {total:,} source rays ({segments:,} segments); "
                "with even sampling that is one end of each source; --record spread:N spreads them")
    from .tracer import spread_rays
    ids = spread_rays(count, total)
    shown = ", ".join(f"{i:,}" for i in ids[:3].tolist()) + (f", ..., {int(ids[-1]):,}" if count > 3 else "")
    return (f"the ray table holds {count:,} of {total:,} source rays, spread evenly (one in every "
            f"{total / count:.4g}: source rays {shown}; {segments:,} segments); use --record all for every ray")


def cmd_sweep(args) -> int:
    from .figures import parse_figure, parse_route
    from .report import Progress
    from .scene_io import load_scene, scene_to_dict
    from .sweep import SweepError, parse_vary, sweep
    if refuse_clashing_outputs({"scene": args.scene}, {"--csv": args.csv, "--plot": args.plot}):
        return EXIT_USAGE
    scene = load_scene(args.scene)
    print_notes(scene)
    if args.plot and not plot_path_ok(args.plot):
        return EXIT_USAGE
    try:
        detectors = [d.name for d in scene.detectors]
        accepting = [d.acceptance is not None for d in scene.detectors]
        figures = ([parse_figure(f, detectors, acceptance=accepting, file=args.scene) for f in args.figure]
                   + [parse_route(r, detectors, faces=route_faces(scene)) for r in args.route])
        refuse_target_figure(scene, args)
        variables = [parse_vary(v) for v in args.vary]
        if len(variables) > 2:
            print("error: --vary: found more than two names; expected one or two", file=sys.stderr)
            return EXIT_USAGE
        if args.workers is not None and args.workers < 1:
            print(f"error: --workers: found {args.workers}; expected a whole number >= 1", file=sys.stderr)
            return EXIT_USAGE
        executor, client = None, None
        if args.dask:
            from .cli_design import open_dask
            opened = open_dask(args.dask)
            if opened is None:
                return EXIT_USAGE
            executor, client = opened
        progress = Progress(enabled=not args.quiet)
        try:
            result = sweep(scene_to_dict(scene), variables, {**trace_kwargs(args), **error_kwargs(args)},
                           executor=executor,
                           workers=args.workers, progress=progress.points, file=args.scene,
                           figures=figures, option_names=option_flags())
        finally:
            progress.close()
            if client is not None:
                client.close()
    except SceneError as exc:       # a --vary, --figure or --route that cannot be used
        for p in exc.problems:
            print(f"error: {p}", file=sys.stderr)
        return EXIT_USAGE
    if not write_output(args.csv, result.to_csv()):
        return EXIT_OUTPUT
    if args.plot:
        from .plots import sweep_plot
        if not write_plot(args.plot, lambda: sweep_plot(result, args.plot, title=scene.name)):
            return EXIT_OUTPUT
    if not args.quiet:
        from .report import sweep_text
        print(sweep_text(result))
    from .report import sweep_warnings
    for line in sweep_warnings(result):
        print(f"warning: {line}", file=sys.stderr)
    for row in result.failed:
        print(f"point {row['point']} ({', '.join(f'{n} = {row[n]:g}' for n in result.names)}): {row['status']}",
              file=sys.stderr)
    return EXIT_SWEEP_POINTS if result.failed else EXIT_OK


def cmd_materials(args) -> int:
    from .catalog import catalog_table
    from .report import materials_text
    print(materials_text(catalog_table()))
    return EXIT_OK


def standard_json(data) -> str:
    """JSON text without the non-standard NaN/Infinity tokens other readers refuse: a value
    that is not finite is written as null, with a warning naming where."""
    bad: list[str] = []

    def clean(v, where):
        if isinstance(v, float) and not math.isfinite(v):
            bad.append(where)
            return None
        if isinstance(v, dict):
            return {k: clean(x, f"{where}.{k}") for k, x in v.items()}
        if isinstance(v, (list, tuple)):
            return [clean(x, f"{where}[{i}]") for i, x in enumerate(v)]
        return v
    data = clean(data, "$")
    if bad:
        print(f"warning: {len(bad)} value(s) in the JSON summary are not finite and are written as null "
              f"(first: {bad[0]})", file=sys.stderr)
    return json.dumps(data, indent=2, allow_nan=False) + "\n"


def refuse_clashing_outputs(inputs: dict, outputs: dict) -> bool:
    """Print an error for each output that would overwrite an input or another output
    (also through symlinks and hard links); True when any does."""
    from .atomic import clashing_outputs
    clashes = clashing_outputs(inputs, {k: v for k, v in outputs.items() if v})
    for text in clashes:
        print(f"error: {text}", file=sys.stderr)
    return bool(clashes)


def refuse_two_on_stdout(outputs: dict) -> bool:
    """Print an error when more than one output is "-" (they would be mixed); True when so."""
    flags = [flag for flag, path in outputs.items() if path == "-"]
    if len(flags) > 1:
        print(f"error: {' and '.join(flags)}: found '-' (standard output) for {len(flags)} outputs; "
              "expected at most one of them on standard output (give the others file names)", file=sys.stderr)
    return len(flags) > 1


def write_output(path: str, text: str) -> bool:
    """Write an output file atomically; "-" writes to standard output."""
    return write_stream(path, lambda fh: fh.write(text))


def write_stream(path: str, fill) -> bool:
    """fill(text file) writes an output: into standard output for "-", else into a temporary
    file put in place atomically (see atomic.py for devices, symlinks and hard links).  Prints
    the error and returns False when the file cannot be written."""
    from .atomic import atomic_write
    if path == "-":
        fill(sys.stdout)
        sys.stdout.flush()
        return True

    def write(target: str) -> None:
        with open(target, "w", encoding="utf-8", errors="backslashreplace", newline="") as fh:
            fill(fh)
    try:
        atomic_write(path, write)
        return True
    except OSError as exc:
        print(f"error: could not write {path}: {exc.strerror or exc}", file=sys.stderr)
        return False


def plot_path_ok(path: str) -> bool:
    from .plots import check_plot_path
    problem = check_plot_path(path)
    if problem:
        print(f"error: {problem}", file=sys.stderr)
    return problem is None


def write_plot(path: str, draw) -> bool:
    try:
        draw()
        return True
    except OSError as exc:
        print(f"error: could not write {path}: {exc.strerror or exc}", file=sys.stderr)
        return False


COMMANDS = {"check": cmd_check, "trace": cmd_trace, "sweep": cmd_sweep, "materials": cmd_materials,
            "bench": lambda args: __import__("raytrace.bench", fromlist=["main"]).main(args)}

if __name__ == "__main__":
    sys.exit(main())
