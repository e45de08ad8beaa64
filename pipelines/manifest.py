"""The provenance manifest of a run (JSON, versioned).

It maps onto W3C PROV ideas: entities (inputs, auxiliary model data,
outputs, each with role, path, sha256 and rows), activities (each step of
each partition, with name, version, parameters, references, rows in / out /
quarantined, reasons, wall time and whether it ran in this run or was
reused), and the agent (the software and its versions).  It proves, per
step and per partition, rows in = rows out + rows quarantined, from the
row counts of the files themselves.  No environment variables, no user names.
"""
from __future__ import annotations

import json
import platform
import subprocess
from datetime import datetime, timezone
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Any

import pyarrow.parquet as pq

from pipelines.parquet_io import read_relcorr_metadata, sha256_file
from pipelines.plan import PRODUCT_NAME, RunPlan, Step, current_product_path
from pipelines.tasks import read_failure

MANIFEST_VERSION = 1


def utc_now() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _version(dist: str) -> str | None:
    try:
        return version(dist)
    except PackageNotFoundError:
        return None


def git_revision() -> str | None:
    """The git commit of relcorr's source tree, when it is a checkout."""
    root = Path(__file__).resolve().parents[1]
    if not (root / ".git").exists():
        return None
    try:
        out = subprocess.run(["git", "-C", str(root), "rev-parse", "HEAD"], capture_output=True, text=True, timeout=5)
    except (OSError, subprocess.SubprocessError):
        return None
    return out.stdout.strip() or None if out.returncode == 0 else None


def software() -> dict[str, Any]:
    return {
        "relcorr": _version("relcorr"),
        "git_revision": git_revision(),
        "python": platform.python_version(),
        **{name: _version(name) for name in ("numpy", "astropy", "astropy-iers-data", "pyerfa", "pyarrow", "luigi")},
    }


def _file_entity(path: Path, role: str) -> dict[str, Any]:
    entity: dict[str, Any] = {"role": role, "path": str(path)}
    if path.is_file():
        entity["sha256"] = sha256_file(path)
        entity["bytes"] = path.stat().st_size
        try:
            entity["rows"] = pq.read_metadata(path).num_rows
        except Exception:  # not Parquet, or unreadable: the failure is reported elsewhere
            entity["rows"] = None
    else:
        entity["missing"] = True
    return entity


def _step_activity(step: Step, run_id: str, complete: bool, current: tuple[Path, Path] | None = None) -> dict[str, Any]:
    act: dict[str, Any] = {
        "step": step.name,
        "version": step.version,
        "fingerprint": step.fingerprint,
        "definition": step.definition,
    }
    if step.stage is not None:
        act["references"] = [r.citation for r in step.stage.cls.references]
    if not complete:
        failure = read_failure(step)
        if failure is not None:
            act["status"] = "failed"
            act["error"] = failure.get("message")
            act["error_kind"] = failure.get("kind")
        else:
            act["status"] = "not run"
        return act
    try:
        activity = json.loads(step.activity.read_text())
    except (OSError, ValueError):
        activity = {}
    meta = read_relcorr_metadata(step.output) or {}
    stats = meta.get("stats", {})
    act["status"] = "ran" if activity.get("run_id") == run_id else "reused"
    act["produced_by_run"] = activity.get("run_id")
    act["wall_s"] = activity.get("wall_s")
    act["rows_in"] = stats.get("rows_in")
    act["rows_out"] = stats.get("rows_out")
    act["rows_quarantined"] = stats.get("rows_quarantined")
    act["reasons"] = stats.get("reasons", {})
    if "summary" in stats:
        act["summary"] = stats["summary"]  # e.g. per-clock statistics of a whole-partition pass
    if "flags" in stats:
        act["flags"] = stats["flags"]  # value counts of the stage's per-record status columns
    act["outputs"] = [_file_entity(step.output, "records"), _file_entity(step.quarantine, "quarantine")]
    if current is not None:  # the product: its stable names point at these files
        for entity, link in zip(act["outputs"], current):
            entity["current"] = str(link)
    files_out = act["outputs"][0].get("rows")
    files_q = act["outputs"][1].get("rows")
    act["balanced"] = (
        act["rows_in"] is not None
        and act["rows_in"] == (act["rows_out"] or 0) + (act["rows_quarantined"] or 0)
        and files_out == act["rows_out"]
        and files_q == act["rows_quarantined"]
    )
    return act


def build_manifest(plan: RunPlan, run_id: str, started: str, ended: str, complete: dict[tuple[str, int], bool],
                   auxiliary: list[dict[str, Any]], chosen: list[str] | None = None,
                   selection: dict[str, Any] | None = None) -> dict[str, Any]:
    """The run-level manifest of the partitions ``chosen`` (all by default).  ``selection`` (the UTC
    days asked for and those without input) is recorded as given."""
    cfg = plan.config
    partitions = []
    all_ok = True
    balanced_all = True
    totals = {"rows_in": 0, "rows_out": 0, "rows_quarantined": 0}
    for pid in (list(plan.partitions) if chosen is None else chosen):
        pp = plan.partitions[pid]
        links = (current_product_path(cfg, pid), current_product_path(cfg, pid, quarantine=True))
        acts = [_step_activity(s, run_id, complete.get((pid, s.position), False),
                               links if s.name == PRODUCT_NAME else None) for s in pp.steps]
        product = acts[-1]
        chain_ok = all(a["rows_in"] == b["rows_out"] for a, b in zip(acts[1:-1], acts[:-2]) if a.get("rows_in") is not None)
        status = "ok" if all(a["status"] in ("ran", "reused") for a in acts) else "failed"
        entry: dict[str, Any] = {
            "partition": pid,
            "status": status,
            "input": _file_entity(pp.input, "raw records"),
            "steps": acts,
        }
        if status == "ok":
            rows_in = entry["input"].get("rows")
            rows_out = product["outputs"][0]["rows"]
            rows_q = product["outputs"][1]["rows"]
            step_q = sum(a["rows_quarantined"] for a in acts[:-1])
            balanced = (rows_in == rows_out + rows_q) and rows_q == step_q and chain_ok and all(a["balanced"] for a in acts)
            entry["balance"] = {"rows_in": rows_in, "rows_out": rows_out, "rows_quarantined": rows_q, "balanced": balanced}
            totals["rows_in"] += rows_in
            totals["rows_out"] += rows_out
            totals["rows_quarantined"] += rows_q
            balanced_all &= balanced
        else:
            all_ok = False
            failed = [a for a in acts if a["status"] == "failed"]
            entry["error"] = failed[0]["error"] if failed else "not run"
        partitions.append(entry)
    totals["balanced"] = balanced_all and totals["rows_in"] == totals["rows_out"] + totals["rows_quarantined"]
    estimates = run_estimates(cfg, partitions)
    return {
        "manifest_version": MANIFEST_VERSION,
        "run": {
            "id": run_id,
            "pipeline": cfg.name,
            "started_utc": started,
            "ended_utc": ended,
            "status": "succeeded" if all_ok and totals["balanced"] else ("unbalanced" if all_ok else "partial"),
        },
        "software": software(),
        "config": {"path": str(Path(cfg.path).resolve()), "sha256": cfg.sha256, "resolved": cfg.resolved()},
        **({"selection": selection} if selection else {}),
        "auxiliary": auxiliary,
        "stages": [
            {
                "name": sp.name,
                "version": sp.cls.version,
                "params": sp.params,
                "references": [{"citation": r.citation, "used_for": r.used_for} for r in sp.cls.references],
            }
            for sp in cfg.stages
        ],
        "partitions": partitions,
        "totals": totals,
        **({"estimates": estimates} if estimates else {}),
    }


def run_estimates(cfg, partitions: list[dict[str, Any]]) -> dict[str, Any]:
    """Run-level estimates: gamma from the gamma_fit normal equations of every complete partition,
    summed (stages.physics.gamma_estimate), with gamma = gamma_model + delta_gamma."""
    from stages.physics import gamma_estimate as ge

    parts = [a["summary"]["normal_equations"] for p in partitions if p["status"] == "ok" for a in p["steps"]
             if a["step"] == "gamma_fit" and a.get("summary")]
    if not parts:
        return {}
    sol = ge.solve(ge.combine(parts))
    models = {sp.params["gamma"] for sp in cfg.stages if sp.name in ("light_time", "doppler")}
    gamma_model = models.pop() if len(models) == 1 else None
    sol["gamma_model"] = gamma_model
    sol["gamma"] = None if gamma_model is None or sol["delta_gamma"] is None else gamma_model + sol["delta_gamma"]
    if len(models) > 1:
        sol["note"] = "light_time and doppler used different gamma values; only delta_gamma is meaningful per stage"
    sol["partitions"] = len(parts)
    return {"gamma": sol}


def partition_manifest(run_manifest: dict[str, Any], entry: dict[str, Any]) -> dict[str, Any]:
    """One partition's manifest: the run's header (run, software, config, models, stages) and its entry."""
    head = {k: v for k, v in run_manifest.items() if k not in ("partitions", "totals", "estimates", "partition_manifests",
                                                                "selection")}
    return {**head, "partition": entry}
