"""sample_configs/gyroscope.toml and laser_ranging.toml end to end (invented scenarios: the pipeline's
contract -- balance, every documented bad row quarantined with its reason -- and sizes checked against
closed forms), and the bundled demo files against pipelines/demo_orbits.py."""
from __future__ import annotations

import numpy as np
import pyarrow.compute as pc
import pyarrow.parquet as pq

from pipelines import demo_orbits
from pipelines.cli import main
from pipelines.errors import EXIT_OK
from stages.physics import constants as K
from stages.physics import precession as pr
from stages.physics.orbit_catalogue import load_orbit_catalogue
from tests.conftest import REPO

GM = K.GM_EARTH_TT_M3_PER_S2       # TN36 Table 1.1
C2 = K.C_M_PER_S**2


def _manifest(base):
    import json

    return json.loads(sorted((base / "products" / "manifests").glob("*.json"))[-1].read_text())


def test_bundled_demo_files_match_the_generator():
    from tests.test_light_time_stage import _same_states

    _same_states(pq.read_table(REPO / "sample_configs" / "plover-states.parquet"), demo_orbits.plover_states())
    cat = load_orbit_catalogue(REPO / "sample_configs" / "orbits.toml")
    for name, el in ((demo_orbits.GYRO, demo_orbits.GYRO_ELEMENTS), (demo_orbits.LASER, demo_orbits.LASER_ELEMENTS)):
        j = int(cat.index([name])[0])
        expect = [el["a_m"], el["e"], *np.radians([el["i_deg"], el["raan_deg"], el["argp_deg"], el["m0_deg"]])]
        np.testing.assert_allclose(cat.elements[j], expect, rtol=1e-15, atol=1e-15)
        assert (cat.start_tt_mjd[j], cat.start_tt_sod_s[j]) == (demo_orbits.START_MJD, 0.0)
    j = int(cat.index([demo_orbits.GYRO])[0])
    ra, dec = np.radians(demo_orbits.GYRO_GUIDE_RA_DEG), np.radians(demo_orbits.GYRO_GUIDE_DEC_DEG)
    np.testing.assert_allclose(cat.spin_reference[j], [np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)], atol=1e-15)


def test_gyroscope_sample_config_runs(tmp_path):
    assert main(["run", str(REPO / "sample_configs" / "gyroscope.toml"), "--base-dir", str(tmp_path)]) == EXIT_OK
    m = _manifest(tmp_path)
    assert m["totals"]["balanced"]
    q = pq.read_table(tmp_path / "products" / "gyroscope-orientation.quarantine.parquet")
    got = dict(zip(q["source_row"].to_pylist(), zip(q["quarantine_step"].to_pylist(), q["quarantine_reason"].to_pylist())))
    assert got == {7: ("precession", "direction_not_unit"), 11: ("ingest", "direction_missing"),
                   15: ("ingest", "direction_invalid"), 19: ("precession", "body_unknown"), 23: ("ingest", "body_missing"),
                   27: ("precession", "outside_orbit_coverage"), 31: ("precession", "orbit_crosses_surface"),
                   35: ("precession", "spin_reference_missing"), 39: ("ingest", "observable_unknown"),
                   43: ("ingest", "record_id_duplicate"), 1442: ("ingest", "value_not_finite")}
    t = pq.read_table(tmp_path / "products" / "gyroscope-orientation.parquet")
    assert set(t["ledger"].to_pylist()) == {"ingest@1;precession@1"}
    spin = t.filter(pc.equal(t["observable"], "spin_axis"))
    # the observations are the prediction plus 1 mas of noise per axis
    assert np.all(spin["prec_residual_mas"].to_numpy() < 6.0)
    flags = spin["prec_direction_flag"].to_numpy()
    assert set(flags.tolist()) == {0, 1, 2} and (flags == 1).sum() == 1
    # the geodetic drift of the guide direction (in the plane of the circular polar orbit) grows at
    # (3/2) (GM)^(3/2)/(c^2 a^(5/2)) (Schiff 1960, gamma = 1): 6.62 arcsec/yr at 642 km
    a = demo_orbits.GYRO_ELEMENTS["a_m"]
    rate = 1.5 * GM**1.5 / (C2 * a**2.5) * pr.MAS_PER_RAD
    np.testing.assert_allclose(spin["prec_geodetic_ns_mas"].to_numpy(), rate * spin["prec_dt_s"].to_numpy(), rtol=1e-9)
    # the node records' corrected values keep the Newtonian (J2) drift: value - corrected = the relativistic angle
    node = t.filter(pc.equal(t["observable"], "node_angle"))
    diff_mas = (node["value"].to_numpy() - node["value_corrected"].to_numpy()) * 3.6e6
    np.testing.assert_allclose(diff_mas, node["prec_relativistic_angle_mas"].to_numpy(), rtol=1e-6, atol=1e-6)


def test_laser_ranging_sample_config_runs(tmp_path):
    assert main(["run", str(REPO / "sample_configs" / "laser_ranging.toml"), "--base-dir", str(tmp_path)]) == EXIT_OK
    assert _manifest(tmp_path)["totals"]["balanced"]
    q = pq.read_table(tmp_path / "products" / "laser_ranging-tracking.quarantine.parquet")
    got = dict(zip(q["source_row"].to_pylist(), q["quarantine_reason"].to_pylist()))
    assert got == {5: "target_unknown", 9: "target_outside_coverage", 13: "value_not_finite"}
    t = pq.read_table(tmp_path / "products" / "laser_ranging-tracking.parquet")
    assert (t["relacc_status"].to_numpy() == 0).all()
    # Schwarzschild ~ 3 (GM)^2/(c^2 a^3) within 4 e (TN36 eq. 10.12, circular orbit); the others < 1e-10
    a, e = demo_orbits.LASER_ELEMENTS["a_m"], demo_orbits.LASER_ELEMENTS["e"]
    s = t["relacc_schwarzschild_m_per_s2"].to_numpy()
    assert np.all(np.abs(s / (3 * GM**2 / (C2 * a**3)) - 1) < 4 * e)
    assert np.all(t["relacc_lense_thirring_m_per_s2"].to_numpy() < 1e-10)
    assert np.all(t["relacc_de_sitter_m_per_s2"].to_numpy() < 1e-10)
    # the range residuals are the simulated 30 ps of noise
    assert np.abs(t["residual"].to_numpy()).max() < 6 * demo_orbits.RANGE_NOISE_S
    steps = {a["step"]: a for a in _manifest(tmp_path)["partitions"][0]["steps"]}
    # the record of an unknown target passes untouched (1); the one after the state table is flagged (2)
    assert steps["relativistic_acceleration"]["flags"]["relacc_status"] == {"0": t.num_rows, "1": 1, "2": 1}
