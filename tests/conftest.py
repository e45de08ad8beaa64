"""Shared fixtures.  Everything runs offline: astropy is told never to download."""
from __future__ import annotations

import sys
import textwrap
from pathlib import Path

import pytest

from stages.physics.offline import configure_offline

configure_offline()

PLUGINS = Path(__file__).parent / "plugins"
REPO = Path(__file__).resolve().parents[1]


@pytest.fixture
def plugin_on_path(monkeypatch):
    """Install the test plugin the way pip would: its dist-info on sys.path."""
    monkeypatch.syspath_prepend(str(PLUGINS))
    yield
    sys.modules.pop("relcorr_range_m", None)


@pytest.fixture
def write_config(tmp_path):
    """Write a TOML config into tmp_path and return its path."""

    def _write(text: str, name: str = "run.toml") -> Path:
        p = tmp_path / name
        p.write_text(textwrap.dedent(text))
        return p

    return _write
