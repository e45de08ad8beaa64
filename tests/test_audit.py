"""`relcorr audit MANIFEST --record ID | --stage NAME[@VERSION]`: the provenance of one record, and the
records one stage touched, checked against the product and quarantine files read directly
(invented demo scenario)."""
from __future__ import annotations

import json
import math

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from pipelines.audit import audit_record, audit_stage
from pipelines.cli import main
from pipelines.errors import EXIT_CONFIG, EXIT_OK
from stages.stations import Stations
from stages.time_scales import TimeScales
from tests.test_verify import DAY1, DAY2, make_run

PROVIDES = {"stations": [c.name for c in Stations.provides], "time_scales": [c.name for c in TimeScales.provides],
            "ingest": ["utc_mjd", "utc_sod_ps", "source_row"]}


def _same(a, b) -> bool:
    return (isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b)) or a == b


def _links_every_fifth(raw):
    """Make every fifth good record of day two a link between spacecraft: the stations stage leaves
    those untouched (no station@1 in their ledger), time_scales still touches them."""
    path = raw / f"{DAY2}.parquet"
    t = pq.read_table(path)
    i = np.arange(t.num_rows)
    link = (i % 5 == 0) & (i >= 50)
    obs = pc.if_else(pa.array(link), pa.scalar("link_range_one_way"), t["observable"])
    pq.write_table(t.set_column(t.schema.get_field_index("observable"), "observable", obs), path)


def test_record_lists_its_stages_in_order_with_the_product_values(tmp_path, write_config, capsys):
    m = make_run(tmp_path, write_config)
    manifest = json.loads(m.read_text())
    path = tmp_path / "products" / f"{DAY2}.parquet"
    # every column but the raw time tag (nanosecond timestamps on day two: no exact Python value)
    product = pq.read_table(path, columns=[n for n in pq.read_schema(path).names if n != "time_tag"]).to_pylist()
    row = product[123]
    rid = row["record_id"]

    r = audit_record(m, rid)
    assert r["quarantined"] == [] and len(r["found"]) == 1
    f = r["found"][0]
    assert f["partition"] == DAY2 and f["source"] == "product" and f["ledger"] == row["ledger"]
    tags = [s["tag"] for s in f["steps"]]
    assert tags == row["ledger"].split(";") == ["ingest@1", "stations@1", "time_scales@1"]
    assert f["untouched_steps"] == []
    part = next(p for p in manifest["partitions"] if p["partition"] == DAY2)
    for s in f["steps"]:
        act = next(a for a in part["steps"] if a["step"] == s["step"])
        assert s["fingerprint"] == act["fingerprint"] and s["produced_by_run"] == manifest["run"]["id"]
        assert s["models"] == act["definition"]["models"]
        if s["step"] != "ingest":
            assert s["params"] == next(x for x in manifest["stages"] if x["name"] == s["step"])["params"]
        assert list(s["columns"]) == PROVIDES[s["step"]]
        for c, v in s["columns"].items():
            assert _same(v, row[c]), (s["step"], c)

    capsys.readouterr()
    assert main(["audit", str(m), "--record", rid]) == EXIT_OK
    out = capsys.readouterr().out
    positions = [out.index(f"{k}. {t}") for k, t in enumerate(tags, start=1)]
    assert positions == sorted(positions)
    assert f"tdb_minus_tt_s  = {row['tdb_minus_tt_s']!r}" in out
    assert f"site_itrs_x_m    = {row['site_itrs_x_m']!r}" in out


def test_quarantined_records_report_step_and_reason(tmp_path, write_config, capsys):
    m = make_run(tmp_path, write_config)
    q = pq.read_table(tmp_path / "products" / f"{DAY1}.quarantine.parquet").to_pylist()
    by_step = {}
    for row in q:
        by_step.setdefault(row["quarantine_step"], row)
    assert {"ingest", "stations"} <= set(by_step)
    for step, row in by_step.items():
        r = audit_record(m, row["record_id"])
        hits = [x for x in r["quarantined"] if x["source_row"] == row["source_row"]]
        assert len(hits) == 1, step
        assert (hits[0]["step"], hits[0]["reason"], hits[0]["partition"]) == (step, row["quarantine_reason"], DAY1)
        assert hits[0]["steps_before"] == (["ingest"] if step == "stations" else [])
    # a duplicate id: the first record is in the product, the later one quarantined
    dup = next(row for row in q if row["quarantine_reason"] == "record_id_duplicate")
    r = audit_record(m, dup["record_id"])
    assert len(r["found"]) == 1 and [x["reason"] for x in r["quarantined"]] == ["record_id_duplicate"]

    row = by_step["stations"]
    capsys.readouterr()
    assert main(["audit", str(m), "--record", row["record_id"]]) == EXIT_OK
    assert f"QUARANTINED by step stations with reason {row['quarantine_reason']}" in capsys.readouterr().out


def test_unknown_record_is_one_line_and_exit_2(tmp_path, write_config, capsys):
    m = make_run(tmp_path, write_config)
    capsys.readouterr()
    assert main(["audit", str(m), "--record", "TRK-NOT-THERE"]) == EXIT_CONFIG
    err = capsys.readouterr().err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1 and "TRK-NOT-THERE" in err
    assert main(["audit", str(m), "--stage", "stations@one"]) == EXIT_CONFIG


def test_stage_counts_equal_the_ledgers_in_the_products(tmp_path, write_config, capsys):
    m = make_run(tmp_path, write_config, edit_raw=_links_every_fifth)
    ledgers = {p: pq.read_table(tmp_path / "products" / f"{p}.parquet", columns=["record_id", "ledger"]).to_pylist()
               for p in (DAY1, DAY2)}

    def expected(tag):
        return {p: [r["record_id"] for r in rows if tag in r["ledger"].split(";")] for p, rows in ledgers.items()}

    stations = expected("stations@1")
    assert 0 < len(stations[DAY2]) < len(ledgers[DAY2])  # the links are not touched by stations
    for query, tag in (("stations@1", "stations@1"), ("stations", "stations@1"), ("time_scales@1", "time_scales@1")):
        r = audit_stage(m, query, list_ids=True)
        want = expected(tag)
        assert {p["partition"]: p["touched"] for p in r["partitions"]} == {p: len(v) for p, v in want.items()}, query
        assert {p["partition"]: p["ids"] for p in r["partitions"]} == want, query
        assert r["touched"] == sum(len(v) for v in want.values()) and r["in_chain"]
    assert audit_stage(m, "time_scales")["touched"] == sum(len(v) for v in ledgers.values())
    assert audit_stage(m, "stations@2")["touched"] == 0
    assert audit_stage(m, "station")["touched"] == 0  # a prefix of a name is not the name
    link_id = next(r["record_id"] for r in ledgers[DAY2] if "stations@1" not in r["ledger"].split(";"))
    link = audit_record(m, link_id)["found"][0]
    assert [s["tag"] for s in link["steps"]] == ["ingest@1", "time_scales@1"]
    assert link["untouched_steps"] == ["stations@1"]

    capsys.readouterr()
    assert main(["audit", str(m), "--stage", "stations@1"]) == EXIT_OK
    out = capsys.readouterr().out
    assert f"{DAY2:<28}{len(stations[DAY2]):>10}{len(ledgers[DAY2]):>10}" in out


def test_audit_of_an_older_run_reads_its_own_values(tmp_path, write_config):
    ma = make_run(tmp_path, write_config, tdb_site="auto")
    make_run(tmp_path, write_config, tdb_site="geocentre")
    part = next(p for p in json.loads(ma.read_text())["partitions"] if p["partition"] == DAY1)
    a_records = pq.read_table(part["steps"][-2]["outputs"][0]["path"]).to_pylist()
    row = a_records[40]
    r = audit_record(ma, row["record_id"])
    f = r["found"][0]
    # run A's product is kept under its fingerprint after run B (the stable name now points at B's)
    assert f["source"] == "product" and f["file"] == part["steps"][-1]["outputs"][0]["path"]
    ts = next(s for s in f["steps"] if s["step"] == "time_scales")
    assert ts["params"]["tdb_site"] == "auto" and ts["columns"]["tdb_minus_tt_s"] == row["tdb_minus_tt_s"]
    now = pq.read_table(tmp_path / "products" / f"{DAY1}.parquet").to_pylist()
    later = next(x for x in now if x["record_id"] == row["record_id"])
    assert later["tdb_minus_tt_s"] != row["tdb_minus_tt_s"]  # the current product holds run B's value
