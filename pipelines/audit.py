"""``relcorr audit MANIFEST``: the provenance of one record, or the reach of one stage, in a run.

``--record ID``: the partition(s) whose product holds the record (a pyarrow dataset
scan filtered on ``record_id``: row groups whose statistics exclude the id are
skipped, and only the matching row is materialised), then for each step in the
record's ``ledger``, in order: version, parameters, model identities and
fingerprint (from the manifest's step definition), the run that produced the
step's output, and the value of every column the step adds for this record.  A
record that was quarantined is found in the quarantine file with its step and
reason (an id can be in both: a duplicate id keeps its first record and
quarantines the others).

``--stage NAME[@VERSION]``: per partition, how many product records carry the tag in
their ledger (a filter on the ``ledger`` column only), and with ``--list`` their ids.

As in ``relcorr diff``, an older run's records are read from its product only while the
product still carries that run's fingerprint, else from its work files.  Nothing here writes.
"""
from __future__ import annotations

import argparse
import re
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.dataset as ds
import pyarrow.parquet as pq

from pipelines.errors import EXIT_OK
from pipelines.verify import (ManifestError, load_manifest, quarantine_files, records_file, run_id, step_columns,
                              step_entry)

_TAG = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)(?:@([0-9]+))?$")


def _id_scalar(field_type: pa.DataType, text: str) -> pa.Scalar | None:
    """The record id as a scalar of the column's type; None when it cannot be one (e.g. 'abc' for integers)."""
    t = field_type.value_type if pa.types.is_dictionary(field_type) else field_type
    if pa.types.is_integer(t):
        try:
            return pa.scalar(int(text), t)
        except (ValueError, OverflowError, pa.ArrowInvalid):
            return None
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        return pa.scalar(text, t)
    try:
        return pa.scalar(text, pa.string()).cast(t)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None


def _find(path: Path, record_id: str, columns: list[str]) -> list[dict[str, Any]]:
    """The rows of a Parquet file whose record_id equals ``record_id``, only ``columns`` read."""
    dataset = ds.dataset(str(path), format="parquet")
    if "record_id" not in dataset.schema.names:
        return []
    value = _id_scalar(dataset.schema.field("record_id").type, record_id)
    if value is None:
        return []
    cols = [c for c in dict.fromkeys(["record_id"] + columns) if c in dataset.schema.names]
    table = dataset.to_table(columns=cols, filter=ds.field("record_id") == value)
    return _rows(table)


def _rows(table: pa.Table) -> list[dict[str, Any]]:
    """Rows as dicts of Python values; times as ISO text (a nanosecond timestamp has no exact Python value)."""
    columns = {}
    for name in table.column_names:
        col = table[name]
        if pa.types.is_temporal(col.type):
            col = pc.cast(col, pa.string())
        columns[name] = col.to_pylist()
    return [{k: v[i] for k, v in columns.items()} for i in range(table.num_rows)]


def _definition(act: dict[str, Any] | None) -> dict[str, Any]:
    if act is None:
        return {"in_manifest": False}
    d = act.get("definition") or {}
    return {
        "in_manifest": True,
        "params": d.get("params", {}),
        "models": d.get("models", {}),
        "fingerprint": act.get("fingerprint"),
        "status": act.get("status"),
        "produced_by_run": act.get("produced_by_run"),
    }


def audit_record(manifest: str | Path, record_id: str) -> dict[str, Any]:
    """Every occurrence of ``record_id`` in the run's products and quarantine files, with its provenance.
    ManifestError when the id is in none of them."""
    from stages.physics.offline import configure_offline

    configure_offline()
    m = load_manifest(manifest)
    found, quarantined, unreadable, failed = [], [], [], []
    for part in m["partitions"]:
        pid = part.get("partition")
        if part.get("status") != "ok":
            failed.append(pid)
            continue
        rf = records_file(part)
        if rf is None:
            unreadable.append(pid)
        else:
            chain = [(a.get("step"), a.get("version")) for a in part.get("steps", [])]
            wanted = ["ledger", "source_row"]
            for name, version in chain:
                wanted += list(step_columns(name, version, part)[0])
            for row in _find(rf.path, record_id, wanted):
                steps = []
                for tag in (row.get("ledger") or "").split(";"):
                    if not tag:
                        continue
                    name, _, ver = tag.partition("@")
                    version = int(ver) if ver.isdigit() else None
                    cols, origin = step_columns(name, version, part)
                    entry = {"tag": tag, "step": name, "version": version, **_definition(step_entry(part, name, version)),
                             "columns": {c: row[c] for c in cols if c in row}, "columns_from": origin}
                    steps.append(entry)
                tags = {s["tag"] for s in steps}
                untouched = [f"{n}@{v}" for n, v in chain if n != "product" and f"{n}@{v}" not in tags]
                found.append({"partition": pid, "file": str(rf.path), "source": rf.source, "record_id": row["record_id"],
                              "source_row": row.get("source_row"), "ledger": row.get("ledger"), "steps": steps,
                              "untouched_steps": untouched})
        for qf in quarantine_files(part):
            for row in _find(qf.path, record_id, ["quarantine_step", "quarantine_reason", "source_row"]):
                qstep = row.get("quarantine_step")
                chain = [a.get("step") for a in part.get("steps", [])]
                before = chain[: chain.index(qstep)] if qstep in chain else []
                quarantined.append({"partition": pid, "file": str(qf.path), "record_id": row["record_id"],
                                    "step": qstep, "reason": row.get("quarantine_reason"),
                                    "source_row": row.get("source_row"), "steps_before": before,
                                    "step_definition": {"version": (step_entry(part, qstep) or {}).get("version"),
                                                        **_definition(step_entry(part, qstep))}})
    if not found and not quarantined:
        skipped = [f"no readable records file for {', '.join(unreadable)}"] if unreadable else []
        skipped += [f"{', '.join(failed)} failed in this run"] if failed else []
        extra = f" (not searched: {'; '.join(skipped)})" if skipped else ""
        raise ManifestError(f"record {record_id!r} is in neither the products nor the quarantine files of run "
                            f"{run_id(m)}{extra}")
    return {"manifest": str(manifest), "run_id": run_id(m), "record_id": record_id,
            "found": found, "quarantined": quarantined, "unreadable_partitions": unreadable,
            "failed_partitions": failed}


def parse_tag(text: str) -> tuple[str, int | None]:
    mt = _TAG.match(text.strip())
    if not mt:
        raise ManifestError(f"--stage {text!r}: expected NAME or NAME@VERSION (e.g. time_scales@1)")
    return mt.group(1), (int(mt.group(2)) if mt.group(2) is not None else None)


def audit_stage(manifest: str | Path, stage: str, list_ids: bool = False) -> dict[str, Any]:
    """Per partition, the product records whose ledger holds ``NAME@VERSION`` (any version without one)."""
    m = load_manifest(manifest)
    name, version = parse_tag(stage)
    tag_re = re.escape(name) + "@" + (str(version) if version is not None else "[0-9]+")
    expr = pc.match_substring_regex(ds.field("ledger"), pattern=f"(^|;){tag_re}(;|$)")
    parts, total, total_rows, unreadable, failed = [], 0, 0, [], []
    in_chain = False
    for part in m["partitions"]:
        pid = part.get("partition")
        act = step_entry(part, name, version)
        in_chain |= act is not None
        if part.get("status") != "ok":
            failed.append(pid)
            continue
        rf = records_file(part)
        if rf is None:
            unreadable.append(pid)
            continue
        dataset = ds.dataset(str(rf.path), format="parquet")
        rows = pq.read_metadata(rf.path).num_rows
        entry: dict[str, Any] = {"partition": pid, "file": str(rf.path), "rows": rows}
        if list_ids:
            ids = dataset.to_table(columns=["record_id"], filter=expr)["record_id"].to_pylist()
            entry["touched"], entry["ids"] = len(ids), ids
        else:
            entry["touched"] = dataset.count_rows(filter=expr)
        if act is not None:
            entry["step"] = {"version": act.get("version"), "rows_in": act.get("rows_in"), "rows_out": act.get("rows_out"),
                             "rows_quarantined": act.get("rows_quarantined"), "reasons": act.get("reasons", {}),
                             **_definition(act)}
        parts.append(entry)
        total += entry["touched"]
        total_rows += rows
    return {"manifest": str(manifest), "run_id": run_id(m), "stage": name, "version": version,
            "in_chain": in_chain, "partitions": parts, "touched": total, "rows": total_rows,
            "unreadable_partitions": unreadable, "failed_partitions": failed}


# ---------------------------------------------------------------------------- report
def _v(v: Any) -> str:
    return repr(v)


def _models(models: dict[str, Any]) -> str:
    out = []
    for role, ident in (models or {}).items():
        if isinstance(ident, dict):
            ver = ident.get("version") or ident.get("package_version")
            sha = ident.get("sha256") or ident.get("values_sha256")
            span = ident.get("span_mjd")  # an identity of the values a partition's days use (EOP)
            out.append(f"{role}: {ident.get('file') or ident.get('name') or ident.get('source') or '?'}"
                       + (f" {ver}" if ver else "") + (f" values of MJD {span[0]}..{span[1]}" if span else "")
                       + (f" (sha256 {str(sha)[:16]})" if sha else ""))
        else:
            out.append(f"{role}: {ident!r}")
    return "; ".join(out) or "-"


def format_record(r: dict[str, Any]) -> list[str]:
    lines = [f"record {r['record_id']!r} in run {r['run_id']} ({r['manifest']})"]
    for f in r["found"]:
        via = "" if f["source"] == "product" else "  [product overwritten since; read from the work folder]"
        kind = "product" if f["source"] == "product" else "records"
        lines.append(f"partition {f['partition']}: {kind} {f['file']}, source row {f['source_row']}{via}")
        lines.append(f"  ledger {f['ledger']}")
        for k, s in enumerate(f["steps"], start=1):
            lines.append(f"  {k}. {s['tag']}")
            if not s.get("in_manifest"):
                lines.append("     (not in this run's manifest)")
            else:
                lines.append(f"     fingerprint {s['fingerprint']}  ({s['status']}; produced by run {s['produced_by_run']})")
                if s["params"]:
                    lines.append("     parameters " + ", ".join(f"{k2} = {v!r}" for k2, v in s["params"].items()))
                lines.append(f"     models     {_models(s['models'])}")
            if s["columns"]:
                width = max(len(c) for c in s["columns"])
                for c, v in s["columns"].items():
                    lines.append(f"     {c:<{width}} = {_v(v)}")
            elif s["columns_from"] not in ("provides", "ingest", "work schemas"):
                lines.append(f"     columns: {s['columns_from']}")
        if f["untouched_steps"]:
            lines.append(f"  steps of the chain it passed without being touched (not in its ledger): "
                         f"{', '.join(f['untouched_steps'])}")
    for q in r["quarantined"]:
        d = q["step_definition"]
        lines.append(f"partition {q['partition']}: QUARANTINED by step {q['step']} with reason {q['reason']} "
                     f"(source row {q['source_row']}; {q['file']})")
        if q["steps_before"]:
            lines.append(f"  steps before it in the chain: {', '.join(q['steps_before'])}")
        if d.get("in_manifest"):
            lines.append(f"  {q['step']}@{d.get('version')} fingerprint {d['fingerprint']} (produced by run {d['produced_by_run']})")
            if d.get("params"):
                lines.append("  parameters " + ", ".join(f"{k} = {v!r}" for k, v in d["params"].items()))
            lines.append(f"  models     {_models(d['models'])}")
    if r["unreadable_partitions"]:
        lines.append("not searched (no readable records file): " + ", ".join(r["unreadable_partitions"]))
    if r["failed_partitions"]:
        lines.append("not searched (failed in this run): " + ", ".join(r["failed_partitions"]))
    return lines


def format_stage(r: dict[str, Any]) -> list[str]:
    tag = r["stage"] + (f"@{r['version']}" if r["version"] is not None else "@*")
    lines = [f"stage {tag} in run {r['run_id']} ({r['manifest']})"]
    if not r["in_chain"]:
        lines.append(f"  note: {tag} is not a step of this run's chain")
    lines.append(f"  {'partition':<28}{'records':>10}{'of':>10}")
    for p in r["partitions"]:
        lines.append(f"  {p['partition']:<28}{p['touched']:>10}{p['rows']:>10}")
    lines.append(f"  {'total':<28}{r['touched']:>10}{r['rows']:>10}")
    first = next((p["step"] for p in r["partitions"] if "step" in p), None)
    if first is not None:
        lines.append(f"  version {first['version']}; parameters "
                     + (", ".join(f"{k} = {v!r}" for k, v in first["params"].items()) or "-"))
        lines.append(f"  models {_models(first['models'])}")
    for p in r["partitions"]:
        for i in p.get("ids", []):
            lines.append(f"  {p['partition']}  {i}")
    if r["unreadable_partitions"]:
        lines.append("  not counted (no readable records file): " + ", ".join(r["unreadable_partitions"]))
    if r["failed_partitions"]:
        lines.append("  not counted (failed in this run): " + ", ".join(r["failed_partitions"]))
    return lines


# ---------------------------------------------------------------------------- command line
def cmd_audit(args) -> int:
    if args.list and not args.stage:
        raise ManifestError("relcorr audit: --list goes with --stage")
    if args.record is not None:
        lines = format_record(audit_record(args.manifest, args.record))
    else:
        lines = format_stage(audit_stage(args.manifest, args.stage, args.list))
    for line in lines:
        print(line)
    return EXIT_OK


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser("audit", help="provenance of one record (--record) or the records one stage touched (--stage)")
    p.add_argument("manifest", help="a run's manifest (products/manifests/<run id>.json)")
    which = p.add_mutually_exclusive_group(required=True)
    which.add_argument("--record", metavar="ID", help="a record id")
    which.add_argument("--stage", metavar="NAME[@VERSION]", help="a stage, optionally with its version")
    p.add_argument("--list", action="store_true", help="with --stage: list the record ids")
    p.add_argument("--verbose", action="store_true", help="show the traceback of an internal error")
    p.set_defaults(func=cmd_audit)
    return p
