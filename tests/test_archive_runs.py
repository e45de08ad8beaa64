"""Archive operations: runs over UTC days, nightly runs, incremental reprocessing after model changes,
partition manifests and products kept under their fingerprints.

The facts checked are relcorr's own contract (README, "Commands" and "Products, ledger and manifest"):
which tasks run and which are reused is read from luigi's own execution summary and from the manifest.
"""
from __future__ import annotations

import datetime
import json
import shutil
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

from pipelines.cli import main
from pipelines.errors import EXIT_CONFIG, EXIT_MISSING_DAYS, EXIT_OK
from tests.conftest import REPO

DAYS = ("2024-06-18", "2024-06-19", "2024-06-20")


def _setup(tmp: Path, *configs: str) -> Path:
    for name in (*configs, "conjunction-states.parquet", "stations.toml"):
        shutil.copy(REPO / "sample_configs" / name, tmp / name)
    return tmp


def _manifest(folder: Path) -> dict:
    return json.loads(sorted((folder / "manifests").glob("*.json"))[-1].read_text())


def _statuses(m: dict) -> dict[tuple[str, str], str]:
    return {(p["partition"], a["step"]): a["status"] for p in m["partitions"] for a in p["steps"]}


@pytest.fixture(scope="module")
def archive(tmp_path_factory):
    """The nightly archive (61 daily raw files), generated once, and a first run over three days."""
    base = _setup(tmp_path_factory.mktemp("archive"), "nightly.toml", "reprocess.toml")
    assert main(["run", str(base / "nightly.toml"), "--from", DAYS[0], "--to", DAYS[-1]]) == EXIT_OK
    return base


def test_a_range_of_days_runs_one_partition_per_day(archive):
    m = _manifest(archive / "products")
    assert [p["partition"] for p in m["partitions"]] == [f"conjunction-{d}" for d in DAYS]
    assert m["selection"] == {"from": DAYS[0], "to": DAYS[-1], "missing_days": []}
    assert m["totals"]["balanced"] and m["run"]["status"] == "succeeded"
    # each partition's own manifest, listed (with its sha256) by the run's
    listed = {e["partition"]: e for e in m["partition_manifests"]}
    for p in m["partitions"]:
        entry = listed[p["partition"]]
        part = json.loads(Path(entry["path"]).read_text())
        assert part["partition"] == p and part["run"]["id"] == m["run"]["id"]
        from pipelines.parquet_io import sha256_file
        assert sha256_file(entry["path"]) == entry["sha256"]
    # every record of a day has a time tag of that day
    for d in DAYS:
        t = pq.read_table(archive / "products" / f"conjunction-{d}.parquet", columns=["utc_mjd"])
        mjd = (datetime.date.fromisoformat(d) - datetime.date(1858, 11, 17)).days
        assert t.num_rows > 50 and set(t["utc_mjd"].to_pylist()) == {mjd}


def test_nothing_changed_nothing_reruns(archive):
    assert main(["run", str(archive / "nightly.toml"), "--from", DAYS[0], "--to", DAYS[-1]]) == EXIT_OK
    m = _manifest(archive / "products")
    assert set(_statuses(m).values()) == {"reused"}
    # luigi's own summary: nothing ran; the wrapper task was already complete (its products all were)
    assert m["run"]["luigi_summary"]["ran"] == 0 and m["run"]["luigi_summary"]["complete_before"] == 1


def test_gamma_change_reruns_light_time_and_later_only(archive, tmp_path):
    cfg = (archive / "nightly.toml").read_text()
    changed = archive / "nightly-gamma.toml"
    changed.write_text(cfg.replace("gamma = 1.0\n", "gamma = 1.00001\n"))
    before = {d: (archive / "products" / f"conjunction-{d}.parquet").resolve() for d in DAYS}
    assert main(["run", str(changed), "--from", DAYS[0], "--to", DAYS[-1]]) == EXIT_OK
    m = _manifest(archive / "products")
    st = _statuses(m)
    for d in DAYS:
        pid = f"conjunction-{d}"
        for step in ("ingest", "stations", "time_scales", "station_position"):
            assert st[(pid, step)] == "reused", (pid, step)
        for step in ("light_time", "doppler", "gamma_fit", "product"):
            assert st[(pid, step)] == "ran", (pid, step)
    # luigi's own summary: per day light_time, doppler, gamma_fit, product ran (+ the wrapper); the first
    # complete dependency met per day is station_position (luigi does not look further up)
    s = m["run"]["luigi_summary"]
    assert s["ran"] == 4 * len(DAYS) + 1 and s["complete_before"] == len(DAYS) and s["failed"] == 0
    # the earlier products are kept under their fingerprints; the stable names point at the new ones
    for d in DAYS:
        now = (archive / "products" / f"conjunction-{d}.parquet").resolve()
        assert before[d].is_file() and now != before[d]
        entry = next(p for p in m["partitions"] if p["partition"] == f"conjunction-{d}")["steps"][-1]["outputs"][0]
        assert Path(entry["path"]) == now and entry["current"] == str(archive / "products" / f"conjunction-{d}.parquet")


def test_reprocessing_config_shares_the_work_and_recomputes_only_the_changed_model(archive):
    code = main(["run", str(archive / "reprocess.toml"), "--from", DAYS[0], "--to", DAYS[-1]])
    assert code == EXIT_OK
    m = _manifest(archive / "products-reprocessed")
    st = _statuses(m)
    assert {st[(f"conjunction-{d}", "station_position")] for d in DAYS} == {"reused"}
    assert {st[(f"conjunction-{d}", "light_time")] for d in DAYS} == {"ran"}
    # the Moon's term is now there, and only in the reprocessed products
    new = pq.read_table(archive / "products-reprocessed" / f"conjunction-{DAYS[1]}.parquet")
    old = pq.read_table(archive / "products" / f"conjunction-{DAYS[1]}.parquet")
    moon = np.asarray(new["shapiro_moon_down_s"].to_numpy(zero_copy_only=False), dtype=float)
    assert np.nanmax(np.abs(moon)) > 1e-12
    assert np.isnan(np.asarray(old["shapiro_moon_down_s"].to_numpy(zero_copy_only=False), dtype=float)).all()


def test_missing_days_are_reported_and_the_others_run(archive, capsys):
    capsys.readouterr()
    code = main(["run", str(archive / "nightly.toml"), "--from", "2024-07-19", "--to", "2024-07-23"])
    assert code == EXIT_MISSING_DAYS
    out = capsys.readouterr()
    m = _manifest(archive / "products")
    assert m["selection"]["missing_days"] == ["2024-07-21", "2024-07-22", "2024-07-23"]
    assert [p["partition"] for p in m["partitions"]] == ["conjunction-2024-07-19", "conjunction-2024-07-20"]
    assert m["run"]["status"] == "succeeded"
    assert "no input for 2024-07-21" in out.out and "2024-07-23" in out.err


def test_nightly_without_dates_runs_the_previous_utc_day(archive, monkeypatch):
    from pipelines import partitions

    monkeypatch.setattr(partitions, "utc_today", lambda: datetime.date(2024, 6, 21))
    assert main(["run", str(archive / "nightly.toml")]) == EXIT_OK
    m = _manifest(archive / "products")
    assert [p["partition"] for p in m["partitions"]] == ["conjunction-2024-06-20"]
    assert m["selection"]["from"] == m["selection"]["to"] == "2024-06-20"


@pytest.mark.parametrize("args, words", [
    (["--to", "2024-06-20"], "--to without --from"),
    (["--from", "2024-06-20", "--to", "2024-06-19"], "on or after --from"),
    (["--date", "2024-13-01"], "expected a date YYYY-MM-DD"),
    (["--date", "2024-06-20", "--from", "2024-06-19"], "either --date or --from"),
])
def test_bad_date_arguments_are_config_errors(archive, capsys, args, words):
    capsys.readouterr()
    assert main(["run", str(archive / "nightly.toml"), *args]) == EXIT_CONFIG
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err


def test_a_date_range_on_inputs_not_organised_by_day_is_an_error(tmp_path, capsys):
    _setup(tmp_path, "conjunction.toml")
    assert main(["run", str(tmp_path / "conjunction.toml"), "--date", "2024-06-20"]) == EXIT_CONFIG
    assert "{date} field" in capsys.readouterr().err


def test_earth_orientation_upgrade_recomputes_only_the_days_whose_values_changed(archive, monkeypatch):
    """An upgraded Earth-orientation table that changed UT1 - UTC from MJD 60480 (2024-06-19) on: the days
    whose records (with a 2-day margin) use those rows are recomputed from time_scales on; a day ten days
    earlier keeps every fingerprint."""
    import astropy.units as u

    from stages.physics import earth_orientation as eo
    from stages.physics import earth_rotation as er

    early = "2024-06-08"
    assert main(["run", str(archive / "nightly.toml"), "--date", early]) == EXIT_OK
    base = eo.load_eop_table()
    table = base.table.copy()
    changed = np.asarray(table["MJD"], dtype=float) >= 60480
    table["UT1_UTC"][changed] += 2e-4 * u.s
    upgraded = eo.EopTable(table, {**base.identity, "version": "upgraded", "sha256": "0" * 64})
    monkeypatch.setattr(eo, "load_eop_table", lambda: upgraded)
    monkeypatch.setattr(er, "load_eop_table", lambda: upgraded)
    assert main(["run", str(archive / "nightly.toml"), "--from", early, "--to", early]) == EXIT_OK
    assert set(_statuses(_manifest(archive / "products")).values()) == {"reused"}
    assert main(["run", str(archive / "nightly.toml"), "--from", DAYS[0], "--to", DAYS[-1]]) == EXIT_OK
    st = _statuses(_manifest(archive / "products"))
    for d in DAYS:  # 06-18 reaches 06-20 with its margin; 06-19 and 06-20 are inside the change
        pid = f"conjunction-{d}"
        assert st[(pid, "stations")] == "reused" and st[(pid, "time_scales")] == "ran", pid
        assert st[(pid, "station_position")] == "ran", pid


def test_a_scheduler_on_another_machine_is_an_explicit_opt_in(archive, capsys):
    capsys.readouterr()
    code = main(["run", str(archive / "nightly.toml"), "--date", DAYS[0], "--scheduler-host", "10.1.2.3"])
    assert code == EXIT_CONFIG
    assert "--allow-remote-scheduler" in capsys.readouterr().err


def test_verify_a_run_over_some_days_of_the_archive(archive, capsys):
    # the product folder holds the current products of every day run so far; a run over one day
    # verifies (the other days' stable names are not "unexpected"), and a stray regular file still is
    assert main(["run", str(archive / "nightly.toml"), "--date", DAYS[1]]) == EXIT_OK
    manifest = sorted((archive / "products" / "manifests").glob("*.json"))[-1]
    assert len(list((archive / "products").glob("conjunction-*.parquet"))) > 2
    capsys.readouterr()
    assert main(["verify", str(manifest)]) == EXIT_OK
    stray = archive / "products" / "conjunction-2024-06-30.parquet"
    shutil.copy(archive / "products" / f"conjunction-{DAYS[0]}.parquet", stray)  # a regular file, not a link
    try:
        assert main(["verify", str(manifest)]) != EXIT_OK
        assert str(stray) in capsys.readouterr().out
    finally:
        stray.unlink()


def test_a_dataset_partitioned_by_date_folders(archive, tmp_path):
    # raw/date=YYYY-MM-DD/part-0.parquet: the file names do not hold the date, so each partition is
    # named "<date>-part-0"; the records are those of the nightly archive's days
    base = _setup(tmp_path, "nightly.toml")
    for d in DAYS[:2]:
        (base / "ds" / f"date={d}").mkdir(parents=True)
        shutil.copy(archive / "raw" / f"conjunction-{d}.parquet", base / "ds" / f"date={d}" / "part-0.parquet")
    cfg = (base / "nightly.toml").read_text().replace('inputs = ["raw/conjunction-{date}.parquet"]',
                                                      'inputs = ["ds/date={date}/*.parquet"]')
    assert "ds/date={date}" in cfg
    (base / "nightly.toml").write_text(cfg)
    assert main(["run", str(base / "nightly.toml"), "--from", DAYS[0], "--to", DAYS[1]]) == EXIT_OK
    m = _manifest(base / "products")
    assert [p["partition"] for p in m["partitions"]] == [f"{d}-part-0" for d in DAYS[:2]]
    for d in DAYS[:2]:
        ours = pq.read_table(base / "products" / f"{d}-part-0.parquet", columns=["record_id", "computed_value"])
        ref = pq.read_table(archive / "products" / f"conjunction-{d}.parquet", columns=["record_id"])
        assert sorted(ours["record_id"].to_pylist()) == sorted(ref["record_id"].to_pylist())
