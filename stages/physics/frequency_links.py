"""Frequency comparison of an orbiting clock with a ground clock through a two-way link.

Scheme: the orbiting clock S sends its frequency down to the ground station
E; at the same time E sends its own frequency up, S transponds it coherently
and E receives it back.  Subtracting half the fractional shift of the loop
from the fractional shift of the downlink cancels the first-order Doppler
effect; what is left is the relativistic shift of S against E plus what the
cancellation leaves of the motion.

Computed here exactly to O(c^-2) in a local inertial frame (the GCRS), from
the ratio of frequencies along one leg (emitter e at t_e, receiver r at t_r):

    f_r / f_e = [dtau_e/dt](t_e) / [dtau_r/dt](t_r) * (1 - n.v_r/c) / (1 - n.v_e/c),    (1)

n the unit vector from the emitter's position at t_e to the receiver's at t_r
(special-relativistic Doppler written in coordinate time; gravitational
frequency shift through the clocks' rates dtau/dt = 1 + L_G - (v^2/2 + U)/c^2,
IERS TN36 sec. 10.2).  The observable is

    y = (f_S,down / f_E - 1) - (f_E,loop / f_E - 1) / 2,                        (2)

for clocks of equal proper frequency, so y is the prediction of the
relativistic part of the comparison.  The closed form of Vessot et al. 1980
(PRL 45, 2081, eq. 1; from memory),

    y = (phi_S - phi_E)/c^2 - |v_S - v_E|^2/(2 c^2) - r_SE.a_E/c^2,

(phi = -U the Newtonian potential, a_E the station's acceleration) is the
same to O(c^-2) when r_SE is the station's position relative to the
spacecraft, x_E - x_S: with the opposite reading the two differ by
2 r.a_E/c^2 (~5e-12 for a ground station), which the tests show.  The tests
check (1)-(2) against it to 1e-14 (what remains is O(c^-3)).
"""
from __future__ import annotations

from typing import Callable

import numpy as np

from stages.physics.constants import C_M_PER_S

StateFn = Callable[[np.ndarray], tuple]   # t (s) -> (pos (n,3) m, vel (n,3) m/s, rate (n,) dtau/dt - 1)


def _emission_time(t_r, x_r, emitter: StateFn, iterations: int = 4):
    """Emission time t_e with |x_r - x_e(t_e)| = c (t_r - t_e) (fixed point; 4 passes: < 1e-15 s near the Earth)."""
    t_e = t_r.copy()
    for _ in range(iterations):
        x_e = emitter(t_e)[0]
        t_e = t_r - np.linalg.norm(x_r - x_e, axis=1) / C_M_PER_S
    return t_e


def leg_ratio(t_e, t_r, emitter: StateFn, receiver: StateFn, clock_rates: bool = True):
    """f_r / f_e for a signal emitted at t_e and received at t_r, eq. (1)."""
    x_e, v_e, rate_e = emitter(t_e)
    x_r, v_r, rate_r = receiver(t_r)
    n = x_r - x_e
    n = n / np.linalg.norm(n, axis=1)[:, None]
    doppler = (1.0 - np.einsum("ij,ij->i", n, v_r) / C_M_PER_S) / (1.0 - np.einsum("ij,ij->i", n, v_e) / C_M_PER_S)
    if not clock_rates:
        return doppler
    return (1.0 + rate_e) / (1.0 + rate_r) * doppler


def two_way_shift(t_s, satellite: StateFn, ground: StateFn) -> np.ndarray:
    """Predicted y of eq. (2) for comparisons received at the ground at ``t_s``.

    Downlink S -> E emitted at t2; the loop's uplink leaves E at t1 and is
    transponded by S at the same t2 (the downlink and the loop arrive together).
    """
    t_s = np.asarray(t_s, dtype=float)
    x_g = ground(t_s)[0]
    t2 = _emission_time(t_s, x_g, satellite)
    x_s2 = satellite(t2)[0]
    t1 = _emission_time(t2, x_s2, ground)
    down = leg_ratio(t2, t_s, satellite, ground)
    # a coherent transponder re-emits what it receives: its own clock drops out of the loop
    loop = (leg_ratio(t1, t2, ground, satellite, clock_rates=False)
            * leg_ratio(t2, t_s, satellite, ground, clock_rates=False)
            * (1.0 + ground(t1)[2]) / (1.0 + ground(t_s)[2]))
    return (down - 1.0) - 0.5 * (loop - 1.0)


def vessot_shift(x_s, v_s, phi_s, x_e, v_e, phi_e, a_e) -> np.ndarray:
    """The closed form of Vessot et al. 1980 (eq. 1, from memory), all at the same instant,
    with r_SE = x_E - x_S (see the module docstring)."""
    dv = v_s - v_e
    return ((phi_s - phi_e) - 0.5 * np.einsum("ij,ij->i", dv, dv)
            - np.einsum("ij,ij->i", x_e - x_s, a_e)) / C_M_PER_S**2
