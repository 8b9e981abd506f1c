"""Command line: `raytrace check`, `raytrace trace`, and friends.

Exit codes (documented in the README):
    0  success
    1  the scene has problems (printed, one per line)
    2  bad command-line usage
    3  the trace stopped at a resource limit
    4  an output file could not be written
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from .errors import BudgetExceeded, RaytraceError, SceneError

EXIT_OK, EXIT_SCENE, EXIT_USAGE, EXIT_LIMIT, EXIT_OUTPUT = 0, 1, 2, 3, 4


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="raytrace", description="2D ray tracing of prisms, light guides and windows.")
    sub = p.add_subparsers(dest="command", required=True)

    c = sub.add_parser("check", help="validate scene files and list every problem")
    c.add_argument("scenes", nargs="+", metavar="SCENE")

    t = sub.add_parser("trace", help="trace a scene and print the energy ledger")
    t.add_argument("scene", metavar="SCENE")
    add_trace_options(t)
    t.add_argument("--json", metavar="FILE", help="write the summary (ledger, efficiencies, stats) as JSON")
    return p


def add_trace_options(t: argparse.ArgumentParser) -> None:
    t.add_argument("--rays", type=int, help="source rays (default: the scene's trace.rays)")
    t.add_argument("--mode", choices=("branching", "monte_carlo"), help="full branching tree or Monte Carlo")
    t.add_argument("--seed", type=int, help="random seed for Monte Carlo and random sampling")
    t.add_argument("--min-flux", type=float, dest="min_relative_flux",
                   help="end children below this fraction of their source ray's flux")
    t.add_argument("--max-depth", type=int, help="end rays after this many segments")
    t.add_argument("--max-segments", type=int, help="segment budget for the whole trace")
    t.add_argument("--sampling", choices=("even", "random"), help="override each source's sampling")
    t.add_argument("--quiet", action="store_true", help="print nothing but errors")


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
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
    except RaytraceError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_SCENE
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130


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
        print(f"{path}: ok ({len(scene.parts)} parts, {len(scene.sources)} sources, "
              f"{len(scene.detectors)} detectors)")
    return worst


def trace_kwargs(args) -> dict:
    return {k: getattr(args, k) for k in ("rays", "mode", "seed", "min_relative_flux", "max_depth",
                                         "max_segments", "sampling") if getattr(args, k, None) is not None}


def cmd_trace(args) -> int:
    from .api import trace
    from .report import summary_text
    from .scene_io import load_scene
    scene = load_scene(args.scene)
    result = trace(scene, **trace_kwargs(args))
    if not args.quiet:
        print(summary_text(result, title=scene.name or Path(args.scene).stem, story=scene.story))
    if args.json:
        if not write_output(args.json, json.dumps(result.to_summary_dict(), indent=2) + "\n"):
            return EXIT_OUTPUT
    return EXIT_OK


def write_output(path: str, text: str) -> bool:
    from .scene_io import atomic_write_text
    try:
        atomic_write_text(path, text)
        return True
    except OSError as exc:
        print(f"error: could not write {path}: {exc.strerror or exc}", file=sys.stderr)
        return False


COMMANDS = {"check": cmd_check, "trace": cmd_trace}

if __name__ == "__main__":
    sys.exit(main())
