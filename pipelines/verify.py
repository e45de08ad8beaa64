"""``relcorr verify MANIFEST``: are the files a run's manifest lists still the files the run saw and wrote?

Every file the manifest names is looked at again and hashed:

* the config file (``config.path``, ``config.sha256``);
* the auxiliary model data (``auxiliary``): files of the ``astropy-iers-data`` and
  ``skyfield-data`` packages, and model files named by a stage parameter
  (station and clock catalogues, state tables), taken from the config file's folder;
* per partition the raw input and every step's outputs (records and quarantine
  Parquet files in the work folder, the product and its quarantine file).

A file is **missing** when it is not where the manifest says, **modified** when its
size or sha256 differs from the manifest's.  A file is **unexpected** only in this
narrow sense: a ``*.parquet`` file directly in the run's product folder (a product
or quarantine file by its name) that no entry of the manifest names, e.g. the
product of a partition that failed in this run, left by an earlier one, or a file
copied in by hand.  Work folders are not searched (they keep the results of earlier
runs on purpose: a rerun reuses them), nor are sub-folders of the product folder
(``manifests/``) or hidden temporaries (``.NAME.tmp-PID``, left by an interrupted run).

This module also holds the small helpers ``relcorr diff`` and ``relcorr audit``
share to read a finished run (load a manifest, find the records file of a partition).
Nothing here writes.
"""
from __future__ import annotations

import argparse
import json
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

from pipelines.errors import EXIT_OK, EXIT_VERIFY, RelcorrError
from pipelines.parquet_io import read_relcorr_metadata, sha256_file

#: manifest versions these commands read; equals pipelines.manifest.MANIFEST_VERSION (not imported
#: from there: that module pulls in luigi, which a read-only command does not need)
MANIFEST_VERSIONS = (1,)

STATUSES = ("ok", "missing", "modified", "unexpected")


class ManifestError(RelcorrError):
    """A manifest that cannot be read, or a run whose files cannot answer the question."""


# ---------------------------------------------------------------------------- reading a run (shared)
def load_manifest(path: str | Path) -> dict[str, Any]:
    """The manifest as a dict; ManifestError (one line) if it is not a readable relcorr manifest."""
    p = Path(path)
    try:
        text = p.read_text()
    except FileNotFoundError:
        raise ManifestError(f"{p}: no such manifest") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ManifestError(f"{p}: cannot read the manifest: {getattr(exc, 'strerror', None) or exc}") from None
    try:
        m = json.loads(text)
    except ValueError as exc:
        raise ManifestError(f"{p}: not a relcorr manifest (invalid JSON: {exc})") from None
    if not isinstance(m, dict) or not isinstance(m.get("partitions"), list) or not isinstance(m.get("run"), dict):
        raise ManifestError(f"{p}: not a relcorr manifest (no run or partitions)")
    if m.get("manifest_version") not in MANIFEST_VERSIONS:
        raise ManifestError(f"{p}: manifest version {m.get('manifest_version')!r}, this relcorr reads "
                            + ", ".join(str(v) for v in MANIFEST_VERSIONS))
    return m


def run_id(manifest: dict[str, Any]) -> str:
    return str(manifest.get("run", {}).get("id", "?"))


def step_entry(partition: dict[str, Any], name: str, version: int | None = None) -> dict[str, Any] | None:
    """The manifest's activity of step ``name`` (and ``version``, when given) in a partition."""
    for a in partition.get("steps", []):
        if a.get("step") == name and (version is None or a.get("version") == version):
            return a
    return None


def _output(activity: dict[str, Any] | None, role: str) -> dict[str, Any] | None:
    for o in (activity or {}).get("outputs", []) or []:
        if o.get("role") == role:
            return o
    return None


def _has_fingerprint(path: Path, fingerprint: str | None) -> bool:
    if fingerprint is None or not path.is_file():
        return False
    meta = read_relcorr_metadata(path)
    return bool(meta) and meta.get("fingerprint") == fingerprint


@dataclass(frozen=True)
class RecordsFile:
    """Where a partition's corrected records of a given run can be read."""

    path: Path
    source: str        # "product" or "work" (the last stage's output, when the product was overwritten since)
    step: str          # the step whose output it is


def records_file(partition: dict[str, Any]) -> RecordsFile | None:
    """The file holding a partition's product records *as this run wrote them*, or None.

    Products are rewritten in place by later runs, so the product file is used only while
    its Parquet metadata still carries this run's product fingerprint (a footer read, no
    hashing; ``relcorr verify`` is what checks bytes).  Otherwise the output of the last
    step before the product is used: it lives in the work folder under a name with its
    fingerprint, holds the same rows in the same order, and survives later runs.
    """
    if partition.get("status") != "ok":
        return None
    steps = partition.get("steps", [])
    if not steps:
        return None
    product = steps[-1]
    out = _output(product, "records")
    if out and _has_fingerprint(Path(out["path"]), product.get("fingerprint")):
        return RecordsFile(Path(out["path"]), "product", product.get("step", "product"))
    if len(steps) >= 2:
        last = steps[-2]
        out = _output(last, "records")
        if out and _has_fingerprint(Path(out["path"]), last.get("fingerprint")):
            return RecordsFile(Path(out["path"]), "work", last.get("step", "?"))
    return None


def quarantine_files(partition: dict[str, Any]) -> list[RecordsFile]:
    """The files holding a partition's quarantined records as this run wrote them: the product's
    quarantine file while it carries this run's fingerprint, else each step's own quarantine file."""
    steps = partition.get("steps", [])
    if not steps:
        return []
    product = steps[-1]
    out = _output(product, "quarantine")
    if product.get("step") == "product" and out and _has_fingerprint(Path(out["path"]), product.get("fingerprint")):
        return [RecordsFile(Path(out["path"]), "product", "product")]
    found = []
    for a in steps[:-1] if product.get("step") == "product" else steps:
        out = _output(a, "quarantine")
        if out and _has_fingerprint(Path(out["path"]), a.get("fingerprint")):
            found.append(RecordsFile(Path(out["path"]), "work", a.get("step", "?")))
    return found


_REGISTRY: dict[str, Any] | None = None


def installed_stages() -> dict[str, Any]:
    """The installed stage classes by name (empty when a broken plugin stops discovery)."""
    global _REGISTRY
    if _REGISTRY is None:
        from pipelines.registry import RegistryError, discover

        try:
            _REGISTRY = discover()
        except RegistryError:
            _REGISTRY = {}
    return _REGISTRY


def step_columns(name: str, version: int | None, partition: dict[str, Any] | None = None) -> tuple[dict[str, Any], str]:
    """The columns step ``name@version`` adds to a record, as {column: Arrow type}, and where that came from.

    Ingest: the columns it adds (pipelines.schemas.INGEST_COLUMNS).  A stage: its declared ``provides``
    when the installed stage has that version; otherwise (a plugin not installed here, another
    version) the difference between the schemas of its output and of the step before it in this
    run's work folder (footers only).  ({}, reason) when neither can tell.
    """
    if name == "ingest":
        from pipelines.schemas import INGEST_COLUMNS

        return {c.name: c.type for c in INGEST_COLUMNS if c.name != "ledger"}, "ingest"
    if name == "product":
        return {}, "product"
    cls = installed_stages().get(name)
    if cls is not None and (version is None or cls.version == version):
        return {c.name: c.type for c in cls.provides}, "provides"
    if partition is not None:
        import pyarrow.parquet as pq

        steps = partition.get("steps", [])
        for i, a in enumerate(steps):
            if a.get("step") == name and (version is None or a.get("version") == version) and i > 0:
                here, before = _output(a, "records"), _output(steps[i - 1], "records")
                try:
                    s1 = pq.read_schema(here["path"]) if here else None
                    s0 = pq.read_schema(before["path"]) if before else None
                except Exception:  # unreadable or gone: cannot tell
                    s1 = s0 = None
                if s1 is not None and s0 is not None:
                    return {f.name: f.type for f in s1 if f.name not in s0.names}, "work schemas"
    why = "not installed" if cls is None else f"installed version {cls.version}"
    return {}, f"unknown ({name} {why}, and its work files are gone)"


# ---------------------------------------------------------------------------- verify
@dataclass(frozen=True)
class FileCheck:
    status: str                  # one of STATUSES
    role: str                    # "config", "auxiliary: leap seconds", "raw records", "time_scales records", ...
    path: str
    partition: str | None = None
    detail: str = ""


@dataclass
class VerifyReport:
    manifest: str
    run_id: str
    checks: list[FileCheck] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return all(c.status == "ok" for c in self.checks)

    def with_status(self, status: str) -> list[FileCheck]:
        return [c for c in self.checks if c.status == status]

    @property
    def problems(self) -> list[FileCheck]:
        return [c for c in self.checks if c.status != "ok"]

    def counts(self) -> dict[str, int]:
        return {s: len(self.with_status(s)) for s in STATUSES}


def _check_file(path: Path | None, sha256: str | None, size: int | None, role: str, partition: str | None,
                recorded_missing: bool = False) -> FileCheck:
    shown = str(path) if path is not None else "?"
    if path is None or not path.is_file():
        detail = "already missing when the run ended" if recorded_missing else "not found"
        return FileCheck("missing", role, shown, partition, detail)
    if recorded_missing or not sha256:
        return FileCheck("modified", role, shown, partition, "the manifest records no hash (it was missing when the run ended)")
    if size is not None:
        actual = path.stat().st_size
        if actual != size:
            return FileCheck("modified", role, shown, partition, f"size {actual} bytes, manifest {size}")
    actual_sha = sha256_file(path)
    if actual_sha != sha256:
        return FileCheck("modified", role, shown, partition, f"sha256 {actual_sha[:16]}…, manifest {sha256[:16]}…")
    return FileCheck("ok", role, shown, partition)


def _resolved_pipeline(manifest: dict[str, Any]) -> dict[str, Any]:
    return ((manifest.get("config") or {}).get("resolved") or {}).get("pipeline") or {}


def _config_path(manifest: dict[str, Any], manifest_path: Path) -> tuple[Path | None, list[Path]]:
    """The config file of the run.  ``relcorr run`` records the path as it was given; a relative one
    is looked for in the current folder, then beside the product and work folders and above the
    manifests folder.  The first candidate with the recorded sha256 wins, else the first that exists."""
    cfg = manifest.get("config") or {}
    raw = cfg.get("path")
    if not raw:
        return None, []
    raw = Path(raw)
    if raw.is_absolute():
        return raw, [raw]
    pipe = _resolved_pipeline(manifest)
    cands = [Path.cwd() / raw]
    cands += [Path(pipe[k]).parent / raw for k in ("product_dir", "work_dir") if pipe.get(k)]
    cands.append(manifest_path.resolve().parent.parent.parent / raw)
    unique = list(dict.fromkeys(os.path.normpath(c) for c in cands))
    existing = [Path(c) for c in unique if Path(c).is_file()]
    for c in existing:
        if sha256_file(c) == cfg.get("sha256"):
            return c, [Path(c) for c in unique]
    return (existing[0] if existing else None), [Path(c) for c in unique]


def _package_data_dir(module: str) -> Path | None:
    import importlib.util

    spec = importlib.util.find_spec(module)
    if spec is None or not spec.origin:
        return None
    return Path(spec.origin).parent / "data"


_PACKAGE_DATA = {"astropy-iers-data": "astropy_iers_data", "skyfield-data": "skyfield_data"}


def _auxiliary_files(entry: dict[str, Any], manifest: dict[str, Any],
                     config_dir: Path | None) -> Iterator[tuple[Path | None, str | None, str]]:
    """(path or None, sha256, note) of each file behind one auxiliary entry."""
    source = entry.get("source")
    if source in _PACKAGE_DATA:
        folder = _package_data_dir(_PACKAGE_DATA[source])
        files = entry.get("files_sha256") or {entry.get("file"): entry.get("sha256")}
        for name, sha in files.items():
            yield (folder / name if folder is not None and name else None), sha, (
                "" if folder is not None else f"package {source} is not installed")
        return
    name = entry.get("file")
    if not name:
        return
    # a model file named by a stage parameter, relative to the config file's folder
    for stage in manifest.get("stages", []) or []:
        for value in (stage.get("params") or {}).values():
            if isinstance(value, str) and value and Path(value).name == name:
                p = Path(value)
                if not p.is_absolute():
                    if config_dir is None:
                        continue
                    p = config_dir / p
                yield p, entry.get("sha256"), ""
                return
    yield (config_dir / name if config_dir is not None else None), entry.get("sha256"), (
        "" if config_dir is not None else "the config file's folder is unknown")


def _norm(p: str | Path) -> str:
    return os.path.normpath(os.path.abspath(str(p)))


def verify_manifest(path: str | Path) -> VerifyReport:
    """Re-hash every file the manifest at ``path`` lists; report missing, modified and unexpected files."""
    from stages.physics.offline import configure_offline

    configure_offline()
    mpath = Path(path)
    m = load_manifest(mpath)
    report = VerifyReport(str(mpath), run_id(m))
    listed: set[str] = set()
    seen: set[str] = set()

    def add(check: FileCheck) -> None:
        key = (check.role, _norm(check.path) if check.path != "?" else check.role)
        if key in seen:
            return
        seen.add(key)
        report.checks.append(check)

    # config
    cfg = m.get("config") or {}
    cfg_path, cands = _config_path(m, mpath)
    if cfg.get("path"):
        chk = _check_file(cfg_path, cfg.get("sha256"), None, "config", None)
        if chk.status == "missing" and len(cands) > 1:
            chk = FileCheck("missing", "config", cfg["path"], None, "not found in " + ", ".join(str(c.parent) for c in cands))
        add(chk)
    config_dir = cfg_path.resolve().parent if cfg_path is not None else None

    # auxiliary model data
    for entry in m.get("auxiliary", []) or []:
        role = f"auxiliary: {entry.get('role', '?')}"
        for p, sha, note in _auxiliary_files(entry, m, config_dir):
            if not sha:
                continue  # nothing recorded to compare with
            chk = _check_file(p, sha, None, role, None)
            if p is None:
                chk = FileCheck("missing", role, str(entry.get("file", "?")), None, note or "not found")
            add(chk)

    # inputs and outputs
    product_dirs: set[str] = set()
    for part in m["partitions"]:
        pid = part.get("partition")
        inp = part.get("input") or {}
        if inp.get("path"):
            listed.add(_norm(inp["path"]))
            add(_check_file(Path(inp["path"]), inp.get("sha256"), inp.get("bytes"), inp.get("role", "raw records"),
                            pid, bool(inp.get("missing"))))
        for act in part.get("steps", []):
            for out in act.get("outputs", []) or []:
                if not out.get("path"):
                    continue
                listed.add(_norm(out["path"]))
                if out.get("current"):  # a product's stable name (a link into by-fingerprint/)
                    listed.add(_norm(out["current"]))
                    product_dirs.add(_norm(Path(out["current"]).parent))
                    link = Path(out["current"])
                    if not link.exists():  # (a later run may point it at its own product: that is fine)
                        add(FileCheck("missing", f"current {out.get('role')} (link)", str(link), pid,
                                      f"the stable name of the product ({out['path']}) is gone"))
                elif act.get("step") == "product":
                    product_dirs.add(_norm(Path(out["path"]).parent))
                chk = _check_file(Path(out["path"]), out.get("sha256"), out.get("bytes"),
                                  f"{act.get('step')} {out.get('role')}", pid, bool(out.get("missing")))
                if chk.status == "modified":
                    now = (read_relcorr_metadata(out["path"]) or {}).get("fingerprint")
                    if now and now != act.get("fingerprint"):
                        chk = FileCheck(chk.status, chk.role, chk.path, pid,
                                        chk.detail + "; it now holds another fingerprint (rewritten by a later run?)")
                add(chk)

    # unexpected product-like files
    pipe = _resolved_pipeline(m)
    if pipe.get("product_dir"):
        product_dirs.add(_norm(pipe["product_dir"]))
    failed = {p.get("partition") for p in m["partitions"] if p.get("status") != "ok"}
    this_run = {p.get("partition") for p in m["partitions"]}
    for folder in sorted(product_dirs):
        try:
            entries = sorted(os.scandir(folder), key=lambda e: e.name)
        except OSError:
            continue
        for e in entries:
            if e.name.startswith(".") or not e.name.endswith(".parquet") or not e.is_file():
                continue
            if _norm(e.path) in listed:
                continue
            stem = e.name[: -len(".quarantine.parquet")] if e.name.endswith(".quarantine.parquet") else e.name[: -len(".parquet")]
            if stem not in this_run and _other_runs_current_product(Path(e.path), stem):
                continue  # another partition's current product (an archive run covers some days only)
            detail = "not listed in the manifest"
            if stem in failed:
                detail += f" (partition {stem} failed in this run: the file is older)"
            add(FileCheck("unexpected", "product-like file", e.path, stem if stem in failed else None, detail))
    return report


def _other_runs_current_product(path: Path, partition: str) -> bool:
    """A stable product name of a partition this run did not cover: a symbolic link into the product
    store whose target exists and is that same partition's product (``<partition>-<fingerprint>``)."""
    if not path.is_symlink():
        return False
    target = Path(os.readlink(path))
    quarantine = path.name.endswith(".quarantine.parquet")
    pattern = re.compile(re.escape(partition) + r"-[0-9a-f]{16}" + (r"\.quarantine" if quarantine else "") + r"\.parquet")
    return (target.parent.name == "by-fingerprint" and pattern.fullmatch(target.name) is not None
            and (path.parent / target).is_file())


def format_report(report: VerifyReport, show_ok: bool = False) -> list[str]:
    lines = [f"verify {report.manifest}: run {report.run_id}"]
    for c in report.checks:
        if c.status == "ok" and not show_ok:
            continue
        where = f"{c.role}" + (f", partition {c.partition}" if c.partition else "")
        lines.append(f"  {c.status.upper():<11}{c.path}  ({where})" + (f": {c.detail}" if c.detail else ""))
    n = report.counts()
    lines.append(f"{len(report.checks)} file(s): {n['ok']} ok, {n['missing']} missing, {n['modified']} modified, "
                 f"{n['unexpected']} unexpected")
    lines.append("verified: every file is as the manifest says" if report.ok else "NOT VERIFIED")
    return lines


# ---------------------------------------------------------------------------- command line
def cmd_verify(args) -> int:
    report = verify_manifest(args.manifest)
    for line in format_report(report, show_ok=args.all):
        print(line)
    return EXIT_OK if report.ok else EXIT_VERIFY


def add_parser(sub) -> argparse.ArgumentParser:
    v = sub.add_parser("verify", help="re-hash every file a run's manifest lists; report missing, modified, unexpected")
    v.add_argument("manifest", help="a run's manifest (products/manifests/<run id>.json)")
    v.add_argument("--all", action="store_true", help="list the files that are fine too")
    v.add_argument("--verbose", action="store_true", help="show the traceback of an internal error")
    v.set_defaults(func=cmd_verify)
    return v
