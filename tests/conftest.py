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


@pytest.fixture(scope="module")
def de421():
    """Barycentric states from DE421 read with jplephem directly (reference library), independent of
    stages.physics.ephemeris: (name, mjd, sod) -> (pos m, vel m/s)."""
    import numpy as np

    jplephem_spk = pytest.importorskip("jplephem.spk")
    skyfield_data = pytest.importorskip("skyfield_data")
    path = Path(skyfield_data.__file__).parent / "data" / "de421.bsp"
    kernel = jplephem_spk.SPK.open(str(path))
    segments = {"sun": [(0, 10)], "earth": [(0, 3), (3, 399)], "mars": [(0, 4)],
                "jupiter": [(0, 5)], "saturn": [(0, 6)]}

    def state(name, mjd, sod):
        jd1 = np.asarray(mjd, dtype=float) + 2400000.5
        jd2 = np.asarray(sod, dtype=float) / 86400.0
        p = v = 0.0
        for seg in segments[name]:
            pp, vv = kernel[seg].compute_and_differentiate(jd1, jd2)  # km, km/day
            p, v = p + pp, v + vv
        return np.atleast_2d(p.T) * 1e3, np.atleast_2d(v.T) * (1e3 / 86400.0)

    yield state
    kernel.close()

