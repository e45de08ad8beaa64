"""A station's barycentric state at an event, and the times of an event given in TDB.

Composes the pieces of ``earth_rotation`` (ITRS -> GCRS -> BCRS, IERS TN36
ch. 5 and 11), ``ephemeris`` (the Earth's and the perturbing bodies'
barycentric states) and ``time_scales`` (TDB -> TT -> TAI -> UTC).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stages.physics import time_scales as ts
from stages.physics.earth_rotation import (BcrsState, GcrsState, bcrs_offset_m, external_potential_at_geocentre,
                                          gcrs_to_bcrs, itrs_to_gcrs)
from stages.physics.ephemeris import GM_M3_PER_S2, PlanetaryEphemeris
from stages.physics.leap_seconds import LeapTable, tai_minus_utc_s

#: bodies whose potential enters U_ext at the geocentre (IERS TN36 ch. 11).  U_ext X / c^2 at
#: the Earth's surface: Sun 6.3 cm, Jupiter <= 0.02 mm, Saturn, Venus, Moon, Mars < 3 um each
#: (GM/r at their closest; recomputed from DE421 GM values) -- only the Sun and Jupiter are kept.
EXTERNAL_BODIES = ("sun", "jupiter")


@dataclass(frozen=True)
class StationState:
    gcrs: GcrsState
    bcrs: BcrsState
    #: x_BCRS - x_E at the station's ~6e6 m scale (``earth_rotation.bcrs_offset_m``): with a displacement
    #: of the Earth it gives the station's barycentric displacement between two events without forming
    #: two positions of ~1.5e11 m (whose float64 rounding, 3e-5 m, would dominate a Doppler count)
    offset_m: np.ndarray


def station_state(x_itrs_m, utc_mjd, utc_sod_s, tt_mjd, tt_sod_s, tdb_mjd, tdb_sod_s,
                  planetary: PlanetaryEphemeris, grid_step_s: float = 3600.0,
                  apply_cip_offsets: bool = True) -> StationState:
    """GCRS and BCRS state of ITRS points at events given in UTC, TT and (topocentric) TDB.

    x_BCRS = x_E(TDB) + (1 - U_ext/c^2 - L_C) X - (v_E.X) v_E / (2 c^2)
    (IERS TN36 ch. 11; see ``earth_rotation.gcrs_to_bcrs``), with the
    Earth's state from the planetary ephemeris at the event's TDB.
    """
    gcrs = itrs_to_gcrs(x_itrs_m, utc_mjd, utc_sod_s, tt_mjd, tt_sod_s, grid_step_s=grid_step_s,
                        apply_cip_offsets=apply_cip_offsets)
    earth_pos, earth_vel = planetary.posvel_m("earth", tdb_mjd, tdb_sod_s)
    bodies = [(planetary.posvel_m(b, tdb_mjd, tdb_sod_s)[0], GM_M3_PER_S2[b]) for b in EXTERNAL_BODIES]
    u_ext = external_potential_at_geocentre(earth_pos, bodies)
    bcrs = gcrs_to_bcrs(gcrs.pos_m, gcrs.vel_m_per_s, earth_pos, earth_vel, u_ext)
    return StationState(gcrs, bcrs, bcrs_offset_m(gcrs.pos_m, earth_vel, u_ext))


def tai_to_utc(tai_mjd, tai_sod_s, leap: LeapTable):
    """TAI -> UTC (MJD, seconds of day); inside a leap second the seconds of day reach 86400..86401.

    UTC = TAI - dAT(UTC day) (IERS Bulletin C).  The UTC day is found by
    trying the TAI day's dAT, then the candidate day's; if the candidate
    day's dAT still disagrees, the instant lies in the leap second that ends
    the previous UTC day.
    """
    mjd = np.asarray(tai_mjd, dtype=np.int64)
    sod = np.asarray(tai_sod_s, dtype=float)
    d1 = tai_minus_utc_s(leap, mjd).astype(float)
    m1, s1 = ts.add_seconds(mjd, sod, -d1)
    d2 = tai_minus_utc_s(leap, m1).astype(float)
    m2, s2 = ts.add_seconds(mjd, sod, -d2)
    d3 = tai_minus_utc_s(leap, m2).astype(float)
    in_leap = d3 != d2
    m2 = np.where(in_leap, m2 - 1, m2)
    s2 = np.where(in_leap, s2 + 86400.0, s2)
    return m2.astype(np.int64), s2


def times_from_tdb(tdb_mjd, tdb_sod_s, site_itrs_m, leap: LeapTable, grid_step_s: float = 3600.0):
    """(utc_mjd, utc_sod_s, tt_mjd, tt_sod_s, tdb_minus_tt_s) of events given in (topocentric) TDB at ITRS sites.

    Inverse of the time_scales stage: TT = TDB - (TDB - TT)(TT).  A first
    pass with the geocentric series gives TT to ~2 us (the size of the
    topocentric terms), enough for UTC and UT1 (TAI = TT - 32.184 s, IAU 1991
    Res. A4; UTC from ``tai_to_utc``; UT1 - UTC from the IERS table); the
    second pass evaluates the series with the site terms at that UT1.  The
    series changes by < 2e-8 s per second, so the 2 us error of the first
    pass leaves < 1e-13 s in TT.
    """
    from stages.physics.earth_orientation import ut1_minus_utc_s

    mjd = np.asarray(tdb_mjd, dtype=np.int64)
    sod = np.asarray(tdb_sod_s, dtype=float)
    bad = ~np.isfinite(sod) | ~np.isfinite(site_itrs_m).all(axis=1)   # unsolved records: NaN out, no error
    sod = np.where(bad, 0.0, sod)
    site_itrs_m = np.where(bad[:, None], 6.4e6, site_itrs_m)
    d0 = ts.tdb_minus_tt_s(mjd, sod, grid_step_s=grid_step_s)
    tt_mjd, tt_sod = ts.add_seconds(mjd, sod, -d0)
    utc_mjd, utc_sod = tai_to_utc(*ts.add_seconds(tt_mjd, tt_sod, -32.184), leap)
    dut, _ = ut1_minus_utc_s(utc_mjd, utc_sod)
    elong, u_km, v_km = ts.itrs_to_dtdb_site(site_itrs_m[:, 0], site_itrs_m[:, 1], site_itrs_m[:, 2])
    d = ts.tdb_minus_tt_s(tt_mjd, tt_sod, (utc_sod + dut) / 86400.0, elong, u_km, v_km, grid_step_s=grid_step_s)
    tt_mjd, tt_sod = ts.add_seconds(mjd, sod, -d)
    utc_mjd, utc_sod = tai_to_utc(*ts.add_seconds(tt_mjd, tt_sod, -32.184), leap)
    nan = np.where(bad, np.nan, 0.0)
    return utc_mjd, utc_sod + nan, tt_mjd, tt_sod + nan, d + nan


def tdb_from_tt(tt_mjd, tt_sod_s, site_itrs_m, leap: LeapTable, grid_step_s: float = 3600.0):
    """(tdb_mjd, tdb_sod_s, tdb_minus_tt_s) of events given in TT at ITRS sites.

    The forward relation of the time_scales stage: UTC from TT (TAI = TT -
    32.184 s, IAU 1991 Res. A4; ``tai_to_utc``), UT1 from the IERS table, and
    TDB - TT with the topocentric terms at the site (``time_scales.tdb_minus_tt_s``).
    Used for the start of a Doppler count, which the station's clock keeps in
    TT: start = end - count, whatever leap second lies between them.
    """
    from stages.physics.earth_orientation import ut1_minus_utc_s

    mjd = np.asarray(tt_mjd, dtype=np.int64)
    sod = np.asarray(tt_sod_s, dtype=float)
    bad = ~np.isfinite(sod) | ~np.isfinite(site_itrs_m).all(axis=1)
    sod = np.where(bad, 0.0, sod)
    site_itrs_m = np.where(bad[:, None], 6.4e6, site_itrs_m)
    utc_mjd, utc_sod = tai_to_utc(*ts.add_seconds(mjd, sod, -32.184), leap)
    dut, _ = ut1_minus_utc_s(utc_mjd, utc_sod)
    elong, u_km, v_km = ts.itrs_to_dtdb_site(site_itrs_m[:, 0], site_itrs_m[:, 1], site_itrs_m[:, 2])
    d = ts.tdb_minus_tt_s(mjd, sod, (utc_sod + dut) / 86400.0, elong, u_km, v_km, grid_step_s=grid_step_s)
    tdb_mjd, tdb_sod = ts.add_seconds(mjd, sod, d)
    nan = np.where(bad, np.nan, 0.0)
    return tdb_mjd, tdb_sod + nan, d + nan
