"""Loading and validating a relcorr TOML configuration.

Everything is checked before any task runs.  Every problem is reported as
``FILE: KEY.PATH: found X, expected Y`` and all problems of a file are
reported together.  See README.md, "Configuration reference".
"""
from __future__ import annotations

import datetime
import fnmatch
import glob
import hashlib
import re
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on 3.10 only
    import tomli as tomllib

from pipelines import schemas
from pipelines.errors import ConfigError
from pipelines.registry import RegistryError, discover
from stages.base import Param, Stage

RECORD_KINDS = ("tracking", "clock", "orientation")

# Each table's keys: name -> Param (the same checker the stages use).
PIPELINE_KEYS = {
    p.name: p
    for p in (
        Param("name", "str", None, "name of the pipeline, shown in manifests"),
        Param("record_kind", "str", None, "kind of raw records", choices=RECORD_KINDS),
        Param("work_dir", "str", "work", "directory of the intermediate stage results (relative to the config file)"),
        Param("product_dir", "str", "products", "directory of products, quarantine files and manifests"),
        Param("batch_rows", "int", 65536, "records per batch (and per Parquet row group)", minimum=1000, maximum=4_000_000),
    )
}
PIPELINE_REQUIRED = ("name", "record_kind", "inputs")

MODELS_KEYS = {
    p.name: p
    for p in (
        Param("leap_seconds", "str", "astropy-iers-data", "source of the UTC leap-second table", choices=("astropy-iers-data",)),
        Param("earth_orientation", "str", "astropy-iers-data", "source of UT1-UTC and polar motion", choices=("astropy-iers-data",)),
        Param(
            "eop_beyond_table",
            "str",
            "flag",
            "records needing Earth orientation beyond the table: keep with a flag, or quarantine",
            choices=("flag", "quarantine"),
        ),
    )
}

DEMO_KEYS = {
    p.name: p
    for p in (
        Param("scenario", "str", "daily", "invented scenario: daily records, a probe's solar conjunction, links in a constellation, "
              "a gyroscope satellite, or laser ranging of an Earth satellite",
              choices=("daily", "conjunction", "constellation", "gyroscope", "laser_ranging")),
        Param("seed", "int", 20261202, "random seed of the generated scenario", minimum=0),
        Param("records_per_partition", "int", 2000, "records in each generated raw file", minimum=10, maximum=10_000_000),
        Param("partitions", "int", 2, "number of generated raw files", minimum=1, maximum=366),
        Param("simulate_gamma", "float", 1.0, "conjunction scenario: PPN gamma the observed values are simulated with",
              minimum=0.0, maximum=2.0),
        Param("doppler_noise", "float", 1e-13, "conjunction scenario: white noise of the Doppler records, fractional "
              "frequency (60 s counts)", minimum=0.0, maximum=1e-9),
    )
}

TOP_KEYS = ("pipeline", "models", "demo", "stages")


@dataclass(frozen=True)
class StagePlan:
    index: int               # 1-based position in the chain
    cls: type[Stage]
    params: dict[str, Any]   # resolved: defaults filled in
    columns: frozenset = frozenset()  # columns available to the stage

    @property
    def name(self) -> str:
        return self.cls.name


@dataclass
class Config:
    path: Path
    sha256: str
    base_dir: Path
    name: str
    record_kind: str
    inputs: list[str]
    work_dir: Path
    product_dir: Path
    batch_rows: int
    models: dict[str, Any]
    stages: list[StagePlan]
    demo: dict[str, Any] | None = None
    input_files: list[Path] = field(default_factory=list)
    #: partition id -> UTC day (ISO date) for inputs given by a {date} template
    input_dates: dict[str, str] = field(default_factory=dict)

    @property
    def dated(self) -> bool:
        """Inputs organised by UTC day (a ``{date}`` template): runs select a range of days."""
        return any(DATE_FIELD in p for p in self.inputs)

    def resolved(self) -> dict[str, Any]:
        """The fully resolved configuration, as recorded in the manifest."""
        return {
            "pipeline": {
                "name": self.name,
                "record_kind": self.record_kind,
                "inputs": list(self.inputs),
                "work_dir": str(self.work_dir),
                "product_dir": str(self.product_dir),
                "batch_rows": self.batch_rows,
            },
            "models": dict(self.models),
            "demo": dict(self.demo) if self.demo is not None else None,
            "stages": [{"use": s.name, **s.params} for s in self.stages],
        }

    #: partition id of each input file (the file's stem; for a {date} template whose file names do not
    #: hold the date, e.g. a dataset partitioned by date=YYYY-MM-DD folders, "<date>-<stem>")
    input_ids: dict[Path, str] = field(default_factory=dict)

    def partitions(self) -> list[tuple[str, Path]]:
        """(partition id, input file) pairs, sorted by id."""
        return sorted(((self.input_ids.get(p) or partition_id(p), p) for p in self.input_files), key=lambda x: x[0])


def partition_id(path: Path) -> str:
    name = Path(path).name
    return name[: -len(".parquet")] if name.endswith(".parquet") else name


def _describe(value: Any) -> str:
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "an array"
    return repr(value)


def _check_table(problems, path, prefix, table, keys, required=()):
    """Check a TOML table against a dict of Params; return resolved values."""
    out: dict[str, Any] = {}
    for key in table:
        if key not in keys and key not in required:
            allowed = ", ".join(sorted(set(keys) | set(required)))
            problems.append((path, f"{prefix}.{key}", f"unknown key; expected one of: {allowed}"))
    for name, param in keys.items():
        if name in table:
            value = table[name]
            why = param.check(value)
            if why:
                problems.append((path, f"{prefix}.{name}", f"found {_describe(value)}, {why}"))
            else:
                out[name] = param.normalise(value)
        elif name in required:
            problems.append((path, f"{prefix}.{name}", f"missing; expected {param.expected()}"))
        else:
            out[name] = param.default
    return out


def read_toml(path: Path) -> dict[str, Any]:
    try:
        with open(path, "rb") as fh:  # tomllib needs binary mode
            return tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError([(str(path), "", "file not found")]) from None
    except IsADirectoryError:
        raise ConfigError([(str(path), "", "is a directory, expected a TOML file")]) from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError([(str(path), "", f"TOML syntax error: {exc}")]) from None
    except UnicodeDecodeError as exc:
        raise ConfigError([(str(path), "", f"not UTF-8 text: {exc}")]) from None


def load_config(path: str | Path, base_dir: str | Path | None = None, require_inputs: bool = True) -> Config:
    """Read, validate and resolve a configuration; raise ConfigError listing every problem.

    ``base_dir`` overrides the directory relative paths are taken from (the
    config file's own directory by default).  With ``require_inputs`` false,
    inputs that match no file are accepted when the config has a ``[demo]``
    table (the demo generates them).
    """
    path = Path(path)
    raw_bytes = b""
    try:
        raw_bytes = path.read_bytes()
    except OSError:
        pass
    doc = read_toml(path)
    where = str(path)
    problems: list[tuple[str, str, str]] = []
    base = Path(base_dir) if base_dir is not None else path.resolve().parent

    for key in doc:
        if key not in TOP_KEYS:
            problems.append((where, key, f"unknown table; expected one of: {', '.join(TOP_KEYS)}"))

    pipeline = doc.get("pipeline")
    if not isinstance(pipeline, dict):
        problems.append((where, "pipeline", f"found {_describe(pipeline) if pipeline is not None else 'nothing'}, expected a [pipeline] table"))
        pipeline = {}
    pipe = _check_table(problems, where, "pipeline", {k: v for k, v in pipeline.items() if k != "inputs"}, PIPELINE_KEYS, PIPELINE_REQUIRED)

    inputs = pipeline.get("inputs")
    if inputs is None:
        problems.append((where, "pipeline.inputs", "missing; expected an array of file paths or glob patterns"))
        inputs = []
    elif not (isinstance(inputs, list) and inputs and all(isinstance(i, str) and i for i in inputs)):
        problems.append((where, "pipeline.inputs", f"found {_describe(inputs)}, expected a non-empty array of file paths or glob patterns"))
        inputs = []

    models_doc = doc.get("models", {})
    if not isinstance(models_doc, dict):
        problems.append((where, "models", f"found {_describe(models_doc)}, expected a table"))
        models_doc = {}
    models = _check_table(problems, where, "models", models_doc, MODELS_KEYS)

    demo = None
    if "demo" in doc:
        if not isinstance(doc["demo"], dict):
            problems.append((where, "demo", f"found {_describe(doc['demo'])}, expected a table"))
        else:
            demo = _check_table(problems, where, "demo", doc["demo"], DEMO_KEYS)

    # ---- stages -------------------------------------------------------
    try:
        registry = discover()
    except RegistryError as exc:
        problems.append((where, "stages", str(exc)))
        registry = {}
    stage_docs = doc.get("stages", [])
    if not isinstance(stage_docs, list) or not all(isinstance(s, dict) for s in stage_docs):
        problems.append((where, "stages", f"found {_describe(stage_docs)}, expected an array of tables ([[stages]])"))
        stage_docs = []
    record_kind = pipe.get("record_kind")
    available = schemas.ingest_columns(record_kind) if record_kind in RECORD_KINDS else None
    plans: list[StagePlan] = []
    seen_names: set[str] = set()
    for i, sdoc in enumerate(stage_docs, start=1):
        key = f"stages[{i}]"
        use = sdoc.get("use")
        if not isinstance(use, str):
            problems.append((where, f"{key}.use", f"found {_describe(use) if use is not None else 'nothing'}, expected the name of a stage ({', '.join(sorted(registry)) or 'none installed'})"))
            continue
        cls = registry.get(use)
        if cls is None:
            problems.append((where, f"{key}.use", f"found {use!r}, expected one of the installed stages: {', '.join(sorted(registry)) or 'none'}"))
            continue
        if use in seen_names:
            problems.append((where, f"{key}.use", f"stage {use!r} appears twice; each stage may run once per pipeline"))
        seen_names.add(use)
        if record_kind in RECORD_KINDS and record_kind not in cls.record_kinds:
            problems.append((where, f"{key}.use", f"stage {use!r} accepts record kinds {', '.join(cls.record_kinds)}, not {record_kind!r}"))
        params_doc = {k: v for k, v in sdoc.items() if k != "use"}
        params = _check_table(problems, where, key, params_doc, {p.name: p for p in cls.params})
        columns_before = frozenset(available or ())
        if available is not None:
            for col in cls.requires:
                if col.name not in available:
                    problems.append((where, f"{key}.use", f"stage {use!r} requires column {col.name!r}, which no earlier step provides"))
                elif available[col.name] is not None and available[col.name] != col.type:
                    problems.append((where, f"{key}.use", f"stage {use!r} requires column {col.name!r} as {col.type}, an earlier step provides {available[col.name]}"))
            for col in cls.provides:
                if col.name in available:
                    problems.append((where, f"{key}.use", f"stage {use!r} would overwrite column {col.name!r}; stages only add columns"))
                available[col.name] = col.type
        plans.append(StagePlan(index=i, cls=cls, params=params, columns=columns_before))

    cfg = Config(
        path=path,
        sha256=hashlib.sha256(raw_bytes).hexdigest(),
        base_dir=base,
        name=pipe.get("name", ""),
        record_kind=record_kind or "",
        inputs=list(inputs),
        work_dir=(base / pipe.get("work_dir", "work")),
        product_dir=(base / pipe.get("product_dir", "products")),
        batch_rows=pipe.get("batch_rows", 65536),
        models=models,
        stages=plans,
        demo=demo,
    )
    if not problems:
        from stages.base import StageContext

        for sp in plans:
            ctx = StageContext(record_kind=cfg.record_kind, models=dict(models), columns=sp.columns, base_dir=str(path.resolve().parent))
            for param, msg in sp.cls().validate(sp.params, ctx).items():
                problems.append((where, f"stages[{sp.index}].{param}", msg))
    if problems:
        raise ConfigError(problems)
    resolve_inputs(cfg, require=require_inputs or demo is None)
    return cfg


DATE_FIELD = "{date}"
_DATE_GLOB = "[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]"


def _date_regex(pattern: str) -> re.Pattern:
    """A regex matching the paths of a {date} template, capturing the date (glob characters allowed)."""
    out = []
    for part in re.split(r"(\{date\})", pattern):
        if part == DATE_FIELD:
            out.append(r"(?P<date>\d{4}-\d{2}-\d{2})")
        else:
            out.append(fnmatch.translate(part)[4:-3])  # the glob as a regex, without its anchors
    return re.compile("^" + "".join(out) + "$")


def resolve_inputs(cfg: Config, require: bool = True) -> None:
    """Expand the input globs (and {date} templates); a pattern matching nothing is a config error."""
    problems = []
    files: list[Path] = []
    dates: dict[Path, str] = {}
    for i, pattern in enumerate(cfg.inputs, start=1):
        full = pattern if Path(pattern).is_absolute() else str(cfg.base_dir / pattern)
        if full.count(DATE_FIELD) > 1:
            problems.append((str(cfg.path), f"pipeline.inputs[{i}]", f"found {pattern!r}, expected at most one {DATE_FIELD} field"))
            continue
        matched = sorted(Path(p) for p in glob.glob(full.replace(DATE_FIELD, _DATE_GLOB)))
        matched = [p for p in matched if p.is_file()]
        if DATE_FIELD in full:
            rx = _date_regex(full)
            for p in matched:
                m = rx.match(str(p))
                try:
                    dates[p] = datetime.date.fromisoformat(m.group("date")).isoformat()
                except (AttributeError, ValueError):
                    problems.append((str(cfg.path), f"pipeline.inputs[{i}]", f"{p}: the {DATE_FIELD} part is not a valid date"))
            matched = [p for p in matched if p in dates]
        if not matched and require and not cfg.dated:
            problems.append((str(cfg.path), f"pipeline.inputs[{i}]", f"found {pattern!r}, which matches no file (looked in {cfg.base_dir})"))
        files.extend(matched)
    # same file through two patterns: once
    unique = sorted({p.resolve(): p for p in files}.values(), key=lambda p: (p.name, str(p)))
    ids: dict[str, Path] = {}
    names: dict[Path, str] = {}
    for p in unique:
        pid = partition_id(p)
        if p in dates and dates[p] not in pid:
            pid = f"{dates[p]}-{pid}"
        names[p] = pid
        if pid in ids:
            problems.append((str(cfg.path), "pipeline.inputs", f"two inputs share the partition name {pid!r}: {ids[pid]} and {p}; rename one"))
        ids[pid] = p
    if problems:
        raise ConfigError(problems)
    cfg.input_files = unique
    cfg.input_ids = names
    cfg.input_dates = {names[p]: dates[p] for p in unique if p in dates}
