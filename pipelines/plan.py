"""The resolved plan of a run: for each partition, the chain of steps with fingerprints and paths.

Values never depend on the batch size (stages are proven batch-independent),
so ``batch_rows`` is not part of a fingerprint.

A step's fingerprint is the sha256 of (step name, algorithm version, resolved
parameters, identities of the model data it reads, upstream fingerprint);
ingest's upstream is the sha256 of its input file.  Change a parameter of a
stage and that stage and every later one get new fingerprints, hence new
output paths; earlier results are reused as they are.
"""
from __future__ import annotations

import functools
import hashlib
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pipelines.config import Config, StagePlan, load_config
from pipelines.ingest import INGEST_NAME, INGEST_VERSION
from pipelines.parquet_io import canonical_json, sha256_file
from stages.base import StageContext
from stages.physics.leap_seconds import load_leap_table

PRODUCT_NAME = "product"
PRODUCT_VERSION = 1


@dataclass(frozen=True)
class Step:
    position: int              # 0 = ingest, 1.. = stages, len+1 = product
    name: str
    version: int
    fingerprint: str
    definition: dict[str, Any]  # what the fingerprint was computed from
    output: Path
    quarantine: Path
    activity: Path
    stage: StagePlan | None = None

    @property
    def tag(self) -> str:
        return f"{self.name}@{self.version}"


@dataclass(frozen=True)
class PartitionPlan:
    partition: str
    input: Path
    input_sha256: str
    steps: tuple[Step, ...]   # ingest, stages..., product


_HASH_CACHE: dict[tuple[str, int, int], str] = {}


def input_sha256(path: Path) -> str:
    st = os.stat(path)
    key = (str(Path(path).resolve()), st.st_size, st.st_mtime_ns)
    if key not in _HASH_CACHE:
        _HASH_CACHE[key] = sha256_file(path)
    return _HASH_CACHE[key]


def fingerprint(definition: dict[str, Any]) -> str:
    return hashlib.sha256(canonical_json(definition).encode()).hexdigest()


def stage_context(cfg: Config, partition: str = "", stage: StagePlan | None = None) -> StageContext:
    return StageContext(record_kind=cfg.record_kind, models=dict(cfg.models), partition=partition,
                        columns=stage.columns if stage is not None else frozenset(),
                        base_dir=str(Path(cfg.path).resolve().parent))


def stage_definitions(cfg: Config) -> list[dict[str, Any]]:
    """Per stage: what enters its fingerprint apart from the upstream one."""
    out = []
    for sp in cfg.stages:
        ctx = stage_context(cfg, stage=sp)
        inst = sp.cls()
        out.append({
            "step": sp.name,
            "version": sp.cls.version,
            "params": sp.params,
            "models": inst.model_identities(sp.params, ctx),
        })
    return out


def plan_partition(cfg: Config, partition: str, path: Path, stage_defs: list[dict[str, Any]] | None = None) -> PartitionPlan:
    stage_defs = stage_definitions(cfg) if stage_defs is None else stage_defs
    sha = input_sha256(path)
    leap = load_leap_table()
    work = cfg.work_dir / partition
    steps = []
    definition = {
        "step": INGEST_NAME,
        "version": INGEST_VERSION,
        "record_kind": cfg.record_kind,
        "models": {"leap_seconds": leap.identity},
        "upstream": {"input_sha256": sha},
    }
    fp = fingerprint(definition)
    steps.append(_step(0, INGEST_NAME, INGEST_VERSION, fp, definition, work))
    for sp, sdef in zip(cfg.stages, stage_defs):
        definition = {**sdef, "upstream": fp}
        fp = fingerprint(definition)
        steps.append(_step(sp.index, sp.name, sp.cls.version, fp, definition, work, sp))
    definition = {"step": PRODUCT_NAME, "version": PRODUCT_VERSION, "upstream": fp}
    fp = fingerprint(definition)
    product = Step(
        position=len(cfg.stages) + 1,
        name=PRODUCT_NAME,
        version=PRODUCT_VERSION,
        fingerprint=fp,
        definition=definition,
        output=cfg.product_dir / f"{partition}.parquet",
        quarantine=cfg.product_dir / f"{partition}.quarantine.parquet",
        activity=work / f"product-{fp[:16]}.activity.json",
    )
    steps.append(product)
    return PartitionPlan(partition, Path(path), sha, tuple(steps))


def _step(position, name, version, fp, definition, work: Path, stage: StagePlan | None = None) -> Step:
    stem = f"{position:02d}-{name}-{fp[:16]}"
    return Step(
        position=position,
        name=name,
        version=version,
        fingerprint=fp,
        definition=definition,
        output=work / f"{stem}.parquet",
        quarantine=work / f"{stem}.quarantine.parquet",
        activity=work / f"{stem}.activity.json",
        stage=stage,
    )


@dataclass
class RunPlan:
    config: Config
    partitions: dict[str, PartitionPlan]


@functools.lru_cache(maxsize=8)
def load_plan(config_path: str, config_sha256: str, base_dir: str) -> RunPlan:
    """The plan as every worker process sees it (cached per process)."""
    cfg = load_config(config_path, base_dir=base_dir)
    if cfg.sha256 != config_sha256:
        from pipelines.errors import ConfigError

        raise ConfigError([(config_path, "", "the file changed while the run was going on; run again")])
    defs = stage_definitions(cfg)
    parts = {pid: plan_partition(cfg, pid, path, defs) for pid, path in cfg.partitions()}
    return RunPlan(cfg, parts)
