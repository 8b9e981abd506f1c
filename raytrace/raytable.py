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


CSV_BLOCK_ROWS = 50_000    # rows built and written at a time: bounds the writer's memory


def ray_table(result: TraceResult) -> RayTable | None:
    """The table of recorded segments, or None when the trace was run without recording.

    Raises BudgetExceeded when the table would not fit in the trace's memory limit
    (max_memory_mb): write_csv streams any size of table to a file instead."""
    seg = result.segments
    if seg is None:
        return None
    plan = _Plan(result)
    need = plan.table_bytes(len(plan.order))
    limit = float(result.settings.get("max_memory_mb", 4096.0))
    if need > limit * 1e6:
        from .errors import BudgetExceeded, memory_limit_text
        raise BudgetExceeded(
            f"the ray table of {len(plan.order):,} segments needs about {need / 1e6:,.0f} MB in memory, more "
            f"than {memory_limit_text(limit)}; or record fewer rays (record=\"first\"), or write the table "
            f"to a file with write_csv, which streams it")
    return RayTable(plan.columns(plan.order))


def write_csv(result: TraceResult, path: str | os.PathLike) -> int | None:
    """Write the ray table to `path` as CSV, atomically, without holding the whole table: the
    same text as ray_table(result).to_csv().  The number of rows, or None when the trace
    recorded nothing.  (A 20,000-ray light pipe with every segment recorded is 1.3 million
    rows: 2.2 GB as a table in memory, 0.4 GB as CSV.)"""
    if result.segments is None:
        return None
    from .atomic import atomic_write
    rows = []

    def write(target: str) -> None:
        with open(target, "w", encoding="utf-8", errors="backslashreplace", newline="") as fh:
            rows.append(write_rows(result, fh))
    atomic_write(path, write)
    return rows[0]


def write_rows(result: TraceResult, fh) -> int:
    """Write the header and every row to the open text file `fh`, CSV_BLOCK_ROWS rows at a
    time (the writer's memory stays bounded); the number of rows."""
    plan = _Plan(result)
    w = csv.writer(fh, lineterminator="\n")
    w.writerow(COLUMNS)
    for lo in range(0, len(plan.order), CSV_BLOCK_ROWS):
        w.writerows(RayTable(plan.columns(plan.order[lo:lo + CSV_BLOCK_ROWS])).rows())
    return len(plan.order)


class _Plan:
    """What every row needs, computed once for the whole table: the row order (by ray id, so
    a parent comes before its children) and the edge each segment began on."""

    def __init__(self, result: TraceResult):
        self.result = result
        seg = self.seg = result.segments
        cs = result.compiled
        n = len(seg["ray_id"])
        self.labels = _edge_labels(cs)
        self.end_edge = seg["end_edge"].astype(np.int64)
        # where a segment began is where its parent ended; parents are always recorded with it
        order = np.argsort(seg["ray_id"], kind="stable")
        sorted_ids = seg["ray_id"][order]
        parent = seg["parent_id"].astype(np.int64)
        pos = np.searchsorted(sorted_ids, parent)
        pos = np.clip(pos, 0, max(n - 1, 0))
        found = (parent >= 0) & (n > 0) & (sorted_ids[pos] == parent if n else False)
        start_edge = np.full(n, -1, dtype=np.int64)
        if n:
            start_edge[found] = self.end_edge[order[pos[found]]]
        self.order, self.start_edge = order, start_edge
        names = result.settings.get("source_names", [])
        self.src_names = np.array(list(names) + [NONE], dtype=str)
        self.n_names = len(names)
        self.medium_names = np.array(cs.medium_names, dtype=str)

    def table_bytes(self, rows: int) -> int:
        """Memory of a table of `rows` rows: 8 bytes a number, 4 a character of text (numpy
        stores text at the width of its longest entry), twice for the copy made while built."""
        widths = [self.src_names, self.medium_names, np.array(BORN, dtype=str), np.array(END, dtype=str),
                  *self.labels, *self.labels]
        text = sum(4 * max(1, w.dtype.itemsize // 4) for w in widths)
        return 2 * rows * (8 * (len(COLUMNS) - len(TEXT_COLUMNS)) + text)

    def columns(self, rows: np.ndarray) -> dict[str, np.ndarray]:
        """The table's columns for segments `rows` (indices into the recorded segments)."""
        seg = {k: v[rows] for k, v in self.seg.items()}
        edge_part, edge_face, edge_det = self.labels

        def where(edges: np.ndarray):
            idx = np.where(edges >= 0, edges, len(edge_part) - 1)
            return edge_part[idx], edge_face[idx], edge_det[idx]

        parent = seg["parent_id"].astype(np.int64)
        src_index = _source_index_of_roots(self.result, seg["source_ray"].astype(np.int64))
        source = self.src_names[np.where(src_index >= 0, src_index, self.n_names)]
        bp, bf, bd = where(self.start_edge[rows])   # a source ray began at its source: "-" here
        ep, ef, ed = where(self.end_edge[rows])
        x0, y0, x1, y1 = (seg[k].astype(float) for k in ("x0", "y0", "x1", "y1"))
        dx, dy = seg["dx"].astype(float), seg["dy"].astype(float)
        return {
            "ray_id": seg["ray_id"].astype(np.int64), "parent_id": parent,
            "generation": seg["generation"].astype(np.int64), "source_ray": seg["source_ray"].astype(np.int64),
            "source": source, "x0_mm": x0, "y0_mm": y0, "x1_mm": x1, "y1_mm": y1, "dx": dx, "dy": dy,
            "direction_deg": np.degrees(np.arctan2(dy, dx)), "length_mm": np.hypot(x1 - x0, y1 - y0),
            "wavelength_nm": seg["wavelength_nm"].astype(float), "flux_s": seg["flux_s"].astype(float),
            "flux_p": seg["flux_p"].astype(float), "optical_path_mm": seg["optical_path"].astype(float),
            "medium": self.medium_names[seg["medium"].astype(np.int64)],
            "began": np.array(BORN, dtype=str)[seg["born"].astype(np.int64)], "began_part": bp,
            "began_face": bf, "began_detector": bd,
            "ended": np.array(END, dtype=str)[seg["end"].astype(np.int64)], "ended_part": ep,
            "ended_face": ef, "ended_detector": ed,
        }


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
