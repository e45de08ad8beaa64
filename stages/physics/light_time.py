"""Relativistic light time between two ends of a radio link (vectorised).

All times are TDB, all positions and velocities barycentric (solar-system
barycentre, BCRS axes) in metres and metres per second.  A time is an integer
MJD day plus float64 seconds of day (see ``time_scales``); light times are
float64 seconds *relative to the reception time*, so the iteration never
subtracts two large epochs.

Light-time equation (one leg, transmitter "1" at t1, receiver "2" at t2),
in the standard deep-space formulation
(T. D. Moyer 2000, *Formulation for Observed and Computed Values of Deep
Space Network Data Types for Navigation*, JPL DESCANSO Monograph 2, section 8,
light-time solution; equation number 8-38 from memory)::

    tau = t2 - t1 = r12/c + sum_B (1+gamma) GM_B/c^3 *
          ln[(r1B + r2B + r12B + b_B) / (r1B + r2B - r12B + b_B)]        (1)

with ``b_B = (1+gamma) GM_B/c^2`` for the bending bodies (the Sun) and 0 for
the others.  Without ``b_B`` the logarithmic term is the form of the IERS
Conventions (2010), IERS TN36 eq. 11.17 (equation number from memory).

Choices made here (documented because they change the result at the ns level):

* ``r12`` in the *geometric* term is ``|r2(t2) - r1(t1)|`` between the
  barycentric end positions.
* The *relativistic* term of body B uses ``r1B = r1(t1) - rB(t1)``,
  ``r2B = r2(t2) - rB(t2)`` (B at each end's own time) and
  ``r12B = |r2B - r1B|``, the chord in B's own (co-moving) frame.  Then
  (r1B, r2B, r12B) are the sides of one triangle, so the log argument is
  >= 1 by the triangle inequality and cannot become invalid at grazing
  incidence.  It is also the chord in the body's rest frame: to first order
  in the body's velocity V the Lorentz transformation of positions is
  Galilean (x' = x - V t), so the static-field formula applies to exactly
  these r1B, r2B, |r2B - r1B|.  Using the barycentric chord ``r12`` instead
  changes the term by, to first order,
  ``(1+gamma) GM/c^3 * (r12 - r12B) * [1/(S + r12B) + 1/(S - r12B)]``
  with ``S = r1B + r2B``.  For the Sun (barycentric speed <= ~15 m/s, so
  |r12 - r12B| <= ~20 km over an Earth-Mars light time) this is 9.1 ns at the
  2021-10 Mars superior conjunction (impact parameter 2.44 solar radii,
  DE421; ``tests/test_light_time.py::test_de421_mars_conjunction``) and, by
  the same formula, up to ~70 ns for a ray grazing the limb.

Cancellation in ``r1 + r2 - r12`` (grazing rays, nearly collinear ends): the
identity ``(r1 + r2)^2 - r12^2 = 2 (r1 r2 + r1.r2)`` (law of cosines, with
``r12 = |r2 - r1|`` as vectors) gives ::

    r1 + r2 - r12 = 2 (r1 r2 + r1.r2) / (r1 + r2 + r12)                    (2)

and, when ``r1.r2 < 0`` (the body lies between the ends, where the
cancellation happens), ``r1 r2 + r1.r2 = |r1 x r2|^2 / (r1 r2 - r1.r2)``
(Lagrange's identity), a sum of positive terms.  Forming ``(r1+r2)^2 - r12^2``
from the three *scalar* lengths would not help (it cancels exactly as badly as
``r1 + r2 - r12``), so the cancellation-free form needs the vectors
(``sum_minus_chord_m``).  In double precision the direct difference is good to
~1e-11 relative for a ray grazing the Sun at 1 AU, but it loses all digits
(and can turn zero or negative, giving inf/NaN) for rays passing within
~1 km of a body's centre or for ends nearly collinear with a body; the
vector form keeps the relative precision of the input positions.

Solver: Newton iteration on ``f(tau) = tau - r12(tau)/c - sum_B S_B(tau) = 0``
with ``f'(tau) = 1 - n12 . v1 / c`` (``n12`` the unit vector from transmitter
to receiver, ``v1`` the transmitter's barycentric velocity; the derivative of
the ~1e-4 s relativistic term is neglected, which costs at most one extra
iteration).  This converges quadratically: 2-4 evaluations of the transmitter
state for a deep-space leg.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from . import constants as K
from .time_scales import add_seconds

__all__ = [
    "STATUS_OK",
    "STATUS_NOT_CONVERGED",
    "STATUS_INVALID",
    "DEFAULT_BODIES",
    "DEFAULT_BENDING_BODIES",
    "sum_minus_chord_m",
    "shapiro_delay_s",
    "shapiro_delay_vec_s",
    "shapiro_dgamma_vec_s",
    "LinearisedBodyStates",
    "LegSolution",
    "RoundTripSolution",
    "solve_leg",
    "one_way_light_time",
    "two_way_light_time",
    "three_way_light_time",
]

STATUS_OK = 0
STATUS_NOT_CONVERGED = 1
STATUS_INVALID = 2  # invalid geometry, non-positive light time or NaN input

DEFAULT_BODIES = ("sun", "jupiter", "saturn", "earth")
DEFAULT_BENDING_BODIES = ("sun",)

_C = K.C_M_PER_S
_EPS = np.finfo(np.float64).eps

StateFn = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]
BodyStateFn = Callable[[str, np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]


# ---------------------------------------------------------------------------
# relativistic term of one body
# ---------------------------------------------------------------------------
def _dot(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.einsum("...i,...i->...", a, b)


def _norm(a: np.ndarray) -> np.ndarray:
    return np.sqrt(_dot(a, a))


def _cross2(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """|a x b|^2, component-wise (faster than np.cross for (n, 3) arrays)."""
    a0, a1, a2 = a[..., 0], a[..., 1], a[..., 2]
    b0, b1, b2 = b[..., 0], b[..., 1], b[..., 2]
    x = a1 * b2 - a2 * b1
    y = a2 * b0 - a0 * b2
    z = a0 * b1 - a1 * b0
    return x * x + y * y + z * z


def _lengths(a: np.ndarray, b: np.ndarray):
    """(r1, r2, r12, r1 + r2 - r12) for end vectors a, b; the last by eq. (2)."""
    r1 = _norm(a)
    r2 = _norm(b)
    r12 = _norm(b - a)
    dot = _dot(a, b)
    prod = r1 * r2
    with np.errstate(divide="ignore", invalid="ignore"):
        # both branches are sums of non-negative terms on their own domain
        half = np.where(dot >= 0.0, prod + dot, _cross2(a, b) / (prod - dot))
        return r1, r2, r12, 2.0 * half / (r1 + r2 + r12)


def sum_minus_chord_m(r1_vec_m, r2_vec_m) -> np.ndarray:
    """``r1 + r2 - |r2 - r1|`` for body-centred end vectors, without cancellation.

    Eq. (2) of the module docstring: ``2 (r1 r2 + r1.r2) / (r1 + r2 + r12)``,
    with ``r1 r2 + r1.r2 = |r1 x r2|^2 / (r1 r2 - r1.r2)`` where ``r1.r2 < 0``.
    Arrays of shape (..., 3); returns shape (...).  Always >= 0 for finite
    input (0 only when the body lies exactly on the segment).
    """
    a = np.asarray(r1_vec_m, dtype=np.float64)
    b = np.asarray(r2_vec_m, dtype=np.float64)
    return _lengths(a, b)[3]


def shapiro_delay_s(
    r1_m,
    r2_m,
    r12_m,
    gm_m3_per_s2: float,
    gamma: float = 1.0,
    bending: bool = False,
    *,
    r1_plus_r2_minus_r12_m=None,
) -> np.ndarray:
    """One-way relativistic light-time term of one body, seconds.

    ``(1+gamma) GM/c^3 ln[(r1 + r2 + r12 + b)/(r1 + r2 - r12 + b)]`` with
    ``b = (1+gamma) GM/c^2`` if ``bending`` (Sun only) else 0 -- eq. (1) of
    the module docstring (Moyer 2000, DESCANSO Monograph 2, section 8, eq. 8-38
    from memory; IERS TN36 eq. 11.17 without ``b``).

    ``r1_m``, ``r2_m`` are the ends' distances from the body and ``r12_m`` the
    chord length (broadcastable arrays).  From three scalar lengths the
    denominator can only be formed as ``r1 + r2 - r12``; pass the
    cancellation-free value from the end *vectors* as ``r1_plus_r2_minus_r12_m``
    (see :func:`sum_minus_chord_m` and eq. (2)) for grazing or nearly
    collinear geometry, or use :func:`shapiro_delay_vec_s`.  Invalid geometry
    (log argument <= 0 or not finite) gives NaN or inf, never an exception.
    """
    r1 = np.asarray(r1_m, dtype=np.float64)
    r2 = np.asarray(r2_m, dtype=np.float64)
    r12 = np.asarray(r12_m, dtype=np.float64)
    k = (1.0 + gamma) * gm_m3_per_s2
    bend = k / _C**2 if bending else 0.0
    if r1_plus_r2_minus_r12_m is None:
        den = (r1 + r2) - r12  # exact subtraction (Sterbenz) when r12 >= (r1+r2)/2
    else:
        den = np.asarray(r1_plus_r2_minus_r12_m, dtype=np.float64)
    num = r1 + r2 + r12 + bend
    with np.errstate(divide="ignore", invalid="ignore"):
        return (k / _C**3) * np.log(num / (den + bend))


def shapiro_delay_vec_s(
    r1_vec_m, r2_vec_m, gm_m3_per_s2: float, gamma: float = 1.0, bending: bool = False
) -> np.ndarray:
    """:func:`shapiro_delay_s` from body-centred end vectors (..., 3).

    ``r12 = |r2 - r1|`` (the chord in the body's frame) and the denominator
    from eq. (2), so grazing rays keep full precision.
    """
    a = np.asarray(r1_vec_m, dtype=np.float64)
    b = np.asarray(r2_vec_m, dtype=np.float64)
    r1, r2, r12, den = _lengths(a, b)
    return shapiro_delay_s(r1, r2, r12, gm_m3_per_s2, gamma, bending, r1_plus_r2_minus_r12_m=den)


def shapiro_dgamma_vec_s(
    r1_vec_m, r2_vec_m, gm_m3_per_s2: float, gamma: float = 1.0, bending: bool = False
) -> np.ndarray:
    """Partial derivative of :func:`shapiro_delay_vec_s` with respect to PPN gamma, seconds.

    Differentiating eq. (1) with ``k = (1+gamma) GM``, ``N = r1 + r2 + r12 + b``,
    ``D = r1 + r2 - r12 + b`` and ``b = k/c^2`` (bending) or 0::

        dS/dgamma = GM/c^3 ln(N/D) + (k/c^3) (GM/c^2) (1/N - 1/D)
                  = S/(1+gamma) - 2 k GM r12 / (c^5 N D)                   (3)

    (the second term only with ``bending``; N - D = 2 r12).  It is the
    partial used to estimate gamma from range and Doppler residuals; it is
    checked against a central difference in gamma in the tests.
    """
    a = np.asarray(r1_vec_m, dtype=np.float64)
    b = np.asarray(r2_vec_m, dtype=np.float64)
    r1, r2, r12, den = _lengths(a, b)
    k = (1.0 + gamma) * gm_m3_per_s2
    bend = k / _C**2 if bending else 0.0
    num = r1 + r2 + r12 + bend
    with np.errstate(divide="ignore", invalid="ignore"):
        out = (gm_m3_per_s2 / _C**3) * np.log(num / (den + bend))
        if bending:
            out = out - 2.0 * k * gm_m3_per_s2 * r12 / (_C**5 * num * (den + bend))
    return out


class LinearisedBodyStates:
    """Body states for the relativistic light-time terms: exact at the first epochs asked,
    then carried along linearly, p(t) = p(t0) + v(t0) (t - t0), while |t - t0| <= max_dt_s.

    The trial epochs of a leg's iteration differ by well under a second after the
    first step.  Error: (1/2) a dt^2 <= 0.5 * 6e-3 m/s^2 * (10 s)^2 = 0.3 m (the Earth's
    barycentric acceleration is the largest of the bodies used); the Sun's term moves by
    2 (1+gamma) GM/(c^3 b) ~ 1e-14 s per metre of body position at b = 3 solar radii,
    so the effect is < 1e-14 s.  Never used for the station or spacecraft positions.
    Used by the light_time and doppler stages; in the Doppler both ends of the count carry this error
    alike, so their difference is smaller still (< 2e-16 in y for a 60 s count, tests/test_doppler_stage.py).
    """

    def __init__(self, eph, max_dt_s: float = 10.0):
        self.eph = eph
        self.max_dt_s = max_dt_s
        self.anchor: dict[str, tuple] = {}

    def __call__(self, name, mjd, sod):
        a = self.anchor.get(name)
        if a is not None and a[0].shape == np.shape(mjd):
            dt = (np.asarray(mjd) - a[0]) * 86400.0 + (np.asarray(sod) - a[1])
            if np.all(np.abs(dt) <= self.max_dt_s):
                return a[2] + a[3] * dt[:, None], a[3]
        p, v = self.eph.posvel_m(name, mjd, sod)
        self.anchor[name] = (np.array(mjd, copy=True), np.array(sod, copy=True), p, v)
        return p, v


# ---------------------------------------------------------------------------
# one leg
# ---------------------------------------------------------------------------
@dataclass
class LegSolution:
    """Solution of eq. (1) for n records (arrays of length n; (n, 3) for vectors).

    ``light_time_s = t_rx - t_tx`` (TDB seconds) = ``geometric_s`` +
    ``sum(shapiro_s.values())`` to < 1e-15 s for converged records.
    ``tx_pos_m``/``tx_vel_m_per_s`` are the transmitter's barycentric state at
    the last iterate, which differs from ``t_tx`` by less than the final Newton
    step (< ``tol_s`` for status 0).  ``t_tx_sod_s`` is rounded to the
    float64 resolution of a seconds-of-day (<= 7.3e-12 s); ``light_time_s`` is
    not.  Records with status 2 carry NaN (``t_tx_mjd`` = ``t_rx_mjd``).
    """

    t_rx_mjd: np.ndarray
    t_rx_sod_s: np.ndarray
    rx_pos_m: np.ndarray
    t_tx_mjd: np.ndarray
    t_tx_sod_s: np.ndarray
    light_time_s: np.ndarray
    geometric_s: np.ndarray
    shapiro_s: dict[str, np.ndarray]
    shapiro_dgamma_s: dict[str, np.ndarray]
    tx_pos_m: np.ndarray
    tx_vel_m_per_s: np.ndarray
    iterations: np.ndarray
    status: np.ndarray

    @property
    def shapiro_total_s(self) -> np.ndarray:
        """Sum of the per-body relativistic terms, seconds."""
        total = np.zeros_like(self.light_time_s)
        for v in self.shapiro_s.values():
            total = total + v
        return total

    @property
    def dgamma_s(self) -> np.ndarray:
        """d(light time)/d gamma, seconds: eq. (3) summed over the bodies (the
        shift of the solved epochs by a change of gamma is second order)."""
        total = np.zeros_like(self.light_time_s)
        for v in self.shapiro_dgamma_s.values():
            total = total + v
        return total


def _pos(ret, n: int) -> np.ndarray:
    """First element of a callable's return as a float64 (n, 3) array."""
    return np.asarray(ret[0], dtype=np.float64).reshape(n, 3)


def _noise_floor_s(rx: np.ndarray, p: np.ndarray, rho: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Rounding noise of f(tau) in eq. (1): positions of magnitude |r| carry
    ~eps |r| per component, so r12/c is defined only to ~eps(|r2| + |r1| + r12)/c;
    tau itself to one ulp.  Convergence is accepted at this floor when it
    exceeds ``tol_s`` (relevant beyond ~1e12 m from the barycentre)."""
    mag = _norm(rx) + _norm(p) + rho
    return 8.0 * _EPS * mag / _C + 4.0 * np.spacing(np.abs(tau))


def solve_leg(
    t_rx_mjd,
    t_rx_sod_s,
    rx_pos_m,
    tx_state_fn: StateFn,
    bodies_fn: BodyStateFn,
    gm_m3_per_s2: Mapping[str, float],
    gamma: float = 1.0,
    bodies: Sequence[str] = DEFAULT_BODIES,
    bending_bodies: Sequence[str] = DEFAULT_BENDING_BODIES,
    tol_s: float = 1e-12,
    max_iter: int = 10,
    tau_guess_s=None,
) -> LegSolution:
    """Solve the light-time equation (1) for the transmission time of each record.

    Parameters
    ----------
    t_rx_mjd, t_rx_sod_s : reception time, TDB (int MJD, float seconds of day).
    rx_pos_m : (n, 3) barycentric receiver position at reception.
    tx_state_fn : ``(mjd, sod_s) -> (pos (n,3) m, vel (n,3) m/s)``, the
        transmitter's barycentric state at trial TDB transmission times.  It is
        always called with all n records in input order (so it may close over
        per-record data such as a station index); records already converged or
        invalid are evaluated too and ignored (invalid ones at sod 0 of their
        day).  It may return NaN (the record gets status 2) but must not raise
        for times inside its span.  A station, a spacecraft or another
        spacecraft (spacecraft-to-spacecraft links use the same solver).
    bodies_fn : ``(name, mjd, sod_s) -> (pos (n,3), vel)`` barycentric body
        state (same calling convention as ``tx_state_fn``).
    gm_m3_per_s2 : GM per body name (TDB-compatible values with a TDB ephemeris).
    gamma : PPN parameter.
    bodies, bending_bodies : bodies in the sum of eq. (1); those that also get
        the ``(1+gamma)GM/c^2`` bending term.
    tol_s : stop a record when the Newton step ``|d tau| < tol_s`` (or below
        the float64 noise floor of its geometry, see ``_noise_floor_s``).
    max_iter : maximum evaluations of ``tx_state_fn`` per record.
    tau_guess_s : optional starting light time (default 0, i.e. the first
        iterate is the transmitter at the reception time).

    Iteration k evaluates the transmitter and bodies at ``t_tx = t_rx - tau_k``
    and updates ``tau_{k+1} = tau_k - f(tau_k)/f'(tau_k)`` (module docstring).
    Converged records are frozen (their values no longer change); the loop
    runs over iterations only, each one vectorised over all records.  Status
    per record: 0 converged, 1 not converged in ``max_iter`` (last iterate
    returned), 2 NaN input / NaN state / non-positive light time /
    transmitter line-of-sight speed >= c (``f' <= 0``, no unique solution).
    """
    mjd_rx = np.atleast_1d(np.asarray(t_rx_mjd)).astype(np.int64)
    sod_rx = np.atleast_1d(np.asarray(t_rx_sod_s, dtype=np.float64))
    rx = np.asarray(rx_pos_m, dtype=np.float64)
    if rx.ndim == 1:
        rx = rx[None, :]
    n = sod_rx.shape[0]
    if mjd_rx.shape != (n,) or rx.shape != (n, 3):
        raise ValueError(
            f"shapes: t_rx_mjd {mjd_rx.shape}, t_rx_sod_s {sod_rx.shape}, rx_pos_m {rx.shape}; "
            "expected (n,), (n,), (n, 3)"
        )
    bodies = tuple(bodies)
    missing = [b for b in bodies if b not in gm_m3_per_s2]
    if missing:
        raise ValueError(f"no GM given for bodies {missing}")
    if max_iter < 1:
        raise ValueError("max_iter must be >= 1")
    bend = {b: (b in bending_bodies) for b in bodies}

    tau = np.zeros(n) if tau_guess_s is None else np.broadcast_to(
        np.asarray(tau_guess_s, dtype=np.float64), (n,)
    ).copy()
    status = np.zeros(n, dtype=np.int8)
    iterations = np.zeros(n, dtype=np.int16)
    geo = np.full(n, np.nan)
    shap = {b: np.full(n, np.nan) for b in bodies}
    r1_body = {b: np.full((n, 3), np.nan) for b in bodies}  # transmitter - body at the last iterate
    tx_pos = np.full((n, 3), np.nan)
    tx_vel = np.full((n, 3), np.nan)

    valid = np.isfinite(sod_rx) & np.all(np.isfinite(rx), axis=1) & np.isfinite(tau)
    status[~valid] = STATUS_INVALID
    active = valid.copy()
    # invalid records still go through the callables (full-length arrays keep
    # the record order the callables may rely on) at a harmless finite time
    sod_safe = np.where(valid, sod_rx, 0.0)
    tau = np.where(valid, tau, 0.0)
    rx_safe = np.where(valid[:, None], rx, 0.0)

    # receiver relative to each body, both at the reception time: fixed
    r2_body = {b: rx_safe - _pos(bodies_fn(b, mjd_rx, sod_safe), n) for b in bodies}

    for _ in range(max_iter):
        if not active.any():
            break
        m_tx, s_tx = add_seconds(mjd_rx, sod_safe, -tau)
        p, v = tx_state_fn(m_tx, s_tx)
        p = _pos((p,), n)
        v = _pos((v,), n)
        rho_vec = rx_safe - p
        rho = _norm(rho_vec)
        g = rho / _C
        sb_all = {}
        s_sum = np.zeros(n)
        for b in bodies:
            pb = _pos(bodies_fn(b, m_tx, s_tx), n)
            sb = shapiro_delay_vec_s(p - pb, r2_body[b], gm_m3_per_s2[b], gamma, bend[b])
            sb_all[b] = (sb, p - pb)
            s_sum = s_sum + sb
        with np.errstate(divide="ignore", invalid="ignore"):
            fprime = 1.0 - _dot(rho_vec, v) / (rho * _C)
            f = tau - g - s_sum
            step = -f / fprime
            tau_new = tau + step
            bad = ~(np.isfinite(tau_new) & (tau_new > 0.0) & (fprime > 0.0) & (rho > 0.0))
            done = np.abs(step) < np.maximum(tol_s, _noise_floor_s(rx_safe, p, rho, tau_new))
        # update only the records still iterating; converged ones stay frozen
        a = active
        a3 = a[:, None]
        np.copyto(geo, g, where=a)
        np.copyto(tx_pos, p, where=a3)
        np.copyto(tx_vel, v, where=a3)
        for b in bodies:
            np.copyto(shap[b], sb_all[b][0], where=a)
            np.copyto(r1_body[b], sb_all[b][1], where=a3)
        iterations += a
        np.copyto(tau, tau_new, where=a & ~bad)  # keep times finite for the callables
        status[a & bad] = STATUS_INVALID
        active = a & ~bad & ~done

    status[active] = STATUS_NOT_CONVERGED
    inval = status == STATUS_INVALID
    tau[inval] = np.nan
    geo[inval] = np.nan
    tx_pos[inval] = np.nan
    tx_vel[inval] = np.nan
    dgamma = {}
    for b in bodies:
        shap[b][inval] = np.nan
        dgamma[b] = shapiro_dgamma_vec_s(r1_body[b], r2_body[b], gm_m3_per_s2[b], gamma, bend[b])
        dgamma[b][inval] = np.nan
    ok = ~inval
    t_tx_mjd = mjd_rx.copy()
    t_tx_sod = np.full(n, np.nan)
    if ok.any():
        t_tx_mjd[ok], t_tx_sod[ok] = add_seconds(mjd_rx[ok], sod_rx[ok], -tau[ok])
    return LegSolution(
        t_rx_mjd=mjd_rx,
        t_rx_sod_s=sod_rx,
        rx_pos_m=rx,
        t_tx_mjd=t_tx_mjd,
        t_tx_sod_s=t_tx_sod,
        light_time_s=tau,
        geometric_s=geo,
        shapiro_s=shap,
        shapiro_dgamma_s=dgamma,
        tx_pos_m=tx_pos,
        tx_vel_m_per_s=tx_vel,
        iterations=iterations,
        status=status,
    )


# ---------------------------------------------------------------------------
# observables
# ---------------------------------------------------------------------------
@dataclass
class RoundTripSolution:
    """Two-/three-way light time: downleg (spacecraft at t2 -> station at t3)
    and upleg (transmitting station at t1 -> spacecraft at t2).

    ``round_trip_s = t3 - t1 = down.light_time_s + up.light_time_s`` (TDB);
    ``t1`` as a two-part time.  ``status`` = worse of the two legs.
    """

    down: LegSolution
    up: LegSolution
    round_trip_s: np.ndarray
    t1_mjd: np.ndarray
    t1_sod_s: np.ndarray
    status: np.ndarray

    @property
    def shapiro_s(self) -> dict[str, np.ndarray]:
        """Per-body relativistic term summed over both legs, seconds."""
        return {b: self.down.shapiro_s[b] + self.up.shapiro_s[b] for b in self.down.shapiro_s}

    @property
    def shapiro_total_s(self) -> np.ndarray:
        return self.down.shapiro_total_s + self.up.shapiro_total_s

    @property
    def dgamma_s(self) -> np.ndarray:
        """d(round trip)/d gamma, seconds."""
        return self.down.dgamma_s + self.up.dgamma_s


def one_way_light_time(
    t_rx_mjd, t_rx_sod_s, rx_station_pos_m, spacecraft_state_fn: StateFn, bodies_fn: BodyStateFn,
    gm_m3_per_s2: Mapping[str, float], **kw,
) -> LegSolution:
    """One-way (spacecraft -> station) light time: the downleg alone, eq. (1)."""
    return solve_leg(t_rx_mjd, t_rx_sod_s, rx_station_pos_m, spacecraft_state_fn, bodies_fn,
                     gm_m3_per_s2, **kw)


def two_way_light_time(
    t3_mjd,
    t3_sod_s,
    rx_station_pos_m,
    spacecraft_state_fn: StateFn,
    tx_station_state_fn: StateFn,
    bodies_fn: BodyStateFn,
    gm_m3_per_s2: Mapping[str, float],
    gamma: float = 1.0,
    bodies: Sequence[str] = DEFAULT_BODIES,
    bending_bodies: Sequence[str] = DEFAULT_BENDING_BODIES,
    tol_s: float = 1e-12,
    max_iter: int = 10,
) -> RoundTripSolution:
    """Round-trip light time t3 - t1 for a signal received at t3 (TDB).

    Downleg: solve eq. (1) from the spacecraft (``spacecraft_state_fn``) to
    the receiving station at ``rx_station_pos_m`` (its barycentric position at
    t3), giving t2 and the spacecraft position there.  Upleg: solve eq. (1)
    from the transmitting station (``tx_station_state_fn``, evaluated at trial
    t1) to the spacecraft at t2, starting Newton from the downleg light time.
    Two-way: ``tx_station_state_fn`` is the receiving station's own state
    function; three-way: another station's.  The sum of the two leg light
    times is exact to float64 rounding of ~1e3 s values; t2 enters only as the
    epoch of the spacecraft position (its sod rounding <= 7.3e-12 s moves
    that position by < 1e-6 m).
    """
    kw = dict(gamma=gamma, bodies=bodies, bending_bodies=bending_bodies, tol_s=tol_s,
              max_iter=max_iter)
    down = solve_leg(t3_mjd, t3_sod_s, rx_station_pos_m, spacecraft_state_fn, bodies_fn,
                     gm_m3_per_s2, **kw)
    guess = np.where(np.isfinite(down.light_time_s), down.light_time_s, 0.0)
    up = solve_leg(down.t_tx_mjd, down.t_tx_sod_s, down.tx_pos_m, tx_station_state_fn, bodies_fn,
                   gm_m3_per_s2, tau_guess_s=guess, **kw)
    status = np.maximum(down.status, up.status)
    return RoundTripSolution(
        down=down,
        up=up,
        round_trip_s=down.light_time_s + up.light_time_s,
        t1_mjd=up.t_tx_mjd,
        t1_sod_s=up.t_tx_sod_s,
        status=status,
    )


def three_way_light_time(
    t3_mjd, t3_sod_s, rx_station_pos_m, spacecraft_state_fn: StateFn,
    tx_station_state_fn: StateFn, bodies_fn: BodyStateFn, gm_m3_per_s2: Mapping[str, float], **kw,
) -> RoundTripSolution:
    """Three-way light time: :func:`two_way_light_time` with the transmitting
    station different from the receiving one (``tx_station_state_fn``)."""
    return two_way_light_time(t3_mjd, t3_sod_s, rx_station_pos_m, spacecraft_state_fn,
                              tx_station_state_fn, bodies_fn, gm_m3_per_s2, **kw)
