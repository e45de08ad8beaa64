"""The station_position and light_time stages on the conjunction scenario, against outside references.

* Station GCRS positions: astropy's ITRS -> GCRS (reference library, IAU 2006/2000A via ERFA, with the
  same bundled finals2000A table), which leaves out the celestial pole offsets: compared with
  ``cip_offsets = false``.
* The solar term of the round trip near superior conjunction: the grazing-ray approximation of
  Bertotti, Iess & Tortora 2003, Nature 425, 374, eq. 1, Delta t = 2(1+gamma) GM/c^3 ln(4 r1 r2 / b^2),
  with r1, r2, b from astropy's DE421 positions; the approximation's own error is O(b^2/r^2) ~ 1e-4 here.
* gamma: every term of the form (1+gamma) GM/c^3 ln(...) scales with (1+gamma) (Shapiro 1964; PPN form).
"""
from __future__ import annotations


import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest

from pipelines.cli import main
from pipelines.errors import EXIT_OK
from tests.conftest import REPO


@pytest.fixture(scope="module")
def conjunction(tmp_path_factory):
    base = tmp_path_factory.mktemp("conjunction")
    assert main(["run", str(REPO / "sample_configs" / "conjunction.toml"), "--base-dir", str(base)]) == EXIT_OK
    t = pq.read_table(base / "products" / "conjunction-tracking.parquet")
    return base, t.filter(pc.equal(t["observable"], "range_two_way"))  # the range records (Doppler: test_doppler_stage)


def _same_states(a: pa.Table, b: pa.Table) -> None:
    """Same rows and labels; positions to 1 um and velocities to 1e-9 m/s (a new libm may move an ulp)."""
    assert a.schema.names == b.schema.names and a.num_rows == b.num_rows
    for name in a.schema.names:
        x, y = a[name].to_numpy(zero_copy_only=False), b[name].to_numpy(zero_copy_only=False)
        if x.dtype.kind == "f":
            assert np.allclose(x, y, rtol=0, atol=1e-6 if name.endswith("_m") else 1e-9), name
        else:
            assert (x == y).all(), name


def test_bundled_states_match_the_generator():
    from pipelines.demo import conjunction_states

    bundled = pq.read_table(REPO / "sample_configs" / "conjunction-states.parquet")
    _same_states(bundled, conjunction_states())


def test_station_gcrs_against_astropy(conjunction):
    import astropy.units as u
    from astropy.coordinates import ITRS, CartesianRepresentation, GCRS
    from astropy.time import Time

    from stages.base import StageContext
    from stages.station_position import StationPosition

    _, t = conjunction
    t = t.slice(0, 400)
    res = StationPosition().apply(t, {"grid_step_s": 3600.0, "cip_offsets": False},
                                  StageContext("tracking", {"eop_beyond_table": "flag"}))
    utc = Time(t["utc_mjd"].to_numpy().astype(float), t["utc_sod_ps"].to_numpy() / 1e12 / 86400.0,
               format="mjd", scale="utc")
    xyz = CartesianRepresentation(*(t[f"site_itrs_{a}_m"].to_numpy() for a in "xyz"), unit=u.m)
    from astropy.utils import iers

    from stages.physics.earth_orientation import load_eop_table

    # the same Earth-orientation table on both sides (astropy's default mixes in other series)
    with iers.earth_orientation_table.set(load_eop_table().table):
        g = ITRS(xyz, obstime=utc).transform_to(GCRS(obstime=utc)).cartesian
    ours = np.column_stack([res.columns[f"site_gcrs_{a}_m"] for a in "xyz"])
    err = np.linalg.norm(ours - np.column_stack([g.x.to_value(u.m), g.y.to_value(u.m), g.z.to_value(u.m)]), axis=1)
    assert err.max() < 1e-3, f"max |ours - astropy| = {err.max():.2e} m"


def test_solar_term_near_conjunction_matches_the_grazing_approximation(conjunction):
    from astropy.coordinates import get_body_barycentric
    from astropy.coordinates import solar_system_ephemeris
    from astropy.time import Time

    from stages.physics.constants import C_M_PER_S, GM_SUN_TDB_M3_PER_S2
    from stages.physics.ephemeris import de421_path
    from stages.physics.spacecraft_ephemeris import load_state_table

    _, t = conjunction
    sun_rt = t["shapiro_sun_down_s"].to_numpy() + t["shapiro_sun_up_s"].to_numpy()
    i = int(np.argmax(sun_rt))
    assert 150e-6 < sun_rt[i] < 300e-6                      # "hundreds of microseconds" near conjunction
    # independent geometry: Sun and Earth from astropy with the same DE421 file, the probe from its state table
    tdb = Time(float(t["tdb_mjd"][i].as_py()), t["tdb_sod_s"][i].as_py() / 86400.0, format="mjd", scale="tdb")
    with solar_system_ephemeris.set(str(de421_path())):
        sun = get_body_barycentric("sun", tdb).xyz.to_value("m")
        earth = get_body_barycentric("earth", tdb).xyz.to_value("m")
    states = load_state_table(REPO / "sample_configs" / "conjunction-states.parquet")
    from stages.physics.ephemeris import load_planetary_ephemeris

    probe, _, _ = states.posvel_bcrs_m("TERN-4", np.array([t["lt_t2_tdb_mjd"][i].as_py()]),
                                       np.array([t["lt_t2_tdb_sod_s"][i].as_py()]), load_planetary_ephemeris(), 86400.0)
    r1, r2 = np.linalg.norm(earth - sun), np.linalg.norm(probe[0] - sun)
    d = (probe[0] - earth) / np.linalg.norm(probe[0] - earth)
    b = np.linalg.norm(np.cross(sun - earth, d))            # impact parameter of the Earth-probe line
    approx = 2 * 2 * GM_SUN_TDB_M3_PER_S2 / C_M_PER_S**3 * np.log(4 * r1 * r2 / b**2)
    assert sun_rt[i] == pytest.approx(approx, rel=2e-3, abs=0)


def test_two_way_is_upleg_plus_downleg_and_converges(conjunction):
    _, t = conjunction
    from stages.physics.constants import C_M_PER_S

    rt = (t["tdb_mjd"].to_numpy() - t["lt_t1_tdb_mjd"].to_numpy()) * 86400.0 + (t["tdb_sod_s"].to_numpy() - t["lt_t1_tdb_sod_s"].to_numpy())
    legs = t["lt_down_geometric_s"].to_numpy() + t["lt_up_geometric_s"].to_numpy() + sum(
        t[f"shapiro_{b}_{leg}_s"].to_numpy() for b in ("sun", "jupiter", "saturn", "earth") for leg in ("down", "up"))
    assert np.abs(rt - legs).max() < 2e-11                  # seconds-of-day rounding of t1 and t3
    assert t["lt_iterations_down"].to_numpy().max() <= 5 and t["lt_iterations_up"].to_numpy().max() <= 5
    assert set(t["lt_status"].to_pylist()) == {0}
    # geometric round trip ~ 2 x 2.5 au / c near conjunction (Earth 1 au, probe 1.52 au on the far side)
    assert 2 * 2.3 * 1.496e11 / C_M_PER_S < rt.min() and rt.max() < 2 * 2.6 * 1.496e11 / C_M_PER_S


def test_gamma_scales_the_relativistic_terms(conjunction, tmp_path):
    from stages.base import StageContext
    from stages.light_time import LightTime

    base, t = conjunction
    t = t.slice(0, 200)
    ctx = StageContext("tracking", {}, base_dir=str(REPO / "sample_configs"))
    params = {**LightTime.defaults(), "spacecraft_states": "conjunction-states.parquet", "bodies": "jupiter,saturn,earth"}
    keep = [c for c in t.column_names if c not in {f.name for f in LightTime.provides}]
    t = t.select(keep)
    one = LightTime().apply(t, {**params, "gamma": 1.0}, ctx).columns
    zero = LightTime().apply(t, {**params, "gamma": 0.0}, ctx).columns
    for b in ("jupiter", "saturn", "earth"):   # no bending term for these: exact factor (1+0)/(1+1)
        ratio = np.asarray(zero[f"shapiro_{b}_down_s"]) / np.asarray(one[f"shapiro_{b}_down_s"])
        assert np.allclose(ratio, 0.5, rtol=1e-6), b
    assert np.isnan(np.asarray(one["shapiro_sun_down_s"])).all()   # not selected: NaN, never zero


def test_bad_records_are_quarantined_with_their_reason(conjunction):
    base, _ = conjunction
    q = pq.read_table(base / "products" / "conjunction-tracking.quarantine.parquet")
    q = q.filter(pc.equal(q["observable"], "range_two_way"))
    reasons = dict(zip(q["target"].to_pylist(), q["quarantine_reason"].to_pylist()))
    assert reasons["TERN-9"] == "target_unknown"
    assert reasons["TERN-4"] == "target_outside_coverage"
    assert set(q["quarantine_step"].to_pylist()) == {"light_time"}


@pytest.mark.parametrize("change, reason", [
    ({"max_iterations": 2}, "light_time_not_converged"),   # the downleg needs 3 Newton steps here
    ({"max_gap_s": 3600.0}, "target_in_gap"),              # the bundled states are 3 h apart
])
def test_stage_level_faults(conjunction, change, reason):
    from stages.base import StageContext
    from stages.light_time import LightTime

    _, t = conjunction
    t = t.slice(0, 50)
    keep = [c for c in t.column_names if c not in {f.name for f in LightTime.provides}]
    ctx = StageContext("tracking", {}, base_dir=str(REPO / "sample_configs"))
    params = {**LightTime.defaults(), "spacecraft_states": "conjunction-states.parquet", **change}
    res = LightTime().apply(t.select(keep), params, ctx)
    flagged = {r for r, m in res.quarantine.items() if np.asarray(m).any()}
    assert flagged == {reason}
    assert np.asarray(res.quarantine[reason]).sum() > 0


def test_light_time_config_errors(tmp_path, capsys):
    import shutil

    (tmp_path / "raw").mkdir()
    pq.write_table(pa.table({"x": [1]}), tmp_path / "raw" / "a.parquet")
    shutil.copy(REPO / "sample_configs" / "stations.toml", tmp_path)
    cfg = tmp_path / "run.toml"
    cfg.write_text('[pipeline]\nname="t"\nrecord_kind="tracking"\ninputs=["raw/*.parquet"]\n'
                   '[[stages]]\nuse="stations"\n[[stages]]\nuse="time_scales"\n[[stages]]\nuse="station_position"\n'
                   '[[stages]]\nuse="light_time"\nbodies="sun,pluto"\nspacecraft_states="nowhere.parquet"\n')
    assert main(["check", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert "stages[4].bodies: found 'pluto', expected a comma-separated list from: sun, moon, jupiter, saturn, earth" in err
    assert "stages[4].spacecraft_states:" in err and "nowhere.parquet" in err
    # light_time before station_position: the BCRS station columns are missing
    cfg.write_text('[pipeline]\nname="t"\nrecord_kind="tracking"\ninputs=["raw/*.parquet"]\n'
                   '[[stages]]\nuse="stations"\n[[stages]]\nuse="time_scales"\n[[stages]]\nuse="light_time"\n')
    assert main(["check", str(cfg)]) == 2
    assert "requires column 'site_bcrs_x_m', which no earlier step provides" in capsys.readouterr().err


def test_linearised_body_states_change_nothing_measurable(conjunction, monkeypatch):
    """Bodies carried linearly between trial epochs (stages.physics.light_time.LinearisedBodyStates)
    against bodies evaluated afresh at every trial epoch: the bound in its docstring is < 1e-14 s in a
    light time, and < 2e-16 in a 60 s Doppler (both ends of the count carry the error alike)."""
    import stages.light_time as mod
    from stages.base import StageContext
    from stages.doppler import Doppler
    from stages.physics import light_time as lt

    _, t = conjunction
    t = t.slice(0, 300)
    keep = [c for c in t.column_names if c not in {f.name for f in mod.LightTime.provides}]
    t = t.select(keep)
    d = t.set_column(t.schema.get_field_index("observable"), "observable", pa.array(["doppler_two_way"] * t.num_rows))
    d = d.drop([c for c in d.column_names if c in {f.name for f in Doppler.provides}]
               + ["count_s", "reference_frequency_hz", "turnaround_ratio"])
    d = d.append_column("count_s", pa.array(np.full(t.num_rows, 60.0)))
    ctx = StageContext("tracking", {}, base_dir=str(REPO / "sample_configs"))
    params = {**mod.LightTime.defaults(), "spacecraft_states": "conjunction-states.parquet"}
    dparams = {**Doppler.defaults(), "spacecraft_states": "conjunction-states.parquet"}
    fast = mod.LightTime().apply(t, params, ctx).columns
    dfast = Doppler().apply(d, dparams, ctx).columns
    original = lt.LinearisedBodyStates.__init__
    monkeypatch.setattr(lt.LinearisedBodyStates, "__init__", lambda self, eph, max_dt_s=10.0: original(self, eph, -1.0))
    exact = mod.LightTime().apply(t, params, ctx).columns
    dexact = Doppler().apply(d, dparams, ctx).columns
    for name in ("computed_value", "shapiro_sun_down_s", "shapiro_sun_up_s", "shapiro_earth_up_s"):
        assert np.abs(np.asarray(fast[name]) - np.asarray(exact[name])).max() < 1e-13, name
    for name in ("dop_computed_y", "dop_shapiro_sun", "dop_shapiro_earth"):
        diff = np.abs(np.asarray(dfast[name]) - np.asarray(dexact[name])).max()
        print(name, diff)
        assert diff < 2e-16, name
