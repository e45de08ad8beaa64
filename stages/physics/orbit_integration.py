"""Accumulating precession angles along an orbit sampled on a uniform time grid (numpy only).

The rates of :mod:`stages.physics.precession` are evaluated at grid nodes t_k = k h (seconds
from an integration start), integrated cumulatively with
:func:`stages.physics.clock_rates.integrate_rate_s` (cubic through the 4 nearest nodes, O(h^4))
and carried to any instant between two nodes by cubic Hermite interpolation of the integral,
whose derivative at the nodes is the rate itself (error h^4/384 max |rate'''|; Burden & Faires,
*Numerical Analysis*, sec. 3.4).

Batch independence: the integral at node k depends only on nodes 0 .. k+2 (the stencil of the
cubic rule; the sum is sequential), and an instant in [t_k, t_k+1] uses nodes k and k+1 only.
A grid that reaches at least three nodes past the last instant therefore gives every instant
the same value, bit for bit, however far it extends; :func:`grid_nodes` rounds the node count
up to whole blocks so that batches of one partition normally share (and cache) one grid.
"""
from __future__ import annotations

import numpy as np

from . import constants as K
from .clock_rates import integrate_rate_s
from .precession import de_sitter_precession_rate_rad_per_s

__all__ = ["grid_nodes", "cumulative", "cumulative_at", "rotate", "earth_heliocentric_state_m",
           "de_sitter_grid"]

BLOCK_NODES = 4096
#: grid step of the slowly varying solar (de Sitter) terms: 6 h
SLOW_STEP_S = 21_600.0


def grid_nodes(span_s: float, step_s: float, block: int = BLOCK_NODES) -> int:
    """Number of nodes 0..n-1 (step ``step_s``) that reach at least 3 nodes past ``span_s``,
    rounded up to a multiple of ``block``."""
    need = int(np.floor(max(span_s, 0.0) / step_s)) + 4
    return int(-(-need // block) * block)


def cumulative(step_s: float, rate) -> np.ndarray:
    """Cumulative integral of ``rate`` ((n,) or (n, m), one row per node k h), zero at node 0."""
    rate = np.asarray(rate, dtype=float)
    return integrate_rate_s(np.arange(rate.shape[0]) * step_s, rate)


def cumulative_at(step_s: float, cum, rate, t_s) -> np.ndarray:
    """The integral at instants ``t_s`` (s from node 0) by cubic Hermite interpolation between the two
    bracketing nodes (values ``cum``, derivatives ``rate``).  NaN rows outside [0, last node]."""
    cum = np.asarray(cum, dtype=float)
    rate = np.asarray(rate, dtype=float)
    t = np.asarray(t_s, dtype=float)
    n = cum.shape[0]
    ok = np.isfinite(t) & (t >= 0.0) & (t <= (n - 1) * step_s)
    tt = np.where(ok, t, 0.0)
    k = np.clip(np.floor(tt / step_s).astype(np.int64), 0, n - 2)
    s = (tt - k * step_s) / step_s
    shape = (-1,) + (1,) * (cum.ndim - 1)
    s = s.reshape(shape)
    s2, s3 = s * s, s * s * s
    out = ((2 * s3 - 3 * s2 + 1) * cum[k] + (s3 - 2 * s2 + s) * step_s * rate[k]
           + (-2 * s3 + 3 * s2) * cum[k + 1] + (s3 - s2) * step_s * rate[k + 1])
    out[~ok] = np.nan
    return out


def rotate(vec, theta_rad) -> np.ndarray:
    """``vec`` (n, 3) rotated by the rotation vectors ``theta_rad`` (n, 3) (right-handed, angle |theta|
    about theta/|theta|; Rodrigues' formula, common practice), with 1 - cos written 2 sin^2(x/2)."""
    v = np.asarray(vec, dtype=float)
    th = np.asarray(theta_rad, dtype=float)
    ang = np.sqrt(np.einsum("...i,...i->...", th, th))
    safe = np.where(ang > 0.0, ang, 1.0)
    kx = th / safe[..., None]
    c = np.cos(ang)[..., None]
    s = np.sin(ang)[..., None]
    vers = (2.0 * np.sin(0.5 * ang) ** 2)[..., None]
    return v * c + np.cross(kx, v) * s + kx * np.einsum("...i,...i->...", kx, v)[..., None] * vers


def earth_heliocentric_state_m(tdb_mjd, tdb_sod_s):
    """The Earth's heliocentric position (m) and velocity (m/s), ICRF axes, from DE421
    (Folkner, Williams & Boggs 2009): Earth minus Sun, both barycentric.  NaN outside the span."""
    from .ephemeris import load_planetary_ephemeris

    eph = load_planetary_ephemeris()
    pe, ve = eph.posvel_m("earth", tdb_mjd, tdb_sod_s)
    ps, vs = eph.posvel_m("sun", tdb_mjd, tdb_sod_s)
    return pe - ps, ve - vs


def de_sitter_grid(start_tt_mjd: int, start_tt_sod_s: float, n_nodes: int, gamma: float):
    """The Earth's heliocentric state and the de Sitter rate Omega_dS (rad/s) at the slow-grid nodes
    k * SLOW_STEP_S (TT) after the start, evaluated at their TDB (geocentric TDB - TT series).
    Returns (R (n, 3), V (n, 3), Omega_dS (n, 3), ok (n,) bool); rows outside DE421 are zero and not ok."""
    from .time_scales import add_seconds, tdb_minus_tt_s

    t = np.arange(n_nodes) * SLOW_STEP_S
    tt_m, tt_s = add_seconds(np.full(n_nodes, start_tt_mjd, dtype=np.int64), np.full(n_nodes, start_tt_sod_s), t)
    tdb_m, tdb_s = add_seconds(tt_m, tt_s, tdb_minus_tt_s(tt_m, tt_s))
    big_r, big_v = earth_heliocentric_state_m(tdb_m, tdb_s)
    ok = np.all(np.isfinite(big_r), axis=1)
    big_r[~ok] = [K.C_M_PER_S * 499.0, 0.0, 0.0]   # placeholders (about 1 au), never used for an accepted record
    big_v[~ok] = [0.0, 3.0e4, 0.0]
    om = de_sitter_precession_rate_rad_per_s(big_r, big_v, gamma=gamma)
    om[~ok] = 0.0
    return big_r, big_v, om, ok
