"""The sagnac stage against an independent computation.

Independent path: the satellite's GCRS position (the same two-body orbit) turned into the ITRS by
astropy (reference library: GCRS -> ITRS, IAU 2006/2000A through ERFA, same IERS table), the light
time iterated here, and the Sagnac term omega (x1 y2 - x2 y1)/c^2 of Ashby 2003 sec. 2 written out
again, with the nominal omega = 7.292115e-5 rad/s (from memory; the stage uses the Earth-rotation-angle
rate 7.2921151467e-5, 2e-9 relative apart).
"""
from __future__ import annotations

import numpy as np
import pyarrow as pa
import pytest

from stages.base import StageContext
from stages.physics import clock_rates as cr
from stages.sagnac import Sagnac
from tests.test_clock_rate_stage import CATALOGUE, STATIONS

C = 299792458.0


@pytest.fixture
def ctx(tmp_path):
    (tmp_path / "clocks.toml").write_text(CATALOGUE.format(a_ecc=5153.8**2))
    (tmp_path / "stations.toml").write_text(STATIONS)
    return StageContext("clock", {}, base_dir=str(tmp_path))


def _table(remote, reference, sod):
    n = len(sod)
    sod = np.asarray(sod, float)
    return pa.table({"remote_clock": [remote] * n, "reference_clock": [reference] * n, "observable": ["time_offset"] * n,
                     "utc_mjd": pa.array([58849] * n, pa.int32()),
                     "utc_sod_ps": pa.array(np.round(sod * 1e12).astype(np.int64), pa.int64()),
                     "tt_mjd": pa.array([58849] * n, pa.int32()), "tt_sod_s": sod + 69.184})   # TAI-UTC = 37 s in 2020


def test_downlink_against_astropy(ctx):
    import astropy.units as u
    from astropy.coordinates import GCRS, ITRS, CartesianRepresentation
    from astropy.time import Time, TimeDelta
    from astropy.utils import iers

    from stages.physics.earth_orientation import load_eop_table

    sod = np.linspace(600.0, 80000.0, 12)
    res = Sagnac().apply(_table("CIRC", "GEOID", sod), {"clocks": "clocks.toml", "stations": "stations.toml",
                                                          "direction": "downlink"}, ctx).columns
    station = np.array([6378137.0, 0.0, 0.0])
    el = (26561750.0, 0.0, np.radians(55.0), 0.0, 0.0, 0.0)
    t_el = (58849 - 58849) * 86400.0  # the elements' epoch is 2020-01-01T00:00:00 TT
    delay = np.zeros(sod.size)
    with iers.earth_orientation_table.set(load_eop_table().table):
        for _ in range(3):
            t_emit = sod + 69.184 - delay - t_el
            pos, _, _ = cr.kepler_state(*el, 0.0, t_emit)
            obstime = Time(58849.0, format="mjd", scale="utc") + TimeDelta(sod - delay, format="sec")
            rep = CartesianRepresentation(*(pos.T * u.m))
            itrs = GCRS(rep, obstime=obstime).transform_to(ITRS(obstime=obstime)).cartesian
            sat = np.stack([itrs.x.to_value(u.m), itrs.y.to_value(u.m), itrs.z.to_value(u.m)], axis=1)
            delay = np.linalg.norm(sat - station, axis=1) / C
    expected = 7.292115e-5 * (sat[:, 0] * station[1] - station[0] * sat[:, 1]) / C**2
    got = np.asarray(res["sagnac_s"])
    err = np.abs(got - expected).max()
    assert err < 1e-12, err
    assert np.abs(got).max() > 1e-8                         # the term is there: tens of ns
    assert np.array_equal(np.asarray(res["sagnac_offset_correction_s"]), got)   # remote = satellite: +Delta t


def test_signs_and_untouched_records(ctx):
    p = {"clocks": "clocks.toml", "stations": "stations.toml"}
    down = Sagnac().apply(_table("CIRC", "GEOID", [5000.0]), {**p, "direction": "downlink"}, ctx).columns
    flipped = Sagnac().apply(_table("GEOID", "CIRC", [5000.0]), {**p, "direction": "downlink"}, ctx).columns
    assert flipped["sagnac_offset_correction_s"][0] == -down["sagnac_offset_correction_s"][0]
    up = Sagnac().apply(_table("CIRC", "GEOID", [5000.0]), {**p, "direction": "uplink"}, ctx).columns
    assert np.sign(up["sagnac_offset_correction_s"][0]) == -np.sign(up["sagnac_s"][0])
    both_ground = Sagnac().apply(_table("HIGH", "GEOID", [5000.0]), {**p, "direction": "downlink"}, ctx)
    assert np.isnan(np.asarray(both_ground.columns["sagnac_s"])).all() and not both_ground.touched.any()
