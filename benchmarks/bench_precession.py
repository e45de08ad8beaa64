"""Throughput of the orientation chain (ingest -> precession) beside a plain Parquet read+write of the same data.

    python benchmarks/bench_precession.py [--records 1000000] [--batch-rows 262144]

The records: N spin-axis readings (unit vectors) of the invented gyroscope satellite KESTREL-G of
sample_configs/orbits.toml, time tags spread over the 30 days after its integration start (values are
the start direction: only the work is timed).  Each step reads the previous step's Parquet batch by
batch and writes its records and quarantine, as the pipeline's tasks do (pipelines.tasks.stream_stage).

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

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from stages.physics.offline import configure_offline  # noqa: E402

configure_offline()

from bench_range_chain import run_ingest, timed  # noqa: E402
from pipelines.demo_orbits import GYRO, START_MJD  # noqa: E402
from pipelines.tasks import stream_stage  # noqa: E402
from stages.base import StageContext  # noqa: E402
from stages.physics.leap_seconds import load_leap_table  # noqa: E402
from stages.precession import Precession  # noqa: E402

DAY_NS = 86400 * 10**9


def make_raw(path: Path, n: int, seed: int = 3) -> None:
    rng = np.random.default_rng(seed)
    start = np.datetime64("1858-11-17T00:00:00", "ns") + np.timedelta64(START_MJD * DAY_NS, "ns")
    t = start + np.timedelta64(DAY_NS // 24, "ns") + np.sort(rng.integers(0, 30 * DAY_NS, n)).astype("timedelta64[ns]")
    pq.write_table(pa.table({
        "record_id": pa.array(np.char.add("G", np.arange(n).astype(str))),
        "body": pa.array(np.full(n, GYRO)),
        "time_tag": pa.array(t, pa.timestamp("ns", tz="UTC")),
        "observable": pa.array(np.full(n, "spin_axis")),
        "dir_x": pa.array(np.full(n, 0.0)), "dir_y": pa.array(np.full(n, 0.0)), "dir_z": pa.array(np.full(n, 1.0)),
        "uncertainty": pa.array(np.full(n, 1e-6)),
    }), path, row_group_size=262144, compression="zstd")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--records", type=int, default=1_000_000)
    ap.add_argument("--batch-rows", type=int, default=262144)
    args = ap.parse_args()
    n = args.records
    leap = load_leap_table()
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        raw = d / "raw.parquet"
        make_raw(raw, n)
        copy_s, _ = timed(lambda: pq.write_table(pq.read_table(raw), d / "copy.parquet", compression="zstd"))

        def ingest():
            return run_ingest(raw, d / "00.parquet", d / "00.q.parquet", leap, args.batch_rows, "orientation")

        ingest_s, _ = timed(ingest)
        stage = Precession()
        params = {**Precession.defaults(), "orbits": "orbits.toml"}
        ctx = StageContext(record_kind="orientation", models={}, partition="bench",
                           columns=frozenset(pq.read_schema(d / "00.parquet").names), base_dir=str(REPO / "sample_configs"))
        timing: dict = {}

        def precession():
            stats, w, q = stream_stage(stage, params, ctx, d / "00.parquet", d / "01.parquet", d / "01.q.parquet",
                                       {"fingerprint": "bench"}, {"fingerprint": "bench"}, args.batch_rows, timing)
            q.close()
            w.close()
            return stats

        prec_s, stats = timed(precession)
        assert stats["rows_out"] == n, stats
        print(f"{n} spin-axis records, batch {args.batch_rows}")
        print(f"{'step':<22}{'wall s':>9}{'records/s':>13}{'x copy':>9}{'apply s':>9}")
        for name, wall, apply_s in (("parquet copy", copy_s, None), ("ingest", ingest_s, None),
                                    ("precession (task)", prec_s, timing.get("apply_s"))):
            print(f"{name:<22}{wall:>9.3f}{n / wall:>13,.0f}{wall / copy_s:>9.1f}"
                  f"{'' if apply_s is None else f'{apply_s:>9.3f}'}")


if __name__ == "__main__":
    main()
