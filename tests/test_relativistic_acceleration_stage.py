"""The relativistic_acceleration stage: IERS Conventions (2010) (TN36) eq. 10.12 per tracking record.

* Values: stages.physics.precession.acceleration_terms_m_per_s2 (tested against TN36 eq. 10.12 in
  tests/test_precession.py) at the satellite's tabulated state, with the Earth's heliocentric state
  read from DE421 by jplephem directly (reference library; the ``de421`` fixture).
* Sizes for an orbit of a = 12 270 km, e = 0.0045 (the laser-ranging orbit of Ciufolini & Pavlis 2004,
  Nature 431, 958), bounded in closed form: Schwarzschild 3 (GM)^2/(c^2 r^3) on a circular orbit
  (TN36 eq. 10.12 with r.v = 0, v^2 = GM/r), about 2.9e-9 m/s^2; Lense-Thirring = 2 Omega_LT x v with
  G J/(c^2 r^3) <= |Omega_LT| <= 2 G J/(c^2 r^3) (Schiff 1960), a few 1e-11 m/s^2; de Sitter =
  2 Omega_dS x v, |Omega_dS| ~ 19.2 mas/yr (Bertotti, Ciufolini & Bender 1987, PRL 58, 1062; from
  memory), at most 3.4e-11 m/s^2.
"""
from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from stages.base import StageContext
from stages.physics import clock_rates as cr
from stages.physics import constants as K
from stages.physics import precession as pr
from stages.relativistic_acceleration import RelativisticAcceleration

GM = K.GM_EARTH_TT_M3_PER_S2            # TN36 Table 1.1
C2 = K.C_M_PER_S**2
G = 6.67430e-11                         # CODATA 2018
MJD = 60735                             # 2025-03-01
A, E, INC = 12_270e3, 0.0045, np.radians(109.8)


def _states(tmp_path):
    """The test's own Kepler orbit, states every 120 s over a day (TDB labels), plus a heliocentric target."""
    t = np.arange(0.0, 86400.0, 120.0)
    pos, vel, _ = cr.kepler_state(A, E, INC, 0.4, 1.0, 0.0, 0.0, t)
    n = t.size
    tab = pa.table({"target": ["SAT"] * n + ["FAR"] * n, "tdb_mjd": pa.array([MJD] * 2 * n, pa.int32()),
                    "tdb_sod_s": np.concatenate([t, t]),
                    **{f"{c}_m": np.concatenate([pos[:, k], pos[:, k] * 2e4]) for k, c in enumerate("xyz")},
                    **{f"v{c}_m_per_s": np.concatenate([vel[:, k], vel[:, k]]) for k, c in enumerate("xyz")},
                    "centre": ["earth"] * n + ["sun"] * n})
    pq.write_table(tab, tmp_path / "states.parquet")
    return t, pos, vel


def _records(targets, sod):
    n = len(sod)
    return pa.table({"target": pa.array(targets, pa.string()), "tdb_mjd": pa.array([MJD] * n, pa.int32()),
                     "tdb_sod_s": pa.array(np.asarray(sod, dtype=float))})


PARAMS = {**RelativisticAcceleration.defaults(), "spacecraft_states": "states.parquet"}


def _run(tmp_path, table, **params):
    res = RelativisticAcceleration().apply(table, {**PARAMS, **params}, StageContext("tracking", {}, base_dir=str(tmp_path)))
    return {k: np.asarray(v) for k, v in res.columns.items()}, np.asarray(res.touched), res.quarantine


def test_values_are_eq_10_12_at_the_tabulated_state(tmp_path, de421):
    t, pos, vel = _states(tmp_path)
    k = np.arange(0, t.size, 37)
    cols, touched, q = _run(tmp_path, _records(["SAT"] * k.size, t[k]))
    assert touched.all() and not q and (cols["relacc_status"] == 0).all()
    pe, ve = de421("earth", np.full(k.size, MJD), t[k])
    ps, vs = de421("sun", np.full(k.size, MJD), t[k])
    ref = pr.acceleration_terms_m_per_s2(pos[k], vel[k], GM, None, pe - ps, ve - vs)
    for term in ("schwarzschild", "lense_thirring", "de_sitter"):
        got = np.stack([cols[f"relacc_{term}_{c}_m_per_s2"] for c in "xyz"], axis=1)
        scale = np.linalg.norm(ref[term], axis=1).max()
        assert np.abs(got - ref[term]).max() < 1e-9 * scale, term   # states on the nodes: exact
        np.testing.assert_allclose(cols[f"relacc_{term}_m_per_s2"], np.linalg.norm(ref[term], axis=1), rtol=1e-9)
    np.testing.assert_allclose(cols["relacc_total_m_per_s2"], np.linalg.norm(ref["total"], axis=1), rtol=1e-9)
    # PPN parameters reach the formula (gamma = 0.5, beta = 1.5)
    g, _, _ = _run(tmp_path, _records(["SAT"], t[k[:1]]), gamma=0.5, beta=1.5)
    ref_g = pr.acceleration_terms_m_per_s2(pos[k[:1]], vel[k[:1]], GM, None, (pe - ps)[:1], (ve - vs)[:1], gamma=0.5, beta=1.5)
    assert g["relacc_schwarzschild_m_per_s2"][0] == pytest.approx(np.linalg.norm(ref_g["schwarzschild"][0]), rel=1e-9)
    assert g["relacc_lense_thirring_m_per_s2"][0] == pytest.approx(0.75 * cols["relacc_lense_thirring_m_per_s2"][0], rel=1e-9)
    # without the de Sitter term: NaN there, total = the other two
    off, _, _ = _run(tmp_path, _records(["SAT"], t[k[:1]]), de_sitter=False)
    assert np.isnan(off["relacc_de_sitter_m_per_s2"][0])
    assert off["relacc_total_m_per_s2"][0] == pytest.approx(
        np.linalg.norm(ref["schwarzschild"][0] + ref["lense_thirring"][0]), rel=1e-9)


def test_sizes_along_a_laser_ranging_orbit(tmp_path):
    t, pos, vel = _states(tmp_path)
    sod = np.arange(720) * 119.5 + 37.0                         # between the tabulated states
    cols, _, _ = _run(tmp_path, _records(["SAT"] * sod.size, sod))
    r_min, r_max = A * (1 - E), A * (1 + E)
    v_max = np.sqrt(GM * (2 / r_min - 1 / A))                  # vis-viva (common practice)
    # Schwarzschild: 3 (GM)^2/(c^2 r^3) for e = 0, within (1 +- 4 e) here; 2.8e-9 .. 3.0e-9 m/s^2
    s = cols["relacc_schwarzschild_m_per_s2"]
    circ = 3 * GM**2 / (C2 * A**3)
    assert np.all(np.abs(s / circ - 1) < 4 * E) and 2.8e-9 < circ < 3.0e-9
    # Lense-Thirring = 2 Omega_LT x v with Omega_LT = (G J/(c^2 r^3)) [3 c rhat - z], c = z.rhat (Schiff 1960):
    # for v in the orbit plane, perpendicular to rhat, |Omega_LT x vhat|^2 = (G J/(c^2 r^3))^2 (cos^2 i + 4 c^2),
    # so 2 G J v |cos i|/(c^2 r^3) <= |a_LT| <= 4 G J v/(c^2 r^3) (0.99 and 1.01: r.v is not quite 0 at e = 0.0045)
    gj = G * pr.EARTH_ANGULAR_MOMENTUM_KG_M2_PER_S / C2
    v_min = np.sqrt(GM * (2 / r_max - 1 / A))
    lt = cols["relacc_lense_thirring_m_per_s2"]
    assert lt.min() >= 0.99 * 2 * gj * v_min * abs(np.cos(INC)) / r_max**3
    assert lt.max() <= 1.01 * 4 * gj * v_max / r_min**3
    assert 1e-11 < lt.max() < 1e-10
    # de Sitter = 2 Omega_dS x v: at most 2 |Omega_dS| v, and as v turns in the orbit plane it comes within
    # sampling of that maximum; |Omega_dS| = 19.2 mas/yr (from memory) within +-4 % over the year (R^(-5/2),
    # the Earth's orbital eccentricity 0.0167): between 18 and 20 mas/yr
    ds = cols["relacc_de_sitter_m_per_s2"]
    per_mas_yr = 1.0 / pr.MAS_PER_RAD / pr.JULIAN_YEAR_S
    assert 0.99 * 2 * 18.0 * per_mas_yr * v_min <= ds.max() <= 2 * 20.0 * per_mas_yr * v_max


def test_other_targets_pass_untouched_and_missing_states_are_flagged(tmp_path):
    _states(tmp_path)
    table = _records(["FAR", "NOBODY", "SAT", "SAT", None], [600.0, 600.0, 90000.0, 600.0, 600.0])
    cols, touched, q = _run(tmp_path, table)
    assert cols["relacc_status"].tolist() == [1, 1, 2, 0, 1]
    assert touched.tolist() == [False, False, True, True, False]
    assert not q
    for name, col in cols.items():
        if name != "relacc_status":
            assert np.isnan(col[[0, 1, 2, 4]]).all() and np.isfinite(col[3]), name


def test_orbit_catalogue_bodies_and_the_surface(tmp_path):
    # A body of the orbit catalogue (elements, TT epoch) at a record's TDB epoch: the same as the element
    # model at TT = TDB - (TDB - TT); a body below the surface is flagged, not quarantined; a body of
    # another central body is not an Earth satellite.
    from stages.physics import time_scales as tsp
    from stages.physics.orbit_catalogue import elements_state, load_orbit_catalogue

    (tmp_path / "orbits.toml").write_text("""format = "relcorr-orbits/1"
[orbits.ELT]
semi_major_axis_m = 12270000.0
eccentricity = 0.0045
inclination_deg = 109.8
raan_deg = 10.0
argument_of_perigee_deg = 20.0
mean_anomaly_deg = 5.0
elements_epoch_tt = 2025-03-01T00:00:00
[orbits.DIP]
semi_major_axis_m = 6000000.0
eccentricity = 0.0
inclination_deg = 10.0
raan_deg = 0.0
argument_of_perigee_deg = 0.0
mean_anomaly_deg = 0.0
elements_epoch_tt = 2025-03-01T00:00:00
[central_bodies.CO]
gm_m3_per_s2 = 1.0e20
radius_m = 1.0e4
spin_parameter = 0.5
[orbits.AWAY]
central_body = "CO"
semi_major_axis_m = 1.0e8
eccentricity = 0.0
inclination_deg = 10.0
raan_deg = 0.0
argument_of_perigee_deg = 0.0
mean_anomaly_deg = 0.0
elements_epoch_tt = 2025-03-01T00:00:00
""")
    params = {**RelativisticAcceleration.defaults(), "orbits": "orbits.toml", "de_sitter": False}
    ctx = StageContext("tracking", {}, base_dir=str(tmp_path))
    res = RelativisticAcceleration().apply(_records(["ELT", "DIP", "AWAY"], [5000.0] * 3), params, ctx)
    cols = {k: np.asarray(v) for k, v in res.columns.items()}
    assert cols["relacc_status"].tolist() == [0, 3, 1]
    m, s = np.array([MJD]), np.array([5000.0])
    tt_m, tt_s = tsp.add_seconds(m, s, -tsp.tdb_minus_tt_s(m, s))
    cat = load_orbit_catalogue(tmp_path / "orbits.toml")
    j = int(cat.index(["ELT"])[0])
    pos, vel = elements_state(cat, j, cat.seconds_since_start(j, tt_m, tt_s))
    ref = pr.acceleration_terms_m_per_s2(pos, vel, GM)
    assert cols["relacc_schwarzschild_m_per_s2"][0] == pytest.approx(np.linalg.norm(ref["schwarzschild"][0]), rel=1e-12)
    assert cols["relacc_lense_thirring_m_per_s2"][0] == pytest.approx(np.linalg.norm(ref["lense_thirring"][0]), rel=1e-12)
    assert RelativisticAcceleration().validate(RelativisticAcceleration.defaults(), ctx)  # neither file: a config error
