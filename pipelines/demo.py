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
    for k in range(demo.get("partitions", 2)):
        day = FIRST_DAY + np.timedelta64(k, "D")
        if cfg.record_kind == "tracking":
            table = _tracking_day(rng, day, n, k)
        else:
            table = _clock_day(rng, day, n, k)
        path = out / f"{cfg.record_kind}-{day}.parquet"
        tmp = path.with_name(f".{path.name}.tmp")
        pq.write_table(table, tmp, row_group_size=max(1000, n // 4))
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


def _clock_day(rng, day, n, k) -> pa.Table:
    t = _times(rng, day, n)
    ref = rng.choice(REFERENCE_CLOCKS, n).astype(object)
    freq = rng.random(n) < 0.3
    obs = np.where(freq, "fractional_frequency", "time_offset").astype(object)
    days = (t - np.datetime64("2016-12-31", "ns")).astype(float) / 8.64e13
    # an invented clock: offset 3 us, rate +4.4e-10 (as a clock raised to orbit would show), white noise
    offset_s = 3e-6 + 4.4e-10 * days * 86400.0 + rng.normal(0, 2e-10, n)
    rate = 4.4e-10 + rng.normal(0, 1e-13, n)
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
