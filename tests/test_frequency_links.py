"""Two-way frequency links: the exact leg-by-leg computation (stages/physics/frequency_links.py,
eqs. 1-2) against the closed form of Vessot et al. 1980, PRL 45, 2081, eq. 1 (from memory):
y = (phi_S - phi_E)/c^2 - |v_S - v_E|^2/(2c^2) - r_SE.a_E/c^2, which holds to O(c^-2) with
r_SE = x_E - x_S.  The remaining difference is O(c^-3): (v/c)^3 ~ 1e-15."""
from __future__ import annotations

import numpy as np

from stages.physics import clock_rates as cr
from stages.physics.constants import C_M_PER_S, L_G
from stages.physics.frequency_links import two_way_shift, vessot_shift

GM = 3.986004415e14
C2 = C_M_PER_S**2
OMEGA = 7.2921151467e-5
X0 = np.array([6378137.0 * np.cos(0.3), 0.0, 6378137.0 * np.sin(0.3)])
ELEMENTS = (26561750.0, 0.01, np.radians(55.0), 0.3, 0.2, 1.0)


def ground(t):
    t = np.atleast_1d(np.asarray(t, float))
    a = OMEGA * t
    x = np.stack([X0[0] * np.cos(a), X0[0] * np.sin(a), np.full_like(t, X0[2])], 1)
    v = np.stack([-OMEGA * X0[0] * np.sin(a), OMEGA * X0[0] * np.cos(a), 0 * t], 1)
    return x, v, L_G - (0.5 * np.einsum("ij,ij->i", v, v) + GM / np.linalg.norm(x, axis=1)) / C2


def satellite(t):
    p, v, _ = cr.kepler_state(*ELEMENTS, 0.0, np.atleast_1d(np.asarray(t, float)))
    return p, v, L_G - (0.5 * np.einsum("ij,ij->i", v, v) + GM / np.linalg.norm(p, axis=1)) / C2


def _vessot(t):
    xs, vs, _ = satellite(t)
    xe, ve, _ = ground(t)
    ae = -OMEGA**2 * np.stack([xe[:, 0], xe[:, 1], 0 * xe[:, 0]], 1)   # centripetal, uniform rotation
    return vessot_shift(xs, vs, -GM / np.linalg.norm(xs, axis=1), xe, ve, -GM / np.linalg.norm(xe, axis=1), ae)


def test_exact_two_way_shift_matches_the_published_closed_form():
    t = np.linspace(0.0, 86400.0, 49)
    y = two_way_shift(t, satellite, ground)
    assert np.abs(y - _vessot(t)).max() < 1e-14
    assert 4.0e-10 < y.mean() < 4.7e-10   # the orbiting clock runs fast by ~4.4e-10 (references sheet)


def test_first_order_doppler_cancels_and_the_acceleration_term_matters():
    t = np.linspace(0.0, 86400.0, 49)
    from stages.physics.frequency_links import _emission_time, leg_ratio

    xg = ground(t)[0]
    t2 = _emission_time(t, xg, satellite)
    one_way = leg_ratio(t2, t, satellite, ground) - 1.0
    assert np.abs(one_way - two_way_shift(t, satellite, ground)).max() > 1e-6   # first-order Doppler ~1e-5
    # reading r_SE as x_S - x_E instead leaves a 2 r.a/c^2 difference (a few 1e-12 for a ground station)
    xs, vs, _ = satellite(t)
    xe, ve, _ = ground(t)
    ae = -OMEGA**2 * np.stack([xe[:, 0], xe[:, 1], 0 * xe[:, 0]], 1)
    wrong = _vessot(t) + 2 * np.einsum("ij,ij->i", xe - xs, ae) / C2
    assert np.abs(wrong - two_way_shift(t, satellite, ground)).max() > 1e-12
