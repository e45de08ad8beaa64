"""Stage ``clock_rate``: proper time of the compared clocks against coordinate time, term by term.

For each clock-comparison record (remote − reference), both clocks are
looked up in a clock catalogue (``stages.physics.clock_catalogue``):

* an orbiting clock follows its two-body orbit (osculating elements in the
  GCRS); its rate against TT is d tau/dTT − 1 = L_G − [v²/2 + U_E]/c² with
  U_E the monopole + J2 potential (IERS Conventions 2010, sec. 10.2; Ashby
  2003, Living Rev. Relativity 6, 1), and the time it accumulates since the
  reference epoch splits into a constant-rate part [L_G − 3GM/(2ac²) +
  <J2 rate>]·Δt and the periodic eccentricity term −2√(GMa)·e·(sin E −
  sin E_ref)/c² = −2 (r·v − r_ref·v_ref)/c² (Ashby 2003 sec. 5; IS-GPS-200
  sec. 20.3.3.3.3.1);
* a ground clock at rest on the Earth runs at C/c² against TT, C = g·H its
  geopotential number (H: height above the geoid from the catalogue, g: GRS80
  normal gravity at the station's latitude), since a clock on the geoid keeps
  TT (IAU 2000 Resolution B1.9).

Predicted relativistic part of the observable: for ``time_offset`` records
the difference of the accumulated times, for ``fractional_frequency`` records
the difference of the mean rates over the averaging interval
[t − τ/2, t + τ/2] (from the accumulated times at its ends).  The corrected
value is the observation minus that prediction: what is left is the clocks'
own behaviour (offset, rate, drift, noise).  With ``coordinate_time =
"TCG"`` every rate is referred to TCG instead (dTT/dTCG = 1 − L_G).

Neglected (bounds): the periodic J2 part of the accumulated time (tens of
ps for an orbit at 26 000 km; the J2 rate itself is kept per record), the
tidal terms of the Sun and Moon (< 1e-15 in rate near the Earth), geoid
undulations beyond the catalogue height.
"""
from __future__ import annotations

import datetime
from typing import Any, Mapping

import erfa
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics import clock_rates as cr
from stages.physics import constants as K
from stages.physics.clock_catalogue import ClockCatalogueError, load_clock_catalogue
from stages.physics.file_cache import load_cached
from stages.physics.spacecraft_ephemeris import load_state_table
from stages.physics.station_catalogue import CatalogueError, load_catalogue, station_itrs_m

C2 = K.C_M_PER_S ** 2


def normal_gravity_m_per_s2(geodetic_lat_rad) -> np.ndarray:
    """GRS80 normal gravity on the ellipsoid, Somigliana's formula (Moritz 2000, J. Geodesy 74, 128;
    from memory): gamma = 9.7803267715 (1 + 0.001931851353 sin^2 phi) / sqrt(1 - 0.00669438002290 sin^2 phi)."""
    s2 = np.sin(geodetic_lat_rad) ** 2
    return 9.7803267715 * (1.0 + 0.001931851353 * s2) / np.sqrt(1.0 - 0.00669438002290 * s2)


def _mean_j2_rate(a_m, e, i_rad, raan_rad, argp_rad, samples: int = 720) -> float:
    """Orbit average of the J2 rate term, by sampling one period uniformly in mean anomaly."""
    m = np.linspace(0.0, 2 * np.pi, samples, endpoint=False)
    n = np.sqrt(K.GM_EARTH_TT_M3_PER_S2 / a_m**3)
    pos, vel, _ = cr.kepler_state(a_m, e, i_rad, raan_rad, argp_rad, 0.0, 0.0, m / n)
    return float(np.mean(cr.clock_rate_terms(pos, vel)["j2"]))


def _hermite_cumulative(t_nodes, cum, rate, tq, max_gap_s):
    """The accumulated time at ``tq`` from its values ``cum`` and derivatives ``rate`` at the nodes:
    cubic Hermite between the two bracketing nodes (error h^4/384 max |d3 rate/dt3|, < 1e-15 s for
    5-minute states of an orbit at 26 000 km).  NaN outside the nodes or across a gap > max_gap_s."""
    k = np.clip(np.searchsorted(t_nodes, tq, side="right") - 1, 0, len(t_nodes) - 2)
    h = t_nodes[k + 1] - t_nodes[k]
    s = (tq - t_nodes[k]) / h
    s2, s3 = s * s, s * s * s
    out = ((2 * s3 - 3 * s2 + 1) * cum[k] + (s3 - 2 * s2 + s) * h * rate[k]
           + (-2 * s3 + 3 * s2) * cum[k + 1] + (s3 - s2) * h * rate[k + 1])
    bad = ~np.isfinite(tq) | (tq < t_nodes[0]) | (tq > t_nodes[-1]) | ((h > max_gap_s) & (s > 0) & (s < 1))
    return np.where(bad, np.nan, out)


def _state_orbit(states, target, tt_mjd, tt_sod, dt, half, max_gap_s, ep_mjd, ep_sod):
    """Rate terms and accumulated times of a clock whose orbit is a state table (centre: the Earth).

    The accumulated time is the integral of the full rate (monopole, J2, velocity) along the
    tabulated states (``integrate_rate_s``, fourth order), interpolated to the records; its
    constant-rate part is the least-squares slope of that integral less the eccentricity term,
    the rest (the eccentricity term and the periodic J2 part) is the periodic part.
    State epochs are TDB: a record's TT epoch becomes TDB with the geocentric TDB - TT series."""
    from stages.physics import time_scales as tsp

    tdb_m, tdb_s = tsp.add_seconds(tt_mjd, tt_sod, tsp.tdb_minus_tt_s(tt_mjd, tt_sod))
    pos, vel, status = states.posvel_centre_m(target, tdb_m, tdb_s, max_gap_s)
    terms = cr.clock_rate_terms(pos, vel)
    n_mjd, n_sod, n_pos, n_vel = states.nodes(target)
    n_mjd = np.asarray(n_mjd, dtype=np.int64)
    tt_nm, tt_ns = tsp.add_seconds(n_mjd, n_sod, -tsp.tdb_minus_tt_s(n_mjd, n_sod))
    t_nodes = (tt_nm - ep_mjd) * 86400.0 + (tt_ns - ep_sod)
    node_terms = cr.clock_rate_terms(n_pos, n_vel)
    rate_nodes = node_terms["total"]
    cum = cr.integrate_rate_s(t_nodes, rate_nodes)
    per_term = {}
    for name in ("gravitational", "j2", "velocity"):  # a loop over terms, not records
        c_t = cr.integrate_rate_s(t_nodes, node_terms[name])
        z_t = _hermite_cumulative(t_nodes, c_t, node_terms[name], np.zeros(1), max_gap_s)[0]
        per_term[name] = _hermite_cumulative(t_nodes, c_t, node_terms[name], dt, max_gap_s) - z_t
    zero = _hermite_cumulative(t_nodes, cum, rate_nodes, np.zeros(1), max_gap_s)[0]  # at the reference epoch
    # constant-rate part: the slope of the accumulated time once the eccentricity term -2 r.v/c^2 is
    # taken out (for a Kepler orbit what is left is exactly linear; Ashby 2003 sec. 5), least squares
    slope_of = cum - cr.eccentricity_term_s(n_pos, n_vel)
    secular = float(np.polyfit(t_nodes - t_nodes.mean(), slope_of, 1)[0])
    offsets = {s: _hermite_cumulative(t_nodes, cum, rate_nodes, dt + s * half, max_gap_s) - zero for s in (-1, 0, 1)}
    bad = (status != 0) | ~np.isfinite(offsets[-1]) | ~np.isfinite(offsets[1]) | ~np.isfinite(zero)
    return terms, offsets, secular, cr.eccentricity_term_s(pos, vel), bad, pos, per_term


def _two_way_prediction(clocks, stations, j_sat, j_gnd, dt, ep_mjd, ep_sod, params):
    """Predicted relativistic shift of two-way frequency comparisons of orbiting clock ``j_sat`` with
    ground clock ``j_gnd`` received at ``dt`` (TT seconds since the reference epoch): eqs. (1)-(2) of
    ``stages.physics.frequency_links``, both clocks' rates against TT."""
    from stages.physics import time_scales as tsp
    from stages.physics.barycentric import tai_to_utc
    from stages.physics.earth_rotation import itrs_to_gcrs
    from stages.physics.frequency_links import two_way_shift
    from stages.physics.leap_seconds import load_leap_table

    leap = load_leap_table()
    si = {c: i for i, c in enumerate(stations.codes)}[clocks.station[j_gnd]]
    _, lat, _ = erfa.gc2gd(1, stations.position_m[si])
    ground_rate = normal_gravity_m_per_s2(lat) * clocks.height_above_geoid_m[j_gnd] / C2

    def tt_of(t):
        return tsp.add_seconds(np.full(t.shape, ep_mjd, dtype=np.int64), np.full(t.shape, ep_sod), t)

    def ground(t):
        tt_m, tt_s = tt_of(t)
        utc_m, utc_s = tai_to_utc(*tsp.add_seconds(tt_m, tt_s, -32.184), leap)
        x = station_itrs_m(stations, np.full(t.shape, si), utc_m.astype(float))
        st = itrs_to_gcrs(x, utc_m, utc_s, tt_m, tt_s)
        return st.pos_m, st.vel_m_per_s, np.full(t.shape, ground_rate)

    if clocks.states_file[j_sat]:
        states = load_cached(load_state_table, clocks.states_file[j_sat])

        def satellite(t):
            tt_m, tt_s = tt_of(t)
            tdb_m, tdb_s = tsp.add_seconds(tt_m, tt_s, tsp.tdb_minus_tt_s(tt_m, tt_s))
            pos, vel, _ = states.posvel_centre_m(clocks.states_target[j_sat], tdb_m, tdb_s, params["max_gap_s"])
            return pos, vel, cr.clock_rate_terms(pos, vel)["total"]
    else:
        el = clocks.elements[j_sat]
        t_el = (clocks.epoch_tt_mjd[j_sat] - ep_mjd) * 86400.0 + (clocks.epoch_tt_sod_s[j_sat] - ep_sod)

        def satellite(t):
            pos, vel, _ = cr.kepler_state(*el, t_el, t)
            return pos, vel, cr.clock_rate_terms(pos, vel)["total"]

    return two_way_shift(dt, satellite, ground)


def _tidal_rate(pos_gcrs_m, tt_mjd, tt_sod_s) -> np.ndarray:
    """-U_tidal/c^2 of the Sun and Moon at the clock (quadrupole, IERS TN36 ch. 10; positions from DE421,
    TT standing in for TDB: < 5e-9 relative)."""
    bodies = cr.sun_moon_geocentric_m(tt_mjd, tt_sod_s)
    return -cr.tidal_potential_m2_per_s2(pos_gcrs_m, bodies) / C2


def _parse_epoch(text: str):
    ep = datetime.datetime.fromisoformat(text)
    mjd = ep.date().toordinal() - 678576
    return mjd, ep.hour * 3600.0 + ep.minute * 60.0 + ep.second + ep.microsecond * 1e-6


def _f64(name, unit, text):
    return Column(name, pa.float64(), unit, text)


class ClockRate(Stage):
    name = "clock_rate"
    version = 1
    summary = "proper time of orbiting and ground clocks against TT (or TCG): redshift, velocity, J2, eccentricity term"
    record_kinds = ("clock",)
    requires = (
        Column("remote_clock", pa.string(), "", "remote clock"),
        Column("reference_clock", pa.string(), "", "reference clock"),
        Column("observable", pa.string(), "", "time_offset or fractional_frequency"),
        Column("value", pa.float64(), "s|1", "observed value"),
        Column("tt_mjd", pa.int32(), "d", "epoch, TT day"),
        Column("tt_sod_s", pa.float64(), "s", "epoch, TT seconds of day"),
    )
    optional = (Column("averaging_s", pa.float64(), "s", "averaging interval of fractional_frequency records"),
                Column("sagnac_offset_correction_s", pa.float64(), "s", "from the sagnac stage, added to time_offset records"))
    provides = (
        _f64("remote_rate_gravitational", "1", "remote clock: L_G - GM/(r c^2), monopole (0 for a ground clock: see total)"),
        _f64("remote_rate_j2", "1", "remote clock: J2 part of the potential term"),
        _f64("remote_rate_velocity", "1", "remote clock: -v^2/(2 c^2), GCRS velocity"),
        _f64("remote_rate_tidal", "1", "remote clock: -U_tidal/c^2 of the Sun and Moon (parameter tidal; NaN when off; "
                                       "reported, not folded into the totals: <= 1e-15 near the Earth)"),
        _f64("remote_rate_total", "1", "remote clock: d tau/dt - 1 against the coordinate time (TT or TCG)"),
        _f64("reference_rate_total", "1", "reference clock: d tau/dt - 1 against the coordinate time"),
        _f64("remote_offset_secular_s", "s", "remote clock: constant-rate part of tau - t accumulated since the reference epoch"),
        _f64("remote_offset_periodic_s", "s", "remote clock: eccentricity term -2(r.v - r0.v0)/c^2 since the reference epoch"),
        _f64("remote_offset_gravitational_s", "s", "remote clock: time accumulated by the monopole term (with L_G) since the reference epoch"),
        _f64("remote_offset_j2_s", "s", "remote clock: time accumulated by the J2 term (orbit mean for two-body elements)"),
        _f64("remote_offset_velocity_s", "s", "remote clock: time accumulated by the velocity term since the reference epoch"),
        _f64("eccentricity_term_s", "s", "remote clock: -2 r.v/c^2 at the epoch (IS-GPS-200 F e sqrt(A) sin E)"),
        _f64("reference_offset_s", "s", "reference clock: tau - t accumulated since the reference epoch"),
        _f64("relativistic_prediction", "s|1", "predicted relativistic part of the observable (remote - reference)"),
        _f64("value_corrected", "s|1", "observed value (plus the Sagnac correction of time offsets when the sagnac stage "
                                     "ran first) minus the relativistic prediction: the clocks' own behaviour"),
    )
    params = (
        Param("clocks", "str", "clocks.toml", "clock catalogue (relative to the config file)"),
        Param("stations", "str", "stations.toml", "station catalogue, for the latitude of ground clocks"),
        Param("reference_epoch_tt", "str", "2000-01-01T12:00:00",
              "epoch from which accumulated times are counted (ISO date-time, TT)"),
        Param("coordinate_time", "str", "TT", "coordinate time the clocks are referred to", choices=("TT", "TCG")),
        Param("tidal", "bool", False, "report the Sun's and Moon's tidal term of orbiting remote clocks (DE421)"),
        Param("max_gap_s", "float", 3600.0, "widest gap between tabulated states the interpolation may bridge",
              unit="s", minimum=1.0, maximum=86400.0),
    )
    references = (
        Reference("IERS Conventions (2010), IERS TN 36, sec. 10.2 and Table 1.1", "proper time of a clock near the Earth; L_G, GM, J2"),
        Reference("Ashby 2003, Living Rev. Relativity 6, 1 (eq. 18, sec. 5)", "gravitational and velocity terms, eccentricity term"),
        Reference("IS-GPS-200, sec. 3.3.1.1 and 20.3.3.3.3.1", "factory frequency offset, F e sqrt(A) sin E"),
        Reference("IAU 2000 Resolution B1.9", "a clock on the geoid keeps TT; dTT/dTCG = 1 - L_G"),
        Reference("Moritz 2000, J. Geodesy 74, 128 (GRS80)", "normal gravity for ground clocks"),
    )
    quarantine_reasons = {
        "clock_unknown": "the remote or reference clock is not in the clock catalogue",
        "clock_station_unknown": "a ground clock's station is not in the station catalogue (or has no position)",
        "two_way_not_ground_satellite": "a two-way frequency record that is not between an orbiting and a ground clock",
        "orbit_outside_coverage": "the record's epoch (or its averaging interval, or the reference epoch) is outside "
                                  "the clock's state table, or in a gap wider than max_gap_s",
    }

    def validate(self, params, context):
        problems = {}
        try:
            clocks = load_clock_catalogue(context.path(params["clocks"]))
        except ClockCatalogueError as exc:
            problems["clocks"] = str(exc)
            clocks = None
        try:
            stations = load_catalogue(context.path(params["stations"]))
        except CatalogueError as exc:
            if clocks is not None and (~clocks.orbiting).any():
                problems["stations"] = str(exc)
            stations = None
        try:
            _parse_epoch(params["reference_epoch_tt"])
        except ValueError:
            problems["reference_epoch_tt"] = f"found {params['reference_epoch_tt']!r}, expected an ISO date-time such as 2000-01-01T12:00:00"
        if clocks is not None and stations is not None:
            missing = sorted(set(clocks.station[~clocks.orbiting]) - set(stations.codes))
            if missing:
                problems["clocks"] = f"ground clock station {missing[0]!r} is not in {params['stations']}"
        return problems

    def model_identities(self, params, context):
        ids = {"clock catalogue": load_clock_catalogue(context.path(params["clocks"])).identity}
        try:
            ids["station catalogue"] = load_catalogue(context.path(params["stations"])).identity
        except CatalogueError:
            pass
        return ids

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        n = table.num_rows
        clocks = load_cached(load_clock_catalogue, context.path(params["clocks"]))
        k = len(clocks.codes)
        # per-clock constants (a loop over catalogue clocks, not records)
        ground_rate = np.full(k, np.nan)
        mean_j2 = np.zeros(k)
        station_ok = np.ones(k, dtype=bool)
        if (~clocks.orbiting).any():
            stations = load_cached(load_catalogue, context.path(params["stations"]))
            lookup = {c: i for i, c in enumerate(stations.codes)}
            for j in np.flatnonzero(~clocks.orbiting):
                si = lookup.get(clocks.station[j], -1)
                if si < 0 or not stations.has_coordinates[si]:
                    station_ok[j] = False
                    continue
                _, lat, _ = erfa.gc2gd(1, stations.position_m[si])
                ground_rate[j] = normal_gravity_m_per_s2(lat) * clocks.height_above_geoid_m[j] / C2
        by_elements = clocks.orbiting & (clocks.states_file == "")
        for j in np.flatnonzero(by_elements):
            mean_j2[j] = _mean_j2_rate(*clocks.elements[j, :5])
        tcg = params["coordinate_time"] == "TCG"
        shift = -K.L_G if tcg else 0.0  # d tau/dTCG - 1 = (d tau/dTT - 1) - L_G (first order)

        remote = clocks.index(table["remote_clock"])
        reference = clocks.index(table["reference_clock"])
        unknown = (remote < 0) | (reference < 0)
        r, f = np.where(remote < 0, 0, remote), np.where(reference < 0, 0, reference)
        bad_station = ~unknown & (~station_ok[r] | ~station_ok[f])

        ep_mjd, ep_sod = _parse_epoch(params["reference_epoch_tt"])
        tt_mjd_all = table["tt_mjd"].to_numpy().astype(np.int64)
        tt_sod_all = table["tt_sod_s"].to_numpy()
        outside = np.zeros(n, dtype=bool)
        dt = (table["tt_mjd"].to_numpy().astype(np.int64) - ep_mjd) * 86400.0 + (table["tt_sod_s"].to_numpy() - ep_sod)
        is_freq = np.asarray(pc.fill_null(pc.is_in(table["observable"], value_set=pa.array(
            ["fractional_frequency", "two_way_fractional_frequency"])), False).to_numpy(zero_copy_only=False), dtype=bool)
        tau = table["averaging_s"].to_numpy(zero_copy_only=False).astype(float) if "averaging_s" in table.column_names \
            else np.full(n, np.nan)
        half = np.where(is_freq & np.isfinite(tau), tau / 2.0, 0.0)

        out = {c.name: np.full(n, np.nan) for c in self.provides}
        offsets = {}
        for role, idx_all in (("remote", r), ("reference", f)):
            orb = clocks.orbiting[idx_all]
            rate = np.full(n, np.nan)
            off = {s: np.full(n, np.nan) for s in (-1, 0, 1)}   # accumulated time at t - tau/2, t, t + tau/2
            if (~orb).any():
                g = ~orb
                rate[g] = ground_rate[idx_all[g]] + shift
                for s in off:
                    off[s][g] = rate[g] * (dt[g] + s * half[g])
            orb_states = orb & (clocks.states_file[idx_all] != "")
            orb_el = orb & ~orb_states
            for j in np.unique(idx_all[orb_states]):  # a loop over state-table clocks, not records
                o = np.flatnonzero(orb_states & (idx_all == j))
                states = load_cached(load_state_table, clocks.states_file[j])
                terms, offs, secular, ecc, bad_o, pos_o, per_term = _state_orbit(
                    states, clocks.states_target[j], tt_mjd_all[o], tt_sod_all[o], dt[o], half[o],
                    params["max_gap_s"], ep_mjd, ep_sod)
                if role == "remote" and params["tidal"]:
                    out["remote_rate_tidal"][o] = _tidal_rate(pos_o, tt_mjd_all[o], tt_sod_all[o])
                rate[o] = terms["total"] + shift
                for s_ in off:
                    off[s_][o] = offs[s_] + shift * (dt[o] + s_ * half[o])
                outside[o] |= bad_o
                if role == "remote":
                    out["remote_rate_gravitational"][o] = terms["gravitational"] + shift
                    out["remote_rate_j2"][o] = terms["j2"]
                    out["remote_rate_velocity"][o] = terms["velocity"]
                    out["remote_offset_secular_s"][o] = (secular + shift) * dt[o]
                    out["remote_offset_periodic_s"][o] = off[0][o] - (secular + shift) * dt[o]
                    out["eccentricity_term_s"][o] = ecc
                    out["remote_offset_gravitational_s"][o] = per_term["gravitational"] + shift * dt[o]
                    out["remote_offset_j2_s"][o] = per_term["j2"]
                    out["remote_offset_velocity_s"][o] = per_term["velocity"]
            if orb_el.any():
                o = np.flatnonzero(orb_el)
                el = clocks.elements[idx_all[o]]
                a, e, inc, raan, argp, m0 = el.T
                t_el = (clocks.epoch_tt_mjd[idx_all[o]] - ep_mjd) * 86400.0 + (clocks.epoch_tt_sod_s[idx_all[o]] - ep_sod)
                pos, vel, e_at = cr.kepler_state(a, e, inc, raan, argp, m0, t_el, dt[o])
                terms = cr.clock_rate_terms(pos, vel)
                rate[o] = terms["total"] + shift
                secular = cr.kepler_secular_rate(a) + mean_j2[idx_all[o]] + shift
                gm = K.GM_EARTH_TT_M3_PER_S2
                mean_motion = np.sqrt(gm / a**3)
                # eccentric anomalies at the reference epoch (one per clock) and at t -+ tau/2 (frequency
                # records only): Kepler's equation alone, no state needed
                e_ref = cr.solve_kepler_rad(m0 + mean_motion * (0.0 - t_el), e)
                amp = -2.0 * np.sqrt(gm * a) * e / C2
                off[0][o] = secular * dt[o] + amp * (np.sin(e_at) - np.sin(e_ref))
                f_o = half[o] > 0
                for s in (-1, 1):
                    off[s][o] = off[0][o]
                    if f_o.any():
                        ts_ = dt[o][f_o] + s * half[o][f_o]
                        e_s = cr.solve_kepler_rad(m0[f_o] + mean_motion[f_o] * (ts_ - t_el[f_o]), e[f_o])
                        off[s][o[f_o]] = secular[f_o] * ts_ + amp[f_o] * (np.sin(e_s) - np.sin(e_ref[f_o]))
                if role == "remote":
                    out["remote_rate_gravitational"][o] = terms["gravitational"] + shift
                    out["remote_rate_j2"][o] = terms["j2"]
                    out["remote_rate_velocity"][o] = terms["velocity"]
                    if params["tidal"]:
                        out["remote_rate_tidal"][o] = _tidal_rate(pos, tt_mjd_all[o], tt_sod_all[o])
                    out["remote_offset_secular_s"][o] = secular * dt[o]
                    out["remote_offset_periodic_s"][o] = off[0][o] - secular * dt[o]
                    out["eccentricity_term_s"][o] = cr.eccentricity_term_s(pos, vel)
                    # per term, from  integral GM/r dt = (GM/a) dt + sqrt(GM a) e d(sin E)  (vis-viva and
                    # Kepler's equation; see kepler_secular_rate): monopole and velocity terms
                    int_u = gm / a * dt[o] + np.sqrt(gm * a) * e * (np.sin(e_at) - np.sin(e_ref))
                    out["remote_offset_gravitational_s"][o] = (K.L_G + shift) * dt[o] - int_u / C2
                    out["remote_offset_velocity_s"][o] = -(int_u - gm / (2.0 * a) * dt[o]) / C2
                    out["remote_offset_j2_s"][o] = mean_j2[idx_all[o]] * dt[o]
            if role == "remote":
                out["remote_rate_total"] = rate
                g = ~orb
                out["remote_offset_secular_s"][g] = off[0][g]
                out["remote_offset_periodic_s"][g] = 0.0
                out["remote_offset_gravitational_s"][g] = off[0][g]   # a ground clock: all in C/c^2
                out["remote_offset_j2_s"][g] = 0.0
                out["remote_offset_velocity_s"][g] = 0.0
                out["remote_rate_gravitational"][g] = rate[g]
                out["remote_rate_j2"][g] = 0.0
                out["remote_rate_velocity"][g] = 0.0
            else:
                out["reference_rate_total"] = rate
                out["reference_offset_s"] = off[0]
            offsets[role] = off

        with np.errstate(invalid="ignore", divide="ignore"):
            mean_rate = ((offsets["remote"][1] - offsets["remote"][-1]) - (offsets["reference"][1] - offsets["reference"][-1])) / (2 * half)
        predicted = np.where(is_freq, mean_rate, offsets["remote"][0] - offsets["reference"][0])
        # two-way frequency links: the first-order Doppler cancels; what is left is predicted from the
        # signals' geometry (eqs. 1-2 of stages.physics.frequency_links), averaged over the interval
        # (Simpson's rule on t - tau/2, t, t + tau/2)
        two_way = np.asarray(pc.fill_null(pc.equal(table["observable"], "two_way_fractional_frequency"), False)
                             .to_numpy(zero_copy_only=False), dtype=bool) & ~unknown & ~bad_station
        pair_ok = two_way & (clocks.orbiting[r] != clocks.orbiting[f])
        if pair_ok.any():
            stations_tab = load_cached(load_catalogue, context.path(params["stations"]))
            sat_remote = clocks.orbiting[r]
            for js, jg in {(int(a), int(b)) for a, b in zip(np.where(sat_remote, r, f)[pair_ok],
                                                            np.where(sat_remote, f, r)[pair_ok])}:
                # a loop over (satellite, ground) clock pairs, not records
                m = np.flatnonzero(pair_ok & (np.where(sat_remote, r, f) == js) & (np.where(sat_remote, f, r) == jg))
                ys = [_two_way_prediction(clocks, stations_tab, js, jg, dt[m] + k * half[m], ep_mjd, ep_sod, params)
                      for k in (-1, 0, 1)]
                y = (ys[0] + 4.0 * ys[1] + ys[2]) / 6.0
                predicted[m] = np.where(sat_remote[m], y, -y)  # a difference of two clocks: TT or TCG alike
        predicted[two_way & ~pair_ok] = np.nan
        outside &= ~(unknown | bad_station)
        bad = unknown | bad_station | outside
        predicted[bad] = np.nan
        out["relativistic_prediction"] = predicted
        value = table["value"].to_numpy()
        if "sagnac_offset_correction_s" in table.column_names:  # the sagnac stage ran first
            sag = table["sagnac_offset_correction_s"].to_numpy(zero_copy_only=False).astype(float)
            value = value + np.where(~is_freq & np.isfinite(sag), sag, 0.0)
        out["value_corrected"] = value - predicted
        return StageResult(columns=out, quarantine={"clock_unknown": unknown, "clock_station_unknown": bad_station,
                                                    "two_way_not_ground_satellite": two_way & ~pair_ok,
                                                    "orbit_outside_coverage": outside})
