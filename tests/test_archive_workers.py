"""Several `relcorr run` processes on one archive, and workers killed mid-stage.

Each run here is a separate process (`python -m pipelines.cli`), as an operator would start them:

* two runs against one central luigid (bound to 127.0.0.1 on a free port): every task is computed once,
  by one of them, and the products are byte-identical to a run with the local scheduler;
* a worker killed with SIGKILL while it writes a stage's output: no half file counts as complete, the
  rerun finishes, removes the temporaries and gives the bytes of an uninterrupted run;
* two runs with the local scheduler at once in one folder (both may compute the same step: each writes
  its own temporary and renames it into place; neither removes the other's);
* two configs sharing a work folder with different stage lists: fingerprints keep them apart.

The data are the invented demo scenarios (pipelines/demo.py), generated once per module.
"""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from tests.conftest import REPO

TIMEOUT = 240  # seconds, for any one subprocess
DAYS = ("--from", "2024-06-15", "--to", "2024-06-24")
NIGHTLY_FILES = ("nightly.toml", "conjunction-states.parquet", "stations.toml")

BIG = """
[pipeline]
name = "crash-safety"
record_kind = "tracking"
inputs = ["raw/*.parquet"]
batch_rows = 65536

[demo]
seed = 11
records_per_partition = 300000
partitions = 1

[[stages]]
use = "stations"
catalogue = "stations.toml"

[[stages]]
use = "time_scales"

[[stages]]
use = "station_position"
"""

SHARED = """
[pipeline]
name = "{name}"
record_kind = "tracking"
inputs = ["raw/*.parquet"]
work_dir = "work"
product_dir = "{products}"

[demo]
seed = 5
records_per_partition = 2000
partitions = 2

[[stages]]
use = "stations"
catalogue = "stations.toml"

[[stages]]
use = "time_scales"
"""

STATION_POSITION = """
[[stages]]
use = "station_position"
"""


# ---------------------------------------------------------------------------- helpers
def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(REPO), *filter(None, [env.get("PYTHONPATH")])])
    return env


def start(folder: Path, *args: str, **kwargs) -> subprocess.Popen:
    kwargs.setdefault("stdout", subprocess.PIPE)
    kwargs.setdefault("stderr", subprocess.STDOUT)
    return subprocess.Popen([sys.executable, "-m", "pipelines.cli", *args], cwd=folder, env=_env(), text=True,
                            **kwargs)


def finish(proc: subprocess.Popen) -> tuple[int, str]:
    try:
        out, _ = proc.communicate(timeout=TIMEOUT)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.communicate(timeout=30)
        raise
    return proc.returncode, out or ""


def relcorr(folder: Path, *args: str) -> tuple[int, str]:
    return finish(start(folder, *args))


def manifest_of(out: str) -> dict:
    """The run manifest a `relcorr run` names on its last lines."""
    line = [ln for ln in out.splitlines() if ln.startswith("manifest  ")][-1]
    return json.loads(Path(line.split(None, 1)[1]).read_text())


def statuses(m: dict) -> dict[tuple[str, str], str]:
    return {(p["partition"], a["step"]): a["status"] for p in m["partitions"] for a in p["steps"]}


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def products(m: dict) -> dict[tuple[str, str], tuple[str, str]]:
    """(partition, records|quarantine) -> (file name, sha256) of the product the stable name points at."""
    out = {}
    for p in m["partitions"]:
        for entity in p["steps"][-1]["outputs"]:
            target = Path(entity["current"]).resolve(strict=True)
            out[(p["partition"], entity["role"])] = (target.name, sha(target))
    return out


def balanced(m: dict) -> bool:
    return (m["run"]["status"] == "succeeded" and m["totals"]["balanced"]
            and all(p["balance"]["balanced"] for p in m["partitions"]))


def temporaries(folder: Path) -> list[Path]:
    return sorted(folder.rglob(".*.tmp-*"))


def copy_folder(src: Path, dst: Path) -> Path:
    """The config files and raw archive of ``src`` (not its work or products) in a new folder ``dst``."""
    dst.mkdir(parents=True)
    for f in src.iterdir():
        if f.is_file():
            shutil.copy2(f, dst / f.name)
    shutil.copytree(src / "raw", dst / "raw")
    return dst


def generate(config: Path) -> None:
    from pipelines import demo
    from pipelines.config import load_config

    demo.generate(load_config(config, require_inputs=False))


def plan_of(config: Path):
    from pipelines.config import load_config
    from pipelines.plan import load_plan

    cfg = load_config(config)
    return load_plan(str(cfg.path), cfg.sha256, str(cfg.base_dir))


# ---------------------------------------------------------------------------- data, generated once
@pytest.fixture(scope="module")
def nightly(tmp_path_factory) -> Path:
    """sample_configs/nightly.toml with its model files and the generated daily archive (61 days)."""
    folder = tmp_path_factory.mktemp("nightly")
    for name in NIGHTLY_FILES:
        shutil.copy2(REPO / "sample_configs" / name, folder / name)
    generate(folder / "nightly.toml")
    return folder


@pytest.fixture(scope="module")
def big(tmp_path_factory) -> Path:
    """One partition of 300 000 records, stages that take a noticeable time each."""
    folder = tmp_path_factory.mktemp("big")
    shutil.copy2(REPO / "sample_configs" / "stations.toml", folder / "stations.toml")
    (folder / "big.toml").write_text(BIG)
    generate(folder / "big.toml")
    return folder


@pytest.fixture(scope="module")
def big_reference(big, tmp_path_factory) -> dict:
    """Manifest of one uninterrupted run of ``big`` in a folder of its own."""
    folder = copy_folder(big, tmp_path_factory.mktemp("big-reference") / "run")
    rc, out = relcorr(folder, "run", "big.toml")
    assert rc == 0, out
    m = manifest_of(out)
    assert balanced(m)
    return m


# ---------------------------------------------------------------------------- 1. central scheduler
def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_two_runs_on_a_central_scheduler_compute_each_task_once(nightly, tmp_path):
    reference = copy_folder(nightly, tmp_path / "reference")
    rc, out = relcorr(reference, "run", "nightly.toml", *DAYS)
    assert rc == 0, out
    ref = manifest_of(out)

    shared = copy_folder(nightly, tmp_path / "shared")
    port = _free_port()
    logdir = tmp_path / "luigid"
    logdir.mkdir()
    luigid = subprocess.Popen([str(Path(sys.executable).with_name("luigid")), "--address", "127.0.0.1",
                               "--port", str(port), "--logdir", str(logdir),
                               "--state-path", str(logdir / "state.pickle")],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 30
        while True:
            try:
                socket.create_connection(("127.0.0.1", port), timeout=0.2).close()
                break
            except OSError:
                assert luigid.poll() is None, "luigid exited"
                assert time.monotonic() < deadline, "luigid did not open its port"
                time.sleep(0.1)
        args = ("run", "nightly.toml", *DAYS, "--scheduler-host", "127.0.0.1", "--scheduler-port", str(port))
        procs = [start(shared, *args), start(shared, *args)]
        results = [finish(p) for p in procs]
    finally:
        luigid.terminate()
        try:
            luigid.wait(timeout=15)
        except subprocess.TimeoutExpired:
            luigid.kill()
            luigid.wait(timeout=15)
    for rc, out in results:
        assert rc == 0, out
    a, b = (manifest_of(out) for _, out in results)
    assert a["run"]["id"] != b["run"]["id"]
    sa, sb = statuses(a), statuses(b)
    assert sa.keys() == sb.keys() == statuses(ref).keys()
    assert len({p for p, _ in sa}) == 10 and len(sa) == 10 * 8  # ingest, 6 stages, product per day
    # computed exactly once: "ran" in one run's manifest, "reused" in the other's
    twice_or_never = {k: (sa[k], sb[k]) for k in sa if sorted((sa[k], sb[k])) != ["ran", "reused"]}
    assert not twice_or_never
    assert balanced(a) and balanced(b)
    assert products(a) == products(b) == products(ref)
    assert temporaries(shared) == []


# ---------------------------------------------------------------------------- 2. SIGKILL mid-stage
def test_worker_killed_mid_stage_leaves_no_complete_looking_output(big, big_reference, tmp_path):
    from pipelines.tasks import FingerprintTarget

    folder = copy_folder(big, tmp_path / "crash")
    plan = plan_of(folder / "big.toml")
    (pid, pp), = plan.partitions.items()
    steps = {s.name: s for s in pp.steps}
    killed = steps["station_position"]
    work = killed.output.parent
    for attempt in range(3):
        shutil.rmtree(plan.config.work_dir, ignore_errors=True)
        shutil.rmtree(plan.config.product_dir, ignore_errors=True)
        proc = start(folder, "run", "big.toml", stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                     start_new_session=True)
        seen = []
        try:
            deadline = time.monotonic() + TIMEOUT
            while not seen and proc.poll() is None and time.monotonic() < deadline:
                seen = list(work.glob(f".{killed.output.name}.tmp-*")) if work.is_dir() else []
                if not seen:
                    time.sleep(0.002)
            if proc.poll() is None:
                os.killpg(proc.pid, signal.SIGKILL)
        finally:
            if proc.poll() is None:
                os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=30)
        # the kill landed mid-stage when the temporary is still there and the step is not complete
        if seen and seen[0].exists() and not FingerprintTarget(killed.output, killed.fingerprint).exists():
            break
    else:
        pytest.fail("three attempts to kill the worker inside station_position all came too late")
    assert proc.returncode == -signal.SIGKILL

    # nothing under a final name is partial, and nothing counts as complete that is not
    assert not killed.output.exists() and not killed.quarantine.exists()
    assert not FingerprintTarget(pp.steps[-1].output, pp.steps[-1].fingerprint).exists()
    by_name = {p.name: (s, role) for s in pp.steps[:-1]
               for p, role in ((s.output, "records"), (s.quarantine, "quarantine"))}
    finished = sorted(f for f in work.glob("*.parquet"))
    assert [f.name for f in finished] == sorted(
        p.name for s in pp.steps[:killed.position] for p in (s.output, s.quarantine))
    for f in finished:
        step, role = by_name[f.name]
        assert FingerprintTarget(f, step.fingerprint).exists(), f
        stats = pq.read_metadata(f).metadata[b"relcorr.stats"]
        key = "rows_out" if role == "records" else "rows_quarantined"
        assert pq.read_table(f).num_rows == json.loads(stats)[key], f
    strays = temporaries(folder)
    assert strays and all(p.parent == work for p in strays)

    rc, out = relcorr(folder, "run", "big.toml")
    assert rc == 0, out
    m = manifest_of(out)
    st = statuses(m)
    assert [st[(pid, s.name)] for s in pp.steps] == ["reused"] * killed.position + ["ran"] * (
        len(pp.steps) - killed.position)
    assert balanced(m)
    assert m["totals"]["rows_in"] == 300000 == m["totals"]["rows_out"] + m["totals"]["rows_quarantined"]
    assert products(m) == products(big_reference)
    assert temporaries(folder) == []


# ---------------------------------------------------------------------------- 3. two local schedulers
def test_two_local_runs_at_once_in_one_folder(big, big_reference, tmp_path):
    folder = copy_folder(big, tmp_path / "twice")
    results = [finish(p) for p in [start(folder, "run", "big.toml"), start(folder, "run", "big.toml")]]
    for rc, out in results:
        assert rc == 0, out
    ms = [manifest_of(out) for _, out in results]
    for m in ms:
        assert balanced(m)
        assert products(m) == products(big_reference)
    # both may have computed a step; none was left to nobody
    sa, sb = (statuses(m) for m in ms)
    assert sa.keys() == sb.keys() and all("ran" in (sa[k], sb[k]) for k in sa)
    assert temporaries(folder) == []
    last = max(folder.glob("products/manifests/*.json"), key=lambda p: p.stat().st_mtime_ns)
    rc, out = relcorr(folder, "verify", str(last))
    assert rc == 0, out


# ---------------------------------------------------------------------------- 4. shared work folder
def test_configs_with_different_stages_share_a_work_folder(tmp_path):
    folder = tmp_path / "shared"
    folder.mkdir()
    shutil.copy2(REPO / "sample_configs" / "stations.toml", folder / "stations.toml")
    (folder / "a.toml").write_text(SHARED.format(name="share-a", products="products-a"))
    (folder / "b.toml").write_text(SHARED.format(name="share-b", products="products-b") + STATION_POSITION)
    generate(folder / "a.toml")

    rc, out = relcorr(folder, "run", "a.toml")
    assert rc == 0, out
    a1 = manifest_of(out)
    rc, out = relcorr(folder, "run", "b.toml")
    assert rc == 0, out
    b = manifest_of(out)
    rc, out = relcorr(folder, "run", "a.toml")
    assert rc == 0, out
    a2 = manifest_of(out)

    # B found A's steps under the same fingerprints and computed only its own
    sb = statuses(b)
    assert {k: v for k, v in sb.items() if k[1] in ("ingest", "stations", "time_scales")} == {
        k: "reused" for k in sb if k[1] in ("ingest", "stations", "time_scales")}
    assert {v for k, v in sb.items() if k[1] in ("station_position", "product")} == {"ran"}
    # A again: nothing to do, the same bytes
    assert set(statuses(a2).values()) == {"reused"}
    assert a2["run"]["luigi_summary"]["ran"] == 0
    assert products(a2) == products(a1)
    assert balanced(a1) and balanced(b) and balanced(a2)
    assert a1["partitions"][0]["steps"][-1]["fingerprint"] != b["partitions"][0]["steps"][-1]["fingerprint"]

    alone = copy_folder(folder, tmp_path / "b-alone")
    (alone / "a.toml").unlink()
    rc, out = relcorr(alone, "run", "b.toml")
    assert rc == 0, out
    assert products(manifest_of(out)) == products(b)
