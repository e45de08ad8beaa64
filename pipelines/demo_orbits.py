"""Invented demo scenarios of the precession stages (``[demo] scenario = "gyroscope"`` and
``"laser_ranging"``): deterministic raw records with a few bad ones.

Everything here is made up: the gyroscope satellite "KESTREL-G" (a 642 km circular polar orbit, its
gyroscope spun up along a guide direction in the orbit plane), the laser-ranging satellite
"PLOVER-L" (a = 12 270 km, e = 0.0045), the sub-orbital "DIPPER-X" whose orbit dips below the
surface, and the stations of ``sample_configs/stations.toml``.  Their orbits are in
``sample_configs/orbits.toml`` (tests check the numbers below match it) and PLOVER-L's state table
is bundled as ``sample_configs/plover-states.parquet`` (tests check it matches
:func:`plover_states`).  The observed values are what the stages predict plus white noise: they
are for showing the pipeline, never for checking physics.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pyarrow as pa

START_MJD = 60735                  # 2025-03-01, the integration start (00:00 TT) of both satellites
GYRO = "KESTREL-G"
LASER = "PLOVER-L"
GYRO_ELEMENTS = dict(a_m=6_378_136.6 + 642_000.0, e=0.0, i_deg=90.0, raan_deg=40.0, argp_deg=0.0, m0_deg=0.0)
GYRO_GUIDE_RA_DEG, GYRO_GUIDE_DEC_DEG = 40.0, 20.0       # in the orbit plane (the node is at 40 deg)
LASER_ELEMENTS = dict(a_m=12_270_000.0, e=0.0045, i_deg=110.0, raan_deg=30.0, argp_deg=60.0, m0_deg=0.0)
STATE_STEP_S = 180.0
STATE_FIRST_S, STATE_LAST_S = -43_200.0, 3 * 86400.0 + 43_200.0   # TT seconds from the start
GYRO_NOISE_MAS = 1.0
ANGLE_NOISE_MAS = 0.5
RANGE_NOISE_S = 3e-11              # 30 ps of two-way light time: about 5 mm of range
STATIONS = ("CFL", "SFA", "KRD")


def _iso(mjd, sod_s) -> np.ndarray:
    t = (np.datetime64("1858-11-17", "ns") + np.asarray(mjd).astype("timedelta64[D]").astype("timedelta64[ns]")
         + np.round(np.asarray(sod_s) * 1e9).astype(np.int64).astype("timedelta64[ns]"))
    return np.char.add(np.datetime_as_string(t, unit="ns"), "Z").astype(object)


def _ids(prefix: str, n: int) -> np.ndarray:
    return np.char.add(prefix, np.char.zfill(np.arange(n).astype(str), 6)).astype(object)


def _utc_cols(mjd, sod_s):
    return {"utc_mjd": pa.array(np.asarray(mjd), pa.int32()),
            "utc_sod_ps": pa.array(np.round(np.asarray(sod_s) * 1e6).astype(np.int64) * 10**6, pa.int64())}


def _laser_state(t_tt_s):
    """PLOVER-L's geocentric state at TT seconds from the start: Kepler motion with the secular J2
    drift of node and perigee, as the orbit catalogue's element model (IERS TN36 GM, a_E, J2)."""
    from stages.physics import constants as K
    from stages.physics.clock_rates import kepler_state
    from stages.physics.orbit_catalogue import j2_secular_rates_rad_per_s

    el = LASER_ELEMENTS
    a, e, inc = el["a_m"], el["e"], np.radians(el["i_deg"])
    d_raan, d_argp = j2_secular_rates_rad_per_s(a, e, inc, K.GM_EARTH_TT_M3_PER_S2, K.EARTH_EQUATORIAL_RADIUS_M, K.EARTH_J2)
    t = np.asarray(t_tt_s, dtype=float)
    pos, vel, _ = kepler_state(a, e, inc, np.radians(el["raan_deg"]) + d_raan * t, np.radians(el["argp_deg"]) + d_argp * t,
                               np.radians(el["m0_deg"]), 0.0, t)
    return pos, vel


def plover_states() -> pa.Table:
    """PLOVER-L's state table (centre earth), every 180 s from 12 h before the start to 3.5 days after,
    labelled in TDB (the TT instants plus the geocentric TDB - TT series)."""
    from stages.physics import time_scales as tsp

    t = np.arange(STATE_FIRST_S, STATE_LAST_S + 1.0, STATE_STEP_S)
    pos, vel = _laser_state(t)
    tt_m, tt_s = tsp.add_seconds(np.full(t.size, START_MJD), np.zeros(t.size), t)
    tdb_m, tdb_s = tsp.add_seconds(tt_m, tt_s, tsp.tdb_minus_tt_s(tt_m, tt_s))
    return pa.table({
        "target": pa.array([LASER] * t.size, pa.string()),
        "tdb_mjd": pa.array(tdb_m, pa.int32()), "tdb_sod_s": pa.array(tdb_s),
        "x_m": pos[:, 0], "y_m": pos[:, 1], "z_m": pos[:, 2],
        "vx_m_per_s": vel[:, 0], "vy_m_per_s": vel[:, 1], "vz_m_per_s": vel[:, 2],
        "centre": pa.array(["earth"] * t.size, pa.string()),
    })


def _stage(cfg, name):
    spec = next((sp for sp in cfg.stages if sp.name == name), None)
    if spec is None:
        raise ValueError(f"the {name!r} demo scenario needs a {name} stage in the config")
    return spec


# ---------------------------------------------------------------------------- gyroscope scenario
def gyroscope_records(cfg, rng) -> pa.Table:
    """KESTREL-G spin-axis records every 30 min over 30 days (a tenth of them as RA/Dec), PLOVER-L node and
    perigee angles once a day, observed = the precession stage's prediction + white noise; a few bad rows."""
    from stages.base import StageContext
    from stages.physics.orbit_integration import rotate
    from stages.precession import Precession

    spec = _stage(cfg, "precession")
    ctx = StageContext("orientation", dict(cfg.models), base_dir=str(Path(cfg.path).resolve().parent))
    # spin records: UTC every 30 min from 00:15 on the first day
    k = np.arange(30 * 48)
    spin_m = START_MJD + (k // 48)
    spin_s = (k % 48) * 1800.0 + 900.0
    # node and perigee records: daily at 12:00 UTC
    d = np.arange(30)
    ang_m = np.concatenate([START_MJD + d, START_MJD + d])
    ang_s = np.full(ang_m.size, 43_200.0)
    ang_obs = np.array(["node_angle"] * d.size + ["perigee_angle"] * d.size, dtype=object)
    ns, na = k.size, ang_m.size
    body = np.array([GYRO] * ns + [LASER] * na, dtype=object)
    obs = np.concatenate([np.array(["spin_axis"] * ns, dtype=object), ang_obs])
    mjd = np.concatenate([spin_m, ang_m])
    sod = np.concatenate([spin_s, ang_s])
    ra0, dec0 = np.radians(GYRO_GUIDE_RA_DEG), np.radians(GYRO_GUIDE_DEC_DEG)
    s0 = np.array([np.cos(dec0) * np.cos(ra0), np.cos(dec0) * np.sin(ra0), np.sin(dec0)])
    n = mjd.size
    sim = pa.table({"body": pa.array(body, pa.string()), "observable": pa.array(obs, pa.string()), **_utc_cols(mjd, sod),
                    "dir_x": np.full(n, s0[0]), "dir_y": np.full(n, s0[1]), "dir_z": np.full(n, s0[2]),
                    "value": np.zeros(n)})
    cols = Precession().apply(sim, spec.params, ctx).columns
    pred = np.stack([np.asarray(cols[f"prec_predicted_{a}"]) for a in "xyz"], axis=1)
    noise = rng.normal(0.0, GYRO_NOISE_MAS / 3.6e6 * np.pi / 180.0, (n, 3))
    observed = rotate(np.where(np.isfinite(pred), pred, s0), noise)
    spin = obs == "spin_axis"
    # the laser satellite's angles: the elements with their secular J2 drift, plus relativity, plus noise
    from stages.physics import constants as K
    from stages.physics.orbit_catalogue import j2_secular_rates_rad_per_s

    el = LASER_ELEMENTS
    d_raan, d_argp = j2_secular_rates_rad_per_s(el["a_m"], el["e"], np.radians(el["i_deg"]), K.GM_EARTH_TT_M3_PER_S2,
                                                K.EARTH_EQUATORIAL_RADIUS_M, K.EARTH_J2)
    dt = np.asarray(cols["prec_dt_s"])
    newtonian = np.where(obs == "node_angle", el["raan_deg"] + np.degrees(d_raan * dt), el["argp_deg"] + np.degrees(d_argp * dt))
    rel_deg = np.asarray(cols["prec_relativistic_angle_mas"]) / 3.6e6
    value = np.where(spin, np.nan, newtonian + rel_deg + rng.normal(0.0, ANGLE_NOISE_MAS / 3.6e6, n))
    radec = spin & (np.arange(n) % 10 == 5)
    dir_x, dir_y, dir_z = [np.where(spin & ~radec, observed[:, i], np.nan) for i in range(3)]
    ra = np.where(radec, np.degrees(np.arctan2(observed[:, 1], observed[:, 0])) % 360.0, np.nan)
    dec = np.where(radec, np.degrees(np.arcsin(np.clip(observed[:, 2], -1, 1))), np.nan)
    sigma = np.where(spin, GYRO_NOISE_MAS / 3.6e6, ANGLE_NOISE_MAS / 3.6e6)
    ids = _ids("ORI-", n)
    iso = _iso(mjd, sod)
    # --- a few bad records, deterministic -----------------------------------------
    for comp in (dir_x, dir_y, dir_z):
        comp[3] *= 1.0 + 1e-8                                                # slightly off: renormalised, flag 1
        comp[7] *= 1.01                                                      # direction_not_unit (precession)
    dir_z[11] = np.nan                                                       # direction_missing (ingest: null)
    ra[15], dec[15], dir_x[15], dir_y[15], dir_z[15] = 10.0, 95.0, np.nan, np.nan, np.nan  # direction_invalid (ingest)
    body[19] = "KESTREL-Q"                                                   # body_unknown (precession)
    body[23] = ""                                                            # body_missing (ingest)
    iso[27] = "2025-02-28T12:00:00Z"                                         # outside_orbit_coverage: before the start
    body[31] = "DIPPER-X"                                                    # orbit_crosses_surface (precession)
    body[35] = LASER                                                         # spin_reference_missing (precession)
    obs[39] = "spin_rate"                                                    # observable_unknown (ingest)
    value[ns + 2] = np.nan                                                   # value_not_finite (ingest)
    ids[43] = ids[42]                                                        # record_id_duplicate (ingest)

    def col(x):
        return pa.array(x, pa.float64(), mask=~np.isfinite(x))               # NaN written as null
    return pa.table({
        "record_id": pa.array(ids, pa.string()), "body": pa.array(body, pa.string()),
        "time_tag": pa.array(iso, pa.string()), "observable": pa.array(obs, pa.string()),
        "dir_x": col(dir_x), "dir_y": col(dir_y), "dir_z": col(dir_z), "ra_deg": col(ra), "dec_deg": col(dec),
        "value": col(value), "uncertainty": pa.array(sigma),
    })


# ---------------------------------------------------------------------------- laser-ranging scenario
def laser_ranging_records(cfg, rng) -> pa.Table:
    """Two-way range records of PLOVER-L from the invented stations every 2 minutes while it is more than
    20 deg above the horizon, over two days; observed = the light_time stage's computed value + 30 ps of
    white noise.  A few bad rows."""
    from stages.base import StageContext
    from stages.light_time import LightTime
    from stages.physics.earth_rotation import itrs_to_gcrs
    from stages.station_position import StationPosition
    from stages.stations import Stations
    from stages.time_scales import TimeScales

    light = _stage(cfg, "light_time")
    catalogue = _stage(cfg, "stations").params["catalogue"]
    ctx = StageContext("tracking", dict(cfg.models), base_dir=str(Path(cfg.path).resolve().parent))
    step = np.arange(0.0, 2 * 86400.0, 120.0) + 60.0
    m = np.tile(START_MJD + (step // 86400).astype(np.int64), len(STATIONS))
    s = np.tile(step % 86400.0, len(STATIONS))
    station = np.repeat(np.array(STATIONS, dtype=object), step.size)
    cand = pa.table({"station": pa.array(station, pa.string()),
                     "observable": pa.array(np.full(m.size, "range_two_way", dtype=object), pa.string()),
                     "utc_mjd": pa.array(m, pa.int32())})
    sites = Stations().apply(cand, {"catalogue": catalogue}, ctx).columns
    x = np.column_stack([np.asarray(sites[f"site_itrs_{a}_m"]) for a in "xyz"])
    up = itrs_to_gcrs(x, m, s, m, s + 69.184).pos_m       # TT ~ UTC + 69.184 s: enough for an elevation
    sat, _ = _laser_state((m - START_MJD) * 86400.0 + s + 69.184)
    rel = sat - up
    sin_el = np.einsum("ij,ij->i", rel / np.linalg.norm(rel, axis=1)[:, None], up / np.linalg.norm(up, axis=1)[:, None])
    keep = sin_el > np.sin(np.radians(20.0))
    m, s, station = m[keep], s[keep], station[keep]
    order = np.lexsort((s, m))
    m, s, station = m[order], s[order], station[order]
    k = m.size
    table = pa.table({"station": pa.array(station, pa.string()), "target": pa.array(np.full(k, LASER, dtype=object), pa.string()),
                      "observable": pa.array(np.full(k, "range_two_way", dtype=object), pa.string()),
                      "value": pa.array(np.zeros(k)), "unit": pa.array(np.full(k, "s", dtype=object), pa.string()),
                      **_utc_cols(m, s)})
    for stage, params in ((Stations(), {"catalogue": catalogue}), (TimeScales(), TimeScales.defaults()),
                          (StationPosition(), StationPosition.defaults())):
        for name, c in stage.apply(table, params, ctx).columns.items():
            table = table.append_column(name, pa.array(np.asarray(c)))
    computed = np.asarray(LightTime().apply(table, light.params, ctx).columns["computed_value"])
    value = computed + rng.normal(0.0, RANGE_NOISE_S, k)
    target = np.full(k, LASER, dtype=object)
    iso = _iso(m, s)
    ids = _ids("SLR-", k)
    # --- a few bad records, deterministic -----------------------------------------
    target[5] = "PLOVER-X"       # not an Earth satellite of the tables: relacc_status 1; target_unknown (light_time)
    iso[9] = "2025-03-06T12:00:00Z"   # after the state table: relacc_status 2; target_outside_coverage (light_time)
    value[13] = np.nan           # value_not_finite (ingest)
    return pa.table({
        "record_id": pa.array(ids, pa.string()), "station": pa.array(station, pa.string()),
        "transmit_station": pa.array(station, pa.string()), "target": pa.array(target, pa.string()),
        "observable": pa.array(np.full(k, "range_two_way", dtype=object), pa.string()),
        "time_tag": pa.array(iso, pa.string()), "value": pa.array(value),
        "unit": pa.array(np.full(k, "s", dtype=object), pa.string()), "uncertainty": pa.array(np.full(k, RANGE_NOISE_S)),
    })
