"""Ingest: every bad-record case goes to quarantine with its reason code and the row intact.

Leap-second facts: IERS Bulletin C 52 (a positive leap second at the end of
2016-12-31) and IERS Bulletin C 49 (end of 2015-06-30); no leap second at
the end of 2017-01-01 or 2016-12-30.  UTC with integer leap seconds starts
1972-01-01 (ITU-R TF.460-6).
"""
from __future__ import annotations

import math

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from pipelines.errors import InputFileError
from pipelines.ingest import iter_ingest
from stages.physics.leap_seconds import load_leap_table

GOOD_ROW = dict(record_id="ok", station="CFL", target="TERN-4", observable="range_two_way",
                time_tag="2016-12-31T12:00:00Z", value=1000.0, unit="s", uncertainty=1e-9, transmit_station="CFL",
                count_s=None, reference_frequency_hz=None, turnaround_ratio=None)
DOPPLER = dict(observable="doppler_two_way", unit="Hz", count_s=60.0, reference_frequency_hz=7.16e9)

# (reason, changes to a good row)
TRACKING_CASES = [
    ("time_tag_missing", dict(time_tag=None)),
    ("time_tag_unparseable", dict(time_tag="31/12/2016 12:00")),
    ("time_tag_invalid_field", dict(time_tag="2017-02-29T00:00:00Z")),
    ("time_tag_not_utc", dict(time_tag="2016-12-31T12:00:00-05:00")),
    ("time_tag_out_of_span", dict(time_tag="1971-12-31T23:59:59Z")),
    ("time_tag_out_of_span", dict(time_tag="2199-01-01T00:00:00Z")),
    ("leap_second_invalid", dict(time_tag="2017-01-01T23:59:60Z")),
    ("leap_second_invalid", dict(time_tag="2016-12-30T23:59:60.5Z")),
    ("record_id_missing", dict(record_id=None)),
    ("record_id_missing", dict(record_id="  ")),
    ("station_missing", dict(station=None)),
    ("station_missing", dict(station="")),
    ("station_missing", dict(observable="range_three_way", transmit_station=None)),
    ("target_missing", dict(target=None)),
    ("observable_unknown", dict(observable="range_four_way")),
    ("unit_invalid", dict(unit="km")),
    ("unit_invalid", dict(observable="doppler_two_way", unit="s")),
    ("value_not_finite", dict(value=math.nan)),
    ("value_not_finite", dict(value=math.inf)),
    ("value_not_finite", dict(value=None)),
    ("uncertainty_invalid", dict(uncertainty=-1.0)),
    ("uncertainty_invalid", dict(uncertainty=math.nan)),
    # Doppler records (README, "Record schemas": count_s > 0; reference_frequency_hz > 0 when in Hz)
    ("count_interval_invalid", dict(DOPPLER, count_s=0.0)),
    ("count_interval_invalid", dict(DOPPLER, count_s=-60.0)),
    ("count_interval_invalid", dict(DOPPLER, count_s=None)),
    ("count_interval_invalid", dict(DOPPLER, observable="doppler_one_way", unit="1", count_s=math.inf)),
    ("reference_frequency_invalid", dict(DOPPLER, reference_frequency_hz=None)),
    ("reference_frequency_invalid", dict(DOPPLER, reference_frequency_hz=-7.16e9)),
    ("reference_frequency_invalid", dict(DOPPLER, turnaround_ratio=0.0)),
    ("reference_frequency_invalid", dict(DOPPLER, turnaround_ratio=math.nan)),
]

VALID_EDGE_CASES = [
    dict(time_tag="2016-12-31T23:59:60Z"),            # leap second (Bulletin C 52)
    dict(time_tag="2015-06-30T23:59:60.999999999999Z"),  # leap second (Bulletin C 49), ps digits
    dict(time_tag="1972-01-01T00:00:00Z"),            # first day of integer-second UTC
    dict(DOPPLER),
    dict(DOPPLER, observable="doppler_one_way", unit="1", reference_frequency_hz=None),  # y needs no frequency
    dict(DOPPLER, turnaround_ratio=880.0 / 749.0),
    dict(observable="range_one_way", unit="m"),
]


def _write(tmp_path, rows, name="raw.parquet", schema=None):
    path = tmp_path / name
    pq.write_table(pa.Table.from_pylist(rows, schema=schema), path)
    return path


def _ingest(path, kind="tracking", batch_rows=1000):
    good, bad = [], []
    for b in iter_ingest(path, kind, load_leap_table(), batch_rows):
        good.append(b.good)
        bad.append(b.quarantined)
    return pa.concat_tables(good), pa.concat_tables(bad)


def test_each_bad_tracking_record_is_quarantined_with_its_reason(tmp_path):
    rows = [dict(GOOD_ROW, record_id=f"bad{i}", **change) if "record_id" not in change else dict(GOOD_ROW, **change)
            for i, (_, change) in enumerate(TRACKING_CASES)]
    rows += [dict(GOOD_ROW, record_id=f"edge{i}", **c) for i, c in enumerate(VALID_EDGE_CASES)]
    path = _write(tmp_path, rows)
    good, bad = _ingest(path)
    assert good.num_rows + bad.num_rows == len(rows)
    got = dict(zip(bad["source_row"].to_pylist(), bad["quarantine_reason"].to_pylist()))
    for i, (reason, change) in enumerate(TRACKING_CASES):
        assert got.get(i) == reason, (change, got.get(i))
    assert sorted(good["record_id"].to_pylist()) == [f"edge{i}" for i in range(len(VALID_EDGE_CASES))]
    # the quarantined rows are the raw rows, intact
    raw = pq.read_table(path)
    original = raw.take(pa.array(bad["source_row"]))
    for name in raw.column_names:  # repr: NaN must compare equal to NaN here
        assert list(map(repr, bad[name].to_pylist())) == list(map(repr, original[name].to_pylist())), name
        assert bad.schema.field(name).type == raw.schema.field(name).type
    assert set(bad["quarantine_step"].to_pylist()) == {"ingest"}


def test_leap_second_tag_is_kept_exactly(tmp_path):
    path = _write(tmp_path, [dict(GOOD_ROW, time_tag="2016-12-31T23:59:60.123456789012Z")])
    good, bad = _ingest(path)
    assert bad.num_rows == 0
    # MJD 57753 = 2016-12-31 (MJD = JD - 2400000.5; reference library: datetime.date.toordinal - 678576)
    import datetime

    assert good["utc_mjd"].to_pylist() == [datetime.date(2016, 12, 31).toordinal() - 678576]
    assert good["utc_sod_ps"].to_pylist() == [86400_123456789012]


def test_duplicates_across_batches_keep_the_first(tmp_path):
    rng = np.random.default_rng(5)
    ids = [f"id{k}" for k in rng.integers(0, 300, 2000)]
    rows = [dict(GOOD_ROW, record_id=i) for i in ids]
    path = _write(tmp_path, rows)
    good, bad = _ingest(path, batch_rows=1000)
    seen, expected_dups = set(), []
    for row, i in enumerate(ids):  # plain-Python reference, test only
        if i in seen:
            expected_dups.append(row)
        seen.add(i)
    assert sorted(bad["source_row"].to_pylist()) == expected_dups
    assert set(bad["quarantine_reason"].to_pylist()) == {"record_id_duplicate"}
    assert sorted(good["record_id"].to_pylist()) == sorted(seen)


CLOCK_ROW = dict(record_id="c", remote_clock="MRT2-RB", reference_clock="NORTHLAB-HM1",
                 time_tag="2017-01-01T00:00:00Z", observable="fractional_frequency", value=4.4e-10,
                 uncertainty=1e-13, averaging_s=300.0)


@pytest.mark.parametrize("reason, change", [
    ("clock_missing", dict(remote_clock=None)),
    ("clock_missing", dict(reference_clock="")),
    ("observable_unknown", dict(observable="phase")),
    ("averaging_invalid", dict(averaging_s=0.0)),
    ("averaging_invalid", dict(averaging_s=-300.0)),
    ("averaging_invalid", dict(averaging_s=None)),
])
def test_bad_clock_records(tmp_path, reason, change):
    path = _write(tmp_path, [CLOCK_ROW, dict(CLOCK_ROW, record_id="bad", **change),
                             dict(CLOCK_ROW, record_id="offset", observable="time_offset", averaging_s=None)])
    good, bad = _ingest(path, "clock")
    assert bad["quarantine_reason"].to_pylist() == [reason]
    assert good["record_id"].to_pylist() == ["c", "offset"]


def test_arrow_timestamps_are_accepted(tmp_path):
    schema = pa.schema([(k, pa.string()) for k in GOOD_ROW if k != "time_tag"] + [("time_tag", pa.timestamp("us", tz="UTC"))])
    numbers = ("value", "uncertainty", "count_s", "reference_frequency_hz", "turnaround_ratio")
    schema = pa.schema([f if f.name not in numbers else pa.field(f.name, pa.float64()) for f in schema])
    import datetime

    t = datetime.datetime(2020, 2, 29, 23, 59, 59, 999999, tzinfo=datetime.timezone.utc)
    path = _write(tmp_path, [dict(GOOD_ROW, time_tag=t)], schema=schema)
    good, bad = _ingest(path)
    assert good["utc_mjd"].to_pylist() == [datetime.date(2020, 2, 29).toordinal() - 678576]
    assert good["utc_sod_ps"].to_pylist() == [86399_999999_000000]


@pytest.mark.parametrize("mutate, words", [
    (lambda t: t.drop_columns(["station"]), "missing required column 'station'"),
    (lambda t: t.set_column(t.schema.get_field_index("uncertainty"), "uncertainty", pa.array(["x"])),
     "column 'uncertainty' has type string, expected floating point or integer"),
    (lambda t: t.set_column(t.schema.get_field_index("time_tag"), "time_tag", pa.array([1.5])),
     "column 'time_tag' has type double, expected timestamp or ISO 8601 string"),
    (lambda t: t.append_column("ledger", pa.array(["mine"])), "reserved for relcorr's own use"),
])
def test_file_level_faults_raise_a_clear_error(tmp_path, mutate, words):
    table = mutate(pa.Table.from_pylist([GOOD_ROW]))
    path = tmp_path / "f.parquet"
    pq.write_table(table, path)
    with pytest.raises(InputFileError) as ei:
        _ingest(path)
    assert words in str(ei.value) and str(path) in str(ei.value)


def test_truncated_file(tmp_path):
    path = _write(tmp_path, [GOOD_ROW] * 100)
    data = path.read_bytes()
    path.write_bytes(data[:-20])
    with pytest.raises(InputFileError, match="unreadable or truncated"):
        _ingest(path)
