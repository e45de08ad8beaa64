"""Throughput of the Doppler chain (ingest -> stations -> time_scales -> doppler -> gamma_fit) beside a plain
Parquet read+write of the same data.

    python benchmarks/bench_doppler_chain.py [--records 200000] [--batch-rows 262144]

The records: N two-way Doppler records (``doppler_two_way``, unit ``Hz``, 60 s counts, X-band uplink with
the transponder ratio 880/749) of the invented probe TERN-4 from the invented stations CFL, SFA and KRD,
time tags spread over +-30 days around the demo's conjunction; values random (only the work is timed).
Each step reads the previous step's Parquet file batch by batch and writes its records and quarantine,
as StageTask does (pipelines.tasks.stream_stage, through bench_range_chain.run_stage_task); the "apply"
column is the time spent in the stage itself.  A Doppler record costs two light-time solutions (four
legs for two-way) plus the TDB - TT and station states at both ends of the count, so expect roughly twice
the light_time stage's cost per record.

Not run by CI; numbers depend on the machine.
"""
from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_range_chain import (CONJUNCTION_MJD, DAY_NS, PROBE, STATES_FILE, STATIONS, run_ingest,  # noqa: E402
                               run_stage_task, timed)

from pipelines.demo import TURNAROUND, UPLINK_HZ  # noqa: E402
from stages.doppler import Doppler  # noqa: E402
from stages.gamma_fit import GammaFit  # noqa: E402
from stages.physics.leap_seconds import load_leap_table  # noqa: E402
from stages.stations import Stations  # noqa: E402
from stages.time_scales import TimeScales  # noqa: E402


def make_raw(path: Path, n: int, seed: int = 2) -> None:
    rng = np.random.default_rng(seed)
    centre = np.datetime64("1858-11-17T00:00:00", "ns") + np.timedelta64(CONJUNCTION_MJD * DAY_NS, "ns")
    t = centre - np.timedelta64(30 * DAY_NS, "ns") + np.sort(rng.integers(0, 60 * DAY_NS, n)).astype("timedelta64[ns]")
    pq.write_table(pa.table({
        "record_id": pa.array(np.char.add("D", np.arange(n).astype(str))),
        "station": pa.array(rng.choice(np.array(STATIONS), n)),
        "target": pa.array(np.full(n, PROBE)),
        "observable": pa.array(np.full(n, "doppler_two_way")),
        "time_tag": pa.array(t, pa.timestamp("ns", tz="UTC")),
        "value": pa.array(rng.normal(0.0, 1e5, n)),
        "unit": pa.array(np.full(n, "Hz")),
        "uncertainty": pa.array(np.full(n, 1e-3)),
        "count_s": pa.array(np.full(n, 60.0)),
        "reference_frequency_hz": pa.array(np.full(n, UPLINK_HZ)),
        "turnaround_ratio": pa.array(np.full(n, TURNAROUND)),
    }), path, row_group_size=262144, compression="zstd")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--records", type=int, default=200_000)
    ap.add_argument("--batch-rows", type=int, default=262144)
    args = ap.parse_args()
    n = args.records
    leap = load_leap_table()
    stages = [
        (Stations(), {**Stations.defaults(), "catalogue": "stations.toml"}),
        (TimeScales(), TimeScales.defaults()),
        (Doppler(), {**Doppler.defaults(), "spacecraft_states": STATES_FILE, "bodies": "sun,jupiter,saturn,earth"}),
        (GammaFit(), GammaFit.defaults()),
    ]
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        raw = d / "raw.parquet"
        make_raw(raw, n)
        copy_s, _ = timed(lambda: pq.write_table(pq.read_table(raw), d / "copy.parquet", compression="zstd"))

        def ingest():
            return run_ingest(raw, d / "00.parquet", d / "00.q.parquet", leap, args.batch_rows)

        rows = [("parquet copy", copy_s, None)]
        ingest_s, _ = timed(ingest)
        rows.append(("ingest", ingest_s, None))
        src = d / "00.parquet"
        for k, (stage, params) in enumerate(stages, start=1):
            dst, qdst = d / f"{k:02d}.parquet", d / f"{k:02d}.q.parquet"
            wall, st = timed(lambda: run_stage_task(stage, params, src, dst, qdst, args.batch_rows))
            rows.append((f"{stage.name} (task)", wall, st["apply_s"]))
            src = dst
        print(f"{n} two-way Doppler records, batch {args.batch_rows}")
        print(f"{'step':<22}{'wall s':>9}{'records/s':>13}{'x copy':>9}{'apply s':>9}")
        total = 0.0
        for name, wall, apply_s in rows:
            if name != "parquet copy":
                total += wall
            print(f"{name:<22}{wall:>9.3f}{n / wall:>13,.0f}{wall / copy_s:>9.1f}"
                  f"{'' if apply_s is None else f'{apply_s:>9.3f}'}")
        print(f"{'chain (ingest+stages)':<22}{total:>9.3f}{n / total:>13,.0f}{total / copy_s:>9.1f}")


if __name__ == "__main__":
    main()
