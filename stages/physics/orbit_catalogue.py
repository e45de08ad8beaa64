"""Orbit catalogue: orbiting bodies (gyroscope carriers, laser-ranging satellites) and the central
bodies they orbit (relcorr's own TOML format), and the orbit model the precession stages sample.

Format (version 1)::

    format = "relcorr-orbits/1"

    [central_bodies.EMBER]               # optional: a central body other than the Earth
    gm_m3_per_s2 = 1.9e21                # GM
    radius_m = 3.0e4                     # surface radius (orbits must stay outside it)
    spin_parameter = 0.4                 # dimensionless spin chi: J = chi G M^2/c = chi (GM)^2/(G c)
    # angular_momentum_kg_m2_per_s = ... # ... or the spin angular momentum J itself (one of the two)
    j2 = 0.0                             # optional dynamical form factor (default 0)

    [orbits.KESTREL-G]                   # an orbit given by osculating two-body elements
    central_body = "earth"               # default "earth"
    semi_major_axis_m = 7020136.6
    eccentricity = 0.0
    inclination_deg = 90.0
    raan_deg = 40.0                      # right ascension of the ascending node
    argument_of_perigee_deg = 0.0
    mean_anomaly_deg = 0.0               # at elements_epoch_tt
    elements_epoch_tt = 2025-03-01T00:00:00
    integration_start_tt = 2025-03-01T00:00:00   # default: elements_epoch_tt
    spin_reference = [0.70, 0.59, 0.41]  # spin direction at the start (unit vector; or
                                         # spin_reference_ra_deg / spin_reference_dec_deg)
    guide_direction = [0.70, 0.59, 0.41] # optional: the direction the NS/EW drifts refer to
                                         # (or guide_ra_deg / guide_dec_deg; default: spin_reference)

    [orbits.PLOVER-L]                    # an orbit given by a state table
    states = "plover-states.parquet"     # relcorr state table, path relative to this file;
    states_target = "PLOVER-L"           # its centre must be the central body
    integration_start_tt = 2025-03-01T00:00:00   # required with a state table

Axes: those of the GCRS (kinematically non-rotating, ICRS-aligned) for the Earth.  For a
central body of the ``[central_bodies]`` table the axes are any non-rotating axes with z along
the body's spin (its angular momentum is J e_z; a negative J or chi means a retrograde spin).
The Earth (name ``earth``, reserved): GM and a_E of IERS TN36 Table 1.1 (GM TT-compatible, as the
geocentric orbits are in TT units), J2 of TN36 Table 1.1, angular momentum
:data:`stages.physics.precession.EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S` along GCRS z.

Orbit model of element orbits: a Kepler orbit whose node and argument of perigee drift at the
secular J2 rates (first-order secular theory, textbook, common practice; e.g. Kaula 1966,
*Theory of Satellite Geodesy*):

    dOmega/dt = -(3/2) n J2 (R/p)^2 cos i,     domega/dt = (3/4) n J2 (R/p)^2 (5 cos^2 i - 1),

n = sqrt(GM/a^3), p = a (1 - e^2), R the central body's radius.  Short-periodic J2 terms and
the J2 change of the mean motion are neglected (relative size O(J2) ~ 1e-3 of the orbital
geometry, i.e. of the relativistic rates computed along it).
"""
from __future__ import annotations

import datetime
import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import constants as K
from .catalogue_file import name_index, read_catalogue
from .clock_rates import kepler_state
from .precession import EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S, G_M3_PER_KG_S2

FORMAT = "relcorr-orbits/1"
MJD_OF_ORDINAL_ZERO = -678576
EARTH = "earth"

ORBIT_KEYS = ("semi_major_axis_m", "eccentricity", "inclination_deg", "raan_deg", "argument_of_perigee_deg",
              "mean_anomaly_deg")
_DIRECTION_KEYS = {"spin_reference": ("spin_reference_ra_deg", "spin_reference_dec_deg"),
                   "guide_direction": ("guide_ra_deg", "guide_dec_deg")}
_COMMON_KEYS = {"name", "central_body", "integration_start_tt", "spin_reference", "guide_direction",
                "spin_reference_ra_deg", "spin_reference_dec_deg", "guide_ra_deg", "guide_dec_deg"}
_CENTRAL_KEYS = {"name", "gm_m3_per_s2", "radius_m", "spin_parameter", "angular_momentum_kg_m2_per_s", "j2"}
_UNIT_TOL = 1e-6


class OrbitCatalogueError(ValueError):
    """A malformed catalogue: the message names the file and the key."""


@dataclass(frozen=True)
class CentralBody:
    name: str
    gm_m3_per_s2: float
    radius_m: float
    j_kg_m2_per_s: float           # spin angular momentum along +z (signed)
    j2: float
    spin_parameter: float          # chi = J c G / (GM)^2 (informative for the Earth)

    @property
    def is_earth(self) -> bool:
        return self.name == EARTH

    @property
    def j_vec(self) -> np.ndarray:
        return np.array([0.0, 0.0, self.j_kg_m2_per_s])


def _chi(gm: float, j: float) -> float:
    return j * G_M3_PER_KG_S2 * K.C_M_PER_S / gm**2


EARTH_BODY = CentralBody(EARTH, K.GM_EARTH_TT_M3_PER_S2, K.EARTH_EQUATORIAL_RADIUS_M,
                         EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S, K.EARTH_J2,
                         _chi(K.GM_EARTH_TT_M3_PER_S2, EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S))


@dataclass(frozen=True)
class OrbitCatalogue:
    codes: np.ndarray               # (k,) object: body names
    central: tuple                  # (k,) CentralBody
    elements: np.ndarray            # (k, 6): a_m, e, i_rad, raan_rad, argp_rad, M0_rad (NaN for state tables)
    epoch_tt_mjd: np.ndarray        # (k,) int64: elements epoch (0 for state tables)
    epoch_tt_sod_s: np.ndarray      # (k,)
    start_tt_mjd: np.ndarray        # (k,) int64: integration start
    start_tt_sod_s: np.ndarray      # (k,)
    states_file: np.ndarray         # (k,) object ('' for elements)
    states_target: np.ndarray       # (k,) object
    spin_reference: np.ndarray      # (k, 3) unit vectors, NaN rows when not given
    guide_direction: np.ndarray     # (k, 3) unit vectors (spin_reference when not given), NaN when neither
    identity: dict

    def index(self, names) -> np.ndarray:
        """Catalogue index of each name, -1 where unknown or null (an Arrow column, or a sequence of str)."""
        return name_index(self.codes, names)

    def seconds_since_start(self, j: int, tt_mjd, tt_sod_s) -> np.ndarray:
        """TT seconds from body ``j``'s integration start to (tt_mjd, tt_sod_s), two-part difference."""
        return ((np.asarray(tt_mjd, dtype=np.int64) - self.start_tt_mjd[j]).astype(float) * K.SECONDS_PER_DAY
                + (np.asarray(tt_sod_s, dtype=float) - self.start_tt_sod_s[j]))

    def elements_epoch_from_start_s(self, j: int) -> float:
        """TT seconds from the integration start to the elements epoch of body ``j``."""
        return float((self.epoch_tt_mjd[j] - self.start_tt_mjd[j]) * K.SECONDS_PER_DAY
                     + (self.epoch_tt_sod_s[j] - self.start_tt_sod_s[j]))


def j2_secular_rates_rad_per_s(a_m, e, i_rad, gm_m3_per_s2: float, radius_m: float, j2: float):
    """Secular J2 rates (node, argument of perigee) in rad/s, first-order theory (module docstring)."""
    a = np.asarray(a_m, dtype=float)
    ecc = np.asarray(e, dtype=float)
    n = np.sqrt(gm_m3_per_s2 / a**3)
    k = n * j2 * (radius_m / (a * (1.0 - ecc * ecc))) ** 2
    ci = np.cos(i_rad)
    return -1.5 * k * ci, 0.75 * k * (5.0 * ci * ci - 1.0)


def osculating_elements(pos_m, vel_m_per_s, gm_m3_per_s2: float):
    """Osculating two-body elements (a, e, i, raan, argp, M) from one state (textbook two-body relations,
    common practice: vis-viva, angular momentum, Laplace-Runge-Lenz vector, Kepler's equation).
    Angles in rad; raan undefined (0) for i = 0, argp measured from the node (from x for i = 0)."""
    r = np.asarray(pos_m, dtype=float)
    v = np.asarray(vel_m_per_s, dtype=float)
    rn = float(np.linalg.norm(r))
    h = np.cross(r, v)
    hn = float(np.linalg.norm(h))
    a = 1.0 / (2.0 / rn - float(v @ v) / gm_m3_per_s2)
    ev = np.cross(v, h) / gm_m3_per_s2 - r / rn
    e = float(np.linalg.norm(ev))
    inc = float(np.arccos(np.clip(h[2] / hn, -1.0, 1.0)))
    node = np.cross([0.0, 0.0, 1.0], h)
    nn = float(np.linalg.norm(node))
    node_dir = node / nn if nn > 1e-12 * hn else np.array([1.0, 0.0, 0.0])
    raan = float(np.arctan2(node_dir[1], node_dir[0])) if nn > 1e-12 * hn else 0.0
    hhat = h / hn
    peri = ev / e if e > 1e-12 else node_dir
    argp = float(np.arctan2(hhat @ np.cross(node_dir, peri), node_dir @ peri))
    cos_f = float(peri @ r) / rn
    sin_f = float(hhat @ np.cross(peri, r)) / rn
    big_e = np.arctan2(np.sqrt(max(1.0 - e * e, 0.0)) * sin_f, e + cos_f)
    mean = float(big_e - e * np.sin(big_e))
    return a, e, inc, raan, argp, mean


def elements_state(cat: OrbitCatalogue, j: int, t_from_start_s):
    """Position and velocity (m, m/s; (n, 3)) of element orbit ``j`` at TT seconds since its integration
    start: Kepler motion with the node and argument of perigee drifting at the secular J2 rates."""
    a, e, inc, raan, argp, m0 = cat.elements[j]
    cb = cat.central[j]
    t = np.asarray(t_from_start_s, dtype=float)
    t_el = cat.elements_epoch_from_start_s(j)
    d_raan, d_argp = j2_secular_rates_rad_per_s(a, e, inc, cb.gm_m3_per_s2, cb.radius_m, cb.j2)
    pos, vel, _ = kepler_state(a, e, inc, raan + d_raan * (t - t_el), argp + d_argp * (t - t_el), m0, t_el, t,
                               cb.gm_m3_per_s2)
    return pos, vel


def _number(path, key, value, lo=None, hi=None):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
        raise OrbitCatalogueError(f"{path}: {key}: found {value!r}, expected a number")
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        raise OrbitCatalogueError(f"{path}: {key}: found {value!r}, expected a number in [{lo}, {hi}]")
    return float(value)


def _epoch(path, key, value):
    if not isinstance(value, datetime.datetime) or value.tzinfo is not None:
        raise OrbitCatalogueError(f"{path}: {key}: found {value!r}, expected a TOML local date-time such as "
                                  "2025-03-01T00:00:00 (TT)")
    return (value.date().toordinal() + MJD_OF_ORDINAL_ZERO,
            value.hour * 3600.0 + value.minute * 60.0 + value.second + value.microsecond * 1e-6)


def radec_unit(ra_deg, dec_deg) -> np.ndarray:
    """Unit vector(s) (..., 3) of right ascension / declination in degrees."""
    ra, dec = np.radians(np.asarray(ra_deg, dtype=float)), np.radians(np.asarray(dec_deg, dtype=float))
    return np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)], axis=-1)


def _direction(path, key, entry, name):
    ra_key, dec_key = _DIRECTION_KEYS[name]
    if name in entry:
        if ra_key in entry or dec_key in entry:
            raise OrbitCatalogueError(f"{path}: {key}.{name}: give either {name} or {ra_key}/{dec_key}, not both")
        vec = entry[name]
        if not (isinstance(vec, list) and len(vec) == 3):
            raise OrbitCatalogueError(f"{path}: {key}.{name}: found {vec!r}, expected an array of 3 numbers")
        v = np.array([_number(path, f"{key}.{name}[{i}]", x) for i, x in enumerate(vec)])
        norm = float(np.linalg.norm(v))
        if abs(norm - 1.0) > _UNIT_TOL:
            raise OrbitCatalogueError(f"{path}: {key}.{name}: found a vector of norm {norm!r}, "
                                      f"expected a unit vector (within {_UNIT_TOL})")
        return v / norm
    if ra_key in entry or dec_key in entry:
        if ra_key not in entry or dec_key not in entry:
            raise OrbitCatalogueError(f"{path}: {key}.{ra_key if ra_key not in entry else dec_key}: missing; "
                                      "expected a number (degrees)")
        return radec_unit(_number(path, f"{key}.{ra_key}", entry[ra_key], -360.0, 360.0),
                          _number(path, f"{key}.{dec_key}", entry[dec_key], -90.0, 90.0))
    return None


def _central_bodies(path, doc) -> dict[str, CentralBody]:
    bodies = {EARTH: EARTH_BODY}
    table = doc.get("central_bodies", {})
    if not isinstance(table, dict):
        raise OrbitCatalogueError(f"{path}: central_bodies: expected a table of [central_bodies.NAME] tables")
    for name in sorted(table):  # loop over catalogue entries, not records
        entry = table[name]
        key = f"central_bodies.{name}"
        if name == EARTH:
            raise OrbitCatalogueError(f"{path}: {key}: the name 'earth' is reserved for the built-in Earth "
                                      "(IERS Conventions 2010 constants)")
        if not isinstance(entry, dict):
            raise OrbitCatalogueError(f"{path}: {key}: expected a table")
        extra = sorted(set(entry) - _CENTRAL_KEYS)
        if extra:
            raise OrbitCatalogueError(f"{path}: {key}.{extra[0]}: unknown key; expected one of {', '.join(sorted(_CENTRAL_KEYS))}")
        for k in ("gm_m3_per_s2", "radius_m"):
            if k not in entry:
                raise OrbitCatalogueError(f"{path}: {key}.{k}: missing; expected a positive number")
        gm = _number(path, f"{key}.gm_m3_per_s2", entry["gm_m3_per_s2"], 1e-300)
        radius = _number(path, f"{key}.radius_m", entry["radius_m"], 1e-300)
        has_chi, has_j = "spin_parameter" in entry, "angular_momentum_kg_m2_per_s" in entry
        if has_chi == has_j:
            raise OrbitCatalogueError(f"{path}: {key}: give exactly one of spin_parameter (dimensionless chi) "
                                      "and angular_momentum_kg_m2_per_s")
        if has_chi:
            chi = _number(path, f"{key}.spin_parameter", entry["spin_parameter"], -1.0, 1.0)
            j = chi * gm * gm / (G_M3_PER_KG_S2 * K.C_M_PER_S)       # J = chi G M^2 / c, M = GM/G
        else:
            j = _number(path, f"{key}.angular_momentum_kg_m2_per_s", entry["angular_momentum_kg_m2_per_s"])
            chi = _chi(gm, j)
        j2 = _number(path, f"{key}.j2", entry.get("j2", 0.0), -1.0, 1.0)
        bodies[name] = CentralBody(name, gm, radius, j, j2, chi)
    return bodies


def load_orbit_catalogue(path: str | Path) -> OrbitCatalogue:
    path = Path(path)
    raw, doc, orbits = read_catalogue(path, FORMAT, "orbits", "NAME", OrbitCatalogueError)
    extra_top = sorted(set(doc) - {"format", "orbits", "central_bodies"})
    if extra_top:
        raise OrbitCatalogueError(f"{path}: {extra_top[0]}: unknown key; expected format, orbits, central_bodies")
    bodies = _central_bodies(path, doc)
    codes, central, elements, ep_mjd, ep_sod, st_mjd, st_sod = [], [], [], [], [], [], []
    states_file, states_target, spin, guide = [], [], [], []
    for code in sorted(orbits):  # loop over catalogue entries, not records
        entry = orbits[code]
        key = f"orbits.{code}"
        if not isinstance(entry, dict):
            raise OrbitCatalogueError(f"{path}: {key}: expected a table")
        by_states = "states" in entry
        allowed = _COMMON_KEYS | ({"states", "states_target"} if by_states else {"elements_epoch_tt", *ORBIT_KEYS})
        extra = sorted(set(entry) - allowed)
        if extra:
            raise OrbitCatalogueError(f"{path}: {key}.{extra[0]}: unknown key; expected one of {', '.join(sorted(allowed))}")
        cb_name = entry.get("central_body", EARTH)
        if cb_name not in bodies:
            raise OrbitCatalogueError(f"{path}: {key}.central_body: found {cb_name!r}, expected 'earth' or a "
                                      "[central_bodies.NAME] of this file")
        cb = bodies[cb_name]
        if by_states:
            target = entry.get("states_target")
            if not isinstance(entry["states"], str) or not entry["states"]:
                raise OrbitCatalogueError(f"{path}: {key}.states: found {entry['states']!r}, expected a state-table file name")
            if not isinstance(target, str) or not target:
                raise OrbitCatalogueError(f"{path}: {key}.states_target: found {target!r}, expected the target's name in the state table")
            if "integration_start_tt" not in entry:
                raise OrbitCatalogueError(f"{path}: {key}.integration_start_tt: missing; a state-table orbit needs "
                                          "its integration start (a TOML local date-time, TT)")
            sp = Path(entry["states"])
            states_file.append(str(sp if sp.is_absolute() else path.resolve().parent / sp))
            states_target.append(target)
            elements.append([np.nan] * 6)
            ep = (0, 0.0)
        else:
            for k in ORBIT_KEYS:
                if k not in entry:
                    raise OrbitCatalogueError(f"{path}: {key}.{k}: missing; expected a number")
            a = _number(path, f"{key}.semi_major_axis_m", entry["semi_major_axis_m"], 1.0, 1e13)
            e = _number(path, f"{key}.eccentricity", entry["eccentricity"], 0.0, 0.99)
            angles = [np.radians(_number(path, f"{key}.{k}", entry[k], -360.0, 360.0)) for k in ORBIT_KEYS[2:]]
            ep = _epoch(path, f"{key}.elements_epoch_tt", entry.get("elements_epoch_tt"))
            elements.append([a, e, *angles])
            states_file.append("")
            states_target.append("")
        start = _epoch(path, f"{key}.integration_start_tt", entry["integration_start_tt"]) \
            if "integration_start_tt" in entry else ep
        s0 = _direction(path, key, entry, "spin_reference")
        g0 = _direction(path, key, entry, "guide_direction")
        codes.append(code)
        central.append(cb)
        ep_mjd.append(ep[0])
        ep_sod.append(ep[1])
        st_mjd.append(start[0])
        st_sod.append(start[1])
        spin.append(s0 if s0 is not None else [np.nan] * 3)
        guide.append(g0 if g0 is not None else (s0 if s0 is not None else [np.nan] * 3))
    return OrbitCatalogue(
        codes=np.array(codes, dtype=object), central=tuple(central), elements=np.array(elements, dtype=float),
        epoch_tt_mjd=np.array(ep_mjd, dtype=np.int64), epoch_tt_sod_s=np.array(ep_sod, dtype=float),
        start_tt_mjd=np.array(st_mjd, dtype=np.int64), start_tt_sod_s=np.array(st_sod, dtype=float),
        states_file=np.array(states_file, dtype=object), states_target=np.array(states_target, dtype=object),
        spin_reference=np.array(spin, dtype=float), guide_direction=np.array(guide, dtype=float),
        identity={"file": path.name, "sha256": hashlib.sha256(raw).hexdigest(), "format": FORMAT},
    )
