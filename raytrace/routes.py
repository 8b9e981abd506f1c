"""Routes: which sequences of events carry the flux to each detector and to each loss.

The tracer keeps a trie of event sequences (one node per distinct sequence of edge events) and
books every unit of flux that leaves the tree under (ledger bin, path node).  Here each node is
turned into readable steps such as "enter through guide / input", runs of the same step are
collapsed ("3 x TIR at guide / outer wall"), and the flux is grouped by (where it ended, source,
collapsed steps).  Sequences that differ only in which edge of a face was met (a face built of
a straight and an arc piece) read the same and are merged.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .ledger import ABSORBED, DETECTOR, ESCAPED, TRUNCATED, TRUNCATION_REASONS, BinLayout, Bucket
from .results import TraceResult
from .tracer import EV_MIRROR, EV_PASS, EV_REFLECT, EV_THROUGH, EV_TIR, N_EVENT_KINDS, medium_at

LUMPED = -1_000_000     # the tracer's parent marker of the "other routes" node (trie full)
LOSS_KINDS = (ESCAPED, ABSORBED, TRUNCATED)
# The lumped node has no single source; its group reads once, as one plain step.
ANY_SOURCE = "(any source)"
OTHER_ROUTES = "other routes: too faint to follow one by one, or past the size of the route table"


@dataclass(frozen=True)
class RouteGroup:
    """The flux that ended in one ledger bucket by one (collapsed) sequence of events."""

    kind: str                 # detector, escaped, absorbed, truncated
    bucket: str               # the ledger bucket label, e.g. "detector viewer side"
    source: str
    steps: tuple[str, ...]    # collapsed, e.g. ("enter through guide / input", "3 x TIR at ...")
    flux: float
    share_of_bucket: float    # of the flux in that bucket
    share_of_source: float    # of all source flux

    @property
    def lumped(self) -> bool:
        """True for the group of the routes the tracer did not tell apart."""
        return self.steps == (OTHER_ROUTES,)

    @property
    def text(self) -> str:
        return ", ".join(self.steps) if self.steps else "straight from the source"

    def to_dict(self) -> dict:
        return {"kind": self.kind, "bucket": self.bucket, "source": self.source, "steps": list(self.steps),
                "text": self.text, "flux": self.flux, "share_of_bucket": self.share_of_bucket,
                "share_of_source": self.share_of_source}


def route_groups(result: TraceResult) -> list[RouteGroup]:
    """Every route group, sorted by bucket (detectors first, as in the ledger) then flux."""
    raw = result.raw
    if not raw.path_flux:
        return []
    cs = result.compiled
    layout = BinLayout(cs)
    steps_of = _node_steps(result)
    sources = result.settings.get("source_names", [])
    root_of = _node_roots(raw.path_parent)
    groups: dict[tuple, float] = {}
    bucket_flux: dict[str, float] = {}
    kinds: dict[str, str] = {}
    bin_label: dict[int, tuple[str, str]] = {}
    for (b, node), flux in raw.path_flux.items():
        if b not in bin_label:
            bin_label[b] = _bucket_of_bin(cs, layout, b)
        kind, label = bin_label[b]
        r = root_of[node]
        src = sources[r] if 0 <= r < len(sources) else (ANY_SOURCE if r == LUMPED else str(r))
        key = (label, src, steps_of(node))
        groups[key] = groups.get(key, 0.0) + flux
        bucket_flux[label] = bucket_flux.get(label, 0.0) + flux
        kinds[label] = kind
    total = result.source_flux or 1.0
    out = [RouteGroup(kinds[label], label, src, steps, f, f / bucket_flux[label] if bucket_flux[label] else 0.0,
                     f / total) for (label, src, steps), f in groups.items()]
    order = {DETECTOR: 0, ESCAPED: 1, ABSORBED: 2, TRUNCATED: 3}
    rank = {lab: i for i, lab in enumerate(sorted(bucket_flux, key=lambda lab: (order[kinds[lab]], -bucket_flux[lab])))}
    out.sort(key=lambda g: (rank[g.bucket], -g.flux, g.text))
    return out


def top_routes(result: TraceResult, n: int = 10, kind: str | tuple[str, ...] | None = None,
              bucket: str | None = None, groups: list[RouteGroup] | None = None) -> list[RouteGroup]:
    """The n route groups carrying the most flux, optionally only of some kinds or one bucket
    (a bucket label such as "detector viewer side" or a detector's bare name).  Pass `groups`
    (from `route_groups`) to pick several tops without redoing the grouping."""
    kinds = (kind,) if isinstance(kind, str) else kind
    groups = route_groups(result) if groups is None else groups
    sel = [g for g in groups
           if (kinds is None or g.kind in kinds)
           and (bucket is None or g.bucket == bucket or g.bucket == f"detector {bucket}")]
    sel.sort(key=lambda g: (-g.flux, g.bucket, g.text))
    return sel[:n]


def routes_text(result: TraceResult, n: int = 10) -> str:
    """Top n routes to each detector, then the top n loss routes over all losses.  n = 0 lists
    none (a negative n is a programming error)."""
    if n < 0:
        raise ValueError(f"n: expected a count of routes of at least 0, found {n!r}")
    if n == 0:
        return "Paths: none listed (0 asked for)"
    if not result.raw.path_flux:
        return "Paths: not tracked in this trace"
    lines = []
    multi = len(result.settings.get("source_names", [])) > 1
    groups = route_groups(result)
    for det in result.compiled.detectors:
        rows = top_routes(result, n, bucket=det.name, groups=groups)
        lines.append(f"Top routes to detector {det.name}:" if rows else f"Top routes to detector {det.name}: none")
        lines += [_row(g, multi, with_bucket=False) for g in rows]
    losses = top_routes(result, n, kind=LOSS_KINDS, groups=groups)
    if losses:
        lines.append("Top loss routes:")
        lines += [_row(g, multi, with_bucket=True) for g in losses]
    return "\n".join(lines)


def _row(g: RouteGroup, multi: bool, with_bucket: bool) -> str:
    share = f"{100 * g.share_of_source:7.3f} % of source"
    if not with_bucket:
        share += f" ({100 * g.share_of_bucket:.1f} % of detector)"
    text = (f"{g.source}: " if multi and not g.lumped else "") + g.text
    if with_bucket:
        text += f" -> {g.bucket}"
    return f"  {share}  {text}"


# ----------------------------------------------------------------------------- internals

def _node_roots(parent: np.ndarray) -> np.ndarray:
    """Source index of every trie node (LUMPED for the lumped node and its descendants).
    Children always have larger ids than their parents, so one pass in id order suffices."""
    n = len(parent)
    roots = np.empty(n, dtype=np.int64)
    for i, p in enumerate(parent.tolist()):
        if p == LUMPED:
            roots[i] = LUMPED
        elif p < 0:
            roots[i] = -1 - p
        else:
            roots[i] = roots[p]
    return roots


def _node_steps(result: TraceResult):
    """A function node -> collapsed steps (tuple of str), memoised over the whole trie.

    A "through" event is phrased by the medium it leads into, so the medium is followed
    from the source along the path."""
    cs = result.compiled
    raw = result.raw
    parent, code = raw.path_parent, raw.path_code
    n = len(parent)
    n_src = int(np.count_nonzero((parent < 0) & (parent != LUMPED)))
    src_pos = _source_positions(result, n_src)
    start_med = medium_at(cs, src_pos[:, 0], src_pos[:, 1]) if n_src else np.zeros(0, dtype=np.int64)
    medium = np.zeros(n, dtype=np.int64)
    runs: list[tuple[int, str, int]] = [(-1, "", 0)]   # (previous run, step, count); 0 = empty
    run_ids: dict[tuple[int, str, int], int] = {}
    node_run = np.zeros(n, dtype=np.int64)
    lumped_run = _intern(runs, run_ids, (0, OTHER_ROUTES, 1))

    for i in range(n):
        p = int(parent[i])
        if p == LUMPED:
            node_run[i] = lumped_run
            continue
        if p < 0:
            medium[i] = start_med[-1 - p] if -1 - p < len(start_med) else 0
            node_run[i] = 0
            continue
        edge, kind = divmod(int(code[i]), N_EVENT_KINDS)
        m = int(medium[p])
        step, medium[i] = _step(cs, edge, kind, m)
        prev = int(node_run[p])
        prev_run, prev_step, count = runs[prev]
        if prev_step == step:   # same step again: bump the count of the run
            node_run[i] = _intern(runs, run_ids, (prev_run, step, count + 1))
        else:
            node_run[i] = _intern(runs, run_ids, (prev, step, 1))

    cache: dict[int, tuple[str, ...]] = {0: ()}

    def steps(node: int) -> tuple[str, ...]:
        run = int(node_run[node])
        if run in cache:
            return cache[run]
        chain = []
        r = run
        while r not in cache:
            chain.append(r)
            r = runs[r][0]
        out = cache[r]
        for r in reversed(chain):
            prev, step, count = runs[r]
            out = out + ((f"{count} x {step}" if count > 1 else step),)
            cache[r] = out
        return cache[run]

    return steps


def _intern(runs, run_ids, key) -> int:
    rid = run_ids.get(key)
    if rid is None:
        rid = len(runs)
        runs.append(key)
        run_ids[key] = rid
    return rid


def _step(cs, edge: int, kind: int, medium: int) -> tuple[str, int]:
    """Readable step for one event and the medium the ray is in afterwards."""
    d = int(cs.detector[edge])
    if d >= 0 or kind == EV_PASS:
        return f"pass detector {cs.detectors[d].name}", medium
    part, face = cs.face_labels[cs.face[edge]]
    where = f"{part} / {face}"
    if kind == EV_TIR:
        return f"TIR at {where}", medium
    if kind == EV_REFLECT:
        return f"reflect off {where}", medium
    if kind == EV_MIRROR:
        return f"mirror at {where}", medium
    assert kind == EV_THROUGH
    plus, minus = int(cs.med_plus[edge]), int(cs.med_minus[edge])
    new = minus if medium == plus else plus
    if int(cs.other_part[edge]) >= 0:
        return f"cross {where} into {cs.medium_names[new]}", new
    if int(cs.medium_part[new]) == int(cs.part[edge]):
        return f"enter through {where}", new
    return f"leave through {where}", new


def _source_positions(result: TraceResult, n_src: int) -> np.ndarray:
    pos = result.settings.get("source_positions")
    if pos is not None and len(pos) >= n_src:
        return np.asarray(pos, dtype=float)[:n_src]
    return np.zeros((n_src, 2))


def _bucket_of_bin(cs, layout: BinLayout, b: int) -> tuple[str, str]:
    """(kind, label) of the ledger bucket a bin belongs to, labelled as the ledger does."""
    if b < layout.D:
        return DETECTOR, Bucket(DETECTOR, 0.0, detector=cs.detectors[b].name).label
    if b < layout.escape_none:
        part, face = _edge_label(cs, b - layout.escape0)
        return ESCAPED, Bucket(ESCAPED, 0.0, part, face).label
    if b == layout.escape_none:
        return ESCAPED, Bucket(ESCAPED, 0.0).label
    if b < layout.face0:
        return ABSORBED, Bucket(ABSORBED, 0.0, cs.medium_names[b - layout.bulk0], "bulk").label
    if b < layout.trunc0:
        part, face = _edge_label(cs, b - layout.face0)
        return ABSORBED, Bucket(ABSORBED, 0.0, part, face).label
    return TRUNCATED, Bucket(TRUNCATED, 0.0, reason=TRUNCATION_REASONS[b - layout.trunc0]).label


def _edge_label(cs, e: int) -> tuple[str, str]:
    if cs.detector[e] >= 0:
        return ("", f"detector {cs.detectors[cs.detector[e]].name}")
    return cs.face_labels[cs.face[e]]
