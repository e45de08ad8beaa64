"""Reading relcorr's TOML catalogues (stations, clocks): file, syntax, format tag and main table.

Every problem raises the catalogue's own error class with ``FILE: KEY: what was found, what was expected``.
"""
from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


def read_catalogue(path: Path, fmt: str, table: str, entry_name: str, error: type[Exception]) -> tuple[bytes, dict, dict[str, Any]]:
    """(raw bytes, whole document, the non-empty ``[table.NAME]`` entries) of a catalogue of format ``fmt``."""
    try:
        raw = path.read_bytes()
        doc = tomllib.loads(raw.decode("utf-8"))
    except FileNotFoundError:
        raise error(f"{path}: file not found") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise error(f"{path}: TOML syntax error: {exc}") from None
    if doc.get("format") != fmt:
        raise error(f"{path}: format: found {doc.get('format')!r}, expected {fmt!r}")
    entries = doc.get(table)
    if not isinstance(entries, dict) or not entries:
        raise error(f"{path}: {table}: expected a non-empty table of [{table}.{entry_name}] tables")
    return raw, doc, entries
