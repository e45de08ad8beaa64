"""The luigi tasks: ingest -> stage 1 -> ... -> stage N -> product, per partition.

Each task is small: it finds its step in the run plan, streams its upstream
Parquet batch by batch through one function, and writes its outputs
atomically.  A task is complete when its output exists *and* carries the
expected fingerprint in its Parquet metadata.
"""
from __future__ import annotations

import dataclasses
import json
import time
import traceback
from pathlib import Path

import luigi
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from pipelines import ingest as ingest_mod
from pipelines.errors import RelcorrError
from pipelines.parquet_io import AtomicParquetWriter, clean_stray_temporaries, read_relcorr_metadata, write_json_atomic
from pipelines.plan import Step, load_plan, stage_context
from stages.physics.leap_seconds import load_leap_table


class FingerprintTarget(luigi.Target):
    """A Parquet file that counts as present only with the expected fingerprint."""

    def __init__(self, path: Path, fingerprint: str):
        self.path = Path(path)
        self.fingerprint = fingerprint

    def exists(self) -> bool:
        if not self.path.is_file():
            return False
        meta = read_relcorr_metadata(self.path)
        return bool(meta) and meta.get("fingerprint") == self.fingerprint


def failure_path(step: Step) -> Path:
    return step.activity.parent / f"failed-{step.position:02d}-{step.name}.json"


def progress(step: Step, partition: str, rows_in: int, rows_out: int, rows_q: int, seconds: float) -> None:
    extra = f" (+{rows_q} quarantined)" if rows_q else ""
    print(f"  done  {step.name:<16} {partition:<24} rows {rows_in:>9} -> {rows_out:>9}{extra}  {seconds:7.2f} s", flush=True)


class _PartitionTask(luigi.Task):
    config_path = luigi.Parameter()
    config_sha256 = luigi.Parameter()
    base_dir = luigi.Parameter()
    partition = luigi.Parameter()
    run_id = luigi.Parameter(significant=False, default="")

    position: int  # set by subclasses / parameter

    # -- plan lookups ---------------------------------------------------------
    def run_plan(self):
        return load_plan(self.config_path, self.config_sha256, self.base_dir)

    def step(self) -> Step:
        return self.run_plan().partitions[self.partition].steps[self.position]

    def output(self):
        step = self.step()
        return FingerprintTarget(step.output, step.fingerprint)

    def _common(self):
        return dict(config_path=self.config_path, config_sha256=self.config_sha256,
                    base_dir=self.base_dir, partition=self.partition, run_id=self.run_id)

    # -- run with failure records ----------------------------------------------
    def run(self):
        step = self.step()
        fail = failure_path(step)
        fail.unlink(missing_ok=True)  # another run of the same step may have removed it first
        for p in (step.output, step.quarantine, step.activity):
            clean_stray_temporaries(p)
        t0 = time.perf_counter()
        try:
            stats = self.execute(step)
        except RelcorrError as exc:
            write_json_atomic(fail, {"step": step.name, "partition": self.partition, "kind": "input",
                                     "message": str(exc), "run_id": self.run_id})
            raise
        except Exception as exc:
            write_json_atomic(fail, {"step": step.name, "partition": self.partition, "kind": "internal",
                                     "message": f"{type(exc).__name__}: {exc}",
                                     "traceback": traceback.format_exc(), "run_id": self.run_id})
            raise
        seconds = time.perf_counter() - t0
        progress(step, self.partition, stats["rows_in"], stats["rows_out"], stats["rows_quarantined"], seconds)

    def execute(self, step: Step) -> dict:
        raise NotImplementedError

    def _finish(self, step: Step, stats: dict, writer: AtomicParquetWriter, qwriter: AtomicParquetWriter,
                started: float) -> dict:
        """Close the quarantine file, write the activity record, then the main output (last: it marks completion)."""
        qwriter.close({"stats": stats})
        write_json_atomic(step.activity, {
            "step": step.name, "version": step.version, "fingerprint": step.fingerprint,
            "partition": self.partition, "run_id": self.run_id,
            "wall_s": round(time.perf_counter() - started, 6), **stats,
        })
        writer.close({"stats": stats})
        return stats


def _meta(step: Step, partition: str, role: str) -> dict:
    return {"fingerprint": step.fingerprint, "step": step.tag, "role": role, "partition": partition,
            "definition": step.definition}


class IngestTask(_PartitionTask):
    position = 0

    def execute(self, step: Step) -> dict:
        started = time.perf_counter()
        plan = self.run_plan()
        cfg = plan.config
        path = plan.partitions[self.partition].input
        pf = ingest_mod.open_input(path)
        ingest_mod.check_schema(path, pf.schema_arrow, cfg.record_kind)
        raw_schema = pa.schema(list(pf.schema_arrow))  # drop writer-specific schema metadata
        writer = AtomicParquetWriter(step.output, ingest_mod.output_schema(raw_schema), _meta(step, self.partition, "records"))
        qwriter = AtomicParquetWriter(step.quarantine, ingest_mod.quarantine_schema(raw_schema), _meta(step, self.partition, "quarantine"))
        reasons: dict[str, int] = {}
        try:
            for b in ingest_mod.iter_ingest(path, cfg.record_kind, load_leap_table(), cfg.batch_rows):
                writer.write(b.good)
                qwriter.write(b.quarantined)
                _count_reasons(reasons, b.quarantined)
        except BaseException:
            writer.abort()
            qwriter.abort()
            raise
        rows_in = pf.metadata.num_rows
        stats = {"rows_in": rows_in, "rows_out": writer.rows, "rows_quarantined": qwriter.rows,
                 "reasons": dict(sorted(reasons.items()))}
        return self._finish(step, stats, writer, qwriter, started)


def _count_reasons(acc: dict[str, int], q: pa.Table) -> None:
    if q.num_rows:
        vc = pc.value_counts(q["quarantine_reason"].combine_chunks())
        for item in vc.to_pylist():
            acc[item["values"]] = acc.get(item["values"], 0) + item["counts"]


class StageTask(_PartitionTask):
    position = luigi.IntParameter()

    def requires(self):
        if self.position == 1:
            return IngestTask(**self._common())
        return StageTask(position=self.position - 1, **self._common())

    def execute(self, step: Step) -> dict:
        started = time.perf_counter()
        plan = self.run_plan()
        cfg = plan.config
        upstream = plan.partitions[self.partition].steps[self.position - 1]
        sp = step.stage
        stage = sp.cls()
        ctx = stage_context(cfg, self.partition, sp)
        stats, writer, qwriter = stream_stage(stage, sp.params, ctx, upstream.output, step.output, step.quarantine,
                                              _meta(step, self.partition, "records"),
                                              _meta(step, self.partition, "quarantine"), cfg.batch_rows)
        return self._finish(step, stats, writer, qwriter, started)


def stream_stage(stage, params, ctx, src, out_path, q_path, meta: dict, q_meta: dict, batch_rows: int,
                 timing: dict | None = None):
    """Run one stage over the Parquet file ``src`` batch by batch (after its whole-partition pass, if it
    declares one).  Returns (stats, records writer, quarantine writer) with both writers still open:
    the caller closes them in the order that marks completion.  ``timing["apply_s"]``, when given,
    accumulates the time spent in the stage itself."""
    pf = pq.ParquetFile(src)
    in_schema = pa.schema(list(pf.schema_arrow))
    provided = [c.field() for c in stage.provides]
    summary = None
    if stage.partition_columns:  # a whole-partition pass over a few projected columns
        present = set(pf.schema_arrow.names)  # optional columns may be absent from this chain
        state = stage.prepare(pf.read(columns=[c for c in stage.partition_columns if c in present]), params, ctx)
        ctx = dataclasses.replace(ctx, state=state)
        summary = getattr(state, "summary", None)
    writer = AtomicParquetWriter(out_path, pa.schema(list(in_schema) + provided), meta)
    qwriter = AtomicParquetWriter(q_path, ingest_mod.quarantine_schema(in_schema), q_meta)
    reasons: dict[str, int] = {}
    flags: dict[str, dict[str, int]] = {c: {} for c in stage.flag_columns}
    tag = stage.tag()
    try:
        for batch in pf.iter_batches(batch_size=batch_rows):
            table = pa.Table.from_batches([batch])
            t0 = time.perf_counter()
            good, q = apply_stage(stage, params, ctx, table, provided, tag)
            if timing is not None:
                timing["apply_s"] = timing.get("apply_s", 0.0) + time.perf_counter() - t0
            writer.write(good)
            qwriter.write(q)
            _count_reasons(reasons, q)
            for col, acc in flags.items():
                _count_values(acc, good[col])
    except BaseException:
        writer.abort()
        qwriter.abort()
        raise
    stats = {"rows_in": pf.metadata.num_rows, "rows_out": writer.rows, "rows_quarantined": qwriter.rows,
             "reasons": dict(sorted(reasons.items())),
             "flags": {c: dict(sorted(acc.items())) for c, acc in flags.items()}}
    if summary is not None:
        stats["summary"] = summary
    return stats, writer, qwriter


def _count_values(acc: dict[str, int], column) -> None:
    if len(column):
        for item in pc.value_counts(column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column).to_pylist():
            key = str(item["values"])
            acc[key] = acc.get(key, 0) + item["counts"]


def apply_stage(stage, params, ctx, table: pa.Table, provided: list[pa.Field], tag: str):
    """Run one stage on one batch: (records with new columns and ledger, quarantined records)."""
    n = table.num_rows
    result = stage.apply(table, params, ctx)
    names = [f.name for f in provided]
    if sorted(result.columns) != sorted(names):
        raise RuntimeError(f"stage {stage.name!r} returned columns {sorted(result.columns)}, declared {sorted(names)}")
    out = table
    for f in provided:
        col = result.columns[f.name]
        arr = col if isinstance(col, (pa.Array, pa.ChunkedArray)) else pa.array(np.asarray(col))
        if len(arr) != n:
            raise RuntimeError(f"stage {stage.name!r} returned {len(arr)} values of {f.name!r} for {n} records")
        out = out.append_column(f, pc.cast(arr, f.type))
    touched = np.ones(n, dtype=bool) if result.touched is None else np.asarray(result.touched, dtype=bool)
    ledger = out["ledger"]
    joined = pc.binary_join_element_wise(ledger, pa.scalar(tag), ";")
    out = out.set_column(out.schema.get_field_index("ledger"), out.schema.field("ledger"),
                         pc.if_else(pa.array(touched), joined, ledger))
    code = np.zeros(n, dtype=np.int16)
    reasons = list(result.quarantine)
    for k, reason in enumerate(reasons, start=1):
        if reason not in stage.quarantine_reasons:
            raise RuntimeError(f"stage {stage.name!r} quarantined with undeclared reason {reason!r}")
        mask = np.asarray(result.quarantine[reason], dtype=bool)
        code[mask & (code == 0)] = k
    bad = code != 0
    if not bad.any():
        empty = table.slice(0, 0)
        return out, ingest_mod.quarantine_table(empty, stage.name, pa.array([], pa.string()), np.zeros(0, np.int64))
    lookup = np.array([""] + reasons, dtype=object)
    q = ingest_mod.quarantine_table(table.filter(pa.array(bad)), stage.name,
                                    pa.array(lookup[code[bad]], pa.string()), np.zeros(0, np.int64))
    return out.filter(pa.array(~bad)), q


class ProductTask(_PartitionTask):
    """The corrected records of one partition, and all its quarantined records in one file."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.position = len(self.run_plan().partitions[self.partition].steps) - 1

    def requires(self):
        if self.position == 1:
            return IngestTask(**self._common())
        return StageTask(position=self.position - 1, **self._common())

    def output(self):
        step = self.step()
        return [FingerprintTarget(step.output, step.fingerprint), FingerprintTarget(step.quarantine, step.fingerprint)]

    def execute(self, step: Step) -> dict:
        started = time.perf_counter()
        plan = self.run_plan()
        cfg = plan.config
        steps = plan.partitions[self.partition].steps
        last = steps[self.position - 1]
        pf = pq.ParquetFile(last.output)
        meta = _meta(step, self.partition, "product")
        meta["columns"] = {f.name: (f.metadata or {}).get(b"unit", b"").decode() for f in pf.schema_arrow}
        meta["steps"] = [s.tag for s in steps[:-1]]
        writer = AtomicParquetWriter(step.output, pa.schema(list(pf.schema_arrow)), meta)
        ingest_q = pq.ParquetFile(steps[0].quarantine)
        q_schema = pa.schema(list(ingest_q.schema_arrow))
        qwriter = AtomicParquetWriter(step.quarantine, q_schema, _meta(step, self.partition, "quarantine"))
        reasons: dict[str, int] = {}
        try:
            for batch in pf.iter_batches(batch_size=cfg.batch_rows):
                writer.write(pa.Table.from_batches([batch]))
            for s in steps[:-1]:
                qpf = pq.ParquetFile(s.quarantine)
                for batch in qpf.iter_batches(batch_size=cfg.batch_rows):
                    t = pa.Table.from_batches([batch])
                    t = t.select(q_schema.names).cast(q_schema, safe=False)
                    qwriter.write(t)
                    _count_reasons(reasons, t)
        except BaseException:
            writer.abort()
            qwriter.abort()
            raise
        rows_in = pq.read_metadata(plan.partitions[self.partition].input).num_rows
        stats = {"rows_in": rows_in, "rows_out": writer.rows, "rows_quarantined": qwriter.rows,
                 "reasons": dict(sorted(reasons.items()))}
        return self._finish(step, stats, writer, qwriter, started)


class RunAll(luigi.WrapperTask):
    """The products of the selected partitions (all of them when ``partitions`` is empty): one wrapper
    task for a run, a date range or a night."""

    config_path = luigi.Parameter()
    config_sha256 = luigi.Parameter()
    base_dir = luigi.Parameter()
    partitions = luigi.ListParameter(default=())
    run_id = luigi.Parameter(significant=False, default="")

    def requires(self):
        plan = load_plan(self.config_path, self.config_sha256, self.base_dir)
        chosen = list(self.partitions) or list(plan.partitions)
        return [ProductTask(config_path=self.config_path, config_sha256=self.config_sha256, base_dir=self.base_dir,
                            partition=pid, run_id=self.run_id) for pid in chosen]


def read_failure(step: Step) -> dict | None:
    p = failure_path(step)
    if p.is_file():
        try:
            return json.loads(p.read_text())
        except ValueError:
            return None
    return None
