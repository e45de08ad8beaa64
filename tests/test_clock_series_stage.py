"""The clock_series stage: steps and out-of-order epochs flagged on the right records, never dropped,
and the per-series summary in the manifest.  The statistics themselves are checked against
published definitions in tests/test_clock_statistics.py (IEEE Std 1139, NIST SP 1065, Allan 1966)."""
from __future__ import annotations

import dataclasses
import json

import numpy as np
import pyarrow as pa

from stages.base import StageContext
from stages.clock_series import ClockSeries


def _series(n=2000, step_at=1200, swap=(700, 701)):
    rng = np.random.default_rng(8)
    t = np.arange(n) * 60.0
    x = 1e-6 + 1e-12 * t + rng.normal(0, 1e-10, n)
    x[step_at:] += 3e-9                                      # a 3 ns time step (30 sigma)
    t[list(swap)] = t[list(reversed(swap))]                  # two epochs out of order in the file
    rows = np.arange(n)
    return pa.table({"remote_clock": ["SAT"] * n, "reference_clock": ["LAB"] * n, "observable": ["time_offset"] * n,
                     "source_row": pa.array(rows, pa.int64()), "tt_mjd": pa.array([60000] * n, pa.int32()),
                     "tt_sod_s": t, "value_corrected": x})


def test_flags_land_on_the_right_records_in_any_batch():
    table = _series()
    stage = ClockSeries()
    params = ClockSeries.defaults()
    ctx = StageContext("clock", {})
    state = stage.prepare(table.select(list(ClockSeries.partition_columns)), params, ctx)
    ctx = dataclasses.replace(ctx, state=state)
    flags = np.concatenate([np.asarray(stage.apply(table.slice(a, b - a), params, ctx).columns["series_flag"].to_pylist(),
                                       dtype=object) for a, b in ((0, 650), (650, 1300), (1300, 2000))])
    assert flags[1200] == "time_step"
    assert flags[701] == "non_monotonic_epoch"
    others = np.delete(np.arange(2000), [1200, 701])
    # in time order the swapped pair is fine; nothing else is flagged
    assert (flags[others] == "").all()
    summary = state.summary["SAT|LAB|time_offset"]
    assert summary["n_records"] == 2000 and abs(summary["mean_fractional_frequency"] - 1e-12) < 1e-13
    json.dumps(summary, allow_nan=False)   # goes into Parquet metadata and the manifest as it is
