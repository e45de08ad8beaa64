"""A small invented scenario for the demo: deterministic raw records with a few bad ones.

Everything here is made up: the deep-space probes "Tern-4" and "Pipit-1",
the stations "Corrie Fell" (CFL), "Salt Flat Array" (SFA) and "Kettle
Ridge" (KRD), the clock satellite "Marten-2" with its rubidium clock
MRT2-RB and the ground laboratories "North Lab" and "South Lab".  The
values are plausible in size only; they are for showing the pipeline, never
for checking physics (the tests check physics against published references).

The first day is 2016-12-31, which ended with a leap second, so the
tracking demo carries a valid ``23:59:60`` time tag.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from pipelines.config import Config

FIRST_DAY = np.datetime64("2016-12-31")
C_M_PER_S = 299792458.0
AU_M = 1.495978707e11  # IAU 2012 Resolution B2

STATIONS = ("CFL", "SFA", "KRD")
PROBES = ("TERN-4", "PIPIT-1")
REMOTE_CLOCK = "MRT2-RB"
REFERENCE_CLOCKS = ("NORTHLAB-HM1", "SOUTHLAB-HM2")


def _out_dir(cfg: Config) -> Path:
    pattern = cfg.inputs[0]
    parent = Path(pattern).parent
    if any(ch in str(parent) for ch in "*?["):
        raise ValueError("the demo writes its raw files into the folder of the first input pattern; "
                         "that folder may not contain glob characters")
    return parent if parent.is_absolute() else cfg.base_dir / parent


def _iso(times: np.ndarray) -> np.ndarray:
    return np.char.add(np.datetime_as_string(times.astype("datetime64[ns]"), unit="ns"), "Z").astype(object)


def _ids(prefix: str, n: int) -> np.ndarray:
    return np.char.add(prefix, np.char.zfill(np.arange(n).astype(str), 6)).astype(object)


def generate(cfg: Config) -> list[Path]:
    """Write the demo's raw Parquet files; return their paths."""
    demo = cfg.demo or {}
    rng = np.random.default_rng(demo.get("seed", 20261202))
    n = demo.get("records_per_partition", 2000)
    out = _out_dir(cfg)
    out.mkdir(parents=True, exist_ok=True)
    written = []
    scenario = demo.get("scenario")
    if scenario in ("conjunction", "constellation", "gyroscope", "laser_ranging"):
        from pipelines import demo_orbits

        make = {"conjunction": _conjunction_records, "constellation": _constellation_records,
                "gyroscope": demo_orbits.gyroscope_records, "laser_ranging": demo_orbits.laser_ranging_records}[scenario]
        table = make(cfg, rng)
        if cfg.dated:  # an archive organised by UTC day: one file per day of the time tags
            return _write_by_day(table, out, Path(cfg.inputs[0]).name)
        path = out / f"{scenario}-{'orientation' if scenario == 'gyroscope' else 'tracking'}.parquet"
        pq.write_table(table, path.with_name(f".{path.name}.tmp"))
        path.with_name(f".{path.name}.tmp").replace(path)
        return [path]
    for k in range(demo.get("partitions", 2)):
        day = FIRST_DAY + np.timedelta64(k, "D")
        if cfg.record_kind == "tracking":
            table = _tracking_day(rng, day, n, k)
        else:
            table = _clock_day(rng, day, n, k, cfg)
        path = out / f"{cfg.record_kind}-{day}.parquet"
        tmp = path.with_name(f".{path.name}.tmp")
        pq.write_table(table, tmp, row_group_size=max(1000, n // 4))
        tmp.replace(path)
        written.append(path)
    return written


def _write_by_day(table: pa.Table, out: Path, template: str) -> list[Path]:
    """Split records by the UTC day of their (ISO string) time tags into files named by the {date} template."""
    import pyarrow.compute as pc

    day = pc.utf8_slice_codeunits(table["time_tag"], 0, 10)
    written = []
    for d in sorted(set(day.to_pylist())):  # a loop over days
        path = out / template.replace("{date}", d)
        tmp = path.with_name(f".{path.name}.tmp")
        pq.write_table(table.filter(pc.equal(day, d)), tmp)
        tmp.replace(path)
        written.append(path)
    return written


def _times(rng, day, n) -> np.ndarray:
    sod_ns = np.sort(rng.integers(0, 86400 * 10**9, n))
    return day.astype("datetime64[ns]") + sod_ns.astype("timedelta64[ns]")


def _tracking_day(rng, day, n, k) -> pa.Table:
    t = _times(rng, day, n)
    station = rng.choice(STATIONS, n).astype(object)
    target = rng.choice(PROBES, n).astype(object)
    hours = (t - np.datetime64("2016-12-31", "ns")).astype(float) / 3.6e12
    distance_m = np.where(target == "TERN-4", 1.52, 0.83) * AU_M + 2.0e4 * hours * 3600.0
    value = 2.0 * distance_m / C_M_PER_S + rng.normal(0, 1e-9, n)
    obs = np.full(n, "range_two_way", dtype=object)
    unit = np.full(n, "s", dtype=object)
    sigma = np.full(n, 1e-9)
    ids = _ids(f"TRK-{day}-", n)
    tx = station.copy()
    # --- a few bad records, deterministic -----------------------------------------
    value[7] = np.nan                      # value_not_finite
    station[11] = None                     # station_missing
    ids[13] = ids[12]                      # record_id_duplicate
    sigma[17] = -1e-9                      # uncertainty_invalid
    obs[19] = "range_sideways"             # observable_unknown
    unit[23] = "Hz"                        # unit_invalid
    station[43] = "ZZZ"                    # station_unknown (stations stage)
    station[47] = tx[47] = "PLN"           # station_without_coordinates (stations stage)
    if k == 0:
        tags = _iso(t)
        tags[-1] = "2016-12-31T23:59:60.250000000125Z"   # valid leap second, picosecond digits
        tags[29] = "2016-12-31T25:61:00Z"                # time_tag_invalid_field
        tags[31] = "yesterday evening"                   # time_tag_unparseable
        tags[37] = "2016-12-31T12:00:00+02:00"           # time_tag_not_utc
        tags[41] = None                                  # time_tag_missing
        time_col = pa.array(tags, pa.string())
    else:
        time_col = pa.array(t, pa.timestamp("ns", tz="UTC"))
    return pa.table({
        "record_id": pa.array(ids, pa.string()),
        "station": pa.array(station, pa.string()),
        "transmit_station": pa.array(tx, pa.string()),
        "target": pa.array(target, pa.string()),
        "observable": pa.array(obs, pa.string()),
        "time_tag": time_col,
        "value": pa.array(value),
        "unit": pa.array(unit, pa.string()),
        "uncertainty": pa.array(sigma),
    })


def _clock_day(rng, day, n, k, cfg: Config | None = None) -> pa.Table:
    # regular sampling: record i at i * 86400/n s; the four series (two reference clocks x two
    # observables) each every 4 * 86400/n s, so that their Allan deviations can be computed
    i = np.arange(n)
    t = day.astype("datetime64[ns]") + (i * (86400 * 10**9 // n)).astype("timedelta64[ns]")
    ref = np.where(i % 2 == 0, REFERENCE_CLOCKS[0], REFERENCE_CLOCKS[1]).astype(object)
    freq = (i // 2) % 2 == 1
    obs = np.where(freq, "fractional_frequency", "time_offset").astype(object)
    seconds = (t - np.datetime64("2016-12-31", "ns")).astype(float) / 1e9
    # the invented clock's own behaviour: offset 3 us, rate +2e-12, white noise
    offset_s = 3e-6 + 2e-12 * seconds + rng.normal(0, 2e-10, n)
    rate = 2e-12 + rng.normal(0, 1e-13, n)
    relativistic = _clock_relativity(cfg, t, ref, obs) if cfg is not None else np.zeros(n)
    offset_s, rate = offset_s + relativistic, rate + relativistic
    if k == 1:
        offset_s[seconds > 86400.0 * 1.5] += 5e-9   # the invented clock jumps by 5 ns at 12:00 on day two
    value = np.where(freq, rate, offset_s)
    sigma = np.where(freq, 1e-13, 2e-10)
    tau = np.where(freq, 300.0, np.nan)
    ids = _ids(f"CLK-{day}-", n)
    remote = np.full(n, REMOTE_CLOCK, dtype=object)
    value[5] = np.inf                       # value_not_finite
    remote[9] = ""                          # clock_missing
    ids[15] = ids[14]                       # record_id_duplicate
    tau[np.flatnonzero(freq)[0]] = 0.0      # averaging_invalid
    tags = _iso(t)
    if k == 1:
        tags[3] = "2017-01-01T23:59:60Z"    # leap_second_invalid: no leap second that day
    return pa.table({
        "record_id": pa.array(ids, pa.string()),
        "remote_clock": pa.array(remote, pa.string()),
        "reference_clock": pa.array(ref, pa.string()),
        "time_tag": pa.array(tags, pa.string()),
        "observable": pa.array(obs, pa.string()),
        "value": pa.array(value),
        "uncertainty": pa.array(sigma),
        "averaging_s": pa.array(tau),
    })


def _clock_relativity(cfg: Config, t: np.ndarray, ref: np.ndarray, obs: np.ndarray) -> np.ndarray:
    """What the clock_rate stage predicts for these comparisons (0 when the config has no such stage)."""
    spec = next((sp for sp in cfg.stages if sp.name == "clock_rate"), None)
    if spec is None:
        return np.zeros(t.size)
    from stages.base import StageContext
    from stages.clock_rate import ClockRate
    from stages.time_scales import TimeScales

    n = t.size
    ns = t.astype("datetime64[ns]").astype(np.int64)
    mjd = ns // 86_400_000_000_000 + 40587
    sod_ps = (ns % 86_400_000_000_000) * 1000
    table = pa.table({"utc_mjd": pa.array(mjd, pa.int32()), "utc_sod_ps": pa.array(sod_ps, pa.int64())})
    ctx = StageContext("clock", dict(cfg.models), base_dir=str(Path(cfg.path).resolve().parent))
    ts = TimeScales().apply(table, TimeScales.defaults(), ctx).columns
    table = pa.table({"remote_clock": pa.array(np.full(n, REMOTE_CLOCK, dtype=object), pa.string()),
                      "reference_clock": pa.array(ref, pa.string()), "observable": pa.array(obs, pa.string()),
                      "value": np.zeros(n), "tt_mjd": pa.array(np.asarray(ts["tt_mjd"]), pa.int32()),
                      "tt_sod_s": np.asarray(ts["tt_sod_s"]), "averaging_s": np.full(n, 300.0)})
    predicted = np.asarray(ClockRate().apply(table, spec.params, ctx).columns["relativistic_prediction"])
    sag = next((sp for sp in cfg.stages if sp.name == "sagnac"), None)
    if sag is not None:
        # the laboratories formed their offsets with the Earth-fixed straight-line delay: the
        # recorded offsets lack the Sagnac term that the sagnac stage puts back
        from stages.sagnac import Sagnac

        table = table.append_column("utc_mjd", pa.array(mjd, pa.int32())).append_column(
            "utc_sod_ps", pa.array(sod_ps, pa.int64()))
        corr = np.asarray(Sagnac().apply(table, sag.params, ctx).columns["sagnac_offset_correction_s"])
        predicted = predicted - np.where((obs == "time_offset") & np.isfinite(corr), corr, 0.0)
    return predicted


# ---------------------------------------------------------------------------- conjunction scenario
# The invented probe TERN-4 on a circular heliocentric orbit of radius 1.52 au, placed so that it
# passes behind the Sun as seen from the Earth on CONJUNCTION_MJD (TDB), its line of sight
# missing the Sun's centre by about 3 solar radii; tracked from the invented stations.
CONJUNCTION_MJD = 60481          # 2024-06-20 (TDB), an arbitrary date of our scenario
PROBE = "TERN-4"
PROBE_RADIUS_AU = 1.52
PROBE_OFFSET_RAD = 0.0232        # angle out of the Earth's orbital plane at conjunction
STATE_STEP_S = 3 * 3600.0
STATE_SPAN_DAYS = 36


def conjunction_states() -> pa.Table:
    """The probe's heliocentric states every 3 h over +-36 days (deterministic, analytic two-body)."""
    from stages.physics.ephemeris import GM_M3_PER_S2, load_planetary_ephemeris

    eph = load_planetary_ephemeris()
    zero = np.zeros(1)
    pe, ve = eph.posvel_m("earth", np.array([CONJUNCTION_MJD]), zero)
    ps, vs = eph.posvel_m("sun", np.array([CONJUNCTION_MJD]), zero)
    r_e, v_e = (pe - ps)[0], (ve - vs)[0]
    e_hat = r_e / np.linalg.norm(r_e)
    pole = np.cross(r_e, v_e)
    pole /= np.linalg.norm(pole)
    u0 = np.cos(PROBE_OFFSET_RAD) * -e_hat + np.sin(PROBE_OFFSET_RAD) * pole
    w = np.cross(pole, u0)
    w /= np.linalg.norm(w)
    r = PROBE_RADIUS_AU * AU_M
    n = np.sqrt(GM_M3_PER_S2["sun"] / r**3)      # Kepler's third law, circular orbit
    k = np.arange(-int(STATE_SPAN_DAYS * 86400 / STATE_STEP_S), int(STATE_SPAN_DAYS * 86400 / STATE_STEP_S) + 1)
    dt = k * STATE_STEP_S
    phase = n * dt
    pos = r * (np.cos(phase)[:, None] * u0 + np.sin(phase)[:, None] * w)
    vel = r * n * (-np.sin(phase)[:, None] * u0 + np.cos(phase)[:, None] * w)
    day = np.floor(dt / 86400.0).astype(np.int64)
    return pa.table({
        "target": pa.array([PROBE] * len(k), pa.string()),
        "tdb_mjd": pa.array(CONJUNCTION_MJD + day, pa.int32()),
        "tdb_sod_s": pa.array(dt - day * 86400.0),
        "x_m": pos[:, 0], "y_m": pos[:, 1], "z_m": pos[:, 2],
        "vx_m_per_s": vel[:, 0], "vy_m_per_s": vel[:, 1], "vz_m_per_s": vel[:, 2],
        "centre": pa.array(["sun"] * len(k), pa.string()),
    })


def write_conjunction_states(path: Path) -> None:
    tmp = path.with_name(f".{path.name}.tmp")
    pq.write_table(conjunction_states(), tmp, compression="zstd")
    tmp.replace(path)


DOPPLER_COUNT_S = 60.0
UPLINK_HZ = 7.16e9               # an X-band uplink frequency of our scenario
TURNAROUND = 880.0 / 749.0       # transponder ratio of our invented probe


def _conjunction_records(cfg: Config, rng) -> pa.Table:
    """Two-way range and (when the config has a doppler stage) two-way Doppler records, daily passes over
    +-30 days of the conjunction, observed = model computed with [demo] simulate_gamma + white noise."""
    from stages.base import StageContext
    from stages.light_time import LightTime
    from stages.physics.ephemeris import load_planetary_ephemeris
    from stages.physics.earth_rotation import itrs_to_gcrs
    from stages.station_position import StationPosition
    from stages.stations import Stations
    from stages.time_scales import TimeScales

    eph = load_planetary_ephemeris()
    light = next(s for s in cfg.stages if s.name == "light_time")
    catalogue = next(s for s in cfg.stages if s.name == "stations").params["catalogue"]
    ctx = StageContext("tracking", dict(cfg.models), base_dir=str(Path(cfg.path).resolve().parent))
    # candidate epochs every 20 minutes, for each station
    mjd = np.repeat(np.arange(CONJUNCTION_MJD - 30, CONJUNCTION_MJD + 31), 72)
    sod = np.tile(np.arange(72) * 1200.0, 61) + 600.0
    cand = pa.table({"station": pa.array(np.repeat(np.array(STATIONS, dtype=object), mjd.size)),
                     "observable": pa.array(np.full(mjd.size * len(STATIONS), "range_two_way", dtype=object)),
                     "utc_mjd": pa.array(np.tile(mjd, len(STATIONS)), pa.int32())})
    sites = Stations().apply(cand, {"catalogue": catalogue}, ctx).columns
    x = np.column_stack([sites[f"site_itrs_{a}_m"] for a in "xyz"])
    m, s = np.tile(mjd, len(STATIONS)), np.tile(sod, len(STATIONS))
    up = itrs_to_gcrs(x, m, s, m, s + 69.184).pos_m          # TT ~ UTC + 69.184 s: enough for an elevation
    from stages.physics.spacecraft_ephemeris import StateTable

    states = StateTable.from_arrow(conjunction_states(), "conjunction")
    p, _, _ = states.posvel_bcrs_m(PROBE, m, s + 69.184, eph, 86400.0)
    e, _ = eph.posvel_m("earth", m, s + 69.184)
    d = p - e
    sin_el = np.einsum("ij,ij->i", d / np.linalg.norm(d, axis=1)[:, None], up / np.linalg.norm(up, axis=1)[:, None])
    keep = sin_el > np.sin(np.radians(20.0))
    m, s, station = m[keep], s[keep], np.repeat(np.array(STATIONS, dtype=object), mjd.size)[keep]
    s = s + rng.uniform(-300.0, 300.0, s.size)
    k = s.size
    table = pa.table({
        "station": pa.array(station, pa.string()), "target": pa.array(np.full(k, PROBE, dtype=object), pa.string()),
        "observable": pa.array(np.full(k, "range_two_way", dtype=object), pa.string()),
        "value": pa.array(np.zeros(k)), "unit": pa.array(np.full(k, "s", dtype=object), pa.string()),
        "utc_mjd": pa.array(m, pa.int32()), "utc_sod_ps": pa.array(np.round(s * 1e6).astype(np.int64) * 10**6, pa.int64()),
    })
    for stage, params in ((Stations(), {"catalogue": catalogue}), (TimeScales(), TimeScales.defaults()),
                          (StationPosition(), StationPosition.defaults())):
        res = stage.apply(table, params, ctx)
        for name, col in res.columns.items():
            table = table.append_column(name, pa.array(np.asarray(col)))
    demo = cfg.demo or {}
    sim_gamma = demo.get("simulate_gamma", 1.0)
    computed = np.asarray(LightTime().apply(table, {**light.params, "gamma": sim_gamma}, ctx).columns["computed_value"])
    value = computed + rng.normal(0.0, 1e-9, k)            # 1 ns of white noise (about 15 cm of range)
    doppler = next((s for s in cfg.stages if s.name == "doppler"), None)
    iso = _iso(np.datetime64("1858-11-17", "ns") + (m.astype("timedelta64[D]").astype("timedelta64[ns]")
                                                     + (table["utc_sod_ps"].to_numpy() // 1000).astype("timedelta64[ns]")))
    ids = _ids("CNJ-", k)
    target = np.full(k, PROBE, dtype=object)
    target[5] = "TERN-9"                                    # target_unknown (light_time stage)
    iso[7] = f"{np.datetime64('1858-11-17') + np.timedelta64(CONJUNCTION_MJD - 40, 'D')}T12:00:00Z"  # outside the states
    ranges = pa.table({
        "record_id": pa.array(ids, pa.string()), "station": pa.array(station, pa.string()),
        "transmit_station": pa.array(station, pa.string()), "target": pa.array(target, pa.string()),
        "observable": pa.array(np.full(k, "range_two_way", dtype=object), pa.string()),
        "time_tag": pa.array(iso, pa.string()), "value": pa.array(value),
        "unit": pa.array(np.full(k, "s", dtype=object), pa.string()), "uncertainty": pa.array(np.full(k, 1e-9)),
        "count_s": pa.array(np.full(k, np.nan)), "reference_frequency_hz": pa.array(np.full(k, np.nan)),
        "turnaround_ratio": pa.array(np.full(k, np.nan)),
    })
    if doppler is None:
        return ranges.drop(["count_s", "reference_frequency_hz", "turnaround_ratio"])
    # two-way Doppler at the same epochs: 60 s counts ending at the range tags, in Hz of the X-band downlink
    from stages.doppler import Doppler

    dt = table.append_column("count_s", pa.array(np.full(k, DOPPLER_COUNT_S))) \
              .append_column("reference_frequency_hz", pa.array(np.full(k, UPLINK_HZ))) \
              .append_column("turnaround_ratio", pa.array(np.full(k, TURNAROUND)))
    dt = dt.set_column(dt.schema.get_field_index("observable"), "observable",
                       pa.array(np.full(k, "doppler_two_way", dtype=object), pa.string()))
    dt = dt.set_column(dt.schema.get_field_index("unit"), "unit", pa.array(np.full(k, "Hz", dtype=object), pa.string()))
    y = np.asarray(Doppler().apply(dt, {**doppler.params, "gamma": sim_gamma}, ctx).columns["dop_computed_y"])
    sigma_y = demo.get("doppler_noise", 1e-13)
    hz = UPLINK_HZ * TURNAROUND
    dop_value = (y + rng.normal(0.0, sigma_y, k)) * hz
    count = np.full(k, DOPPLER_COUNT_S)
    f_ref = np.full(k, UPLINK_HZ)
    count[3] = 0.0                                          # count_interval_invalid (ingest)
    f_ref[9] = np.nan                                       # reference_frequency_invalid (ingest)
    dops = pa.table({
        "record_id": pa.array(_ids("CNJD-", k), pa.string()), "station": pa.array(station, pa.string()),
        "transmit_station": pa.array(station, pa.string()), "target": pa.array(np.full(k, PROBE, dtype=object), pa.string()),
        "observable": pa.array(np.full(k, "doppler_two_way", dtype=object), pa.string()),
        "time_tag": pa.array(iso, pa.string()), "value": pa.array(dop_value),
        "unit": pa.array(np.full(k, "Hz", dtype=object), pa.string()),
        "uncertainty": pa.array(np.full(k, sigma_y * hz if sigma_y > 0 else 1e-6)),
        "count_s": pa.array(count), "reference_frequency_hz": pa.array(f_ref),
        "turnaround_ratio": pa.array(np.full(k, TURNAROUND)),
    })
    return pa.concat_tables([ranges, dops])


# ---------------------------------------------------------------------------- constellation scenario
# Three invented spacecraft TRINE-A, -B, -C trailing each other on a circular heliocentric orbit of
# 1 au, about 2.5 million km apart, exchanging one-way and transponded (two-way) ranging signals
# with no ground station.  Their states are bundled in constellation-states.parquet.
CONSTELLATION_MJD = 60310
TRINE = ("TRINE-A", "TRINE-B", "TRINE-C")
TRINE_PHASE_RAD = (0.0, 0.0167, 0.0334)
TRINE_TILT_RAD = (0.0, 0.004, -0.004)


def constellation_states() -> pa.Table:
    """Heliocentric circular-orbit states of the three spacecraft, every 3 h over +-4 days."""
    from stages.physics.ephemeris import GM_M3_PER_S2

    r = AU_M
    n = np.sqrt(GM_M3_PER_S2["sun"] / r**3)   # Kepler's third law, circular orbit
    k = np.arange(-32, 33)
    dt = k * 3 * 3600.0
    day = np.floor(dt / 86400.0).astype(np.int64)
    parts = []
    for name, phase, tilt in zip(TRINE, TRINE_PHASE_RAD, TRINE_TILT_RAD):
        ang = phase + n * dt
        u = np.stack([np.cos(ang), np.sin(ang) * np.cos(tilt), np.sin(ang) * np.sin(tilt)], axis=1)
        w = np.stack([-np.sin(ang), np.cos(ang) * np.cos(tilt), np.cos(ang) * np.sin(tilt)], axis=1)
        pos, vel = r * u, r * n * w
        parts.append(pa.table({
            "target": pa.array([name] * k.size, pa.string()),
            "tdb_mjd": pa.array(CONSTELLATION_MJD + day, pa.int32()),
            "tdb_sod_s": pa.array(dt - day * 86400.0),
            "x_m": pos[:, 0], "y_m": pos[:, 1], "z_m": pos[:, 2],
            "vx_m_per_s": vel[:, 0], "vy_m_per_s": vel[:, 1], "vz_m_per_s": vel[:, 2],
            "centre": pa.array(["sun"] * k.size, pa.string()),
        }))
    return pa.concat_tables(parts)


def _constellation_records(cfg: Config, rng) -> pa.Table:
    """Links every 10 minutes over two days: one-way for each ordered pair, two-way from A."""
    from stages.base import StageContext
    from stages.light_time import LightTime
    from stages.time_scales import TimeScales

    pairs = [(a, b, "link_range_one_way") for a in TRINE for b in TRINE if a != b]
    pairs += [("TRINE-A", "TRINE-B", "link_range_two_way"), ("TRINE-A", "TRINE-C", "link_range_two_way")]
    sod = np.arange(0, 2 * 86400, 600.0) + 300.0
    m = CONSTELLATION_MJD + (sod // 86400).astype(np.int64)
    s = sod % 86400
    rcv = np.concatenate([np.full(sod.size, p[0], dtype=object) for p in pairs])
    far = np.concatenate([np.full(sod.size, p[1], dtype=object) for p in pairs])
    obs = np.concatenate([np.full(sod.size, p[2], dtype=object) for p in pairs])
    mjd, sec = np.tile(m, len(pairs)), np.tile(s, len(pairs)) + rng.uniform(-1.0, 1.0, obs.size)
    k = obs.size
    nan = np.full(k, np.nan)
    table = pa.table({"station": pa.array(rcv, pa.string()), "target": pa.array(far, pa.string()),
                      "observable": pa.array(obs, pa.string()), "value": pa.array(np.zeros(k)),
                      "unit": pa.array(np.full(k, "s", dtype=object), pa.string()),
                      "utc_mjd": pa.array(mjd, pa.int32()),
                      "utc_sod_ps": pa.array(np.round(sec * 1e6).astype(np.int64) * 10**6, pa.int64()),
                      **{f"site_bcrs_{a}_m": nan for a in "xyz"}, **{f"tx_site_itrs_{a}_m": nan for a in "xyz"}})
    ctx = StageContext("tracking", dict(cfg.models), base_dir=str(Path(cfg.path).resolve().parent))
    for name, col in TimeScales().apply(table, TimeScales.defaults(), ctx).columns.items():
        table = table.append_column(name, pa.array(np.asarray(col)))
    light = next(sp for sp in cfg.stages if sp.name == "light_time")
    computed = np.asarray(LightTime().apply(table, light.params, ctx).columns["computed_value"])
    value = computed + rng.normal(0.0, 1e-11, k)            # 10 ps of white noise (3 mm of range)
    iso = _iso(np.datetime64("1858-11-17", "ns") + (mjd.astype("timedelta64[D]").astype("timedelta64[ns]")
                                                     + (table["utc_sod_ps"].to_numpy() // 1000).astype("timedelta64[ns]")))
    far[3] = "TRINE-D"                                      # target_unknown (light_time stage)
    return pa.table({
        "record_id": pa.array(_ids("TRN-", k), pa.string()), "station": pa.array(rcv, pa.string()),
        "target": pa.array(far, pa.string()), "observable": pa.array(obs, pa.string()),
        "time_tag": pa.array(iso, pa.string()), "value": pa.array(value),
        "unit": pa.array(np.full(k, "s", dtype=object), pa.string()), "uncertainty": pa.array(np.full(k, 1e-11)),
    })
