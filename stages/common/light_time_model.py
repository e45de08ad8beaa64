"""The light-time model the ``light_time`` and ``doppler`` stages share: its parameters, their
validation, the model data it reads and their identities.

Both stages solve the same light-time equation (``stages.physics.light_time``), so they take the
same parameters with the same meaning; a Doppler record is two light-time solutions.
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Param, StageContext
from stages.physics import light_time as lt
from stages.physics.barycentric import StationState, station_state, times_from_tdb
from stages.physics.earth_orientation import eop_identity
from stages.physics.ephemeris import load_planetary_ephemeris
from stages.physics.file_cache import load_cached
from stages.physics.leap_seconds import load_leap_table
from stages.physics.spacecraft_ephemeris import (STATUS_IN_GAP, STATUS_OUTSIDE_COVERAGE, STATUS_UNKNOWN_TARGET,
                                                 StateTable, load_state_table, target_posvel_bcrs_m)

#: light-time solution status
SOLVED, NOT_CONVERGED, INVALID = lt.STATUS_OK, lt.STATUS_NOT_CONVERGED, lt.STATUS_INVALID

#: bodies whose relativistic light-time term may be selected
LIGHT_TIME_BODIES = ("sun", "moon", "jupiter", "saturn", "earth")


def light_time_params(grid_help: str) -> tuple[Param, ...]:
    """The parameters of a stage that solves light times (``grid_help`` says what its grid is for)."""
    return (
        Param("spacecraft_states", "str", "", "spacecraft state table (Parquet, relative to the config file); "
              "empty: targets must be bodies of the planetary ephemeris"),
        Param("gamma", "float", 1.0, "PPN parameter gamma (1 in general relativity)", minimum=0.0, maximum=2.0),
        Param("bodies", "str", "sun,jupiter,saturn,earth",
              "comma-separated bodies whose relativistic light-time term is included: " + ", ".join(LIGHT_TIME_BODIES)),
        Param("max_gap_s", "float", 43200.0, "widest gap between states the interpolation may bridge", unit="s",
              minimum=60.0, maximum=864000.0),
        Param("tolerance_s", "float", 1e-12, "convergence of each leg's iteration", unit="s", minimum=1e-13, maximum=1e-6),
        Param("max_iterations", "int", 10, "iterations per leg before a record is declared not converged",
              minimum=2, maximum=50),
        Param("grid_step_s", "float", 3600.0, grid_help, unit="s", minimum=60.0, maximum=3600.0),
    )


def selected_bodies(params: Mapping[str, Any]) -> tuple[str, ...]:
    return tuple(b.strip() for b in params["bodies"].split(",") if b.strip())


def solver_options(params: Mapping[str, Any]) -> dict[str, Any]:
    """Keyword arguments of the light-time solver: gamma, bodies (the Sun with its bending term), tolerance."""
    bodies = selected_bodies(params)
    return dict(gamma=params["gamma"], bodies=bodies, bending_bodies=tuple(b for b in bodies if b == "sun"),
                tol_s=params["tolerance_s"], max_iter=params["max_iterations"])


def spacecraft_states(params: Mapping[str, Any], context: StageContext) -> StateTable | None:
    return load_cached(load_state_table, context.path(params["spacecraft_states"])) if params["spacecraft_states"] else None


def validate(params: Mapping[str, Any], context: StageContext) -> dict[str, str]:
    problems = {}
    bad = [b for b in selected_bodies(params) if b not in LIGHT_TIME_BODIES]
    if bad:
        problems["bodies"] = f"found {bad[0]!r}, expected a comma-separated list from: {', '.join(LIGHT_TIME_BODIES)}"
    try:
        spacecraft_states(params, context)
    except (OSError, ValueError) as exc:
        problems["spacecraft_states"] = str(exc)
    return problems


def model_identities(params: Mapping[str, Any], context: StageContext) -> dict[str, Any]:
    ids = {"planetary ephemeris": load_planetary_ephemeris().identity,
           "earth orientation": eop_identity(context.span_mjd),
           "leap seconds": load_leap_table().identity}
    states = spacecraft_states(params, context)
    if states is not None:
        ids["spacecraft states"] = states.identity
    return ids


# ---------------------------------------------------------------------------
# columns of a batch, vectorised in Arrow (no Python string comparison per record)
# ---------------------------------------------------------------------------
def text_equals(table: pa.Table, name: str, value: str) -> np.ndarray:
    return np.asarray(pc.fill_null(pc.equal(table[name], value), False).to_numpy(zero_copy_only=False), dtype=bool)


def text_codes(table: pa.Table, name: str) -> tuple[np.ndarray, list[str]]:
    """Integer codes of a text column and the names they stand for (sorting strings would cost more than
    the physics): records sharing an end are grouped by these, a loop over groups, not records."""
    enc = pc.dictionary_encode(pc.fill_null(table[name], "")).combine_chunks()
    return np.asarray(enc.indices.to_numpy(zero_copy_only=False)), enc.dictionary.to_pylist()


# ---------------------------------------------------------------------------
# the ends of a link
# ---------------------------------------------------------------------------
def spacecraft_state_fn(name: str, eph, params: Mapping[str, Any], states: StateTable | None):
    """(mjd, sod) -> barycentric (pos, vel) of a state-table target or a body of the planetary ephemeris."""
    def state(mjd, sod):
        p, v, _ = target_posvel_bcrs_m(name, mjd, sod, eph, params["max_gap_s"], states)
        return p, v
    return state


def spacecraft_displacement_fn(name: str, eph, params: Mapping[str, Any], states: StateTable | None):
    """(mjd_a, sod_a, mjd_b, sod_b) -> p(b) - p(a), from the ephemerides' node-relative interpolation."""
    def disp(ma, sa, mb, sb):
        if states is not None and name in states:
            d, _ = states.displacement_centre_m(name, ma, sa, mb, sb, params["max_gap_s"])
            centre = states.centre(name)
            return d if centre == "ssb" else d + eph.displacement_m(centre, ma, sa, mb, sb)
        return eph.displacement_m(name, ma, sa, mb, sb)  # a body of the planetary ephemeris
    return disp


class StationStates:
    """A ground station's barycentric state at TDB epochs: the epochs' UTC, TT and UT1 at the station
    (``barycentric.times_from_tdb``), then ``barycentric.station_state``.  The last few epoch sets are
    remembered, so that a Doppler count's displacement reuses the station states the light-time
    solutions computed at the ends of the count instead of computing them again."""

    def __init__(self, site_itrs_m: np.ndarray, eph, leap, grid_step_s: float, keep: int = 4):
        self.site, self.eph, self.leap, self.grid = site_itrs_m, eph, leap, grid_step_s
        self.keep = keep
        self._memo: dict[tuple[bytes, bytes], StationState] = {}

    def state(self, mjd, sod) -> StationState:
        mjd, sod = np.asarray(mjd), np.asarray(sod, dtype=float)
        key = (mjd.astype(np.int64).tobytes(), sod.tobytes())
        st = self._memo.get(key)
        if st is None:
            utc_m, utc_s, tt_m, tt_s, _ = times_from_tdb(mjd, sod, self.site, self.leap, self.grid)
            st = station_state(self.site, utc_m, utc_s, tt_m, tt_s, mjd, sod, self.eph, self.grid)
            if len(self._memo) >= self.keep:
                self._memo.pop(next(iter(self._memo)))
            self._memo[key] = st
        return st

    def __call__(self, mjd, sod):
        st = self.state(mjd, sod)
        return st.bcrs.pos_m, st.bcrs.vel_m_per_s

    def displacement_m(self, ma, sa, mb, sb) -> np.ndarray:
        """x(b) - x(a): the Earth's displacement plus the change of the station's offset from it."""
        return self.eph.displacement_m("earth", ma, sa, mb, sb) + (self.state(mb, sb).offset_m - self.state(ma, sa).offset_m)


def target_quarantine(solved: np.ndarray, target_status: np.ndarray, solve_status: np.ndarray) -> dict[str, np.ndarray]:
    """The quarantine masks of a light-time stage: why a record has no solution, the spacecraft ephemeris
    first (its status at the solved or received epochs), the solver only where the ephemeris is not the cause."""
    return {
        "target_unknown": solved & (target_status == STATUS_UNKNOWN_TARGET),
        "target_outside_coverage": solved & (target_status == STATUS_OUTSIDE_COVERAGE),
        "target_in_gap": solved & (target_status == STATUS_IN_GAP),
        "light_time_not_converged": solved & (target_status == 0) & (solve_status == NOT_CONVERGED),
        "light_time_invalid": solved & (target_status == 0) & (solve_status == INVALID),
    }
