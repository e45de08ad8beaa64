"""Stage ``relativistic_acceleration``: the post-Newtonian accelerations of an Earth satellite at each
tracking record's epoch, term by term, as audit columns.

For records whose ``target`` is an Earth satellite -- a target of the spacecraft state table whose
centre is ``earth``, or a body of the orbit catalogue orbiting the Earth -- the three terms of IERS
Conventions (2010) (IERS TN 36) eq. 10.12 at the satellite's geocentric (GCRS) state at the
record's TDB epoch (:func:`stages.physics.precession.acceleration_terms_m_per_s2`):

    Schwarzschild  GM/(c^2 r^3) {[2 (beta + gamma) GM/r - gamma v^2] r + 2 (1 + gamma) (r . v) v}
    Lense-Thirring (1 + gamma) GM/(c^2 r^3) [(3/r^2)(r x v)(r . J) + (v x J)]      (J per unit mass)
    de Sitter      (1 + 2 gamma) [V x (-GM_S R/(c^2 R^3))] x v

with R, V the Earth's heliocentric state from DE421 (Folkner, Williams & Boggs 2009).  Nothing is
corrected: an analyst sees each term's size per record (for a satellite at 12 000 km about 3e-9,
3e-11 and 3e-11 m/s^2).  Records of other targets pass untouched (status 1); an Earth satellite
whose state is not available at the epoch (outside its state table, in a gap wider than
``max_gap_s``) or lies at or below the Earth's surface keeps its record with NaN columns and
status 2 or 3 -- the audit does not remove records other stages may use.
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics import constants as K
from stages.physics import precession as pr
from stages.physics import time_scales as tsp
from stages.physics.file_cache import load_cached
from stages.physics.orbit_catalogue import OrbitCatalogueError, elements_state, load_orbit_catalogue
from stages.physics.orbit_integration import earth_heliocentric_state_m
from stages.physics.spacecraft_ephemeris import load_state_table

TERMS = ("schwarzschild", "lense_thirring", "de_sitter")
_XYZ = ("x", "y", "z")
STATUS_OK, STATUS_NOT_EARTH_SATELLITE, STATUS_NO_STATE, STATUS_BELOW_SURFACE = 0, 1, 2, 3


def _f64(name, text):
    return Column(name, pa.float64(), "m/s^2", text)


class RelativisticAcceleration(Stage):
    name = "relativistic_acceleration"
    version = 1
    summary = "Schwarzschild, Lense-Thirring and de Sitter accelerations of Earth satellites (IERS TN36 eq. 10.12), per record"
    record_kinds = ("tracking",)
    requires = (
        Column("target", pa.string(), "", "spacecraft or body"),
        Column("tdb_mjd", pa.int32(), "d", "epoch, TDB day (time_scales)"),
        Column("tdb_sod_s", pa.float64(), "s", "epoch, TDB seconds of day (time_scales)"),
    )
    provides = (
        *(_f64(f"relacc_{t}_{a}_m_per_s2", f"{t.replace('_', '-')} acceleration (TN36 eq. 10.12), GCRS {a.upper()}")
          for t in TERMS for a in _XYZ),
        *(_f64(f"relacc_{t}_m_per_s2", f"magnitude of the {t.replace('_', '-')} acceleration") for t in TERMS),
        _f64("relacc_total_m_per_s2", "magnitude of the sum of the three terms"),
        Column("relacc_status", pa.uint8(), "", "0 computed, 1 not an Earth satellite (untouched), 2 no state at the "
                                                "epoch (outside the state table or in a gap), 3 at or below the Earth's surface"),
    )
    params = (
        Param("spacecraft_states", "str", "", "state table (relative to the config file): targets with centre earth are used"),
        Param("orbits", "str", "", "orbit catalogue (relative to the config file): bodies orbiting the Earth are used"),
        Param("gamma", "float", 1.0, "PPN gamma", minimum=0.0, maximum=2.0),
        Param("beta", "float", 1.0, "PPN beta", minimum=0.0, maximum=2.0),
        Param("de_sitter", "bool", True, "include the de Sitter term (the Earth's heliocentric state from DE421)"),
        Param("max_gap_s", "float", 3600.0, "widest gap between tabulated states the interpolation may bridge",
              unit="s", minimum=1.0, maximum=86400.0),
    )
    references = (
        Reference("IERS Conventions (2010), IERS TN 36, eq. 10.12 and Table 1.1", "relativistic accelerations of an Earth satellite; GM, a_E"),
        Reference("Folkner, Williams & Boggs 2009, IPN PR 42-178 (DE421)", "the Earth's heliocentric state"),
    )
    flag_columns = ("relacc_status",)
    quarantine_reasons = {}

    def validate(self, params, context):
        problems = {}
        if not params["spacecraft_states"] and not params["orbits"]:
            problems["spacecraft_states"] = "found neither spacecraft_states nor orbits, expected at least one of them"
        if params["spacecraft_states"]:
            try:
                load_state_table(context.path(params["spacecraft_states"]))
            except ValueError as exc:
                problems["spacecraft_states"] = str(exc)
        if params["orbits"]:
            try:
                cat = load_orbit_catalogue(context.path(params["orbits"]))
                for j in np.flatnonzero(cat.states_file != ""):   # loop over catalogue entries
                    load_state_table(cat.states_file[j])
            except (OrbitCatalogueError, ValueError) as exc:
                problems["orbits"] = str(exc)
        return problems

    def model_identities(self, params, context):
        ids = {}
        if params["spacecraft_states"]:
            ids["spacecraft states"] = load_state_table(context.path(params["spacecraft_states"])).identity
        if params["orbits"]:
            cat = load_orbit_catalogue(context.path(params["orbits"]))
            ids["orbit catalogue"] = cat.identity
            for j in np.flatnonzero(cat.states_file != ""):
                ids[f"states {cat.codes[j]}"] = load_state_table(cat.states_file[j]).identity
        if params["de_sitter"]:
            from stages.physics.ephemeris import load_planetary_ephemeris

            ids["planetary ephemeris"] = load_planetary_ephemeris().identity
        return ids

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        n = table.num_rows
        target = table["target"].combine_chunks() if isinstance(table["target"], pa.ChunkedArray) else table["target"]
        if pa.types.is_dictionary(target.type):
            target = target.dictionary_decode()
        tdb_m = table["tdb_mjd"].to_numpy().astype(np.int64)
        tdb_s = table["tdb_sod_s"].to_numpy(zero_copy_only=False).astype(float)
        pos = np.full((n, 3), np.nan)
        vel = np.full((n, 3), np.nan)
        status = np.full(n, STATUS_NOT_EARTH_SATELLITE, dtype=np.uint8)
        states = load_cached(load_state_table, context.path(params["spacecraft_states"])) if params["spacecraft_states"] else None
        cat = load_cached(load_orbit_catalogue, context.path(params["orbits"])) if params["orbits"] else None
        names = pc.unique(target).drop_null().to_pylist()
        for name in names:  # a loop over targets, not records
            rows = np.flatnonzero(np.asarray(pc.fill_null(pc.equal(target, name), False).to_numpy(zero_copy_only=False), dtype=bool))
            if states is not None and name in states and states.centre(name) == "earth":
                p, v, st = states.posvel_centre_m(name, tdb_m[rows], tdb_s[rows], params["max_gap_s"])
                status[rows] = np.where(st == 0, STATUS_OK, STATUS_NO_STATE)
            elif cat is not None and name in set(cat.codes) and cat.central[int(cat.index([name])[0])].is_earth:
                j = int(cat.index([name])[0])
                if cat.states_file[j]:
                    tab = load_cached(load_state_table, cat.states_file[j])
                    p, v, st = tab.posvel_centre_m(cat.states_target[j], tdb_m[rows], tdb_s[rows], params["max_gap_s"])
                    status[rows] = np.where(st == 0, STATUS_OK, STATUS_NO_STATE)
                else:
                    # elements run in TT: TT = TDB - (TDB - TT), the series evaluated at the TDB instant (< 1e-13 s)
                    tt_m, tt_s = tsp.add_seconds(tdb_m[rows], tdb_s[rows], -tsp.tdb_minus_tt_s(tdb_m[rows], tdb_s[rows]))
                    p, v = elements_state(cat, j, cat.seconds_since_start(j, tt_m, tt_s))
                    status[rows] = np.where(np.all(np.isfinite(p), axis=1), STATUS_OK, STATUS_NO_STATE)
            else:
                continue
            pos[rows], vel[rows] = p, v
        ok = status == STATUS_OK
        r = np.sqrt(np.einsum("ij,ij->i", np.where(ok[:, None], pos, 0.0), np.where(ok[:, None], pos, 0.0)))
        below = ok & (r <= K.EARTH_EQUATORIAL_RADIUS_M)
        status[below] = STATUS_BELOW_SURFACE
        ok &= ~below
        out = {c.name: np.full(n, np.nan) for c in self.provides}
        if ok.any():
            big_r = big_v = None
            if params["de_sitter"]:
                big_r, big_v = earth_heliocentric_state_m(tdb_m[ok], tdb_s[ok])
                lost = ~np.all(np.isfinite(big_r), axis=1)
                if lost.any():  # outside DE421: no de Sitter term for these (reported as NaN)
                    big_r[lost], big_v[lost] = [1.5e11, 0.0, 0.0], [0.0, 3e4, 0.0]
            acc = pr.acceleration_terms_m_per_s2(pos[ok], vel[ok], K.GM_EARTH_TT_M3_PER_S2, None, big_r, big_v,
                                                 gamma=params["gamma"], beta=params["beta"])
            if params["de_sitter"] and lost.any():
                acc["de_sitter"][lost] = np.nan
                acc["total"][lost] = np.nan
            elif not params["de_sitter"]:
                acc["de_sitter"][:] = np.nan
                acc["total"] = acc["schwarzschild"] + acc["lense_thirring"]
            for t in TERMS:
                for k, a in enumerate(_XYZ):
                    out[f"relacc_{t}_{a}_m_per_s2"][ok] = acc[t][:, k]
                out[f"relacc_{t}_m_per_s2"][ok] = np.linalg.norm(acc[t], axis=1)
            out["relacc_total_m_per_s2"][ok] = np.linalg.norm(acc["total"], axis=1)
        out["relacc_status"] = status
        return StageResult(columns=out, touched=status != STATUS_NOT_EARTH_SATELLITE)
