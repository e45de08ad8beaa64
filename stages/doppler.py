"""Stage ``doppler``: one-, two- and three-way Doppler as differenced light time over the count.

A Doppler record is tagged with the *end* of its count (UTC at the receiving
station) and carries the count interval ``count_s`` kept by the station's
clock (TT).  The stage solves the light time at both ends of the count with
the light-time solver (``stages.physics.light_time`` through
``stages.physics.doppler``; Moyer 2000, JPL DESCANSO Monograph 2, sec. 13:
Doppler as differenced range) and forms the fractional frequency shift::

    y = (f_received - M f_reference) / (M f_reference)

* two-/three-way: the station transmits f_reference (in its clock's TT) and
  the spacecraft turns it around with the ratio M; the received phase at t3
  is the transmitted phase at t1, so ``y = -[tau_TT(end) - tau_TT(start)]/T_c``
  with ``tau_TT = (t3 - t1)_TDB - [(TDB-TT)(t3) - (TDB-TT)(t1)]`` (each TDB-TT
  at its own station, topocentric);
* one-way: the spacecraft's oscillator of nominal frequency f_reference (in
  its proper time) transmits; ``y = -[tau_TDB(end) - tau_TDB(start)]/T_c +
  [(TDB-TT)(t3 end) - (TDB-TT)(t3 start)]/T_c + y_osc`` with y_osc the
  oscillator's own rate against TDB integrated over the transmission epochs
  (``doppler.oscillator_terms``; IERS TN36 eq. 10.3 with IAU 2006 Res. B3).

The count's start is ``end - count_s`` in TT (the station clock), converted to
TDB at the station: a leap second inside the count changes nothing.

Per record: the geometric part, each body's relativistic part, the station
clock-scale part, for one-way the oscillator's gravitational, J2, velocity and
scale parts, the computed observable, the partial derivative with respect to
PPN gamma (for the gamma estimate of the ``gamma_fit`` stage), the residual,
all in fractional frequency (``dop_*``) and, for the observable, also in the
record's unit (Hz: ``y`` times M f_reference, or f_reference for one-way; "1":
``y`` itself).  Range records pass untouched.
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Reference, Stage, StageContext, StageResult
from stages.common import light_time_model as ltm
from stages.physics import doppler as dp
from stages.physics import light_time as lt
from stages.physics.barycentric import tdb_from_tt, times_from_tdb
from stages.physics.ephemeris import GM_M3_PER_S2
from stages.physics.ephemeris_grid import load_gridded_ephemeris
from stages.physics.leap_seconds import load_leap_table
from stages.physics.time_scales import add_seconds
from stages.physics.spacecraft_ephemeris import target_posvel_bcrs_m

DOPPLER_BODIES = ltm.LIGHT_TIME_BODIES
OSCILLATOR_TERMS = ("gravitational", "j2", "velocity", "scale")
_XYZ = ("x", "y", "z")


def _f64(name, unit, text):
    return Column(name, pa.float64(), unit, text)


class Doppler(Stage):
    name = "doppler"
    version = 1
    summary = "one-, two- and three-way Doppler as differenced light time over the count, with the Shapiro, " \
              "station clock-scale and oscillator terms; PPN gamma and its partial"
    record_kinds = ("tracking",)
    requires = (
        Column("target", pa.string(), "", "spacecraft"),
        Column("station", pa.string(), "", "receiving station"),
        Column("observable", pa.string(), "", "observable type"),
        Column("value", pa.float64(), "Hz|1", "observed value"),
        Column("unit", pa.string(), "", "unit of value"),
        Column("tt_mjd", pa.int32(), "d", "end of the count at the receiving station, TT day"),
        Column("tt_sod_s", pa.float64(), "s", "end of the count, TT seconds of day"),
        *(Column(f"site_itrs_{a}_m", pa.float64(), "m", "ITRF position of the receiving station") for a in _XYZ),
        *(Column(f"tx_site_itrs_{a}_m", pa.float64(), "m", "ITRF position of the transmitting station") for a in _XYZ),
    )
    optional = (
        Column("count_s", pa.float64(), "s", "count interval of Doppler records (station clock)"),
        Column("reference_frequency_hz", pa.float64(), "Hz", "transmitted (two-/three-way) or oscillator (one-way) "
               "reference frequency"),
        Column("turnaround_ratio", pa.float64(), "", "spacecraft transponder ratio M (two-/three-way; null: 1)"),
    )
    provides = (
        Column("dop_start_tdb_mjd", pa.int32(), "d", "start of the count at the receiving station: TDB day"),
        _f64("dop_start_tdb_sod_s", "s", "start of the count: TDB seconds of day"),
        _f64("dop_geometric", "1", "geometric part of y (straight-line light time, TDB)"),
        *(_f64(f"dop_shapiro_{b}", "1", f"part of y from the relativistic light-time term of {b}, both legs "
               "(NaN: body not selected)") for b in DOPPLER_BODIES),
        _f64("dop_station_clock", "1", "part of y from the station clocks keeping TT, not TDB (TDB - TT rates)"),
        *(_f64(f"dop_oscillator_{t}", "1", f"one-way: the spacecraft oscillator's {t} rate term against TDB")
          for t in OSCILLATOR_TERMS),
        _f64("dop_computed_y", "1", "computed fractional frequency shift y, sum of the parts"),
        _f64("dop_dy_dgamma", "1", "partial derivative of y with respect to PPN gamma"),
        _f64("dop_computed_value", "Hz|1", "computed observable, in the record's unit"),
        _f64("dop_relativistic_value", "Hz|1", "relativistic parts of the computed observable (Shapiro, station "
             "clock, oscillator), in the record's unit"),
        _f64("dop_value_corrected", "Hz|1", "observed value minus the relativistic parts, in the record's unit"),
        _f64("dop_residual", "Hz|1", "observed minus computed, in the record's unit"),
        _f64("dop_dcomputed_dgamma", "Hz|1", "partial derivative of the computed observable with respect to gamma, "
             "in the record's unit"),
        Column("dop_status", pa.uint8(), "", "0 solved, 1 not converged, 2 invalid (quarantined unless 0)"),
    )
    params = ltm.light_time_params("grid of the precession-nutation matrix and of TDB - TT")
    references = (
        Reference("Moyer 2000, Formulation for Observed and Computed Values of Deep Space Network Data Types for "
                  "Navigation, JPL DESCANSO Monograph 2, sec. 13", "Doppler as differenced light time over the count"),
        Reference("Bertotti, Iess & Tortora 2003, Nature 425, 374, eq. 1", "the solar Shapiro signature in Doppler"),
        Reference("IERS Conventions (2010), IERS TN 36, eq. 10.3; IAU 2006 Resolution B3",
                  "proper time of the spacecraft oscillator against TCB and TDB"),
        Reference("Folkner, Williams & Boggs 2009, JPL IPN Progress Report 42-178 (DE421)", "body positions and GM"),
    )
    quarantine_reasons = {
        "count_interval_invalid": "Doppler record without a positive, finite count interval",
        "reference_frequency_invalid": "Doppler record in Hz without a positive, finite reference frequency, or "
                                       "with a non-positive turnaround ratio",
        "target_unknown": "the target is neither in the state table nor a body of the planetary ephemeris",
        "target_outside_coverage": "a spacecraft epoch of the count is outside its state table",
        "target_in_gap": "a spacecraft epoch of the count falls in a gap of the state table wider than max_gap_s",
        "count_crosses_gap": "the count's transmission (or turnaround) epochs span a gap of the state table wider "
                             "than max_gap_s",
        "light_time_not_converged": "the light-time iteration did not converge within max_iterations",
        "light_time_invalid": "geometrically impossible or non-finite light-time solution",
    }
    flag_columns = ("dop_status",)

    def validate(self, params, context):
        return ltm.validate(params, context)

    def model_identities(self, params, context):
        return ltm.model_identities(params, context)

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        n = table.num_rows
        eph = load_gridded_ephemeris()
        leap = load_leap_table()
        states = ltm.spacecraft_states(params, context)
        bodies = ltm.selected_bodies(params)
        grid = params["grid_step_s"]
        opts = ltm.solver_options(params)
        names = set(table.column_names)

        def equal(name, value):
            return ltm.text_equals(table, name, value)

        def number(name, default):
            if name not in names:
                return np.full(n, default)
            return np.asarray(pc.fill_null(pc.cast(table[name], pa.float64()), default).to_numpy(zero_copy_only=False),
                              dtype=float)

        kinds = {"one": equal("observable", "doppler_one_way"),
                 "two": equal("observable", "doppler_two_way") | equal("observable", "doppler_three_way")}
        is_dop = kinds["one"] | kinds["two"]
        count = number("count_s", np.nan)
        f_ref = number("reference_frequency_hz", np.nan)
        ratio = np.where(kinds["two"], number("turnaround_ratio", 1.0), 1.0)
        in_hz = equal("unit", "Hz")
        bad_count = is_dop & ~(np.isfinite(count) & (count > 0))
        bad_freq = is_dop & ~bad_count & ((in_hz & ~(np.isfinite(f_ref) & (f_ref > 0)))
                                          | ~(np.isfinite(ratio) & (ratio > 0)))
        work = is_dop & ~bad_count & ~bad_freq

        tt_mjd, tt_sod = table["tt_mjd"].to_numpy().astype(np.int64), table["tt_sod_s"].to_numpy()
        rx_itrs = np.column_stack([table[f"site_itrs_{a}_m"].to_numpy() for a in _XYZ]) if n else np.zeros((0, 3))
        tx_itrs = np.column_stack([table[f"tx_site_itrs_{a}_m"].to_numpy() for a in _XYZ]) if n else np.zeros((0, 3))

        out = {c.name: np.full(n, np.nan) for c in self.provides}
        out["dop_start_tdb_mjd"] = np.zeros(n, dtype=np.int64)
        out["dop_status"] = np.zeros(n, dtype=np.uint8)
        target_status = np.zeros(n, dtype=np.uint8)
        gap_crossed = np.zeros(n, dtype=bool)

        tcode, tnames = ltm.text_codes(table, "target")

        for kind, mask in kinds.items():
            for tc in np.unique(tcode[mask & work]):  # a loop over (kind, target) groups, not records
                idx = np.flatnonzero(mask & work & (tcode == tc))
                tgt = tnames[tc]

                sc_fn = ltm.spacecraft_state_fn(tgt, eph, params, states)

                rx_site, tx_site, c = rx_itrs[idx], tx_itrs[idx], count[idx]
                # both ends of the count at the receiver: TT from the station clock, then TDB at the station
                e_m, e_s, d3e = tdb_from_tt(tt_mjd[idx], tt_sod[idx], rx_site, leap, grid)
                s_tt_m, s_tt_s = add_seconds(tt_mjd[idx], tt_sod[idx], -c)
                s_m, s_s, d3s = tdb_from_tt(s_tt_m, s_tt_s, rx_site, leap, grid)
                # the stations remember their states at the ends of the count for the displacements over it
                rx_fn = ltm.StationStates(rx_site, eph, leap, grid)
                sc_disp = ltm.spacecraft_displacement_fn(tgt, eph, params, states)
                body_fn = lt.LinearisedBodyStates(eph)
                if kind == "two":
                    tx_fn = ltm.StationStates(tx_site, eph, leap, grid)
                    sol = dp.two_way_doppler(e_m, e_s, c, rx_fn, sc_fn, tx_fn, body_fn, GM_M3_PER_S2,
                                             t_start=(s_m, s_s), **opts,
                                             displacements=(rx_fn.displacement_m, sc_disp, tx_fn.displacement_m))
                    d1e = times_from_tdb(sol.end.t1_mjd, sol.end.t1_sod_s, tx_site, leap, grid)[4]
                    d1s = times_from_tdb(sol.start.t1_mjd, sol.start.t1_sod_s, tx_site, leap, grid)[4]
                    clock = ((d3e - d3s) - (d1e - d1s)) / c
                    downs = (sol.end.down, sol.start.down)
                    far = [(sol.end.down.t_tx_mjd, sol.end.down.t_tx_sod_s),
                           (sol.start.down.t_tx_mjd, sol.start.down.t_tx_sod_s)]
                    osc_total = np.zeros(idx.size)
                else:
                    sol = dp.one_way_doppler(e_m, e_s, c, rx_fn, sc_fn, body_fn, GM_M3_PER_S2,
                                             t_start=(s_m, s_s), **opts,
                                             displacements=(rx_fn.displacement_m, sc_disp))
                    clock = (d3e - d3s) / c
                    downs = (sol.end, sol.start)
                    far = [(sol.end.t_tx_mjd, sol.end.t_tx_sod_s), (sol.start.t_tx_mjd, sol.start.t_tx_sod_s)]
                    # the potential of every body but the transmitter's own (a target that is a body: a lander)
                    osc = dp.oscillator_terms(far[1], far[0], c, sc_fn, eph.posvel_m, GM_M3_PER_S2,
                                              tuple(b for b in dp.POTENTIAL_BODIES if b != tgt))
                    osc_total = np.zeros(idx.size)
                    for t in OSCILLATOR_TERMS:
                        out[f"dop_oscillator_{t}"][idx] = osc[t]
                        osc_total = osc_total + osc[t]
                y = sol.y + clock + osc_total
                rel = sol.relativistic_total + clock + osc_total
                for b in bodies:
                    out[f"dop_shapiro_{b}"][idx] = sol.relativistic[b]
                scale = np.where(in_hz[idx], f_ref[idx] * ratio[idx], 1.0)
                value = table["value"].to_numpy()[idx]
                out["dop_start_tdb_mjd"][idx] = s_m
                out["dop_start_tdb_sod_s"][idx] = s_s
                out["dop_geometric"][idx] = sol.geometric
                out["dop_station_clock"][idx] = clock
                out["dop_computed_y"][idx] = y
                out["dop_dy_dgamma"][idx] = sol.dgamma
                out["dop_computed_value"][idx] = y * scale
                out["dop_relativistic_value"][idx] = rel * scale
                out["dop_value_corrected"][idx] = value - rel * scale
                out["dop_residual"][idx] = value - y * scale
                out["dop_dcomputed_dgamma"][idx] = sol.dgamma * scale
                out["dop_status"][idx] = sol.status
                # why a record has no solution: the spacecraft ephemeris at the solved (or received) epochs
                st = np.zeros(idx.size, dtype=np.uint8)
                for (m, s_), leg in zip(far, downs):
                    m = np.where(np.isfinite(s_), m, leg.t_rx_mjd)
                    s_ = np.where(np.isfinite(s_), s_, leg.t_rx_sod_s)
                    here = target_posvel_bcrs_m(tgt, m, s_, eph, params["max_gap_s"], states)[2]
                    st = np.where(st != 0, st, here)
                target_status[idx] = st
                if states is not None and tgt in states:
                    (m1, s1), (m0, s0) = far
                    ok = np.isfinite(s0) & np.isfinite(s1)
                    cross = states.crosses_gap(tgt, m0, np.where(ok, s0, 0.0), m1, np.where(ok, s1, 0.0),
                                               params["max_gap_s"])
                    gap_crossed[idx] = ok & cross

        out["dop_start_tdb_mjd"] = pa.array(out["dop_start_tdb_mjd"], pa.int32(), mask=~work)
        out["dop_status"] = np.where(work, out["dop_status"], np.where(is_dop, ltm.INVALID, ltm.SOLVED)).astype(np.uint8)
        tq = ltm.target_quarantine(work, target_status, out["dop_status"])
        quarantine = {  # in this order: the first reason that applies is the record's
            "count_interval_invalid": bad_count,
            "reference_frequency_invalid": bad_freq,
            **{k: tq[k] for k in ("target_unknown", "target_outside_coverage", "target_in_gap")},
            "count_crosses_gap": work & gap_crossed,
            **{k: tq[k] for k in ("light_time_not_converged", "light_time_invalid")},
        }
        return StageResult(columns=out, touched=is_dop, quarantine=quarantine)
