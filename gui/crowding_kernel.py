"""The crowding estimate of `raydraw.crowding` as one compiled pass (numba), for the drawing of
every trace result.

The array version samples four points on each leg and builds a (points x 4) table of cells, two
weighted bincounts over it and two gathers back: about a dozen passes over 266,000 sample points
and their temporaries for the light pipe's 66,600 legs, 20-25 ms on the trace thread, more than
the trace itself.  Here each leg is read once to fill the cells' ink and ink per direction, once
more to read its cells back: about 1 ms.  The operations are the array version's, in its order
(the sums run over the legs and sample points in the same order as its bincount), so both give
the same steps and strides; `tests/test_gui_crowding.py` compares them.  Runs without Python's
lock (the project's `jit` options), so the UI thread goes on meanwhile; compiled once per
machine and cached on disk like the tracer's kernel.
"""
from __future__ import annotations

import numpy as np

from raytrace.kernel import jit

SAMPLES = 4          # points along each leg, at (k + 0.5) / SAMPLES


@jit
def covered_share(x0, y0, x1, y1, dbin, lo_x, lo_y, cell, n_cells, px, n_dirs_bins,
                  tangle, min_dir_share):
    """Per leg: the covered share of its most inked cell (ink x px / cell area), or 0 when none
    of its cells holds ink in at least `tangle` direction bins (each with `min_dir_share` of the
    cell's ink).  Cells are (n_cells + 1) a side, as in the array version."""
    n = x0.shape[0]
    side = n_cells + 1
    ink = np.zeros(side * side)
    by_dir = np.zeros(side * side * n_dirs_bins)
    cells = np.empty((n, SAMPLES), dtype=np.int64)
    for i in range(n):
        dx = x1[i] - x0[i]
        dy = y1[i] - y0[i]
        w = np.hypot(dx, dy) / SAMPLES
        for k in range(SAMPLES):
            t = (k + 0.5) / SAMPLES
            ix = min(np.int64((x0[i] + t * dx - lo_x) / cell), n_cells)
            iy = min(np.int64((y0[i] + t * dy - lo_y) / cell), n_cells)
            c = ix * side + iy
            cells[i, k] = c
            ink[c] += w
            by_dir[c * n_dirs_bins + dbin[i]] += w
    dirs = np.zeros(side * side, dtype=np.int64)
    for c in range(side * side):
        if ink[c] > 0:
            floor = min_dir_share * max(ink[c], 1e-300)
            for b in range(n_dirs_bins):
                if by_dir[c * n_dirs_bins + b] >= floor:
                    dirs[c] += 1
    share = np.empty(n)
    area = cell * cell
    for i in range(n):
        most = 0.0
        most_dirs = 0
        for k in range(SAMPLES):
            c = cells[i, k]
            if k == 0 or ink[c] > most:
                most = ink[c]
            if dirs[c] > most_dirs:
                most_dirs = dirs[c]
        share[i] = most * px / area if most_dirs >= tangle else 0.0
    return share
