"""Path tracking for the tracer: a trie of event sequences kept in numpy arrays.

Each path node is (parent node, event code).  Roots are the sources (node i = source i, with
parent -1 - i).  Lookups of (parent, code) pairs go through an open-addressing hash table
(vectorized linear probing), so extending a generation of rays costs a few array operations
per ray, never a Python loop per ray.  Past `max_nodes` new paths are lumped into one node,
"other routes" (parent -1_000_000), and so are all its descendants.

Flux deposits are buffered as (bin, node, flux) arrays and summed when the buffer fills.
"""
from __future__ import annotations

from collections.abc import Mapping

import numpy as np

OTHER_PARENT = -1_000_000
_MULT = np.uint64(0x9E3779B97F4A7C15)


class PathTrie:
    def __init__(self, n_roots: int, enabled: bool = True, max_nodes: int = 500_000, n_bins: int = 0):
        self.enabled = enabled
        self.max_nodes = max_nodes
        self.n = n_roots
        cap = max(n_roots + 16, 1024)
        self._parent = np.empty(cap, dtype=np.int64)
        self._code = np.empty(cap, dtype=np.int64)
        self._parent[:n_roots] = -1 - np.arange(n_roots)
        self._code[:n_roots] = -1
        self.other = -1
        self._bits = 12
        self._keys = np.full(1 << self._bits, -1, dtype=np.int64)
        self._vals = np.full(1 << self._bits, -1, dtype=np.int64)
        self._filled = 0
        self._dep: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
        self._dep_size = 0
        self._acc_keys = np.zeros(0, dtype=np.int64)
        self._acc_flux = np.zeros(0)
        self._other_flux = np.zeros(n_bins)     # deposits on the "other routes" node, by bin

    # ---- nodes
    @property
    def parent(self) -> np.ndarray:
        return self._parent[: self.n]

    @property
    def code(self) -> np.ndarray:
        return self._code[: self.n]

    def _append(self, parents: np.ndarray, codes: np.ndarray) -> np.ndarray:
        k = len(parents)
        need = self.n + k
        if need > len(self._parent):
            size = max(need, 2 * len(self._parent))
            self._parent = np.resize(self._parent, size)
            self._code = np.resize(self._code, size)
        self._parent[self.n:need] = parents
        self._code[self.n:need] = codes
        ids = np.arange(self.n, need, dtype=np.int64)
        self.n = need
        return ids

    def other_node(self) -> int:
        if self.other < 0:
            self.other = int(self._append(np.array([OTHER_PARENT]), np.array([-1]))[0])
        return self.other

    def _slot(self, keys: np.ndarray) -> np.ndarray:
        return ((keys.astype(np.uint64) * _MULT) >> np.uint64(64 - self._bits)).astype(np.int64)

    def _grow(self, extra: int) -> None:
        """Keep the table at most a quarter full (short probe runs mean few vectorized rounds):
        double it and re-insert what it holds."""
        if 4 * (self._filled + extra) <= len(self._keys):
            return
        old = self._keys >= 0
        ok, ov = self._keys[old], self._vals[old]
        while 4 * (self._filled + extra) > (1 << self._bits):
            self._bits += 1
        self._keys = np.full(1 << self._bits, -1, dtype=np.int64)
        self._vals = np.full(1 << self._bits, -1, dtype=np.int64)
        self._vals[self._claim(ok)] = ov

    def _claim(self, keys: np.ndarray) -> np.ndarray:
        """Slot of each key, inserting the absent ones (linear probing, vectorized).

        Every still-unplaced key is written into its slot if that slot is free; re-reading shows
        which writes stuck (of several keys wanting one slot the last write wins, and equal
        keys all find themselves); the rest probe the next slot."""
        out = np.empty(len(keys), dtype=np.int64)
        slot = self._slot(keys)
        todo = np.arange(len(keys))
        mask = (1 << self._bits) - 1
        while len(todo):
            free = np.flatnonzero(self._keys[slot] == -1)
            if len(free):
                self._keys[slot[free]] = keys[todo[free]]
            done = self._keys[slot] == keys[todo]
            out[todo[done]] = slot[done]
            go_on = ~done
            todo = todo[go_on]
            slot = (slot[go_on] + 1) & mask
        return out

    def extend(self, node: np.ndarray, code: np.ndarray, n_codes: int) -> np.ndarray:
        """Child node of each (node, code) pair, created when new (in order of first use)."""
        if not self.enabled or len(node) == 0:
            return node
        out = np.empty(len(node), dtype=np.int64)
        if self.other >= 0:
            lumped = node == self.other
            out[lumped] = self.other
            live = np.flatnonzero(~lumped)
        else:
            live = np.arange(len(node))
        if len(live) == 0:
            return out
        keys = node[live] * n_codes + code[live]
        self._grow(len(keys))
        slots = self._claim(keys)
        ids = self._vals[slots]
        new = np.flatnonzero(ids < 0)
        if len(new):
            ns = slots[new]
            # the first use of each new key: write positions last-to-first, the first one stays
            self._vals[ns[::-1]] = -2 - new[::-1]
            first = new[self._vals[ns] == -2 - new]
            self._filled += len(first)
            k = min(max(self.max_nodes - self.n, 0), len(first))
            if k:
                fk = keys[first[:k]]
                self._vals[slots[first[:k]]] = self._append(fk // n_codes, fk % n_codes)
            if k < len(first):
                self._vals[slots[first[k:]]] = self.other_node()
            ids[new] = self._vals[ns]
        out[live] = ids
        return out

    # ---- flux per (bin, node)
    def deposit(self, bins: np.ndarray, node: np.ndarray, flux: np.ndarray) -> None:
        if not self.enabled or len(bins) == 0:
            return
        if self.other >= 0 and len(self._other_flux):
            lumped = node == self.other
            if lumped.any():
                self._other_flux += np.bincount(bins[lumped], weights=flux[lumped], minlength=len(self._other_flux))
                keep = ~lumped
                bins, node, flux = bins[keep], node[keep], flux[keep]
                if len(bins) == 0:
                    return
        self._dep.append((bins, node, flux))
        self._dep_size += len(bins)
        if self._dep_size > 4_000_000:
            self._compact()

    def _compact(self) -> None:
        if not self._dep:
            return
        keys = np.concatenate([self._acc_keys] + [b.astype(np.int64) * (1 << 32) + n for b, n, _ in self._dep])
        flux = np.concatenate([self._acc_flux] + [f for _, _, f in self._dep])
        self._dep, self._dep_size = [], 0
        self._acc_keys, inv = np.unique(keys, return_inverse=True)
        self._acc_flux = np.bincount(inv, weights=flux, minlength=len(self._acc_keys))

    def flux_table(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(bin, node, flux) arrays of everything deposited."""
        ob = np.flatnonzero(self._other_flux)
        if len(ob):
            self._dep.append((ob, np.full(len(ob), self.other, dtype=np.int64), self._other_flux[ob]))
            self._other_flux = np.zeros(len(self._other_flux))
        self._compact()
        k = self._acc_keys
        return k >> 32, k & 0xFFFFFFFF, self._acc_flux

    def flux_dict(self) -> "PathFlux":
        return PathFlux(*self.flux_table())


class PathFlux(Mapping):
    """(bin, path node) -> flux, read-only.  Kept as arrays; the dict is built on first use."""

    def __init__(self, bins: np.ndarray, nodes: np.ndarray, flux: np.ndarray):
        self._arrays = (bins, nodes, flux)
        self._dict: dict | None = None

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return self._arrays

    def _d(self) -> dict:
        if self._dict is None:
            b, n, f = self._arrays
            self._dict = dict(zip(zip(b.tolist(), n.tolist()), f.tolist()))
        return self._dict

    def __getitem__(self, key):
        return self._d()[key]

    def __iter__(self):
        return iter(self._d())

    def __len__(self) -> int:
        return len(self._arrays[0])

    def __bool__(self) -> bool:
        return len(self._arrays[0]) > 0

    def items(self):
        return self._d().items()


def merge_tries(target: PathTrie, parent: np.ndarray, code: np.ndarray, n_codes: int) -> np.ndarray:
    """Add another trie's nodes to `target`; return the target id of each of its nodes.

    Nodes are added level by level (a parent always before its children), so the ids do not
    depend on anything but the order of the tries merged."""
    n = len(parent)
    remap = np.full(n, -1, dtype=np.int64)
    roots = code < 0
    is_other = parent == OTHER_PARENT
    remap[roots & ~is_other] = -1 - parent[roots & ~is_other]
    if is_other.any():
        remap[is_other] = target.other_node() if target.enabled else -1
    todo = np.flatnonzero(remap < 0)
    while len(todo):
        p = parent[todo]
        ready = remap[p] >= 0
        if not ready.any():
            break
        r = todo[ready]
        remap[r] = target.extend(remap[parent[r]], code[r], n_codes)
        todo = todo[~ready]
    return remap
