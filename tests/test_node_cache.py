"""The node cache changes no result: gridded values with and without memory are bit-identical
(the gridded models are themselves checked against ERFA in test_time_scales_physics.py and
test_earth_rotation.py)."""
from __future__ import annotations

import numpy as np

from stages.physics import earth_rotation as er
from stages.physics import time_scales as ts
from stages.physics.node_cache import NodeCache


def test_cache_returns_exactly_what_compute_returns():
    calls = []

    def reference(nodes):
        return np.sin(nodes.astype(float) * 0.1)[:, None] * np.array([1.0, 2.0])

    def compute(nodes):
        calls.append(nodes.size)
        return reference(nodes)

    cache = NodeCache(max_nodes=1000)
    for idx in (np.array([5, 7, 6]), np.array([6, 5]), np.array([3, 9]), np.array([2000, 2001])):
        assert np.array_equal(cache.values("k", idx, compute), reference(idx))
    # [5..7] computed; [6, 5] from memory; [3..9] grows the block; 2000.. is beyond max_nodes: direct
    assert calls == [3, 7, 2]


def test_gridded_models_identical_with_and_without_memory(monkeypatch):
    rng = np.random.default_rng(4)
    mjd = rng.integers(60000, 60010, 2000)
    sod = rng.uniform(0, 86400, 2000)
    x = np.tile([4.0e6, 1.0e6, 4.8e6], (2000, 1))
    first_t = ts.tdb_minus_tt_s(mjd, sod)
    first_g = er.itrs_to_gcrs(x, mjd, sod, mjd, sod + 69.184).pos_m
    monkeypatch.setattr(ts, "_NODES", NodeCache(max_nodes=0))   # memory off: every node computed afresh
    monkeypatch.setattr(er, "_NODES", NodeCache(max_nodes=0))
    assert np.array_equal(ts.tdb_minus_tt_s(mjd, sod), first_t)
    assert np.array_equal(er.itrs_to_gcrs(x, mjd, sod, mjd, sod + 69.184).pos_m, first_g)
