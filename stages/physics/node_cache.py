"""Memory of values at time-grid nodes, shared by the gridded evaluations.

Gridded models (TDB - TT, the precession-nutation parameters) evaluate an
expensive series at nodes k*h of a fixed grid and interpolate.  A node's
value depends only on its index (and the model), so values computed once
can serve every later batch and every trial epoch of an iteration: caching
changes no result, bit for bit, only the cost.
"""
from __future__ import annotations

from typing import Callable, Hashable

import numpy as np

MAX_NODES = 100_000  # per key: 11 years of hourly nodes, a few MB


class NodeCache:
    """Values at a contiguous block of node indices per key, grown on demand."""

    def __init__(self, max_nodes: int = MAX_NODES):
        self.max_nodes = max_nodes
        self._blocks: dict[Hashable, tuple[int, np.ndarray]] = {}

    def values(self, key: Hashable, node_idx: np.ndarray, compute: Callable[[np.ndarray], np.ndarray]) -> np.ndarray:
        """``compute(nodes)`` at ``node_idx``, from memory where possible (rows follow ``node_idx``)."""
        node_idx = np.asarray(node_idx, dtype=np.int64)
        if node_idx.size == 0:
            return compute(node_idx)
        lo, hi = int(node_idx.min()), int(node_idx.max())
        block = self._blocks.get(key)
        if block is not None and block[0] <= lo and hi < block[0] + len(block[1]):
            return block[1][node_idx - block[0]]
        if block is not None:
            lo2, hi2 = min(lo, block[0]), max(hi, block[0] + len(block[1]) - 1)
            if hi2 - lo2 < self.max_nodes:
                lo, hi = lo2, hi2
        if hi - lo >= self.max_nodes:
            return compute(node_idx)
        vals = compute(np.arange(lo, hi + 1, dtype=np.int64))
        self._blocks[key] = (lo, vals)
        return vals[node_idx - lo]
