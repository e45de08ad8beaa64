"""Ingest of orientation records (README, "Record schemas"): every bad record goes to quarantine with
its reason code and the row intact; spin_axis records need no `value`, angle records need one."""
from __future__ import annotations

import math

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from pipelines.errors import InputFileError
from pipelines.ingest import iter_ingest
from stages.physics.leap_seconds import load_leap_table

SPIN = dict(record_id="s", body="KESTREL-G", time_tag="2025-03-02T00:00:00Z", observable="spin_axis",
            dir_x=0.6, dir_y=0.0, dir_z=0.8, ra_deg=None, dec_deg=None, value=None, uncertainty=3e-7)
SCHEMA = pa.schema([("record_id", pa.string()), ("body", pa.string()), ("time_tag", pa.string()),
                    ("observable", pa.string())] + [(c, pa.float64()) for c in
                                                    ("dir_x", "dir_y", "dir_z", "ra_deg", "dec_deg", "value", "uncertainty")])
RADEC = dict(dir_x=None, dir_y=None, dir_z=None, ra_deg=40.0, dec_deg=20.0)
NODE = dict(observable="node_angle", dir_x=None, dir_y=None, dir_z=None, value=30.0)

CASES = [
    ("body_missing", dict(body=None)),
    ("body_missing", dict(body="  ")),
    ("observable_unknown", dict(observable="spin_rate")),
    ("direction_missing", dict(dir_z=None)),
    ("direction_missing", dict(dir_x=None, dir_y=None, dir_z=None)),
    ("direction_missing", dict(RADEC, dec_deg=None)),
    ("direction_invalid", dict(dir_y=math.nan)),
    ("direction_invalid", dict(dir_x=0.0, dir_y=0.0, dir_z=0.0)),
    ("direction_invalid", dict(RADEC, dec_deg=90.5)),
    ("direction_invalid", dict(RADEC, ra_deg=math.inf)),
    ("value_not_finite", dict(NODE, value=None)),
    ("value_not_finite", dict(NODE, observable="perigee_angle", value=math.nan)),
    ("uncertainty_invalid", dict(uncertainty=-1.0)),
]
VALID = [
    dict(),                                   # unit vector, no value
    dict(RADEC),                              # RA/Dec instead of the vector
    dict(dir_z=math.nan, ra_deg=40.0, dec_deg=20.0),   # a NaN vector component, but a good RA/Dec
    dict(dir_x=1.5, dir_y=0.0, dir_z=2.0),    # not a unit vector: the precession stage judges the norm
    dict(NODE),
    dict(NODE, observable="perigee_angle", value=-400.0),   # angles are not wrapped
]


def _ingest(tmp_path, rows, schema=SCHEMA):
    path = tmp_path / "o.parquet"
    pq.write_table(pa.Table.from_pylist(rows, schema=schema), path)
    good, bad = [], []
    for b in iter_ingest(path, "orientation", load_leap_table(), 1000):
        good.append(b.good)
        bad.append(b.quarantined)
    return path, pa.concat_tables(good), pa.concat_tables(bad)


def test_each_bad_orientation_record_is_quarantined_with_its_reason(tmp_path):
    rows = [dict(SPIN, record_id=f"bad{i}", **c) for i, (_, c) in enumerate(CASES)]
    rows += [dict(SPIN, record_id=f"ok{i}", **c) for i, c in enumerate(VALID)]
    path, good, bad = _ingest(tmp_path, rows)
    got = dict(zip(bad["source_row"].to_pylist(), bad["quarantine_reason"].to_pylist()))
    assert [got.get(i) for i in range(len(CASES))] == [r for r, _ in CASES]
    assert good["record_id"].to_pylist() == [f"ok{i}" for i in range(len(VALID))]
    assert good.schema.field("value").type == pa.float64()
    raw = pq.read_table(path).take(pa.array(bad["source_row"]))
    for name in raw.column_names:  # the quarantined rows are the raw rows, intact (repr: NaN == NaN)
        assert list(map(repr, bad[name].to_pylist())) == list(map(repr, raw[name].to_pylist())), name


def test_spin_records_need_no_value_column(tmp_path):
    schema = pa.schema([f for f in SCHEMA if f.name not in ("value", "ra_deg", "dec_deg")])
    rows = [{k: v for k, v in dict(SPIN, record_id=f"r{i}").items() if k in schema.names} for i in range(3)]
    rows.append({k: v for k, v in dict(SPIN, record_id="node", observable="node_angle").items() if k in schema.names})
    _, good, bad = _ingest(tmp_path, rows, schema)
    assert good["record_id"].to_pylist() == ["r0", "r1", "r2"]
    assert bad["quarantine_reason"].to_pylist() == ["value_not_finite"]   # an angle record must carry a value


@pytest.mark.parametrize("drop", ["body", "observable", "uncertainty"])
def test_required_orientation_columns(tmp_path, drop):
    path = tmp_path / "o.parquet"
    pq.write_table(pa.Table.from_pylist([SPIN], schema=SCHEMA).drop_columns([drop]), path)
    with pytest.raises(InputFileError, match=f"missing required column '{drop}'"):
        list(iter_ingest(path, "orientation", load_leap_table(), 1000))
