"""Planetary states interpolated from a fixed time grid: the same answers, ~10x cheaper.

Evaluating the Chebyshev series of an SPK file costs ~0.7 s per million
instants and segment, and a light-time solution asks for several bodies at
several trial epochs per record.  Records of one batch crowd into few
hours, so the states are evaluated exactly only at grid nodes
t_k = MJD 51544.0 TDB + k*h (h divides a day, so a node is an exact
(day, seconds) pair and a given instant always uses the same nodes,
whatever the batch) and interpolated between nodes k and k+1 with the
cubic Hermite polynomial on position and velocity:

    p(s) = H00 p_k + H10 h v_k + H01 p_k+1 + H11 h v_k+1,   s = (t - t_k)/h,
    H00 = 2s^3 - 3s^2 + 1, H10 = s^3 - 2s^2 + s, H01 = -2s^3 + 3s^2, H11 = s^3 - s^2,

and its derivative for the velocity (e.g. Burden & Faires, Numerical
Analysis, sec. 3.4).  Error bound h^4/384 max|p''''| (position); measured
over 1950-2050 with h = 900 s (tests/test_ephemeris_grid.py): Moon 9e-5 m,
Earth and planets at the float64 rounding of their own coordinates
(1e-5 to 5e-4 m); h = 1800 s gives 1 mm for the Moon, 3600 s 1.5 cm.
"""
from __future__ import annotations

import functools

import numpy as np

from stages.physics.ephemeris import PlanetaryEphemeris, load_planetary_ephemeris

GRID_EPOCH_MJD = 51544
_DAY_S = 86400.0


class GriddedEphemeris:
    """A PlanetaryEphemeris look-alike (``posvel_m``, ``in_span``, ``identity``) interpolating on a grid."""

    def __init__(self, exact: PlanetaryEphemeris, step_s: float = 900.0):
        if step_s <= 0 or _DAY_S % step_s:
            raise ValueError(f"step_s must divide a day exactly, got {step_s}")
        self.exact = exact
        self.step_s = float(step_s)
        self.per_day = int(round(_DAY_S / step_s))
        self.identity = exact.identity
        self.span_mjd = exact.span_mjd

    def in_span(self, tdb_mjd, tdb_sod_s) -> np.ndarray:
        return self.exact.in_span(tdb_mjd, tdb_sod_s)

    def _node_states(self, body: str, nodes: np.ndarray):
        day = np.floor_divide(nodes, self.per_day)
        sod = (nodes - day * self.per_day).astype(float) * self.step_s
        return self.exact.posvel_m(body, GRID_EPOCH_MJD + day, sod)

    def posvel_m(self, body: str, tdb_mjd, tdb_sod_s):
        node, offset, vel = self._parts(body, tdb_mjd, tdb_sod_s)
        return node + offset, vel

    def displacement_m(self, body: str, mjd_a, sod_a, mjd_b, sod_b):
        """p(b) - p(a) as (p_kb - p_ka) + offset_b - offset_a, never forming the two large positions
        (their difference would carry their float64 rounding, ~3e-5 m at 1 au)."""
        node_a, off_a, _ = self._parts(body, mjd_a, sod_a)
        node_b, off_b, _ = self._parts(body, mjd_b, sod_b)
        return (node_b - node_a) + (off_b - off_a)

    def _parts(self, body: str, tdb_mjd, tdb_sod_s):
        """(node position p_k, position relative to it, velocity) of each instant (NaN outside the span)."""
        mjd, sod = np.broadcast_arrays(np.asarray(tdb_mjd), np.asarray(tdb_sod_s, dtype=float))
        mjd, sod = mjd.ravel().astype(np.int64), sod.ravel()
        ok = self.exact.in_span(mjd, sod) & np.isfinite(sod)
        sod = np.where(ok, sod, 0.0)
        mjd = np.where(ok, mjd, GRID_EPOCH_MJD)
        j = np.floor(sod / self.step_s)
        k = (mjd - GRID_EPOCH_MJD) * self.per_day + j.astype(np.int64)
        s = (sod - j * self.step_s) / self.step_s
        if k.size == 0:
            return np.zeros((0, 3)), np.zeros((0, 3)), np.zeros((0, 3))
        k_lo, k_hi = int(k.min()), int(k.max()) + 1
        if k_hi - k_lo <= 2 * k.size + 1024:
            # records crowd into a short span (the usual batch): take every node of the span, no sort
            nodes = np.arange(k_lo, k_hi + 1, dtype=np.int64)
            i0 = k - k_lo
        else:  # sparse records over a long span: only the nodes they need (k + 1 follows k in the set)
            nodes, inv = np.unique(np.concatenate([k, k + 1]), return_inverse=True)
            i0 = inv[: k.size]
        p_n, v_n = self._node_states(body, nodes)
        # power form of the Hermite cubic per interval (m - 1, 4, 3), then one gather and Horner:
        # p = c0 + s (c1 + s (c2 + s c3)),  c0 = p_k, c1 = h v_k, c2 = 3 dp - 2 h v_k - h v_k+1,
        # c3 = -2 dp + h v_k + h v_k+1  (dp = p_k+1 - p_k: the large positions enter only c0)
        h = self.step_s
        dp = p_n[1:] - p_n[:-1]
        hv0, hv1 = h * v_n[:-1], h * v_n[1:]
        coef = np.stack([p_n[:-1], hv0, 3.0 * dp - 2.0 * hv0 - hv1, -2.0 * dp + hv0 + hv1], axis=1)
        c = coef[i0]
        s_ = s[:, None]
        node = c[:, 0]
        offset = s_ * (c[:, 1] + s_ * (c[:, 2] + s_ * c[:, 3]))
        vel = (c[:, 1] + s_ * (2.0 * c[:, 2] + 3.0 * s_ * c[:, 3])) / h
        if not ok.all():
            node = node.copy()
            node[~ok] = np.nan
            vel[~ok] = np.nan
        return node, offset, vel


@functools.lru_cache(maxsize=2)
def load_gridded_ephemeris(step_s: float = 900.0) -> GriddedEphemeris:
    """The installed planetary ephemeris (DE421), interpolated on a ``step_s`` grid (cached)."""
    return GriddedEphemeris(load_planetary_ephemeris(), step_s)
