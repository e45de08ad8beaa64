"""The ``relcorr`` command: stages, check, run, demo; verify, diff, audit (read-only, own modules).

Exit codes are listed in pipelines/errors.py and README.md.
"""
from __future__ import annotations

import argparse
import logging
import os
import secrets
import sys
import time
from datetime import datetime, timezone
import traceback
from pathlib import Path

from pipelines.errors import (EXIT_BALANCE, EXIT_CONFIG, EXIT_INTERNAL, EXIT_MISSING_DAYS, EXIT_OK, EXIT_PARTIAL, ConfigError,
                              RelcorrError)

DEMO_CONFIG = "demo.toml"


def _quiet_imports() -> None:
    import warnings

    # luigi announces a change of default at import time; relcorr does not use range tasks
    warnings.filterwarnings("ignore", message=r"\s*Autoloading range tasks", category=DeprecationWarning)


def _offline() -> None:
    from stages.physics.offline import configure_offline

    configure_offline()


# ---------------------------------------------------------------------------- stages
def cmd_stages(args) -> int:
    from pipelines.registry import discover

    for name, cls in discover().items():
        print(f"{name}@{cls.version} - {cls.summary}")
        print(f"  record kinds: {', '.join(cls.record_kinds)}")
        if cls.requires:
            print("  requires: " + ", ".join(f"{c.name} [{c.type}, {c.unit or '-'}]" for c in cls.requires))
        if cls.optional:
            print("  uses when present: " + ", ".join(f"{c.name} [{c.type}, {c.unit or '-'}]" for c in cls.optional))
        print("  adds:")
        for c in cls.provides:
            print(f"    {c.name:<22} {str(c.type):<8} {c.unit or '-':<6} {c.description}")
        if cls.params:
            print("  parameters:")
            for p in cls.params:
                print(f"    {p.name} = {p.default!r}   ({p.expected()}) {p.help}")
        if cls.quarantine_reasons:
            print("  quarantine reasons: " + ", ".join(cls.quarantine_reasons))
        print("  references:")
        for r in cls.references:
            print(f"    - {r.citation} [{r.used_for}]")
        print()
    return EXIT_OK


# ---------------------------------------------------------------------------- check
def _load(path: str, base_dir: str | None = None):
    from pipelines.config import load_config

    return load_config(path, base_dir=base_dir, require_inputs=False)


def _print_plan(cfg, plan) -> None:
    print(f"config   {cfg.path}  (sha256 {cfg.sha256[:16]})")
    print(f"pipeline {cfg.name}: {cfg.record_kind} records, {len(plan.partitions)} partition(s), batch {cfg.batch_rows} rows")
    print(f"work     {cfg.work_dir}")
    print(f"products {cfg.product_dir}")
    print("models   " + ", ".join(f"{k}={v}" for k, v in cfg.models.items()))
    print("steps    ingest -> " + " -> ".join(s.name for s in cfg.stages) + (" -> " if cfg.stages else "") + "product")
    for sp in cfg.stages:
        print(f"  [{sp.index}] {sp.name}@{sp.cls.version}")
        for k, v in sp.params.items():
            print(f"        {k} = {v!r}")
    for pid, pp in plan.partitions.items():
        print(f"  partition {pid}: {pp.input}")
        for s in pp.steps:
            print(f"        {s.name:<14} {s.fingerprint[:16]}")


def cmd_check(args) -> int:
    _offline()
    from pipelines.plan import RunPlan, load_plan

    load_plan.cache_clear()
    cfg = _load(args.config, args.base_dir)
    if not cfg.input_files and cfg.demo is not None:
        print(f"{cfg.path}: no input file yet; `relcorr run` generates the demo scenario first")
        plan = RunPlan(cfg, {})
    else:
        plan = load_plan(str(cfg.path), cfg.sha256, str(cfg.base_dir))
    _print_plan(cfg, plan)
    print("configuration OK")
    return EXIT_OK


# ---------------------------------------------------------------------------- run
def _quiet_luigi(verbose: bool) -> None:
    level = logging.DEBUG if verbose else logging.CRITICAL
    for name in ("luigi", "luigi-interface", "luigi.scheduler"):
        logging.getLogger(name).setLevel(level)


def run_config(config: str, base_dir: str | None = None, workers: int = 1, scheduler_host: str | None = None,
               scheduler_port: int | None = None, verbose: bool = False, date_from: str | None = None,
               date_to: str | None = None, date: str | None = None) -> int:
    _offline()
    import luigi

    from pipelines import demo
    from pipelines.config import resolve_inputs
    from pipelines.manifest import build_manifest, partition_manifest, utc_now
    from pipelines.parquet_io import sha256_file, write_json_atomic
    from pipelines.partitions import select
    from pipelines.plan import current_product_path, load_plan
    from pipelines.tasks import FingerprintTarget, RunAll

    load_plan.cache_clear()  # a new run sees the inputs as they are now
    cfg = _load(config, base_dir)
    if cfg.demo is not None and not cfg.input_files:
        written = demo.generate(cfg)
        print(f"generated demo scenario: {len(written)} raw file(s) in {written[0].parent}")
        resolve_inputs(cfg)
    elif not cfg.input_files and not cfg.dated:
        resolve_inputs(cfg)  # raises the ConfigError naming the pattern
    chosen = select(cfg, date_from, date_to, date)
    started = utc_now()
    # sortable by start time, unique across concurrent runs
    run_id = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%S%fZ") + f"-{cfg.sha256[:8]}-{secrets.token_hex(2)}"
    plan = load_plan(str(cfg.path), cfg.sha256, str(cfg.base_dir))
    print(f"run {run_id}: {cfg.name}, {chosen.describe()}, stages: "
          + (", ".join(s.name for s in cfg.stages) or "none"))
    for day in chosen.missing_days:
        print(f"  no input for {day}")
    _quiet_luigi(verbose)
    kwargs = dict(workers=workers, detailed_summary=True, log_level="DEBUG" if verbose else "CRITICAL")
    if scheduler_host:
        kwargs.update(local_scheduler=False, scheduler_host=scheduler_host)
        if scheduler_port:
            kwargs["scheduler_port"] = scheduler_port
    else:
        kwargs["local_scheduler"] = True
    task = RunAll(config_path=str(cfg.path), config_sha256=cfg.sha256, base_dir=str(cfg.base_dir),
                  partitions=tuple(chosen.partitions), run_id=run_id)
    result = luigi.build([task], **kwargs) if chosen.partitions else None
    summary = luigi_counts(result.summary_text if result is not None else "")
    # A central scheduler gives each task to one worker, and luigi's worker stops as soon as what is left
    # of this run is being run by another one (a second `relcorr run` of the same days): wait for those
    # tasks and schedule again, so that this run too ends with its partitions complete or failed.
    passes = 1
    while scheduler_host and result is not None and luigi_counts(result.summary_text)["run_by_other_workers"]:
        time.sleep(1.0)
        result = luigi.build([task], **kwargs)
        again = luigi_counts(result.summary_text)
        summary["ran"] += again["ran"]
        summary["failed"] += again["failed"]
        passes += 1
    summary["passes"] = passes
    if verbose:
        print(result.summary_text)
    # Judge by completeness, not by luigi's status (another worker may have run a task).
    complete = {}
    for pid in chosen.partitions:
        for s in plan.partitions[pid].steps:
            complete[(pid, s.position)] = FingerprintTarget(s.output, s.fingerprint).exists() and (
                s.name != "product" or FingerprintTarget(s.quarantine, s.fingerprint).exists())
    # every product is now complete under its fingerprint: point the stable names at them
    for pid in chosen.partitions:
        product = plan.partitions[pid].steps[-1]
        if complete[(pid, product.position)]:
            for target, quarantine in ((product.output, False), (product.quarantine, True)):
                _point(current_product_path(cfg, pid, quarantine), target)
    auxiliary = _auxiliary(cfg)
    selection = None
    if chosen.date_from is not None:
        selection = {"from": chosen.date_from, "to": chosen.date_to, "missing_days": chosen.missing_days}
    manifest = build_manifest(plan, run_id, started, utc_now(), complete, auxiliary, chosen.partitions, selection)
    folder = cfg.product_dir / "manifests"
    listed = []
    for entry in manifest["partitions"]:
        ppath = folder / run_id / f"{entry['partition']}.json"
        write_json_atomic(ppath, partition_manifest(manifest, entry))
        listed.append({"partition": entry["partition"], "path": str(ppath), "sha256": sha256_file(ppath)})
    manifest["partition_manifests"] = listed
    manifest["run"]["luigi_summary"] = summary
    path = folder / f"{run_id}.json"
    write_json_atomic(path, manifest)
    _print_summary(manifest)
    print(f"products  {cfg.product_dir}")
    print(f"manifest  {path}")
    status = manifest["run"]["status"]
    internal = [a for p in manifest["partitions"] for a in p["steps"] if a.get("error_kind") == "internal"]
    if internal:
        print("internal error (a bug): rerun with --verbose for the traceback", file=sys.stderr)
        return EXIT_INTERNAL
    if status == "partial":
        return EXIT_PARTIAL
    if status == "unbalanced":
        return EXIT_BALANCE
    if chosen.missing_days:
        print(f"no input for {len(chosen.missing_days)} day(s): {', '.join(chosen.missing_days)}", file=sys.stderr)
        return EXIT_MISSING_DAYS
    return EXIT_OK


def luigi_counts(summary_text: str) -> dict[str, int]:
    """Task counts from luigi's own execution summary: scheduled, already complete, ran here, failed,
    and ran by another worker (central scheduler)."""
    import re

    def count(pattern):
        m = re.search(pattern, summary_text)
        return int(m.group(1)) if m else 0

    return {"scheduled": count(r"Scheduled (\d+) tasks"),
            "complete_before": count(r"\* (\d+) complete ones were encountered"),
            "ran": count(r"\* (\d+) ran successfully"),
            "failed": count(r"\* (\d+) failed"),
            "run_by_other_workers": count(r"\* (\d+) were being run by another worker")}


def _point(link: Path, target: Path) -> None:
    """Make ``link`` a relative symbolic link to ``target``, replacing what is there atomically."""
    link.parent.mkdir(parents=True, exist_ok=True)
    rel = os.path.relpath(target, link.parent)
    if link.is_symlink() and os.readlink(link) == rel:
        return
    tmp = link.with_name(f".{link.name}.link-{os.getpid()}-{secrets.token_hex(3)}")
    os.symlink(rel, tmp)
    os.replace(tmp, link)


def _auxiliary(cfg) -> list[dict]:
    from pipelines.plan import stage_context
    from stages.physics.leap_seconds import load_leap_table

    aux = [{"role": "leap seconds", **load_leap_table().identity}]
    seen = {aux[0].get("sha256")}
    for sp in cfg.stages:
        for role, ident in sp.cls().model_identities(sp.params, stage_context(cfg, stage=sp)).items():
            if isinstance(ident, dict) and ident.get("sha256") not in seen:
                seen.add(ident.get("sha256"))
                aux.append({"role": role, **ident})
    return aux


def _print_summary(manifest: dict) -> None:
    print()
    print(f"{'partition':<26}{'step':<18}{'status':<9}{'rows in':>10}{'out':>10}{'quar.':>8}")
    for p in manifest["partitions"]:
        for a in p["steps"]:
            print(f"{p['partition']:<26}{a['step']:<18}{a['status']:<9}"
                  f"{_n(a.get('rows_in')):>10}{_n(a.get('rows_out')):>10}{_n(a.get('rows_quarantined')):>8}")
        if p["status"] != "ok":
            print(f"{'':<26}FAILED: {p.get('error')}")
    series = [(p["partition"], name, st) for p in manifest["partitions"] for a in p["steps"] if a["step"] == "clock_series"
              for name, st in (a.get("summary") or {}).items()]
    if series:
        print()
        print(f"{'partition':<26}{'series (remote|reference|observable)':<52}{'mean y':>11}{'drift/day':>11}  ADEV(1, 10, 100 tau0)")
        for part, name, st in series:
            adev = ", ".join(f"{x:.2e}" for x in (st.get("adev") or []) if x is not None) or "-"
            y, d = st.get("mean_fractional_frequency"), st.get("drift_per_day")
            print(f"{part:<26}{name:<52}{_e(y):>11}{_e(d):>11}  {adev}")
        print()
    gamma = (manifest.get("estimates") or {}).get("gamma")
    if gamma:
        print()
        if gamma.get("delta_gamma") is None:
            print(f"gamma estimate: none ({gamma.get('note')})")
        else:
            scale = gamma.get("sqrt_reduced_chi2")
            head = (f"gamma = {gamma['gamma']:.8f}" if gamma.get("gamma") is not None else "gamma = gamma_model")
            print(f"{head} {gamma['delta_gamma']:+.3e} +- {gamma['delta_gamma_sigma']:.3e} (formal, 1 sigma) "
                  f"from {gamma['records']} records; sqrt(chi2/dof) = {_e(scale)}")
            for label, b in gamma["biases"].items():
                print(f"  bias {label:<24}{b['value']:+.3e} +- {b['sigma']:.3e}  ({b['records']} records, "
                      f"correlation with gamma {b['correlation_with_gamma']:+.2f})")
        print()
    t = manifest["totals"]
    print(f"{'total':<26}{'':<18}{'':<9}{t['rows_in']:>10}{t['rows_out']:>10}{t['rows_quarantined']:>8}")
    verdict = "balanced" if t["balanced"] else "NOT BALANCED"
    print(f"rows in = rows out + rows quarantined: {t['rows_in']} = {t['rows_out']} + {t['rows_quarantined']} ({verdict})")
    print(f"status: {manifest['run']['status']}")


def _e(v) -> str:
    return "-" if v is None else f"{v:.3e}"


def _n(v) -> str:
    return "-" if v is None else str(v)


LOOPBACK_HOSTS = ("127.0.0.1", "localhost", "::1")


def cmd_run(args) -> int:
    if args.scheduler_host and args.scheduler_host not in LOOPBACK_HOSTS and not args.allow_remote_scheduler:
        raise ConfigError([("command line", "--scheduler-host",
                            f"found {args.scheduler_host!r}: a scheduler on another machine is an explicit opt-in "
                            "(add --allow-remote-scheduler, on a trusted network only)")])
    return run_config(args.config, args.base_dir, args.workers, args.scheduler_host, args.scheduler_port, args.verbose,
                      args.date_from, args.date_to, args.date)


def find_demo_config() -> Path | None:
    for root in (Path.cwd(), Path(__file__).resolve().parents[1]):
        p = root / "sample_configs" / DEMO_CONFIG
        if p.is_file():
            return p
    return None


def cmd_demo(args) -> int:
    cfg = find_demo_config()
    if cfg is None:
        print("relcorr demo: sample_configs/demo.toml not found; run from a relcorr checkout "
              "(or pass a config to `relcorr run`)", file=sys.stderr)
        return EXIT_CONFIG
    base = Path(args.dir).resolve()
    base.mkdir(parents=True, exist_ok=True)
    print(f"demo: {cfg} in {base}")
    return run_config(str(cfg), str(base), args.workers, verbose=args.verbose)


# ---------------------------------------------------------------------------- main
def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(prog="relcorr", description="Relativistic corrections for tracking and clock records.")
    sub = ap.add_subparsers(dest="command", required=True)
    sub.add_parser("stages", help="list installed stages with versions, parameters and references").set_defaults(func=cmd_stages)
    c = sub.add_parser("check", help="validate a config and print the resolved plan")
    c.add_argument("config")
    c.add_argument("--base-dir", help="directory relative paths are taken from (default: the config's directory)")
    c.set_defaults(func=cmd_check)
    for name, fn, hlp in (("run", cmd_run, "run a pipeline"), ("demo", cmd_demo, "generate the demo scenario and run it")):
        r = sub.add_parser(name, help=hlp)
        if name == "run":
            r.add_argument("config")
            r.add_argument("--base-dir", help="directory relative paths are taken from (default: the config's directory)")
            r.add_argument("--scheduler-host", help="central luigid host (default: embedded local scheduler)")
            r.add_argument("--scheduler-port", type=int, help="central luigid port")
            r.add_argument("--allow-remote-scheduler", action="store_true",
                           help="allow a --scheduler-host other than loopback (a trusted network only)")
            r.add_argument("--from", dest="date_from", metavar="DATE",
                           help="inputs by day ({date} template): first UTC day to run (YYYY-MM-DD)")
            r.add_argument("--to", dest="date_to", metavar="DATE",
                           help="last UTC day to run (default: the previous UTC day)")
            r.add_argument("--date", metavar="DATE",
                           help="run one UTC day (default for {date} inputs without --from: the previous UTC day)")
        else:
            r.add_argument("--dir", default="relcorr-demo", help="where the demo writes raw data, work files and products")
        r.add_argument("--workers", type=int, default=1, help="worker processes (default 1)")
        r.add_argument("--verbose", action="store_true", help="show luigi's own log and summary")
        r.set_defaults(func=fn)
    # read-only commands on a finished run: verify, diff, audit (each module registers its own)
    from pipelines import audit, diff, verify

    for mod in (verify, diff, audit):
        mod.add_parser(sub)
    return ap


def main(argv: list[str] | None = None) -> int:
    _quiet_imports()
    ap = build_parser()
    args = ap.parse_args(argv)
    if getattr(args, "workers", 1) < 1:
        ap.error("--workers must be >= 1")
    try:
        return args.func(args)
    except ConfigError as exc:
        for line in exc.lines():
            print(line, file=sys.stderr)
        return EXIT_CONFIG
    except RelcorrError as exc:
        print(str(exc), file=sys.stderr)
        return EXIT_CONFIG
    except BrokenPipeError:  # output piped into e.g. `head`
        return EXIT_OK
    except KeyboardInterrupt:
        print("interrupted; run again to resume", file=sys.stderr)
        return 130
    except Exception:
        if getattr(args, "verbose", False):
            traceback.print_exc()
        else:
            print(f"relcorr: internal error: {sys.exc_info()[1]!r}; rerun with --verbose for the traceback", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
