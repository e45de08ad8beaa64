"""The resolved plan of a run: for each partition, the chain of steps with fingerprints and paths.

Values never depend on the batch size (stages are proven batch-independent),
so ``batch_rows`` is not part of a fingerprint.

A step's fingerprint is the sha256 of (step name, algorithm version, resolved
parameters, identities of the model data it reads, upstream fingerprint);
ingest's upstream is the sha256 of its input file.  Change a parameter of a
stage and that stage and every later one get new fingerprints, hence new
output paths; earlier results are reused as they are.

Model identities are taken per partition: a stage is told the span of UTC days
its records cover (``StageContext.span_mjd``, from the raw file's time tags),
so that a model table whose values changed only outside that span (a new
Earth-orientation table that replaced predictions by measurements for later
days) leaves the partition's fingerprints, and its products, as they were.

Partitions are planned lazily: a run over a few days of a long archive hashes
and reads only the files of those days.
"""
from __future__ import annotations

import functools
import hashlib
import os
from collections.abc import Mapping
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


def stage_context(cfg: Config, partition: str = "", stage: StagePlan | None = None,
                  span_mjd: tuple[int, int] | None = None) -> StageContext:
    return StageContext(record_kind=cfg.record_kind, models=dict(cfg.models), partition=partition,
                        columns=stage.columns if stage is not None else frozenset(),
                        base_dir=str(Path(cfg.path).resolve().parent), span_mjd=span_mjd)


_SPAN_CACHE: dict[tuple[str, int, int], tuple[int, int] | None] = {}


def time_tag_span(path: Path) -> tuple[int, int] | None:
    """(first, last) UTC day (MJD) of the valid time tags of a raw file, or None (none valid, or
    unreadable: the stages then identify their model tables whole).  Reads the one column."""
    import pyarrow.parquet as pq

    from pipelines.timetags import normalise_time_tags

    st = os.stat(path)
    key = (str(Path(path).resolve()), st.st_size, st.st_mtime_ns)
    if key not in _SPAN_CACHE:
        span = None
        try:
            col = pq.read_table(path, columns=["time_tag"])["time_tag"].combine_chunks()
            if hasattr(col.type, "value_type"):
                col = col.dictionary_decode()
            tags = normalise_time_tags(col)
            ok = tags.status == 0
            if ok.any():
                mjd = tags.mjd[ok]
                span = (int(mjd.min()), int(mjd.max()))
        except Exception:  # any problem: ingest reports it; here only the span is lost
            span = None
        _SPAN_CACHE[key] = span
    return _SPAN_CACHE[key]


def stage_definitions(cfg: Config, span_mjd: tuple[int, int] | None = None) -> list[dict[str, Any]]:
    """Per stage: what enters its fingerprint apart from the upstream one."""
    out = []
    for sp in cfg.stages:
        ctx = stage_context(cfg, stage=sp, span_mjd=span_mjd)
        inst = sp.cls()
        out.append({
            "step": sp.name,
            "version": sp.cls.version,
            "params": sp.params,
            "models": inst.model_identities(sp.params, ctx),
        })
    return out


def plan_partition(cfg: Config, partition: str, path: Path, stage_defs: list[dict[str, Any]] | None = None) -> PartitionPlan:
    stage_defs = stage_definitions(cfg, time_tag_span(path)) if stage_defs is None else stage_defs
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
        output=product_path(cfg, partition, fp),
        quarantine=product_path(cfg, partition, fp, quarantine=True),
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


PRODUCT_STORE = "by-fingerprint"


def product_path(cfg: Config, partition: str, fp: str, quarantine: bool = False) -> Path:
    """Where a product is written: under its fingerprint, so that the products of an earlier run stay
    until a new run has completed; ``current_product_path`` then points at the new one."""
    kind = ".quarantine" if quarantine else ""
    return cfg.product_dir / PRODUCT_STORE / f"{partition}-{fp[:16]}{kind}.parquet"


def current_product_path(cfg: Config, partition: str, quarantine: bool = False) -> Path:
    """The stable name of a partition's current product: a symbolic link into ``by-fingerprint/``."""
    return cfg.product_dir / f"{partition}{'.quarantine' if quarantine else ''}.parquet"


class _LazyPartitions(Mapping):
    """partition id -> PartitionPlan, each planned (input hashed, time tags read) on first use."""

    def __init__(self, cfg: Config):
        self._cfg = cfg
        self._paths = dict(cfg.partitions())
        self._plans: dict[str, PartitionPlan] = {}

    def __getitem__(self, pid: str) -> PartitionPlan:
        if pid not in self._plans:
            self._plans[pid] = plan_partition(self._cfg, pid, self._paths[pid])
        return self._plans[pid]

    def __iter__(self):
        return iter(self._paths)

    def __len__(self) -> int:
        return len(self._paths)


@dataclass
class RunPlan:
    config: Config
    partitions: Mapping[str, PartitionPlan]


@functools.lru_cache(maxsize=8)
def load_plan(config_path: str, config_sha256: str, base_dir: str) -> RunPlan:
    """The plan as every worker process sees it (cached per process; partitions planned on demand)."""
    cfg = load_config(config_path, base_dir=base_dir)
    if cfg.sha256 != config_sha256:
        from pipelines.errors import ConfigError

        raise ConfigError([(config_path, "", "the file changed while the run was going on; run again")])
    return RunPlan(cfg, _LazyPartitions(cfg))
