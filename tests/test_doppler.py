"""Tests of stages.physics.doppler (Doppler as differenced light time).

Every check names its outside source in a comment.  Sources:

* Moyer 2000, JPL DESCANSO Monograph 2, section 13: Doppler as differenced
  range, y = -[tau(t_end) - tau(t_start)]/T_c (from memory);
* Bertotti, Iess & Tortora 2003, Nature 425, 374, eq. 1: round-trip solar
  delay 2(1+gamma) GM/c^3 ln(4 r1 r2 / b^2); its time derivative is the
  Doppler signature (the paper's ~1e-9-scale peak figure is from memory and
  is not asserted; the formula is differentiated here);
* IERS TN36 Table 1.1 (c, GM_Sun), IAU 2012 Resolution B2 (au), IAU 2015
  Resolution B3 (nominal solar radius).

Independent references: closed-form straight-line light times evaluated in
extended precision (numpy longdouble, 64-bit mantissa on x86), central
differences of the light-time solver, and the differentiated grazing formula.
"""

from __future__ import annotations


import numpy as np
import pytest

from stages.physics import constants as K
from stages.physics import doppler as dp
from stages.physics import light_time as lt

C = K.C_M_PER_S  # IERS TN36 Table 1.1 (defining)
GM_SUN = K.GM_SUN_TDB_M3_PER_S2  # IERS TN36 Table 1.1, TDB-compatible
AU_M = 149_597_870_700.0  # IAU 2012 Resolution B2 (exact)
R_SUN_M = 6.957e8  # IAU 2015 Resolution B3 nominal solar radius
EPS = np.finfo(np.float64).eps
LD = np.longdouble


def no_bodies(name, mjd, sod):  # pragma: no cover - never called with bodies=()
    raise AssertionError("no body expected")


def linear(p_ref, v, mjd_ref, sod_ref):
    """Straight-line motion p_ref + v (t - t_ref), evaluated in float64 like a
    real state function (its output rounding is part of the measured floor)."""

    def fn(mjd, sod):
        dt = (np.asarray(mjd) - mjd_ref) * 86400.0 + (np.asarray(sod) - sod_ref)
        return p_ref + dt[:, None] * v, np.broadcast_to(v, (len(dt), 3)).copy()

    return fn


def tau_ld(rho0, v):
    """Exact light time, longdouble, for a transmitter in uniform motion:
    |rho0 + v tau| = c tau -> (c^2 - v^2) tau^2 - 2 (rho0.v) tau - rho0^2 = 0
    (positive root, cancellation-free form).  rho0 = receiver minus
    transmitter position at the reception time."""
    c = LD(C)
    bdot = np.sum(rho0 * v, axis=-1)
    r2 = np.sum(rho0 * rho0, axis=-1)
    a = c * c - np.sum(v * v, axis=-1)
    q = np.sqrt(bdot * bdot + a * r2)
    return np.where(bdot >= 0, (bdot + q) / a, r2 / (q - bdot))


def round_trip_ld(t3, sc_p, sc_v, st_p, st_v):
    """Closed-form round trip (downleg then upleg quadratics), longdouble;
    t3 = seconds since the reference epoch (longdouble), all arrays (n, 3)."""
    st3 = st_p + t3[:, None] * st_v
    sc3 = sc_p + t3[:, None] * sc_v
    td = tau_ld(st3 - sc3, sc_v)
    t2 = t3 - td
    sc2 = sc_p + t2[:, None] * sc_v
    st2 = st_p + t2[:, None] * st_v
    tu = tau_ld(sc2 - st2, st_v)
    return td + tu, td


def _straight_case(seed, n, scale):
    """Station near 1 au (x scale) with Earth-like speed, spacecraft a few au
    away, both in uniform motion; count ends spread over a day."""
    rng = np.random.default_rng(seed)
    st_p = np.array([1.0, 0.2, 0.05]) * scale + rng.normal(size=(n, 3)) * 6.4e6
    st_v = np.array([-6e3, 2.9e4, 1e2]) + rng.normal(size=(n, 3)) * 500
    u = rng.normal(size=(n, 3))
    u /= np.linalg.norm(u, axis=1)[:, None]
    sc_p = st_p + u * (rng.uniform(0.3, 3.0, n) * scale)[:, None]
    sc_v = rng.normal(size=(n, 3)) * 2e4
    mjd = np.full(n, 60001)
    # reception times as exact binary fractions (1/64 s) so t_end - T_c is exact
    sod = np.round(rng.uniform(3600, 80000, n) * 64) / 64
    return (60000, 0.0), st_p, st_v, sc_p, sc_v, mjd, sod


# ---------------------------------------------------------------------------
# closed form (noise floor)
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("count_s", [60.0, 1.0])
def test_two_way_closed_form_noise_floor(count_s):
    # Moyer 2000 sec. 13 (from memory): y = -[tau(t3) - tau(t3 - T_c)]/T_c,
    # with tau the exact round trip of the straight-line quadratics evaluated
    # in longdouble (ulp(2500 s) = 2.7e-16 s there, so the reference is exact
    # to ~1e-17 in y).  Station ~1 au from the barycentre, spacecraft 0.3..3 au
    # from the station.
    n = 400
    t_ref, st_p, st_v, sc_p, sc_v, mjd, sod = _straight_case(3, n, AU_M)
    st = linear(st_p, st_v, *t_ref)
    sc = linear(sc_p, sc_v, *t_ref)
    sol = dp.two_way_doppler(mjd, sod, count_s, st, sc, st, no_bodies, {}, bodies=())
    assert np.all(sol.status == 0)

    t3 = (mjd - t_ref[0]).astype(LD) * 86400 + (sod.astype(LD) - LD(t_ref[1]))
    args = [x.astype(LD) for x in (sc_p, sc_v, st_p, st_v)]
    rt_a, _ = round_trip_ld(t3, *args)
    rt_b, _ = round_trip_ld(t3 - LD(count_s), *args)
    y_ref = -(rt_a - rt_b) / LD(count_s)
    err = (sol.y - y_ref).astype(np.float64)
    assert np.all(sol.geometric == sol.y)  # no bodies: nothing relativistic
    assert np.abs(y_ref).max() > 1e-5  # a real Doppler signal (~1e-4, v/c)

    # Representational floor of the inputs: every position a state function
    # returns carries half-ulp rounding per component (rms ulp/sqrt(12) if
    # uniform).  The round-trip difference involves the station at t3 and t1
    # of both ends (4 positions) and the spacecraft at t2 of both ends, which
    # enters both legs (weight 2, 2 positions -> variance 8); projected on a
    # line of sight, on average 1/3 of the summed component variance.
    st_pos = st(mjd, sod)[0]
    sc_pos = sc(mjd, sod)[0]
    var = (4 * np.sum(np.spacing(np.abs(st_pos)) ** 2, axis=1)
           + 8 * np.sum(np.spacing(np.abs(sc_pos)) ** 2, axis=1)) / 12 / 3
    sigma_pred = np.sqrt(np.mean(var)) / C / count_s
    rms = np.sqrt(np.mean(err**2))
    # the naive difference of the solver's two round-trip light times, for comparison
    naive = -(sol.end.round_trip_s - sol.start.round_trip_s) / count_s
    rms_naive = np.sqrt(np.mean((naive - y_ref).astype(np.float64) ** 2))
    print(f"T_c={count_s}: rms {rms:.3g} max {np.abs(err).max():.3g} "
          f"naive rms {rms_naive:.3g} predicted sigma {sigma_pred:.3g}")
    assert rms < 1.5 * sigma_pred  # at the input-rounding floor, not above it
    assert np.abs(err).max() < 7 * sigma_pred
    if count_s == 60.0:
        # measured rms 1.85e-15, max 9.8e-15 (positions at 1.5e11..6e11 m):
        # the 1e-15 goal is NOT met at 1 au because of the inputs' rounding
        assert rms < 2.5e-15
    # the differencing scheme beats plain subtraction (measured ratio 0.45, 0.42)
    assert rms < 0.6 * rms_naive


def linear_displacement(v):
    """p(b) - p(a) of straight-line motion, formed from the velocity (no large positions)."""
    def fn(mjd_a, sod_a, mjd_b, sod_b):
        dt = (np.asarray(mjd_b) - np.asarray(mjd_a)) * 86400.0 + (np.asarray(sod_b) - np.asarray(sod_a))
        return dt[:, None] * v
    return fn


@pytest.mark.parametrize("one_way", [False, True])
def test_displacements_remove_the_input_rounding_floor(one_way):
    # The closed form of the test above (Moyer 2000 sec. 13, from memory; longdouble reference), same
    # barycentric positions of 1.5e11..6e11 m, but the ends' displacements over the count passed in as
    # the ephemerides give them (node-relative interpolation, here v dt): the geometric difference no
    # longer carries the positions' float64 rounding.  Target of the issue: below 1e-15 for 60 s counts.
    n, count_s = 400, 60.0
    t_ref, st_p, st_v, sc_p, sc_v, mjd, sod = _straight_case(3, n, AU_M)
    st, sc = linear(st_p, st_v, *t_ref), linear(sc_p, sc_v, *t_ref)
    disp = (linear_displacement(st_v), linear_displacement(sc_v), linear_displacement(st_v))
    t3 = (mjd - t_ref[0]).astype(LD) * 86400 + (sod.astype(LD) - LD(t_ref[1]))
    args = [x.astype(LD) for x in (sc_p, sc_v, st_p, st_v)]
    if one_way:
        sol = dp.one_way_doppler(mjd, sod, count_s, st, sc, no_bodies, {}, bodies=(), displacements=disp)
        plain = dp.one_way_doppler(mjd, sod, count_s, st, sc, no_bodies, {}, bodies=())
        ref = -(round_trip_ld(t3, *args)[1] - round_trip_ld(t3 - LD(count_s), *args)[1]) / LD(count_s)
    else:
        sol = dp.two_way_doppler(mjd, sod, count_s, st, sc, st, no_bodies, {}, bodies=(), displacements=disp)
        plain = dp.two_way_doppler(mjd, sod, count_s, st, sc, st, no_bodies, {}, bodies=())
        ref = -(round_trip_ld(t3, *args)[0] - round_trip_ld(t3 - LD(count_s), *args)[0]) / LD(count_s)
    err = (sol.y - ref).astype(np.float64)
    err_plain = (plain.y - ref).astype(np.float64)
    rms, rms_plain = np.sqrt(np.mean(err**2)), np.sqrt(np.mean(err_plain**2))
    print(f"one_way={one_way}: rms {rms:.3g} max {np.abs(err).max():.3g} (positions differenced: rms {rms_plain:.3g})")
    assert rms < 1e-16 and np.abs(err).max() < 1e-15   # the target, with an order of margin
    assert rms < 0.2 * rms_plain


def test_closed_form_small_coordinates_reaches_1e16():
    # Same closed form (Moyer 2000 sec. 13, from memory), but all positions
    # within ~1e9 m of the origin (e.g. coordinates centred near the link):
    # the input rounding is 150x smaller, exposing the module's own floor,
    # which must then be well below 1e-15 for T_c = 60 s.
    n = 300
    t_ref, st_p, st_v, sc_p, sc_v, mjd, sod = _straight_case(4, n, 1e9)
    st = linear(st_p, st_v, *t_ref)
    sc = linear(sc_p, sc_v, *t_ref)
    sol = dp.two_way_doppler(mjd, sod, 60.0, st, sc, st, no_bodies, {}, bodies=())
    t3 = (mjd - t_ref[0]).astype(LD) * 86400 + (sod.astype(LD) - LD(t_ref[1]))
    args = [x.astype(LD) for x in (sc_p, sc_v, st_p, st_v)]
    y_ref = -(round_trip_ld(t3, *args)[0] - round_trip_ld(t3 - 60, *args)[0]) / 60
    err = np.abs((sol.y - y_ref).astype(np.float64))
    print(f"small coords: max {err.max():.3g} rms {np.sqrt(np.mean(err**2)):.3g}")
    # measured: max 1.9e-16, rms 5e-17
    assert err.max() < 5e-16 and np.sqrt(np.mean(err**2)) < 1e-16


def test_one_way_closed_form():
    # One-way: y = -[tau_down(t_end) - tau_down(t_start)]/T_c (Moyer 2000
    # sec. 13, from memory) against the downleg quadratic in longdouble.
    n = 300
    t_ref, st_p, st_v, sc_p, sc_v, mjd, sod = _straight_case(5, n, AU_M)
    st = linear(st_p, st_v, *t_ref)
    sc = linear(sc_p, sc_v, *t_ref)
    sol = dp.one_way_doppler(mjd, sod, 60.0, st, sc, no_bodies, {}, bodies=())
    assert np.all(sol.status == 0)
    t3 = (mjd - t_ref[0]).astype(LD) * 86400 + (sod.astype(LD) - LD(t_ref[1]))
    args = [x.astype(LD) for x in (sc_p, sc_v, st_p, st_v)]
    y_ref = -(round_trip_ld(t3, *args)[1] - round_trip_ld(t3 - 60, *args)[1]) / 60
    err = np.abs((sol.y - y_ref).astype(np.float64))
    print(f"one-way: max {err.max():.3g} rms {np.sqrt(np.mean(err**2)):.3g}")
    assert err.max() < 6e-15


# ---------------------------------------------------------------------------
# derivative of the light-time solution
# ---------------------------------------------------------------------------
def test_matches_central_difference_of_solver():
    # Definition (Moyer 2000 sec. 13, from memory): for a short count the
    # Doppler is -d tau/dt at mid-count (to T_c^2/24 tau''').  Here a rotating station (Earth-like
    # spin, radius 6.4e6 m) on a moving centre, the Sun switched on (static at
    # the origin).  Reference: central difference of the solver's round-trip
    # light time with step h = 2.5 s.  The solver's tau is accurate to its
    # convergence floor (~1.5e-12 s here: positions up to 2e11 m, see
    # light_time._noise_floor_s), so the central difference resolves only
    # ~2 * 1.5e-12 / 5 s = 6e-13 in y.  Truncation: T_c^2/24 tau''' = 7e-14
    # for T_c = 10 s and h^2/6 tau''' = 2e-14 (tau''' ~ 2 w^3 R/c = 1.7e-14).
    n = 40
    rng = np.random.default_rng(9)
    w = 7.292115e-5  # Earth rotation rate, rad/s (IERS TN36, from memory)
    centre_p = np.array([-AU_M, 3e9, 0.0])
    centre_v = np.array([0.0, 2.98e4, 0.0])
    phase = rng.uniform(0, 2 * np.pi, n)
    t_ref = (60000, 0.0)

    def station(mjd, sod):
        t = (np.asarray(mjd) - t_ref[0]) * 86400.0 + np.asarray(sod)
        ang = w * t + phase[: len(t)]
        off = 6.4e6 * np.stack([np.cos(ang), np.sin(ang), 0.3 * np.ones_like(ang)], -1)
        voff = 6.4e6 * w * np.stack([-np.sin(ang), np.cos(ang), np.zeros_like(ang)], -1)
        return centre_p + t[:, None] * centre_v + off, centre_v + voff

    sc = linear(np.array([1.3 * AU_M, 2e10, 1e9]), np.array([3e3, -2.1e4, 500.0]), *t_ref)

    def sun(name, mjd, sod):
        return np.zeros((len(sod), 3)), np.zeros((len(sod), 3))

    gm = {"sun": GM_SUN}
    mjd = np.full(n, 60000)
    sod = 40000.0 + np.arange(n) * 997.0
    tc = 10.0
    sol = dp.two_way_doppler(mjd, sod, tc, station, sc, station, sun, gm, bodies=("sun",))
    assert np.all(sol.status == 0)

    def rt(s):
        return lt.two_way_light_time(mjd, s, station(mjd, s)[0], sc, station, sun, gm,
                                     bodies=("sun",)).round_trip_s

    mid = sod - tc / 2
    h = 2.5
    deriv = (rt(mid + h) - rt(mid - h)) / (2 * h)
    diff = sol.y + deriv
    print(f"vs central difference: max {np.abs(diff).max():.3g}")
    assert np.abs(sol.y).max() > 5e-6
    assert np.all(np.abs(diff) < 1.5e-12)
    # and the rotation really shows up: the diurnal term w R / c * 2 ~ 3e-6
    assert np.ptp(sol.y - np.mean(sol.y)) > 1e-6


# ---------------------------------------------------------------------------
# solar Shapiro signature
# ---------------------------------------------------------------------------
def impact(r1, r2):
    """Distance of the origin from the line through r1 and r2."""
    return np.linalg.norm(np.cross(r1, r2), axis=1) / np.linalg.norm(r2 - r1, axis=1)


def test_solar_shapiro_signature_bertotti_iess_tortora():
    # Bertotti, Iess & Tortora 2003, eq. 1: round-trip delay
    # 2(1+g) GM/c^3 ln(4 r1 r2/b^2), i.e. per leg (1+g) GM/c^3 ln(4 r1 r2/b^2);
    # y = -d/dt of it = 2(1+g) GM/c^3 * bdot * (1/b_up + 1/b_down)
    #   -> 4(1+g) GM/(c^3 b) bdot for equal legs.
    # Geometry: Sun static at the origin, station at x = -1 au, spacecraft at
    # x = +1.5 au, both moving along +y at 30 km/s, so the ray translates
    # rigidly and bdot = 30 km/s; b = 1.6 solar radii at mid-count for the
    # central record.  No bending term (it changes d ln(den)/db by
    # ~ b_bend/den = 4e-4, checked separately below).
    vy = 3.0e4
    b0 = 1.6 * R_SUN_M
    a1, a2 = AU_M, 1.5 * AU_M
    t_ref = (60000, 43200.0)
    st = linear(np.array([-a1, b0, 0.0]), np.array([0.0, vy, 0.0]), *t_ref)
    sc = linear(np.array([a2, b0, 0.0]), np.array([0.0, vy, 0.0]), *t_ref)

    def sun(name, mjd, sod):
        return np.zeros((len(sod), 3)), np.zeros((len(sod), 3))

    gm = {"sun": GM_SUN}
    # centre the count so that the mid-count rays straddle b0 symmetrically:
    # the upleg is ~tau_up + tau_down/2 before t3, the downleg ~tau_down/2
    tau_d, tau_u = a2 / C, a2 / C + a1 / C
    tc = 60.0
    offsets = np.array([-1e4, -5e3, 0.0, 1e4, 3e4])  # b from 1.17 to 2.9 R_sun
    sod_end = t_ref[1] + offsets + tc / 2 + (tau_d + tau_u) / 2
    mjd = np.full(offsets.size, 60000)
    for gamma in (1.0, 0.0):
        sol = dp.two_way_doppler(mjd, sod_end, tc, st, sc, st, sun, gm, gamma=gamma,
                                 bodies=("sun",), bending_bodies=())
        assert np.all(sol.status == 0)
        # impact parameter of each leg at mid-count: distance of the Sun
        # (origin) from the straight line through the solved ends,
        # |r1 x r2| / |r2 - r1| (the ray is tilted by v tau / (a1 + a2))
        sol_mid = lt.two_way_light_time(mjd, sod_end - tc / 2,
                                        st(mjd, sod_end - tc / 2)[0], sc, st, sun, gm,
                                        bodies=("sun",), bending_bodies=())
        b_down = impact(sol_mid.down.tx_pos_m, sol_mid.down.rx_pos_m)
        b_up = impact(sol_mid.up.tx_pos_m, sol_mid.up.rx_pos_m)
        k = (1 + gamma) * GM_SUN / C**3
        y_bit = 2 * k * vy * (1 / b_up + 1 / b_down)
        rel = sol.relativistic["sun"]
        print(f"gamma={gamma}: y_rel {rel} BIT {y_bit}")
        # approximation error: O(b^2/a^2) and the ends' radial motion
        # (d ln(r1 r2)/dt ~ 1e-9 /s vs 2 bdot/b ~ 5e-5 /s): < 1e-4 relative
        np.testing.assert_allclose(rel, y_bit, rtol=1e-4)
        if gamma == 1.0:
            # the single-b form 4(1+g)GM bdot/(c^3 b) at b = 1.6 R_sun:
            # 1.06e-9 (not 5e-10: 8 GM/c^3 = 3.94e-5 s, / 1.113e9 m * 3e4 m/s)
            y_single = 4 * 2 * GM_SUN / (C**3 * b0) * vy
            assert 1.05e-9 < y_single < 1.07e-9
            # the central record's legs pass within 1% of 1.6 R_sun (the legs
            # are ~1000 s apart, b moves 30 km/s); at their harmonic-mean b
            # the single-b form holds to the same 1e-4
            b_h = 2 / (1 / b_up[2] + 1 / b_down[2])
            assert abs(b_h / b0 - 1) < 0.01
            np.testing.assert_allclose(rel[2], y_single * b0 / b_h, rtol=1e-4)
            np.testing.assert_allclose(rel[2], y_single, rtol=0.01)
            assert np.all(np.diff(rel) < 0)  # later records: larger b, smaller signal
            assert np.all(rel > 0)  # b grows, so the delay falls: y > 0
            rel_g1 = rel
    # one-way (the downleg alone): half the two-way signature, 2(1+g) GM/(c^3 b) bdot = 5.3e-10 at
    # b = 1.6 R_sun -- the "about 5e-10" one-way figure of the same differentiation
    one = dp.one_way_doppler(mjd, sod_end, tc, st, sc, sun, gm, bodies=("sun",), bending_bodies=())
    y_one = 2 * 2 * GM_SUN / (C**3 * b0) * vy
    assert 5.2e-10 < y_one < 5.4e-10
    b_down_only = impact(one.end.tx_pos_m, one.end.rx_pos_m)
    np.testing.assert_allclose(one.relativistic["sun"][2], y_one * b0 / b_down_only[2], rtol=2e-2)
    # PPN scaling (1+gamma) of eq. 1 of Bertotti, Iess & Tortora 2003; exact
    # up to the shift of the solved epochs by the ~1e-4 s delay change
    # (b moves by 30 km/s * 1e-4 s = 3 m, i.e. 3e-9 relative)
    np.testing.assert_allclose(rel, rel_g1 / 2, rtol=1e-8)

    # with the Sun's bending term (Moyer 2000 sec. 8, eq. 8-38 from memory;
    # module light_time docstring) ln(den + b_bend): the derivative shrinks by
    # the factor den/(den + b_bend), den = r1 + r2 - r12 ~ b^2 (a1+a2)/(2 a1 a2)
    sol_bend = dp.two_way_doppler(mjd, sod_end, tc, st, sc, st, sun, gm, bodies=("sun",))
    den = b0**2 * (a1 + a2) / (2 * a1 * a2)
    bend = 2 * GM_SUN / C**2
    ratio = sol_bend.relativistic["sun"][2] / rel_g1[2]
    np.testing.assert_allclose(1 - ratio, bend / (den + bend), rtol=0.05)


# ---------------------------------------------------------------------------
# bad input
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("count", [0.0, -60.0, np.nan, np.inf])
def test_bad_count_interval_raises(count):
    # Module contract (doppler.py docstring): a non-positive or non-finite
    # count interval is a configuration error -> ValueError, for both variants.
    st = linear(np.array([AU_M, 0, 0]), np.zeros(3), 60000, 0.0)
    sc = linear(np.array([2 * AU_M, 0, 0]), np.zeros(3), 60000, 0.0)
    with pytest.raises(ValueError):
        dp.two_way_doppler([60000], [100.0], count, st, sc, st, no_bodies, {}, bodies=())
    with pytest.raises(ValueError):
        dp.one_way_doppler([60000], [100.0], count, st, sc, no_bodies, {}, bodies=())
    # one bad value among per-record intervals
    with pytest.raises(ValueError):
        dp.two_way_doppler([60000, 60000], [100.0, 200.0], [60.0, count], st, sc, st,
                           no_bodies, {}, bodies=())


def test_invalid_record_flagged_not_raised():
    # light_time status convention (STATUS_INVALID = 2, NaN values): a NaN
    # reception time in one record leaves the others equal to a clean run.
    t_ref, st_p, st_v, sc_p, sc_v, mjd, sod = _straight_case(6, 4, AU_M)
    st = linear(st_p, st_v, *t_ref)
    sc = linear(sc_p, sc_v, *t_ref)
    clean = dp.two_way_doppler(mjd, sod, 60.0, st, sc, st, no_bodies, {}, bodies=())
    bad_sod = sod.copy()
    bad_sod[1] = np.nan
    sol = dp.two_way_doppler(mjd, bad_sod, 60.0, st, sc, st, no_bodies, {}, bodies=())
    np.testing.assert_array_equal(sol.status, [0, 2, 0, 0])
    assert np.isnan(sol.y[1]) and np.isnan(sol.geometric[1])
    good = [0, 2, 3]
    np.testing.assert_array_equal(sol.y[good], clean.y[good])


# ---------------------------------------------------------------------------
# real geometry: DE421 (jplephem directly) at the 2021 Mars superior conjunction
# ---------------------------------------------------------------------------
# the de421 fixture (DE421 read with jplephem directly) is in conftest.py


def test_de421_mars_conjunction_two_way(de421):
    # DE421 via jplephem, a geocentre-fixed "station" 6.371e6 m sunward of the
    # Earth's centre, Mars as the spacecraft, around 2021-10-08 (the 2021 Mars
    # superior conjunction, from memory; test_light_time.py finds it by scan).
    # Checks: (1) Moyer 2000 sec. 13 (from memory) definition -- y equals the
    # naive difference of the solver's round trips within that difference's
    # float64 noise (ulp(2600 s)/T_c plus the positions' rounding);
    # (2) the per-body relativistic parts equal the naive difference of the
    # solver's per-body round-trip terms (these are ~1e-4 s, exact to ~1e-18 s);
    # (3) Bertotti, Iess & Tortora 2003 eq. 1: near conjunction the solar
    # part is of order 4(1+g) GM/(c^3 b) db/dt with b of a few solar radii and
    # db/dt of the order of the Earth's orbital speed -> a few 1e-10 .. 1e-9.
    n = 24
    mjd = np.full(n, 59495)  # 2021-10-08
    sod = 600.0 + np.arange(n) * 3600.0
    earth, _ = de421("earth", mjd, sod)
    sun, _ = de421("sun", mjd, sod)
    offset = 6.371e6 * (sun - earth) / np.linalg.norm(sun - earth, axis=1)[:, None]

    def station(m, s):
        p, v = de421("earth", m, s)
        return p + offset[: len(s)], v

    def mars(m, s):
        return de421("mars", m, s)

    gm = {"sun": GM_SUN, "earth": K.GM_EARTH_TT_M3_PER_S2,  # IERS TN36 Table 1.1
          "jupiter": 1.26712764e17, "saturn": 3.7940585e16}  # DE421-era values, from memory
    tc = 60.0
    sol = dp.two_way_doppler(mjd, sod, tc, station, mars, station, de421, gm)
    assert np.all(sol.status == 0)
    naive = -(sol.end.round_trip_s - sol.start.round_trip_s) / tc
    tol = 4 * np.spacing(sol.end.round_trip_s) / tc + 4e-14
    assert np.all(np.abs(sol.y - naive) < tol)
    for b in gm:
        naive_b = -(sol.end.shapiro_s[b] - sol.start.shapiro_s[b]) / tc
        np.testing.assert_allclose(sol.relativistic[b], naive_b, rtol=1e-6, atol=1e-17)
    # (3) the solar part against eq. 1 of Bertotti, Iess & Tortora 2003 per
    # leg, S = 2 GM/c^3 ln(4 r1 r2 / b^2) (one way: half the round trip),
    # evaluated on the solved rays at both ends of the count and differenced.
    # Approximation error: O(b^2/r^2) ~ 1e-4 and the bending term
    # (1+g)GM/c^2 / (r1 + r2 - r12) ~ 2e-4 of the log's derivative.
    y_sun = sol.relativistic["sun"]

    def bit(rt):
        total = 0.0
        for leg in (rt.down, rt.up):
            s1, _ = de421("sun", leg.t_tx_mjd, leg.t_tx_sod_s)
            s2, _ = de421("sun", leg.t_rx_mjd, leg.t_rx_sod_s)
            r1v, r2v = leg.tx_pos_m - s1, leg.rx_pos_m - s2
            r1, r2 = np.linalg.norm(r1v, axis=1), np.linalg.norm(r2v, axis=1)
            b = np.linalg.norm(np.cross(r1v, r2v), axis=1) / np.linalg.norm(r2v - r1v, axis=1)
            assert np.all((b > 2 * R_SUN_M) & (b < 3 * R_SUN_M))
            total = total + 2 * GM_SUN / C**3 * np.log(4 * r1 * r2 / b**2)
        return total

    y_bit = -(bit(sol.end) - bit(sol.start)) / tc
    err = np.abs(y_sun - y_bit)
    print(f"DE421 solar part {y_sun.min():.3g}..{y_sun.max():.3g}, vs BIT max {err.max():.3g}")
    assert np.all(err < 3e-4 * np.abs(y_sun).max())  # measured 8.7e-15 (1.2e-4 of max)
    # the closest approach of the ray falls on this day: the signature turns
    # from negative (delay growing) to positive (delay falling) exactly once
    assert y_sun[0] < 0 < y_sun[-1] and np.sum(np.diff(np.sign(y_sun)) != 0) == 1
    # Earth term: 2(1+g)GM_E/c^3 = 5.9e-14 s times the change of a log over
    # 60 s, far below 1e-13 (IERS TN36 Table 1.1 GM_E; magnitude argument)
    assert np.all(np.abs(sol.relativistic["earth"]) < 1e-13)
    np.testing.assert_allclose(sol.y, sol.geometric + sol.relativistic_total, rtol=0, atol=1e-20)


def test_gamma_partial_of_doppler_matches_central_difference():
    # dy/dgamma (light_time eq. 3 differenced over the count) against a central difference of the Doppler
    # itself in gamma, near a solar conjunction (geometry of the Bertotti-Iess-Tortora test above).
    vy, b0 = 3.0e4, 2.0 * R_SUN_M
    st = linear(np.array([-AU_M, b0, 0.0]), np.array([0.0, vy, 0.0]), 60000, 43200.0)
    sc = linear(np.array([1.5 * AU_M, b0, 0.0]), np.array([0.0, vy, 0.0]), 60000, 43200.0)

    def sun(name, mjd, sod):
        return np.zeros((len(sod), 3)), np.zeros((len(sod), 3))

    mjd = np.full(4, 60000)
    sod = 43200.0 + np.array([-2e4, 0.0, 1e4, 4e4])
    gm = {"sun": GM_SUN}
    h = 1e-3
    up = dp.two_way_doppler(mjd, sod, 60.0, st, sc, st, sun, gm, gamma=1.0 + h, bodies=("sun",))
    dn = dp.two_way_doppler(mjd, sod, 60.0, st, sc, st, sun, gm, gamma=1.0 - h, bodies=("sun",))
    mid = dp.two_way_doppler(mjd, sod, 60.0, st, sc, st, sun, gm, gamma=1.0, bodies=("sun",))
    num = (up.relativistic["sun"] - dn.relativistic["sun"]) / (2 * h)
    # tolerance: the solved epochs move with gamma by ~1e-4 s * h, i.e. ~1e-8 relative
    np.testing.assert_allclose(mid.dgamma, num, rtol=1e-6, atol=0)
    assert np.all(np.abs(mid.dgamma) > 1e-11)
