"""Path tracking for the tracer: a trie of event sequences kept in numpy arrays.

Each path node is (parent node, event code).  Roots are the sources (node i = source i, with
parent -1 - i).  Lookups of (parent, code) pairs go through an open-addressing hash table
(vectorized linear probing), so extending a generation of rays costs a few array operations
per ray, never a Python loop per ray.  Past `max_nodes` new paths are lumped into one node,
"other paths" (parent -1_000_000), and so are all its descendants.

Flux deposits are buffered as (bin, node, flux) arrays and summed when the buffer fills.
"""
from __future__ import annotations

import numpy as np

OTHER_PARENT = -1_000_000
_MULT = np.uint64(0x9E3779B97F4A7C15)


class PathTrie:
    def __init__(self, n_roots: int, enabled: bool = True, max_nodes: int = 500_000):
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
        self._vals = np.zeros(1 << self._bits, dtype=np.int64)
        self._filled = 0
        self._dep: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
        self._dep_size = 0
        self._acc_keys = np.zeros(0, dtype=np.int64)
        self._acc_flux = np.zeros(0)

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

    def _other_node(self) -> int:
        if self.other < 0:
            self.other = int(self._append(np.array([OTHER_PARENT]), np.array([-1]))[0])
        return self.other

    def _slot(self, keys: np.ndarray) -> np.ndarray:
        return ((keys.astype(np.uint64) * _MULT) >> np.uint64(64 - self._bits)).astype(np.int64)

    def _lookup(self, keys: np.ndarray) -> np.ndarray:
        """Node id of each key, -1 where absent."""
        out = np.full(len(keys), -1, dtype=np.int64)
        slot = self._slot(keys)
        todo = np.arange(len(keys))
        mask = (1 << self._bits) - 1
        while len(todo):
            k = self._keys[slot]
            found = k == keys[todo]
            out[todo[found]] = self._vals[slot[found]]
            go_on = ~found & (k != -1)
            todo = todo[go_on]
            slot = (slot[go_on] + 1) & mask
        return out

    def _insert(self, keys: np.ndarray, vals: np.ndarray) -> None:
        """Insert distinct absent keys; the table doubles to stay at most half full."""
        if 2 * (self._filled + len(keys)) > len(self._keys):
            old = self._keys >= 0
            ok, ov = self._keys[old], self._vals[old]
            while 2 * (self._filled + len(keys)) > (1 << self._bits):
                self._bits += 1
            self._keys = np.full(1 << self._bits, -1, dtype=np.int64)
            self._vals = np.zeros(1 << self._bits, dtype=np.int64)
            self._filled = 0
            self._place(ok, ov)
        self._place(keys, vals)

    def _place(self, keys: np.ndarray, vals: np.ndarray) -> None:
        self._filled += len(keys)
        slot = self._slot(keys)
        mask = (1 << self._bits) - 1
        while len(keys):
            free = self._keys[slot] == -1
            # several keys may want the same free slot: the first of each takes it
            cand = np.flatnonzero(free)
            _, first = np.unique(slot[cand], return_index=True)
            win = cand[first]
            self._keys[slot[win]] = keys[win]
            self._vals[slot[win]] = vals[win]
            lose = np.ones(len(keys), dtype=bool)
            lose[win] = False
            keys, vals = keys[lose], vals[lose]
            slot = (slot[lose] + 1) & mask

    def extend(self, node: np.ndarray, code: np.ndarray, n_codes: int) -> np.ndarray:
        """Child node of each (node, code) pair, created when new."""
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
        ids = self._lookup(keys)
        miss = ids < 0
        if miss.any():
            new, inv = np.unique(keys[miss], return_inverse=True)
            room = max(self.max_nodes - self.n, 0)
            new_ids = np.empty(len(new), dtype=np.int64)
            k = min(room, len(new))
            if k:
                made = self._append(new[:k] // n_codes, new[:k] % n_codes)
                new_ids[:k] = made
                self._insert(new[:k], made)
            if k < len(new):
                new_ids[k:] = self._other_node()
            ids[miss] = new_ids[inv]
        out[live] = ids
        return out

    # ---- flux per (bin, node)
    def deposit(self, bins: np.ndarray, node: np.ndarray, flux: np.ndarray) -> None:
        if not self.enabled or len(bins) == 0:
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
        self._compact()
        k = self._acc_keys
        return k >> 32, k & 0xFFFFFFFF, self._acc_flux

    def flux_dict(self) -> dict[tuple[int, int], float]:
        b, n, f = self.flux_table()
        return dict(zip(zip(b.tolist(), n.tolist()), f.tolist()))


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
        remap[is_other] = target._other_node() if target.enabled else -1
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
