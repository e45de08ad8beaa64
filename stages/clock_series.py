"""Stage ``clock_series``: each clock series looked at as a whole — steps, epochs out of order, statistics.

A series is the records of one (remote clock, reference clock, observable).
In a pass over the whole partition (``prepare``; only a few columns are
read), the stage

* flags epochs that do not follow the previous record of the same series
  in file order (``non_monotonic_epoch``);
* flags time steps in ``time_offset`` series and frequency steps in
  ``fractional_frequency`` series, on the corrected values (relativity
  removed by ``clock_rate``): first differences detrended by the series'
  median rate and scored against their median absolute deviation
  (``stages.physics.clock_statistics.detect_steps``);
* summarises each series for the run's manifest: mean fractional frequency
  offset, drift, and the overlapping Allan deviation at 1, 10 and 100 times
  the sampling interval when the epochs are regularly spaced (IEEE Std
  1139-2008; NIST SP 1065, Riley 2008).

Flagged records are kept, with the reason in ``series_flag``: a step is
information about the clock, not a fault of the record.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics import clock_statistics as cs


@dataclass
class SeriesState:
    rows: np.ndarray            # sorted source rows that carry a flag
    reasons: np.ndarray         # their reasons (object)
    summary: dict = field(default_factory=dict)


def _plain(v):
    """JSON-safe scalar (NaN and infinities become None)."""
    if isinstance(v, (np.floating, float)):
        return None if not math.isfinite(float(v)) else float(v)
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (list, tuple, np.ndarray)):
        return [_plain(x) for x in v]
    return v


class ClockSeries(Stage):
    name = "clock_series"
    version = 1
    summary = "per clock series: time and frequency steps, epochs out of order, and summary statistics"
    record_kinds = ("clock",)
    requires = (
        Column("remote_clock", pa.string(), "", "remote clock"),
        Column("reference_clock", pa.string(), "", "reference clock"),
        Column("observable", pa.string(), "", "time_offset or fractional_frequency"),
        Column("source_row", pa.int64(), "", "row in the raw file"),
        Column("tt_mjd", pa.int32(), "d", "epoch, TT day"),
        Column("tt_sod_s", pa.float64(), "s", "epoch, TT seconds of day"),
        Column("value_corrected", pa.float64(), "s|1", "observation with relativity removed (clock_rate)"),
    )
    partition_columns = tuple(c.name for c in requires)
    provides = (
        Column("series_flag", pa.string(), "",
               "'' or the reason: time_step, frequency_step, non_monotonic_epoch (the record is kept)"),
    )
    params = (
        Param("step_threshold_sigma", "float", 6.0,
              "a step is a detrended first difference beyond this many robust standard deviations",
              minimum=3.0, maximum=100.0),
    )
    references = (
        Reference("IEEE Std 1139-2008; Riley 2008, NIST SP 1065", "overlapping Allan deviation, drift fits"),
        Reference("Allan 1966, Proc. IEEE 54, 221", "Allan variance"),
    )
    flag_columns = ("series_flag",)

    def prepare(self, columns: pa.Table, params: Mapping[str, Any], context: StageContext) -> SeriesState:
        n = columns.num_rows
        if n == 0:
            return SeriesState(np.zeros(0, np.int64), np.zeros(0, object))
        keys = pc.binary_join_element_wise(columns["remote_clock"], columns["reference_clock"],
                                           columns["observable"], "|")
        enc = pc.dictionary_encode(keys).combine_chunks()
        group = np.asarray(enc.indices.to_numpy(zero_copy_only=False), dtype=np.int64)
        names = enc.dictionary.to_pylist()
        t = (columns["tt_mjd"].to_numpy().astype(np.int64) - 51544) * 86400.0 + columns["tt_sod_s"].to_numpy()
        v = columns["value_corrected"].to_numpy(zero_copy_only=False).astype(float)
        rows = columns["source_row"].to_numpy()
        reason = np.full(n, "", dtype=object)
        # epochs out of order, in file order
        reason[cs.non_monotonic(t, group=group)] = "non_monotonic_epoch"
        # steps, in time order within each series
        order = np.lexsort((t, group))
        is_freq = np.array([name.endswith("|fractional_frequency") for name in names], dtype=bool)[group]
        summary = {}
        for kind, mask_kind, label in (("phase", ~is_freq, "time_step"), ("frequency", is_freq, "frequency_step")):
            sel = order[mask_kind[order]]
            if sel.size == 0:
                continue
            flags = cs.detect_steps(t[sel], v[sel], params["step_threshold_sigma"], group=group[sel], reason=label)
            hit = sel[np.asarray(flags.mask, dtype=bool)]
            reason[hit[reason[hit] == ""]] = label
            for g in np.unique(group[sel]):  # a loop over series, not records
                m = sel[group[sel] == g]
                st = cs.summary(t[m], v[m], kind=kind)
                summary[names[g]] = {k: _plain(st.get(k)) for k in (
                    "n_records", "mean_fractional_frequency", "drift_per_day", "tau0_s", "adev_tau_s", "adev")}
        flagged = np.flatnonzero(reason != "")
        order_rows = np.argsort(rows[flagged])
        return SeriesState(rows[flagged][order_rows], reason[flagged][order_rows], summary)

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        state: SeriesState = context.state
        n = table.num_rows
        out = np.full(n, "", dtype=object)
        if state is not None and state.rows.size:
            rows = table["source_row"].to_numpy()
            k = np.searchsorted(state.rows, rows)
            k = np.clip(k, 0, state.rows.size - 1)
            hit = state.rows[k] == rows
            out[hit] = state.reasons[k[hit]]
        return StageResult(columns={"series_flag": pa.array(out, pa.string())}, touched=out != "")
