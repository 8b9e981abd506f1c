"""The ray table: one row per recorded ray segment, with readable columns, and its CSV form.

Recording is chosen when tracing (`raytrace.trace(..., record="spread", record_count=N)`, N
source rays spread evenly over the sources, `record="first"` or `record="all"`); the ledger and
detectors always see every ray, the table only the recorded source rays and all their
descendants, with their real flux (a partial table is not rescaled to the source).  Only the
flux of rows that end the tree (escaped, absorbed, detected, truncated) adds up, over all rays,
to the ledger; docs/python-api.md, "The ray table", says how.

Columns (units in the names; "-" where a column does not apply, so that pandas and the csv
module read every text column back as text):
    ray_id, parent_id (-1 for a source ray), generation (0 for a source ray), source_ray (the
    index of the source ray the segment descends from), source (source name),
    x0_mm, y0_mm, x1_mm, y1_mm (start and end; an escaping segment is drawn a few scene sizes
    long), dx, dy (unit direction), direction_deg, length_mm, wavelength_nm,
    flux_s, flux_p (flux at the start of the segment, before bulk absorption along it),
    optical_path_mm (sum of n * L before the segment starts), medium,
    began (source, refracted, reflected, total internal reflection, mirror, passed detector),
    began_part, began_face, began_detector (where it began: the parent's end),
    ended (refracted, reflected, total internal reflection, absorbed, escaped, detected,
    truncated, passed detector), ended_part, ended_face, ended_detector.
"""
from __future__ import annotations

import csv
import io
import os

import numpy as np

from .results import TraceResult
from .tracer import BORN, END

NONE = "-"     # written where a column does not apply

COLUMNS = ("ray_id", "parent_id", "generation", "source_ray", "source",
           "x0_mm", "y0_mm", "x1_mm", "y1_mm", "dx", "dy", "direction_deg", "length_mm",
           "wavelength_nm", "flux_s", "flux_p", "optical_path_mm", "medium",
           "began", "began_part", "began_face", "began_detector",
           "ended", "ended_part", "ended_face", "ended_detector")
INT_COLUMNS = ("ray_id", "parent_id", "generation", "source_ray")
TEXT_COLUMNS = ("source", "medium", "began", "began_part", "began_face", "began_detector",
                "ended", "ended_part", "ended_face", "ended_detector")
FLOAT_COLUMNS = tuple(c for c in COLUMNS if c not in INT_COLUMNS and c not in TEXT_COLUMNS)


class RayTable:
    """Columns of equal length, in COLUMNS order: numpy arrays (text columns as str arrays)."""

    def __init__(self, columns: dict[str, np.ndarray]):
        self.columns = {k: columns[k] for k in COLUMNS}

    def __len__(self) -> int:
        return len(self.columns["ray_id"])

    def __getitem__(self, name: str) -> np.ndarray:
        return self.columns[name]

    def rows(self):
        """Rows as lists of Python values (ints, floats, strs)."""
        cols = [self.columns[k].tolist() for k in COLUMNS]
        return zip(*cols)

    def to_csv(self, path: str | os.PathLike | None = None) -> str | None:
        """Write the table as CSV (header = COLUMNS).  Floats are written with repr, which reads
        back to the identical double.  Returns the text when no path is given."""
        if path is None:
            buf = io.StringIO()
            self._write(buf)
            return buf.getvalue()
        from .scene_io import atomic_write_text
        buf = io.StringIO()
        self._write(buf)
        atomic_write_text(path, buf.getvalue())
        return None

    def _write(self, fh) -> None:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(COLUMNS)
        w.writerows(self.rows())

    def to_pandas(self):
        """A pandas DataFrame (pandas is optional; imported only here)."""
        import pandas as pd
        return pd.DataFrame({k: self.columns[k] for k in COLUMNS})


def ray_table(result: TraceResult) -> RayTable | None:
    """The table of recorded segments, or None when the trace was run without recording."""
    seg = result.segments
    if seg is None:
        return None
    cs = result.compiled
    n = len(seg["ray_id"])
    edge_part, edge_face, edge_det = _edge_labels(cs)

    end_edge = seg["end_edge"].astype(np.int64)
    # where a segment began is where its parent ended; parents are always recorded with it
    order = np.argsort(seg["ray_id"], kind="stable")
    sorted_ids = seg["ray_id"][order]
    parent = seg["parent_id"].astype(np.int64)
    pos = np.searchsorted(sorted_ids, parent)
    pos = np.clip(pos, 0, max(n - 1, 0))
    found = (parent >= 0) & (n > 0) & (sorted_ids[pos] == parent if n else False)
    start_edge = np.full(n, -1, dtype=np.int64)
    if n:
        start_edge[found] = end_edge[order[pos[found]]]

    born = seg["born"].astype(np.int64)
    names = result.settings.get("source_names", [])
    src_names = np.array(list(names) + [NONE], dtype=str)
    src_index = _source_index_of_roots(result, seg["source_ray"].astype(np.int64))
    source = src_names[np.where(src_index >= 0, src_index, len(names))]

    def where(edges: np.ndarray):
        idx = np.where(edges >= 0, edges, len(edge_part) - 1)
        return edge_part[idx], edge_face[idx], edge_det[idx]

    bp, bf, bd = where(start_edge)   # a source ray began at its source: "-" here
    ep, ef, ed = where(end_edge)
    x0, y0, x1, y1 = (seg[k].astype(float) for k in ("x0", "y0", "x1", "y1"))
    dx, dy = seg["dx"].astype(float), seg["dy"].astype(float)
    cols = {
        "ray_id": seg["ray_id"].astype(np.int64), "parent_id": parent,
        "generation": seg["generation"].astype(np.int64), "source_ray": seg["source_ray"].astype(np.int64),
        "source": source, "x0_mm": x0, "y0_mm": y0, "x1_mm": x1, "y1_mm": y1, "dx": dx, "dy": dy,
        "direction_deg": np.degrees(np.arctan2(dy, dx)), "length_mm": np.hypot(x1 - x0, y1 - y0),
        "wavelength_nm": seg["wavelength_nm"].astype(float), "flux_s": seg["flux_s"].astype(float),
        "flux_p": seg["flux_p"].astype(float), "optical_path_mm": seg["optical_path"].astype(float),
        "medium": np.array(cs.medium_names, dtype=str)[seg["medium"].astype(np.int64)],
        "began": np.array(BORN, dtype=str)[born], "began_part": bp, "began_face": bf,
        "began_detector": bd,
        "ended": np.array(END, dtype=str)[seg["end"].astype(np.int64)], "ended_part": ep,
        "ended_face": ef, "ended_detector": ed,
    }
    # rows in ray id order: a parent always comes before its children
    rt = RayTable({k: v[order] for k, v in cols.items()})
    return rt


def _edge_labels(cs):
    """Part, face and detector name per edge, plus a last entry of NONE for 'no edge'."""
    part, face, det = [], [], []
    for e in range(cs.n_edges):
        d = int(cs.detector[e])
        if d >= 0:
            part.append(NONE)
            face.append(NONE)
            det.append(cs.detectors[d].name)
        else:
            p, f = cs.face_labels[cs.face[e]]
            part.append(p or NONE)
            face.append(f or NONE)
            det.append(NONE)
    for lst in (part, face, det):
        lst.append(NONE)
    return np.array(part, dtype=str), np.array(face, dtype=str), np.array(det, dtype=str)


def _source_index_of_roots(result: TraceResult, roots: np.ndarray) -> np.ndarray:
    """Source index of each source ray id (-1 when unknown).

    Starting rays are numbered source by source, in order; `raytrace.trace` records how many
    each source got in settings["source_ray_counts"]."""
    counts = result.settings.get("source_ray_counts")
    if counts is None:
        one = len(result.settings.get("source_names", [])) == 1
        return np.full(len(roots), 0 if one else -1, dtype=np.int64)
    return np.searchsorted(np.cumsum(counts), roots, side="right").astype(np.int64)


def read_csv(path_or_text: str | os.PathLike, text: bool = False) -> RayTable:
    """Read a ray table CSV written by `RayTable.to_csv` (csv module only, no pandas)."""
    if text:
        fh = io.StringIO(str(path_or_text))
    else:
        fh = open(path_or_text, newline="", encoding="utf-8")
    with fh:
        reader = csv.reader(fh)
        header = next(reader)
        if tuple(header) != COLUMNS:
            raise ValueError(f"{path_or_text}: header {header!r} is not a ray table header")
        data = list(reader)
    cols = list(zip(*data)) if data else [()] * len(COLUMNS)
    out = {}
    for k, values in zip(COLUMNS, cols):
        if k in INT_COLUMNS:
            out[k] = np.array([int(v) for v in values], dtype=np.int64)
        elif k in FLOAT_COLUMNS:
            out[k] = np.array([float(v) for v in values], dtype=float)
        else:
            out[k] = np.array(values, dtype=str)
    return RayTable(out)
