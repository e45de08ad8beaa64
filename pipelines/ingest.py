"""Ingest: read one raw Parquet file, check it, normalise time tags, quarantine bad rows.

File-level faults (unreadable or truncated Parquet, a missing required
column, a column of the wrong type) raise InputFileError: that input stops,
the others go on.  Record-level faults send the record, intact, to the
quarantine file with a reason code (``schemas.INGEST_REASONS``).

Memory: the file is read batch by batch (one Parquet row group at a time);
the duplicate-id check keeps 8 bytes per record (a 64-bit hash of each id)
plus the exact ids of the few hash matches it must confirm.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterator

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from pipelines import schemas
from pipelines.errors import InputFileError
from pipelines.record_ids import DuplicateFinder
from pipelines.timetags import STATUS_REASON, normalise_time_tags
from stages.physics.leap_seconds import SPAN_START_MJD, LeapTable, leap_second_at_end_of_day

INGEST_NAME = "ingest"
INGEST_VERSION = 1
INGEST_TAG = f"{INGEST_NAME}@{INGEST_VERSION}"

QUARANTINE_COLUMNS = (
    pa.field("quarantine_step", pa.string(), metadata={b"description": b"step that quarantined the record"}),
    pa.field("quarantine_reason", pa.string(), metadata={b"description": b"reason code (see README)"}),
)


def open_input(path: str | Path) -> pq.ParquetFile:
    try:
        return pq.ParquetFile(path)
    except FileNotFoundError:
        raise InputFileError(path, "file not found") from None
    except (OSError, pa.ArrowException) as exc:
        raise InputFileError(path, f"unreadable or truncated Parquet file ({exc})") from None


def _type_ok(kind: str, t: pa.DataType) -> bool:
    if pa.types.is_dictionary(t):
        t = t.value_type
    if kind == "id":
        return pa.types.is_string(t) or pa.types.is_large_string(t) or pa.types.is_integer(t)
    if kind == "text":
        return pa.types.is_string(t) or pa.types.is_large_string(t)
    if kind == "time":
        return pa.types.is_timestamp(t) or pa.types.is_string(t) or pa.types.is_large_string(t)
    if kind == "number":  # an all-null column (Arrow type null) is accepted: its records are checked one by one
        return pa.types.is_floating(t) or pa.types.is_integer(t) or pa.types.is_null(t)
    raise AssertionError(kind)


_EXPECTED = {
    "id": "string or integer",
    "text": "string",
    "time": "timestamp or ISO 8601 string",
    "number": "floating point or integer",
}


def check_schema(path: str | Path, schema: pa.Schema, record_kind: str) -> None:
    """Raise InputFileError if a required column is missing or a column has the wrong type."""
    names = set(schema.names)
    for col in schemas.SCHEMAS[record_kind]:
        if col.name not in names:
            if col.required:
                raise InputFileError(path, f"missing required column {col.name!r} ({record_kind} records need: "
                                     + ", ".join(c.name for c in schemas.SCHEMAS[record_kind] if c.required) + ")")
            continue
        t = schema.field(col.name).type
        if not _type_ok(col.kind, t):
            raise InputFileError(path, f"column {col.name!r} has type {t}, expected {_EXPECTED[col.kind]}")
    reserved = {c.name for c in schemas.INGEST_COLUMNS} | {f.name for f in QUARANTINE_COLUMNS}
    clash = sorted(reserved & names)
    if clash:
        raise InputFileError(path, f"column(s) {', '.join(clash)} are reserved for relcorr's own use; rename them")


def _plain(arr: pa.ChunkedArray | pa.Array) -> pa.Array:
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    if pa.types.is_dictionary(arr.type):
        arr = arr.dictionary_decode()
    return arr


def _blank(arr) -> np.ndarray:
    """True where a text/id value is null or empty (after stripping blanks)."""
    arr = _plain(arr)
    if pa.types.is_integer(arr.type):
        return np.asarray(pc.is_null(arr).to_numpy(zero_copy_only=False), dtype=bool)
    empty = pc.equal(pc.utf8_trim_whitespace(arr), "")
    return np.asarray(pc.fill_null(empty, True).to_numpy(zero_copy_only=False), dtype=bool)


def _float(arr) -> np.ndarray:
    arr = _plain(arr)
    return np.asarray(pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False), dtype=float)


def _text_in(arr, allowed) -> np.ndarray:
    arr = _plain(arr)
    return np.asarray(pc.fill_null(pc.is_in(arr, value_set=pa.array(list(allowed), pa.string())), False)
                      .to_numpy(zero_copy_only=False), dtype=bool)


@dataclass
class ReasonCoder:
    """Assigns each record the first reason that applies (vectorised)."""

    n: int
    codes: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.code = np.zeros(self.n, dtype=np.int16)

    def mark(self, reason: str, mask: np.ndarray) -> None:
        assert reason in schemas.INGEST_REASONS, reason
        if reason not in self.codes:
            self.codes.append(reason)
        k = self.codes.index(reason) + 1
        sel = mask & (self.code == 0)
        self.code[sel] = k

    def bad(self) -> np.ndarray:
        return self.code != 0

    def reasons(self, mask: np.ndarray) -> pa.Array:
        lookup = np.array([""] + self.codes, dtype=object)
        return pa.array(lookup[self.code[mask]], pa.string())


def classify_batch(table: pa.Table, record_kind: str, leap: LeapTable, duplicate: np.ndarray):
    """Check one batch.  Returns (ReasonCoder, utc_mjd, utc_sod_ps)."""
    n = table.num_rows
    rc = ReasonCoder(n)
    rc.mark("record_id_missing", _blank(table["record_id"]))
    rc.mark("record_id_duplicate", duplicate)

    tags = normalise_time_tags(_plain(table["time_tag"]))
    status = np.asarray(tags.status)
    for code, reason in STATUS_REASON.items():
        if reason:
            rc.mark(reason, status == code)
    mjd = np.asarray(tags.mjd, dtype=np.int32)
    sod_ps = np.asarray(tags.sod_ps, dtype=np.int64)
    ok_time = status == 0
    out_of_span = ok_time & ((mjd < SPAN_START_MJD) | (mjd > leap.expires_mjd))
    rc.mark("time_tag_out_of_span", out_of_span)
    in_span = ok_time & ~out_of_span
    leap_ok = np.zeros(n, dtype=bool)
    if in_span.any():
        leap_ok[in_span] = leap_second_at_end_of_day(leap, mjd[in_span])
    rc.mark("leap_second_invalid", in_span & np.asarray(tags.leap_label, dtype=bool) & ~leap_ok)

    if record_kind == "tracking":
        rc.mark("station_missing", _blank(table["station"]))
        observable = table["observable"]
        rc.mark("target_missing", _blank(table["target"]))
        known = _text_in(observable, schemas.TRACKING_OBSERVABLES)
        rc.mark("observable_unknown", ~known)
        if "transmit_station" in table.column_names:
            three_way = _text_in(observable, [k for k in schemas.TRACKING_OBSERVABLES if k.endswith("three_way")])
            rc.mark("station_missing", three_way & _blank(table["transmit_station"]))
        unit_ok = np.zeros(n, dtype=bool)
        obs = _plain(observable)
        unit = _plain(table["unit"])
        for name, units in schemas.TRACKING_OBSERVABLES.items():  # loop over types, not records
            is_obs = np.asarray(pc.fill_null(pc.equal(obs, name), False).to_numpy(zero_copy_only=False), dtype=bool)
            unit_ok |= is_obs & _text_in(unit, units)
        rc.mark("unit_invalid", known & ~unit_ok)
        doppler = _text_in(observable, schemas.DOPPLER_OBSERVABLES)
        if doppler.any():
            def number(name, default):
                return _float(table[name]) if name in table.column_names else np.full(n, default)
            count = number("count_s", np.nan)
            rc.mark("count_interval_invalid", doppler & ~(np.isfinite(count) & (count > 0)))
            f_ref = number("reference_frequency_hz", np.nan)
            ratio = (_float(pc.fill_null(pc.cast(_plain(table["turnaround_ratio"]), pa.float64()), 1.0))  # null: 1
                     if "turnaround_ratio" in table.column_names else np.ones(n))
            in_hz = _text_in(unit, ["Hz"])
            rc.mark("reference_frequency_invalid",
                    doppler & ((in_hz & ~(np.isfinite(f_ref) & (f_ref > 0))) | ~(np.isfinite(ratio) & (ratio > 0))))
    elif record_kind == "orientation":
        rc.mark("body_missing", _blank(table["body"]))
        rc.mark("observable_unknown", ~_text_in(table["observable"], schemas.ORIENTATION_OBSERVABLES))
        spin = _text_in(table["observable"], ["spin_axis"])
        if spin.any():
            def given(name):  # non-null (NaN counts as given: it is then invalid)
                return np.asarray(pc.is_valid(_plain(table[name])).to_numpy(zero_copy_only=False), dtype=bool) \
                    if name in table.column_names else np.zeros(n, dtype=bool)
            has_vec = given("dir_x") & given("dir_y") & given("dir_z")
            has_radec = given("ra_deg") & given("dec_deg")
            rc.mark("direction_missing", spin & ~has_vec & ~has_radec)
            vec = np.stack([_float(table[c]) if c in table.column_names else np.full(n, np.nan)
                            for c in ("dir_x", "dir_y", "dir_z")], axis=1)
            bad_vec = ~np.all(np.isfinite(vec), axis=1) | np.all(vec == 0.0, axis=1)
            ra = _float(table["ra_deg"]) if "ra_deg" in table.column_names else np.full(n, np.nan)
            dec = _float(table["dec_deg"]) if "dec_deg" in table.column_names else np.full(n, np.nan)
            bad_radec = ~(np.isfinite(ra) & np.isfinite(dec) & (np.abs(dec) <= 90.0))
            usable = (has_vec & ~bad_vec) | (has_radec & ~bad_radec)  # the vector first, else RA/Dec
            rc.mark("direction_invalid", spin & (has_vec | has_radec) & ~usable)
    else:
        rc.mark("clock_missing", _blank(table["remote_clock"]) | _blank(table["reference_clock"]))
        rc.mark("observable_unknown", ~_text_in(table["observable"], schemas.CLOCK_OBSERVABLES))
        is_freq = _text_in(table["observable"], ["fractional_frequency", "two_way_fractional_frequency"])
        if "averaging_s" in table.column_names:
            tau = _float(table["averaging_s"])
            bad_tau = ~(np.isfinite(tau) & (tau > 0))
        else:
            bad_tau = np.ones(n, dtype=bool)
        rc.mark("averaging_invalid", is_freq & bad_tau)

    value = _float(table["value"]) if "value" in table.column_names else np.full(n, np.nan)  # optional: orientation
    needs_value = ~_text_in(table["observable"], ["spin_axis"]) if record_kind == "orientation" else np.ones(n, dtype=bool)
    rc.mark("value_not_finite", needs_value & ~np.isfinite(value))
    sigma = _float(table["uncertainty"])
    rc.mark("uncertainty_invalid", ~(np.isfinite(sigma) & (sigma >= 0)))
    return rc, mjd, sod_ps


def find_duplicate_rows(pf: pq.ParquetFile, batch_rows: int) -> np.ndarray:
    """Global row indices of records whose id an earlier record already used."""
    finder = DuplicateFinder()
    for batch in pf.iter_batches(batch_size=batch_rows, columns=["record_id"]):
        finder.add(_plain(batch.column(0)))
    candidates = finder.finish()
    if len(candidates) == 0:
        return np.zeros(0, dtype=np.int64)
    # Re-read only the ids of the candidate rows, for the exact comparison.
    candidates = np.sort(np.asarray(candidates, dtype=np.int64))
    ids = []
    start = 0
    for batch in pf.iter_batches(batch_size=batch_rows, columns=["record_id"]):
        stop = start + batch.num_rows
        lo, hi = np.searchsorted(candidates, [start, stop])
        if hi > lo:
            ids.append(_plain(batch.column(0)).take(pa.array(candidates[lo:hi] - start)))
        start = stop
    return np.asarray(finder.confirm(candidates, pa.concat_arrays(ids)), dtype=np.int64)


@dataclass
class IngestBatch:
    good: pa.Table
    quarantined: pa.Table


def iter_ingest(path: str | Path, record_kind: str, leap: LeapTable, batch_rows: int) -> Iterator[IngestBatch]:
    """Stream one raw file: yields accepted and quarantined records batch by batch."""
    pf = open_input(path)
    check_schema(path, pf.schema_arrow, record_kind)
    try:
        duplicates = find_duplicate_rows(pf, batch_rows)
        start = 0
        for batch in pf.iter_batches(batch_size=batch_rows):
            table = pa.Table.from_batches([batch])
            n = table.num_rows
            rows = np.arange(start, start + n, dtype=np.int64)
            lo, hi = np.searchsorted(duplicates, [start, start + n])
            dup = np.zeros(n, dtype=bool)
            dup[duplicates[lo:hi] - start] = True
            rc, mjd, sod_ps = classify_batch(table, record_kind, leap, dup)
            bad = rc.bad()
            good = ~bad
            any_bad = bool(bad.any())
            out = table.filter(pa.array(good)) if any_bad else table
            for name in ("value", "uncertainty"):
                if name in out.column_names and out.schema.field(name).type != pa.float64():
                    out = out.set_column(out.schema.get_field_index(name), name, pc.cast(out[name], pa.float64()))
            out = out.append_column(_field("utc_mjd"), pa.array(mjd[good], pa.int32()))
            out = out.append_column(_field("utc_sod_ps"), pa.array(sod_ps[good], pa.int64()))
            out = out.append_column(_field("source_row"), pa.array(rows[good], pa.int64()))
            out = out.append_column(_field("ledger"), pa.repeat(pa.scalar(INGEST_TAG, pa.string()), out.num_rows))
            q = table.filter(pa.array(bad)) if any_bad else table.slice(0, 0)
            q = quarantine_table(q, INGEST_NAME, rc.reasons(bad), rows[bad])
            yield IngestBatch(out, q)
            start += n
    except (OSError, pa.ArrowException) as exc:
        raise InputFileError(path, f"unreadable or truncated Parquet file ({exc})") from None


def _field(name: str) -> pa.Field:
    for c in schemas.INGEST_COLUMNS:
        if c.name == name:
            return c.field()
    raise KeyError(name)


def quarantine_table(rows: pa.Table, step: str, reasons: pa.Array, source_rows: np.ndarray) -> pa.Table:
    """The quarantined rows, intact, plus step, reason and source row."""
    out = rows
    n = rows.num_rows
    out = out.append_column(QUARANTINE_COLUMNS[0], pa.array([step] * n if n else [], pa.string()))
    out = out.append_column(QUARANTINE_COLUMNS[1], reasons)
    if "source_row" not in out.column_names:
        out = out.append_column(_field("source_row"), pa.array(source_rows, pa.int64()))
    return out


def output_schema(raw_schema: pa.Schema) -> pa.Schema:
    fields = []
    for f in raw_schema:
        if f.name in ("value", "uncertainty"):
            f = pa.field(f.name, pa.float64(), metadata=f.metadata)
        fields.append(f)
    return pa.schema(fields + [c.field() for c in schemas.INGEST_COLUMNS])


def quarantine_schema(schema: pa.Schema) -> pa.Schema:
    """The schema of quarantined rows: the rows as they were, then step, reason and source row."""
    extra = [] if "source_row" in schema.names else [_field("source_row")]
    return pa.schema(list(schema) + list(QUARANTINE_COLUMNS) + extra)


Progress = Callable[[int], None]
