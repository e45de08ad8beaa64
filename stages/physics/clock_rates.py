"""Rates of clocks near the Earth, the periodic eccentricity term and the
Sagnac correction (pure, vectorised functions; numpy only).

Sign conventions: potentials are *positive* (U = +GM/r + ...), as in the IERS
Conventions (2010), IERS Technical Note 36 ("TN36"), chapter 10.  A positive
fractional frequency means the clock runs *fast* relative to TT.

Published sources (each function repeats the equation it implements):

* TN36 Table 1.1: c, L_G, GM_E, a_E, J2 (via :mod:`stages.physics.constants`);
  TN36 eq. 5.15: the rate of the Earth rotation angle (the Earth's rotation
  rate used here, :data:`EARTH_ROTATION_RATE_RAD_PER_S`).
* TN36 chapter 10 (section 10.2, proper time of a clock near the Earth;
  equation numbers not relied upon):

      dtau/dTCG = 1 - [v^2/2 + U_E(x) + U_tidal(x)] / c^2,
      dtau/dTT  = 1 + L_G - [v^2/2 + U_E(x) + U_tidal(x)] / c^2       (R)

  with v the GCRS velocity and x the GCRS position of the clock.  (R) drops
  the products L_G x [..]/c^2 and the c^-4 terms: < 1e-18 for any clock
  below geostationary height (L_G x 7e-10 = 4.9e-19; (v/c)^4 < 1e-19).
* N. Ashby 2003, "Relativity in the Global Positioning System", Living
  Reviews in Relativity 6, 1: section 2 (Sagnac effect), eq. 18 (geoid
  potential split: monopole, J2, rotation), section 5 (eccentricity term).
* IS-GPS-200 (interface specification), section 20.3.3.3.3.1 (relativistic
  correction term Delta t_r = F e sqrt(A) sin E, F = -2 sqrt(mu)/c^2; section
  number from memory) and section 3.3.1.1 (factory frequency offset).

Functions:

* :func:`solve_kepler_rad`, :func:`kepler_state` -- Keplerian orbits.
* :func:`earth_potential_terms_m2_per_s2`, :func:`earth_potential_m2_per_s2`
  -- monopole + J2; :func:`effective_potential_m2_per_s2` adds the
  centrifugal term (Earth-fixed frame; for geoid checks).
* :func:`tidal_potential_m2_per_s2`, :func:`sun_moon_geocentric_m` --
  quadrupole tidal potential of external bodies.
* :func:`clock_rate_terms`, :func:`ground_clock_rate_terms`,
  :func:`rate_from_geopotential_number` -- eq. (R) term by term;
  :func:`bcrs_clock_rate_terms` -- the same in the BCRS against TDB (a
  clock anywhere in the solar system, e.g. a spacecraft oscillator).
* :func:`eccentricity_term_s`, :func:`eccentricity_term_kepler_s`,
  :func:`kepler_secular_rate`, :func:`kepler_clock_offset_s` -- the secular and
  periodic parts of a Kepler-orbit clock.
* :func:`integrate_rate_s` -- cumulative integral of a rate on record times.
* :func:`sagnac_s` -- Sagnac correction in an Earth-fixed frame.
"""

from __future__ import annotations

import numpy as np

from . import constants as K
from .earth_rotation import ERA_RATE_RAD_PER_UT1_S

__all__ = [
    "EARTH_ROTATION_RATE_RAD_PER_S",
    "IS_GPS_200_MU_M3_PER_S2",
    "IS_GPS_200_F_S_PER_SQRT_M",
    "solve_kepler_rad",
    "kepler_state",
    "earth_potential_terms_m2_per_s2",
    "earth_potential_m2_per_s2",
    "effective_potential_m2_per_s2",
    "tidal_potential_m2_per_s2",
    "sun_moon_geocentric_m",
    "clock_rate_terms",
    "ground_clock_rate_terms",
    "bcrs_clock_rate_terms",
    "rate_from_geopotential_number",
    "eccentricity_term_s",
    "eccentricity_term_kepler_s",
    "kepler_secular_rate",
    "kepler_clock_offset_s",
    "integrate_rate_s",
    "sagnac_s",
]

_C2 = K.C_M_PER_S**2

# Earth's rotation rate: d(ERA)/dt = 2 pi x 1.00273781191135448 rev per UT1 day
# (TN36 eq. 5.15) = 7.292115146706979e-5 rad/s.  Per SI second it differs by
# the excess length of day (~1e-8 relative), i.e. nothing visible here.  The
# nominal GRS80/WGS 84 value 7.292115e-5 rad/s (references.md: from memory)
# is 2e-9 smaller: 0.4 fs on the 207 ns equatorial Sagnac loop.
EARTH_ROTATION_RATE_RAD_PER_S = ERA_RATE_RAD_PER_UT1_S

# IS-GPS-200 section 20.3.3.3.3.1 (from memory): mu = 3.986005e14 m^3/s^2 and
# F = -2 sqrt(mu)/c^2 = -4.442807633e-10 s/sqrt(m) (references.md: confirmed value).
IS_GPS_200_MU_M3_PER_S2 = 3.986005e14
IS_GPS_200_F_S_PER_SQRT_M = -2.0 * np.sqrt(IS_GPS_200_MU_M3_PER_S2) / _C2

_KEPLER_MAX_ITER = 50
_E3 = np.array([0.0, 0.0, 1.0])


def _dot(a, b):
    return np.einsum("...i,...i->...", a, b)


def _vec(x, name: str) -> np.ndarray:
    arr = np.asarray(x, dtype=np.float64)
    if arr.shape[-1:] != (3,):
        raise ValueError(f"{name} must have shape (..., 3), got {arr.shape}")
    return arr


# ---------------------------------------------------------------------------
# Kepler orbits
# ---------------------------------------------------------------------------
def solve_kepler_rad(mean_anomaly_rad, e, *, max_iter: int = _KEPLER_MAX_ITER) -> np.ndarray:
    """Eccentric anomaly E from Kepler's equation M = E - e sin E (0 <= e < 1).

    Newton's method, vectorised: E_{k+1} = E_k - (E_k - e sin E_k - M)/(1 - e cos E_k),
    with M reduced to [-pi, pi) and the start E_0 = M for e < 0.8, E_0 = pi sign(M)
    otherwise (from E_0 = pi Newton converges for every M and e < 1:
    Charles & Tatum 1998, Celest. Mech. Dyn. Astron. -- from memory).
    Iterates until every |Delta E| <= 4 eps (1 + |E|), at most ``max_iter``
    times; raises ``RuntimeError`` if that is not reached.  The result keeps
    the revolution count of M (E - M is periodic), so E is continuous in time.
    """
    m = np.asarray(mean_anomaly_rad, dtype=np.float64)
    ecc = np.asarray(e, dtype=np.float64)
    if np.any(~np.isfinite(ecc)) or np.any(ecc < 0.0) or np.any(ecc >= 1.0):
        raise ValueError("eccentricity must satisfy 0 <= e < 1")
    if not np.all(np.isfinite(m)):
        raise ValueError("mean anomaly must be finite")
    m, ecc = np.broadcast_arrays(m, ecc)
    two_pi = 2.0 * np.pi
    turns = np.floor((m + np.pi) / two_pi)
    mr = m - turns * two_pi  # in [-pi, pi)
    big = np.where(mr >= 0.0, np.pi, -np.pi)
    ee = np.where(ecc < 0.8, mr, big)
    tol = 4.0 * np.finfo(np.float64).eps
    for _ in range(max_iter):  # iterations, not records
        d = (ee - ecc * np.sin(ee) - mr) / (1.0 - ecc * np.cos(ee))
        ee = ee - d
        if np.all(np.abs(d) <= tol * (1.0 + np.abs(ee))):
            break
    else:
        raise RuntimeError(f"Kepler's equation did not converge in {max_iter} Newton iterations")
    return ee + turns * two_pi


def _rot_perifocal(i_rad, raan_rad, argp_rad):
    """Columns P, Q of R3(-Omega) R1(-i) R3(-omega): the perifocal x and y axes
    in the reference frame (standard orbital-element rotation, common practice)."""
    co, so = np.cos(raan_rad), np.sin(raan_rad)
    ci, si = np.cos(i_rad), np.sin(i_rad)
    cw, sw = np.cos(argp_rad), np.sin(argp_rad)
    p = np.stack([co * cw - so * sw * ci, so * cw + co * sw * ci, sw * si], axis=-1)
    q = np.stack([-co * sw - so * cw * ci, -so * sw + co * cw * ci, cw * si], axis=-1)
    return p, q


def kepler_state(
    a_m,
    e,
    i_rad,
    raan_rad,
    argp_rad,
    mean_anomaly_at_epoch_rad,
    epoch_s,
    t_s,
    gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2,
):
    """Position (m, (n, 3)), velocity (m/s, (n, 3)) and eccentric anomaly E
    (rad, (n,)) on a Keplerian orbit at times ``t_s`` (s, same scale as ``epoch_s``).

    Two-body motion (textbook, common practice):

        n = sqrt(GM / a^3),  M = M0 + n (t - t0),  M = E - e sin E
        perifocal  x = a (cos E - e),   y = a sqrt(1 - e^2) sin E
                   x' = -a n sin E / (1 - e cos E),  y' = a n sqrt(1 - e^2) cos E / (1 - e cos E)
        frame      r = x P + y Q,  P, Q = first two columns of R3(-Omega) R1(-i) R3(-omega).

    The frame is that of the elements (GCRS axes for a geocentric orbit with
    elements referred to the GCRS equator).  Elements are scalars or arrays
    broadcasting with ``t_s``.  ``gm_m3_per_s2`` defaults to the TT-compatible
    GM_E of TN36 Table 1.1 (positions in TT-compatible GCRS units).
    """
    a = np.asarray(a_m, dtype=np.float64)
    ecc = np.asarray(e, dtype=np.float64)
    t = np.asarray(t_s, dtype=np.float64)
    if np.any(a <= 0.0):
        raise ValueError("semi-major axis must be positive")
    n_rad_per_s = np.sqrt(gm_m3_per_s2 / a**3)
    m = np.asarray(mean_anomaly_at_epoch_rad, dtype=np.float64) + n_rad_per_s * (t - np.asarray(epoch_s, dtype=np.float64))
    ee = solve_kepler_rad(m, ecc)
    ce, se = np.cos(ee), np.sin(ee)
    b = a * np.sqrt(1.0 - ecc * ecc)
    x = a * (ce - ecc)
    y = b * se
    rdot_fac = n_rad_per_s / (1.0 - ecc * ce)
    vx = -a * se * rdot_fac
    vy = b * ce * rdot_fac
    p, q = _rot_perifocal(np.asarray(i_rad, dtype=np.float64), np.asarray(raan_rad, dtype=np.float64),
                          np.asarray(argp_rad, dtype=np.float64))
    pos = x[..., None] * p + y[..., None] * q
    vel = vx[..., None] * p + vy[..., None] * q
    return np.atleast_2d(pos), np.atleast_2d(vel), np.atleast_1d(ee)


# ---------------------------------------------------------------------------
# Potentials
# ---------------------------------------------------------------------------
def earth_potential_terms_m2_per_s2(
    pos_m,
    *,
    gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2,
    a_e_m: float = K.EARTH_EQUATORIAL_RADIUS_M,
    j2: float = K.EARTH_J2,
    pole=None,
) -> dict:
    """Earth's Newtonian potential, positive convention, monopole and J2
    terms separately (m^2/s^2):

        U_E(x) = GM/r [1 - J2 (a_E/r)^2 P2(sin phi)],  P2(s) = (3 s^2 - 1)/2,
        "monopole" = GM/r,   "j2" = GM J2 a_E^2 / (2 r^3) (1 - 3 z^2/r^2),

    with sin phi = z/r, z the distance from the equatorial plane (TN36
    Table 1.1 for GM_E, a_E, J2; the zonal expansion of TN36 chapter 6 /
    Ashby 2003 eq. 18 keeps the same J2 term).

    ``pole`` (unit vector, (3,) or (..., 3); default (0, 0, 1)) is the
    direction of the Earth's figure axis in the frame of ``pos_m``; z = x.pole.
    For ITRS positions the default is exact (the ITRS z axis is the figure
    axis to within polar motion, < 2.5e-6 rad: J2 error < 4e-6 relative).

    GCRS positions with the default pole: the GCRS z axis is the pole of
    J2000.0; the true pole (CIP) has since moved by precession-nutation,
    delta = sqrt(X^2 + Y^2) = 2.43e-3 rad at 2025.0, growing by ~9.7e-4 rad per
    decade (IAU 2006/2000A, e.g. ERFA ``pnm06a`` + ``bpn2xy``).  A pole tilt
    delta changes the J2 term by at most (3/2) delta GM J2 a_E^2/r^3
    (d/dphi of P2), i.e. up to 3.6e-3 of the J2 amplitude in 2025:
    <= 2.7e-15 in rate at the Earth's surface (about 25 m of height!),
    <= 2.1e-15 at 7000 km, <= 4e-17 at GNSS radius (26 560 km).  Pass the CIP
    unit vector (X, Y, sqrt(1 - X^2 - Y^2)) for ground or low-orbit clocks.
    """
    x = _vec(pos_m, "pos_m")
    r2 = _dot(x, x)
    r = np.sqrt(r2)
    if pole is None:
        z = x[..., 2]
    else:
        z = _dot(x, _vec(pole, "pole"))
    mono = gm_m3_per_s2 / r
    j2_term = mono * (0.5 * j2 * a_e_m * a_e_m / r2) * (1.0 - 3.0 * z * z / r2)
    return {"monopole": mono, "j2": j2_term}


def earth_potential_m2_per_s2(pos_m, **kwargs) -> np.ndarray:
    """U_E(x) = monopole + J2 (m^2/s^2, positive); see
    :func:`earth_potential_terms_m2_per_s2` for the equation and keywords."""
    t = earth_potential_terms_m2_per_s2(pos_m, **kwargs)
    return t["monopole"] + t["j2"]


def effective_potential_m2_per_s2(
    pos_itrs_m, *, omega_rad_per_s: float = EARTH_ROTATION_RATE_RAD_PER_S, **kwargs
) -> np.ndarray:
    """Gravity plus centrifugal potential in the Earth-fixed frame (m^2/s^2,
    positive convention):

        W(x) = U_E(x) + omega^2 (x^2 + y^2) / 2

    (Ashby 2003 eq. 18 evaluates exactly this on the equator at a_E).  On the
    geoid W = W0 = L_G c^2 (TN36 Table 1.1; IAU 2000 Resolution B1.9).  With
    monopole + J2 only, W(a_E, 0, 0) misses W0 by 6e-16 c^2 (~5.6e1 m^2/s^2):
    J4 and higher zonals are not modelled.  Keywords as in
    :func:`earth_potential_terms_m2_per_s2`.
    """
    x = _vec(pos_itrs_m, "pos_itrs_m")
    rho2 = x[..., 0] ** 2 + x[..., 1] ** 2
    return earth_potential_m2_per_s2(x, **kwargs) + 0.5 * omega_rad_per_s**2 * rho2


def tidal_potential_m2_per_s2(pos_m, bodies) -> np.ndarray:
    """Quadrupole tidal potential of external bodies at a point near the
    geocentre (m^2/s^2, positive convention):

        U_tidal(x) = sum_B GM_B / r_B^3 * [3 (x . r_B/r_B)^2 - |x|^2] / 2

    i.e. the external Newtonian potential minus its value and gradient at
    the geocentre, to second order in |x|/r_B (TN36 chapter 10, the "tidal
    terms" of the clock rate; IAU 2000 Resolution B1.3; Ashby 2003).  The
    next (octupole) term is at most GM_B |x|^3 / r_B^4.

    ``bodies``: iterable of ``(geocentric_pos_m, gm_m3_per_s2)`` with positions
    (..., 3) in the frame and at the instants of ``pos_m``
    (:func:`sun_moon_geocentric_m` gives Sun and Moon).  Magnitudes at the
    Earth's surface: Moon <= 4.4 m^2/s^2 (4.9e-17 in rate), Sun <= 1.7 m^2/s^2
    (1.9e-17); at GNSS radius x17: 8.5e-16 and 3.3e-16.
    """
    x = _vec(pos_m, "pos_m")
    x2 = _dot(x, x)
    u = np.zeros(np.broadcast_shapes(x2.shape))
    for body_pos, gm in bodies:  # a loop over bodies, not over records
        rb = _vec(body_pos, "body position")
        rb2 = _dot(rb, rb)
        xr = _dot(x, rb)
        u = u + float(gm) / (rb2 * np.sqrt(rb2)) * (1.5 * xr * xr / rb2 - 0.5 * x2)
    return u


def sun_moon_geocentric_m(tdb_mjd, tdb_sod_s, ephemeris=None) -> list:
    """``[(moon_pos_m, GM_moon), (sun_pos_m, GM_sun)]``, geocentric (BCRS
    difference body - Earth, ICRF axes) from DE421 through
    :mod:`stages.physics.ephemeris`, GMs TDB-compatible (DE421 / TN36 Table 1.1),
    ready for :func:`tidal_potential_m2_per_s2`.

    TT may be passed for TDB: they differ by < 2 ms, which moves the Moon by
    < 2 m (relative 5e-9 of the tidal term).  The BCRS difference vector
    stands in for the GCRS one (they differ by O(c^-2) ~ 1e-8 relative).
    """
    from .ephemeris import GM_M3_PER_S2, load_planetary_ephemeris

    eph = load_planetary_ephemeris() if ephemeris is None else ephemeris
    earth, _ = eph.posvel_m("earth", tdb_mjd, tdb_sod_s)
    moon, _ = eph.posvel_m("moon", tdb_mjd, tdb_sod_s)
    sun, _ = eph.posvel_m("sun", tdb_mjd, tdb_sod_s)
    return [(moon - earth, GM_M3_PER_S2["moon"]), (sun - earth, GM_M3_PER_S2["sun"])]


# ---------------------------------------------------------------------------
# Clock rates
# ---------------------------------------------------------------------------
def _rate_dict(mono, j2_term, v2, tidal):
    terms = {
        "gravitational": K.L_G - mono / _C2,
        "j2": -j2_term / _C2,
        "velocity": -0.5 * v2 / _C2,
        "tidal": -tidal / _C2,
    }
    terms["total"] = terms["gravitational"] + terms["j2"] + terms["velocity"] + terms["tidal"]
    return terms


def clock_rate_terms(
    pos_gcrs_m,
    vel_gcrs_m_per_s,
    *,
    gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2,
    a_e_m: float = K.EARTH_EQUATORIAL_RADIUS_M,
    j2: float = K.EARTH_J2,
    pole_gcrs=None,
    tidal_bodies=None,
) -> dict:
    """Fractional frequency of a clock relative to TT, d tau/dTT - 1, term by
    term (dimensionless arrays), from eq. (R) of the module docstring
    (TN36 section 10.2):

        d tau/dTT - 1 = L_G - [v^2/2 + U_E(x) + U_tidal(x)] / c^2

        "gravitational" = L_G - GM/(r c^2)      (monopole, referred to the geoid
                                                 through L_G = W0/c^2)
        "j2"            = -U_J2(x)/c^2          (see earth_potential_terms_m2_per_s2)
        "velocity"      = -v^2 / (2 c^2)        (v = GCRS velocity)
        "tidal"         = -U_tidal(x)/c^2       (0 unless ``tidal_bodies`` given)
        "total"         = sum of the four.

    ``pos_gcrs_m`` (..., 3) and ``vel_gcrs_m_per_s`` (..., 3): GCRS state in
    TT-compatible units (what :func:`stages.physics.earth_rotation.itrs_to_gcrs`
    returns for a ground clock, or an orbit).  ``pole_gcrs``: the CIP unit
    vector for the J2 term (default: GCRS z, error quantified in
    :func:`earth_potential_terms_m2_per_s2`: <= 2.7e-15 at the surface in 2025).
    ``tidal_bodies``: as in :func:`tidal_potential_m2_per_s2`.

    Examples (checked in tests/test_clock_rates.py): circular orbit at
    a = 26 561.75 km: gravitational +5.2996e-10, velocity -8.349e-11, sum
    +4.4647e-10 (IS-GPS-200 section 3.3.1.1 factory offset -4.4647e-10).
    """
    x = _vec(pos_gcrs_m, "pos_gcrs_m")
    v = _vec(vel_gcrs_m_per_s, "vel_gcrs_m_per_s")
    u = earth_potential_terms_m2_per_s2(x, gm_m3_per_s2=gm_m3_per_s2, a_e_m=a_e_m, j2=j2, pole=pole_gcrs)
    tidal = tidal_potential_m2_per_s2(x, tidal_bodies) if tidal_bodies else np.zeros_like(u["monopole"])
    return _rate_dict(u["monopole"], u["j2"], _dot(v, v), tidal)


def ground_clock_rate_terms(
    pos_itrs_m,
    *,
    omega_rad_per_s: float = EARTH_ROTATION_RATE_RAD_PER_S,
    gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2,
    a_e_m: float = K.EARTH_EQUATORIAL_RADIUS_M,
    j2: float = K.EARTH_J2,
    tidal_bodies=None,
) -> dict:
    """:func:`clock_rate_terms` for a clock at rest on the rotating Earth,
    evaluated in the Earth-fixed frame (same keys):

        v^2 = omega^2 (x^2 + y^2)    (|omega x r| of the GCRS velocity),
        J2 with the ITRS z (the figure axis; exact to polar motion).

    So "total" = L_G - W(x)/c^2 - U_tidal/c^2 with W the effective potential
    (:func:`effective_potential_m2_per_s2`): a clock on the geoid keeps TT
    (TN36 section 10.2; Ashby 2003 eq. 18).  It equals :func:`clock_rate_terms`
    on the itrs_to_gcrs state with the CIP as pole to < 5e-18 (test): the
    Earth-fixed form omits the motion of the pole in the GCRS
    (precession-nutation, <~3e-11 rad/s, <~2e-4 m/s at the surface, <~3e-18
    in rate) and takes ITRS z for the CIP (polar motion, < 3e-18).
    ``tidal_bodies`` positions must be in the same (Earth-fixed) frame.

    Limitation: monopole + J2 is not the geoid.  For a ground clock the rate
    relative to TT is best taken from its geopotential number
    (:func:`rate_from_geopotential_number`); this model is off by the geoid
    undulation (up to ~100 m, ~1e-14) and the omitted zonals.
    """
    x = _vec(pos_itrs_m, "pos_itrs_m")
    u = earth_potential_terms_m2_per_s2(x, gm_m3_per_s2=gm_m3_per_s2, a_e_m=a_e_m, j2=j2)
    v2 = omega_rad_per_s**2 * (x[..., 0] ** 2 + x[..., 1] ** 2)
    tidal = tidal_potential_m2_per_s2(x, tidal_bodies) if tidal_bodies else np.zeros_like(v2)
    return _rate_dict(u["monopole"], u["j2"], v2, tidal)


def bcrs_clock_rate_terms(
    pos_bcrs_m,
    vel_bcrs_m_per_s,
    body_pos_bcrs_m,
    gm_m3_per_s2,
    *,
    earth_j2: bool = True,
) -> dict:
    """Fractional frequency of a clock against TDB, d tau/dTDB - 1, term by
    term, for a clock at barycentric position x with barycentric velocity v:

        d tau/dTCB = 1 - [v^2/2 + U(x)] / c^2            (TN36 eq. 10.3, c^-2)
        dTDB/dTCB  = 1 - L_B                             (IAU 2006 Res. B3)
        d tau/dTDB - 1 = L_B - [v^2/2 + U(x)] / c^2                          (B)

    with U the Newtonian potential of the bodies, positive convention
    (``U = sum_B GM_B/|x - x_B|``, plus the Earth's J2 term if "earth" is a
    body and ``earth_j2``, from :func:`earth_potential_terms_m2_per_s2` about
    the geocentre with the GCRS z axis as pole).  Keys as
    :func:`clock_rate_terms`:

        "gravitational" = -sum_B GM_B/(r_B c^2)       (monopoles)
        "j2"            = -U_J2/c^2                     (0 without the Earth)
        "velocity"      = -v^2/(2 c^2)                  (barycentric velocity)
        "scale"         = L_B                           (TDB's rate)
        "total"         = sum of the four.

    (B) drops L_B [..]/c^2 (< 3e-16 for a clock at 1 au from the Sun) and the
    c^-4 terms.  Near the Earth it is (R) of the module docstring composed with
    d TT/d TDB at the clock, TDB - TT = (TDB - TT)_geocentre + v_E . x/c^2
    (tests/test_clock_rates.py checks this against erfa.dtdb).

    ``pos_bcrs_m``, ``vel_bcrs_m_per_s``: (n, 3); ``body_pos_bcrs_m``: body
    name -> (n, 3) barycentric positions at the same instants;
    ``gm_m3_per_s2``: body name -> GM.
    """
    x = _vec(pos_bcrs_m, "pos_bcrs_m")
    v = _vec(vel_bcrs_m_per_s, "vel_bcrs_m_per_s")
    mono = np.zeros(x.shape[:-1])
    j2_term = np.zeros(x.shape[:-1])
    for name, pb in body_pos_bcrs_m.items():  # a loop over bodies, not records
        rel = x - _vec(pb, f"{name} position")
        if name == "earth" and earth_j2:
            u = earth_potential_terms_m2_per_s2(rel, gm_m3_per_s2=gm_m3_per_s2[name])
            mono = mono + u["monopole"]
            j2_term = j2_term + u["j2"]
        else:
            mono = mono + gm_m3_per_s2[name] / np.sqrt(_dot(rel, rel))
    terms = {
        "gravitational": -mono / _C2,
        "j2": -j2_term / _C2,
        "velocity": -0.5 * _dot(v, v) / _C2,
        "scale": np.full(mono.shape, K.L_B),
    }
    terms["total"] = terms["gravitational"] + terms["j2"] + terms["velocity"] + terms["scale"]
    return terms


def rate_from_geopotential_number(c_m2_per_s2) -> np.ndarray:
    """d tau/dTT - 1 = (W0 - W)/c^2 = C/c^2 for a clock at rest on the Earth
    with geopotential number C = W0 - W (positive above the geoid, positive
    potential convention), since L_G = W0/c^2 (TN36 Table 1.1, IAU 2000
    Resolution B1.9) and d tau/dTT = 1 + L_G - W/c^2 (module eq. (R) with
    the centrifugal term).  Near the surface C ~ g H: 1.09e-16 per metre."""
    return np.asarray(c_m2_per_s2, dtype=np.float64) / _C2


# ---------------------------------------------------------------------------
# Eccentricity term and the Kepler decomposition of proper time
# ---------------------------------------------------------------------------
def eccentricity_term_s(pos_m, vel_m_per_s) -> np.ndarray:
    """Periodic relativistic clock term (s), vector form:

        Delta t_r = -2 (r . v) / c^2

    (Ashby 2003 section 5; in the Kepler case it equals F e sqrt(A) sin E,
    :func:`eccentricity_term_kepler_s`).  Sign: it is the periodic part of
    tau - t, i.e. the term *added to the clock reading* to go from the
    secular-rate model to proper time (:func:`kepler_clock_offset_s`);
    IS-GPS-200 adds the same quantity to the broadcast satellite clock offset.
    """
    return -2.0 * _dot(_vec(pos_m, "pos_m"), _vec(vel_m_per_s, "vel_m_per_s")) / _C2


def eccentricity_term_kepler_s(e, sqrt_a_sqrt_m, e_anomaly_rad, gm_m3_per_s2: float = IS_GPS_200_MU_M3_PER_S2) -> np.ndarray:
    """Delta t_r = F e sqrt(A) sin E,  F = -2 sqrt(GM)/c^2 (s)

    (IS-GPS-200 section 20.3.3.3.3.1, from memory; with the default
    GM = mu = 3.986005e14, F = -4.442807633e-10 s/sqrt(m)).  For a Kepler orbit
    r . v = sqrt(GM a) e sin E, so this equals :func:`eccentricity_term_s`
    when ``gm_m3_per_s2`` is the GM of the orbit.  Example: e = 0.01,
    sqrt(A) = 5153.8 sqrt(m): amplitude 22.9 ns.
    """
    f = -2.0 * np.sqrt(gm_m3_per_s2) / _C2
    return f * np.asarray(e, dtype=np.float64) * np.asarray(sqrt_a_sqrt_m, dtype=np.float64) * np.sin(
        np.asarray(e_anomaly_rad, dtype=np.float64)
    )


def kepler_secular_rate(a_m, gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2) -> np.ndarray:
    """Constant part of d tau/dTT - 1 on a Kepler orbit (monopole field):

        L_G - (3/2) GM / (a c^2).

    Derivation (vis-viva v^2 = GM (2/r - 1/a)): v^2/2 + GM/r = 2 GM/r - GM/(2a);
    with dt = (r/a) dE/n and E = M + e sin E,
        integral GM/r dt = (GM/a) Delta t + sqrt(GM a) e Delta(sin E),
    so integral [v^2/2 + GM/r] dt / c^2 = (3/2) GM/(a c^2) Delta t
    + 2 sqrt(GM a) e Delta(sin E) / c^2: a secular rate -(3/2) GM/(a c^2)
    relative to coordinate time, and a periodic part that is the eccentricity
    term (Ashby 2003 section 5).  For a = 26 561.75 km: +4.4647e-10.
    """
    return K.L_G - 1.5 * gm_m3_per_s2 / (np.asarray(a_m, dtype=np.float64) * _C2)


def kepler_clock_offset_s(a_m, e, e_anomaly_rad, e_anomaly_ref_rad, dt_s, gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2):
    """tau - TT accumulated since a reference instant on a Kepler orbit (s),
    monopole field, analytically (:func:`kepler_secular_rate`):

        [L_G - 3 GM/(2 a c^2)] Delta t - 2 sqrt(GM a) e [sin E - sin E_ref] / c^2

    ``dt_s`` = t - t_ref (TT seconds); E, E_ref the eccentric anomalies at t
    and t_ref.  The second term is the difference of
    :func:`eccentricity_term_kepler_s` values.
    """
    sa = np.sqrt(np.asarray(a_m, dtype=np.float64))
    return kepler_secular_rate(a_m, gm_m3_per_s2) * np.asarray(dt_s, dtype=np.float64) + (
        eccentricity_term_kepler_s(e, sa, e_anomaly_rad, gm_m3_per_s2)
        - eccentricity_term_kepler_s(e, sa, e_anomaly_ref_rad, gm_m3_per_s2)
    )


# ---------------------------------------------------------------------------
# Quadrature
# ---------------------------------------------------------------------------
_GL2 = (0.5 - 0.5 / np.sqrt(3.0), 0.5 + 0.5 / np.sqrt(3.0))  # 2-point Gauss-Legendre nodes on [0, 1]


def integrate_rate_s(t_s, rate) -> np.ndarray:
    """Cumulative integral of ``rate`` over the record times ``t_s`` (s),
    zero at the first record: out[k] = integral_{t_0}^{t_k} rate dt.

    ``t_s``: (n,) strictly increasing, any spacing.  ``rate``: (n,) or (n, m)
    (several terms at once).  Rule: on each interval [t_i, t_{i+1}] the
    integral of the cubic through the 4 nearest records (t_{i-1} .. t_{i+2};
    the stencil is shifted inward at the ends), computed exactly by 2-point
    Gauss-Legendre quadrature of that cubic (Abramowitz & Stegun 25.4.29,
    exact for cubics -- number from memory).  On a uniform grid the interior
    weights are h/24 (-1, 13, 13, -1), the 4-point Lagrange rule; the global
    error is O(h^4) like composite Simpson, but the integral is available at
    every record and on non-uniform grids.  Measured against the analytic
    Kepler decomposition (a = 26 562 km, 1 day; tests/test_clock_rates.py):
    max error 4.4e-14 s (e = 0.1) and 2.3e-15 s (e = 0.01) at 300 s spacing,
    7e-17 s and 4e-18 s at 60 s; error ratio 15.7-15.9 per halving of h.
    The trapezoid rule on the same 300 s samples is off by 9e-13 s.  n = 2: trapezoid;
    n = 3: the parabola through the 3 records.
    """
    t = np.asarray(t_s, dtype=np.float64)
    f = np.asarray(rate, dtype=np.float64)
    if t.ndim != 1 or f.shape[:1] != t.shape:
        raise ValueError(f"t_s must be (n,) and rate (n,) or (n, m); got {t.shape} and {f.shape}")
    n = t.size
    if n == 0:
        raise ValueError("t_s is empty")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(f))):
        raise ValueError("t_s and rate must be finite")
    if n > 1 and np.any(np.diff(t) <= 0.0):
        raise ValueError("t_s must be strictly increasing (sort the records, drop duplicate times)")
    out = np.zeros(f.shape)
    if n == 1:
        return out
    m = min(4, n)  # stencil size
    i = np.arange(n - 1)
    start = np.clip(i - (m // 2 - 1), 0, n - m)
    idx = start[:, None] + np.arange(m)  # (n-1, m) stencil record indices
    h = t[1:] - t[:-1]
    d = t[idx] - t[:-1, None]  # node offsets from the interval start, (n-1, m)
    w = np.zeros((n - 1, m))
    for g in _GL2:  # 2 Gauss nodes, m Lagrange bases: loops over the stencil only
        u = g * h
        for k in range(m):
            basis = np.ones(n - 1)
            for j in range(m):
                if j != k:
                    basis *= (u - d[:, j]) / (d[:, k] - d[:, j])
            w[:, k] += 0.5 * h * basis
    fs = f[idx]  # (n-1, m, ...)
    piece = np.einsum("im,im...->i...", w, fs)
    out[1:] = np.cumsum(piece, axis=0)
    return out


# ---------------------------------------------------------------------------
# Sagnac
# ---------------------------------------------------------------------------
def sagnac_s(r_from_ecef_m, r_to_ecef_m, omega_rad_per_s: float = EARTH_ROTATION_RATE_RAD_PER_S) -> np.ndarray:
    """Sagnac correction (s) for a signal computed in the Earth-fixed frame:

        Delta t = omega (x1 y2 - x2 y1) / c^2 = 2 omega A_z / c^2

    (Ashby 2003 section 2), with r1 = ``r_from_ecef_m`` the transmitter at
    emission and r2 = ``r_to_ecef_m`` the receiver at reception, both
    Earth-fixed (ITRS), and A_z the area swept by the radius vector to the
    signal, projected on the equatorial plane.

    Sign convention: positive when the signal travels eastward (counter-
    clockwise seen from the north).  The coordinate light time in the
    rotating frame is |r2 - r1|/c + Delta t: eastward signals take longer,
    because in the inertial frame the receiver moves away during transit.
    Once around the equator: 2 omega pi a_E^2/c^2 = 207.4 ns; a GNSS
    satellite on the horizon of an equatorial receiver: 133.4 ns.  Neglected:
    O(omega^2) terms; against the exact inertial-frame light time the
    residual is 0.34 ps for that horizon link (test).
    """
    r1 = _vec(r_from_ecef_m, "r_from_ecef_m")
    r2 = _vec(r_to_ecef_m, "r_to_ecef_m")
    return omega_rad_per_s * (r1[..., 0] * r2[..., 1] - r2[..., 0] * r1[..., 1]) / _C2
