"""Model files (catalogues, state tables) read once per process, again only when the file changes.

Stages run batch by batch; without this each batch would parse the same file again.
The cache key includes the file's modification time and size, so an edited file is re-read.
"""
from __future__ import annotations

import functools
import os
from pathlib import Path
from typing import Any, Callable


@functools.lru_cache(maxsize=32)
def _load(loader: Callable[[str], Any], path: str, mtime_ns: int, size: int) -> Any:
    return loader(path)


def load_cached(loader: Callable[[str], Any], path: str | Path) -> Any:
    """``loader(path)``, remembered while the file at ``path`` is unchanged."""
    st = os.stat(path)
    return _load(loader, str(path), st.st_mtime_ns, st.st_size)
