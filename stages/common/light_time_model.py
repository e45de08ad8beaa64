"""The light-time model the ``light_time`` and ``doppler`` stages share: its parameters, their
validation, the model data it reads and their identities.

Both stages solve the same light-time equation (``stages.physics.light_time``), so they take the
same parameters with the same meaning; a Doppler record is two light-time solutions.
"""
from __future__ import annotations

from typing import Any, Mapping

from stages.base import Param, StageContext
from stages.physics.earth_orientation import eop_identity
from stages.physics.ephemeris import load_planetary_ephemeris
from stages.physics.file_cache import load_cached
from stages.physics.leap_seconds import load_leap_table
from stages.physics.spacecraft_ephemeris import StateTable, load_state_table

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
