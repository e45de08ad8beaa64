"""Throughput of ingest and the time_scales stage beside a plain Parquet read+write.

    python benchmarks/bench_time_scales.py [--records 1000000] [--days 1] [--batch-rows 262144]

Prints records/second for:
  parquet copy         pq.read_table + pq.write_table of the raw file (the yardstick)
  ingest (task)        the ingest step as the pipeline runs it: read, check, parse time tags,
                       duplicate ids, write records + quarantine
  time_scales apply    the stage's computation alone, batch by batch over the ingest output
  time_scales (task)   read the ingest output, apply, write (what the luigi task does)
  per-instant erfa     the straightforward path (erfa.utctai/taitt/dtdb/tttcg/tdbtcb per
                       instant, vectorised by numpy but with the full series for every record),
                       for comparison
and the largest difference in TDB between the stage and the per-instant erfa path.
Not run by CI; numbers depend on the machine.
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from stages.physics.offline import configure_offline  # noqa: E402

configure_offline()

import erfa  # noqa: E402

from pipelines.ingest import iter_ingest, output_schema, quarantine_schema  # noqa: E402
from pipelines.parquet_io import AtomicParquetWriter  # noqa: E402
from pipelines.tasks import stream_stage  # noqa: E402
from stages.base import StageContext  # noqa: E402
from stages.physics.leap_seconds import load_leap_table  # noqa: E402
from stages.time_scales import TimeScales  # noqa: E402


def make_raw(path: Path, n: int, days: int, seed: int = 1) -> None:
    rng = np.random.default_rng(seed)
    start = np.datetime64("2026-03-01T00:00:00", "ns")
    t = start + np.sort(rng.integers(0, days * 86400 * 10**9, n)).astype("timedelta64[ns]")
    ids = np.char.add("R", np.arange(n).astype(str))
    table = pa.table({
        "record_id": pa.array(ids),
        "station": pa.array(rng.choice(["CFL", "SFA", "KRD"], n)),
        "target": pa.array(np.full(n, "TERN-4")),
        "observable": pa.array(np.full(n, "range_two_way")),
        "time_tag": pa.array(t, pa.timestamp("ns", tz="UTC")),
        "value": pa.array(rng.uniform(900, 1100, n)),
        "unit": pa.array(np.full(n, "s")),
        "uncertainty": pa.array(np.full(n, 1e-9)),
    })
    pq.write_table(table, path, row_group_size=262144, compression="zstd")


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--records", type=int, default=1_000_000)
    ap.add_argument("--days", type=int, default=1, help="span of the time tags in days")
    ap.add_argument("--batch-rows", type=int, default=262144)
    args = ap.parse_args()
    n = args.records
    leap = load_leap_table()
    stage = TimeScales()
    params = stage.defaults()
    ctx = StageContext(record_kind="tracking", models={"eop_beyond_table": "flag"})

    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        raw = d / "raw.parquet"
        make_raw(raw, n, args.days)

        def copy():
            pq.write_table(pq.read_table(raw), d / "copy.parquet", compression="zstd")

        def ingest():
            schema = pa.schema(list(pq.read_schema(raw)))
            w = AtomicParquetWriter(d / "ingested.parquet", output_schema(schema), {"fingerprint": "bench"})
            q = AtomicParquetWriter(d / "q.parquet", quarantine_schema(schema), {"fingerprint": "bench"})
            for b in iter_ingest(raw, "tracking", leap, args.batch_rows):
                w.write(b.good)
                q.write(b.quarantined)
            w.close()
            q.close()

        t_copy, _ = timed(copy)
        t_ingest, _ = timed(ingest)
        ingested = d / "ingested.parquet"
        batches = [pa.Table.from_batches([b]) for b in pq.ParquetFile(ingested).iter_batches(batch_size=args.batch_rows)]

        def apply_only():
            return [stage.apply(t, params, ctx) for t in batches]

        def stage_task():  # what StageTask does: pipelines.tasks.stream_stage, then close both files
            _, w, q = stream_stage(stage, params, ctx, ingested, d / "ts.parquet", d / "ts.q.parquet",
                                   {"fingerprint": "bench"}, {"fingerprint": "bench"}, args.batch_rows)
            q.close()
            w.close()

        t_apply, results = timed(apply_only)
        t_task, _ = timed(stage_task)

        # the straightforward per-instant erfa path, on the same records
        mjd = np.concatenate([t["utc_mjd"].to_numpy() for t in batches]).astype(float)
        sod = np.concatenate([t["utc_sod_ps"].to_numpy() for t in batches]) / 1e12

        def per_instant():
            tai1, tai2 = erfa.utctai(mjd + 2400000.5, sod / 86400.0)
            tt1, tt2 = erfa.taitt(tai1, tai2)
            dt = erfa.dtdb(tt1, tt2, 0.0, 0.0, 0.0, 0.0)
            tdb1, tdb2 = tt1, tt2 + dt / 86400.0
            erfa.tttcg(tt1, tt2)
            erfa.tdbtcb(tdb1, tdb2)
            return tt1, tt2, dt

        t_direct, (tt1, tt2, dt_direct) = timed(per_instant)
        dt_stage = np.concatenate([np.asarray(r.columns["tdb_minus_tt_s"]) for r in results])
        max_diff = np.abs(dt_stage - dt_direct).max()

    rows = [
        ("parquet copy (read+write)", t_copy),
        ("ingest (task)", t_ingest),
        ("time_scales apply", t_apply),
        ("time_scales (task: read+apply+write)", t_task),
        ("per-instant erfa (utctai..dtdb..tdbtcb)", t_direct),
    ]
    print(f"{n} records over {args.days} day(s), batch {args.batch_rows} rows, {len(batches)} batch(es)")
    print(f"{'step':<42}{'seconds':>9}{'records/s':>14}{'vs copy':>9}")
    for name, t in rows:
        print(f"{name:<42}{t:>9.3f}{n / t:>14,.0f}{t / t_copy:>9.2f}")
    print(f"max |TDB-TT stage - per-instant erfa.dtdb| = {max_diff:.2e} s")


if __name__ == "__main__":
    main()
