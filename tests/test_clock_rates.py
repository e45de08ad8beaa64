"""Tests of stages.physics.clock_rates (clock rates, eccentricity term,
accumulated proper time, Sagnac correction).

Every check names its outside source in a comment.  "references.md" is the
project's sheet /work/shared/references.md; its "recomputed" values are
recomputed here from the IERS 2010 constants (IERS Technical Note 36,
Table 1.1, "TN36") and compared with the listed figures to their printed
digits.  Published documents: TN36 (sections 5 and 10); N. Ashby 2003,
Living Rev. Relativity 6, 1 ("Ashby 2003"); IS-GPS-200 (interface
specification); Pound & Rebka 1960, PRL 4, 337; Vessot et al. 1980, PRL 45,
2081.  Reference libraries: pyerfa (IAU 2006/2000A pole, geodetic ->
geocentric) and DE421 through the project's ephemeris reader (itself checked
against jplephem in test_ephemeris.py).
"""

from __future__ import annotations

import erfa
import numpy as np
import pytest

from stages.physics import clock_rates as cr
from stages.physics import constants as K

C = K.C_M_PER_S  # TN36 Table 1.1 (defining)
C2 = C * C
GM = K.GM_EARTH_TT_M3_PER_S2  # TN36 Table 1.1, TT-compatible
A_E = K.EARTH_EQUATORIAL_RADIUS_M  # TN36 Table 1.1
DAY_S = 86400.0  # SI seconds per day (definition)
A_NAV_M = 26_561_750.0  # references.md "Clocks": navigation-satellite semi-major axis
OMEGA = 2.0 * np.pi * 1.00273781191135448 / DAY_S  # TN36 eq. 5.15 (d ERA / d UT1)


def _round_sig(x, digits):
    """x rounded to ``digits`` significant digits (for "printed digits" checks)."""
    return float(f"{x:.{digits - 1}e}")


# ---------------------------------------------------------------------------
# Kepler orbits
# ---------------------------------------------------------------------------
def test_kepler_equation_and_two_body_invariants():
    t = np.linspace(0.0, 2 * DAY_S, 2001)
    for e in (0.0, 0.01, 0.3, 0.9, 0.99):
        a = A_NAV_M
        pos, vel, E = cr.kepler_state(a, e, 0.96, 1.1, -0.4, 2.5, 100.0, t, GM)
        n = np.sqrt(GM / a**3)
        M = 2.5 + n * (t - 100.0)
        # Kepler's equation M = E - e sin E (definition)
        np.testing.assert_allclose(E - e * np.sin(E), M, rtol=0, atol=1e-12)
        r = np.linalg.norm(pos, axis=1)
        v2 = np.einsum("ij,ij->i", vel, vel)
        # vis-viva v^2/2 - GM/r = -GM/(2a) (two-body energy, textbook, common practice)
        np.testing.assert_allclose(0.5 * v2 - GM / r, -GM / (2 * a), rtol=1e-12)
        # |r x v| = sqrt(GM a (1 - e^2)) (angular momentum, textbook, common practice)
        h = np.linalg.norm(np.cross(pos, vel), axis=1)
        np.testing.assert_allclose(h, np.sqrt(GM * a * (1 - e * e)), rtol=1e-12)
        # r = a (1 - e cos E) (textbook, common practice)
        np.testing.assert_allclose(r, a * (1 - e * np.cos(E)), rtol=1e-13)
    # velocity is the time derivative of position (5-point central difference, h = 2 s:
    # truncation ~h^4 n^4 v/30 ~ 1e-12 m/s, rounding ~1e-8 m/s; common practice)
    tc = np.array([1234.5, 20000.0, 70000.0])
    h = 2.0

    def p(dt):
        return cr.kepler_state(A_NAV_M, 0.3, 0.96, 1.1, -0.4, 2.5, 0.0, tc + dt, GM)[0]

    _, v, _ = cr.kepler_state(A_NAV_M, 0.3, 0.96, 1.1, -0.4, 2.5, 0.0, tc, GM)
    deriv = (p(-2 * h) - 8 * p(-h) + 8 * p(h) - p(2 * h)) / (12 * h)
    np.testing.assert_allclose(deriv, v, rtol=0, atol=1e-7)
    with pytest.raises(ValueError):
        cr.solve_kepler_rad(0.3, 1.0)


# ---------------------------------------------------------------------------
# Navigation-satellite clock: rates per day and the factory offset
# ---------------------------------------------------------------------------
def test_navigation_satellite_clock_rates():
    t = np.linspace(0.0, DAY_S, 97)
    pos, vel, _ = cr.kepler_state(A_NAV_M, 0.0, np.radians(55.0), 0.3, 0.0, 0.0, 0.0, t, GM)
    terms = cr.clock_rate_terms(pos, vel)
    us_per_day = DAY_S * 1e6
    # references.md "Clocks" (recomputed from IERS 2010 constants): gravitational +45.79,
    # velocity -7.21, net +38.575 us/day = 4.4647e-10.  Recomputed here from TN36 Table 1.1:
    grav_ref = (K.L_G - GM / (A_NAV_M * C2)) * us_per_day
    vel_ref = -0.5 * GM / A_NAV_M / C2 * us_per_day  # circular orbit: v^2 = GM/a
    assert round(grav_ref, 2) == 45.79 and round(vel_ref, 2) == -7.21
    assert round(grav_ref + vel_ref, 3) == 38.575
    np.testing.assert_allclose(terms["gravitational"] * us_per_day, grav_ref, rtol=1e-12)
    np.testing.assert_allclose(terms["velocity"] * us_per_day, vel_ref, rtol=1e-9)
    net = terms["gravitational"] + terms["velocity"]
    assert np.all(np.round(net * us_per_day, 3) == 38.575)  # references.md, printed digits
    # net rate 4.4647e-10 (references.md) = minus the factory frequency offset -4.4647e-10
    # of IS-GPS-200 section 3.3.1.1 (confirmed)
    assert all(_round_sig(x, 5) == 4.4647e-10 for x in net)
    assert _round_sig(-float(cr.kepler_secular_rate(A_NAV_M)), 5) == -4.4647e-10
    # IS-GPS-200 section 3.3.1.1 (from memory): 10.23 MHz nominal -> 10.22999999543 MHz in the factory
    assert round(10.23e6 * (1.0 - float(cr.kepler_secular_rate(A_NAV_M))), 5) == 10_229_999.99543
    # J2 at GNSS radius: |U_J2|/c^2 <= GM J2 a_E^2/(r^3 c^2) (amplitude of P2, TN36 Table 1.1 values)
    bound = GM * K.EARTH_J2 * A_E**2 / A_NAV_M**3 / C2
    assert np.all(np.abs(terms["j2"]) <= bound) and np.abs(terms["j2"]).max() > 0.3 * bound
    assert np.all(terms["tidal"] == 0.0)
    np.testing.assert_allclose(
        terms["total"], terms["gravitational"] + terms["j2"] + terms["velocity"] + terms["tidal"], rtol=0, atol=0
    )


# ---------------------------------------------------------------------------
# Eccentricity term
# ---------------------------------------------------------------------------
def test_eccentricity_term_vector_equals_kepler_form():
    # IS-GPS-200 sec. 20.3.3.3.3.1 (from memory): F = -2 sqrt(mu)/c^2 = -4.442807633e-10 s/sqrt(m),
    # mu = 3.986005e14 (references.md: confirmed value)
    assert _round_sig(cr.IS_GPS_200_F_S_PER_SQRT_M, 10) == -4.442807633e-10
    # amplitude 22.9 ns for e = 0.01, sqrt(A) = 5153.8 sqrt(m) (references.md, recomputed)
    amp = float(cr.eccentricity_term_kepler_s(0.01, 5153.8, np.pi / 2))
    assert round(amp * 1e9, 1) == -22.9
    # Ashby 2003 sec. 5 vector form -2 r.v/c^2 == F e sqrt(A) sin E along a Kepler orbit
    # (identity r.v = sqrt(GM a) e sin E of two-body motion, textbook)
    mu = cr.IS_GPS_200_MU_M3_PER_S2
    a = 5153.8**2
    t = np.linspace(0.0, DAY_S, 1441)
    for e in (0.01, 0.1, 0.7):
        pos, vel, E = cr.kepler_state(a, e, 0.9, 2.0, 1.0, 0.1, 0.0, t, mu)
        vec = cr.eccentricity_term_s(pos, vel)
        kep = cr.eccentricity_term_kepler_s(e, np.sqrt(a), E, mu)
        scale = 2 * np.sqrt(mu * a) * e / C2  # amplitude
        # brief: agreement < 1e-15 s; here 1e-9 of the amplitude (<= 1.6e-15 s at e = 0.7)
        assert np.max(np.abs(vec - kep)) < 1e-9 * scale
        assert np.max(np.abs(vec - kep)) < 2e-15
        assert np.max(np.abs(vec)) > 0.99 * scale  # the orbit reaches the extremes


# ---------------------------------------------------------------------------
# Accumulated proper time: quadrature against the analytic Kepler decomposition
# ---------------------------------------------------------------------------
def _kepler_clock(e, step_s, a=A_NAV_M, span_s=DAY_S, jitter=0.0, seed=0):
    t = np.arange(0.0, span_s + step_s / 2, step_s)
    if jitter:
        rng = np.random.default_rng(seed)
        t[1:-1] += rng.uniform(-jitter, jitter, t.size - 2) * step_s
    pos, vel, E = cr.kepler_state(a, e, 0.96, 0.4, 1.3, 0.7, 0.0, t, GM)
    terms = cr.clock_rate_terms(pos, vel)
    rate = terms["gravitational"] + terms["velocity"]  # monopole field: the Kepler case
    num = cr.integrate_rate_s(t, rate)
    # analytic: [L_G - 3GM/(2ac^2)] dt + eccentricity-term difference (derivation in
    # clock_rates.kepler_secular_rate; periodic part = Ashby 2003 sec. 5 / IS-GPS-200 term)
    ana = cr.kepler_clock_offset_s(a, e, E, E[0], t - t[0], GM)
    return num - ana, t


@pytest.mark.parametrize("e", [0.01, 0.1])
@pytest.mark.parametrize("step_s", [60.0, 300.0])
def test_quadrature_matches_kepler_decomposition(e, step_s):
    # brief / references.md: integrated rate = secular x dt + periodic part to < 1 ps over a day.
    # Measured max |error| (uniform / jittered grid): e = 0.01: 3.6e-18 / 4.2e-18 s at 60 s,
    # 2.3e-15 / 2.7e-15 s at 300 s; e = 0.1: 7.0e-17 / 8.1e-17 s at 60 s, 4.4e-14 / 5.4e-14 s at 300 s.
    err, _ = _kepler_clock(e, step_s)
    assert np.max(np.abs(err)) < 1e-12
    # and on a non-uniform grid (records jittered by up to 30 % of the step)
    err_j, _ = _kepler_clock(e, step_s, jitter=0.3, seed=int(step_s))
    assert np.max(np.abs(err_j)) < 1e-12


def test_quadrature_fourth_order():
    # error of a 4-point (cubic) rule falls as h^4: factor 16 per halving (Abramowitz & Stegun
    # ch. 25, common practice).  Steps where the error (1e-11 .. 3e-15 s) is far above float64
    # rounding (~1e-20 s).  Measured ratios 14.7, 15.7, 15.9.
    errs = [np.max(np.abs(_kepler_clock(0.1, h)[0])) for h in (1200.0, 600.0, 300.0, 150.0)]
    ratios = [errs[k] / errs[k + 1] for k in range(3)]
    assert all(13.0 < r < 19.0 for r in ratios), (errs, ratios)
    # the trapezoid rule (common practice: numpy.trapezoid on the same samples) is O(h^2)
    # and far worse at 300 s: our rule must beat it by > 100x
    t = np.arange(0.0, DAY_S + 1, 300.0)
    pos, vel, E = cr.kepler_state(A_NAV_M, 0.1, 0.96, 0.4, 1.3, 0.7, 0.0, t, GM)
    terms = cr.clock_rate_terms(pos, vel)
    rate = terms["gravitational"] + terms["velocity"]
    ana = cr.kepler_clock_offset_s(A_NAV_M, 0.1, E[-1], E[0], t[-1] - t[0], GM)
    trap = np.trapezoid(rate, t) - ana
    ours = cr.integrate_rate_s(t, rate)[-1] - ana
    assert abs(ours) * 100 < abs(trap)


def test_integrate_rate_exact_for_cubics_and_small_n():
    # a cubic rule integrates polynomials of degree <= 3 exactly (definition of the rule)
    rng = np.random.default_rng(3)
    t = np.cumsum(rng.uniform(0.5, 2.0, 50))
    p = np.array([0.3, -1.2, 0.7, 2.0])  # 0.3 x^3 - 1.2 x^2 + 0.7 x + 2
    f = np.polyval(p, t)
    exact = np.polyval(np.polyint(p), t) - np.polyval(np.polyint(p), t[0])
    np.testing.assert_allclose(cr.integrate_rate_s(t, f), exact, rtol=1e-12)
    # two columns at once
    both = cr.integrate_rate_s(t, np.stack([f, 2 * f], axis=1))
    np.testing.assert_allclose(both[:, 1], 2 * exact, rtol=1e-12)
    # n = 2: trapezoid; n = 3: parabola (exact for a quadratic)
    assert cr.integrate_rate_s([0.0, 2.0], [1.0, 3.0])[-1] == 4.0
    tq = np.array([0.0, 1.0, 3.0])
    np.testing.assert_allclose(cr.integrate_rate_s(tq, tq**2), tq**3 / 3, rtol=1e-14)
    with pytest.raises(ValueError):
        cr.integrate_rate_s([0.0, 1.0, 1.0, 2.0], [1.0, 1.0, 1.0, 1.0])


# ---------------------------------------------------------------------------
# Geoid potential (Ashby 2003 eq. 18) and W0
# ---------------------------------------------------------------------------
def test_geoid_potential_split_ashby_eq18():
    terms = cr.ground_clock_rate_terms(np.array([A_E, 0.0, 0.0]))
    mono = float(terms["gravitational"] - K.L_G)  # -GM/(a c^2)
    j2 = float(terms["j2"])
    rot = float(terms["velocity"])
    # Ashby 2003 eq. 18 (confirmed): -6.95348e-10 (monopole) - 3.764e-13 (J2) - 1.203e-12 (rotation)
    # = -6.96927e-10, to the printed digits (+-1 in the last one: the monopole, 6.9534855e-10
    # with TN36 constants, sits on the rounding edge of the printed value)
    assert abs(mono - (-6.95348e-10)) <= 1e-15
    assert abs(j2 - (-3.764e-13)) <= 1e-16
    assert abs(rot - (-1.203e-12)) <= 1e-15
    total = mono + j2 + rot
    # sum vs Ashby's printed -6.96927e-10; Ashby's own components sum to -6.969274e-10
    assert abs(total - (-6.96927e-10)) <= 2e-15
    # L_G = W0/c^2: the geoid clock keeps TT.  Ashby's total differs from the IERS L_G by
    # 2.0e-15 (two published numbers); the monopole + J2 + rotation model must do as well.
    assert abs(total + K.L_G) <= 2e-15
    assert abs(float(terms["total"])) <= 2e-15
    # W0 = 62 636 856.0 m^2/s^2 = L_G c^2 (TN36 Table 1.1; references.md: from memory)
    assert round(K.L_G * C2, 1) == 62_636_856.0
    w = float(cr.effective_potential_m2_per_s2(np.array([A_E, 0.0, 0.0])))
    assert abs(w - 62_636_856.0) / C2 <= 2e-15  # same bound as above, as a potential
    # rate_from_geopotential_number: C = W0 - W
    # (L_G c^2 - W0 = 5e-4 m^2/s^2, i.e. 6e-21 in rate: the rounding of the defining L_G)
    np.testing.assert_allclose(cr.rate_from_geopotential_number(62_636_856.0 - w), terms["total"], rtol=0, atol=1e-20)


def test_height_sensitivity():
    # references.md (recomputed): g/c^2 = 1.09e-16 per metre near the surface.
    for unit in (np.array([1.0, 0.0, 0.0]), np.array([1.0, 1.0, 1.0]) / np.sqrt(3.0)):
        lo = cr.ground_clock_rate_terms(unit * A_E)["total"]
        hi = cr.ground_clock_rate_terms(unit * (A_E + 1.0))["total"]
        assert round(float(hi - lo), 18) == 1.09e-16
    # GRS80 normal gravity (Moritz, Geodetic Reference System 1980; from memory):
    # equator 9.7803267715 m/s^2 (at a = 6378137 m), pole 9.8321863685 m/s^2 (at b = 6356752.3141 m).
    # The monopole + J2 + rotation model must give g within 1e-4 (J4 etc. omitted).
    for pos, g_ref in ((np.array([6378137.0, 0.0, 0.0]), 9.7803267715),
                       (np.array([0.0, 0.0, 6356752.3141]), 9.8321863685)):
        up = pos / np.linalg.norm(pos)
        d = float(cr.ground_clock_rate_terms(pos + up)["total"] - cr.ground_clock_rate_terms(pos)["total"])
        assert abs(d * C2 / g_ref - 1.0) < 1e-4
    # Pound & Rebka 1960, PRL 4, 337: 2gh/c^2 = 4.92e-15 for h = 22.5 m (from memory; the
    # tower at Harvard, latitude ~42.4 N, from memory).  Geodetic -> geocentric by erfa.gd2gc (WGS84).
    base = erfa.gd2gc(1, np.radians(-71.1), np.radians(42.4), 0.0)
    top = erfa.gd2gc(1, np.radians(-71.1), np.radians(42.4), 22.5)
    shift = 2 * float(cr.ground_clock_rate_terms(top)["total"] - cr.ground_clock_rate_terms(base)["total"])
    assert abs(shift / 4.92e-15 - 1.0) < 5e-3  # measured: 4.909e-15 (-0.23 %)


def test_redshift_at_10000_km():
    # references.md (recomputed with IERS constants): GM (1/a_E - 1/(a_E + 10^7 m))/c^2 = 4.25e-10
    u0 = cr.earth_potential_terms_m2_per_s2(np.array([A_E, 0.0, 0.0]))["monopole"]
    u1 = cr.earth_potential_terms_m2_per_s2(np.array([A_E + 1e7, 0.0, 0.0]))["monopole"]
    assert _round_sig(float(u0 - u1) / C2, 3) == 4.25e-10
    np.testing.assert_allclose(float(u0 - u1), GM * (1 / A_E - 1 / (A_E + 1e7)), rtol=1e-14)
    # Vessot et al. 1980, PRL 45, 2081 (from memory): a maser near apogee at ~10 000 km ran fast
    # relative to the ground by ~4.5e-10 ("about": +-10 %).  Launch site Wallops Island,
    # 37.9 N 75.5 W (from memory); the space clock at rest in the GCRS above it.
    ground = erfa.gd2gc(1, np.radians(-75.5), np.radians(37.9), 0.0)
    up = ground / np.linalg.norm(ground)
    space = cr.clock_rate_terms(ground + 1e7 * up, np.zeros(3))
    diff = float(space["total"] - cr.ground_clock_rate_terms(ground)["total"])
    assert abs(diff / 4.5e-10 - 1.0) < 0.10  # measured 4.26e-10 (-5.3 %)


# ---------------------------------------------------------------------------
# Ground clock: Earth-fixed evaluation vs the GCRS state from itrs_to_gcrs
# ---------------------------------------------------------------------------
def test_ground_clock_itrs_vs_gcrs_and_j2_pole_error():
    from stages.physics import earth_orientation as eo
    from stages.physics import earth_rotation as er
    from stages.physics import time_scales as ts
    from stages.physics.leap_seconds import load_leap_table

    eop = eo.load_eop_table()
    leap = load_leap_table()
    rng = np.random.default_rng(5)
    n = 400
    lat = rng.uniform(-1.4, 1.4, n)
    lon = rng.uniform(-np.pi, np.pi, n)
    x_itrs = erfa.gd2gc(1, lon, lat, rng.uniform(0.0, 3000.0, n))  # WGS84 -> geocentric (pyerfa)
    utc_mjd = np.full(n, 60676)  # 2025-01-01 (erfa.cal2jd)
    utc_ps = (rng.uniform(0.0, DAY_S, n) * 1e12).astype(np.int64)
    tt_mjd, tt_ps = ts.tai_to_tt(*ts.utc_to_tai(utc_mjd, utc_ps, leap))
    utc_s, tt_s = ts.ps_to_s(utc_ps), ts.ps_to_s(tt_ps)
    st = er.itrs_to_gcrs(x_itrs, utc_mjd, utc_s, tt_mjd, tt_s, apply_cip_offsets=False, eop=eop)
    # CIP unit vector in the GCRS: X, Y of IAU 2006/2000A (pyerfa pnm06a + bpn2xy; TN36 sec. 5.5.4)
    X, Y = erfa.bpn2xy(erfa.pnm06a(tt_mjd + 2400000.5, tt_s / DAY_S))
    pole = np.stack([X, Y, np.sqrt(1 - X * X - Y * Y)], axis=1)

    ground = cr.ground_clock_rate_terms(x_itrs)
    gcrs = cr.clock_rate_terms(st.pos_m, st.vel_m_per_s, pole_gcrs=pole)
    # same physics, two frames: |omega x r|^2 = v_GCRS^2 up to the motion of the pole in the GCRS
    # (precession-nutation, <~3e-11 rad/s, TN36 ch. 5: <~2e-4 m/s, <~3e-18 in rate) and ITRS z =
    # CIP z to polar motion (< 0.5 arcsec): bound 5e-18 stated in ground_clock_rate_terms
    assert np.max(np.abs(gcrs["total"] - ground["total"])) < 5e-18
    np.testing.assert_allclose(gcrs["velocity"], ground["velocity"], rtol=0, atol=3e-18)
    np.testing.assert_allclose(gcrs["j2"], ground["j2"], rtol=0, atol=3e-18)

    # GCRS z instead of the CIP: the J2 error is <= (3/2) delta GM J2 a_E^2/(r^3 c^2),
    # delta = |CIP - z| (derivative of P2; bound stated in earth_potential_terms_m2_per_s2)
    no_pole = cr.clock_rate_terms(st.pos_m, st.vel_m_per_s)
    delta = np.hypot(X, Y)
    r = np.linalg.norm(st.pos_m, axis=1)
    bound = 1.5 * delta * GM * K.EARTH_J2 * A_E**2 / r**3 / C2
    err = np.abs(no_pole["j2"] - gcrs["j2"])
    assert np.all(err <= bound * 1.01)
    assert err.max() > 0.5 * bound.max()  # the effect is real: up to ~2.7e-15 in 2025
    assert 2.0e-15 < bound.max() < 3.0e-15  # the figure quoted in the docstring
    assert np.all((2.3e-3 < delta) & (delta < 2.6e-3))  # 2.43e-3 rad at 2025 (docstring)


# ---------------------------------------------------------------------------
# Tidal potential
# ---------------------------------------------------------------------------
def test_tidal_quadrupole_vs_exact_newtonian_difference():
    # TN36 ch. 10 / IAU 2000 B1.3: tidal potential = external potential minus its value and
    # gradient at the geocentre.  Exact: GM/|r_B - x| - GM/r_B - GM x.r_B/r_B^3.
    rng = np.random.default_rng(9)
    x = rng.normal(size=(1000, 3))
    x *= (rng.uniform(6.3e6, 4.3e7, 1000) / np.linalg.norm(x, axis=1))[:, None]
    rb = rng.normal(size=(1000, 3))
    rb *= (3.844e8 / np.linalg.norm(rb, axis=1))[:, None]  # mean Earth-Moon distance (from memory)
    gm = 4.9028e12  # Moon GM (DE421 header, ephemeris.GM_M3_PER_S2; from memory to 5 digits)
    got = cr.tidal_potential_m2_per_s2(x, [(rb, gm)])
    d = np.linalg.norm(rb - x, axis=1)
    b = np.linalg.norm(rb, axis=1)
    exact = gm / d - gm / b - gm * np.einsum("ij,ij->i", x, rb) / b**3
    octupole = gm * np.linalg.norm(x, axis=1) ** 3 / b**4  # size of the next Legendre term
    assert np.all(np.abs(got - exact) <= 1.2 * octupole)
    assert np.max(np.abs(got)) > 5 * np.max(octupole)  # non-trivial comparison


def test_sun_moon_tidal_term_from_de421():
    t_sod = np.linspace(0.0, DAY_S, 49)
    bodies = cr.sun_moon_geocentric_m(60676, t_sod)
    moon_d = np.linalg.norm(bodies[0][0], axis=1)
    sun_d = np.linalg.norm(bodies[1][0], axis=1)
    # lunar distance between extreme perigee 356 400 km and apogee 406 700 km (from memory);
    # Earth-Sun distance near perihelion in early January, 0.983 au (from memory)
    assert np.all((3.56e8 < moon_d) & (moon_d < 4.07e8))
    assert np.all(np.abs(sun_d / 1.495978707e11 - 0.9833) < 2e-3)  # au: IAU 2012 Res. B2
    # an equatorial surface clock turning with the Earth (GCRS, ERA rate of TN36 eq. 5.15):
    # |tidal| <= sum GM_B a_E^2 / r_B^3 (|P2| <= 1), and it varies over the day
    ang = OMEGA * t_sod
    x = A_E * np.stack([np.cos(ang), np.sin(ang), np.zeros_like(ang)], axis=1)
    terms = cr.clock_rate_terms(x, np.zeros_like(x), tidal_bodies=bodies)
    bound = sum(gm * A_E**2 / np.linalg.norm(p, axis=1) ** 3 for p, gm in bodies) / C2
    assert np.all(np.abs(terms["tidal"]) <= bound)
    assert np.ptp(terms["tidal"]) > 0.3 * bound.max()
    np.testing.assert_allclose(
        terms["total"] - terms["tidal"], cr.clock_rate_terms(x, np.zeros_like(x))["total"], rtol=0, atol=0
    )


# ---------------------------------------------------------------------------
# Sagnac
# ---------------------------------------------------------------------------
def test_sagnac_equator_loop():
    # Ashby 2003 sec. 2 (confirmed): 207.4 ns for a signal once around the equator (eastward).
    n = 100_000
    phi = np.linspace(0.0, 2 * np.pi, n + 1)
    ring = A_E * np.stack([np.cos(phi), np.sin(phi), np.zeros_like(phi)], axis=1)
    east = np.sum(cr.sagnac_s(ring[:-1], ring[1:]))
    assert round(east * 1e9, 1) == 207.4
    west = np.sum(cr.sagnac_s(ring[1:], ring[:-1]))
    assert west == pytest.approx(-east, rel=1e-12, abs=0)  # sign flips with direction
    # the nominal GRS80 rate 7.292115e-5 rad/s (references.md: from memory) gives the same to 0.1 ns
    assert round(np.sum(cr.sagnac_s(ring[:-1], ring[1:], 7.292115e-5)) * 1e9, 1) == 207.4
    # a closed loop that is not a circle: 2 omega A / c^2 with A from plane geometry
    # (a 1000 km x 2000 km rectangle, counter-clockwise, away from the origin)
    corners = np.array([[7e6, 1e6, 0], [8e6, 1e6, 0], [8e6, 3e6, 0], [7e6, 3e6, 0], [7e6, 1e6, 0]], float)
    loop = np.sum(cr.sagnac_s(corners[:-1], corners[1:]))
    assert loop == pytest.approx(2 * OMEGA * 2e12 / C2, rel=1e-12, abs=0)


def _inertial_light_time(r_tx, r_rx, omega):
    """Exact light time in the inertial frame aligned with the Earth-fixed one at
    emission: c tau = |R3(omega tau) r_rx - r_tx| (fixed-point iteration)."""
    r_tx, r_rx = np.broadcast_arrays(r_tx, r_rx)
    tau = np.linalg.norm(r_rx - r_tx, axis=-1) / C
    for _ in range(8):
        a = omega * tau
        rx = np.stack([np.cos(a) * r_rx[..., 0] - np.sin(a) * r_rx[..., 1],
                       np.sin(a) * r_rx[..., 0] + np.cos(a) * r_rx[..., 1], r_rx[..., 2]], axis=-1)
        tau = np.linalg.norm(rx - r_tx, axis=-1) / C
    return tau


def test_sagnac_satellite_link_at_zero_elevation():
    # references.md (recomputed): up to ~133 ns for a navigation-satellite link at 0 deg elevation
    # (tolerance +-5 ns).  Geometry: receiver on the equator, satellite in the equatorial plane at
    # a = 26 561.75 km on the receiver's horizon to the west (signal travels eastward).
    theta = np.arccos(A_E / A_NAV_M)
    rx = np.array([A_E, 0.0, 0.0])
    sat = A_NAV_M * np.array([np.cos(theta), -np.sin(theta), 0.0])
    up = rx / A_E
    assert abs(np.dot(sat - rx, up)) < 1e-6 * A_NAV_M  # 0 deg elevation
    dt = float(cr.sagnac_s(sat, rx))
    assert dt > 0 and abs(dt * 1e9 - 133.0) < 5.0
    assert float(cr.sagnac_s(rx, sat)) == -dt  # uplink: westward, negative
    # satellites above the horizon give less (horizon is the maximum for this plane)
    ang = np.linspace(-theta, theta, 201)
    sats = A_NAV_M * np.stack([np.cos(ang), np.sin(ang), np.zeros_like(ang)], axis=1)
    assert np.max(np.abs(cr.sagnac_s(sats, rx))) <= abs(dt) * (1 + 1e-12)
    # first-order agreement with the exact inertial-frame light time (Ashby 2003 sec. 2
    # derivation): tau_inertial - |r_rx - r_tx|/c = Sagnac + O(omega^2); measured 0.34 ps
    tau = _inertial_light_time(sats, rx, OMEGA)
    naive = np.linalg.norm(rx - sats, axis=1) / C
    assert np.max(np.abs(tau - naive - cr.sagnac_s(sats, rx))) < 1e-12
