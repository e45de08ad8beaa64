"""Links between spacecraft (no ground station) through the light_time stage.

Outside references: the closed-form solution of the light-time equation for ends in uniform
straight-line motion, |r_rx(t3) - r_tx(t3 - tau)| = c tau, a quadratic in tau (common practice;
the same check the leg solver is held to in tests/test_light_time.py); and the relativistic
light-time term (1+gamma) GM/c^3 ln[(r1 + r2 + r12 + (1+gamma)GM/c^2)/(r1 + r2 - r12 + (1+gamma)GM/c^2)]
(Moyer 2000, JPL DESCANSO Monograph 2, sec. 8; equation number from memory 8-38) re-implemented here.
"""
from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from stages.base import StageContext
from stages.light_time import LightTime
from stages.physics.constants import C_M_PER_S, GM_SUN_TDB_M3_PER_S2

T0_MJD = 60300
AU = 1.495978707e11
A0, VA = np.array([AU, 0.0, 0.0]), np.array([0.0, 29780.0, 5.0])
B0, VB = np.array([AU * np.cos(0.0167), AU * np.sin(0.0167), 1.0e6]), np.array([-497.0, 29776.0, -3.0])


def _states(tmp_path):
    k = np.arange(-48, 49)
    t = k * 3600.0
    day = np.floor(t / 86400.0).astype(np.int64)
    rows = []
    for name, p0, v in (("TRINE-A", A0, VA), ("TRINE-B", B0, VB)):
        pos = p0 + t[:, None] * v
        rows.append(pa.table({
            "target": [name] * k.size, "tdb_mjd": pa.array(T0_MJD + day, pa.int32()), "tdb_sod_s": t - day * 86400.0,
            "x_m": pos[:, 0], "y_m": pos[:, 1], "z_m": pos[:, 2],
            "vx_m_per_s": np.full(k.size, v[0]), "vy_m_per_s": np.full(k.size, v[1]), "vz_m_per_s": np.full(k.size, v[2]),
            "centre": ["ssb"] * k.size}))
    path = tmp_path / "trine.parquet"
    pq.write_table(pa.concat_tables(rows), path)
    return path


def _records(observables, sod):
    n = len(observables)
    nan = np.full(n, np.nan)
    cols = {"target": ["TRINE-B"] * n, "station": ["TRINE-A"] * n, "observable": observables,
            "value": np.zeros(n), "unit": ["s"] * n,
            "tdb_mjd": pa.array([T0_MJD] * n, pa.int32()), "tdb_sod_s": np.asarray(sod, float), "tdb_minus_tt_s": nan}
    for a in "xyz":
        cols[f"site_bcrs_{a}_m"] = nan
        cols[f"tx_site_itrs_{a}_m"] = nan
    return pa.table(cols)


def _tau(d, v):
    """Positive root of (v.v - c^2) tau^2 + 2 (d.v) tau + d.d = 0."""
    a = v @ v - C_M_PER_S**2
    b = 2.0 * d @ v
    c = d @ d
    return (-b - np.sqrt(b * b - 4 * a * c)) / (2 * a)


def test_link_light_times_match_the_closed_form(tmp_path):
    path = _states(tmp_path)
    sod = np.array([1000.0, 20000.0, 50000.0])
    table = _records(["link_range_one_way"] * 3 + ["link_range_two_way"] * 3, np.concatenate([sod, sod]))
    params = {**LightTime.defaults(), "spacecraft_states": path.name, "bodies": ""}
    res = LightTime().apply(table, params, StageContext("tracking", {}, base_dir=str(tmp_path)))
    got = np.asarray(res.columns["computed_value"])
    for i, t3 in enumerate(sod):
        ra3 = A0 + VA * t3
        down = _tau(ra3 - (B0 + VB * t3), VB)
        t2 = t3 - down
        up = _tau((B0 + VB * t2) - (A0 + VA * t2), VA)
        assert got[i] == pytest.approx(down, abs=1e-12)
        assert got[3 + i] == pytest.approx(down + up, abs=2e-12)
    assert not any(np.asarray(m).any() for m in res.quarantine.values())
    assert np.isnan(np.asarray(res.columns["tdb_minus_tt_t1_s"])).all()


def test_link_solar_term_matches_the_published_form(tmp_path):
    from stages.physics.ephemeris import load_planetary_ephemeris

    path = _states(tmp_path)
    table = _records(["link_range_one_way"], [30000.0])
    params = {**LightTime.defaults(), "spacecraft_states": path.name, "bodies": "sun"}
    res = LightTime().apply(table, params, StageContext("tracking", {}, base_dir=str(tmp_path)))
    eph = load_planetary_ephemeris()
    t2_mjd, t2_sod = np.array([res.columns["lt_t2_tdb_mjd"][0].as_py()]), np.asarray(res.columns["lt_t2_tdb_sod_s"])
    t2 = (t2_mjd[0] - T0_MJD) * 86400.0 + t2_sod[0]
    r1 = (B0 + VB * t2) - eph.posvel_m("sun", t2_mjd, t2_sod)[0][0]
    r2 = (A0 + VA * 30000.0) - eph.posvel_m("sun", np.array([T0_MJD]), np.array([30000.0]))[0][0]
    n1, n2, n12 = np.linalg.norm(r1), np.linalg.norm(r2), np.linalg.norm(r2 - r1)
    gm = GM_SUN_TDB_M3_PER_S2
    bend = 2 * gm / C_M_PER_S**2
    expected = 2 * gm / C_M_PER_S**3 * np.log((n1 + n2 + n12 + bend) / (n1 + n2 - n12 + bend))
    assert res.columns["shapiro_sun_down_s"][0] == pytest.approx(expected, rel=1e-9, abs=0)


def test_unknown_receiving_spacecraft_is_quarantined(tmp_path):
    path = _states(tmp_path)
    table = _records(["link_range_one_way"], [1000.0])
    table = table.set_column(table.schema.get_field_index("station"), "station", pa.array(["TRINE-Z"]))
    params = {**LightTime.defaults(), "spacecraft_states": path.name, "bodies": ""}
    res = LightTime().apply(table, params, StageContext("tracking", {}, base_dir=str(tmp_path)))
    assert list(res.quarantine["target_unknown"]) == [True]


def test_constellation_sample_config_runs(tmp_path):
    """sample_configs/constellation.toml end to end: links pass the ground-station stages untouched."""
    from pipelines.cli import main
    from pipelines.demo import constellation_states
    from tests.conftest import REPO

    from tests.test_light_time_stage import _same_states

    bundled = pq.read_table(REPO / "sample_configs" / "constellation-states.parquet")
    _same_states(bundled, constellation_states())
    assert main(["run", str(REPO / "sample_configs" / "constellation.toml"), "--base-dir", str(tmp_path)]) == 0
    t = pq.read_table(tmp_path / "products" / "constellation-tracking.parquet")
    assert set(t["ledger"].to_pylist()) == {"ingest@1;time_scales@1;light_time@2"}
    # the solar term of a 2.5e6 km link at 1 au: (1+gamma) GM/c^3 * 2 r12/(r1 + r2) ~ 0.16 us (small-angle
    # expansion of the log form, common practice)
    sun = t["shapiro_sun_down_s"].to_numpy()
    expected = 2 * GM_SUN_TDB_M3_PER_S2 / C_M_PER_S**3 * 2 * (C_M_PER_S * t["lt_down_geometric_s"].to_numpy()) / (2 * AU)
    assert np.allclose(sun, expected, rtol=0.02)
    q = pq.read_table(tmp_path / "products" / "constellation-tracking.quarantine.parquet")
    assert q["quarantine_reason"].to_pylist() == ["target_unknown"]


def test_metres_are_c_tau_over_two_for_round_trips_and_c_tau_one_way(tmp_path):
    """README, light_time: unit m means c*tau/2 for two-way and c*tau for one-way (common practice)."""
    path = _states(tmp_path)
    ctx = StageContext("tracking", {}, base_dir=str(tmp_path))
    params = {**LightTime.defaults(), "spacecraft_states": path.name, "bodies": ""}
    table = _records(["link_range_one_way", "link_range_two_way"], [1000.0, 1000.0])
    seconds = np.asarray(LightTime().apply(table, params, ctx).columns["computed_value"])
    table = table.set_column(table.schema.get_field_index("unit"), "unit", pa.array(["m", "m"]))
    metres = np.asarray(LightTime().apply(table, params, ctx).columns["computed_value"])
    assert metres[0] == pytest.approx(C_M_PER_S * seconds[0], rel=1e-15)
    assert metres[1] == pytest.approx(C_M_PER_S * seconds[1] / 2, rel=1e-15)
