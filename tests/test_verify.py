"""`relcorr verify`: every file a manifest lists is re-hashed; missing, modified and unexpected files
are named and make the command exit with EXIT_VERIFY.  Runs on the invented demo scenario.

``make_run`` is shared with tests/test_diff.py and tests/test_audit.py.
"""
from __future__ import annotations

import json
import shutil
from pathlib import Path
from typing import Callable

import pyarrow.parquet as pq

from pipelines.cli import main
from pipelines.errors import EXIT_CODES, EXIT_CONFIG, EXIT_OK, EXIT_VERIFY
from pipelines.verify import MANIFEST_VERSIONS, verify_manifest
from tests.conftest import REPO

CONFIG = """
[pipeline]
name = "read-only-commands"
record_kind = "tracking"
inputs = ["raw/*.parquet"]
batch_rows = 1000

[demo]
seed = 11
records_per_partition = 300
partitions = 2

[[stages]]
use = "stations"
catalogue = "stations.toml"

[[stages]]
use = "time_scales"
tdb_site = "{tdb_site}"
"""

DAY1, DAY2 = "tracking-2016-12-31", "tracking-2017-01-01"


def make_run(tmp_path: Path, write_config, tdb_site: str = "auto",
             edit_raw: Callable[[Path], None] | None = None, config_arg: str | None = None) -> Path:
    """Run the small chain stations -> time_scales on the demo scenario in tmp_path; return the new manifest.

    ``edit_raw(raw_folder)`` may change the raw files first (they are generated when missing).
    """
    if not (tmp_path / "stations.toml").exists():
        shutil.copy(REPO / "sample_configs" / "stations.toml", tmp_path / "stations.toml")
    cfg = write_config(CONFIG.format(tdb_site=tdb_site))
    if edit_raw is not None:
        if not (tmp_path / "raw").is_dir():
            from pipelines import demo
            from pipelines.config import load_config

            demo.generate(load_config(cfg, require_inputs=False))
        edit_raw(tmp_path / "raw")
    folder = tmp_path / "products" / "manifests"
    before = set(folder.glob("*.json")) if folder.is_dir() else set()
    assert main(["run", config_arg or str(cfg)]) == EXIT_OK
    new = set(folder.glob("*.json")) - before
    assert len(new) == 1
    return new.pop()


def _listed_outputs(manifest: Path) -> list[str]:
    m = json.loads(manifest.read_text())
    return [o["path"] for p in m["partitions"] for a in p["steps"] for o in a.get("outputs", [])] + \
        [p["input"]["path"] for p in m["partitions"]]


def test_manifest_version_is_the_one_written():
    from pipelines.manifest import MANIFEST_VERSION

    assert MANIFEST_VERSION in MANIFEST_VERSIONS


def test_exit_code_is_documented_as_an_exit_code():
    assert EXIT_VERIFY in EXIT_CODES and EXIT_VERIFY not in (EXIT_OK, EXIT_CONFIG)


def test_fresh_run_verifies_every_listed_file(tmp_path, write_config, monkeypatch, capsys):
    # run with a relative config path, as a user in the run's folder would; verify from elsewhere
    monkeypatch.chdir(tmp_path)
    manifest = make_run(tmp_path, write_config, config_arg="run.toml")
    assert json.loads(manifest.read_text())["config"]["path"] == str(tmp_path / "run.toml")  # recorded absolute
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)

    report = verify_manifest(manifest)
    assert report.ok, [c for c in report.checks if c.status != "ok"]
    checked = {c.path for c in report.checks}
    listed = _listed_outputs(manifest)
    assert len(listed) == 2 * (1 + 4 * 2)  # per partition: input, 4 steps x (records, quarantine)
    assert set(listed) <= checked
    roles = {c.role for c in report.checks}
    assert {"config", "auxiliary: leap seconds", "auxiliary: station catalogue", "auxiliary: earth orientation"} <= roles
    config_check = next(c for c in report.checks if c.role == "config")
    assert Path(config_check.path) == tmp_path / "run.toml"
    catalogue = next(c for c in report.checks if c.role == "auxiliary: station catalogue")
    assert Path(catalogue.path) == tmp_path / "stations.toml"
    # the Earth-orientation identity is a pair of files: both are checked
    assert len([c for c in report.checks if c.role == "auxiliary: earth orientation"]) == 2

    capsys.readouterr()
    assert main(["verify", str(manifest)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "verified" in out and "NOT VERIFIED" not in out


def test_tampered_files_are_named_and_fail(tmp_path, write_config, capsys):
    manifest = make_run(tmp_path, write_config)
    product = (tmp_path / "products" / f"{DAY1}.parquet").resolve()  # the stable name links to it
    assert product.parent.name == "by-fingerprint"
    data = bytearray(product.read_bytes())
    mid = len(data) // 2
    data[mid:mid + 8] = bytes(b ^ 0xFF for b in data[mid:mid + 8])  # same size, other bytes
    product.write_bytes(bytes(data))
    work = next((tmp_path / "work" / DAY2).glob("01-stations-*.quarantine.parquet"))
    with open(work, "ab") as fh:
        fh.write(b"\0")  # one byte longer

    report = verify_manifest(manifest)
    bad = {c.path: c for c in report.problems}
    assert set(bad) == {str(product), str(work)}
    assert bad[str(product)].status == "modified" and "sha256" in bad[str(product)].detail
    assert bad[str(product)].partition == DAY1 and bad[str(product)].role == "product records"
    assert bad[str(work)].status == "modified" and "size" in bad[str(work)].detail

    capsys.readouterr()
    assert main(["verify", str(manifest)]) == EXIT_VERIFY
    out = capsys.readouterr().out
    assert str(product) in out and str(work) in out and "NOT VERIFIED" in out


def test_deleted_file_is_missing(tmp_path, write_config, capsys):
    manifest = make_run(tmp_path, write_config)
    gone = next((tmp_path / "work" / DAY2).glob("02-time_scales-*.parquet"))
    assert not gone.name.endswith(".quarantine.parquet")
    gone.unlink()
    report = verify_manifest(manifest)
    assert [(c.status, c.path) for c in report.problems] == [("missing", str(gone))]
    capsys.readouterr()
    assert main(["verify", str(manifest)]) == EXIT_VERIFY
    assert f"MISSING    {gone}" in capsys.readouterr().out


def test_moved_files_are_missing_and_product_like_ones_unexpected(tmp_path, write_config):
    manifest = make_run(tmp_path, write_config)
    products = tmp_path / "products"
    # a raw input moved away: missing
    raw = tmp_path / "raw" / f"{DAY2}.parquet"
    (tmp_path / "archive").mkdir()
    raw.rename(tmp_path / "archive" / raw.name)
    # a product's stable name renamed inside the product folder: missing where listed, unexpected where it is now
    product = products / f"{DAY1}.parquet"
    product.rename(products / "renamed.parquet")
    report = verify_manifest(manifest)
    got = sorted((c.status, c.path) for c in report.problems)
    assert got == sorted([("missing", str(raw)), ("missing", str(product)),
                          ("unexpected", str(products / "renamed.parquet"))])


def test_extra_product_like_file_is_unexpected_and_nothing_else(tmp_path, write_config, capsys):
    manifest = make_run(tmp_path, write_config)
    products = tmp_path / "products"
    extra = products / "tracking-2017-01-02.quarantine.parquet"
    shutil.copy(products / f"{DAY1}.quarantine.parquet", extra)
    # outside the narrow definition: hidden temporaries, sub-folders, other suffixes, work folders
    (products / f".{DAY1}.parquet.tmp-12345").write_bytes(b"partial")
    (products / "notes.txt").write_text("not a product")
    shutil.copy(products / f"{DAY1}.parquet", products / "manifests" / "copy.parquet")
    shutil.copy(products / f"{DAY1}.parquet", tmp_path / "work" / DAY1 / "01-stations-0000000000000000.parquet")
    assert pq.read_metadata(extra).num_rows > 0
    report = verify_manifest(manifest)
    assert [(c.status, c.path) for c in report.problems] == [("unexpected", str(extra))]
    capsys.readouterr()
    assert main(["verify", str(manifest)]) == EXIT_VERIFY
    out = capsys.readouterr().out
    assert "UNEXPECTED" in out and str(extra) in out


def test_changed_model_file_is_modified(tmp_path, write_config):
    manifest = make_run(tmp_path, write_config)
    catalogue = tmp_path / "stations.toml"
    catalogue.write_text(catalogue.read_text() + "\n# edited after the run\n")
    report = verify_manifest(manifest)
    assert [(c.status, c.role, c.path) for c in report.problems] == [
        ("modified", "auxiliary: station catalogue", str(catalogue))]


def test_unreadable_manifest_is_one_line_and_exit_2(tmp_path, capsys):
    bad = tmp_path / "broken.json"
    bad.write_text("{not json")
    assert main(["verify", str(bad)]) == EXIT_CONFIG
    err = capsys.readouterr().err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1 and str(bad) in err
    assert main(["verify", str(tmp_path / "absent.json")]) == EXIT_CONFIG
    assert "no such manifest" in capsys.readouterr().err
