"""Parquet and file helpers: atomic writes, relcorr metadata, hashes.

Every file relcorr writes goes to a temporary name beside its final path and
is renamed into place only when complete, so a reader (or a resumed run)
never sees half a file.  Temporary names start with ``.`` and contain
``.tmp-HOST-PID`` (the writer's machine and process); ``clean_stray_temporaries``
removes those an interrupted run left, and never those of a writer still at work
(another run computing the same step in the same folder).
"""
from __future__ import annotations

import contextlib
import glob
import hashlib
import json
import os
import re
import socket
import time
from pathlib import Path
from typing import Any, Iterator

import pyarrow as pa
import pyarrow.parquet as pq

META_PREFIX = b"relcorr."


def sha256_file(path: str | Path, chunk: int = 1 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(chunk)
            if not block:
                break
            h.update(block)
    return h.hexdigest()


def canonical_json(obj: Any) -> str:
    """JSON with sorted keys and no whitespace: the input of every fingerprint."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


_HOST = re.sub(r"[^A-Za-z0-9.-]", "_", socket.gethostname()) or "localhost"
# a temporary of another machine (shared folder) whose writer cannot be asked: stray once unchanged this long
STALE_TEMPORARY_S = 3600.0


def _tmp_path(path: Path) -> Path:
    return path.with_name(f".{path.name}.tmp-{_HOST}-{os.getpid()}")


def _process_running(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, ValueError):
        return pid > 0  # PermissionError: someone else's live process
    return True


def _is_stray(tmp: Path, prefix: str) -> bool:
    """A temporary is stray when its writer is gone: this process (an earlier attempt), a process of this
    machine that no longer runs, or (another machine, or a reused process id) unchanged for an hour.
    ``.NAME.tmp-PID`` (no machine) is an older name of this machine's temporaries."""
    host, _, pid = tmp.name[len(prefix):].rpartition("-")
    if host in ("", _HOST) and pid.isdigit():
        pid_n = int(pid)
        if pid_n == os.getpid() or not _process_running(pid_n):
            return True
    try:
        return time.time() - tmp.stat().st_mtime > STALE_TEMPORARY_S
    except FileNotFoundError:
        return False


def clean_stray_temporaries(path: str | Path) -> None:
    """Remove temporary files an interrupted writer of ``path`` left behind, never one still being written
    (two runs computing the same step in the same folder each write their own and rename it into place;
    the bytes are the same)."""
    path = Path(path)
    prefix = f".{path.name}.tmp-"
    if path.parent.is_dir():
        for stray in path.parent.glob(f"{glob.escape(prefix)}*"):
            if _is_stray(stray, prefix):
                with contextlib.suppress(FileNotFoundError):
                    stray.unlink()


@contextlib.contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path; rename it to ``path`` if the block succeeds, delete it if not."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    clean_stray_temporaries(path)
    tmp = _tmp_path(path)
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()


def write_json_atomic(path: str | Path, obj: Any) -> None:
    with atomic_path(path) as tmp:
        tmp.write_text(json.dumps(obj, indent=2, sort_keys=False, allow_nan=False) + "\n")


def relcorr_metadata(meta: dict[str, Any]) -> dict[bytes, bytes]:
    """Key-value metadata for a Parquet file: each value JSON-encoded under relcorr.KEY."""
    return {META_PREFIX + k.encode(): canonical_json(v).encode() for k, v in meta.items()}


def read_relcorr_metadata(path: str | Path) -> dict[str, Any] | None:
    """The relcorr.* metadata of a Parquet file, or None if unreadable."""
    try:
        md = pq.read_metadata(path).metadata or {}
    except (OSError, pa.ArrowException):
        return None
    out = {}
    for k, v in md.items():
        if k.startswith(META_PREFIX):
            try:
                out[k[len(META_PREFIX):].decode()] = json.loads(v)
            except ValueError:
                return None
    return out


# columns whose values are unique per record: a dictionary would only cost time
UNIQUE_COLUMNS = frozenset({"record_id", "time_tag"})


def dictionary_columns(schema: pa.Schema) -> list[str]:
    """Columns worth dictionary encoding: text (station, observable, ledger...) and small integers
    (day numbers, flags).  Floats and 64-bit integers are nearly unique per record: plain encoding."""
    out = []
    for f in schema:
        t = f.type
        if f.name in UNIQUE_COLUMNS:
            continue
        if pa.types.is_string(t) or pa.types.is_large_string(t) or pa.types.is_dictionary(t) or (
                pa.types.is_integer(t) and t.bit_width < 64):
            out.append(f.name)
    return out


class AtomicParquetWriter:
    """Write a Parquet file batch by batch; it appears under its name only on close().

    Deterministic: the same tables in the same order give the same bytes.
    """

    def __init__(self, path: str | Path, schema: pa.Schema, metadata: dict[str, Any]):
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        clean_stray_temporaries(self.path)
        self.tmp = _tmp_path(self.path)
        self.schema = schema.with_metadata({**(schema.metadata or {}), **relcorr_metadata(metadata)})
        self.rows = 0
        self._writer = pq.ParquetWriter(self.tmp, self.schema, compression="zstd", write_statistics=True,
                                        use_dictionary=dictionary_columns(self.schema))

    def write(self, table: pa.Table) -> None:
        if table.num_rows:
            if not table.schema.equals(self.schema, check_metadata=False):
                table = table.select(self.schema.names).cast(self.schema)
            self._writer.write_table(table)
            self.rows += table.num_rows

    def close(self, extra_metadata: dict[str, Any] | None = None) -> None:
        """Finish the file (adding footer metadata known only at the end) and rename it into place."""
        if extra_metadata:
            self._writer.add_key_value_metadata({k.decode(): v.decode() for k, v in relcorr_metadata(extra_metadata).items()})
        self._writer.close()
        os.replace(self.tmp, self.path)

    def abort(self) -> None:
        with contextlib.suppress(Exception):
            self._writer.close()
        with contextlib.suppress(FileNotFoundError):
            self.tmp.unlink()

    def __enter__(self) -> "AtomicParquetWriter":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:
            self.abort()
