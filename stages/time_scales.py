"""Stage ``time_scales``: UTC time tags to TAI, TT, TDB, TCG and TCB.

The physics lives in ``stages.physics.time_scales`` (pure functions, each
citing its equation); this module only maps columns to it.

* TAI and TT are exact (integer picoseconds) before they are stored as
  float64 seconds of day (resolution about 15 ps at the end of a day).
* TDB - TT is the Fairhead & Bretagnon (1990) series as in IAU SOFA/ERFA
  ``dtdb``, evaluated on a grid aligned to multiples of ``grid_step_s`` and
  interpolated (agreement with per-instant ERFA better than 0.1 ns, proven
  in tests/test_time_scales_physics.py).  It is geocentric unless the record
  carries a station position in ITRS (``site_itrs_*_m``, added by a station
  stage); then the topocentric terms use that position and UT1 from the
  Earth-orientation table, and ``eop_status`` tells whether UT1 was measured,
  predicted or beyond the table.
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pyarrow as pa

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics import time_scales as ts
from stages.physics.earth_orientation import EOP_BEYOND_TABLE, EOP_NOT_USED, eop_identity, ut1_minus_utc_s
from stages.physics.leap_seconds import load_leap_table, tai_minus_utc_s

SITE_COLUMNS = (
    Column("site_itrs_x_m", pa.float64(), "m", "ITRS X of the station that time-tagged the record"),
    Column("site_itrs_y_m", pa.float64(), "m", "ITRS Y of the station that time-tagged the record"),
    Column("site_itrs_z_m", pa.float64(), "m", "ITRS Z of the station that time-tagged the record"),
)

TDB_SITE_GEOCENTRE = 0
TDB_SITE_STATION = 1


def _pair(scale: str, what: str) -> tuple[Column, Column]:
    return (
        Column(f"{scale}_mjd", pa.int32(), "d", f"{what}: day, Modified Julian Date in {scale.upper()}"),
        Column(f"{scale}_sod_s", pa.float64(), "s", f"{what}: seconds of that {scale.upper()} day"),
    )


class TimeScales(Stage):
    name = "time_scales"
    version = 1
    summary = "UTC time tags to TAI, TT, TDB, TCG and TCB (TDB topocentric when a station position is present)"
    requires = (
        Column("utc_mjd", pa.int32(), "d", "UTC day of the time tag (from ingest)"),
        Column("utc_sod_ps", pa.int64(), "ps", "UTC picoseconds of day of the time tag (from ingest)"),
    )
    optional = SITE_COLUMNS
    provides = (
        Column("tai_minus_utc_s", pa.int16(), "s", "TAI - UTC on the UTC day of the tag (IERS Bulletin C)"),
        *_pair("tai", "time tag in TAI"),
        *_pair("tt", "time tag in TT"),
        *_pair("tdb", "time tag in TDB"),
        *_pair("tcg", "time tag in TCG"),
        *_pair("tcb", "time tag in TCB"),
        Column("tdb_minus_tt_s", pa.float64(), "s",
               "TDB - TT applied (geocentric unless tdb_site = 1: see column tdb_site)"),
        Column("tcg_minus_tt_s", pa.float64(), "s", "TCG - TT applied (IAU 2000 Res. B1.9)"),
        Column("tcb_minus_tdb_s", pa.float64(), "s", "TCB - TDB applied (IAU 2006 Res. B3)"),
        Column("tdb_site", pa.uint8(), "", "0: TDB - TT geocentric (no station position); 1: topocentric at the station"),
        Column("eop_status", pa.uint8(), "",
               "UT1 used for the topocentric TDB term: 0 not used, 1 measured, 2 predicted, 3 beyond the table"),
    )
    params = (
        Param("grid_step_s", "float", 3600.0,
              "spacing of the grid on which the TDB - TT series is evaluated and interpolated "
              "(error < 0.1 ns proven up to 3600 s)", unit="s", minimum=60.0, maximum=3600.0),
        Param("tdb_site", "str", "auto",
              "where TDB - TT is evaluated: 'auto' = at the station when its position is present, else geocentre",
              choices=("auto", "geocentre")),
    )
    references = (
        Reference("IAU 1991 Resolution A4; IERS Conventions (2010), IERS TN 36, Table 1.1 and ch. 10",
                  "TT = TAI + 32.184 s; L_G, L_B, TDB0, T0"),
        Reference("IERS Bulletin C (leap seconds), via the astropy-iers-data Leap_Second.dat", "TAI - UTC"),
        Reference("IAU 2000 Resolution B1.9; IERS TN 36 eq. 10.1", "TCG - TT = L_G/(1-L_G) (JD_TT - T0) 86400 s"),
        Reference("IAU 2006 Resolution B3", "TDB = TCB - L_B (JD_TCB - T0) 86400 s + TDB0"),
        Reference("Fairhead & Bretagnon 1990, A&A 229, 240; Moyer 1981, Cel. Mech. 23, 33; as IAU SOFA/ERFA dtdb",
                  "TDB - TT series and topocentric terms"),
    )
    flag_columns = ("tdb_site", "eop_status")
    quarantine_reasons = {
        "eop_beyond_table": "topocentric TDB needs UT1 beyond the Earth-orientation table "
                            "([models] eop_beyond_table = 'quarantine')",
    }

    @staticmethod
    def _topocentric_possible(params: Mapping[str, Any], context: StageContext) -> bool:
        return params["tdb_site"] == "auto" and all(c.name in context.columns for c in SITE_COLUMNS)

    def model_identities(self, params, context):
        ids = {"leap seconds": load_leap_table().identity}
        if self._topocentric_possible(params, context):
            ids["earth orientation"] = eop_identity(context.span_mjd)
        return ids

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        leap = load_leap_table()
        utc_mjd = table["utc_mjd"].to_numpy().astype(np.int64)
        utc_sod_ps = table["utc_sod_ps"].to_numpy()
        n = len(utc_mjd)

        tai_mjd, tai_sod_ps = ts.utc_to_tai(utc_mjd, utc_sod_ps, leap)
        tt_mjd, tt_sod_ps = ts.tai_to_tt(tai_mjd, tai_sod_ps)
        tt_sod_s = ts.ps_to_s(tt_sod_ps)

        site = np.zeros(n, dtype=np.uint8)
        eop = np.full(n, EOP_NOT_USED, dtype=np.uint8)
        ut1 = elong = u_km = v_km = None
        names = set(table.column_names)
        if params["tdb_site"] == "auto" and all(c.name in names for c in SITE_COLUMNS):
            xyz = [table[c.name].to_numpy(zero_copy_only=False).astype(float) for c in SITE_COLUMNS]
            has = np.isfinite(xyz[0]) & np.isfinite(xyz[1]) & np.isfinite(xyz[2])
            if has.any():
                x, y, z = (np.where(has, a, 0.0) for a in xyz)
                elong, u_km, v_km = ts.itrs_to_dtdb_site(x, y, z)
                utc_sod_s = ts.ps_to_s(utc_sod_ps)
                dut, status = ut1_minus_utc_s(utc_mjd, utc_sod_s)
                ut1 = (utc_sod_s + dut) / 86400.0
                site[has] = TDB_SITE_STATION
                eop[has] = status[has]
        dtdb = ts.tdb_minus_tt_s(tt_mjd, tt_sod_s, ut1, elong, u_km, v_km, grid_step_s=params["grid_step_s"])
        tdb_mjd, tdb_sod_s = ts.add_seconds(tt_mjd, tt_sod_s, dtdb)
        dtcg = ts.tcg_minus_tt_s(tt_mjd, tt_sod_s)
        tcg_mjd, tcg_sod_s = ts.add_seconds(tt_mjd, tt_sod_s, dtcg)
        dtcb = ts.tcb_minus_tdb_s(tdb_mjd, tdb_sod_s)
        tcb_mjd, tcb_sod_s = ts.add_seconds(tdb_mjd, tdb_sod_s, dtcb)

        quarantine = {}
        if context.models.get("eop_beyond_table") == "quarantine":
            quarantine["eop_beyond_table"] = eop == EOP_BEYOND_TABLE
        return StageResult(
            columns={
                "tai_minus_utc_s": tai_minus_utc_s(leap, utc_mjd).astype(np.int16),
                "tai_mjd": tai_mjd.astype(np.int32), "tai_sod_s": ts.ps_to_s(tai_sod_ps),
                "tt_mjd": tt_mjd.astype(np.int32), "tt_sod_s": tt_sod_s,
                "tdb_mjd": tdb_mjd.astype(np.int32), "tdb_sod_s": tdb_sod_s,
                "tcg_mjd": tcg_mjd.astype(np.int32), "tcg_sod_s": tcg_sod_s,
                "tcb_mjd": tcb_mjd.astype(np.int32), "tcb_sod_s": tcb_sod_s,
                "tdb_minus_tt_s": dtdb, "tcg_minus_tt_s": dtcg, "tcb_minus_tdb_s": dtcb,
                "tdb_site": site, "eop_status": eop,
            },
            quarantine=quarantine,
        )
