"""Gridded planetary states against the exact Chebyshev evaluation of the same DE421 file.

Reference: jplephem's evaluation of the SPK segments (PlanetaryEphemeris.posvel_m, itself checked
against astropy in tests/test_ephemeris.py).  Bound: the cubic Hermite remainder h^4/384 max|p''''|
(Burden & Faires, Numerical Analysis, sec. 3.4); the tolerances below are that bound with the
largest fourth derivatives of the bodies' motions (lunar month for the Earth and Moon), rounded up.
"""
from __future__ import annotations

import numpy as np
import pytest

from stages.physics.ephemeris import load_planetary_ephemeris
from stages.physics.ephemeris_grid import GriddedEphemeris

# (body, position tolerance m, velocity tolerance m/s) for h = 900 s.  Beyond the Hermite bound
# (the Moon's ~6e-5 m), a position is only good to a couple of float64 ulps of its own size
# (2.4e-4 m for Saturn at 1.4e12 m), on both sides.
STEP_S = 900.0
CASES = [("sun", 1e-6, 1e-9), ("earth", 1e-4, 2e-7), ("moon", 2e-4, 5e-7), ("jupiter", 5e-4, 1e-6),
         ("saturn", 1e-3, 1e-6), ("venus", 1e-4, 2e-7), ("mars", 2e-4, 2e-7)]


@pytest.mark.parametrize("body, tol_m, tol_v", CASES)
def test_gridded_states_agree_with_exact(body, tol_m, tol_v):
    eph = load_planetary_ephemeris()
    grid = GriddedEphemeris(eph, STEP_S)
    rng = np.random.default_rng(11)
    mjd = rng.integers(40000, 70000, 20000)
    sod = rng.uniform(0, 86400, 20000)
    p, v = grid.posvel_m(body, mjd, sod)
    pe, ve = eph.posvel_m(body, mjd, sod)
    assert np.abs(p - pe).max() < tol_m, np.abs(p - pe).max()
    assert np.abs(v - ve).max() < tol_v, np.abs(v - ve).max()


def test_nodes_are_exact_and_batches_do_not_matter():
    eph = load_planetary_ephemeris()
    grid = GriddedEphemeris(eph, STEP_S)
    mjd = np.array([60000, 60000, 60001])
    sod = np.array([0.0, 900.0, 85500.0])
    p, _ = grid.posvel_m("earth", mjd, sod)
    pe, _ = eph.posvel_m("earth", mjd, sod)
    assert np.abs(p - pe).max() < 1e-9
    rng = np.random.default_rng(3)
    m = rng.integers(59000, 59010, 3000)
    s = rng.uniform(0, 86400, 3000)
    whole, _ = grid.posvel_m("moon", m, s)
    parts = np.concatenate([grid.posvel_m("moon", m[a:b], s[a:b])[0] for a, b in ((0, 7), (7, 1500), (1500, 3000))])
    assert np.array_equal(whole, parts)


def test_outside_span_is_nan_and_bad_steps_refused():
    grid = GriddedEphemeris(load_planetary_ephemeris(), STEP_S)
    p, v = grid.posvel_m("sun", np.array([10000, 60000]), np.array([0.0, np.nan]))
    assert np.isnan(p).all() and np.isnan(v).all()
    with pytest.raises(ValueError):
        GriddedEphemeris(load_planetary_ephemeris(), 7000.0)


def test_displacement_is_the_integral_of_the_interpolated_velocity():
    # The Hermite cubic's velocity is a quadratic, which Simpson's rule integrates exactly (Abramowitz &
    # Stegun 25.4.5): over a span inside one grid interval, p(b) - p(a) = (b - a)(v_a + 4 v_m + v_b)/6.
    # displacement_m forms it relative to the nodes (to ~1e-9 m); the difference of the two absolute
    # positions carries their float64 rounding (ulp 3e-5 m at 1 au) -- measured for comparison.
    from stages.physics.ephemeris_grid import load_gridded_ephemeris

    g = load_gridded_ephemeris()
    rng = np.random.default_rng(5)
    n = 2000
    mjd = np.full(n, 60481)
    sod_a = np.floor(rng.uniform(0, 86000, n) / 900.0) * 900.0 + rng.uniform(0, 800, n)
    sod_b = sod_a + rng.uniform(1, 900 - (sod_a % 900.0))  # same interval
    for body in ("earth", "sun", "moon"):
        d = g.displacement_m(body, mjd, sod_a, mjd, sod_b)
        va, vm, vb = (g.posvel_m(body, mjd, t)[1] for t in (sod_a, 0.5 * (sod_a + sod_b), sod_b))
        simpson = (sod_b - sod_a)[:, None] * (va + 4 * vm + vb) / 6
        plain = g.posvel_m(body, mjd, sod_b)[0] - g.posvel_m(body, mjd, sod_a)[0]
        err, err_plain = np.abs(d - simpson).max(), np.abs(plain - simpson).max()
        print(body, "node-relative", err, "plain difference", err_plain)
        assert err < 1e-7
        if body != "sun":  # the Sun is within ~1e9 m of the barycentre: its positions round finely
            assert err_plain > 10 * err
