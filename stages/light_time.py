"""Stage ``light_time``: the light-time solution with the Shapiro delay for range records.

For each one-, two- or three-way range record, from the reception time t3
(topocentric TDB) at the receiving station: the downleg to the spacecraft
(t2) and, for two- and three-way records, the upleg from the transmitting
station (t1), each solved by iteration in TDB with the relativistic
light-time term of the selected bodies (the Sun with its GM/c^2 bending
terms) and PPN gamma as a parameter (``stages.physics.light_time``; Moyer
2000, JPL DESCANSO Monograph 2, sec. 8; IERS TN36 eq. 11.17).

Computed observable, in the time scale of the stations' clocks (TT, i.e.
TAI + 32.184 s):

* two-/three-way: tau = (t3 - t1)_TDB - [(TDB-TT)(t3) - (TDB-TT)(t1)], each
  TDB - TT at its own station (topocentric);
* one-way: tau = (t3 - t2)_TDB - (TDB-TT)(t3): the spacecraft's transmitter
  is taken to time-tag in TDB (an on-board clock model belongs to the clock
  stages).

Unit ``m``: c*tau/2 for two-/three-way records (one-way equivalent distance),
c*tau for one-way.  Columns per record: the epochs t2 and t1, the geometric
light time and the relativistic term of each body on each leg, the computed
observable, the observed value corrected for the relativistic terms, the
residual (observed - computed), iteration counts and a status.  Doppler
records pass untouched.

Links between spacecraft (``link_range_one_way``, ``link_range_two_way``; a
constellation with no ground station): ``station`` names the receiving
spacecraft, ``target`` the far one, both in the state table; the same leg
solution applies with the receiving spacecraft's state in place of the
station's.  Both clocks are taken to keep TDB, so the computed observable is
the TDB interval (t3 - t2, or t3 - t1 for the transponded round trip); the
time tag, like every raw tag, is UTC and becomes TDB through the geocentric
relation.
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pyarrow as pa

from stages.base import Column, Reference, Stage, StageContext, StageResult
from stages.common import light_time_model as ltm
from stages.physics import light_time as lt
from stages.physics.barycentric import times_from_tdb
from stages.physics.constants import C_M_PER_S
from stages.physics.ephemeris_grid import load_gridded_ephemeris
from stages.physics.ephemeris import GM_M3_PER_S2
from stages.physics.leap_seconds import load_leap_table
from stages.physics.spacecraft_ephemeris import target_posvel_bcrs_m

LIGHT_TIME_BODIES = ltm.LIGHT_TIME_BODIES
LEGS = ("down", "up")
_XYZ = ("x", "y", "z")



def _f64(name, unit, text):
    return Column(name, pa.float64(), unit, text)


class LightTime(Stage):
    name = "light_time"
    version = 2
    summary = "light-time solution (one-, two-, three-way range) with the Shapiro delay of the Sun and planets, PPN gamma"
    record_kinds = ("tracking",)
    requires = (
        Column("target", pa.string(), "", "spacecraft or body"),
        Column("station", pa.string(), "", "receiving station, or receiving spacecraft of link_* records"),
        Column("observable", pa.string(), "", "observable type"),
        Column("value", pa.float64(), "s|m", "observed value"),
        Column("unit", pa.string(), "", "unit of value"),
        Column("tdb_mjd", pa.int32(), "d", "reception time t3, TDB day"),
        Column("tdb_sod_s", pa.float64(), "s", "reception time t3, TDB seconds of day"),
        Column("tdb_minus_tt_s", pa.float64(), "s", "TDB - TT at t3 at the receiving station"),
        *(Column(f"site_bcrs_{a}_m", pa.float64(), "m", "BCRS position of the receiving station at t3") for a in _XYZ),
        *(Column(f"tx_site_itrs_{a}_m", pa.float64(), "m", "ITRF position of the transmitting station") for a in _XYZ),
    )
    provides = (
        Column("lt_t2_tdb_mjd", pa.int32(), "d", "t2, reflection (transmission for one-way) at the spacecraft: TDB day"),
        _f64("lt_t2_tdb_sod_s", "s", "t2: TDB seconds of day"),
        Column("lt_t1_tdb_mjd", pa.int32(), "d", "t1, transmission at the transmitting station: TDB day (null for one-way)"),
        _f64("lt_t1_tdb_sod_s", "s", "t1: TDB seconds of day"),
        _f64("lt_down_geometric_s", "s", "downleg geometric light time |r3(t3) - r2(t2)|/c, TDB"),
        _f64("lt_up_geometric_s", "s", "upleg geometric light time |r2(t2) - r1(t1)|/c, TDB"),
        *(_f64(f"shapiro_{b}_{leg}_s", "s", f"relativistic light-time term of {b} on the {leg}leg (NaN: body not selected)")
          for b in LIGHT_TIME_BODIES for leg in LEGS),
        _f64("tdb_minus_tt_t1_s", "s", "TDB - TT at t1 at the transmitting station"),
        _f64("computed_value", "s|m", "computed observable, in the record's unit"),
        _f64("relativistic_value", "s|m", "sum of the relativistic light-time terms, in the record's unit"),
        _f64("value_corrected", "s|m", "observed value minus the relativistic terms, in the record's unit"),
        _f64("residual", "s|m", "observed minus computed, in the record's unit"),
        _f64("dcomputed_dgamma", "s|m", "partial derivative of the computed observable with respect to PPN gamma "
             "(light_time eq. 3), in the record's unit"),
        Column("lt_iterations_down", pa.int8(), "", "iterations of the downleg solution"),
        Column("lt_iterations_up", pa.int8(), "", "iterations of the upleg solution"),
        Column("lt_status", pa.uint8(), "", "0 solved, 1 not converged, 2 invalid geometry (quarantined unless 0)"),
    )
    params = ltm.light_time_params("grid of the precession-nutation matrix for stations at t1")
    references = (
        Reference("Moyer 2000, Formulation for Observed and Computed Values of Deep Space Network Data Types for "
                  "Navigation, JPL DESCANSO Monograph 2, sec. 8", "light-time solution and relativistic light-time term"),
        Reference("IERS Conventions (2010), IERS TN 36, eq. 11.17", "Shapiro delay, geocentric form"),
        Reference("Shapiro 1964, PRL 13, 789", "the gravitational time delay"),
        Reference("Folkner, Williams & Boggs 2009, JPL IPN Progress Report 42-178 (DE421)", "body positions and GM"),
    )
    quarantine_reasons = {
        "target_unknown": "the target (or, for a link, the receiving spacecraft) is neither in the state table "
                          "nor a body of the planetary ephemeris",
        "target_outside_coverage": "a spacecraft epoch is outside its state table",
        "target_in_gap": "a spacecraft epoch falls in a gap of the state table wider than max_gap_s",
        "light_time_not_converged": "the light-time iteration did not converge within max_iterations",
        "light_time_invalid": "geometrically impossible or non-finite light-time solution",
    }

    def validate(self, params, context):
        return ltm.validate(params, context)

    def model_identities(self, params, context):
        return ltm.model_identities(params, context)

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        n = table.num_rows
        eph = load_gridded_ephemeris()  # DE421 on a 15-minute grid: < 0.2 mm from the series itself
        leap = load_leap_table()
        states = ltm.spacecraft_states(params, context)
        bodies = ltm.selected_bodies(params)
        opts = ltm.solver_options(params)

        def equal(name, value):
            return ltm.text_equals(table, name, value)

        kinds = {
            "one": equal("observable", "range_one_way"),
            "two": equal("observable", "range_two_way") | equal("observable", "range_three_way"),
            "link_one": equal("observable", "link_range_one_way"),
            "link_two": equal("observable", "link_range_two_way"),
        }
        in_metres = equal("unit", "m")
        one, two = kinds["one"] | kinds["link_one"], kinds["two"] | kinds["link_two"]
        t3_mjd, t3_sod = table["tdb_mjd"].to_numpy().astype(np.int64), table["tdb_sod_s"].to_numpy()
        d3 = table["tdb_minus_tt_s"].to_numpy()
        rx = np.column_stack([table[f"site_bcrs_{a}_m"].to_numpy() for a in _XYZ]) if n else np.zeros((0, 3))
        tx_itrs = np.column_stack([table[f"tx_site_itrs_{a}_m"].to_numpy() for a in _XYZ]) if n else np.zeros((0, 3))

        out = {c.name: np.full(n, np.nan) for c in self.provides}
        for c in ("lt_t2_tdb_mjd", "lt_t1_tdb_mjd", "lt_iterations_down", "lt_iterations_up"):
            out[c] = np.zeros(n, dtype=np.int64)
        out["lt_status"] = np.zeros(n, dtype=np.uint8)
        target_status = np.zeros(n, dtype=np.uint8)

        def spacecraft(name):
            return ltm.spacecraft_state_fn(name, eph, params, states)

        # groups of records sharing their ends: a loop over (kind, target[, receiving spacecraft]), not records
        tcode, tnames = ltm.text_codes(table, "target")
        rcode, rnames = ltm.text_codes(table, "station")
        groups = []
        for kind, mask in kinds.items():
            for tc in np.unique(tcode[mask]):
                sel = mask & (tcode == tc)
                rcs = np.unique(rcode[sel]) if kind.startswith("link") else [None]
                for rc in rcs:
                    idx = np.flatnonzero(sel if rc is None else sel & (rcode == rc))
                    groups.append((kind, tnames[tc], None if rc is None else rnames[rc], idx))

        for kind, tgt, rcv, idx in groups:
            sc_fn = spacecraft(tgt)
            bodies_fn = lt.LinearisedBodyStates(eph)
            if rcv is not None:
                # a link between spacecraft: the receiving spacecraft at t3 from the states; both clocks
                # taken to keep TDB, so the computed observable is the TDB interval itself
                rx_fn = spacecraft(rcv)
                rx_pos, _, rx_status = target_posvel_bcrs_m(rcv, t3_mjd[idx], t3_sod[idx], eph,
                                                            params["max_gap_s"], states)
                clock_d3, clock_d1 = 0.0, 0.0
            else:
                rx_pos, rx_status, clock_d3 = rx[idx], np.zeros(idx.size, dtype=np.uint8), d3[idx]
            if kind in ("one", "link_one"):
                sol = lt.one_way_light_time(t3_mjd[idx], t3_sod[idx], rx_pos, sc_fn, bodies_fn, GM_M3_PER_S2, **opts)
                down, up = sol, None
                tau = sol.light_time_s - clock_d3
                scale = np.where(in_metres[idx], C_M_PER_S, 1.0)
                status = sol.status
            else:
                if rcv is None:
                    site = tx_itrs[idx]
                    tx_fn = ltm.StationStates(site, eph, leap, params["grid_step_s"])
                else:
                    tx_fn = rx_fn
                sol = lt.two_way_light_time(t3_mjd[idx], t3_sod[idx], rx_pos, sc_fn, tx_fn, bodies_fn,
                                            GM_M3_PER_S2, **opts)
                down, up = sol.down, sol.up
                if rcv is None:
                    clock_d1 = times_from_tdb(sol.t1_mjd, sol.t1_sod_s, site, leap, params["grid_step_s"])[4]
                    out["tdb_minus_tt_t1_s"][idx] = clock_d1
                out["lt_t1_tdb_mjd"][idx] = sol.t1_mjd
                out["lt_t1_tdb_sod_s"][idx] = sol.t1_sod_s
                out["lt_up_geometric_s"][idx] = up.geometric_s
                out["lt_iterations_up"][idx] = up.iterations
                tau = sol.round_trip_s - (clock_d3 - clock_d1)
                scale = np.where(in_metres[idx], C_M_PER_S / 2.0, 1.0)
                status = sol.status
            out["lt_t2_tdb_mjd"][idx] = down.t_tx_mjd
            out["lt_t2_tdb_sod_s"][idx] = down.t_tx_sod_s
            out["lt_down_geometric_s"][idx] = down.geometric_s
            out["lt_iterations_down"][idx] = down.iterations
            rel = np.zeros(idx.size)
            for b in LIGHT_TIME_BODIES:
                if b not in bodies:
                    continue
                out[f"shapiro_{b}_down_s"][idx] = down.shapiro_s[b]
                rel += down.shapiro_s[b]
                if up is not None:
                    out[f"shapiro_{b}_up_s"][idx] = up.shapiro_s[b]
                    rel += up.shapiro_s[b]
            value = table["value"].to_numpy()[idx]
            out["computed_value"][idx] = tau * scale
            out["relativistic_value"][idx] = rel * scale
            out["value_corrected"][idx] = value - rel * scale
            out["residual"][idx] = value - tau * scale
            out["dcomputed_dgamma"][idx] = sol.dgamma_s * scale
            out["lt_status"][idx] = status
            # why a record has no solution: ask the spacecraft ephemeris at the solved (or received) epoch
            t2m = np.where(np.isfinite(down.t_tx_sod_s), down.t_tx_mjd, t3_mjd[idx])
            t2s = np.where(np.isfinite(down.t_tx_sod_s), down.t_tx_sod_s, t3_sod[idx])
            far_status = target_posvel_bcrs_m(tgt, t2m, t2s, eph, params["max_gap_s"], states)[2]
            target_status[idx] = np.where(rx_status != 0, rx_status, far_status)

        solved = one | two
        out["lt_t2_tdb_mjd"] = pa.array(out["lt_t2_tdb_mjd"], pa.int32(), mask=~solved)
        out["lt_t1_tdb_mjd"] = pa.array(out["lt_t1_tdb_mjd"], pa.int32(), mask=~two)
        out["lt_iterations_down"] = pa.array(out["lt_iterations_down"], pa.int8(), mask=~solved)
        out["lt_iterations_up"] = pa.array(out["lt_iterations_up"], pa.int8(), mask=~two)
        return StageResult(columns=out, touched=solved,
                           quarantine=ltm.target_quarantine(solved, target_status, out["lt_status"]))
