"""Reading relcorr's TOML catalogues (stations, clocks, orbits): file, syntax, format tag and main table; names to indices.

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


def name_index(codes, names):
    """Catalogue index of each name in ``codes`` (the catalogue's names, in order), -1 where unknown or null;
    ``names`` an Arrow column or a sequence of str.  Vectorised in Arrow (no Python loop over records)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(names, pa.ChunkedArray):
        names = names.combine_chunks()
    if not isinstance(names, pa.Array):
        names = pa.array(list(names), pa.string())
    if pa.types.is_dictionary(names.type):
        names = names.dictionary_decode()
    idx = pc.index_in(names, value_set=pa.array(list(codes), pa.string()))
    return np.asarray(pc.fill_null(idx, -1).to_numpy(zero_copy_only=False), dtype=np.int64)
