"""Spacecraft state tables and their cubic Hermite interpolation.

The reference trajectory is a two-body (Keplerian) orbit computed
analytically here: Kepler's equation E - e sin E = M solved by Newton
iteration, perifocal position a(cos E - e), b sin E and velocity
sqrt(mu a)/r (-sin E, sqrt(1-e^2) cos E), rotated to inertial axes by
R3(-Omega) R1(-i) R3(-omega) (common practice; e.g. Curtis, "Orbital
Mechanics for Engineering Students", ch. 3-4).
"""
from __future__ import annotations

import hashlib

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from stages.physics.ephemeris import de421_path, load_planetary_ephemeris
from stages.physics.spacecraft_ephemeris import (
    STATUS_OK,
    STATUS_OUTSIDE_COVERAGE,
    STATUS_UNKNOWN_TARGET,
    load_state_table,
    target_posvel_bcrs_m,
)

AU_M = 149_597_870_700.0  # IAU 2012 Resolution B2 (au in metres)
GM_SUN = 1.32712440041e20  # IERS TN36 Table 1.1, TDB-compatible
GM_EARTH = 3.986004415e14  # IERS TN36 Table 1.1, TT-compatible
EPOCH_MJD = 60000  # table epochs start here (TDB), 2023-02-25


# ---------------------------------------------------------------------------
# analytic two-body orbit
# ---------------------------------------------------------------------------
def _rot(a_rad: float, axis: int) -> np.ndarray:
    c, s = np.cos(a_rad), np.sin(a_rad)
    if axis == 3:
        return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


class Kepler:
    def __init__(self, mu, a_m, e, inc_deg, raan_deg, argp_deg, t_peri_s):
        self.mu, self.a, self.e, self.t_peri = mu, a_m, e, t_peri_s
        self.n = np.sqrt(mu / a_m**3)  # mean motion (Kepler's third law)
        # perifocal -> inertial: R3(-Omega) R1(-i) R3(-omega) written as active rotations
        self.q = _rot(np.radians(raan_deg), 3) @ _rot(np.radians(inc_deg), 1) @ _rot(np.radians(argp_deg), 3)

    def state(self, t_s):
        """Position (n,3) m and velocity (n,3) m/s at t_s seconds after the table epoch."""
        t_s = np.asarray(t_s, dtype=np.float64)
        m = self.n * (t_s - self.t_peri)
        e = self.e
        ea = m + e * np.sin(m)
        for _ in range(60):  # Newton on Kepler's equation (loop over iterations)
            ea = ea - (ea - e * np.sin(ea) - m) / (1.0 - e * np.cos(ea))
        b = self.a * np.sqrt(1.0 - e * e)
        r = self.a * (1.0 - e * np.cos(ea))
        pf = np.stack([self.a * (np.cos(ea) - e), b * np.sin(ea), np.zeros_like(ea)], axis=1)
        k = np.sqrt(self.mu * self.a) / r
        vf = np.stack([-k * np.sin(ea), k * np.sqrt(1.0 - e * e) * np.cos(ea), np.zeros_like(ea)], axis=1)
        return pf @ self.q.T, vf @ self.q.T

    def fourth_derivative(self, t_s):
        """x'''' (n,3) for two-body motion: with u = mu/r^3, x'' = -u x, so
        x'''' = (u^2 - u'') x - 2 u' x',  u' = -3 mu r^-4 rdot,
        u'' = 12 mu r^-5 rdot^2 - 3 mu r^-4 rddot,  rdot = r.v/r,
        rddot = (v^2 - mu/r - rdot^2)/r   (differentiation of Newton's law)."""
        x, v = self.state(t_s)
        r = np.linalg.norm(x, axis=1)
        rdot = np.einsum("ij,ij->i", x, v) / r
        rddot = (np.einsum("ij,ij->i", v, v) - self.mu / r - rdot**2) / r
        u = self.mu / r**3
        du = -3.0 * self.mu * rdot / r**4
        ddu = 12.0 * self.mu * rdot**2 / r**5 - 3.0 * self.mu * rddot / r**4
        return (u * u - ddu)[:, None] * x - 2.0 * du[:, None] * v


def _two_part(t_s):
    """Seconds after EPOCH_MJD 0h -> (int32 MJD, sod); t_s multiples of small
    integers stay exact."""
    t_s = np.asarray(t_s, dtype=np.float64)
    day = np.floor(t_s / 86400.0)
    return (EPOCH_MJD + day).astype(np.int32), t_s - day * 86400.0


def _write_table(path, target, t_s, pos, vel, centre="sun", order=None, over=None):
    mjd, sod = _two_part(t_s)
    cols = {
        "target": pa.array([target] * len(sod), pa.string()),
        "tdb_mjd": pa.array(mjd, pa.int32()),
        "tdb_sod_s": pa.array(sod, pa.float64()),
        "x_m": pos[:, 0], "y_m": pos[:, 1], "z_m": pos[:, 2],
        "vx_m_per_s": vel[:, 0], "vy_m_per_s": vel[:, 1], "vz_m_per_s": vel[:, 2],
        "centre": pa.array([centre] * len(sod), pa.string()),
    }
    cols.update(over or {})
    table = pa.table(cols)
    if order is not None:
        table = table.take(pa.array(order))
    pq.write_table(table, path)
    return path


# two heliocentric test orbits, perihelion inside the tabulated span
CRUISE = Kepler(GM_SUN, 1.3 * AU_M, 0.25, 23.0, 40.0, 70.0, t_peri_s=30 * 86400.0)
CLOSE = Kepler(GM_SUN, 0.1 * AU_M / (1 - 0.85), 0.85, 3.4, 80.0, 130.0, t_peri_s=5 * 86400.0)


@pytest.mark.parametrize(
    "orbit, span_days, step_s",
    [(CRUISE, 60, 3600.0), (CRUISE, 60, 21600.0), (CLOSE, 10, 3600.0), (CLOSE, 10, 21600.0)],
    ids=["cruise-1h", "cruise-6h", "perihelion-0.1au-1h", "perihelion-0.1au-6h"],
)
def test_hermite_error_within_bound(tmp_path, orbit, span_days, step_s):
    """Interpolation error vs the analytic orbit stays within the cubic
    Hermite remainder bounds: |dx| <= h^4/384 max|x''''| (Burden & Faires,
    Numerical Analysis, Thm 3.9, maximised at mid-interval) and
    |dv| <= sqrt(3)/216 h^3 max|x''''| (derivative of that remainder; the
    constant is the sharp one of Birkhoff & Priver 1967, from memory), plus
    float64 rounding of ~1e-15 of the position magnitude."""
    t_nodes = np.arange(0.0, span_days * 86400.0 + 1.0, step_s)
    pos, vel = orbit.state(t_nodes)
    path = _write_table(tmp_path / "orbit.parquet", "probe", t_nodes, pos, vel, centre="ssb")
    table = load_state_table(path)

    rng = np.random.default_rng(7)
    t_q = rng.uniform(0.0, t_nodes[-1], 20_000)
    mjd, sod = _two_part(t_q)
    p, v, status = table.posvel_bcrs_m("probe", mjd, sod, load_planetary_ephemeris(), max_gap_s=step_s)
    assert np.all(status == STATUS_OK)
    p_ref, v_ref = orbit.state(t_q)
    err_p = np.max(np.abs(p - p_ref), axis=0)  # per component
    err_v = np.max(np.abs(v - v_ref), axis=0)

    fine = np.linspace(0.0, t_nodes[-1], 200_001)  # 4 s spacing for the max of x''''
    d4 = np.max(np.abs(orbit.fourth_derivative(fine)), axis=0)
    r_max = np.max(np.linalg.norm(pos, axis=1))
    v_max = np.max(np.linalg.norm(vel, axis=1))
    bound_p = step_s**4 / 384.0 * d4 + 1e-15 * r_max
    bound_v = np.sqrt(3.0) / 216.0 * step_s**3 * d4 + 1e-15 * (r_max / step_s + v_max)
    assert np.all(err_p <= bound_p), (err_p, bound_p)
    assert np.all(err_v <= bound_v), (err_v, bound_v)


def test_fourth_derivative_formula():
    """Check the analytic x'''' of the test against a finite difference of the
    analytic orbit (central 5-point 4th difference, common practice)."""
    t = np.array([4.7, 5.0, 5.3]) * 86400.0
    hs = 600.0
    x = [CLOSE.state(t + k * hs)[0] for k in (-2, -1, 0, 1, 2)]
    fd = (x[0] - 4 * x[1] + 6 * x[2] - 4 * x[3] + x[4]) / hs**4
    an = CLOSE.fourth_derivative(t)
    np.testing.assert_allclose(fd, an, rtol=2e-3, atol=1e-3 * np.abs(an).max())


def test_error_scales_as_h4(tmp_path):
    """Halving the step divides the position error by ~16 (h^4 of the
    Hermite remainder, Burden & Faires Thm 3.9)."""
    errs = []
    rng = np.random.default_rng(3)
    t_q = rng.uniform(0.0, 10 * 86400.0, 20_000)
    p_ref, _ = CLOSE.state(t_q)
    for step_s in (21600.0, 10800.0):
        t_nodes = np.arange(0.0, 10 * 86400.0 + 1.0, step_s)
        pos, vel = CLOSE.state(t_nodes)
        table = load_state_table(_write_table(tmp_path / f"h{int(step_s)}.parquet", "p", t_nodes, pos, vel, "ssb"))
        p, _, _ = table.posvel_centre_m("p", *_two_part(t_q), max_gap_s=step_s)
        errs.append(np.max(np.linalg.norm(p - p_ref, axis=1)))
    assert 10.0 < errs[0] / errs[1] < 22.0, errs


def test_polynomial_reproduced_far_from_first_epoch(tmp_path):
    """A cubic trajectory is reproduced exactly by cubic Hermite (uniqueness of
    the Hermite polynomial, Burden & Faires Thm 3.9) -- here 80 years after
    the target's first epoch, where single-float seconds would round at
    ~5e-7 s (1.5 cm at 30 km/s); the time differences are two-part."""
    ref_mjd = 69000  # 2047-07-02
    c0 = np.array([1.2e11, -8.5e10, 3.1e10])
    c1 = np.array([2.9e4, 1.1e4, -4.4e3])
    c2 = np.array([3.0e-3, -2.0e-3, 1.0e-3])
    c3 = np.array([1.0e-9, 2.0e-9, -3.0e-9])

    def state(mjd, sod):
        tau = (np.asarray(mjd, np.int64) - ref_mjd).astype(np.float64)[:, None] * 86400.0 + np.asarray(sod)[:, None]
        return c0 + tau * (c1 + tau * (c2 + tau * c3)), c1 + tau * (2 * c2 + tau * 3 * c3)

    node_mjd = np.concatenate([[39800], np.full(24, ref_mjd)]).astype(np.int32)  # 1967 node, then hourly
    node_sod = np.concatenate([[0.0], np.arange(24) * 3600.0 + 0.25])
    pos, vel = state(node_mjd, node_sod)
    table = pa.table({
        "target": ["lander"] * 25, "tdb_mjd": pa.array(node_mjd, pa.int32()), "tdb_sod_s": node_sod,
        "x_m": pos[:, 0], "y_m": pos[:, 1], "z_m": pos[:, 2],
        "vx_m_per_s": vel[:, 0], "vy_m_per_s": vel[:, 1], "vz_m_per_s": vel[:, 2], "centre": ["ssb"] * 25,
    })
    pq.write_table(table, tmp_path / "cubic.parquet")
    st = load_state_table(tmp_path / "cubic.parquet")
    rng = np.random.default_rng(11)
    q_sod = rng.uniform(0.25, 23 * 3600.0 + 0.25, 5000)
    q_mjd = np.full(q_sod.size, ref_mjd, dtype=np.int32)
    p, v, status = st.posvel_centre_m("lander", q_mjd, q_sod, max_gap_s=3601.0)
    assert np.all(status == STATUS_OK)
    p_ref, v_ref = state(q_mjd, q_sod)
    assert np.max(np.abs(p - p_ref)) < 1e-4  # float64 rounding at 1.2e11 m is ~2e-5 m
    assert np.max(np.abs(v - v_ref)) < 1e-8


def _astropy_body_posvel_m(body, mjd, sod):
    """Independent reference for the centre body (astropy on the same DE421 file)."""
    import astropy.units as u
    from astropy.coordinates import get_body_barycentric_posvel
    from astropy.time import Time

    t = Time(mjd.astype(np.float64) + 2400000.5, sod / 86400.0, format="jd", scale="tdb")
    p, v = get_body_barycentric_posvel(body, t, ephemeris=str(de421_path()))
    return p.xyz.to_value(u.m).T, v.xyz.to_value(u.m / u.s).T


@pytest.mark.parametrize(
    "centre, orbit, step_s",
    [
        ("earth", Kepler(GM_EARTH, 42_164e3, 0.1, 10.0, 30.0, 50.0, t_peri_s=3600.0), 30.0),
        ("sun", CRUISE, 3600.0),
    ],
)
def test_centre_body_added(tmp_path, centre, orbit, step_s):
    """Barycentric = interpolated state relative to the centre + the centre's
    barycentric state (astropy get_body_barycentric_posvel, same DE421 file).
    Steps chosen so the Hermite bound is < 0.1 mm and < 1e-7 m/s."""
    t_nodes = np.arange(0.0, 2 * 86400.0 + 1.0, step_s)
    pos, vel = orbit.state(t_nodes)
    table = load_state_table(_write_table(tmp_path / "c.parquet", "sat", t_nodes, pos, vel, centre=centre))
    rng = np.random.default_rng(5)
    t_q = rng.uniform(0.0, t_nodes[-1], 3000)
    mjd, sod = _two_part(t_q)
    p, v, status = table.posvel_bcrs_m("sat", mjd, sod, load_planetary_ephemeris(), max_gap_s=step_s)
    assert np.all(status == STATUS_OK)
    pc, vc = _astropy_body_posvel_m(centre, mjd, sod)
    p_rel, v_rel = orbit.state(t_q)
    assert np.max(np.abs(p - (pc + p_rel))) < 1e-3
    assert np.max(np.abs(v - (vc + v_rel))) < 1e-6


def _small_table(tmp_path, epochs_s, name="gaps.parquet", order=None, over=None):
    t = np.asarray(epochs_s, dtype=np.float64)
    pos = np.stack([1e11 + 10.0 * t, 2e10 - 3.0 * t, 5e9 + 0.5 * t], axis=1)
    vel = np.tile([10.0, -3.0, 0.5], (t.size, 1))
    return _write_table(tmp_path / name, "probe", t, pos, vel, centre="ssb", order=order, over=over), pos, vel


def test_coverage_and_gap_status(tmp_path):
    """Status codes and NaN rows as specified in the module docstring
    (relcorr's own contract): 1 outside coverage, 2 in a gap, 0 on any node."""
    h = 3600.0
    epochs = [0.0, h, 2 * h, 10 * h, 11 * h, 86400.0 + 100.0]  # gap 2h..10h; last crosses midnight
    path, pos, vel = _small_table(tmp_path, epochs)
    st = load_state_table(path)
    eph = load_planetary_ephemeris()
    q = np.array([-1.0, 0.0, 1.5 * h, 2 * h, 5 * h, 10 * h, 10.5 * h, 86400.0 + 100.0, 86400.0 + 101.0, np.nan])
    mjd, sod = _two_part(np.nan_to_num(q, nan=0.0))
    sod[-1] = np.nan
    p, v, status = st.posvel_bcrs_m("probe", mjd, sod, eph, max_gap_s=7200.0)
    # the gap interval 11h .. 1d+100s is also wider than 2 h
    np.testing.assert_array_equal(status, [1, 0, 0, 0, 2, 0, 0, 0, 1, 1])
    assert np.all(np.isnan(p[status != 0])) and np.all(np.isnan(v[status != 0]))
    assert np.all(np.isfinite(p[status == 0]))
    # on a node the tabulated state comes back exactly (Hermite basis at s = 0, 1)
    np.testing.assert_array_equal(p[[1, 3, 5, 7]], pos[[0, 2, 3, 5]])
    np.testing.assert_array_equal(v[[1, 3, 5, 7]], vel[[0, 2, 3, 5]])
    # linear motion is reproduced (a line is a cubic), across midnight too
    _, _, st2 = st.posvel_bcrs_m("probe", mjd, sod, eph, max_gap_s=80000.0)
    np.testing.assert_array_equal(st2, [1, 0, 0, 0, 0, 0, 0, 0, 1, 1])
    p2, _, _ = st.posvel_bcrs_m("probe", *_two_part([86000.0]), eph, max_gap_s=80000.0)
    np.testing.assert_allclose(p2[0], [1e11 + 860000.0, 2e10 - 258000.0, 5e9 + 43000.0], rtol=0, atol=1e-4)


def test_unknown_target_and_dispatch(tmp_path):
    """Unknown name -> status 3; a planetary body is served by the planetary
    ephemeris (reference: astropy on the same DE421 file)."""
    path, _, _ = _small_table(tmp_path, [0.0, 3600.0, 7200.0])
    st = load_state_table(path)
    eph = load_planetary_ephemeris()
    mjd, sod = _two_part([100.0, 200.0])
    p, v, status = st.posvel_bcrs_m("voyager", mjd, sod, eph, max_gap_s=7200.0)
    assert np.all(status == STATUS_UNKNOWN_TARGET) and np.all(np.isnan(p)) and np.all(np.isnan(v))
    p, v, status = target_posvel_bcrs_m("voyager", mjd, sod, eph, 7200.0, states=st)
    assert np.all(status == STATUS_UNKNOWN_TARGET) and p.shape == (2, 3)
    p, v, status = target_posvel_bcrs_m("probe", mjd, sod, eph, 7200.0, states=st)
    assert np.all(status == STATUS_OK)
    p, v, status = target_posvel_bcrs_m("mars", mjd, sod, eph, 7200.0, states=st)
    assert np.all(status == STATUS_OK)
    p_ref, v_ref = _astropy_body_posvel_m([(0, 4), (4, 499)], mjd, sod)
    assert np.max(np.abs(p - p_ref)) < 1e-3 and np.max(np.abs(v - v_ref)) < 1e-6
    # outside DE421 (ends 2053-10-09 = MJD 71184, file segment descriptors)
    p, _, status = target_posvel_bcrs_m("jupiter", np.array([71185]), np.array([0.0]), eph, 7200.0)
    assert status[0] == STATUS_OUTSIDE_COVERAGE and np.all(np.isnan(p))


def test_centre_outside_planetary_span(tmp_path):
    """A table centred on a body, queried beyond DE421's span: status 1."""
    mjd = np.array([71183, 71183, 71184, 71184, 71185], dtype=np.int32)
    sod = np.array([0.0, 43200.0, 0.0, 43200.0, 0.0])
    n = mjd.size
    table = pa.table({
        "target": ["s"] * n, "tdb_mjd": pa.array(mjd, pa.int32()), "tdb_sod_s": sod,
        "x_m": np.full(n, 7e6), "y_m": np.zeros(n), "z_m": np.zeros(n),
        "vx_m_per_s": np.zeros(n), "vy_m_per_s": np.zeros(n), "vz_m_per_s": np.zeros(n), "centre": ["earth"] * n,
    })
    pq.write_table(table, tmp_path / "late.parquet")
    st = load_state_table(tmp_path / "late.parquet")
    p, _, status = st.posvel_bcrs_m("s", mjd, sod, load_planetary_ephemeris(), max_gap_s=86400.0)
    np.testing.assert_array_equal(status, [0, 0, 0, 1, 1])
    assert np.all(np.isnan(p[3:])) and np.all(np.isfinite(p[:3]))


def test_unsorted_rows_are_sorted_and_identity(tmp_path):
    """Rows in any order give the same table; identity = file name + sha256
    (recomputed with hashlib)."""
    epochs = np.arange(0.0, 10 * 3600.0 + 1.0, 3600.0)
    path_a, _, _ = _small_table(tmp_path, epochs, name="a.parquet")
    order = np.random.default_rng(1).permutation(epochs.size)
    path_b, _, _ = _small_table(tmp_path, epochs, name="b.parquet", order=order)
    a, b = load_state_table(path_a), load_state_table(path_b)
    mjd, sod = _two_part(np.linspace(0.0, 36000.0, 101))
    pa_m, va_m_per_s, _ = a.posvel_centre_m("probe", mjd, sod, 3600.0)
    pb_m, vb_m_per_s, _ = b.posvel_centre_m("probe", mjd, sod, 3600.0)
    np.testing.assert_array_equal(pa_m, pb_m)
    np.testing.assert_array_equal(va_m_per_s, vb_m_per_s)
    assert b.identity["file"] == "b.parquet"
    assert b.identity["sha256"] == hashlib.sha256(path_b.read_bytes()).hexdigest()
    assert b.identity["rows"] == epochs.size


@pytest.mark.parametrize(
    "over, match",
    [
        ({"tdb_sod_s": pa.array([0.0, 3600.0, 3600.0])}, "duplicate epoch"),
        ({"x_m": pa.array([1.0, 2.0, 3.0], pa.float32())}, "'x_m' has type float, expected float64"),
        ({"tdb_mjd": pa.array([60000.0] * 3)}, "'tdb_mjd' has type double, expected int32"),
        ({"centre": pa.array(["ssb", "ssb", "pluto"])}, r"unknown centre\(s\) \['pluto'\]"),
        ({"centre": pa.array(["ssb", "ssb", "sun"])}, "several centres"),
        ({"tdb_sod_s": pa.array([0.0, 3600.0, 86400.0])}, r"\[0, 86400\)"),
        ({"y_m": pa.array([0.0, np.nan, 1.0])}, "non-finite"),
        ({"z_m": pa.array([0.0, None, 1.0], pa.float64())}, "null"),
    ],
)
def test_bad_tables_raise(tmp_path, over, match):
    path, _, _ = _small_table(tmp_path, [0.0, 3600.0, 7200.0], over=over)
    with pytest.raises(ValueError, match=match) as info:
        load_state_table(path)
    assert "gaps.parquet" in str(info.value)  # the message names the file


def test_missing_column_and_unreadable(tmp_path):
    path, _, _ = _small_table(tmp_path, [0.0, 3600.0])
    pq.write_table(pq.read_table(path).drop_columns(["vz_m_per_s"]), tmp_path / "m.parquet")
    with pytest.raises(ValueError, match=r"m\.parquet: missing column\(s\) \['vz_m_per_s'\]"):
        load_state_table(tmp_path / "m.parquet")
    (tmp_path / "junk.parquet").write_bytes(b"not parquet")
    with pytest.raises(ValueError, match="junk.parquet: cannot read as Parquet"):
        load_state_table(tmp_path / "junk.parquet")


def test_displacement_is_the_integral_of_the_interpolated_velocity():
    # Eq. (2)'s velocity is the derivative of the Hermite cubic (1): over a span inside one interval,
    # Simpson's rule of it gives p(b) - p(a) exactly (Abramowitz & Stegun 25.4.5), here at 2 au from the
    # barycentre where two absolute positions round to ~6e-5 m.  displacement_centre_m forms it from the
    # node differences; also across a node (the span then sums two intervals' Simpson integrals).
    from stages.physics.spacecraft_ephemeris import StateTable

    t = np.arange(0, 86400, 3600.0)
    r, w = 2 * 1.495978707e11, 2 * np.pi / (3.0 * 365.25 * 86400)
    pos = np.column_stack([r * np.cos(w * t), r * np.sin(w * t), 1e9 * np.sin(3 * w * t)])
    vel = np.column_stack([-r * w * np.sin(w * t), r * w * np.cos(w * t), 3e9 * w * np.cos(3 * w * t)])
    tab = StateTable.from_arrow(pa.table({
        "target": ["X"] * t.size, "tdb_mjd": pa.array(np.full(t.size, 60000), pa.int32()), "tdb_sod_s": t,
        "x_m": pos[:, 0], "y_m": pos[:, 1], "z_m": pos[:, 2],
        "vx_m_per_s": vel[:, 0], "vy_m_per_s": vel[:, 1], "vz_m_per_s": vel[:, 2], "centre": ["ssb"] * t.size}))
    m = np.full(3, 60000)
    a = np.array([100.0, 7000.0, 3590.0])
    b = np.array([160.0, 7060.0, 3650.0])   # the last span crosses the node at 3600 s
    d, status = tab.displacement_centre_m("X", m, a, m, b, 7200.0)
    assert (status == 0).all()

    def simpson(x, y):
        v = [tab.posvel_centre_m("X", m[:1], np.array([s]), 7200.0)[1][0] for s in (x, 0.5 * (x + y), y)]
        return (y - x) * (v[0] + 4 * v[1] + v[2]) / 6

    ref = np.array([simpson(a[0], b[0]), simpson(a[1], b[1]), simpson(a[2], 3600.0) + simpson(3600.0, b[2])])
    plain = tab.posvel_centre_m("X", m, b, 7200.0)[0] - tab.posvel_centre_m("X", m, a, 7200.0)[0]
    print("node-relative", np.abs(d - ref).max(), "plain", np.abs(plain - ref).max())
    # the h (H10 v0 + H11 v1) terms are ~1e8 m (ulp 1.5e-8 m): 1e-7 m is 5e-18 in a 60 s Doppler
    assert np.abs(d - ref).max() < 1e-7
    assert np.abs(plain - ref).max() > 100 * np.abs(d - ref).max()
