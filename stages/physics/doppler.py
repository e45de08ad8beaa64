"""Doppler observables as differenced light time (vectorised).

A Doppler count over the interval [t_end - T_c, t_end] of reception time (TDB)
measures the change of the phase delay; with the light time tau(t) of a signal
received at t, the averaged fractional frequency shift is ::

    y = -[tau(t_end) - tau(t_end - T_c)] / T_c                              (1)

(Doppler as differenced range: T. D. Moyer 2000, JPL DESCANSO Monograph 2,
section 13, from memory).  Sign: y < 0 when the light time grows (receding
spacecraft), i.e. y = (f_received - f_transmitted)/f for a constant transmitted
frequency, to first order.  Two-way: tau is the round-trip light time t3 - t1
(:func:`light_time.two_way_light_time`); one-way: the downleg alone
(:func:`light_time.one_way_light_time`).  Both ends of the interval are solved
with the light-time solver of ``light_time.py``; nothing is re-solved here.

Numerical care.  tau is ~1e3 s, so the plain difference of two float64 light
times carries ~ulp(2500 s) = 4.5e-13 s of rounding, i.e. 7.6e-15 in y for
T_c = 60 s.  Instead each leg's light time is rebuilt at the solved epochs as
``g + S`` (``g = |r_rx - r_tx|/c``, ``S`` the relativistic term of each body)
with the end positions *re-evaluated* at the solved epochs, and:

* the geometric difference of two legs A (end of count) and B (start) is
  formed from differences of positions with
  ``|a| - |b| = (a - b).(a + b) / (|a| + |b|)`` where
  ``a - b = (rx_A - rx_B) - (tx_A - tx_B)``;
* the relativistic terms are ~1e-4 s, so their plain difference is already
  exact to ~1e-20 s: each term is recomputed from the re-evaluated vectors
  with :func:`light_time.shapiro_delay_vec_s` and differenced directly (the
  log-ratio form would not gain anything at float64).

Rebuilding tau as g + S instead of using the solver's tau is exact to
``res * (n.v/c)`` with ``res`` the solver's final residual (< tol_s = 1e-12 s)
and ``v/c ~ 1e-4``: < 1e-16 s.

Remaining floor without displacements (``displacements=None``): the input positions themselves.  A barycentric position of
~1.5e11 m is a float64 with ulp 3.05e-5 m, i.e. 1e-13 s of light time; the
two-way difference involves eight such positions (the spacecraft's twice),
giving ~1.5e-15 rms in y for T_c = 60 s at 1-4 au from the barycentre
(scales as |r| / T_c).  This is the state functions' rounding, not this
module's.  Measured in ``tests/test_doppler.py`` against longdouble closed
forms (straight-line motion, T_c = 60 s): rms 1.85e-15, max 9.8e-15 with
barycentric positions of 1.5e11..6e11 m (plain subtraction of the solver's
light times: rms 4.1e-15); rms 5e-17, max 1.9e-16 with positions <= ~4e9 m,
which is this module's own floor.  Hence ``displacements``: when the caller
can give each end's displacement over the count without forming the two
large positions (the ephemerides interpolate relative to their nodes:
``GriddedEphemeris.displacement_m``, ``StateTable.displacement_centre_m``,
``barycentric.StationState.offset_m``), ``a - b`` is formed from those and the
floor drops to this module's own: measured rms 9.5e-18, max 6.8e-17
(two-way) and rms 3.8e-18 (one-way) at 1.5e11..6e11 m, T_c = 60 s.

Bad count intervals (zero, negative or non-finite ``count_s``) raise
``ValueError`` (a programming/configuration error, not a per-record data
condition); per-record solver failures are reported through ``status``
(``light_time.STATUS_*``; the worse of the two ends) with NaN values.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from . import constants as K
from . import light_time as lt
from .clock_rates import bcrs_clock_rate_terms
from .time_scales import add_seconds

__all__ = ["DopplerSolution", "two_way_doppler", "one_way_doppler", "oscillator_terms",
           "POTENTIAL_BODIES"]

#: bodies whose potential enters a spacecraft oscillator's rate (DE421 names)
POTENTIAL_BODIES = ("sun", "mercury", "venus", "earth", "moon", "mars", "jupiter", "saturn",
                    "uranus", "neptune")

_C = K.C_M_PER_S


@dataclass
class DopplerSolution:
    """Count-averaged fractional frequency shift for n records.

    ``y = geometric + sum(relativistic.values())`` (dimensionless);
    ``dgamma`` = dy/d gamma from eq. (3) of ``light_time`` differenced like the
    relativistic terms.
    ``relativistic[B] = -[S_B(t_end) - S_B(t_start)] / T_c`` summed over the
    legs; ``geometric`` is the rest (straight-line light time, including the
    tiny effect of the relativistic delay on the solved epochs).
    ``end``/``start`` are the light-time solutions at the two ends of the
    count (``RoundTripSolution`` for two-way, ``LegSolution`` for one-way).
    ``status`` = max(status_end, status_start); records with status 2 are NaN.
    """

    y: np.ndarray
    geometric: np.ndarray
    relativistic: dict[str, np.ndarray]
    dgamma: np.ndarray
    count_s: np.ndarray
    status: np.ndarray
    status_end: np.ndarray
    status_start: np.ndarray
    end: object
    start: object

    @property
    def relativistic_total(self) -> np.ndarray:
        total = np.zeros_like(self.y)
        for v in self.relativistic.values():
            total = total + v
        return total


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------
def _dot(a, b):
    return np.einsum("...i,...i->...", a, b)


def _norm(a):
    return np.sqrt(_dot(a, a))


def _position(ret, n: int) -> np.ndarray:
    """Position (n, 3) from a state callable returning (pos, vel) or pos."""
    p = ret[0] if isinstance(ret, tuple) else ret
    return np.asarray(p, dtype=np.float64).reshape(n, 3)


def _check_count(count_s, n: int) -> np.ndarray:
    t = np.broadcast_to(np.asarray(count_s, dtype=np.float64), (n,)).copy()
    if not np.all(np.isfinite(t)) or np.any(t <= 0.0):
        raise ValueError("count interval count_s must be finite and > 0 seconds")
    return t


def _safe_epoch(mjd, sod):
    """Epochs for the callables: NaN (invalid record) replaced by sod 0."""
    ok = np.isfinite(sod)
    return np.asarray(mjd).astype(np.int64), np.where(ok, sod, 0.0)


class _Leg:
    """One leg re-evaluated at its solved epochs: receiver/transmitter
    positions and each body's relativistic term."""

    def __init__(self, rx_pos, tx_pos, s_terms, dgamma_s):
        self.rx = rx_pos
        self.tx = tx_pos
        self.s = s_terms  # dict body -> seconds
        self.dg = dgamma_s  # d(light time)/d gamma, seconds


def _leg(rx_pos, t_rx, t_tx, tx_fn, bodies_fn, gm, gamma, bodies, bending, n, cache):
    """Re-evaluate a leg.  ``cache`` maps (body, epoch-key) to body positions so
    the shared epoch t2 of a round trip is evaluated once."""
    m_tx, s_tx = _safe_epoch(*t_tx)
    tx_pos = _position(tx_fn(m_tx, s_tx), n)
    s_terms = {}
    dg = np.zeros(n)
    for b in bodies:
        pb_rx = _body(bodies_fn, b, t_rx, n, cache)
        pb_tx = _body(bodies_fn, b, t_tx, n, cache)
        s_terms[b] = lt.shapiro_delay_vec_s(tx_pos - pb_tx, rx_pos - pb_rx, gm[b], gamma,
                                            b in bending)
        dg = dg + lt.shapiro_dgamma_vec_s(tx_pos - pb_tx, rx_pos - pb_rx, gm[b], gamma, b in bending)
    return _Leg(rx_pos, tx_pos, s_terms, dg)


def _body(bodies_fn, name, t, n, cache):
    m, s = _safe_epoch(*t)
    key = (name, id(t[1]))
    if key not in cache:
        cache[key] = (t, _position(bodies_fn(name, m, s), n))
    return cache[key][1]


def _geo_diff_s(leg_a: _Leg, leg_b: _Leg, d=None) -> np.ndarray:
    """(|a| - |b|)/c with a = rx_A - tx_A, b = rx_B - tx_B, without cancellation; ``d`` = a - b when
    the ends' displacements are known better than the difference of their positions."""
    a = leg_a.rx - leg_a.tx
    b = leg_b.rx - leg_b.tx
    if d is None:
        d = (leg_a.rx - leg_b.rx) - (leg_a.tx - leg_b.tx)
    na, nb = _norm(a), _norm(b)
    with np.errstate(divide="ignore", invalid="ignore"):
        return _dot(d, a + b) / (na + nb) / _C


def _assemble(legs_a, legs_b, count, status_end, status_start, bodies, end, start, leg_d=None):
    geo = np.zeros(count.shape)
    dgamma = np.zeros(count.shape)
    rel = {b: np.zeros(count.shape) for b in bodies}
    for i, (la, lb) in enumerate(zip(legs_a, legs_b)):
        geo = geo + _geo_diff_s(la, lb, None if leg_d is None else leg_d[i])
        dgamma = dgamma + (la.dg - lb.dg)
        for b in bodies:
            rel[b] = rel[b] + (la.s[b] - lb.s[b])
    geo = -geo / count
    dgamma = -dgamma / count
    rel = {b: -v / count for b, v in rel.items()}
    status = np.maximum(status_end, status_start)
    bad = status == lt.STATUS_INVALID
    geo[bad] = np.nan
    dgamma[bad] = np.nan
    y = geo.copy()
    for b in bodies:
        rel[b][bad] = np.nan
        y = y + rel[b]
    return DopplerSolution(y=y, geometric=geo, relativistic=rel, dgamma=dgamma, count_s=count, status=status,
                           status_end=status_end, status_start=status_start, end=end,
                           start=start)


def _prepare(t_end_mjd, t_end_sod_s, count_s, t_start=None):
    mjd = np.atleast_1d(np.asarray(t_end_mjd)).astype(np.int64)
    sod = np.atleast_1d(np.asarray(t_end_sod_s, dtype=np.float64))
    n = sod.shape[0]
    if mjd.shape != (n,):
        raise ValueError(f"shapes: t_end_mjd {mjd.shape}, t_end_sod_s {sod.shape}")
    count = _check_count(count_s, n)
    ok = np.isfinite(sod)
    if t_start is not None:
        m0 = np.atleast_1d(np.asarray(t_start[0])).astype(np.int64)
        s0 = np.atleast_1d(np.asarray(t_start[1], dtype=np.float64))
        if m0.shape != (n,) or s0.shape != (n,):
            raise ValueError(f"shapes: t_start {m0.shape}, {s0.shape}; expected ({n},)")
        return n, count, (mjd, sod), (m0, np.where(ok, s0, np.nan))
    m0, s0 = add_seconds(mjd, np.where(ok, sod, 0.0), -count)
    s0 = np.where(ok, s0, np.nan)  # invalid records stay NaN (status 2 downstream)
    return n, count, (mjd, sod), (m0, s0)


def _displacement(fn, t_a, t_b, n):
    """fn's p(b) - p(a) at finite epochs; NaN rows where either epoch is not finite (invalid records)."""
    ok = np.isfinite(t_a[1]) & np.isfinite(t_b[1])
    d = np.asarray(fn(*_safe_epoch(*t_a), *_safe_epoch(*t_b)), dtype=np.float64).reshape(n, 3)
    return np.where(ok[:, None], d, np.nan)


def _rx_position(fn, t, n):
    """Receiver position at reception; NaN rows for NaN epochs (the callable
    itself only sees finite times)."""
    pos = _position(fn(*_safe_epoch(*t)), n)
    return np.where(np.isfinite(t[1])[:, None], pos, np.nan)


# ---------------------------------------------------------------------------
# observables
# ---------------------------------------------------------------------------
def two_way_doppler(
    t_end_mjd,
    t_end_sod_s,
    count_s,
    rx_station_state_fn: lt.StateFn,
    spacecraft_state_fn: lt.StateFn,
    tx_station_state_fn: lt.StateFn,
    bodies_fn: lt.BodyStateFn,
    gm: Mapping[str, float],
    gamma: float = 1.0,
    bodies: Sequence[str] = lt.DEFAULT_BODIES,
    bending_bodies: Sequence[str] = lt.DEFAULT_BENDING_BODIES,
    tol_s: float = 1e-12,
    max_iter: int = 10,
    t_start=None,
    displacements=None,
) -> DopplerSolution:
    """Two-way (or three-way) Doppler, eq. (1) with the round-trip light time.

    ``t_end_*``: end of the count = reception time (TDB, int MJD + sod);
    ``count_s``: count interval T_c (scalar or per record, > 0, else
    ``ValueError``).  ``rx_station_state_fn(mjd, sod)`` gives the receiving
    station's barycentric position (tuple ``(pos, vel)`` or ``pos``) at
    reception; ``tx_station_state_fn`` the transmitting station's state (the
    same station for two-way); ``spacecraft_state_fn``, ``bodies_fn``, ``gm``,
    ``gamma``, ``bodies``, ``bending_bodies``, ``tol_s``, ``max_iter`` as in
    :func:`light_time.two_way_light_time`, which solves both ends.
    ``t_start``: optional (mjd, sod) TDB start of the count at the receiver;
    default ``t_end - count_s``.  Give it when the count interval is kept by
    a clock whose rate differs from TDB (a station clock keeps TT): eq. (1) is
    then divided by the clock's ``count_s`` while the light times are solved
    at the true TDB ends.
    ``displacements``: optional (rx, spacecraft, tx) callables
    ``(mjd_a, sod_a, mjd_b, sod_b) -> (n, 3)`` giving each end's barycentric
    displacement p(b) - p(a) formed without the two large positions (the
    ephemerides' node-relative interpolation): the geometric difference then
    no longer carries the positions' float64 rounding (eq. (5) floor of the
    module docstring).
    """
    bodies = tuple(bodies)
    n, count, t_end, t_start = _prepare(t_end_mjd, t_end_sod_s, count_s, t_start)
    kw = dict(gamma=gamma, bodies=bodies, bending_bodies=bending_bodies, tol_s=tol_s,
              max_iter=max_iter)
    legs = []
    sols = []
    for t3 in (t_end, t_start):
        rx = _rx_position(rx_station_state_fn, t3, n)
        rt = lt.two_way_light_time(t3[0], t3[1], rx, spacecraft_state_fn, tx_station_state_fn,
                                   bodies_fn, gm, **kw)
        cache: dict = {}
        t2 = (rt.down.t_tx_mjd, rt.down.t_tx_sod_s)
        t1 = (rt.t1_mjd, rt.t1_sod_s)
        down = _leg(rx, t3, t2, spacecraft_state_fn, bodies_fn, gm, gamma, bodies,
                    bending_bodies, n, cache)
        # upleg receiver: the spacecraft at t2, the same re-evaluated position
        up = _leg(down.tx, t2, t1, tx_station_state_fn, bodies_fn, gm, gamma, bodies,
                  bending_bodies, n, cache)
        legs.append((down, up))
        sols.append(rt)
    leg_d = None
    if displacements is not None:
        rx_d, sc_d, tx_d = displacements
        e, s = sols
        d_rx = _displacement(rx_d, t_start, t_end, n)
        d_sc = _displacement(sc_d, (s.down.t_tx_mjd, s.down.t_tx_sod_s), (e.down.t_tx_mjd, e.down.t_tx_sod_s), n)
        d_tx = _displacement(tx_d, (s.t1_mjd, s.t1_sod_s), (e.t1_mjd, e.t1_sod_s), n)
        leg_d = (d_rx - d_sc, d_sc - d_tx)
    return _assemble(legs[0], legs[1], count, sols[0].status, sols[1].status, bodies,
                     sols[0], sols[1], leg_d)


def one_way_doppler(
    t_end_mjd,
    t_end_sod_s,
    count_s,
    rx_station_state_fn: lt.StateFn,
    spacecraft_state_fn: lt.StateFn,
    bodies_fn: lt.BodyStateFn,
    gm: Mapping[str, float],
    gamma: float = 1.0,
    bodies: Sequence[str] = lt.DEFAULT_BODIES,
    bending_bodies: Sequence[str] = lt.DEFAULT_BENDING_BODIES,
    tol_s: float = 1e-12,
    max_iter: int = 10,
    t_start=None,
    displacements=None,
) -> DopplerSolution:
    """One-way Doppler: eq. (1) with the downleg light time only
    (``y = -[tau_down(t_end) - tau_down(t_start)]/T_c``); arguments as in
    :func:`two_way_doppler` (no transmitting station).  The spacecraft
    oscillator's rate (its proper time against TDB) is added by the caller
    from the solved transmission epochs (``end.t_tx_*``, ``start.t_tx_*``)."""
    bodies = tuple(bodies)
    n, count, t_end, t_start = _prepare(t_end_mjd, t_end_sod_s, count_s, t_start)
    kw = dict(gamma=gamma, bodies=bodies, bending_bodies=bending_bodies, tol_s=tol_s,
              max_iter=max_iter)
    legs = []
    sols = []
    for t3 in (t_end, t_start):
        rx = _rx_position(rx_station_state_fn, t3, n)
        sol = lt.one_way_light_time(t3[0], t3[1], rx, spacecraft_state_fn, bodies_fn, gm, **kw)
        t2 = (sol.t_tx_mjd, sol.t_tx_sod_s)
        down = _leg(rx, t3, t2, spacecraft_state_fn, bodies_fn, gm, gamma, bodies,
                    bending_bodies, n, {})
        legs.append((down,))
        sols.append(sol)
    leg_d = None
    if displacements is not None:  # (rx, spacecraft) callables as in two_way_doppler
        rx_d, sc_d = displacements[:2]
        e, s = sols
        leg_d = (_displacement(rx_d, t_start, t_end, n)
                 - _displacement(sc_d, (s.t_tx_mjd, s.t_tx_sod_s), (e.t_tx_mjd, e.t_tx_sod_s), n),)
    return _assemble(legs[0], legs[1], count, sols[0].status, sols[1].status, bodies,
                     sols[0], sols[1], leg_d)


# ---------------------------------------------------------------------------
# the transmitting oscillator (one-way)
# ---------------------------------------------------------------------------
def oscillator_terms(
    t2_start,
    t2_end,
    count_s,
    spacecraft_state_fn: lt.StateFn,
    bodies_fn: lt.BodyStateFn,
    gm: Mapping[str, float],
    bodies: Sequence[str] = POTENTIAL_BODIES,
) -> dict[str, np.ndarray]:
    """One-way Doppler: what the transmitting oscillator's own rate adds to y.

    An oscillator of nominal frequency f in its proper time tau emits phase
    f tau(t2); the phase received over the count is f [tau(t2e) - tau(t2s)],
    so (with eq. (1) for the light-time part) ::

        y_osc = (1/T_c) * integral_{t2s}^{t2e} (d tau/dTDB - 1) dt2          (4)

    with d tau/dTDB - 1 from :func:`clock_rates.bcrs_clock_rate_terms` (eq. B
    there: redshift in the potential of ``bodies``, the Earth's J2 included,
    time dilation of the barycentric speed, and TDB's scale rate L_B).  The
    integral is Simpson's rule on the ends and the middle of [t2s, t2e]
    (the integrand is smooth: for a 90-minute orbit and T_c = 60 s the rule's
    error is ~2e-17 in y).  Note the factor (t2e - t2s)/T_c = 1 + O(v/c):
    with rates ~1e-8 it matters at 1e-12.

    ``t2_start``, ``t2_end``: (mjd, sod) TDB transmission epochs (``start``
    and ``end`` solutions of :func:`one_way_doppler`).  Returns a dict with
    the keys of ``bcrs_clock_rate_terms`` (each integrated as in (4)).
    """
    m_s = np.asarray(t2_start[0]).astype(np.int64)
    s_s = np.asarray(t2_start[1], dtype=np.float64)
    m_e = np.asarray(t2_end[0]).astype(np.int64)
    s_e = np.asarray(t2_end[1], dtype=np.float64)
    n = s_s.size
    count = _check_count(count_s, n)
    span = (m_e - m_s).astype(np.float64) * 86400.0 + (s_e - s_s)
    ok = np.isfinite(span)
    m_s, s_s = _safe_epoch(m_s, s_s)
    m_e, s_e = _safe_epoch(m_e, s_e)
    span = np.where(ok, span, 0.0)
    m_m, s_m = add_seconds(m_s, s_s, 0.5 * span)
    weights = (1.0 / 6.0, 4.0 / 6.0, 1.0 / 6.0)
    out: dict[str, np.ndarray] = {}
    for w, (m, s) in zip(weights, ((m_s, s_s), (m_m, s_m), (m_e, s_e))):
        ret = spacecraft_state_fn(m, s)
        pos = np.asarray(ret[0], dtype=np.float64).reshape(n, 3)
        vel = np.asarray(ret[1], dtype=np.float64).reshape(n, 3)
        pb = {b: _position(bodies_fn(b, m, s), n) for b in bodies}
        for k, v in bcrs_clock_rate_terms(pos, vel, pb, gm).items():
            out[k] = out.get(k, 0.0) + w * v
    scale = np.where(ok, span / count, np.nan)
    return {k: v * scale for k, v in out.items()}
