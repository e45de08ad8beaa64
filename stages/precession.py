"""Stage ``precession``: geodetic (de Sitter) and frame-dragging (Lense-Thirring) precession of
gyroscope spin axes and of orbit nodes and perigees, for orientation records.

Each record names an orbiting ``body`` of an orbit catalogue
(:mod:`stages.physics.orbit_catalogue`: osculating elements or a state table, the central body
with its GM, radius and spin, the spin direction S0 at the integration start).

* ``spin_axis`` records: the spin precesses as dS/dt = Omega x S with the Schiff rate (Schiff
  1960, PRL 4, 215; PPN factors (gamma + 1/2) and (1 + gamma)/2, Will 2014, Living Rev.
  Relativity 17, 4)

      Omega_G  = (gamma + 1/2) GM/(c^2 r^3) (r x v),
      Omega_LT = ((1 + gamma)/2) G/(c^2 r^3) [3 (J . rhat) rhat - J],

  evaluated along the orbit on a uniform grid of ``samples_per_orbit`` nodes per revolution from
  the integration start, integrated cumulatively (fourth order) and interpolated to each record
  (:mod:`stages.physics.orbit_integration`).  For Earth orbits, with ``solar_geodetic``, the local
  frame's de Sitter rotation Omega_dS = (gamma + 1/2) GM_S/(c^2 R^3) (R x V) relative to the
  GCRS axes (Earth's heliocentric state R, V from DE421) is integrated as well (6 h grid).
  The predicted spin is S0 rotated by Theta = Theta_G + Theta_LT (+ Theta_dS) (Rodrigues; the
  non-commutativity of the rotations is second order, <= |Theta|^2/2: 0.1 mas after a year at
  642 km); the corrected observation is the observed direction rotated by -Theta.  NS/EW drifts
  split the rotation of the guide direction into the part in the orbit plane (NS, sense of the
  orbital motion) and towards the orbit normal (EW), the orbit normal taken at the start
  (Everitt et al. 2011, PRL 106, 221101: geodetic NS, frame dragging EW).
* ``node_angle`` and ``perigee_angle`` records (degrees, the node's right ascension and the
  argument of perigee on the central body's equator): secular Lense-Thirring node rate
  ((1 + gamma)/2) 2 G J/(c^2 a^3 (1 - e^2)^(3/2)) and perigee rate -3 cos i times that
  (Lense & Thirring 1918; Ciufolini & Pavlis 2004, Nature 431, 958), the Schwarzschild perigee
  rate ((2 + 2 gamma - beta)/3) 3 (GM)^(3/2)/(c^2 a^(5/2) (1 - e^2)) (Will 2014), and for Earth
  orbits the de Sitter rigid rotation of the orbit at Omega_dS (IERS Conventions 2010 eq. 10.12,
  third term = 2 Omega_dS x v): node and argument-of-perigee rates of the rotation
  (:func:`stages.physics.precession.rigid_rotation_element_rates_rad_per_s`) and its in-plane
  advance Omega_dS . h, integrated along the node's secular J2 drift.  Accumulated angles are
  counted from the integration start; value_corrected = value - the relativistic angle of the
  record's observable.  Angles are not wrapped.

Time: the UTC time tags become TT exactly (leap seconds, TT = TAI + 32.184 s); element orbits run
in TT, state tables in TDB (geocentric TDB - TT series), as ``clock_rate`` does.
"""
from __future__ import annotations

import functools
from typing import Any, Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics import precession as pr
from stages.physics import time_scales as tsp
from stages.physics.file_cache import load_cached
from stages.physics.leap_seconds import load_leap_table
from stages.physics.orbit_catalogue import (OrbitCatalogueError, elements_state, j2_secular_rates_rad_per_s,
                                            load_orbit_catalogue, osculating_elements, radec_unit)
from stages.physics.orbit_integration import (SLOW_STEP_S, cumulative, cumulative_at, de_sitter_grid,
                                              earth_heliocentric_state_m, grid_nodes, rotate)
from stages.physics.spacecraft_ephemeris import load_state_table

MAS = pr.MAS_PER_RAD
MAS_PER_YR = pr.MAS_PER_RAD * pr.JULIAN_YEAR_S
DAY_S = 86400.0
UNIT_ROUNDING = 1e-12     # | |d| - 1 | above this: the direction is renormalised and flagged

FLAG_UNIT, FLAG_RENORMALISED, FLAG_RADEC, FLAG_NOT_SPIN = 0, 1, 2, 3
_XYZ = ("x", "y", "z")


def _f64(name, unit, text):
    return Column(name, pa.float64(), unit, text)


def _vec_cols(prefix, unit, text):
    return tuple(_f64(f"{prefix}_{a}{'_' + unit if unit else ''}", unit or "1", f"{text}, {a.upper()} component")
                 for a in _XYZ)


def _plain(arr):
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    if pa.types.is_dictionary(arr.type):
        arr = arr.dictionary_decode()
    return arr


def _is(table, name, value) -> np.ndarray:
    return np.asarray(pc.fill_null(pc.equal(_plain(table[name]), value), False).to_numpy(zero_copy_only=False), dtype=bool)


def _floats(table, name, n) -> np.ndarray:
    if name not in table.column_names:
        return np.full(n, np.nan)
    return np.asarray(pc.cast(_plain(table[name]), pa.float64()).to_numpy(zero_copy_only=False), dtype=float)


def _normal(i_rad, raan_rad) -> np.ndarray:
    """Orbit normal (..., 3) of inclination i and node raan (common practice)."""
    si = np.sin(i_rad)
    raan = np.asarray(raan_rad, dtype=float)
    return np.stack(np.broadcast_arrays(si * np.sin(raan), -si * np.cos(raan), np.cos(i_rad) + 0.0 * raan), axis=-1)


def _ns_ew_axes(guide, normal):
    """Unit vectors e_NS = (h x g)/|h x g| and e_EW = (h - (h.g) g)/|..| (as in
    :func:`stages.physics.precession.drift_in_plane_rad`); None when g is parallel to h."""
    hxg = np.cross(normal, guide)
    nn = float(np.linalg.norm(hxg))
    if not np.isfinite(nn) or nn < 1e-9:
        return None
    ew = normal - (normal @ guide) * guide
    return hxg / nn, ew / np.linalg.norm(ew)


def _period_s(a_m, gm):
    return 2.0 * np.pi * np.sqrt(a_m**3 / gm)   # Kepler's third law (common practice)


def _start_tdb(cat, j):
    m, s = np.array([cat.start_tt_mjd[j]]), np.array([cat.start_tt_sod_s[j]])
    return tsp.add_seconds(m, s, tsp.tdb_minus_tt_s(m, s))


@functools.lru_cache(maxsize=32)
def _geometry(path: str, sha: str, states_sha: str, j: int, max_gap_s: float):
    """Orbit geometry of body ``j`` referred to its integration start: (a, e, i, raan0, argp0, t_el,
    d_raan, d_argp), t_el the epoch of the elements in seconds from the start; None when a state
    table does not cover the start (or gives no bound orbit there)."""
    cat = load_cached(load_orbit_catalogue, path)
    cb = cat.central[j]
    if cat.states_file[j]:
        states = load_cached(load_state_table, cat.states_file[j])
        m, s = _start_tdb(cat, j)
        pos, vel, status = states.posvel_centre_m(cat.states_target[j], m, s, max_gap_s)
        if status[0] != 0:
            return None
        a, e, inc, raan, argp, _ = osculating_elements(pos[0], vel[0], cb.gm_m3_per_s2)
        if not (a > 0 and e < 1):
            return None
        t_el = 0.0
    else:
        a, e, inc, raan, argp, _ = cat.elements[j]
        t_el = cat.elements_epoch_from_start_s(j)
    d_raan, d_argp = j2_secular_rates_rad_per_s(a, e, inc, cb.gm_m3_per_s2, cb.radius_m, cb.j2)
    return (float(a), float(e), float(inc), float(raan), float(argp), float(t_el), float(d_raan), float(d_argp))


def _spin_rates(pos, vel, cb, gamma):
    """Schiff rates (n, 6): geodetic then frame dragging (rad/s)."""
    return np.concatenate([pr.geodetic_precession_rate_rad_per_s(pos, vel, cb.gm_m3_per_s2, gamma),
                           pr.frame_dragging_precession_rate_rad_per_s(pos, cb.j_vec, gamma)], axis=1)


@functools.lru_cache(maxsize=4)
def _element_spin_grid(path: str, sha: str, j: int, gamma: float, samples: int, n_nodes: int):
    """(step, cumulative (n, 6), rates (n, 6)) of the Schiff rates along element orbit ``j``."""
    cat = load_cached(load_orbit_catalogue, path)
    cb = cat.central[j]
    h = _period_s(cat.elements[j, 0], cb.gm_m3_per_s2) / samples
    pos, vel = elements_state(cat, j, np.arange(n_nodes) * h)
    rates = _spin_rates(pos, vel, cb, gamma)
    return h, cumulative(h, rates), rates


@functools.lru_cache(maxsize=4)
def _state_spin_grid(path: str, sha: str, states_sha: str, j: int, gamma: float, samples: int, max_gap_s: float,
                     max_span_s: float):
    """The same along a state-table orbit, from the start to the end of the table (or max_span_s), plus
    the running counts of nodes outside the table / in a gap and of nodes at or below the surface."""
    cat = load_cached(load_orbit_catalogue, path)
    cb = cat.central[j]
    geo = _geometry(path, sha, states_sha, j, max_gap_s)
    states = load_cached(load_state_table, cat.states_file[j])
    target = cat.states_target[j]
    h = _period_s(geo[0], cb.gm_m3_per_s2) / samples
    m0, s0 = _start_tdb(cat, j)
    nm, ns, _, _ = states.nodes(target)
    end = float((nm[-1] - m0[0]) * DAY_S + (ns[-1] - s0[0]))
    n_nodes = int(np.floor(min(end, max_span_s) / h)) + 1
    t = np.arange(n_nodes) * h
    mm, ss = tsp.add_seconds(np.full(n_nodes, m0[0]), np.full(n_nodes, s0[0]), t)
    pos, vel, status = states.posvel_centre_m(target, mm, ss, max_gap_s)
    bad_cov = status != 0
    r = np.sqrt(np.einsum("ij,ij->i", np.where(bad_cov[:, None], 0.0, pos), np.where(bad_cov[:, None], 0.0, pos)))
    bad_surf = ~bad_cov & (r <= cb.radius_m)
    good = ~bad_cov & ~bad_surf
    rates = np.zeros((n_nodes, 6))
    if good.any():
        rates[good] = _spin_rates(pos[good], vel[good], cb, gamma)
    return h, cumulative(h, rates), rates, np.cumsum(bad_cov), np.cumsum(bad_surf)


@functools.lru_cache(maxsize=8)
def _slow_grid(start_mjd: int, start_sod: float, n_nodes: int, gamma: float):
    big_r, big_v, om, ok = de_sitter_grid(start_mjd, start_sod, n_nodes, gamma)
    return big_r, big_v, om, cumulative(SLOW_STEP_S, om), np.cumsum(~ok)


def _index_after(step, dt, n_nodes):
    """Index of the last node an instant dt depends on (the Hermite pair and the integration stencil)."""
    k = np.floor(np.where(np.isfinite(dt) & (dt >= 0), dt, 0.0) / step).astype(np.int64)
    return np.clip(k + 2, 0, n_nodes - 1)


def _de_sitter_element_rates(big_r, big_v, om, geo, t_from_start, gamma):
    """de Sitter rates (n, 3) of the orbit's node, argument of perigee and in-plane advance (rad/s),
    at instants ``t_from_start`` along the node's secular drift; NaN node/argp for sin i = 0."""
    a, e, inc, raan0, argp0, t_el, d_raan, d_argp = geo
    raan = raan0 + d_raan * (np.asarray(t_from_start) - t_el)
    with np.errstate(divide="ignore", invalid="ignore"):
        rig = pr.rigid_rotation_element_rates_rad_per_s(om, inc, raan)
    in_plane = pr.de_sitter_perigee_rate_rad_per_s(big_r, big_v, _normal(inc, raan), gamma=gamma)
    return np.stack([rig["node"], rig["argument_of_perigee"], in_plane], axis=1)


class Precession(Stage):
    name = "precession"
    version = 1
    summary = "geodetic and frame-dragging precession of gyroscope spin axes; relativistic node and perigee rates"
    record_kinds = ("orientation",)
    requires = (
        Column("body", pa.string(), "", "orbiting body (in the orbit catalogue)"),
        Column("observable", pa.string(), "", "spin_axis, node_angle or perigee_angle"),
        Column("utc_mjd", pa.int32(), "d", "UTC day of the time tag (from ingest)"),
        Column("utc_sod_ps", pa.int64(), "ps", "UTC picoseconds of day of the time tag (from ingest)"),
    )
    optional = (
        _f64("dir_x", "1", "spin_axis: observed direction, GCRS X"),
        _f64("dir_y", "1", "spin_axis: observed direction, GCRS Y"),
        _f64("dir_z", "1", "spin_axis: observed direction, GCRS Z"),
        _f64("ra_deg", "deg", "spin_axis: observed right ascension (GCRS)"),
        _f64("dec_deg", "deg", "spin_axis: observed declination (GCRS)"),
        _f64("value", "deg", "node_angle / perigee_angle: observed angle"),
    )
    provides = (
        _f64("prec_dt_s", "s", "TT seconds since the body's integration start"),
        *_vec_cols("prec_geodetic", "mas", "spin_axis: accumulated geodetic rotation vector (Schiff 1960, central body)"),
        *_vec_cols("prec_frame_dragging", "mas", "spin_axis: accumulated frame-dragging rotation vector (Schiff 1960)"),
        *_vec_cols("prec_de_sitter", "mas", "spin_axis: accumulated de Sitter rotation of the local frame about the "
                                            "Sun (Earth orbits with solar_geodetic; NaN otherwise)"),
        _f64("prec_geodetic_ns_mas", "mas", "spin_axis: geodetic drift of the guide direction in the orbit plane"),
        _f64("prec_geodetic_ew_mas", "mas", "spin_axis: geodetic drift of the guide direction towards the orbit normal"),
        _f64("prec_frame_dragging_ns_mas", "mas", "spin_axis: frame-dragging drift of the guide direction in the orbit plane"),
        _f64("prec_frame_dragging_ew_mas", "mas", "spin_axis: frame-dragging drift of the guide direction towards the orbit normal"),
        *_vec_cols("prec_predicted", "", "spin_axis: predicted spin direction (S0 rotated by the relativistic precession)"),
        *_vec_cols("prec_observed", "", "spin_axis: observed direction as used (unit vector)"),
        *_vec_cols("prec_corrected", "", "spin_axis: observed direction rotated back by the relativistic precession"),
        _f64("prec_residual_ns_mas", "mas", "spin_axis: (observed - predicted) along the NS axis of the guide direction"),
        _f64("prec_residual_ew_mas", "mas", "spin_axis: (observed - predicted) along the EW axis of the guide direction"),
        _f64("prec_residual_mas", "mas", "spin_axis: angle between observed and predicted directions"),
        _f64("prec_direction_norm_error", "1", "spin_axis: | |d| - 1 | of the given direction vector (0 for RA/Dec)"),
        Column("prec_direction_flag", pa.uint8(), "", "0 unit vector as given, 1 renormalised (| |d| - 1 | > 1e-12, "
                                                      "within direction_tolerance), 2 from RA/Dec, 3 not a spin_axis record"),
        _f64("prec_lt_node_rate_mas_per_yr", "mas/yr", "node/perigee: Lense-Thirring node rate"),
        _f64("prec_lt_perigee_rate_mas_per_yr", "mas/yr", "node/perigee: Lense-Thirring argument-of-perigee rate"),
        _f64("prec_schwarzschild_perigee_rate_mas_per_yr", "mas/yr", "node/perigee: Schwarzschild perigee rate"),
        _f64("prec_de_sitter_node_rate_mas_per_yr", "mas/yr", "node/perigee: de Sitter node rate at the epoch (Earth orbits)"),
        _f64("prec_de_sitter_perigee_rate_mas_per_yr", "mas/yr", "node/perigee: de Sitter argument-of-perigee rate at the epoch (Earth orbits)"),
        _f64("prec_de_sitter_in_plane_rate_mas_per_yr", "mas/yr", "node/perigee: de Sitter in-plane perigee advance Omega_dS . h (Earth orbits)"),
        _f64("prec_lt_node_mas", "mas", "node/perigee: Lense-Thirring node angle accumulated since the start"),
        _f64("prec_lt_perigee_mas", "mas", "node/perigee: Lense-Thirring perigee angle accumulated since the start"),
        _f64("prec_schwarzschild_perigee_mas", "mas", "node/perigee: Schwarzschild perigee angle accumulated since the start"),
        _f64("prec_de_sitter_node_mas", "mas", "node/perigee: de Sitter node angle accumulated since the start (Earth orbits)"),
        _f64("prec_de_sitter_perigee_mas", "mas", "node/perigee: de Sitter argument-of-perigee angle accumulated since the start (Earth orbits)"),
        _f64("prec_relativistic_angle_mas", "mas", "node: LT + de Sitter node angles; perigee: LT + Schwarzschild + de Sitter"),
        _f64("value_corrected", "deg", "node/perigee: observed angle minus the relativistic angle"),
    )
    params = (
        Param("orbits", "str", "orbits.toml", "orbit catalogue (relative to the config file)"),
        Param("gamma", "float", 1.0, "PPN gamma", minimum=0.0, maximum=2.0),
        Param("beta", "float", 1.0, "PPN beta (Schwarzschild perigee rate)", minimum=0.0, maximum=2.0),
        Param("solar_geodetic", "bool", True, "Earth orbits: include the de Sitter rotation of the local frame about the Sun (DE421)"),
        Param("samples_per_orbit", "int", 96, "grid nodes per revolution for the spin integration", minimum=16, maximum=2000),
        Param("direction_tolerance", "float", 1e-6, "largest | |d| - 1 | of an observed direction that is renormalised "
              "(beyond: quarantined)", minimum=0.0, maximum=0.1),
        Param("max_span_days", "float", 800.0, "longest span from the integration start to a record (the spin grid "
              "costs about samples_per_orbit x 100 bytes per revolution)", unit="d", minimum=1.0, maximum=40000.0),
        Param("max_gap_s", "float", 3600.0, "widest gap between tabulated states the interpolation may bridge",
              unit="s", minimum=1.0, maximum=86400.0),
    )
    references = (
        Reference("Schiff 1960, PRL 4, 215", "geodetic and frame-dragging precession of an orbiting gyroscope"),
        Reference("Will 2014, Living Rev. Relativity 17, 4", "PPN factors; perihelion (perigee) advance"),
        Reference("Lense & Thirring 1918, Phys. Z. 19, 156; Ciufolini & Pavlis 2004, Nature 431, 958",
                  "secular Lense-Thirring node and perigee rates"),
        Reference("IERS Conventions (2010), IERS TN 36, eq. 10.12 and Table 1.1", "de Sitter term; GM, a_E, J2"),
        Reference("Everitt et al. 2011, PRL 106, 221101", "NS/EW split of the drifts of an orbiting gyroscope"),
        Reference("Folkner, Williams & Boggs 2009, IPN PR 42-178 (DE421)", "the Earth's heliocentric state"),
    )
    flag_columns = ("prec_direction_flag",)
    quarantine_reasons = {
        "body_unknown": "the body is not in the orbit catalogue",
        "orbit_crosses_surface": "the orbit reaches the central body's surface (perigee, or a sampled state, at or below its radius)",
        "outside_orbit_coverage": "the epoch is before the integration start or more than max_span_days after it, or the "
                                  "state table does not cover the start, the epoch or every instant between (gaps wider than max_gap_s)",
        "spin_reference_missing": "a spin_axis record of a body without spin_reference in the catalogue",
        "direction_not_unit": "a spin_axis direction whose norm differs from 1 by more than direction_tolerance",
    }

    def validate(self, params, context):
        try:
            cat = load_orbit_catalogue(context.path(params["orbits"]))
        except OrbitCatalogueError as exc:
            return {"orbits": str(exc)}
        for j in np.flatnonzero(cat.states_file != ""):   # loop over catalogue entries
            try:
                states = load_state_table(cat.states_file[j])
            except ValueError as exc:
                return {"orbits": f"orbits.{cat.codes[j]}.states: {exc}"}
            target = cat.states_target[j]
            if target not in states:
                return {"orbits": f"orbits.{cat.codes[j]}.states_target: {target!r} is not in {cat.states_file[j]}"}
            if states.centre(target) != cat.central[j].name:
                return {"orbits": f"orbits.{cat.codes[j]}.states: centre {states.centre(target)!r}, expected the central "
                                  f"body {cat.central[j].name!r}"}
        return {}

    def model_identities(self, params, context):
        cat = load_orbit_catalogue(context.path(params["orbits"]))
        ids = {"orbit catalogue": cat.identity, "leap seconds": load_leap_table().identity}
        for j in np.flatnonzero(cat.states_file != ""):
            ids[f"states {cat.codes[j]}"] = load_state_table(cat.states_file[j]).identity
        if params["solar_geodetic"] and any(c.is_earth for c in cat.central):
            from stages.physics.ephemeris import load_planetary_ephemeris

            ids["planetary ephemeris"] = load_planetary_ephemeris().identity
        return ids

    # ------------------------------------------------------------------
    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        n = table.num_rows
        path = str(context.path(params["orbits"]))
        cat = load_cached(load_orbit_catalogue, path)
        sha = cat.identity["sha256"]
        gamma, beta = params["gamma"], params["beta"]
        max_span_s = params["max_span_days"] * DAY_S
        idx = cat.index(table["body"])
        unknown = idx < 0
        is_spin = _is(table, "observable", "spin_axis")
        is_node = _is(table, "observable", "node_angle")
        is_peri = _is(table, "observable", "perigee_angle")

        leap = load_leap_table()
        tai_m, tai_ps = tsp.utc_to_tai(table["utc_mjd"].to_numpy().astype(np.int64),
                                       table["utc_sod_ps"].to_numpy().astype(np.int64), leap)
        tt_m, tt_ps = tsp.tai_to_tt(tai_m, tai_ps)
        tt_s = tsp.ps_to_s(tt_ps)

        out = {c.name: np.full(n, np.nan) for c in self.provides}
        flag = np.full(n, FLAG_NOT_SPIN, dtype=np.uint8)
        crosses = np.zeros(n, dtype=bool)
        outside = np.zeros(n, dtype=bool)
        no_spin_ref = np.zeros(n, dtype=bool)

        # observed directions of spin_axis records: the vector when complete and finite, else RA/Dec
        comps = np.stack([_floats(table, f"dir_{a}", n) for a in _XYZ], axis=1)
        have_vec = np.all(np.isfinite(comps), axis=1) & np.any(comps != 0.0, axis=1)
        radec = radec_unit(_floats(table, "ra_deg", n), _floats(table, "dec_deg", n))
        raw_dir = np.where(have_vec[:, None], comps, radec)
        unit, err, beyond = pr.normalise_directions(raw_dir, params["direction_tolerance"])
        radec_ok = np.all(np.isfinite(radec), axis=1)
        err = np.where(have_vec, err, np.where(radec_ok, 0.0, np.inf))
        not_unit = is_spin & np.where(have_vec, beyond, ~radec_ok)   # no usable direction at all: not unit either
        flag[is_spin] = np.where(have_vec, np.where(err > UNIT_ROUNDING, FLAG_RENORMALISED, FLAG_UNIT), FLAG_RADEC)[is_spin]
        out["prec_direction_norm_error"] = np.where(is_spin, err, np.nan)

        value = _floats(table, "value", n)
        for j in np.unique(idx[~unknown]):  # a loop over catalogue bodies, not records
            j = int(j)
            rows = np.flatnonzero(idx == j)
            cb = cat.central[j]
            dt = cat.seconds_since_start(j, tt_m[rows], tt_s[rows])
            out["prec_dt_s"][rows] = dt
            bad_span = ~((dt >= 0.0) & (dt <= max_span_s))
            by_states = bool(cat.states_file[j])
            states_sha = load_cached(load_state_table, cat.states_file[j]).identity.get("sha256", "") if by_states else ""
            geo = _geometry(path, sha, states_sha, j, float(params["max_gap_s"]))
            if geo is None:
                outside[rows] = True
                continue
            a, e, inc = geo[0], geo[1], geo[2]
            body_crosses = a * (1.0 - e) <= cb.radius_m
            crosses[rows] = body_crosses
            outside[rows] |= bad_span
            dt_tdb = dt
            if by_states:
                states = load_cached(load_state_table, cat.states_file[j])
                m0, s0 = _start_tdb(cat, j)
                tdb_m, tdb_s = tsp.add_seconds(tt_m[rows], tt_s[rows], tsp.tdb_minus_tt_s(tt_m[rows], tt_s[rows]))
                dt_tdb = (tdb_m - m0[0]) * DAY_S + (tdb_s - s0[0])
                pos_r, _, status = states.posvel_centre_m(cat.states_target[j], tdb_m, tdb_s, params["max_gap_s"])
                outside[rows] |= status != 0
                r_rec = np.sqrt(np.einsum("ij,ij->i", pos_r, pos_r))
                crosses[rows] |= (status == 0) & (r_rec <= cb.radius_m)
            earth_ds = cb.is_earth and params["solar_geodetic"]
            # --- the slow grid of the de Sitter terms (Earth orbits) -------------------------
            if earth_ds:
                span = np.where(bad_span, 0.0, dt)
                n_slow = grid_nodes(float(span.max()), SLOW_STEP_S, block=64)
                big_r, big_v, om, om_cum, slow_bad = _slow_grid(int(cat.start_tt_mjd[j]), float(cat.start_tt_sod_s[j]),
                                                                n_slow, gamma)
                outside[rows] |= ~bad_span & (slow_bad[_index_after(SLOW_STEP_S, dt, n_slow)] > 0)
            # --- spin_axis records ------------------------------------------------------------
            spin_rows = rows[is_spin[rows]]
            if spin_rows.size:
                s0_dir = cat.spin_reference[j]
                if not np.all(np.isfinite(s0_dir)):
                    no_spin_ref[spin_rows] = True
                elif not body_crosses:
                    self._spin(out, spin_rows, dt[is_spin[rows]], dt_tdb[is_spin[rows]], bad_span[is_spin[rows]],
                               cat, j, geo, unit, path, sha, states_sha, params, outside, crosses,
                               (om, om_cum, n_slow) if earth_ds else None)
            # --- node and perigee records ---------------------------------------------------------
            ang_sel = is_node[rows] | is_peri[rows]
            ang_rows = rows[ang_sel]
            if ang_rows.size and not body_crosses:
                dta = dt[ang_sel]
                jj = abs(cb.j_kg_m2_per_s)
                node_rate = (np.sign(cb.j_kg_m2_per_s) * pr.lense_thirring_node_rate_rad_per_s(a, e, jj, gamma)
                             if jj > 0 else 0.0)
                peri_rate = -3.0 * np.cos(inc) * node_rate
                schw_rate = pr.schwarzschild_perigee_rate_rad_per_s(a, e, cb.gm_m3_per_s2, gamma, beta)
                out["prec_lt_node_rate_mas_per_yr"][ang_rows] = node_rate * MAS_PER_YR
                out["prec_lt_perigee_rate_mas_per_yr"][ang_rows] = peri_rate * MAS_PER_YR
                out["prec_schwarzschild_perigee_rate_mas_per_yr"][ang_rows] = schw_rate * MAS_PER_YR
                out["prec_lt_node_mas"][ang_rows] = node_rate * dta * MAS
                out["prec_lt_perigee_mas"][ang_rows] = peri_rate * dta * MAS
                out["prec_schwarzschild_perigee_mas"][ang_rows] = schw_rate * dta * MAS
                ds_node = ds_argp = np.zeros(ang_rows.size)
                if earth_ds:
                    t_nodes = np.arange(n_slow) * SLOW_STEP_S
                    el_rates = _de_sitter_element_rates(big_r, big_v, om, geo, t_nodes, gamma)
                    finite = np.isfinite(el_rates)
                    el_cum = cumulative(SLOW_STEP_S, np.where(finite, el_rates, 0.0))
                    acc = cumulative_at(SLOW_STEP_S, el_cum, np.where(finite, el_rates, 0.0), np.where(bad_span[ang_sel], np.nan, dta))
                    acc[:, ~finite.all(axis=0)] = np.nan
                    # the rates at the records' own epochs (DE421 at their TDB)
                    tdb_m, tdb_s = tsp.add_seconds(tt_m[ang_rows], tt_s[ang_rows],
                                                   tsp.tdb_minus_tt_s(tt_m[ang_rows], tt_s[ang_rows]))
                    rr, vv = earth_heliocentric_state_m(tdb_m, tdb_s)
                    okr = np.all(np.isfinite(rr), axis=1)
                    rec = np.full((ang_rows.size, 3), np.nan)
                    if okr.any():
                        om_r = pr.de_sitter_precession_rate_rad_per_s(rr[okr], vv[okr], gamma=gamma)
                        rec[okr] = _de_sitter_element_rates(rr[okr], vv[okr], om_r, geo, dta[okr], gamma)
                    out["prec_de_sitter_node_rate_mas_per_yr"][ang_rows] = rec[:, 0] * MAS_PER_YR
                    out["prec_de_sitter_perigee_rate_mas_per_yr"][ang_rows] = rec[:, 1] * MAS_PER_YR
                    out["prec_de_sitter_in_plane_rate_mas_per_yr"][ang_rows] = rec[:, 2] * MAS_PER_YR
                    out["prec_de_sitter_node_mas"][ang_rows] = acc[:, 0] * MAS
                    out["prec_de_sitter_perigee_mas"][ang_rows] = acc[:, 1] * MAS
                    ds_node, ds_argp = acc[:, 0] * MAS, acc[:, 1] * MAS
                rel = np.where(is_node[ang_rows], out["prec_lt_node_mas"][ang_rows] + ds_node,
                               out["prec_lt_perigee_mas"][ang_rows] + out["prec_schwarzschild_perigee_mas"][ang_rows] + ds_argp)
                out["prec_relativistic_angle_mas"][ang_rows] = rel
                out["value_corrected"][ang_rows] = value[ang_rows] - rel / 3.6e6

        quarantine = {}
        q_unknown = unknown
        q_crosses = ~q_unknown & crosses
        q_outside = ~q_unknown & ~q_crosses & outside
        q_spin_ref = ~q_unknown & ~q_crosses & ~q_outside & no_spin_ref
        q_not_unit = ~q_unknown & ~q_crosses & ~q_outside & ~q_spin_ref & not_unit
        quarantine = {"body_unknown": q_unknown, "orbit_crosses_surface": q_crosses, "outside_orbit_coverage": q_outside,
                      "spin_reference_missing": q_spin_ref, "direction_not_unit": q_not_unit}
        bad = q_unknown | q_crosses | q_outside | q_spin_ref | q_not_unit
        for name in out:
            out[name][bad] = np.nan
        out["prec_direction_flag"] = flag
        return StageResult(columns=out, quarantine=quarantine)

    # ------------------------------------------------------------------
    def _spin(self, out, rows, dt, dt_tdb, bad_span, cat, j, geo, unit, path, sha, states_sha, params, outside, crosses, slow):
        """Spin-axis records ``rows`` of body ``j`` (dt: TT s since the start; dt_tdb: TDB s for state tables)."""
        cb = cat.central[j]
        gamma = params["gamma"]
        samples = int(params["samples_per_orbit"])
        if cat.states_file[j]:
            h, cum, rates, cov_bad, surf_bad = _state_spin_grid(path, sha, states_sha, j, gamma,
                                                                samples, float(params["max_gap_s"]),
                                                                float(params["max_span_days"] * DAY_S))
            t_q = np.where(bad_span, np.nan, dt_tdb)
            last = _index_after(h, t_q, cum.shape[0])
            outside[rows] |= ~bad_span & ((cov_bad[last] > 0) | ~(t_q <= (cum.shape[0] - 1) * h))
            crosses[rows] |= ~bad_span & (surf_bad[last] > 0)
        else:
            span = float(np.where(bad_span, 0.0, dt).max())
            h0 = _period_s(cat.elements[j, 0], cb.gm_m3_per_s2) / samples
            h, cum, rates = _element_spin_grid(path, sha, j, gamma, samples, grid_nodes(span, h0))
            t_q = np.where(bad_span, np.nan, dt)
        theta = cumulative_at(h, cum, rates, t_q)
        th_g, th_lt = theta[:, :3], theta[:, 3:]
        th_ds = np.zeros_like(th_g)
        if slow is not None:
            om, om_cum, n_slow = slow
            th_ds = cumulative_at(SLOW_STEP_S, om_cum, om, np.where(bad_span, np.nan, dt))
            for k, a in enumerate(_XYZ):
                out[f"prec_de_sitter_{a}_mas"][rows] = th_ds[:, k] * MAS
        total = th_g + th_lt + th_ds
        s0 = cat.spin_reference[j]
        pred = rotate(np.tile(s0, (rows.size, 1)), total)
        obs = unit[rows]
        corr = rotate(obs, -total)
        for k, a in enumerate(_XYZ):
            out[f"prec_geodetic_{a}_mas"][rows] = th_g[:, k] * MAS
            out[f"prec_frame_dragging_{a}_mas"][rows] = th_lt[:, k] * MAS
            out[f"prec_predicted_{a}"][rows] = pred[:, k]
            out[f"prec_observed_{a}"][rows] = obs[:, k]
            out[f"prec_corrected_{a}"][rows] = corr[:, k]
        cross = np.cross(pred, obs)
        out["prec_residual_mas"][rows] = np.arctan2(np.sqrt(np.einsum("ij,ij->i", cross, cross)),
                                                    np.einsum("ij,ij->i", pred, obs)) * MAS
        a, e, inc, raan0, argp0, t_el, d_raan, d_argp = geo
        normal = _normal(inc, raan0 + d_raan * (0.0 - t_el))
        guide = cat.guide_direction[j]
        axes = _ns_ew_axes(guide, normal)
        if axes is not None:
            ok = np.all(np.isfinite(theta), axis=1)
            for name, th in (("geodetic", th_g), ("frame_dragging", th_lt)):
                ns = np.full(rows.size, np.nan)
                ew = np.full(rows.size, np.nan)
                if ok.any():
                    ns[ok], ew[ok] = pr.drift_in_plane_rad(th[ok], guide, normal)
                out[f"prec_{name}_ns_mas"][rows] = ns * MAS
                out[f"prec_{name}_ew_mas"][rows] = ew * MAS
            diff = obs - pred
            # explicit sums, not a BLAS product: the rounding must not depend on the batch
            out["prec_residual_ns_mas"][rows] = (diff[:, 0] * axes[0][0] + diff[:, 1] * axes[0][1] + diff[:, 2] * axes[0][2]) * MAS
            out["prec_residual_ew_mas"][rows] = (diff[:, 0] * axes[1][0] + diff[:, 1] * axes[1][1] + diff[:, 2] * axes[1][2]) * MAS
