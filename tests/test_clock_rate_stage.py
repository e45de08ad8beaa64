"""The clock_rate stage against published values.

* A clock on a circular orbit of a = 26 561.75 km against a clock on the geoid runs fast by
  4.4647e-10 = 38.575 us/day (references sheet, recomputed from IERS 2010 constants; the
  factory offset of IS-GPS-200 sec. 3.3.1.1 is -4.4647e-10).  The mean J2 term of an inclined
  orbit moves it by ~3e-15 (Ashby 2003 sec. 5): tolerance 1e-14.
* Eccentricity term amplitude 22.9 ns for e = 0.01, sqrt(A) = 5153.8 sqrt(m) (references sheet,
  recomputed: F e sqrt(A) with F = -4.442807633e-10 s/sqrt(m), IS-GPS-200).
* A ground clock 1000 m above the geoid runs fast by g H / c^2 ~ 1.09e-13 (references sheet:
  1.09e-16 per metre, recomputed).
* Referred to TCG, every rate shifts by -L_G = -6.969290134e-10 (IAU 2000 Res. B1.9).
"""
from __future__ import annotations

import numpy as np
import pyarrow as pa
import pytest

from stages.base import StageContext
from stages.clock_rate import ClockRate

CATALOGUE = """format = "relcorr-clocks/1"
[clocks.CIRC]
kind = "orbiting"
semi_major_axis_m = 26561750.0
eccentricity = 0.0
inclination_deg = 55.0
raan_deg = 0.0
argument_of_perigee_deg = 0.0
mean_anomaly_deg = 0.0
elements_epoch_tt = 2020-01-01T00:00:00
[clocks.ECC]
kind = "orbiting"
semi_major_axis_m = {a_ecc!r}
eccentricity = 0.01
inclination_deg = 55.0
raan_deg = 0.0
argument_of_perigee_deg = 0.0
mean_anomaly_deg = 0.0
elements_epoch_tt = 2020-01-01T00:00:00
[clocks.GEOID]
kind = "ground"
station = "EQ"
height_above_geoid_m = 0.0
[clocks.HIGH]
kind = "ground"
station = "EQ"
height_above_geoid_m = 1000.0
"""
STATIONS = """format = "relcorr-stations/1"
[stations.EQ]
position_m = [6378137.0, 0.0, 0.0]
reference_epoch = 2020-01-01
"""


@pytest.fixture
def ctx(tmp_path):
    (tmp_path / "clocks.toml").write_text(CATALOGUE.format(a_ecc=5153.8**2))
    (tmp_path / "stations.toml").write_text(STATIONS)
    return StageContext("clock", {}, base_dir=str(tmp_path))


def _table(remote, reference, observable, sod, tau=300.0):
    n = len(sod)
    return pa.table({"remote_clock": [remote] * n, "reference_clock": [reference] * n, "observable": [observable] * n,
                     "value": np.zeros(n), "tt_mjd": pa.array([58849] * n, pa.int32()),  # 2020-01-01
                     "tt_sod_s": np.asarray(sod, float), "averaging_s": np.full(n, tau)})


PARAMS = {**ClockRate.defaults(), "reference_epoch_tt": "2020-01-01T00:00:00"}


def test_circular_orbit_against_the_geoid(ctx):
    sod = np.linspace(0, 86400, 97)
    res = ClockRate().apply(_table("CIRC", "GEOID", "fractional_frequency", sod), PARAMS, ctx)
    y = np.asarray(res.columns["relativistic_prediction"])
    assert np.abs(y - 4.4647e-10).max() < 1e-14
    assert np.asarray(res.columns["reference_rate_total"]) == pytest.approx(0.0, abs=1e-20)
    res = ClockRate().apply(_table("CIRC", "GEOID", "time_offset", [86400.0]), PARAMS, ctx)
    assert res.columns["relativistic_prediction"][0] == pytest.approx(38.575e-6, rel=3e-5, abs=0)  # us/day
    grav = 45.79e-6 / 86400.0
    assert np.asarray(res.columns["remote_rate_gravitational"])[0] == pytest.approx(grav, rel=3e-4, abs=0)
    assert np.asarray(res.columns["remote_rate_velocity"])[0] == pytest.approx(-7.21e-6 / 86400.0, rel=1e-3, abs=0)


def test_eccentricity_term_amplitude(ctx):
    period = 2 * np.pi * np.sqrt((5153.8**2) ** 3 / 3.986004415e14)
    sod = np.linspace(0, period, 2001)
    res = ClockRate().apply(_table("ECC", "GEOID", "time_offset", sod), PARAMS, ctx)
    ecc = np.asarray(res.columns["eccentricity_term_s"])
    assert ecc.max() == pytest.approx(22.9e-9, abs=0.05e-9) and ecc.min() == pytest.approx(-22.9e-9, abs=0.05e-9)
    # the periodic part of the accumulated time is that term, counted from the reference epoch
    periodic = np.asarray(res.columns["remote_offset_periodic_s"])
    assert np.abs(periodic - (ecc - ecc[0])).max() < 1e-15


def test_ground_clock_height_and_tcg(ctx):
    res = ClockRate().apply(_table("HIGH", "GEOID", "fractional_frequency", [0.0]), PARAMS, ctx)
    assert res.columns["relativistic_prediction"][0] == pytest.approx(1000 * 1.09e-16, rel=3e-3, abs=0)
    tt = ClockRate().apply(_table("CIRC", "HIGH", "fractional_frequency", [500.0]), PARAMS, ctx).columns
    tcg = ClockRate().apply(_table("CIRC", "HIGH", "fractional_frequency", [500.0]),
                            {**PARAMS, "coordinate_time": "TCG"}, ctx).columns
    L_G = 6.969290134e-10
    assert tcg["remote_rate_total"][0] - tt["remote_rate_total"][0] == pytest.approx(-L_G, rel=1e-12, abs=0)
    assert tcg["reference_rate_total"][0] - tt["reference_rate_total"][0] == pytest.approx(-L_G, rel=1e-12, abs=0)
    # the difference between the two clocks does not depend on the coordinate time
    assert tcg["relativistic_prediction"][0] == pytest.approx(tt["relativistic_prediction"][0], rel=1e-9, abs=0)


def test_unknown_clock_is_quarantined(ctx):
    res = ClockRate().apply(_table("NOPE", "GEOID", "time_offset", [0.0]), PARAMS, ctx)
    assert list(res.quarantine["clock_unknown"]) == [True]


def _write_states(path, a, e, t0_tt_mjd=58849, span_s=2 * 86400.0, step_s=300.0):
    """A geocentric state table of a Kepler orbit (the test's own orbit model; state epochs TDB)."""
    from stages.physics import clock_rates as cr
    from stages.physics import time_scales as tsp

    t = np.arange(-step_s * 4, span_s + step_s * 5, step_s)
    pos, vel, _ = cr.kepler_state(a, e, np.radians(55.0), 0.0, 0.0, 0.0, 0.0, t)
    mjd = np.full(t.size, t0_tt_mjd, dtype=np.int64) + np.floor(t / 86400.0).astype(np.int64)
    sod = t - np.floor(t / 86400.0) * 86400.0
    # label the states in TDB: the stage converts back with the same series
    tdb_m, tdb_s = tsp.add_seconds(mjd, sod, tsp.tdb_minus_tt_s(mjd, sod))
    pa_tab = pa.table({"target": ["WREN"] * t.size, "tdb_mjd": pa.array(tdb_m, pa.int32()), "tdb_sod_s": tdb_s,
                       "x_m": pos[:, 0], "y_m": pos[:, 1], "z_m": pos[:, 2],
                       "vx_m_per_s": vel[:, 0], "vy_m_per_s": vel[:, 1], "vz_m_per_s": vel[:, 2],
                       "centre": ["earth"] * t.size})
    import pyarrow.parquet as pq

    pq.write_table(pa_tab, path)


def test_state_table_orbit_against_independent_integration(tmp_path):
    """Accumulated proper time along a tabulated orbit vs the test's own integration of the same rate,
    dtau/dTT - 1 = L_G - [v^2/2 + U_E(monopole + J2)]/c^2 (IERS TN36 sec. 10.2), by the trapezoid rule on
    a 1 s grid (error ~ h^2/12 * max|rate''| * T < 1e-16 s)."""
    from stages.physics import clock_rates as cr

    a, e = 5153.8**2, 0.01
    _write_states(tmp_path / "wren.parquet", a, e)
    (tmp_path / "clocks.toml").write_text(CATALOGUE.format(a_ecc=a) + '[clocks.WREN-CS]\nkind = "orbiting"\n'
                                          'states = "wren.parquet"\nstates_target = "WREN"\n')
    (tmp_path / "stations.toml").write_text(STATIONS)
    ctx = StageContext("clock", {}, base_dir=str(tmp_path))
    sod = np.array([0.0, 3000.0, 40000.0, 86400.0, 150000.0])
    res = ClockRate().apply(_table("WREN-CS", "GEOID", "time_offset", sod), PARAMS, ctx)
    got = np.asarray(res.columns["relativistic_prediction"])
    fine = np.arange(0.0, 150001.0, 1.0)
    pos, vel, _ = cr.kepler_state(a, e, np.radians(55.0), 0.0, 0.0, 0.0, 0.0, fine)
    rate = cr.clock_rate_terms(pos, vel)["total"]
    cum = np.concatenate([[0.0], np.cumsum((rate[1:] + rate[:-1]) / 2.0)])
    expected = cum[sod.astype(int)]
    assert np.abs(got - expected).max() < 1e-12, np.abs(got - expected).max()
    # the periodic part is the eccentricity term, to the J2 periodic part (tens of ps at this radius)
    periodic = np.asarray(res.columns["remote_offset_periodic_s"])
    ecc = np.asarray(res.columns["eccentricity_term_s"])
    assert np.abs(periodic - (ecc - ecc[0])).max() < 1e-10
    with_tides = ClockRate().apply(_table("WREN-CS", "GEOID", "time_offset", sod), {**PARAMS, "tidal": True}, ctx)
    assert np.isfinite(np.asarray(with_tides.columns["remote_rate_tidal"])).all()
    # outside the table: quarantined, never extrapolated
    res = ClockRate().apply(_table("WREN-CS", "GEOID", "time_offset", [200000.0]), PARAMS, ctx)
    assert list(res.quarantine["orbit_outside_coverage"]) == [True]


def test_two_way_frequency_records_follow_the_published_closed_form(ctx):
    """two_way_fractional_frequency records: prediction vs Vessot et al. 1980 eq. 1 (from memory, with
    r_SE = x_E - x_S; see tests/test_frequency_links.py) evaluated here with the station's GCRS state
    and its acceleration from a central difference of the velocity.  Rates against TT for both clocks,
    potentials monopole + J2 as in clock_rate_terms, ground clock on the geoid (its rate is then 0)."""
    from stages.physics import clock_rates as cr
    from stages.physics.earth_rotation import itrs_to_gcrs
    from stages.physics.frequency_links import vessot_shift

    sod = np.array([1000.0, 20000.0, 50000.0])
    table = _table("CIRC", "GEOID", "two_way_fractional_frequency", sod, tau=10.0)
    y = np.asarray(ClockRate().apply(table, PARAMS, ctx).columns["relativistic_prediction"])
    flipped = ClockRate().apply(_table("GEOID", "CIRC", "two_way_fractional_frequency", sod, tau=10.0), PARAMS, ctx)
    assert np.allclose(np.asarray(flipped.columns["relativistic_prediction"]), -y, rtol=0, atol=1e-20)

    def station(t_tt):
        utc = t_tt - 69.184   # TT - UTC in 2020 (TAI - UTC = 37 s, IERS Bulletin C)
        x = np.tile([6378137.0, 0.0, 0.0], (t_tt.size, 1))
        st = itrs_to_gcrs(x, np.full(t_tt.size, 58849), utc, np.full(t_tt.size, 58849), t_tt)
        return st.pos_m, st.vel_m_per_s

    xe, ve = station(sod)
    ae = (station(sod + 0.5)[1] - station(sod - 0.5)[1]) / 1.0
    xs, vs, _ = cr.kepler_state(26561750.0, 0.0, np.radians(55.0), 0.0, 0.0, 0.0, 0.0, sod)
    c2 = 299792458.0**2
    # phi = -U with U the potential the clocks' rates use (monopole + J2) ...
    phi_s = -cr.earth_potential_m2_per_s2(xs)
    # ... and the ground clock on the geoid: rate 0 = L_G - (v_E^2/2 + U_E)/c^2, so phi_E = v_E^2/2 - L_G c^2
    phi_e = 0.5 * np.einsum("ij,ij->i", ve, ve) - 6.969290134e-10 * c2
    expected = vessot_shift(xs, vs, phi_s, xe, ve, phi_e, ae)
    assert np.abs(y - expected).max() < 2e-14, np.abs(y - expected).max()


def test_tidal_term_size(ctx):
    """The Sun's and Moon's tidal term at GNSS radius: at most 8.5e-16 (Moon) + 3.3e-16 (Sun) in rate
    (recomputed in stages/physics/clock_rates.py from DE421 GM values; IERS TN36 ch. 10)."""
    sod = np.linspace(0, 86400, 49)
    res = ClockRate().apply(_table("CIRC", "GEOID", "time_offset", sod), {**PARAMS, "tidal": True}, ctx).columns
    tidal = np.asarray(res["remote_rate_tidal"])
    assert np.isfinite(tidal).all() and 1e-17 < np.abs(tidal).max() < 8.5e-16 + 3.3e-16
    off = ClockRate().apply(_table("CIRC", "GEOID", "time_offset", sod), PARAMS, ctx).columns
    assert np.isnan(np.asarray(off["remote_rate_tidal"])).all()


def test_accumulated_time_per_term_adds_up_and_matches_the_published_split(ctx, tmp_path):
    """Per-term accumulated times: for the circular orbit at 26 561.75 km, +45.79 us/day gravitational
    and -7.21 us/day velocity (references sheet, recomputed from IERS 2010 constants); the terms add up
    to the total (secular + periodic) for element and state-table orbits alike."""
    res = ClockRate().apply(_table("CIRC", "GEOID", "time_offset", [86400.0]), PARAMS, ctx).columns
    grav = np.asarray(res["remote_offset_gravitational_s"])[0]
    vel = np.asarray(res["remote_offset_velocity_s"])[0]
    assert grav == pytest.approx(45.79e-6, rel=3e-4, abs=0) and vel == pytest.approx(-7.21e-6, rel=1e-3, abs=0)
    a = 5153.8**2
    _write_states(tmp_path / "wren.parquet", a, 0.01)
    (tmp_path / "clocks.toml").write_text(CATALOGUE.format(a_ecc=a) + '[clocks.WREN-CS]\nkind = "orbiting"\n'
                                          'states = "wren.parquet"\nstates_target = "WREN"\n')
    (tmp_path / "stations.toml").write_text(STATIONS)
    ctx2 = StageContext("clock", {}, base_dir=str(tmp_path))
    for clock, tol in (("ECC", 1e-15), ("WREN-CS", 1e-13)):
        c = ClockRate().apply(_table(clock, "GEOID", "time_offset", [3000.0, 60000.0, 140000.0]), PARAMS, ctx2).columns
        parts = sum(np.asarray(c[k]) for k in ("remote_offset_gravitational_s", "remote_offset_j2_s", "remote_offset_velocity_s"))
        total = np.asarray(c["remote_offset_secular_s"]) + np.asarray(c["remote_offset_periodic_s"])
        # element orbits keep only the orbit-mean J2 in both; state tables integrate everything
        assert np.abs(parts - total).max() < tol, (clock, np.abs(parts - total).max())
