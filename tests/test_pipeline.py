"""End-to-end runs of the luigi chain on generated data (the demo scenario, invented).

What is checked here is the pipeline's own contract (design.md and README):
rows in = rows out + rows quarantined, reuse by fingerprint, byte-identical
reruns, atomic outputs, file-level faults isolated to their partition.  The
physics of the numbers is checked against published references elsewhere.
"""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from pipelines.cli import main
from pipelines.errors import EXIT_OK, EXIT_PARTIAL

CONFIG = """
[pipeline]
name = "e2e"
record_kind = "tracking"
inputs = ["raw/*.parquet"]
batch_rows = 1000

[demo]
seed = 3
records_per_partition = 2500
partitions = 2

[[stages]]
use = "time_scales"
grid_step_s = {grid}
"""

PLUGIN_STAGE = """
[[stages]]
use = "range_in_metres"
scale = {scale}
"""


def digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.glob("*.parquet"))}


def manifest(folder: Path) -> dict:
    latest = sorted((folder / "products" / "manifests").glob("*.json"))[-1]
    return json.loads(latest.read_text())


def statuses(m: dict) -> dict[tuple[str, str], str]:
    return {(p["partition"], a["step"]): a["status"] for p in m["partitions"] for a in p["steps"]}


def run(cfg: Path, capsys=None, *extra) -> int:
    return main(["run", str(cfg), *extra])


def test_demo_run_balances_and_rerun_reuses_everything(tmp_path, write_config, capsys):
    cfg = write_config(CONFIG.format(grid=3600.0))
    assert run(cfg) == EXIT_OK
    out = capsys.readouterr().out
    assert "(balanced)" in out and "status: succeeded" in out
    m = manifest(tmp_path)
    assert m["manifest_version"] == 1 and m["run"]["status"] == "succeeded"
    assert set(statuses(m).values()) == {"ran"}
    for p in m["partitions"]:
        b = p["balance"]
        assert b["balanced"] and b["rows_in"] == 2500 and b["rows_out"] + b["rows_quarantined"] == 2500
        # the counts come from the files themselves
        assert pq.read_metadata(tmp_path / "products" / f"{p['partition']}.parquet").num_rows == b["rows_out"]
        for a in p["steps"]:
            assert a["balanced"]
            for o in a["outputs"]:
                assert o["sha256"] == hashlib.sha256(Path(o["path"]).read_bytes()).hexdigest()
    assert m["config"]["sha256"] == hashlib.sha256(cfg.read_bytes()).hexdigest()
    assert m["config"]["resolved"]["stages"][0] == {"use": "time_scales", "grid_step_s": 3600.0, "tdb_site": "auto"}
    ts = [a for a in m["partitions"][0]["steps"] if a["step"] == "time_scales"][0]
    assert ts["flags"] == {"tdb_site": {"0": ts["rows_out"]}, "eop_status": {"0": ts["rows_out"]}}
    assert ts["references"] and all("IAU" in r or "IERS" in r or "Fairhead" in r for r in ts["references"])
    roles = {a["role"] for a in m["auxiliary"]}
    assert "leap seconds" in roles
    assert all(m["software"][k] for k in ("relcorr", "numpy", "astropy", "pyerfa", "pyarrow", "luigi", "astropy-iers-data"))
    text = json.dumps(m)
    assert "HOME" not in text and "USER" not in text

    before = digest(tmp_path / "products")
    assert run(cfg) == EXIT_OK
    m2 = manifest(tmp_path)
    assert m2["run"]["id"] != m["run"]["id"]
    assert set(statuses(m2).values()) == {"reused"}
    assert digest(tmp_path / "products") == before


def test_every_record_carries_its_ledger_and_units(tmp_path, write_config, plugin_on_path):
    cfg = write_config(CONFIG.format(grid=3600.0) + PLUGIN_STAGE.format(scale=1.0))
    assert run(cfg) == EXIT_OK
    product = pq.read_table(tmp_path / "products" / "tracking-2016-12-31.parquet")
    ledger = set(product["ledger"].to_pylist())
    # the plugin touches only records in seconds (all of the demo's)
    assert ledger == {"ingest@1;time_scales@1;range_in_metres@1"}
    units = {f.name: f.metadata[b"unit"].decode() for f in product.schema if f.metadata and b"unit" in f.metadata}
    assert units["tdb_sod_s"] == "s" and units["range_m"] == "m" and units["utc_sod_ps"] == "ps"
    # every original raw column is kept, unchanged
    raw = pq.read_table(tmp_path / "raw" / "tracking-2016-12-31.parquet")
    kept = raw.take(pa.array(product["source_row"]))
    for name in raw.column_names:
        assert product[name].equals(kept[name]), name


def test_changing_one_parameter_reruns_that_stage_and_later_only(tmp_path, write_config, plugin_on_path):
    cfg = write_config(CONFIG.format(grid=3600.0) + PLUGIN_STAGE.format(scale=1.0))
    assert run(cfg) == EXIT_OK
    cfg.write_text(CONFIG.format(grid=3600.0) + PLUGIN_STAGE.format(scale=1.5))
    assert run(cfg) == EXIT_OK
    st = statuses(manifest(tmp_path))
    for part in ("tracking-2016-12-31", "tracking-2017-01-01"):
        assert st[(part, "ingest")] == "reused"
        assert st[(part, "time_scales")] == "reused"
        assert st[(part, "range_in_metres")] == "ran"
        assert st[(part, "product")] == "ran"
    cfg.write_text(CONFIG.format(grid=1800.0) + PLUGIN_STAGE.format(scale=1.5))
    assert run(cfg) == EXIT_OK
    st = statuses(manifest(tmp_path))
    assert st[("tracking-2016-12-31", "ingest")] == "reused"
    assert st[("tracking-2016-12-31", "time_scales")] == "ran"
    assert st[("tracking-2016-12-31", "range_in_metres")] == "ran"


def test_interrupted_run_resumes_to_identical_bytes(tmp_path, write_config, monkeypatch):
    clean = tmp_path / "clean"
    clean.mkdir()
    (clean / "run.toml").write_text(CONFIG.format(grid=3600.0))
    assert run(clean / "run.toml") == EXIT_OK

    broken = tmp_path / "broken"
    broken.mkdir()
    (broken / "run.toml").write_text(CONFIG.format(grid=3600.0))
    import stages.time_scales as mod

    calls = {"n": 0}
    original = mod.TimeScales.apply

    def dies_on_second_batch(self, table, params, context):
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt("power cut")  # not an Exception: like a kill, the task just stops
        return original(self, table, params, context)

    monkeypatch.setattr(mod.TimeScales, "apply", dies_on_second_batch)
    with pytest.raises(KeyboardInterrupt):
        from pipelines.cli import run_config

        run_config(str(broken / "run.toml"))
    # what a killed writer leaves: a stray temporary beside every output not yet written,
    # and an output file without the expected fingerprint (e.g. from an older version)
    from pipelines.config import load_config
    from pipelines.plan import load_plan

    cfg = load_config(broken / "run.toml")
    plan = load_plan(str(cfg.path), cfg.sha256, str(cfg.base_dir))
    strays = []
    for pp in plan.partitions.values():
        for step in pp.steps:
            if not step.output.exists():
                step.output.parent.mkdir(parents=True, exist_ok=True)
                stray = step.output.with_name(f".{step.output.name}.tmp-99999")
                stray.write_bytes(b"partial")
                strays.append(stray)
    assert strays
    unfinished = next(s for pp in plan.partitions.values() for s in pp.steps if not s.output.exists() and s.name != "product")
    pq.write_table(pa.table({"x": [1]}), unfinished.output)
    monkeypatch.setattr(mod.TimeScales, "apply", original)
    assert run(broken / "run.toml") == EXIT_OK
    assert digest(broken / "products") == digest(clean / "products")
    assert list((broken / "work").rglob("*.tmp-*")) == []
    assert list((broken / "products").rglob("*.tmp-*")) == []


def test_file_level_faults_stop_only_their_partition(tmp_path, write_config, capsys):
    cfg = write_config(CONFIG.format(grid=3600.0))
    assert run(cfg) == EXIT_OK
    raw = tmp_path / "raw"
    good = pq.read_table(raw / "tracking-2016-12-31.parquet")
    # truncated Parquet
    data = (raw / "tracking-2017-01-01.parquet").read_bytes()
    (raw / "truncated.parquet").write_bytes(data[: len(data) // 2])
    # missing required column
    pq.write_table(good.drop_columns(["uncertainty"]), raw / "nocolumn.parquet")
    # wrong type
    pq.write_table(good.set_column(good.schema.get_field_index("value"), "value",
                                   pa.array([str(v) for v in good["value"].to_pylist()])), raw / "wrongtype.parquet")
    # not Parquet at all
    (raw / "notparquet.parquet").write_text("station,value\nCFL,1\n")
    capsys.readouterr()
    assert run(cfg) == EXIT_PARTIAL
    captured = capsys.readouterr()
    assert "Traceback" not in captured.out + captured.err
    m = manifest(tmp_path)
    by = {p["partition"]: p for p in m["partitions"]}
    assert by["tracking-2016-12-31"]["status"] == "ok" and by["tracking-2017-01-01"]["status"] == "ok"
    assert "unreadable or truncated Parquet" in by["truncated"]["error"]
    assert "unreadable or truncated Parquet" in by["notparquet"]["error"]
    assert "missing required column 'uncertainty'" in by["nocolumn"]["error"]
    assert "column 'value' has type string, expected floating point or integer" in by["wrongtype"]["error"]
    assert m["run"]["status"] == "partial"
    # the good partitions' products still balance
    assert m["totals"]["balanced"]


def test_two_worker_processes(tmp_path, write_config):
    cfg = write_config(CONFIG.format(grid=3600.0))
    assert main(["run", str(cfg), "--workers", "2"]) == EXIT_OK
    assert set(statuses(manifest(tmp_path)).values()) == {"ran"}


def test_sample_configs_run(tmp_path, capsys):
    from tests.conftest import REPO

    for name in ("demo.toml", "clock_demo.toml"):
        base = tmp_path / name
        base.mkdir()
        assert main(["run", str(REPO / "sample_configs" / name), "--base-dir", str(base)]) == EXIT_OK, name
        m = manifest(base)
        assert m["totals"]["balanced"] and m["totals"]["rows_quarantined"] > 0
        q = pq.read_table(base / "products" / f"{m['partitions'][0]['partition']}.quarantine.parquet")
        steps = {"ingest", "stations"} if name == "demo.toml" else {"ingest"}
        assert q.num_rows > 0 and set(q["quarantine_step"].to_pylist()) == steps
        if name == "clock_demo.toml":
            # the invented clock jumps by 5 ns on day two: both series that see it carry the flag
            day2 = [p for p in m["partitions"] if p["partition"] == "clock-2017-01-01"][0]
            series = [a for a in day2["steps"] if a["step"] == "clock_series"][0]
            assert series["flags"]["series_flag"].get("time_step") == 2
            assert len(series["summary"]) == 4


def test_central_scheduler(tmp_path, write_config):
    """The same tasks against a central luigid (started here on a loopback port)."""
    import socket
    import subprocess
    import sys
    import time

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    luigid = Path(sys.executable).with_name("luigid")
    logdir = tmp_path / "luigid"
    logdir.mkdir()  # luigid in the foreground does not create it
    proc = subprocess.Popen([str(luigid), "--port", str(port), "--logdir", str(logdir),
                             "--state-path", str(logdir / "state.pickle")],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 20
        while True:
            try:
                socket.create_connection(("127.0.0.1", port), timeout=0.2).close()
                break
            except OSError:
                assert time.monotonic() < deadline, "luigid did not open its port"
                assert proc.poll() is None, "luigid exited"
                time.sleep(0.1)
        cfg = write_config(CONFIG.format(grid=3600.0))
        assert main(["run", str(cfg), "--scheduler-host", "127.0.0.1", "--scheduler-port", str(port),
                     "--workers", "2"]) == EXIT_OK
        m = manifest(tmp_path)
        assert m["totals"]["balanced"] and set(statuses(m).values()) == {"ran"}
    finally:
        proc.terminate()
        proc.wait(timeout=10)


def test_demo_command(tmp_path, capsys, monkeypatch):
    """The README's first command ends in `relcorr demo`: it finds sample_configs/demo.toml, generates
    the invented raw files, runs the chain and says where the products and the manifest are."""
    monkeypatch.chdir(tmp_path)
    assert main(["demo", "--dir", str(tmp_path / "demo")]) == EXIT_OK
    out = capsys.readouterr().out
    assert f"products  {tmp_path / 'demo' / 'products'}" in out and "manifest  " in out
    assert (tmp_path / "demo" / "products" / "tracking-2016-12-31.parquet").is_file()
    assert (tmp_path / "demo" / "products" / "tracking-2016-12-31.quarantine.parquet").is_file()
