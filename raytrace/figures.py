"""Figures a sweep can export as columns, beyond each detector's efficiency.

    --figure DETECTOR.FIELD     any detector figure: DETECTOR is the detector's name, FIELD one of
                                DETECTOR_FIGURES (e.g. "return.accepted", "viewer side.centroid_mm",
                                "viewer side.uniformity.min_over_mean")
    --route BUCKET=STEPS        the share of the source flux that ended in BUCKET (a detector's
                                name or a ledger bucket label such as "escaped via guide / input")
                                by the route whose steps read STEPS, exactly as `trace --routes`
                                lists them (e.g. "return=reflect off roof prism / hypotenuse")

A figure that does not exist at a point (no ray arrived, so no centroid) is written as an empty
cell.  Figures are computed where the point is traced, so they cross process lines as numbers.
"""
from __future__ import annotations

import re

from dataclasses import dataclass

from .errors import Problems, SceneError

DETECTOR_FIGURES = ("efficiency", "efficiency_error", "total_flux", "flux_s", "flux_p", "hits",
                    "centroid_mm", "mean_angle_deg", "accepted", "accepted_error",
                    "uniformity.min_over_mean", "uniformity.max_over_mean",
                    "arrival_ps.first", "arrival_ps.last", "arrival_ps.spread", "arrival_ps.mean",
                    "arrival_ps.rms")


@dataclass(frozen=True)
class Figure:
    column: str          # the CSV column name
    kind: str            # "detector" or "route"
    owner: str           # detector name, or bucket label for a route
    field: str           # detector figure, or the route's steps text


ACCEPTANCE_FIGURES = ("accepted", "accepted_error")


def no_acceptance_problem(where: str, text: str, detectors: list[tuple[str, bool]], available: list[str],
                          file: str = ""):
    """SceneError for DETECTOR.accepted on a detector without an acceptance cone, or None when
    `text` is not that.  `detectors`: (name, has an acceptance) in scene order."""
    owner = max((i for i, (d, _) in enumerate(detectors) if text.startswith(d + ".")),
                key=lambda i: len(detectors[i][0]), default=None)
    if owner is None or detectors[owner][1] or text[len(detectors[owner][0]) + 1:] not in ACCEPTANCE_FIGURES:
        return None
    name = detectors[owner][0]
    p = Problems()
    p.add(where, text, f"a figure this scene has: detector {name!r} has no acceptance cone set, so it "
          f"has no accepted share; set one in {file or 'the scene file'} at $.detectors[{owner}].acceptance, e.g. "
          '{"half_angle_deg": 1, "back_to_source": "SOURCE NAME"} or {"half_angle_deg": 5, '
          '"direction_deg": 90}; figures available: ' + ", ".join(repr(a) for a in available))
    return SceneError(p.items)


def parse_figure(text: str, detectors: list[str], where: str = "--figure",
                 acceptance: list[bool] | None = None, file: str = "") -> Figure:
    """DETECTOR.FIELD -> Figure; SceneError naming what was expected.  `acceptance`: whether
    each detector has an acceptance cone (DETECTOR.accepted needs one)."""
    text = text.strip()
    owner = max((d for d in detectors if text.startswith(d + ".")), key=len, default=None)
    if owner is None:
        _fail(where, text, "DETECTOR.FIELD with DETECTOR one of: " + ", ".join(repr(d) for d in detectors))
    fld = text[len(owner) + 1:]
    if fld not in DETECTOR_FIGURES:
        _fail(where, text, "a detector figure: " + ", ".join(DETECTOR_FIGURES))
    if acceptance is not None:
        available = [f"{d}.{f}" for d, has in zip(detectors, acceptance) for f in DETECTOR_FIGURES
                     if has or f not in ACCEPTANCE_FIGURES]
        refused = no_acceptance_problem(where, text, list(zip(detectors, acceptance)), available, file)
        if refused is not None:
            raise refused
    return Figure(text, "detector", owner, fld)


def parse_route(text: str, detectors: list[str], where: str = "--route",
                faces: dict[str, list[str]] | None = None) -> Figure:
    """BUCKET=STEPS -> Figure; a bare detector name stands for its bucket.  `faces`: the scene's
    part names, each with its face names (`scene_faces`), to refuse a bucket naming a part or
    face the scene does not have."""
    bucket, sep, steps = text.partition("=")
    bucket, steps = bucket.strip(), steps.strip()
    if not sep or not bucket or not steps:
        _fail(where, text, "BUCKET=STEPS, e.g. \"return=reflect off roof prism / hypotenuse\" "
                           "(the steps as `raytrace trace --routes` lists them)")
    label = f"detector {bucket}" if bucket in detectors else bucket
    if not _is_bucket_label(label, detectors):
        # A misspelt bucket would match no route and give a silent column of zeros.
        _fail(where, text, "BUCKET=STEPS with BUCKET a detector's name ("
              + ", ".join(repr(d) for d in detectors) + ") or a ledger bucket label as `raytrace "
              "trace` prints it: \"escaped via PART / FACE\", \"escaped without meeting anything\", "
              "\"absorbed at PART / FACE\", \"absorbed in bulk of PART\" or \"truncated: REASON\"")
    if faces is not None:
        _check_bucket_names(where, text, label, faces)
        _check_steps(where, text, steps, faces, detectors)
    return Figure(f"route: {bucket}: {steps}", "route", label, steps)


_VERBS = ("TIR at ", "reflect off ", "mirror at ", "enter through ", "leave through ", "cross ")


def _check_steps(where: str, text: str, steps: str, faces: dict[str, list[str]], detectors: list[str]) -> None:
    """Each step of STEPS as `trace --routes` prints it (routes._step), naming a face or detector
    of the scene: a misspelt step matches no route, a column of zeros again."""
    from .routes import OTHER_ROUTES
    names = list(faces) + [f for fs in faces.values() for f in fs] + list(detectors)
    if steps in (OTHER_ROUTES, "straight from the source") or any(", " in n for n in names):
        return              # (names with ", " in them cannot be told from the step separator)
    wheres = [f"{p} / {f}" for p, fs in faces.items() for f in fs]
    for step in steps.split(", "):
        step = re.sub(r"^\d+ x ", "", step)
        if step.startswith("pass detector "):
            if step[len("pass detector "):] not in detectors:
                _fail(where, text, f"in step {step!r} a detector of the scene: "
                      + ", ".join(repr(d) for d in detectors))
            continue
        verb = next((v for v in _VERBS if step.startswith(v)), None)
        if verb is None:
            _fail(where, text, f"steps as `raytrace trace --routes` prints them; step {step!r} is none of: "
                  + ", ".join(f"'{v}PART / FACE'" for v in _VERBS[:-1])
                  + ", 'cross PART / FACE into MEDIUM', 'pass detector NAME', 'N x STEP'")
        rest = step[len(verb):]
        if verb == "cross ":
            rest = rest.rsplit(" into ", 1)[0]
        part = max((p for p in faces if rest.startswith(p + " / ")), key=len, default=None)
        if rest in wheres or (part is not None and _GENERATED_FACE.match(rest[len(part) + 3:])):
            continue
        if part is None:
            _fail(where, text, f"in step {step!r} a part of the scene as PART / FACE, parts: "
                  + ", ".join(repr(p) for p in faces))
        _fail(where, text, f"in step {step!r} a face of part {part!r}: " + ", ".join(repr(f) for f in faces[part]))


def scene_faces(cs) -> dict[str, list[str]]:
    """Part name -> its face names, as ledger bucket labels name them, of a compiled scene."""
    out: dict[str, list[str]] = {name: [] for name in cs.part_names}
    for part, face in cs.face_labels:
        if part in out and face not in out[part]:
            out[part].append(face)
    return out


_GENERATED_FACE = re.compile(r"^(hole \d+ )?edge \d+$")   # an unnamed edge; a sweep may add some


def _check_bucket_names(where: str, text: str, label: str, faces: dict[str, list[str]]) -> None:
    """A bucket label's PART (and FACE) must be the scene's: a misspelt one would match no route
    and give a column of zeros."""
    from .ledger import TRUNCATION_REASONS
    if label.startswith("truncated: "):
        if label[len("truncated: "):] not in TRUNCATION_REASONS:
            _fail(where, text, "a truncation bucket: " + ", ".join(f'"truncated: {r}"' for r in TRUNCATION_REASONS))
        return
    if label.startswith("absorbed in bulk of "):
        part, face = label[len("absorbed in bulk of "):], None
    elif label.startswith(("escaped via ", "absorbed at ")):
        rest = label.split(" ", 2)[2]
        part = max((p for p in faces if rest.startswith(p + " / ")), key=len, default=None)
        if part is None:
            _fail(where, text, "a bucket naming a part of the scene as PART / FACE, parts: "
                  + ", ".join(repr(p) for p in faces))
        face = rest[len(part) + 3:]
    else:
        return
    if part not in faces:
        _fail(where, text, "a bucket naming a part of the scene: " + ", ".join(repr(p) for p in faces))
    if face is not None and face not in faces[part] and not _GENERATED_FACE.match(face):
        _fail(where, text, f"a face of part {part!r}: " + ", ".join(repr(f) for f in faces[part]))


def _is_bucket_label(label: str, detectors: list[str]) -> bool:
    """Whether LABEL has the form of a ledger bucket label (see ledger.Bucket.label)."""
    if label.startswith("detector "):
        return label[len("detector "):] in detectors
    if label == "escaped without meeting anything":
        return True
    return any(label.startswith(prefix) and len(label) > len(prefix)
               for prefix in ("escaped via ", "absorbed at ", "absorbed in bulk of ", "truncated: "))


def figure_values(result, figures: list[Figure]) -> dict[str, float | None]:
    """Each figure's value in a traced result (None where it does not exist)."""
    out: dict[str, float | None] = {}
    wanted = {f.owner for f in figures if f.kind == "detector"}
    if wanted:
        from .detectors import detector_report
        reports = {name: detector_report(result, name).to_dict() for name in wanted}
    groups = None
    for f in figures:
        if f.kind == "detector":
            value = reports[f.owner]
            for key in f.field.split("."):
                value = value.get(key) if isinstance(value, dict) else None
            out[f.column] = None if value is None else float(value)
        else:
            if groups is None:
                from .routes import route_groups
                groups = route_groups(result)
            out[f.column] = sum(g.share_of_source for g in groups if g.bucket == f.owner and g.text == f.field)
    return out


def _fail(where: str, found, expected: str):
    p = Problems()
    p.add(where, found, expected)
    raise SceneError(p.items)
