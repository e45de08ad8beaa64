"""``relcorr diff RUN_A RUN_B``: what changed between two runs, record by record and model by model.

Each run is named by its manifest.  Records are matched on ``record_id`` within a
partition of the same name (ids are unique per input file, not across files).  For
each floating-point column that a stage adds (its ``provides``) and both products
hold, the differences B - A over the matched records: count, mean, rms, max |B - A|,
how many differ at all, and the five records with the largest |B - A|.  Records only
in A are *removed*, records only in B *added*.  From the manifests: stages added or
removed, and per stage the versions, parameters and model identities that differ.

A product is rewritten in place by every later run, so an older run's records are
read from its product only while the product still carries that run's fingerprint,
else from the last stage's output in the work folder (see verify.records_file).
Only ``record_id`` and the compared columns are read (column projection).
Nothing here writes, except the JSON report when asked for.
"""
from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from pipelines.errors import EXIT_OK
from pipelines.verify import ManifestError, load_manifest, records_file, run_id, step_columns

TOP = 5


# ---------------------------------------------------------------------------- model and parameter changes
def _chain(m: dict[str, Any]) -> dict[str, dict[str, Any]]:
    """Per step of the run's chain (ingest and the stages): version, parameters, model identities."""
    out: dict[str, dict[str, Any]] = {}
    parts = [p for p in m["partitions"] if p.get("steps")]
    ing = next((a for p in parts for a in p["steps"] if a.get("step") == "ingest"), None)
    if ing is not None:
        d = ing.get("definition") or {}
        out["ingest"] = {"version": ing.get("version"), "params": {}, "models": d.get("models") or {}}
    for s in m.get("stages", []) or []:
        act = next((a for p in parts for a in p["steps"] if a.get("step") == s.get("name")), None)
        d = (act or {}).get("definition") or {}
        out[s.get("name")] = {"version": s.get("version"), "params": s.get("params") or {}, "models": d.get("models") or {}}
    return out


def _dict_changes(a: dict[str, Any], b: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {k: {"a": a.get(k), "b": b.get(k)} for k in list(a) + [k for k in b if k not in a] if a.get(k) != b.get(k)}


def model_changes(ma: dict[str, Any], mb: dict[str, Any]) -> dict[str, Any]:
    """Stages added or removed, chain order, and per stage the version, parameters and model identities
    that differ (B vs A); software versions and the config's sha256 separately."""
    ca, cb = _chain(ma), _chain(mb)
    stages = {}
    for name in list(cb) + [n for n in ca if n not in cb]:
        if name not in ca or name not in cb:
            continue
        a, b = ca[name], cb[name]
        ch: dict[str, Any] = {}
        if a["version"] != b["version"]:
            ch["version"] = {"a": a["version"], "b": b["version"]}
        params = _dict_changes(a["params"], b["params"])
        if params:
            ch["params"] = params
        models = _dict_changes(a["models"], b["models"])
        if models:
            ch["models"] = models
        if ch:
            stages[name] = ch
    order_a, order_b = [n for n in ca], [n for n in cb]
    out = {
        "stages_added": [n for n in cb if n not in ca],
        "stages_removed": [n for n in ca if n not in cb],
        "chain": None if order_a == order_b else {"a": order_a, "b": order_b},
        "stages": stages,
        "software": _dict_changes(ma.get("software") or {}, mb.get("software") or {}),
        "config_sha256": None if (ma.get("config") or {}).get("sha256") == (mb.get("config") or {}).get("sha256")
        else {"a": (ma.get("config") or {}).get("sha256"), "b": (mb.get("config") or {}).get("sha256")},
    }
    out["any"] = bool(out["stages_added"] or out["stages_removed"] or out["chain"] or out["stages"])
    return out


# ---------------------------------------------------------------------------- record differences
def _float_columns(m: dict[str, Any]) -> dict[str, str]:
    """column -> stage, for the floating-point columns the run's stages add."""
    out: dict[str, str] = {}
    part = next((p for p in m["partitions"] if p.get("status") == "ok"), None)
    for s in m.get("stages", []) or []:
        cols, _ = step_columns(s.get("name"), s.get("version"), part)
        for name, typ in cols.items():
            if pa.types.is_floating(typ):
                out.setdefault(name, s.get("name"))
    return out


class _Acc:
    """Running statistics of B - A for one column over all partitions."""

    def __init__(self, stage: str, unit: str):
        self.stage, self.unit = stage, unit
        self.count = self.changed = self.nan_mismatch = 0
        self.sum = self.sumsq = self.max_abs = 0.0
        self.top: list[tuple[float, str, Any, float, float, float]] = []

    def add(self, partition: str, ids: list, a: np.ndarray, b: np.ndarray) -> None:
        fa, fb = np.isfinite(a), np.isfinite(b)
        both = fa & fb
        # NaN against NaN (or the same infinity) is no difference; finite against not-finite is one
        same_nonfinite = ~fa & ~fb & ((np.isnan(a) & np.isnan(b)) | (a == b))
        self.nan_mismatch += int(np.count_nonzero(~both & ~same_nonfinite))
        d = b[both] - a[both]
        self.count += int(d.size)
        if not d.size:
            return
        self.sum += float(d.sum())
        self.sumsq += float(np.dot(d, d))
        ad = np.abs(d)
        self.max_abs = max(self.max_abs, float(ad.max()))
        nz = np.flatnonzero(ad > 0)
        self.changed += int(nz.size)
        if nz.size:
            k = nz if nz.size <= TOP else nz[np.argpartition(-ad[nz], TOP - 1)[:TOP]]
            rows = np.flatnonzero(both)[k]
            for j, r in zip(k, rows):
                self.top.append((float(ad[j]), partition, ids[int(r)], float(a[r]), float(b[r]), float(d[j])))
            self.top = sorted(self.top, key=lambda t: -t[0])[:TOP]

    def result(self) -> dict[str, Any]:
        n = self.count
        return {
            "stage": self.stage,
            "unit": self.unit,
            "count": n,
            "changed": self.changed,
            "mean": self.sum / n if n else None,
            "rms": float(np.sqrt(self.sumsq / n)) if n else None,
            "max_abs": self.max_abs if n else None,
            "nan_mismatch": self.nan_mismatch,
            "largest": [{"partition": p, "record_id": i, "a": a, "b": b, "diff": d} for _, p, i, a, b, d in self.top],
        }


def _read(path: Path, columns: list[str]) -> pa.Table:
    return pq.read_table(path, columns=["record_id"] + columns)


def _ids(t: pa.Table) -> pa.Array:
    col = t["record_id"].combine_chunks()
    return col.dictionary_decode() if pa.types.is_dictionary(col.type) else col


def diff_runs(manifest_a: str | Path, manifest_b: str | Path) -> dict[str, Any]:
    """Compare two runs (their manifests): see the module docstring.  A JSON-able dict."""
    from stages.physics.offline import configure_offline

    configure_offline()
    ma, mb = load_manifest(manifest_a), load_manifest(manifest_b)
    pa_, pb_ = ({p.get("partition"): p for p in m["partitions"]} for m in (ma, mb))
    cols_a, cols_b = _float_columns(ma), _float_columns(mb)
    attributed = {**cols_a, **cols_b}
    accs: dict[str, _Acc] = {}
    removed: list[dict[str, Any]] = []
    added: list[dict[str, Any]] = []
    in_both = 0
    notes: list[str] = []
    sources: dict[str, dict[str, str | None]] = {}
    only_a_cols: set[str] = set()
    only_b_cols: set[str] = set()
    for pid in sorted(set(pa_) | set(pb_)):
        fa = records_file(pa_[pid]) if pid in pa_ else None
        fb = records_file(pb_[pid]) if pid in pb_ else None
        sources[pid] = {"a": str(fa.path) if fa else None, "b": str(fb.path) if fb else None}
        for label, part, f in (("A", pa_.get(pid), fa), ("B", pb_.get(pid), fb)):
            if part is not None and f is None:
                why = "failed in that run" if part.get("status") != "ok" else \
                    "its product was overwritten by a later run and the work files are gone"
                notes.append(f"partition {pid}: no records of run {label} ({why}); not compared")
        if (pid in pa_ and fa is None) or (pid in pb_ and fb is None):
            continue
        if fa is None or fb is None:  # the partition exists in one run only
            f, acc = (fb, added) if fa is None else (fa, removed)
            acc.extend({"partition": pid, "record_id": i} for i in _ids(_read(f.path, [])).to_pylist())
            continue
        sa, sb = pq.read_schema(fa.path), pq.read_schema(fb.path)
        fa_cols = {c for c in attributed if c in sa.names and pa.types.is_floating(sa.field(c).type)}
        fb_cols = {c for c in attributed if c in sb.names and pa.types.is_floating(sb.field(c).type)}
        only_a_cols |= fa_cols - fb_cols
        only_b_cols |= fb_cols - fa_cols
        common = [c for c in attributed if c in fa_cols and c in fb_cols]
        ta, tb = _read(fa.path, common), _read(fb.path, common)
        ida, idb = _ids(ta), _ids(tb)
        if ida.type != idb.type:
            ida, idb = ida.cast(pa.string()), idb.cast(pa.string())
        idx = pc.index_in(idb, value_set=ida)  # for each record of B, its row in A (null: added)
        matched = idx.is_valid().to_numpy(zero_copy_only=False)
        removed_mask = ~pc.is_in(ida, value_set=idb).to_numpy(zero_copy_only=False)
        removed.extend({"partition": pid, "record_id": i} for i in ida.filter(pa.array(removed_mask)).to_pylist())
        added.extend({"partition": pid, "record_id": i} for i in idb.filter(pa.array(~matched)).to_pylist())
        rows_b = np.flatnonzero(matched)
        rows_a = idx.filter(idx.is_valid()).to_numpy().astype(np.int64)
        in_both += int(rows_b.size)
        ids = idb.take(pa.array(rows_b)).to_pylist()
        for c in common:
            if c not in accs:
                unit = ((sb.field(c).metadata or {}).get(b"unit") or b"").decode()
                accs[c] = _Acc(attributed[c], unit)
            a = ta[c].to_numpy().astype(np.float64)[rows_a]
            b = tb[c].to_numpy().astype(np.float64)[rows_b]
            accs[c].add(pid, ids, a, b)
    columns = {c: accs[c].result() for c in attributed if c in accs}
    return {
        "run_a": {"id": run_id(ma), "manifest": str(manifest_a), "pipeline": ma["run"].get("pipeline")},
        "run_b": {"id": run_id(mb), "manifest": str(manifest_b), "pipeline": mb["run"].get("pipeline")},
        "changes": model_changes(ma, mb),
        "records": {"in_both": in_both, "removed_count": len(removed), "added_count": len(added),
                    "removed": removed, "added": added},
        "columns": columns,
        "columns_only_in_a": sorted(only_a_cols),
        "columns_only_in_b": sorted(only_b_cols),
        "partitions": {"only_in_a": sorted(set(pa_) - set(pb_)), "only_in_b": sorted(set(pb_) - set(pa_))},
        "sources": sources,
        "notes": notes,
    }


# ---------------------------------------------------------------------------- report
def _short(v: Any) -> str:
    if isinstance(v, dict) and "sha256" in v:
        label = v.get("file") or v.get("name") or ""
        ver = v.get("version") or v.get("package_version")
        return f"{label}{' ' + str(ver) if ver else ''} (sha256 {str(v['sha256'])[:12]})"
    return "(none)" if v is None else repr(v)


def _g(v: float | None) -> str:
    return "-" if v is None else f"{v:.3e}"


def format_diff(d: dict[str, Any], show_ids: int = 10) -> list[str]:
    a, b = d["run_a"], d["run_b"]
    lines = [f"A  {a['id']}  ({a['manifest']})", f"B  {b['id']}  ({b['manifest']})", ""]
    ch = d["changes"]
    lines.append("model and parameter changes (A -> B):")
    if not ch["any"]:
        lines.append("  none")
    for n in ch["stages_added"]:
        lines.append(f"  stage added: {n}")
    for n in ch["stages_removed"]:
        lines.append(f"  stage removed: {n}")
    if ch["chain"]:
        lines.append(f"  chain: {' -> '.join(ch['chain']['a'])}  =>  {' -> '.join(ch['chain']['b'])}")
    for name, c in ch["stages"].items():
        if "version" in c:
            lines.append(f"  {name}: version {c['version']['a']} -> {c['version']['b']}")
        for k, v in c.get("params", {}).items():
            lines.append(f"  {name}: parameter {k}: {_short(v['a'])} -> {_short(v['b'])}")
        for k, v in c.get("models", {}).items():
            lines.append(f"  {name}: model {k}: {_short(v['a'])} -> {_short(v['b'])}")
    if ch["software"]:
        lines.append("  software: " + ", ".join(f"{k} {v['a']} -> {v['b']}" for k, v in ch["software"].items()))
    if ch["config_sha256"]:
        lines.append(f"  config file: sha256 {str(ch['config_sha256']['a'])[:12]} -> {str(ch['config_sha256']['b'])[:12]}")
    r = d["records"]
    lines += ["", f"records: {r['in_both']} in both, {r['removed_count']} only in A (removed), "
                  f"{r['added_count']} only in B (added)"]
    for label, key in (("removed", "removed"), ("added", "added")):
        items = r[key]
        if items:
            shown = ", ".join(f"{x['partition']}/{x['record_id']}" for x in items[:show_ids])
            more = f" … and {len(items) - show_ids} more (--json for all)" if len(items) > show_ids else ""
            lines.append(f"  {label}: {shown}{more}")
    lines += ["", "differences B - A of the stages' columns, over the records in both:"]
    if not d["columns"]:
        lines.append("  (no floating-point stage column in both products)")
    else:
        wc = max(len(c) for c in d["columns"]) + 2
        ws = max(len(s["stage"]) for s in d["columns"].values()) + 2
        lines.append(f"  {'column':<{wc}}{'stage':<{ws}}{'unit':<6}{'count':>8}{'changed':>9}{'mean':>11}{'rms':>11}{'max |d|':>11}")
        for c, s in d["columns"].items():
            lines.append(f"  {c:<{wc}}{s['stage']:<{ws}}{s['unit'] or '-':<6}{s['count']:>8}{s['changed']:>9}"
                         f"{_g(s['mean']):>11}{_g(s['rms']):>11}{_g(s['max_abs']):>11}")
        for c, s in d["columns"].items():
            if s["largest"]:
                lines.append(f"  largest |d| of {c}: " + ", ".join(
                    f"{x['partition']}/{x['record_id']} ({x['diff']:+.3e})" for x in s["largest"]))
            if s["nan_mismatch"]:
                lines.append(f"  {c}: {s['nan_mismatch']} record(s) finite in one run only")
    for key, label in (("columns_only_in_a", "only in A"), ("columns_only_in_b", "only in B")):
        if d[key]:
            lines.append(f"  columns {label}: {', '.join(d[key])}")
    for key, label in (("only_in_a", "only in A"), ("only_in_b", "only in B")):
        if d["partitions"][key]:
            lines.append(f"partitions {label}: {', '.join(d['partitions'][key])}")
    for n in d["notes"]:
        lines.append(f"note: {n}")
    return lines


# ---------------------------------------------------------------------------- command line
def cmd_diff(args) -> int:
    d = diff_runs(args.run_a, args.run_b)
    if args.json:
        from pipelines.parquet_io import write_json_atomic

        try:
            write_json_atomic(args.json, d)
        except OSError as exc:
            raise ManifestError(f"{args.json}: cannot write the JSON report: {exc.strerror or exc}") from None
    for line in format_diff(d):
        print(line)
    if args.json:
        print(f"json      {args.json}")
    return EXIT_OK


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser("diff", help="compare two runs: per-record differences of the stage columns, model and parameter changes")
    p.add_argument("run_a", metavar="RUN_A", help="manifest of the first run")
    p.add_argument("run_b", metavar="RUN_B", help="manifest of the second run")
    p.add_argument("--json", metavar="FILE", help="also write the report as JSON to FILE")
    p.add_argument("--verbose", action="store_true", help="show the traceback of an internal error")
    p.set_defaults(func=cmd_diff)
    return p
