"""`relcorr diff RUN_A RUN_B`: record-by-record differences of the stage columns, records added and
removed, and the model and parameter changes between two runs (invented demo scenario)."""
from __future__ import annotations

import json
import math

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from pipelines.cli import main
from pipelines.diff import diff_runs
from pipelines.errors import EXIT_OK
from stages.stations import Stations
from stages.time_scales import TimeScales
from tests.test_verify import DAY1, DAY2, make_run

STATION_COLUMNS = [c.name for c in Stations.provides if pa.types.is_floating(c.type)]
TIME_COLUMNS = [c.name for c in TimeScales.provides if pa.types.is_floating(c.type)]


def _values(path, column) -> dict:
    t = pq.read_table(path, columns=["record_id", column])
    return dict(zip(t["record_id"].to_pylist(), t[column].to_pylist()))


def test_a_run_against_itself_has_no_difference(tmp_path, write_config, capsys):
    m = make_run(tmp_path, write_config)
    d = diff_runs(m, m)
    assert d["changes"]["any"] is False and d["changes"]["stages"] == {}
    assert d["changes"]["software"] == {} and d["changes"]["config_sha256"] is None
    rows = json.loads(m.read_text())["totals"]["rows_out"]
    assert d["records"] == {"in_both": rows, "removed_count": 0, "added_count": 0, "removed": [], "added": []}
    assert set(d["columns"]) == set(STATION_COLUMNS + TIME_COLUMNS)
    for name, s in d["columns"].items():
        assert (s["count"], s["changed"], s["max_abs"], s["mean"], s["rms"]) == (rows, 0, 0.0, 0.0, 0.0), name
        assert s["largest"] == [] and s["nan_mismatch"] == 0

    out_json = tmp_path / "diff.json"
    capsys.readouterr()
    assert main(["diff", str(m), str(m), "--json", str(out_json)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "model and parameter changes (A -> B):\n  none" in out
    assert json.loads(out_json.read_text()) == json.loads(json.dumps(d))


def test_changed_parameter_shows_in_changes_and_in_its_columns_only(tmp_path, write_config, capsys):
    ma = make_run(tmp_path, write_config, tdb_site="auto")
    mb = make_run(tmp_path, write_config, tdb_site="geocentre")
    d = diff_runs(ma, mb)

    ch = d["changes"]
    assert set(ch["stages"]) == {"time_scales"}
    ts = ch["stages"]["time_scales"]
    assert ts["params"] == {"tdb_site": {"a": "auto", "b": "geocentre"}}
    # the geocentric TDB needs no Earth orientation: the model identity goes away
    assert set(ts["models"]) == {"earth orientation"} and ts["models"]["earth orientation"]["b"] is None
    assert ts["models"]["earth orientation"]["a"]["source"] == "astropy-iers-data"
    assert "version" not in ts and ch["stages_added"] == ch["stages_removed"] == [] and ch["chain"] is None

    changed = {c for c, s in d["columns"].items() if s["changed"]}
    # TDB moves from the station to the geocentre (about a microsecond); TAI, TT, TCG and the station
    # positions do not depend on it
    assert {"tdb_sod_s", "tdb_minus_tt_s"} <= changed <= {"tdb_sod_s", "tdb_minus_tt_s", "tcb_sod_s", "tcb_minus_tdb_s"}
    for c in STATION_COLUMNS + ["tai_sod_s", "tt_sod_s", "tcg_sod_s", "tcg_minus_tt_s"]:
        assert d["columns"][c]["changed"] == 0 and d["columns"][c]["max_abs"] == 0.0, c

    # run A's products are kept under their fingerprints after run B: each run's records come from its own
    ma_json, mb_json = json.loads(ma.read_text()), json.loads(mb.read_text())
    for part, part_b in zip(ma_json["partitions"], mb_json["partitions"]):
        assert d["sources"][part["partition"]]["a"] == part["steps"][-1]["outputs"][0]["path"]
        assert d["sources"][part["partition"]]["b"] == part_b["steps"][-1]["outputs"][0]["path"]
        assert d["sources"][part["partition"]]["a"] != d["sources"][part["partition"]]["b"]

    # the statistics, recomputed here from the files themselves
    diffs = []
    for part in ma_json["partitions"]:
        a = _values(d["sources"][part["partition"]]["a"], "tdb_minus_tt_s")
        b = _values(d["sources"][part["partition"]]["b"], "tdb_minus_tt_s")
        assert a.keys() == b.keys()
        diffs += [(b[k] - a[k], part["partition"], k) for k in b]
    values = np.array([x[0] for x in diffs])
    s = d["columns"]["tdb_minus_tt_s"]
    assert s["count"] == len(diffs) and s["changed"] == np.count_nonzero(values)
    assert math.isclose(s["mean"], values.mean(), rel_tol=1e-9)
    assert math.isclose(s["rms"], float(np.sqrt(np.mean(values ** 2))), rel_tol=1e-9)
    assert s["max_abs"] == np.abs(values).max() and 1e-8 < s["max_abs"] < 1e-5
    top = sorted(diffs, key=lambda x: -abs(x[0]))[:5]
    assert [(x["partition"], x["record_id"]) for x in s["largest"]] == [(p, k) for _, p, k in top]

    capsys.readouterr()
    assert main(["diff", str(ma), str(mb)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "time_scales: parameter tdb_site: 'auto' -> 'geocentre'" in out
    assert "time_scales: model earth orientation:" in out and "-> (none)" in out


def test_dropped_and_new_input_rows_are_removed_and_added(tmp_path, write_config):
    ma = make_run(tmp_path, write_config)

    def edit(raw):
        path = raw / f"{DAY2}.parquet"
        t = pq.read_table(path)
        dropped = t["record_id"][100].as_py()
        new = t.slice(101, 1).set_column(0, "record_id", pa.array(["TRK-NEW-000001"]))
        keep = pc.not_equal(pa.array(np.arange(t.num_rows)), 100)
        pq.write_table(pa.concat_tables([t.filter(keep), new]), path)
        edit.dropped = dropped

    mb = make_run(tmp_path, write_config, edit_raw=edit)
    d = diff_runs(ma, mb)
    assert d["records"]["removed"] == [{"partition": DAY2, "record_id": edit.dropped}]
    assert d["records"]["added"] == [{"partition": DAY2, "record_id": "TRK-NEW-000001"}]
    rows_a = json.loads(ma.read_text())["totals"]["rows_out"]
    assert d["records"]["in_both"] == rows_a - 1
    # the input changed, not a model: no model change, and the records in both are unchanged
    assert d["changes"]["any"] is False
    assert all(s["changed"] == 0 for s in d["columns"].values())
    assert d["sources"][DAY1]["a"] == d["sources"][DAY1]["b"]  # day one's product is the same file
