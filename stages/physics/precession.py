"""Relativistic precession of gyroscopes and orbits near the Earth: geodetic
(de Sitter) and frame-dragging (Lense-Thirring) precession, the secular
rates of orbital elements, and the relativistic satellite accelerations of
the IERS Conventions (pure, vectorised functions; numpy only).

Vectors are arrays of shape (..., 3) (one row per record, (n, 3) for n
records); rates are in rad/s, accumulated angles in rad.  Geocentric vectors
are in the GCRS (kinematically non-rotating) unless stated otherwise.

Published sources (each function repeats the equation it implements):

* L. I. Schiff 1960, PRL 4, 215 ("Schiff 1960"): precession of a gyroscope in
  orbit about a rotating mass, geodetic plus frame-dragging term; written in
  the PPN form of C. M. Will 2014, Living Rev. Relativity 17, 4 ("Will 2014",
  section on the geodetic and frame-dragging precession of gyroscopes;
  equation numbers not relied upon):

      Omega = (gamma + 1/2) GM/(c^2 r^3) (r x v)                          (G)
            + ((1 + gamma)/2) G/(c^2 r^3) [3 (J . rhat) rhat - J]         (LT)

  J = the central body's spin angular momentum (kg m^2/s), dS/dt = Omega x S.
* J. Lense & H. Thirring 1918, Phys. Z. 19, 156; I. Ciufolini & E. C. Pavlis
  2004, Nature 431, 958 ("Ciufolini & Pavlis 2004"): secular node and
  perigee rates of an orbit around a rotating body (PPN factor (1+gamma)/2).
* Will 2014: perihelion shift per orbit 6 pi GM/(c^2 a (1 - e^2)) times
  (2 + 2 gamma - beta)/3.
* IERS Conventions (2010), IERS Technical Note 36 ("TN36"), chapter 10,
  eq. 10.12: the post-Newtonian acceleration of an Earth satellite
  (Schwarzschild, Lense-Thirring and de Sitter terms); Table 1.1 (c, GM,
  a_E; via :mod:`stages.physics.constants`); eq. 5.15 (the Earth's rotation
  rate, :data:`stages.physics.clock_rates.EARTH_ROTATION_RATE_RAD_PER_S`).
* CODATA 2018 (E. Tiesinga et al. 2021, Rev. Mod. Phys. 93, 025010): the
  Newtonian constant of gravitation G = 6.67430e-11 m^3 kg^-1 s^-2.
* The Earth's polar moment of inertia C = 0.3307 M a_E^2 (moment-of-inertia
  factor C/(M a_E^2) = 0.3307: a fact of the trade, from memory).  With it
  J/M = 9.81e8 m^2/s, the value TN36 quotes beside eq. 10.12 (|J| ~ 9.8e8).

Functions:

* :func:`earth_angular_momentum_kg_m2_per_s` (and the constants
  :data:`EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S`,
  :data:`EARTH_ANGULAR_MOMENTUM_PER_UNIT_MASS_M2_PER_S`).
* :func:`geodetic_precession_rate_rad_per_s` (G),
  :func:`frame_dragging_precession_rate_rad_per_s` (LT),
  :func:`de_sitter_precession_rate_rad_per_s` ((G) for the Earth's motion
  around the Sun).
* :func:`precess_spin_axis` -- accumulated rotation vectors and the spin axis
  along sampled orbit states; :func:`drift_in_plane_rad` -- NS / EW drifts.
* :func:`lense_thirring_node_rate_rad_per_s`,
  :func:`lense_thirring_perigee_rate_rad_per_s`,
  :func:`schwarzschild_perigee_rate_rad_per_s`,
  :func:`rigid_rotation_element_rates_rad_per_s`,
  :func:`de_sitter_perigee_rate_rad_per_s` -- secular element rates.
* :func:`acceleration_terms_m_per_s2` -- TN36 eq. 10.12 term by term.
* :func:`crosses_surface`, :func:`normalise_directions` -- input screening.
"""

from __future__ import annotations

import numpy as np

from . import constants as K
from .clock_rates import EARTH_ROTATION_RATE_RAD_PER_S, integrate_rate_s

__all__ = [
    "G_M3_PER_KG_S2",
    "EARTH_MOMENT_OF_INERTIA_FACTOR",
    "EARTH_MASS_KG",
    "EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S",
    "EARTH_ANGULAR_MOMENTUM_PER_UNIT_MASS_M2_PER_S",
    "JULIAN_YEAR_S",
    "MAS_PER_RAD",
    "earth_angular_momentum_kg_m2_per_s",
    "geodetic_precession_rate_rad_per_s",
    "frame_dragging_precession_rate_rad_per_s",
    "de_sitter_precession_rate_rad_per_s",
    "precess_spin_axis",
    "drift_in_plane_rad",
    "lense_thirring_node_rate_rad_per_s",
    "lense_thirring_perigee_rate_rad_per_s",
    "schwarzschild_perigee_rate_rad_per_s",
    "rigid_rotation_element_rates_rad_per_s",
    "de_sitter_perigee_rate_rad_per_s",
    "acceleration_terms_m_per_s2",
    "crosses_surface",
    "normalise_directions",
]

_C2 = K.C_M_PER_S**2

# Newtonian constant of gravitation, CODATA 2018 recommended value
# (Tiesinga et al. 2021, Rev. Mod. Phys. 93, 025010).  Only used to turn GM
# into a mass for the moment of inertia; every orbit formula uses GM.
G_M3_PER_KG_S2 = 6.67430e-11

# Polar moment of inertia factor C/(M a_E^2) of the Earth (fact of the trade,
# from memory).  Its uncertainty (last digit) is 3e-4 relative: far below
# the few per cent to which frame dragging is measured.
EARTH_MOMENT_OF_INERTIA_FACTOR = 0.3307

# M_E = GM_E/G with the TCG-compatible (SI) GM of TN36 Table 1.1: 5.972e24 kg.
EARTH_MASS_KG = K.GM_EARTH_TCG_M3_PER_S2 / G_M3_PER_KG_S2

# |J| = C omega = 0.3307 M a_E^2 omega (omega: TN36 eq. 5.15) = 5.86e33 kg m^2/s;
# per unit mass 0.3307 a_E^2 omega = 9.81e8 m^2/s (TN36 beside eq. 10.12: ~9.8e8).
EARTH_ANGULAR_MOMENTUM_PER_UNIT_MASS_M2_PER_S = (
    EARTH_MOMENT_OF_INERTIA_FACTOR * K.EARTH_EQUATORIAL_RADIUS_M**2 * EARTH_ROTATION_RATE_RAD_PER_S
)
EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S = EARTH_MASS_KG * EARTH_ANGULAR_MOMENTUM_PER_UNIT_MASS_M2_PER_S

# Julian year = 365.25 d of 86 400 s (IAU definition) and milliarcseconds per radian.
JULIAN_YEAR_S = 365.25 * K.SECONDS_PER_DAY
MAS_PER_RAD = 180.0 / np.pi * 3600.0 * 1000.0

_E3 = np.array([0.0, 0.0, 1.0])


# ---------------------------------------------------------------------------
# Input helpers
# ---------------------------------------------------------------------------
def _dot(a, b):
    return np.einsum("...i,...i->...", a, b)


def _vec(x, name: str) -> np.ndarray:
    arr = np.asarray(x, dtype=np.float64)
    if arr.shape[-1:] != (3,):
        raise ValueError(f"{name} must have shape (..., 3), got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        bad = np.flatnonzero(~np.all(np.isfinite(arr.reshape(-1, 3)), axis=1))
        raise ValueError(f"{name}: {bad.size} record(s) not finite (first at index {bad[0]})")
    return arr


def _radius_m(pos, name: str) -> np.ndarray:
    """|pos| for a finite (..., 3) array, ValueError if any radius is zero."""
    r = np.sqrt(_dot(pos, pos))
    if np.any(r <= 0.0):
        bad = np.flatnonzero(np.ravel(r) <= 0.0)
        raise ValueError(f"{name}: {bad.size} record(s) at radius 0 (first at index {bad[0]}); "
                         "the field of a point mass is undefined there")
    return r


def _positive(x, name: str) -> np.ndarray:
    arr = np.asarray(x, dtype=np.float64)
    if not np.all(np.isfinite(arr)) or np.any(arr <= 0.0):
        raise ValueError(f"{name} must be finite and positive, got {x!r}")
    return arr


def _finite(x, name: str) -> float:
    v = float(x)
    if not np.isfinite(v):
        raise ValueError(f"{name} must be finite, got {x!r}")
    return v


def _eccentricity(e) -> np.ndarray:
    ecc = np.asarray(e, dtype=np.float64)
    if not np.all(np.isfinite(ecc)) or np.any(ecc < 0.0) or np.any(ecc >= 1.0):
        raise ValueError(f"eccentricity must satisfy 0 <= e < 1, got {e!r}")
    return ecc


def _j_vec(j_vec_kg_m2_per_s) -> np.ndarray:
    if j_vec_kg_m2_per_s is None:
        return earth_angular_momentum_kg_m2_per_s()
    return _vec(j_vec_kg_m2_per_s, "j_vec_kg_m2_per_s")


def crosses_surface(pos_m, radius_m: float = K.EARTH_EQUATORIAL_RADIUS_M) -> np.ndarray:
    """Boolean mask (...,): True where a record lies at or below the sphere of
    radius ``radius_m`` (|pos| <= radius), or where its position is not
    finite (it cannot be shown to be outside).

    The formulas of this module describe the field *outside* the central
    body (point mass and spin, Schiff 1960; TN36 eq. 10.12); records flagged
    here should be quarantined rather than corrected.  Default radius: a_E
    of TN36 Table 1.1 (the equatorial radius: a conservative sphere, the
    polar radius is 21 km smaller).  ``radius_m`` must be finite and > 0.
    """
    rad = _positive(radius_m, "radius_m")
    x = np.asarray(pos_m, dtype=np.float64)
    if x.shape[-1:] != (3,):
        raise ValueError(f"pos_m must have shape (..., 3), got {x.shape}")
    r = np.sqrt(_dot(x, x))
    return ~np.isfinite(r) | (r <= rad)


def normalise_directions(vec, tol: float = 1e-9):
    """Unit vectors from nominal directions, with a check of their norm.

    Returns ``(unit, norm_error, beyond_tol)``:

    * ``unit`` (..., 3): vec/|vec|; NaN rows where |vec| is 0 or not finite;
    * ``norm_error`` (...,): | |vec| - 1 |  (inf where not finite);
    * ``beyond_tol`` (...,): True where ``norm_error > tol`` or the row is not
      finite -- directions that were not unit vectors to begin with
      (a wrong unit, a truncated catalogue entry) and should be checked
      rather than silently rescaled.

    ``tol`` must be finite and >= 0 (ValueError otherwise).
    """
    t = float(tol)
    if not np.isfinite(t) or t < 0.0:
        raise ValueError(f"tol must be finite and >= 0, got {tol!r}")
    v = np.asarray(vec, dtype=np.float64)
    if v.shape[-1:] != (3,):
        raise ValueError(f"vec must have shape (..., 3), got {v.shape}")
    norm = np.sqrt(_dot(v, v))
    ok = np.isfinite(norm) & (norm > 0.0)
    safe = np.where(ok, norm, 1.0)
    unit = np.where(ok[..., None], v / safe[..., None], np.nan)
    err = np.where(np.isfinite(norm), np.abs(norm - 1.0), np.inf)
    return unit, err, ~ok | (err > t)


# ---------------------------------------------------------------------------
# The Earth's spin
# ---------------------------------------------------------------------------
def earth_angular_momentum_kg_m2_per_s(
    pole=None,
    *,
    moment_factor: float = EARTH_MOMENT_OF_INERTIA_FACTOR,
    gm_m3_per_s2: float = K.GM_EARTH_TCG_M3_PER_S2,
    radius_m: float = K.EARTH_EQUATORIAL_RADIUS_M,
    omega_rad_per_s: float = EARTH_ROTATION_RATE_RAD_PER_S,
) -> np.ndarray:
    """The Earth's spin angular momentum vector (kg m^2/s):

        J = C omega pole,   C = 0.3307 M a_E^2,   M = GM/G

    (moment-of-inertia factor: fact of the trade, from memory; GM and a_E:
    TN36 Table 1.1; omega: TN36 eq. 5.15; G: CODATA 2018).  |J| = 5.86e33
    kg m^2/s; |J|/M = 9.81e8 m^2/s (TN36 beside eq. 10.12: ~9.8e8 m^2/s).

    ``pole``: unit vector(s) (..., 3) of the rotation axis; default GCRS z.
    The true pole (CIP) is 2.4e-3 rad from GCRS z in 2025 (precession-
    nutation): a 2.4e-3 rad tilt of J, i.e. < 2.4e-3 of the frame-dragging
    rate in any component.  Pass the CIP for better.
    """
    mag = (_positive(moment_factor, "moment_factor") * _positive(gm_m3_per_s2, "gm_m3_per_s2") / G_M3_PER_KG_S2
           * _positive(radius_m, "radius_m") ** 2 * _positive(omega_rad_per_s, "omega_rad_per_s"))
    if pole is None:
        return mag * _E3
    unit, _, bad = normalise_directions(_vec(pole, "pole"), 1e-6)
    if np.any(bad):
        raise ValueError("pole must be a unit vector (|pole| = 1 within 1e-6)")
    return mag * unit


# ---------------------------------------------------------------------------
# Gyroscope precession (Schiff 1960; Will 2014)
# ---------------------------------------------------------------------------
def geodetic_precession_rate_rad_per_s(
    pos_m, vel_m_per_s, gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2, gamma: float = 1.0
) -> np.ndarray:
    """Geodetic (de Sitter) precession rate vector of a gyroscope (rad/s):

        Omega_G = (gamma + 1/2) GM/(c^2 r^3) (r x v)

    (Schiff 1960 eq. for the geodetic term; PPN form Will 2014), with r, v
    the position and velocity of the gyroscope relative to the central mass;
    the spin obeys dS/dt = Omega_G x S.  It is along the orbit normal: a
    spin axis in the orbit plane drifts within that plane, in the sense of
    the orbital motion.  For a circular orbit |Omega_G| =
    (gamma + 1/2) (GM)^(3/2)/(c^2 r^(5/2)): 6.62 arcsec/yr at 642 km height.

    ``pos_m``, ``vel_m_per_s``: (..., 3), finite, r > 0 (ValueError).
    """
    x = _vec(pos_m, "pos_m")
    v = _vec(vel_m_per_s, "vel_m_per_s")
    r = _radius_m(x, "pos_m")
    k = (_finite(gamma, "gamma") + 0.5) * _positive(gm_m3_per_s2, "gm_m3_per_s2") / (_C2 * r**3)
    return k[..., None] * np.cross(x, v)


def frame_dragging_precession_rate_rad_per_s(pos_m, j_vec_kg_m2_per_s=None, gamma: float = 1.0) -> np.ndarray:
    """Frame-dragging (Lense-Thirring, Schiff) precession rate vector of a
    gyroscope at rest or in orbit at ``pos_m`` (rad/s):

        Omega_LT = ((1 + gamma)/2) G/(c^2 r^3) [3 (J . rhat) rhat - J]

    (Schiff 1960, frame-dragging term; PPN factor Will 2014), J the central
    body's spin angular momentum (kg m^2/s; default
    :func:`earth_angular_momentum_kg_m2_per_s`: the Earth, pole GCRS z).
    Over the pole (rhat || J): 2 G J/(c^2 r^3) with gamma = 1
    (3.35e-14 rad/s at r = a_E: one turn in ~6 Myr); in the equatorial plane
    -G J/(c^2 r^3); averaged over a circular polar orbit +G J/(2 c^2 r^3).

    The velocity of the gyroscope does not enter at this order (its effect
    is O(v/c) smaller).  ``pos_m`` (..., 3) finite, r > 0 (ValueError).
    """
    x = _vec(pos_m, "pos_m")
    j = _j_vec(j_vec_kg_m2_per_s)
    r = _radius_m(x, "pos_m")
    rhat = x / r[..., None]
    k = 0.5 * (1.0 + _finite(gamma, "gamma")) * G_M3_PER_KG_S2 / (_C2 * r**3)
    return k[..., None] * (3.0 * _dot(j, rhat)[..., None] * rhat - j)


def de_sitter_precession_rate_rad_per_s(
    earth_helio_pos_m, earth_helio_vel_m_per_s, gm_sun_m3_per_s2: float = K.GM_SUN_TDB_M3_PER_S2,
    gamma: float = 1.0,
) -> np.ndarray:
    """Geodetic (de Sitter) precession of the local geocentric frame due to
    the Earth's motion around the Sun (rad/s): eq. (G) with the Sun as
    central mass,

        Omega_dS = (gamma + 1/2) GM_S/(c^2 R^3) (R x V),

    R, V the Earth's heliocentric position and velocity.  Gyroscopes and
    satellite orbits that are fixed in the local inertial frame rotate at
    Omega_dS relative to the (kinematically non-rotating) GCRS axes; the
    de Sitter term of TN36 eq. 10.12 is 2 Omega_dS x v (see
    :func:`acceleration_terms_m_per_s2`).  Along the ecliptic pole, about
    19.2 mas/yr (Bertotti, Ciufolini & Bender 1987, PRL 58, 1062; from
    memory).
    """
    return geodetic_precession_rate_rad_per_s(earth_helio_pos_m, earth_helio_vel_m_per_s, gm_sun_m3_per_s2, gamma)


def precess_spin_axis(
    times_s,
    pos_m,
    vel_m_per_s,
    spin0,
    gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2,
    j_vec_kg_m2_per_s=None,
    gamma: float = 1.0,
    *,
    spin_tol: float = 1e-9,
) -> dict:
    """Relativistic drift of a gyroscope's spin axis along a sampled orbit.

    Integrates dS/dt = (Omega_G + Omega_LT) x S (Schiff 1960; rates from
    :func:`geodetic_precession_rate_rad_per_s` and
    :func:`frame_dragging_precession_rate_rad_per_s` at every sample) to
    first order in the accumulated angles:

        Theta_G(t)  = integral_{t_0}^{t} Omega_G dt',
        Theta_LT(t) = integral_{t_0}^{t} Omega_LT dt',
        S(t) = S_0 + (Theta_G + Theta_LT) x S_0.

    The three components are integrated with
    :func:`stages.physics.clock_rates.integrate_rate_s` (cubic through the 4
    nearest samples, O(h^4); exact when the rates are constant, e.g. on a
    circular equatorial orbit).  Samples must resolve the orbit (the LT rate
    has a component at twice the orbital frequency, and 1/r^3 peaks at
    perigee): on an e = 0.3 orbit the geodetic angle is off by 5e-6 of
    itself at 60 samples per revolution, 1e-8 at 240 (tests).

    Neglected (second order): the rotation by Theta = Theta_G + Theta_LT
    moves S by Theta x S_0 + Theta x (Theta x S_0)/2 + ..., and the
    non-commutativity of rotations about varying axes adds terms of size
    |Theta_G| |Theta_LT|; both are <= |Theta|^2/2.  At 642 km height
    |Theta_G| = 3.2e-5 rad/yr, so the neglected part is 5e-10 rad
    (0.1 mas) after one year.  S(t) is not renormalised: |S| - 1 =
    |Theta x S_0|^2/2 to second order (< 1e-14 after one day at 642 km).

    Arguments: ``times_s`` (n,) strictly increasing; ``pos_m``,
    ``vel_m_per_s`` (n, 3) geocentric states (GCRS); ``spin0`` (3,) initial
    spin direction (unit within ``spin_tol``, else ValueError; it is
    normalised); ``j_vec_kg_m2_per_s`` (3,) or (n, 3), default the Earth
    along GCRS z.

    Returns a dict of arrays: ``"theta_geodetic_rad"``,
    ``"theta_frame_dragging_rad"`` (n, 3) rotation vectors (zero at the first
    sample); ``"rate_geodetic_rad_per_s"``, ``"rate_frame_dragging_rad_per_s"``
    (n, 3) the integrands; ``"spin"`` (n, 3) S(t).
    """
    t = np.asarray(times_s, dtype=np.float64)
    x = _vec(pos_m, "pos_m")
    v = _vec(vel_m_per_s, "vel_m_per_s")
    if t.ndim != 1 or x.shape != (t.size, 3) or v.shape != (t.size, 3):
        raise ValueError(f"times_s must be (n,), pos_m and vel_m_per_s (n, 3); got {t.shape}, {x.shape}, {v.shape}")
    s0, _, bad = normalise_directions(np.asarray(spin0, dtype=np.float64), spin_tol)
    if s0.shape != (3,) or bool(bad):
        raise ValueError(f"spin0 must be one unit vector (3,) (| |S| - 1 | <= {spin_tol}), got {spin0!r}")
    rate_g = geodetic_precession_rate_rad_per_s(x, v, gm_m3_per_s2, gamma)
    rate_lt = frame_dragging_precession_rate_rad_per_s(x, j_vec_kg_m2_per_s, gamma)
    both = integrate_rate_s(t, np.concatenate([rate_g, rate_lt], axis=1))
    theta_g, theta_lt = both[:, :3], both[:, 3:]
    spin = s0 + np.cross(theta_g + theta_lt, s0)
    return {
        "theta_geodetic_rad": theta_g,
        "theta_frame_dragging_rad": theta_lt,
        "rate_geodetic_rad_per_s": rate_g,
        "rate_frame_dragging_rad_per_s": rate_lt,
        "spin": spin,
    }


def drift_in_plane_rad(theta_rad, guide_dir, orbit_normal):
    """Drift of a spin axis that starts along ``guide_dir``, split into the
    component in the orbit plane ("NS") and perpendicular to it ("EW") (rad):

        dS = theta x S_0,
        e_NS = (h x S_0)/|h x S_0|    (in the orbit plane, perpendicular to S_0,
                                       in the sense of the orbital motion),
        e_EW = (h - (h . S_0) S_0)/|..|  (towards the orbit normal h, perpendicular to S_0),
        NS = dS . e_NS,   EW = dS . e_EW.

    For a guide direction in (or near) the plane of a polar orbit the
    geodetic precession (along h) gives a pure NS drift |theta_G| |h x S_0|,
    and the frame dragging averaged over the orbit (along the Earth's pole,
    which lies in the orbit plane) a pure EW drift: the split of the
    orbiting-gyroscope experiment (Everitt et al. 2011, PRL 106, 221101).
    Signs here follow the definitions above (geodetic NS > 0); the paper
    quotes both drifts negative in its own axes.

    ``theta_rad`` (..., 3); ``guide_dir`` and ``orbit_normal`` (3,) or
    (..., 3), normalised here; ValueError if either is not a unit vector
    within 1e-6 or they are parallel (no orbit plane through S_0).
    Returns ``(ns_rad, ew_rad)``, each (...,).
    """
    th = _vec(theta_rad, "theta_rad")
    s0, _, bad_s = normalise_directions(_vec(guide_dir, "guide_dir"), 1e-6)
    h, _, bad_h = normalise_directions(_vec(orbit_normal, "orbit_normal"), 1e-6)
    if np.any(bad_s) or np.any(bad_h):
        raise ValueError("guide_dir and orbit_normal must be unit vectors (within 1e-6)")
    hxs = np.cross(h, s0)
    n_ns = np.sqrt(_dot(hxs, hxs))
    if np.any(n_ns < 1e-9):
        raise ValueError("guide_dir is parallel to orbit_normal: the NS/EW split is undefined")
    e_ns = hxs / n_ns[..., None]
    ew = h - _dot(h, s0)[..., None] * s0
    e_ew = ew / np.sqrt(_dot(ew, ew))[..., None]
    ds = np.cross(th, s0)
    return _dot(ds, e_ns), _dot(ds, e_ew)


# ---------------------------------------------------------------------------
# Secular rates of orbital elements
# ---------------------------------------------------------------------------
def lense_thirring_node_rate_rad_per_s(
    a_m, e, j_kg_m2_per_s: float = EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S, gamma: float = 1.0
) -> np.ndarray:
    """Secular Lense-Thirring rate of the longitude of the ascending node,
    node referred to the central body's equator (rad/s):

        dOmega/dt = ((1 + gamma)/2) 2 G J / (c^2 a^3 (1 - e^2)^(3/2))

    (Lense & Thirring 1918; Ciufolini & Pavlis 2004 eq. 1, PPN factor as in
    Will 2014).  Independent of the inclination.  For a = 12 270 km,
    e = 0.0045: 30.7 mas/yr.  ``a_m`` > 0, 0 <= e < 1 (ValueError).
    """
    a = _positive(a_m, "a_m")
    ecc = _eccentricity(e)
    j = _positive(j_kg_m2_per_s, "j_kg_m2_per_s")
    return (0.5 * (1.0 + _finite(gamma, "gamma")) * 2.0 * G_M3_PER_KG_S2 * j
            / (_C2 * a**3 * (1.0 - ecc * ecc) ** 1.5))


def lense_thirring_perigee_rate_rad_per_s(
    a_m, e, i_rad, j_kg_m2_per_s: float = EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S, gamma: float = 1.0
) -> np.ndarray:
    """Secular Lense-Thirring rate of the argument of perigee (rad/s):

        domega/dt = -((1 + gamma)/2) 6 G J cos i / (c^2 a^3 (1 - e^2)^(3/2))

    (Lense & Thirring 1918; Ciufolini & Pavlis 2004), i the inclination to
    the central body's equator.  = -3 cos i times the node rate.
    """
    return -3.0 * np.cos(np.asarray(i_rad, dtype=np.float64)) * lense_thirring_node_rate_rad_per_s(
        a_m, e, j_kg_m2_per_s, gamma
    )


def schwarzschild_perigee_rate_rad_per_s(
    a_m, e, gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2, gamma: float = 1.0, beta: float = 1.0
) -> np.ndarray:
    """Secular relativistic advance of the perigee (perihelion) of a test body
    in the field of a point mass (rad/s):

        domega/dt = ((2 + 2 gamma - beta)/3) 3 (GM)^(3/2) / (c^2 a^(5/2) (1 - e^2))

    i.e. Will 2014's shift per orbit 6 pi GM/(c^2 a (1 - e^2)) x
    (2 + 2 gamma - beta)/3 divided by the Kepler period 2 pi sqrt(a^3/GM).
    Mercury: 42.98 arcsec per century (Will 2014).
    """
    a = _positive(a_m, "a_m")
    ecc = _eccentricity(e)
    gm = _positive(gm_m3_per_s2, "gm_m3_per_s2")
    ppn = (2.0 + 2.0 * _finite(gamma, "gamma") - _finite(beta, "beta")) / 3.0
    return ppn * 3.0 * gm**1.5 / (_C2 * a**2.5 * (1.0 - ecc * ecc))


def rigid_rotation_element_rates_rad_per_s(omega_rad_per_s, i_rad, raan_rad) -> dict:
    """Rates of the orientation elements of an orbit that turns as a whole
    with angular velocity ``omega`` (rad/s, (..., 3), in the frame of the
    elements):

        omega = dOmega/dt z + di/dt n + domega_p/dt h

    (angular velocity of the 3-1-3 Euler sequence node Omega, inclination i,
    argument of perigee omega_p; rigid-body kinematics, common practice), with
    n = (cos Omega, sin Omega, 0) the node, h = (sin i sin Omega,
    -sin i cos Omega, cos i) the orbit normal, m = h x n.  Hence

        dOmega/dt = omega . m / sin i,   di/dt = omega . n,
        domega_p/dt = omega . h - cos i dOmega/dt.

    Returns a dict ``node``, ``inclination``, ``argument_of_perigee``,
    ``longitude_of_perigee`` (= node + argument of perigee), each (...,).
    The node is undefined for sin i = 0 (inf/NaN there).  Use with
    :func:`de_sitter_precession_rate_rad_per_s`: the de Sitter term turns a
    satellite orbit rigidly (TN36 eq. 10.12, third term = 2 Omega_dS x v).
    """
    w = _vec(omega_rad_per_s, "omega_rad_per_s")
    inc = np.asarray(i_rad, dtype=np.float64)
    node = np.asarray(raan_rad, dtype=np.float64)
    ci, si = np.cos(inc), np.sin(inc)
    co, so = np.cos(node), np.sin(node)
    n = np.stack(np.broadcast_arrays(co, so, np.zeros_like(co)), axis=-1)
    h = np.stack(np.broadcast_arrays(si * so, -si * co, ci), axis=-1)
    m = np.cross(h, n)
    with np.errstate(divide="ignore", invalid="ignore"):
        node_rate = _dot(w, m) / si
    argp_rate = _dot(w, h) - ci * node_rate
    return {
        "node": node_rate,
        "inclination": _dot(w, n),
        "argument_of_perigee": argp_rate,
        "longitude_of_perigee": node_rate + argp_rate,
    }


def de_sitter_perigee_rate_rad_per_s(
    earth_helio_pos_m, earth_helio_vel_m_per_s, orbit_normal=None,
    gm_sun_m3_per_s2: float = K.GM_SUN_TDB_M3_PER_S2, gamma: float = 1.0,
) -> np.ndarray:
    """de Sitter (geodetic) advance of the perigee of a geocentric orbit,
    measured in the orbit plane (rad/s):

        d(perigee)/dt = Omega_dS . h,
        Omega_dS = (gamma + 1/2) GM_S/(c^2 R^3) (R x V)

    (:func:`de_sitter_precession_rate_rad_per_s`; R, V the Earth's
    heliocentric state).  The orbit turns rigidly at Omega_dS (TN36 eq. 10.12,
    de Sitter term); the component along the orbit normal h advances the
    perigee within the plane, the rest tilts the plane (see
    :func:`rigid_rotation_element_rates_rad_per_s` for node and
    inclination).  Default ``orbit_normal``: the direction of R x V itself
    (an orbit in the ecliptic), i.e. |Omega_dS|: ~19.2 mas/yr, the de Sitter
    precession of the lunar perigee (Bertotti, Ciufolini & Bender 1987,
    PRL 58, 1062; from memory).  The lunar orbit is inclined 5.1 deg to the
    ecliptic: cos 5.1 deg = 0.996 of that.
    """
    om = de_sitter_precession_rate_rad_per_s(earth_helio_pos_m, earth_helio_vel_m_per_s, gm_sun_m3_per_s2, gamma)
    if orbit_normal is None:
        return np.sqrt(_dot(om, om))
    h, _, bad = normalise_directions(_vec(orbit_normal, "orbit_normal"), 1e-6)
    if np.any(bad):
        raise ValueError("orbit_normal must be a unit vector (within 1e-6)")
    return _dot(om, h)


# ---------------------------------------------------------------------------
# Relativistic accelerations of an Earth satellite (TN36 eq. 10.12)
# ---------------------------------------------------------------------------
def acceleration_terms_m_per_s2(
    pos_m,
    vel_m_per_s,
    gm_m3_per_s2: float = K.GM_EARTH_TT_M3_PER_S2,
    j_vec_kg_m2_per_s=None,
    earth_helio_pos_m=None,
    earth_helio_vel_m_per_s=None,
    gm_sun_m3_per_s2: float = K.GM_SUN_TDB_M3_PER_S2,
    gamma: float = 1.0,
    beta: float = 1.0,
) -> dict:
    """Post-Newtonian corrections to the acceleration of an Earth satellite,
    IERS Conventions (2010) (TN36) eq. 10.12, term by term (m/s^2, (..., 3)):

        "schwarzschild" = GM_E/(c^2 r^3) { [2 (beta + gamma) GM_E/r - gamma v.v] r
                                           + 2 (1 + gamma) (r . v) v }
        "lense_thirring" = (1 + gamma) GM_E/(c^2 r^3) [ (3/r^2) (r x v) (r . J) + (v x J) ]
        "de_sitter"      = (1 + 2 gamma) [ V x ( -GM_S R / (c^2 R^3) ) ] x v
        "total"          = the sum,

    r, v the satellite's geocentric (GCRS) position and velocity; R, V the
    Earth's heliocentric position and velocity; J in TN36 is the Earth's
    angular momentum *per unit mass*.  Here ``j_vec_kg_m2_per_s`` is the total
    angular momentum (default :func:`earth_angular_momentum_kg_m2_per_s`),
    and GM_E (J/M) = G J_total is used, so the Lense-Thirring term is
    (1 + gamma) G/(c^2 r^3) [..J_total..] and needs no mass.

    Identities (tested): "lense_thirring" = 2 Omega_LT x v and "de_sitter"
    = 2 Omega_dS x v with Omega_LT, Omega_dS from
    :func:`frame_dragging_precession_rate_rad_per_s` and
    :func:`de_sitter_precession_rate_rad_per_s` -- both are perpendicular to
    v.  On a circular orbit with gamma = beta = 1 "schwarzschild" is radial,
    outward, 3 (GM_E)^2/(c^2 r^3).  Sizes on a circular orbit at 7000 km
    (inclination 69 deg): 1.55e-8, 0.7e-10 to 3.6e-10 and 3e-11 to 5e-11 m/s^2.

    The de Sitter term is zero (and R, V are not needed) when
    ``earth_helio_pos_m`` is None; both R and V or neither must be given.
    """
    x = _vec(pos_m, "pos_m")
    v = _vec(vel_m_per_s, "vel_m_per_s")
    r = _radius_m(x, "pos_m")
    gm = _positive(gm_m3_per_s2, "gm_m3_per_s2")
    g = _finite(gamma, "gamma")
    b = _finite(beta, "beta")
    j = _j_vec(j_vec_kg_m2_per_s)
    r3 = r**3
    rv = _dot(x, v)
    vv = _dot(v, v)
    k = gm / (_C2 * r3)
    schw = k[..., None] * ((2.0 * (b + g) * gm / r - g * vv)[..., None] * x + 2.0 * (1.0 + g) * rv[..., None] * v)
    k_lt = (1.0 + g) * G_M3_PER_KG_S2 / (_C2 * r3)
    lt = k_lt[..., None] * ((3.0 * _dot(x, j) / (r * r))[..., None] * np.cross(x, v) + np.cross(v, j))
    if (earth_helio_pos_m is None) != (earth_helio_vel_m_per_s is None):
        raise ValueError("give both earth_helio_pos_m and earth_helio_vel_m_per_s, or neither")
    if earth_helio_pos_m is None:
        ds = np.zeros(np.broadcast_shapes(x.shape, v.shape))
    else:
        rs = _vec(earth_helio_pos_m, "earth_helio_pos_m")
        vs = _vec(earth_helio_vel_m_per_s, "earth_helio_vel_m_per_s")
        rr = _radius_m(rs, "earth_helio_pos_m")
        field = -_positive(gm_sun_m3_per_s2, "gm_sun_m3_per_s2") * rs / (_C2 * rr**3)[..., None]
        ds = (1.0 + 2.0 * g) * np.cross(np.cross(vs, field), v)
    return {"schwarzschild": schw, "lense_thirring": lt, "de_sitter": ds, "total": schw + lt + ds}
