"""Throughput of the clock chain as the pipeline runs it, beside a plain Parquet read+write.

    python benchmarks/bench_clock_chain.py [--records 1000000] [--batch-rows 262144]

Generates N comparison records of the invented satellite clock MRT2-RB against the two invented
ground masers (time offsets and fractional frequencies, regular epochs over one day), runs
ingest -> time_scales -> sagnac -> clock_rate -> clock_series -> product through `relcorr run`
(embedded scheduler, one worker), and prints each step's wall time from the run's manifest, in
records/second and as a multiple of a plain pq.read_table + pq.write_table of the raw file.
Not run by CI; numbers depend on the machine.
"""
from __future__ import annotations

import argparse
import contextlib
import io
import json
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

CONFIG = """
[pipeline]
name = "bench-clock"
record_kind = "clock"
inputs = ["raw/clock-bench.parquet"]
batch_rows = {batch_rows}

[[stages]]
use = "time_scales"

[[stages]]
use = "sagnac"
clocks = "clocks.toml"
stations = "stations.toml"

[[stages]]
use = "clock_rate"
clocks = "clocks.toml"
stations = "stations.toml"
reference_epoch_tt = "2016-12-31T00:00:00"

[[stages]]
use = "clock_series"
"""


def make_raw(path: Path, n: int, seed: int = 3) -> None:
    rng = np.random.default_rng(seed)
    i = np.arange(n)
    t = np.datetime64("2017-01-02T00:00:00", "ns") + (i * (86400 * 10**9 // n)).astype("timedelta64[ns]")
    freq = (i // 2) % 2 == 1
    pq.write_table(pa.table({
        "record_id": pa.array(np.char.add("C", i.astype(str))),
        "remote_clock": pa.array(np.full(n, "MRT2-RB")),
        "reference_clock": pa.array(np.where(i % 2 == 0, "NORTHLAB-HM1", "SOUTHLAB-HM2")),
        "time_tag": pa.array(t, pa.timestamp("ns", tz="UTC")),
        "observable": pa.array(np.where(freq, "fractional_frequency", "time_offset")),
        "value": pa.array(np.where(freq, 4.4e-10, 3e-6) + rng.normal(0, 1e-12, n)),
        "uncertainty": pa.array(np.full(n, 1e-12)),
        "averaging_s": pa.array(np.full(n, 300.0)),
    }), path, row_group_size=262144, compression="zstd")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--records", type=int, default=1_000_000)
    ap.add_argument("--batch-rows", type=int, default=262144)
    args = ap.parse_args()
    from pipelines.cli import run_config

    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        (d / "raw").mkdir()
        raw = d / "raw" / "clock-bench.parquet"
        make_raw(raw, args.records)
        for name in ("clocks.toml", "stations.toml"):
            shutil.copy(REPO / "sample_configs" / name, d / name)
        (d / "run.toml").write_text(CONFIG.format(batch_rows=args.batch_rows))
        t0 = time.perf_counter()
        pq.write_table(pq.read_table(raw), d / "copy.parquet", compression="zstd")
        t_copy = time.perf_counter() - t0
        t0 = time.perf_counter()
        with contextlib.redirect_stdout(io.StringIO()):
            code = run_config(str(d / "run.toml"))
        t_run = time.perf_counter() - t0
        manifest = json.loads(sorted((d / "products" / "manifests").glob("*.json"))[-1].read_text())
    steps = manifest["partitions"][0]["steps"]
    n = args.records
    print(f"{n:,} clock records (time offsets and fractional frequencies, regular epochs over one day), "
          f"batch {args.batch_rows} rows; run exit code {code}")
    print(f"{'step':<36}{'seconds':>9}{'records/s':>14}{'vs copy':>9}")
    print(f"{'parquet copy (read+write raw)':<36}{t_copy:>9.3f}{n / t_copy:>14,.0f}{1.0:>9.2f}")
    total = 0.0
    for a in steps:
        w = a.get("wall_s") or float("nan")
        total += w
        print(f"{a['step'] + ' (task)':<36}{w:>9.3f}{n / w:>14,.0f}{w / t_copy:>9.2f}")
    print(f"{'chain (sum of tasks)':<36}{total:>9.3f}{n / total:>14,.0f}{total / t_copy:>9.2f}")
    print(f"{'relcorr run, wall clock':<36}{t_run:>9.3f}{n / t_run:>14,.0f}{t_run / t_copy:>9.2f}")
    verdict = "met" if total <= 2.0 * t_copy else "NOT met"
    print(f"target (the clock issue): chain within 2x the Parquet copy -> {verdict} ({total / t_copy:.1f}x)")


if __name__ == "__main__":
    main()
