"""Terrestrial -> celestial transformations for points on or near the Earth.

Three pieces, all vectorised over records:

1. :func:`itrs_to_gcrs` -- station (or any Earth-fixed point) position and
   velocity in the GCRS, IAU 2006/2000A, CIO based (IERS Conventions 2010,
   IERS Technical Note 36, chapter 5):

       [GCRS] = Q(t) R(t) W(t) [ITRS]                           (TN36 eq. 5.1)

   W(t) = R3(-s') R2(x_p) R1(y_p)  polar motion                (TN36 eq. 5.3)
   R(t) = R3(-ERA)                  Earth rotation angle        (TN36 eq. 5.5)
   Q(t) = R3(-E) R2(-d) R3(E) R3(s) precession-nutation         (TN36 eq. 5.6)
   ERA(T_u) = 2 pi (0.7790572732640 + 1.00273781191135448 T_u),
              T_u = JD(UT1) - 2451545.0                        (TN36 eq. 5.15)

   ERFA supplies the published series: ``pnm06a`` + ``bpn2xy`` (CIP X, Y of
   IAU 2006/2000A), ``s06`` (CIO locator s, TN36 eq. 5.13), ``c2ixys``
   (Q^T from X, Y, s, TN36 eq. 5.10), ``sp00`` (TIO locator s', TN36 eq.
   5.13), ``pom00`` (W^T, TN36 eq. 5.3), ``era00`` (TN36 eq. 5.15).  Earth
   orientation (x_p, y_p, UT1-UTC, dX, dY) comes from the astropy-iers-data
   finals2000A table through :mod:`stages.physics.earth_orientation`.

2. :func:`station_itrs_at_m` -- linear plate motion (TN36 chapter 4).

3. :func:`gcrs_to_bcrs` -- the c^-2 terms of the GCRS -> BCRS transformation
   for a point near the Earth, with :func:`external_potential_at_geocentre`.

Speed.  Q changes slowly; evaluating ``pnm06a`` per record costs ~32 s per
million records.  The parameters of Q -- the CIP coordinates X, Y (with the
pole offsets dX, dY) and the CIO locator s -- and the TIO locator s' are
therefore evaluated on a uniform TT grid whose nodes sit at multiples of
``grid_step_s`` from the fixed epoch ``GRID_EPOCH_MJD`` (MJD 51544.0 TT) and
interpolated per record with 4-point cubic Lagrange polynomials; Q is then
formed per record from the closed form of TN36 eq. 5.10.  (Interpolating the
4 parameters instead of the 9 + 9 elements of Q and W is ~2.5x faster and
keeps Q exactly orthogonal.)  A node's value depends only on its index, so an
instant gets bit-identical results whatever batch it is evaluated in.  The
Earth rotation angle, which turns 2 pi per day, is evaluated exactly per
record (``erfa.era00`` on that record's UT1), and so is W (x_p, y_p
interpolated in the daily table at the record's UTC).  Measured: ~0.55 s
per million records within one day on the 2-core dev VM (``pnm06a`` per
record: ~32 s).
"""

from __future__ import annotations

from dataclasses import dataclass

import erfa
import numpy as np

from . import constants as K
from .earth_orientation import (
    EopTable,
    celestial_pole_offsets_rad,
    celestial_pole_offsets_status,
    load_eop_table,
    polar_motion_rad,
    ut1_minus_utc_with_rate,
)
from .leap_seconds import load_leap_table
from .node_cache import NodeCache

__all__ = [
    "GcrsState",
    "BcrsState",
    "GRID_EPOCH_MJD",
    "MAX_GRID_STEP_S",
    "ERA_RATE_RAD_PER_UT1_S",
    "DAYS_PER_JULIAN_YEAR",
    "itrs_to_gcrs",
    "station_itrs_at_m",
    "external_potential_at_geocentre",
    "gcrs_to_bcrs_position_terms_m",
    "gcrs_to_bcrs",
]

_DAY_S = float(K.SECONDS_PER_DAY)
_C2 = K.C_M_PER_S**2

# Grid of the fast path: nodes at TT = GRID_EPOCH_MJD + k * grid_step_s.
GRID_EPOCH_MJD = 51544  # 2000-01-01T00:00:00 TT
# Largest accepted grid step (the error table is in the itrs_to_gcrs docstring).
MAX_GRID_STEP_S = 3 * 3600.0

# dERA/dUT1: 1.00273781191135448 revolutions per UT1 day (TN36 eq. 5.15).
ERA_RATE_RAD_PER_UT1_S = 2.0 * np.pi * 1.00273781191135448 / _DAY_S

# Julian year used for station velocities (TN36 ch. 4, "common practice").
DAYS_PER_JULIAN_YEAR = 365.25

_BLOCK = 8192  # records per block of the per-record evaluation


@dataclass(frozen=True)
class GcrsState:
    """GCRS position (m) and velocity (m/s, per TT second), TT-compatible
    units, and the per-record Earth-orientation status
    (``earth_orientation.EOP_*`` codes: the worst of the quantities used)."""

    pos_m: np.ndarray
    vel_m_per_s: np.ndarray
    eop_status: np.ndarray


@dataclass(frozen=True)
class BcrsState:
    """BCRS position (m) and velocity (m/s, per TDB second), TDB-compatible units."""

    pos_m: np.ndarray
    vel_m_per_s: np.ndarray


# ---------------------------------------------------------------------------
# ITRS -> GCRS
# ---------------------------------------------------------------------------
def _node_values(node_idx: np.ndarray, step_s: float, cip_offsets: bool, eop: EopTable) -> np.ndarray:
    """Slowly varying rotation parameters at grid nodes, (n_nodes, 4):
    [X, Y, s, s'] (rad).

    X, Y: CIP coordinates of IAU 2006/2000A from ERFA ``pnm06a`` + ``bpn2xy``,
    plus, with ``cip_offsets``, the observed dX, dY (TN36 sec. 5.5.4);
    s = ERFA ``s06(X_model, Y_model)`` (TN36 eq. 5.13) -- exactly the
    quantities from which ERFA ``c2i06a`` builds its matrix.  s' = ERFA
    ``sp00`` (TN36 eq. 5.13, -47 uas per century).  dX, dY are tabulated
    against UTC: the node's UTC is TT - 32.184 s - (TAI-UTC of the TT day);
    being off by the 1 s of a leap second moves them by nothing measurable.
    A node's values depend only on its index.
    """
    sec = node_idx.astype(np.float64) * step_s  # exact for integral steps, |sec| < 2**53
    day = np.floor(sec / _DAY_S)
    jd1 = day + (GRID_EPOCH_MJD + K.MJD_JD_OFFSET)
    jd2 = (sec - day * _DAY_S) / _DAY_S
    x, y = erfa.bpn2xy(erfa.pnm06a(jd1, jd2))
    s = erfa.s06(jd1, jd2, x, y)
    if cip_offsets:
        leap = load_leap_table()
        tt_mjd = day.astype(np.int64) + GRID_EPOCH_MJD
        k = np.clip(np.searchsorted(leap.start_mjd, tt_mjd, side="right") - 1, 0, None)
        utc_s = (sec - day * _DAY_S) - K.TT_MINUS_TAI_S - leap.tai_minus_utc_s[k].astype(np.float64)
        roll = np.floor(utc_s / _DAY_S)
        dx, dy, _ = celestial_pole_offsets_rad(tt_mjd + roll.astype(np.int64), utc_s - roll * _DAY_S, eop)
        x = x + dx
        y = y + dy
    return np.stack([x, y, s, erfa.sp00(jd1, jd2)], axis=1)


_NODES = NodeCache()


def _node_values_cached(node_idx: np.ndarray, step_s: float, cip_offsets: bool, eop: EopTable) -> np.ndarray:
    """:func:`_node_values`, remembered between calls for the same table (``node_cache``: no result changes)."""
    key = (float(step_s), bool(cip_offsets), eop.identity.get("sha256"))
    return _NODES.values(key, node_idx, lambda nodes: _node_values(nodes, step_s, cip_offsets, eop))


def _cubic_power_coefficients(f: np.ndarray) -> np.ndarray:
    """4-point Lagrange cubic through equispaced nodes f[j-1], f[j], f[j+1],
    f[j+2], written in powers of x = (t - t_j)/h in [0, 1):

        p(x) = c0 + c1 x + c2 x^2 + c3 x^3,
        c0 = f0,  c1 = -f_1/3 - f0/2 + f1 - f2/6,
        c2 = (f_1 + f1)/2 - f0,  c3 = (f2 - f_1)/6 + (f0 - f1)/2

    (the 4-point Lagrange formula, Abramowitz & Stegun eq. 25.2.13 -- number
    from memory -- expanded in x).  Input (n_nodes, m); output
    (4 * m, n_nodes - 3): row p * m + series holds the power-p coefficient,
    column j the interval between nodes j+1 and j+2.
    """
    fm, f0, f1, f2 = f[:-3], f[1:-2], f[2:-1], f[3:]
    c1 = -fm / 3.0 - f0 / 2.0 + f1 - f2 / 6.0
    c2 = (fm + f1) / 2.0 - f0
    c3 = (f2 - fm) / 6.0 + (f0 - f1) / 2.0
    return np.ascontiguousarray(np.concatenate([f0, c1, c2, c3], axis=1).T)


def _small_cos_sin(a):
    """cos a, sin a for |a| < 1e-4 rad by their Taylor series; the first
    omitted terms (a^6/720, a^5/120) are < 1e-26, far below float64 rounding
    of 1 (1.1e-16)."""
    a2 = a * a
    return 1.0 - a2 * (0.5 - a2 / 24.0), a * (1.0 - a2 / 6.0)


def _rotate_block(coef, m, row, xg, step_s, x_itrs, xp, yp, xp_rate, yp_rate,
                  cos_era, sin_era, era_rate, pos_out, vel_out):
    """Per-record part for one block of records.

    Interpolates X, Y, s, s' and their rates, then evaluates
    pos = Q R W x and vel = Q R W' x + Q R' W x + Q' R W x with the closed
    forms of TN36 eqs. 5.3 (W), 5.5 (R) and 5.10 (Q).
    """
    vals, rates = [], []
    tmp = np.empty(row.size)
    for j in range(m):  # m = 4 series: X, Y, s, s'
        acc = np.take(coef[3 * m + j], row)
        der = 3.0 * acc
        for p in (2, 1):
            np.take(coef[p * m + j], row, out=tmp)
            acc *= xg
            acc += tmp
            der *= xg
            der += p * tmp
        acc *= xg
        acc += np.take(coef[j], row)
        vals.append(acc)
        rates.append(der * (1.0 / step_s))  # d/dt = (d/dx) / h
    X, Y, s, sp = vals
    Xd, Yd, sd, spd = rates
    x0, x1, x2 = x_itrs[:, 0], x_itrs[:, 1], x_itrs[:, 2]

    # W x = R3(-s') R2(x_p) R1(y_p) x                          (TN36 eq. 5.3)
    cy, sy = _small_cos_sin(yp)
    cx, sx = _small_cos_sin(xp)
    cp, spp = _small_cos_sin(sp)
    a1 = cy * x1 + sy * x2
    a2 = cy * x2 - sy * x1
    b0 = cx * x0 - sx * a2
    u2 = sx * x0 + cx * a2
    u0 = cp * b0 - spp * a1
    u1 = spp * b0 + cp * a1
    # W' x, first order in the small angles (relative error ~1e-6 of ~1e-6 m/s)
    w0 = -xp_rate * x2 - spd * x1
    w1 = yp_rate * x2 + spd * x0
    w2 = xp_rate * x0 - yp_rate * x1

    # R x = R3(-ERA) x                                          (TN36 eq. 5.5)
    r0 = cos_era * u0 - sin_era * u1
    r1 = sin_era * u0 + cos_era * u1
    # g = R W' x + dERA/dt e3 x (R W x)
    g0 = (cos_era * w0 - sin_era * w1) - era_rate * r1
    g1 = (sin_era * w0 + cos_era * w1) + era_rate * r0
    g2 = w2

    # Q = M(X, Y) R3(s),  M = [[1-aX^2, -aXY, X], [-aXY, 1-aY^2, Y],
    #     [-X, -Y, 1-a(X^2+Y^2)]],  a = 1/(1 + cos d), cos d = sqrt(1-X^2-Y^2)
    #                                                        (TN36 eq. 5.10)
    cs, ss = _small_cos_sin(s)
    t0 = cs * r0 + ss * r1
    t1 = cs * r1 - ss * r0
    t2 = u2
    # R3(s) g + (dR3(s)/dt) r = R3(s) g + s' (t1, -t0, 0)
    h0 = cs * g0 + ss * g1 + sd * t1
    h1 = cs * g1 - ss * g0 - sd * t0
    h2 = g2
    XX, YY, XY = X * X, Y * Y, X * Y
    z = np.sqrt(1.0 - XX - YY)
    a = 1.0 / (1.0 + z)
    m00 = 1.0 - a * XX
    m01 = -a * XY
    m11 = 1.0 - a * YY
    m22 = 1.0 - a * (XX + YY)
    pos_out[:, 0] = m00 * t0 + m01 * t1 + X * t2
    pos_out[:, 1] = m01 * t0 + m11 * t1 + Y * t2
    pos_out[:, 2] = m22 * t2 - X * t0 - Y * t1
    # dM/dt from X', Y':  z' = -(X X' + Y Y')/z,  a' = -z' a^2
    xxd = X * Xd + Y * Yd
    ad = (xxd / z) * a * a
    n00 = -ad * XX - 2.0 * a * X * Xd
    n01 = -ad * XY - a * (Xd * Y + X * Yd)
    n11 = -ad * YY - 2.0 * a * Y * Yd
    n22 = -ad * (XX + YY) - 2.0 * a * xxd
    vel_out[:, 0] = (m00 * h0 + m01 * h1 + X * h2) + (n00 * t0 + n01 * t1 + Xd * t2)
    vel_out[:, 1] = (m01 * h0 + m11 * h1 + Y * h2) + (n01 * t0 + n11 * t1 + Yd * t2)
    vel_out[:, 2] = (m22 * h2 - X * h0 - Y * h1) + (n22 * t2 - Xd * t0 - Yd * t1)


def itrs_to_gcrs(
    x_itrs_m,
    utc_mjd,
    utc_sod_s,
    tt_mjd,
    tt_sod_s,
    grid_step_s: float = 3600.0,
    *,
    apply_cip_offsets: bool = True,
    eop: EopTable | None = None,
) -> GcrsState:
    """ITRS position(s) (m, (n, 3)) at the given instants -> GCRS position and
    velocity, IAU 2006/2000A, CIO based: x_GCRS = Q(t) R(t) W(t) x_ITRS
    (IERS TN36 eq. 5.1; see the module docstring for each factor).

    ``utc_*`` and ``tt_*`` are the same instants in UTC and TT (integer MJD
    day + seconds of day; a UTC second of day in [86400, 86401) is a leap
    second).  UTC indexes the Earth-orientation table; TT is the argument of
    the precession-nutation series (TT stands in for TDB, ERFA ``pnm06a``
    note 1) and of s'.

    Evaluation:

    * ERA exact per record: ERFA ``era00`` on UT1 = UTC + (UT1-UTC).
    * W exact per record: x_p, y_p interpolated linearly in the table at the
      record's UTC (as astropy and ERFA-based code do), W x from the closed
      form R3(-s') R2(x_p) R1(y_p) x (TN36 eq. 5.3).
    * Q: X, Y (+ dX, dY), s and s' are evaluated at TT grid nodes
      ``GRID_EPOCH_MJD + k grid_step_s`` and interpolated per record with
      4-point cubic Lagrange polynomials; Q is then built from the closed
      form of TN36 eq. 5.10 with the exact a = 1/(1 + cos d).

    ``apply_cip_offsets`` (default True): add the observed celestial pole
    offsets dX, dY to the model X, Y (TN36 sec. 5.5.4); they move a surface
    point by up to ~2 cm in 2025.  With False, Q equals ERFA ``c2i06a``
    (astropy's choice for ITRS -> GCRS).

    Velocity (m per TT second): the time derivative of the whole product,

        v = Q R W' x + Q (dR/dt) W x + Q' R W x,
        dR/dt = dERA/dt R3(-ERA) [e3 x],
        dERA/dt = 2 pi 1.00273781191135448 / 86400 s * (1 + d(UT1-UTC)/dUTC)

    (TN36 eq. 5.15 differentiated; the factor 1 + d(UT1-UTC)/dUTC = 1 - excess
    length of day / 86400 s comes from the slope of the table's UT1-UTC).
    Q' from the derivative of the interpolating cubics, W' from the slope of
    the linear x_p, y_p interpolation.  Beyond a rigid rotation about the CIP
    at the nominal rate, these terms reach (2025, surface): precession-
    nutation rate Q' ~5e-5 m/s, length of day ~7e-6 m/s, polar-motion rate
    ~1e-6 m/s.  All are kept; astropy's ``EarthLocation.get_gcrs_posvel``
    keeps none of them.

    Accuracy of the grid, measured: max |fast - exact per-instant ERFA| for
    points at 6378 km, 20,000 random instants of 2025, same EOP (exact path:
    ``c2t06a``; with offsets: ``c2ixys(X+dX, Y+dY, s06)``, ``era00``,
    ``pom00`` per instant, dX, dY interpolated linearly per instant):

        grid_step_s            900 s    1800 s   3600 s   7200 s   10800 s
        without dX, dY (m)     4e-9     5e-9     2.8e-8   4.3e-7   2.2e-6
        with dX, dY (m)        7.3e-6   1.5e-5   2.9e-5   5.2e-5   8.8e-5

    Without offsets the error is that of the cubic (~step^4, the 13.7-day
    nutation terms); with them it is dominated by the kinks of the linearly
    interpolated daily dX, dY table, which the cubic through hourly samples
    rounds off (~step^1).  Both are far inside 0.5 mm.  Steps above
    ``MAX_GRID_STEP_S`` are rejected (not validated).

    Not modelled (as in astropy): the diurnal and sub-diurnal tidal and
    libration variations of polar motion and UT1 (TN36 eq. 5.2 and ch. 8),
    which are not in the daily table: up to ~0.5 mas in the pole and ~0.05 ms
    in UT1, i.e. ~1-2 cm at the surface.

    ``eop_status`` per record: the worst (largest code) of the UT1-UTC and
    polar-motion statuses and, with ``apply_cip_offsets``, of dX, dY
    (EOP_MEASURED, EOP_PREDICTED, EOP_BEYOND_TABLE; beyond the table the
    edge row is held).
    """
    step = float(grid_step_s)
    if not (0.0 < step <= MAX_GRID_STEP_S):
        raise ValueError(f"grid_step_s must be in (0, {MAX_GRID_STEP_S}] s, got {grid_step_s}")
    eop = eop or load_eop_table()
    x_itrs = np.asarray(x_itrs_m, dtype=np.float64)
    if x_itrs.ndim != 2 or x_itrs.shape[1] != 3:
        raise ValueError(f"x_itrs_m must have shape (n, 3), got {x_itrs.shape}")
    n = x_itrs.shape[0]
    utc_d, utc_s, tt_d, tt_s = (
        np.broadcast_to(a, (n,))
        for a in (
            np.asarray(utc_mjd).astype(np.int64),
            np.asarray(utc_sod_s, dtype=np.float64),
            np.asarray(tt_mjd).astype(np.int64),
            np.asarray(tt_sod_s, dtype=np.float64),
        )
    )
    pos = np.empty((n, 3))
    vel = np.empty((n, 3))
    if n == 0:
        return GcrsState(pos, vel, np.zeros(0, dtype=np.uint8))
    if not (np.all(np.isfinite(utc_s)) and np.all(np.isfinite(tt_s)) and np.all(np.isfinite(x_itrs))):
        raise ValueError("itrs_to_gcrs inputs must be finite")

    # --- per record: UT1, ERA, polar motion, statuses ----------------------
    dut1, dut1_rate, status = ut1_minus_utc_with_rate(utc_d, utc_s, eop)
    xp, yp, xp_rate, yp_rate, pm_status = polar_motion_rad(utc_d, utc_s, eop, with_rate=True)
    np.maximum(status, pm_status, out=status)
    if apply_cip_offsets:
        np.maximum(status, celestial_pole_offsets_status(utc_d, utc_s, eop), out=status)
    if max(np.abs(xp).max(), np.abs(yp).max()) > 1e-4:
        raise ValueError("polar motion above 1e-4 rad (20 arcsec): corrupt Earth-orientation table")
    era = erfa.era00(utc_d.astype(np.float64) + K.MJD_JD_OFFSET, (utc_s + dut1) / _DAY_S)
    era_rate = ERA_RATE_RAD_PER_UT1_S * (1.0 + dut1_rate)
    cos_era = np.cos(era)
    sin_era = np.sin(era)

    # --- grid: q = (t_TT - epoch) / step, interval k = floor(q), x = q - k --
    q = ((tt_d - GRID_EPOCH_MJD).astype(np.float64) * _DAY_S + tt_s) / step
    kf = np.floor(q)
    k = kf.astype(np.int64)
    xg = q - kf
    kmin, kmax = int(k.min()), int(k.max())
    if kmax - kmin + 1 <= max(4096, n):  # dense: every interval kmin..kmax
        nodes = np.arange(kmin - 1, kmax + 3, dtype=np.int64)
        coef = _cubic_power_coefficients(_node_values_cached(nodes, step, apply_cip_offsets, eop))
        row = (k - kmin).astype(np.intp)
    else:  # sparse records over a long span: only the intervals in use
        intervals, row = np.unique(k, return_inverse=True)
        nodes = np.unique((intervals[:, None] + np.arange(-1, 3)).ravel())
        coef = _cubic_power_coefficients(_node_values_cached(nodes, step, apply_cip_offsets, eop))
        # interval j's first node (intervals[j] - 1) sits at position p of
        # ``nodes``; p..p+3 are its 4 consecutive nodes, so coefficient column p
        coef = np.ascontiguousarray(coef[:, np.searchsorted(nodes, intervals - 1)])
        row = row.astype(np.intp)
    if np.abs(coef[2]).max() > 1e-4 or np.abs(coef[3]).max() > 1e-4:
        raise ValueError("CIO/TIO locator above 1e-4 rad: date far outside the model's range")

    # Blocks of records (not a loop over records) keep the working set in
    # cache; every operation is element-wise, so results do not depend on it.
    for lo in range(0, n, _BLOCK):
        sl = slice(lo, lo + _BLOCK)
        _rotate_block(coef, 4, row[sl], xg[sl], step, x_itrs[sl], xp[sl], yp[sl], xp_rate[sl],
                      yp_rate[sl], cos_era[sl], sin_era[sl], era_rate[sl], pos[sl], vel[sl])
    return GcrsState(pos, vel, status.astype(np.uint8))


# ---------------------------------------------------------------------------
# Plate motion
# ---------------------------------------------------------------------------
def station_itrs_at_m(pos_ref_m, vel_m_per_yr, ref_epoch_mjd, tt_mjd, tt_sod_s) -> np.ndarray:
    """Station ITRS position at an epoch from a reference position and a
    constant velocity (linear plate motion, IERS TN36 ch. 4, eq. 4.2 --
    number from memory):

        X(t) = X0 + Xdot (t - t0),

    with t - t0 in Julian years of 365.25 days ("common practice", TN36
    ch. 4).  ``ref_epoch_mjd`` is t0 as a (float) MJD, e.g. 57388.0 for
    2016.0 of an ITRF2014-style solution; t is (tt_mjd, tt_sod_s).  The time
    scale of t0 matters at the ms level, i.e. not at all (0.1 m/yr x 1 ms
    = 3e-12 m).  Solid-Earth tides, loading and other non-linear station
    motion are not part of this function.
    """
    pos0 = np.asarray(pos_ref_m, dtype=np.float64)
    vel = np.asarray(vel_m_per_yr, dtype=np.float64)
    t0 = np.asarray(ref_epoch_mjd, dtype=np.float64)
    whole = np.floor(t0)
    days = (np.asarray(tt_mjd).astype(np.int64) - whole.astype(np.int64)).astype(np.float64) + (
        np.asarray(tt_sod_s, dtype=np.float64) / _DAY_S - (t0 - whole)
    )
    return pos0 + vel * (days / DAYS_PER_JULIAN_YEAR)[..., None]


# ---------------------------------------------------------------------------
# GCRS -> BCRS
# ---------------------------------------------------------------------------
def external_potential_at_geocentre(earth_pos_bcrs_m, bodies) -> np.ndarray:
    """Newtonian potential of external bodies at the geocentre (m^2/s^2),
    positive convention:  U_ext(x_E) = sum_B GM_B / |x_B - x_E|
    (TN36 ch. 10 and 11, IAU 2000 Resolution B1.3 "external potential").

    ``bodies``: iterable of ``(body_pos_bcrs_m, gm_m3_per_s2)``, positions
    (n, 3) or (3,), in the same frame, units and instant as the Earth's.  Use
    GM values compatible with the ephemeris time scale (TDB-compatible with a
    TDB ephemeris, TN36 Table 1.1).  The Sun gives ~8.9e8 m^2/s^2 at 1 au
    (U/c^2 ~ 1e-8); the Moon 1.3e4, Jupiter ~2e5 (U/c^2 ~ 2e-12).
    """
    xe = np.asarray(earth_pos_bcrs_m, dtype=np.float64)
    u = np.zeros(xe.shape[:-1])
    for body_pos, gm in bodies:  # a loop over bodies, not over records
        d = np.asarray(body_pos, dtype=np.float64) - xe
        u = u + float(gm) / np.sqrt(np.einsum("...i,...i->...", d, d))
    return u


def _dot(a, b):
    return np.einsum("...i,...i->...", a, b)


def gcrs_to_bcrs_position_terms_m(
    pos_gcrs_m, earth_vel_bcrs_m_per_s, external_potential_m2_per_s2, earth_acc_bcrs_m_per_s2=None
) -> dict:
    """The separate c^-2 terms of x_BCRS - x_E - X (m, each (n, 3)).

    Keys: ``"scale_lc"`` = -L_C X, ``"potential"`` = -(U_ext/c^2) X,
    ``"lorentz"`` = -(v_E.X) v_E / (2 c^2), and, when the Earth's barycentric
    acceleration a_E is given, ``"acceleration"`` = -[X (a_E.X) - a_E |X|^2/2]/c^2.
    See :func:`gcrs_to_bcrs` for the equation.
    """
    x = np.asarray(pos_gcrs_m, dtype=np.float64)
    v = np.asarray(earth_vel_bcrs_m_per_s, dtype=np.float64)
    u = np.asarray(external_potential_m2_per_s2, dtype=np.float64)
    terms = {
        "scale_lc": -K.L_C * x,
        "potential": -(u / _C2)[..., None] * x,
        "lorentz": -(0.5 / _C2) * _dot(v, x)[..., None] * v,
    }
    if earth_acc_bcrs_m_per_s2 is not None:
        a = np.asarray(earth_acc_bcrs_m_per_s2, dtype=np.float64)
        terms["acceleration"] = -(x * _dot(a, x)[..., None] - 0.5 * a * _dot(x, x)[..., None]) / _C2
    return terms


def bcrs_offset_m(pos_gcrs_m, earth_vel_bcrs_m_per_s, external_potential_m2_per_s2,
                  earth_acc_bcrs_m_per_s2=None) -> np.ndarray:
    """x_BCRS - x_E of :func:`gcrs_to_bcrs`: X plus its c^-2 terms, formed at the point's own scale
    (~6e6 m for a station), so that differences of it keep that scale's precision."""
    x = np.asarray(pos_gcrs_m, dtype=np.float64)
    terms = gcrs_to_bcrs_position_terms_m(x, earth_vel_bcrs_m_per_s, external_potential_m2_per_s2,
                                          earth_acc_bcrs_m_per_s2)
    corr = terms["scale_lc"] + terms["potential"] + terms["lorentz"]
    if "acceleration" in terms:
        corr = corr + terms["acceleration"]
    return x + corr


def gcrs_to_bcrs(
    pos_gcrs_m,
    vel_gcrs_m_per_s,
    earth_pos_bcrs_m,
    earth_vel_bcrs_m_per_s,
    external_potential_m2_per_s2,
    earth_acc_bcrs_m_per_s2=None,
) -> BcrsState:
    """GCRS position/velocity of a point near the Earth -> BCRS, to O(c^-2).

    Position (IERS TN36 ch. 11, ranging techniques, eq. 11.19 -- equation
    number and exact printed form from memory; the form below is the IAU 2000
    Resolution B1.3 BCRS <-> GCRS transformation, Soffel et al. 2003, AJ 126,
    2687, rescaled to TT/TDB-compatible units):

        x = x_E + (1 - U_ext/c^2 - L_C) X - (v_E.X) v_E / (2 c^2)
                [ - (X (a_E.X) - a_E |X|^2 / 2) / c^2   if a_E is given ]

    * Units: X (input) in TT-compatible GCRS units (what the ITRS and
      :func:`itrs_to_gcrs` give), x_E, v_E, x (output) in TDB-compatible
      BCRS units (a TDB ephemeris such as DE421).  With TCG/TCB-compatible
      quantities the L_C term is absent; it is the ratio
      (1 - L_B)/(1 - L_G) = 1 - L_C to first order (TN36 Table 1.1:
      1 - L_B = (1 - L_C)(1 - L_G)).
    * Simultaneity: X must be the point's GCRS position at the TT of the
      event and x_E, v_E the Earth's at the TDB of *the same event*, i.e.
      TDB - TT including the topocentric term (~ v_E.X/c^2, up to 2.1 us:
      ``time_scales.tdb_minus_tt_s`` with the site arguments).  Taking x_E
      at the geocentric TDB instead displaces x by v_E (v_E.X)/c^2, up to
      6.3 cm at the surface.
    * Magnitudes at |X| = 6378 km: L_C X 9.4 cm; U_ext X/c^2 6.2-6.4 cm
      (Sun at 0.983-1.017 au); Lorentz term up to 3.3 cm; acceleration term
      (a_E ~ 6e-3 m/s^2) <= 1.5 a_E |X|^2/c^2 = 4e-6 m (1.2e-4 m at
      geostationary distance) -- neglected when a_E is not given.
    * Neglected: O(c^-4) terms, ~(v/c)^4 |X| ~ 1e-9 m.

    Velocity (per TDB second), the TDB derivative of the position formula:

        v = v_E + [ (1 - U/c^2 - L_C) V - (v_E.V) v_E / (2 c^2) ] dT/dt
                  [ - ((a_E.X) v_E + (v_E.X) a_E)/(2 c^2)
                    - (V (a_E.X) + X (a_E.V) - a_E (X.V)) dT/dt / c^2  if a_E given ]
        dT/dt = dTT/dTDB at the point
              = 1 + L_C - (v_E^2/2 + U)/c^2 - (v_E.V)/c^2 [ - (a_E.X)/c^2 ],

    V = dX/dTT.  dT/dt follows from TCB - TCG = c^-2 [ integral (v_E^2/2 +
    U_ext) dt + v_E.(x - x_E) ] (TN36 eq. 10.3 -- number from memory)
    differentiated along the point's world line, with 1 - L_B =
    (1 - L_C)(1 - L_G).  dT/dt - 1 is < 5e-10, i.e. < 2.5e-7 m/s for a surface
    station.  Neglected: the time derivative of U_ext, (dU/dt) X/c^2
    < 3e-13 m/s at the surface (|dU/dt| <= GM_sun e v_E / r^2 ~ 3e-3 m^2/s^3),
    and, when a_E is not given, the acceleration terms, < 1e-11 m/s
    (a_E |v_E| |X| / c^2 = 6e-3 * 3e4 * 6.4e6 / 9e16).
    """
    x = np.asarray(pos_gcrs_m, dtype=np.float64)
    vx = np.asarray(vel_gcrs_m_per_s, dtype=np.float64)
    xe = np.asarray(earth_pos_bcrs_m, dtype=np.float64)
    ve = np.asarray(earth_vel_bcrs_m_per_s, dtype=np.float64)
    u = np.asarray(external_potential_m2_per_s2, dtype=np.float64)

    pos = xe + bcrs_offset_m(x, ve, u, earth_acc_bcrs_m_per_s2)

    ve_v = _dot(ve, vx)
    dtdt = 1.0 + K.L_C - (0.5 * _dot(ve, ve) + u) / _C2 - ve_v / _C2
    scale = 1.0 - u / _C2 - K.L_C
    inner = scale[..., None] * vx - (0.5 / _C2) * ve_v[..., None] * ve
    extra = 0.0
    if earth_acc_bcrs_m_per_s2 is not None:
        a = np.asarray(earth_acc_bcrs_m_per_s2, dtype=np.float64)
        a_x = _dot(a, x)
        dtdt = dtdt - a_x / _C2
        inner = inner - (vx * a_x[..., None] + x * _dot(a, vx)[..., None] - a * _dot(x, vx)[..., None]) / _C2
        extra = -(a_x[..., None] * ve + _dot(ve, x)[..., None] * a) / (2.0 * _C2)
    vel = ve + (inner * dtdt[..., None] + extra)
    return BcrsState(pos, vel)
