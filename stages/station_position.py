"""Stage ``station_position``: the receiving station in the GCRS and the BCRS at the time tag.

ITRS -> GCRS with the IAU 2006/2000A CIO-based model and the Earth
orientation of astropy-iers-data (``earth_rotation.itrs_to_gcrs``: ERA exact,
the precession-nutation matrix interpolated on a grid), then GCRS -> BCRS
with the Earth's barycentric state from DE421 and the c^-2 terms of IERS
TN36 ch. 11.  Runs after ``stations`` and ``time_scales`` (it needs the
topocentric TDB of the event).
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pyarrow as pa

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics.barycentric import station_state
from stages.physics.earth_orientation import EOP_BEYOND_TABLE, eop_identity
from stages.physics.ephemeris_grid import load_gridded_ephemeris
from stages.physics.ephemeris import load_planetary_ephemeris

_XYZ = ("x", "y", "z")


def _columns(frame: str, what: str) -> tuple[Column, ...]:
    pos = tuple(Column(f"site_{frame}_{a}_m", pa.float64(), "m", f"{what} {a.upper()} of the receiving station at the time tag")
                for a in _XYZ)
    vel = tuple(Column(f"site_{frame}_v{a}_m_per_s", pa.float64(), "m/s", f"{what} velocity {a.upper()} of the receiving station")
                for a in _XYZ)
    return pos + vel


class StationPosition(Stage):
    name = "station_position"
    version = 1
    summary = "receiving station in the GCRS (IAU 2006/2000A) and the BCRS (DE421, c^-2 terms) at the time tag"
    record_kinds = ("tracking",)
    requires = (
        *(Column(f"site_itrs_{a}_m", pa.float64(), "m", "ITRF position of the receiving station") for a in _XYZ),
        Column("utc_mjd", pa.int32(), "d", "UTC day"),
        Column("utc_sod_ps", pa.int64(), "ps", "UTC picoseconds of day"),
        Column("tt_mjd", pa.int32(), "d", "TT day"),
        Column("tt_sod_s", pa.float64(), "s", "TT seconds of day"),
        Column("tdb_mjd", pa.int32(), "d", "TDB day (topocentric)"),
        Column("tdb_sod_s", pa.float64(), "s", "TDB seconds of day (topocentric)"),
    )
    provides = (
        *_columns("gcrs", "GCRS (TT-compatible units)"),
        *_columns("bcrs", "BCRS (TDB-compatible units)"),
        Column("station_eop_status", pa.uint8(), "",
               "Earth orientation used for the station: 0 no station (link), 1 measured, 2 predicted, 3 beyond the table"),
    )
    params = (
        Param("grid_step_s", "float", 3600.0, "grid of the precession-nutation matrix (error < 0.5 mm proven up to 3600 s)",
              unit="s", minimum=60.0, maximum=3600.0),
        Param("cip_offsets", "bool", True, "add the observed celestial pole offsets dX, dY of the IERS table"),
    )
    references = (
        Reference("IERS Conventions (2010), IERS TN 36, ch. 5 (eq. 5.1, 5.10, 5.15), IAU 2006/2000A via ERFA",
                  "ITRS -> GCRS: precession-nutation, Earth rotation angle, polar motion"),
        Reference("IERS TN 36 ch. 11; IAU 2000 Resolution B1.3 (Soffel et al. 2003, AJ 126, 2687)",
                  "GCRS -> BCRS to O(c^-2): L_C, external potential and Lorentz terms"),
        Reference("Folkner, Williams & Boggs 2009, JPL IPN Progress Report 42-178 (DE421)", "Earth's barycentric state"),
        Reference("IERS finals2000A series via astropy-iers-data", "UT1-UTC, polar motion, dX, dY"),
    )
    flag_columns = ("station_eop_status",)
    quarantine_reasons = {
        "outside_ephemeris_span": "the event's TDB is outside the span of the planetary ephemeris",
        "eop_beyond_table": "Earth orientation beyond the table ([models] eop_beyond_table = 'quarantine')",
    }

    def model_identities(self, params, context):
        return {"planetary ephemeris": load_planetary_ephemeris().identity,
                "earth orientation": eop_identity(context.span_mjd)}

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        eph = load_gridded_ephemeris()  # DE421 on a 15-minute grid: < 0.2 mm from the series itself
        n = table.num_rows
        col = lambda name: table[name].to_numpy()  # noqa: E731
        x = np.column_stack([col(f"site_itrs_{a}_m") for a in _XYZ]) if n else np.zeros((0, 3))
        tdb_mjd, tdb_sod = col("tdb_mjd").astype(np.int64), col("tdb_sod_s")
        in_span = eph.in_span(tdb_mjd, tdb_sod)
        # records without a ground station (links between spacecraft) are left untouched
        ground = np.isfinite(x).all(axis=1)
        g = np.flatnonzero(ground)
        cols: dict[str, np.ndarray] = {f"site_{f}_{q}": np.full(n, np.nan) for f in ("gcrs", "bcrs")
                                       for q in [f"{a}_m" for a in _XYZ] + [f"v{a}_m_per_s" for a in _XYZ]}
        cols["station_eop_status"] = np.zeros(n, dtype=np.uint8)
        if g.size:
            # keep every record computable: out-of-span ones are evaluated at a safe epoch and quarantined
            safe_mjd = np.where(in_span, tdb_mjd, 51544)[g]
            st = station_state(x[g], col("utc_mjd").astype(np.int64)[g], col("utc_sod_ps")[g] / 1e12,
                               col("tt_mjd").astype(np.int64)[g], col("tt_sod_s")[g], safe_mjd, tdb_sod[g], eph,
                               grid_step_s=params["grid_step_s"], apply_cip_offsets=params["cip_offsets"])
            for frame, pos, vel in (("gcrs", st.gcrs.pos_m, st.gcrs.vel_m_per_s),
                                    ("bcrs", st.bcrs.pos_m, st.bcrs.vel_m_per_s)):
                for k, a in enumerate(_XYZ):
                    cols[f"site_{frame}_{a}_m"][g] = pos[:, k]
                    cols[f"site_{frame}_v{a}_m_per_s"][g] = vel[:, k]
            cols["station_eop_status"][g] = np.asarray(st.gcrs.eop_status, dtype=np.uint8)
        quarantine = {"outside_ephemeris_span": ground & ~in_span}
        if context.models.get("eop_beyond_table") == "quarantine":
            quarantine["eop_beyond_table"] = cols["station_eop_status"] == EOP_BEYOND_TABLE
        return StageResult(columns=cols, touched=ground, quarantine=quarantine)
