"""Planetary ephemeris (DE421 from skyfield-data through jplephem).

Independent reference: astropy ``get_body_barycentric_posvel`` pointed at the
same local ``de421.bsp`` (astropy opens a local path directly with
``jplephem.spk.SPK.open``; ``configure_offline`` in conftest sets
``allow_internet = False``, so any download attempt would raise).
"""
from __future__ import annotations

import hashlib
import importlib.metadata
import pickle

import erfa
import numpy as np
import pytest

from stages.physics.ephemeris import (
    BODIES,
    DE421_EMRAT,
    DE421_HEADER_GM_M3_PER_S2,
    GM_M3_PER_S2,
    de421_path,
    load_planetary_ephemeris,
)

# astropy's name or kernel specifier for each of our bodies: same SPK chains,
# written out here from the DE421 segment list (NAIF ids), not taken from the module
ASTROPY_BODY = {
    "sun": "sun",
    "mercury": "mercury",  # astropy: (0,1)+(1,199)
    "venus": "venus",  # astropy: (0,2)+(2,299)
    "earth": "earth",
    "moon": "moon",
    "emb": "earth-moon-barycenter",
    "mars": [(0, 4), (4, 499)],  # astropy's "mars" is the barycentre; we use the body centre
    "jupiter": "jupiter",
    "saturn": "saturn",
    "uranus": "uranus",
    "neptune": "neptune",
}

MJD_1950 = int(erfa.cal2jd(1950, 1, 1)[1])  # erfa cal2jd gives (2400000.5, MJD)
MJD_2050 = int(erfa.cal2jd(2050, 1, 1)[1])


@pytest.fixture(scope="module")
def eph():
    return load_planetary_ephemeris()


@pytest.fixture(scope="module")
def instants():
    rng = np.random.default_rng(421)
    n = 3000
    mjd = rng.integers(MJD_1950, MJD_2050, n).astype(np.int32)
    sod = rng.uniform(0.0, 86400.0, n)
    return mjd, sod


def test_identity(eph):
    ident = eph.identity
    # skyfield-data ships DE421 as de421.bsp (its package data); the segment
    # descriptors of the file name the ephemeris "DE-0421" (NAIF SPK Required Reading)
    assert ident["source"] == "skyfield-data"
    assert ident["file"] == "de421.bsp"
    assert ident["name"] == "DE421"
    assert ident["package_version"] == importlib.metadata.version("skyfield-data")
    # sha256 recomputed here with hashlib
    assert ident["sha256"] == hashlib.sha256(de421_path().read_bytes()).hexdigest()
    assert load_planetary_ephemeris() is eph  # cached: opened once


@pytest.mark.parametrize("body", BODIES)
def test_posvel_matches_astropy(eph, instants, body):
    """< 1 mm and < 1e-6 m/s vs astropy on the same file, 1950-2050 TDB
    (reference library astropy.coordinates.get_body_barycentric_posvel)."""
    import astropy.units as u
    from astropy.coordinates import get_body_barycentric_posvel, solar_system_ephemeris
    from astropy.time import Time

    mjd, sod = instants
    t = Time(mjd.astype(np.float64) + 2400000.5, sod / 86400.0, format="jd", scale="tdb")
    with solar_system_ephemeris.set(str(de421_path())):
        p_ref, v_ref = get_body_barycentric_posvel(ASTROPY_BODY[body], t)
    p_ref_m = p_ref.xyz.to_value(u.m).T
    v_ref_m_per_s = v_ref.xyz.to_value(u.m / u.s).T

    pos_m, vel_m_per_s = eph.posvel_m(body, mjd, sod)
    assert pos_m.shape == (mjd.size, 3) and vel_m_per_s.shape == (mjd.size, 3)
    assert np.max(np.abs(pos_m - p_ref_m)) < 1e-3
    assert np.max(np.abs(vel_m_per_s - v_ref_m_per_s)) < 1e-6


def test_earth_moon_barycentre_relation(eph, instants):
    """earth = emb - (moon - earth)/(1 + EMRAT), EMRAT = 81.30056907
    (DE421 header constant, references sheet; definition of the EMB)."""
    emrat = 81.30056907
    mjd, sod = instants
    pe, ve = eph.posvel_m("earth", mjd, sod)
    pm, vm = eph.posvel_m("moon", mjd, sod)
    pb, vb = eph.posvel_m("emb", mjd, sod)
    assert np.max(np.abs(pe - (pb - (pm - pe) / (1.0 + emrat)))) < 1e-3
    assert np.max(np.abs(ve - (vb - (vm - ve) / (1.0 + emrat)))) < 1e-6
    # geometry sanity: geocentric Moon distance within its known range
    # (perigee ~356,000 km, apogee ~407,000 km; from memory)
    d_km = np.linalg.norm(pm - pe, axis=1) / 1e3
    assert d_km.min() > 350_000 and d_km.max() < 410_000
    assert DE421_EMRAT == pytest.approx(emrat, rel=1e-10)  # references sheet value, rounded


def test_span(eph):
    """DE421 in skyfield-data covers 1899-07-29 .. 2053-10-09 TDB (file's
    segment descriptors as listed by jplephem); MJDs from erfa.cal2jd."""
    first = int(erfa.cal2jd(1899, 7, 29)[1])
    last = int(erfa.cal2jd(2053, 10, 9)[1])
    assert eph.span_mjd == (pytest.approx(first, abs=1e-9), pytest.approx(last, abs=1e-9))
    mjd = np.array([first - 1, first, first, last - 1, last, last, last + 400, 51544])
    sod = np.array([86399.0, 0.0, 1.0, 86399.0, 0.0, 1.0, 0.0, 0.0])
    expected = np.array([False, True, True, True, True, False, False, True])
    np.testing.assert_array_equal(eph.in_span(mjd, sod), expected)
    pos, vel = eph.posvel_m("earth", mjd, sod)
    np.testing.assert_array_equal(np.isfinite(pos).all(axis=1), expected)
    np.testing.assert_array_equal(np.isfinite(vel).all(axis=1), expected)
    assert not eph.in_span(np.array([51544]), np.array([np.nan]))[0]  # non-finite time


def test_gm_values():
    # DE421 GM_Sun in SI equals IERS TN36 Table 1.1 TDB-compatible GM_Sun
    assert DE421_HEADER_GM_M3_PER_S2["GMS"] == pytest.approx(1.32712440041e20, rel=1e-11)
    assert GM_M3_PER_S2["sun"] == pytest.approx(1.32712440041e20, rel=1e-11)
    # TN36 Table 1.1: GM_Earth TT-compatible 3.986004415e14
    assert GM_M3_PER_S2["earth"] == pytest.approx(3.986004415e14, rel=1e-12)
    # TN36 Table 1.1: Moon/Earth mass ratio 0.0123000371 (from memory).  Our
    # Earth GM (TN36) is 1.3e-8 larger than DE421's own, hence rel=3e-8.
    assert GM_M3_PER_S2["moon"] / GM_M3_PER_S2["earth"] == pytest.approx(0.0123000371, rel=3e-8)
    assert GM_M3_PER_S2["moon"] + GM_M3_PER_S2["earth"] == pytest.approx(GM_M3_PER_S2["emb"], rel=3e-8)
    # Jupiter system GM 1.26712765e17 (DE421/DE405 value, from memory)
    assert GM_M3_PER_S2["jupiter"] == pytest.approx(1.26712765e17, rel=1e-8)
    assert set(GM_M3_PER_S2) == set(BODIES)


def test_gm_sun_consistent_with_earth_orbit(eph):
    """Kepler's third law (common practice): the EMB's mean motion from
    DE421 over one year matches sqrt(GM_Sun/a^3) with a = mean distance
    (~1 AU), to the ~1e-3 level of planetary perturbations."""
    mjd = np.arange(51544, 51544 + 366, dtype=np.int32)
    pos, _ = eph.posvel_m("emb", mjd, np.zeros(mjd.size))
    psun, _ = eph.posvel_m("sun", mjd, np.zeros(mjd.size))
    r = pos - psun
    a_m = np.linalg.norm(r, axis=1).mean()
    n_rad_per_s = np.sqrt((GM_M3_PER_S2["sun"] + GM_M3_PER_S2["emb"]) / a_m**3)
    year_s = 2 * np.pi / n_rad_per_s
    # sidereal year 365.256363 days (from memory)
    assert year_s / 86400.0 == pytest.approx(365.256363, rel=2e-3)


def test_batch_independent_and_scalar(eph, instants):
    """Results must not depend on the batch (pipeline contract, design.md)."""
    mjd, sod = instants
    big_mjd = np.tile(mjd, 4)  # > one internal block
    big_sod = np.tile(sod, 4)
    p_all, v_all = eph.posvel_m("moon", big_mjd, big_sod)
    p_one, v_one = eph.posvel_m("moon", mjd[7], sod[7])
    assert p_one.shape == (1, 3)
    np.testing.assert_array_equal(p_one[0], p_all[7])
    np.testing.assert_array_equal(v_one[0], v_all[7 + 2 * mjd.size])


def test_unknown_body_and_pickle(eph):
    with pytest.raises(ValueError, match="unknown body 'pluto'"):
        eph.posvel_m("pluto", 51544, 0.0)
    clone = pickle.loads(pickle.dumps(eph))
    assert clone.identity == eph.identity
    np.testing.assert_array_equal(clone.posvel_m("mars", 60000, 1.5)[0], eph.posvel_m("mars", 60000, 1.5)[0])
