"""Per-clock statistics of clock-comparison records: frequency, drift, Allan deviation, steps.

Pure, vectorised functions (no luigi, no files).  A clock-comparison series
is either time offsets ("phase") x(t) in seconds, or fractional frequencies
y averaged over the interval that starts at each epoch.  Notation and
definitions follow IEEE Std 1139-2008 (and its 2022 revision) and NIST
Special Publication 1065 (W. J. Riley, "Handbook of Frequency Stability
Analysis", 2008):

* fractional frequency from phase:   y_i = (x_{i+1} - x_i) / (t_{i+1} - t_i)
* Allan variance (Allan 1966, Proc. IEEE 54, 221; two-sample variance with
  no dead time):                      sigma_y^2(tau) = < (ybar_{k+1} - ybar_k)^2 > / 2
* overlapping Allan variance from evenly sampled phase x_i = x(t0 + i tau0),
  tau = m tau0, N phase points (NIST SP 1065, overlapping Allan variance):
      sigma_y^2(tau) = sum_{i=1}^{N-2m} (x_{i+2m} - 2 x_{i+m} + x_i)^2 / (2 tau^2 (N - 2m))
* power-law noise types (Barnes et al. 1971, IEEE Trans. Instrum. Meas.
  IM-20, 105; IEEE Std 1139; NIST SP 1065): white phase noise gives
  sigma_y(tau) ~ tau^-1, white frequency noise sigma_y(tau) ~ tau^-1/2,
  linear frequency drift sigma_y(tau) ~ tau^+1.

Gaps: a missing value is NaN.  In phase data a gap leaves the other points
valid, so only the second differences that touch a NaN are dropped; in
frequency data every window holding a NaN is dropped.  ``n_terms`` counts
the terms that entered each variance.

Concatenated series (several clocks in one array) carry an integer ``group``
array; consecutive records are differenced only when their groups are equal.
"""
from __future__ import annotations

from statistics import NormalDist
from typing import NamedTuple

import numpy as np

__all__ = [
    "fractional_frequency_from_phase",
    "phase_from_frequency",
    "overlapping_adev",
    "overlapping_adev_from_frequency",
    "nonoverlapping_adev_from_frequency",
    "DriftFit",
    "PhaseFit",
    "frequency_drift_fit",
    "phase_fit",
    "StepFlags",
    "STEP_REASONS",
    "MAD_TO_SIGMA",
    "detect_steps",
    "non_monotonic",
    "regular_grid",
    "summary",
]

#: reason codes a caller may attach to records flagged by ``detect_steps``
STEP_REASONS = ("time_step", "frequency_step")

#: sigma = MAD_TO_SIGMA * MAD for Gaussian data: 1 / Phi^-1(3/4), Phi the normal CDF
#: (the median of |z| for a standard normal z is Phi^-1(3/4)).  Computed, not typed in.
MAD_TO_SIGMA = 1.0 / NormalDist().inv_cdf(0.75)


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------
def _f64(a, name: str) -> np.ndarray:
    arr = np.asarray(a, dtype=float)
    if arr.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {arr.shape}")
    return arr


def _groups(group, n: int) -> np.ndarray:
    if group is None:
        return np.zeros(n, dtype=np.int64)
    g = np.asarray(group)
    if g.shape != (n,):
        raise ValueError(f"group must have shape ({n},), got {g.shape}")
    if g.dtype.kind not in "iub":
        raise TypeError(f"group must be an integer array, got dtype {g.dtype}")
    return g.astype(np.int64, copy=False)


def _same_group_pairs(g: np.ndarray) -> np.ndarray:
    """Boolean of length n-1: records i and i+1 belong to the same group."""
    return g[1:] == g[:-1]


def _m_array(m_list) -> np.ndarray:
    m = np.atleast_1d(np.asarray(m_list))
    if m.ndim != 1 or m.size == 0:
        raise ValueError("m_list must be a non-empty sequence of positive integers")
    if m.dtype.kind not in "iu":
        if not np.all(np.isfinite(m)) or np.any(m != np.round(m)):
            raise ValueError(f"averaging factors must be integers, got {m_list!r}")
        m = m.astype(np.int64)
    if np.any(m < 1):
        raise ValueError(f"averaging factors must be >= 1, got {m_list!r}")
    return m.astype(np.int64)


def _tau0(tau0_s) -> float:
    t = float(tau0_s)
    if not (np.isfinite(t) and t > 0.0):
        raise ValueError(f"tau0_s must be a positive finite number, got {tau0_s!r}")
    return t


def _group_median(values: np.ndarray, labels: np.ndarray, n_labels: int):
    """Median of the finite ``values`` per label (0..n_labels-1), vectorised; NaN where none.

    Sort by (label, value) once; the median of a label's block of c sorted
    values is the mean of its elements (c-1)//2 and c//2.
    """
    ok = np.isfinite(values)
    v, g = values[ok], labels[ok]
    order = np.lexsort((v, g))
    v, g = v[order], g[order]
    counts = np.bincount(g, minlength=n_labels)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    med = np.full(n_labels, np.nan)
    has = counts > 0
    lo = starts[has] + (counts[has] - 1) // 2
    hi = starts[has] + counts[has] // 2
    med[has] = 0.5 * (v[lo] + v[hi])
    return med, counts


# ---------------------------------------------------------------------------
# phase <-> frequency
# ---------------------------------------------------------------------------
def fractional_frequency_from_phase(t_s, x_s, group=None) -> np.ndarray:
    """Fractional frequency between consecutive phase points.

    y_i = (x_{i+1} - x_i) / (t_{i+1} - t_i)   (IEEE Std 1139; NIST SP 1065,
    relation of phase and frequency data), i = 0 .. N-2.

    Returns an array of length N-1; entry i belongs to the interval that starts
    at t_i.  It is NaN where records i and i+1 are in different groups, where
    t_{i+1} <= t_i, or where an input is not finite.
    """
    t = _f64(t_s, "t_s")
    x = _f64(x_s, "x_s")
    if t.shape != x.shape:
        raise ValueError(f"t_s and x_s differ in shape: {t.shape} vs {x.shape}")
    if t.size < 2:
        return np.empty(0)
    g = _groups(group, t.size)
    dt = np.diff(t)
    dx = np.diff(x)
    ok = _same_group_pairs(g) & (dt > 0.0) & np.isfinite(dx)
    y = np.full(dt.shape, np.nan)
    y[ok] = dx[ok] / dt[ok]
    return y


def phase_from_frequency(y, dt_s, x0_s: float = 0.0) -> np.ndarray:
    """Phase points from fractional frequencies: the inverse of ``fractional_frequency_from_phase``.

    x_0 = x0,  x_{k} = x0 + sum_{i<k} y_i dt_i   (integral of y, NIST SP 1065),
    k = 0 .. len(y).  ``dt_s`` is the averaging interval of each y (a scalar
    tau0 for evenly sampled data, or an array of len(y)).  Returns len(y)+1
    points; a NaN in y makes every later point NaN (a gap in frequency data
    breaks the phase record -- use ``overlapping_adev_from_frequency`` for
    gapped frequency data).
    """
    yy = _f64(y, "y")
    dt = np.broadcast_to(np.asarray(dt_s, dtype=float), yy.shape)
    return float(x0_s) + np.concatenate(([0.0], np.cumsum(yy * dt)))


# ---------------------------------------------------------------------------
# Allan deviation
# ---------------------------------------------------------------------------
def _adev_from_phase_array(x: np.ndarray, valid_window, tau0: float, m: np.ndarray):
    """Overlapping Allan deviation from phase x (evenly sampled), one m at a time.

    ``valid_window(m)`` returns the boolean validity of each of the N-2m terms
    or None (validity from finiteness of the second differences).
    """
    n = x.size
    adev = np.full(m.shape, np.nan)
    n_terms = np.zeros(m.shape, dtype=np.int64)
    for k, mk in enumerate(m):  # a handful of averaging factors, not records
        if n - 2 * mk < 1:
            continue
        d = x[2 * mk:] - 2.0 * x[mk:n - mk] + x[:n - 2 * mk]
        ok = np.isfinite(d)
        extra = valid_window(mk)
        if extra is not None:
            ok &= extra
        cnt = int(np.count_nonzero(ok))
        n_terms[k] = cnt
        if cnt:
            tau = mk * tau0
            adev[k] = np.sqrt(np.sum(d[ok] ** 2) / (2.0 * tau * tau * cnt))
    return m * tau0, adev, n_terms


def overlapping_adev(x_s, tau0_s, m_list):
    """Overlapping Allan deviation from evenly sampled phase data.

    sigma_y^2(tau) = sum_{i=1}^{N-2m} (x_{i+2m} - 2 x_{i+m} + x_i)^2 / (2 tau^2 (N - 2m)),
    tau = m tau0  (NIST SP 1065, overlapping Allan variance from phase data;
    the Allan variance of Allan 1966 with every overlapping window used).

    ``x_s``: phase (time offset) in seconds at t0 + i tau0; NaN marks a
    missing point and drops the terms that touch it.  Returns
    ``(taus_s, adev, n_terms)``; adev is NaN where no term exists (2m >= N).
    """
    x = _f64(x_s, "x_s")
    return _adev_from_phase_array(x, lambda m: None, _tau0(tau0_s), _m_array(m_list))


def overlapping_adev_from_frequency(y, tau0_s, m_list):
    """Overlapping Allan deviation from evenly sampled fractional-frequency data.

    The same estimator as ``overlapping_adev`` on the phase x_k = tau0 sum_{i<k} y_i
    (NIST SP 1065: the frequency form
    sigma_y^2(tau) = sum_j [sum_{i=j}^{j+m-1} (y_{i+m} - y_i)]^2 / (2 m^2 (M - 2m + 1))
    is this identity written out).  The mean of y is removed first (second
    differences of x are unchanged by it) to keep the cumulative sum small.
    A window of 2m frequency values holding a NaN is dropped.
    """
    yy = _f64(y, "y")
    tau0 = _tau0(tau0_s)
    m = _m_array(m_list)
    fin = np.isfinite(yy)
    mean = yy[fin].mean() if fin.any() else 0.0
    z = np.where(fin, yy - mean, 0.0)
    x = tau0 * np.concatenate(([0.0], np.cumsum(z)))
    bad = np.concatenate(([0], np.cumsum(~fin)))  # bad[j] = NaNs among y[0:j]
    n = x.size

    def valid(mk):
        return bad[2 * mk:] - bad[:n - 2 * mk] == 0

    return _adev_from_phase_array(x, valid, tau0, m)


def nonoverlapping_adev_from_frequency(y, tau0_s, m_list):
    """Non-overlapping Allan deviation from evenly sampled fractional-frequency data.

    ybar_k = mean of y over the k-th block of m consecutive values (k = 0..M-1,
    M = floor(len(y)/m)); sigma_y^2(m tau0) = sum_k (ybar_{k+1} - ybar_k)^2 / (2 (M - 1))
    (Allan 1966, Proc. IEEE 54, 221, two-sample variance, no dead time).
    A block holding a NaN is NaN and drops the two differences it enters.
    Returns ``(taus_s, adev, n_terms)``.
    """
    yy = _f64(y, "y")
    tau0 = _tau0(tau0_s)
    m = _m_array(m_list)
    adev = np.full(m.shape, np.nan)
    n_terms = np.zeros(m.shape, dtype=np.int64)
    for k, mk in enumerate(m):  # a handful of averaging factors, not records
        blocks = yy.size // mk
        if blocks < 2:
            continue
        ybar = yy[:blocks * mk].reshape(blocks, mk).mean(axis=1)
        d = np.diff(ybar)
        ok = np.isfinite(d)
        cnt = int(np.count_nonzero(ok))
        n_terms[k] = cnt
        if cnt:
            adev[k] = np.sqrt(np.sum(d[ok] ** 2) / (2.0 * cnt))
    return m * tau0, adev, n_terms


# ---------------------------------------------------------------------------
# drift and phase fits
# ---------------------------------------------------------------------------
class DriftFit(NamedTuple):
    offset: float       # fitted y at t_ref_s (dimensionless)
    drift_per_s: float  # dy/dt, 1/s
    rms: float          # sqrt(mean(residual^2)), dimensionless


class PhaseFit(NamedTuple):
    x0_s: float         # fitted x at t_ref_s, s
    y0: float           # fitted dx/dt at t_ref_s (fractional frequency)
    drift_per_s: float  # d2x/dt2 = dy/dt, 1/s


def _finite_pairs(t_s, v, name):
    t = _f64(t_s, "t_s")
    vv = _f64(v, name)
    if t.shape != vv.shape:
        raise ValueError(f"t_s and {name} differ in shape: {t.shape} vs {vv.shape}")
    ok = np.isfinite(t) & np.isfinite(vv)
    return t[ok], vv[ok]


def frequency_drift_fit(t_s, y, t_ref_s=None) -> DriftFit:
    """Least-squares line through frequency data: y(t) = offset + D (t - t_ref).

    Closed form (ordinary least squares): with u = t - mean(t),
    D = sum u (y - ybar) / sum u^2, offset = ybar + D (t_ref - mean(t));
    rms = sqrt(sum r^2 / n) of the residuals r.  Non-finite records are
    ignored; ``t_ref_s`` defaults to the first finite epoch.  Fewer than two
    distinct epochs give NaN.
    """
    t, v = _finite_pairs(t_s, y, "y")
    if t.size == 0:
        return DriftFit(np.nan, np.nan, np.nan)
    tref = float(t[0]) if t_ref_s is None else float(t_ref_s)
    tm = t.mean()
    u = t - tm
    suu = float(np.dot(u, u))
    if t.size < 2 or suu == 0.0:
        return DriftFit(np.nan, np.nan, np.nan)
    vm = v.mean()
    d = float(np.dot(u, v - vm)) / suu
    res = v - vm - d * u
    return DriftFit(float(vm + d * (tref - tm)), d, float(np.sqrt(np.mean(res * res))))


def _phase_fit_with_residual(t, v, tref):
    s = float(np.max(np.abs(t - tref)))
    if t.size < 3 or s == 0.0:
        return PhaseFit(np.nan, np.nan, np.nan), None
    u = (t - tref) / s  # scaled time keeps the design matrix well conditioned
    a = np.stack([np.ones_like(u), u, u * u], axis=1)
    coef, _, rank, _ = np.linalg.lstsq(a, v, rcond=None)
    if rank < 3:
        return PhaseFit(np.nan, np.nan, np.nan), None
    fit = PhaseFit(float(coef[0]), float(coef[1] / s), float(2.0 * coef[2] / (s * s)))
    return fit, v - a @ coef


def phase_fit(t_s, x_s, t_ref_s=None) -> PhaseFit:
    """Least-squares quadratic through phase data: x(t) = x0 + y0 (t - t_ref) + D/2 (t - t_ref)^2.

    A quadratic phase model is a constant fractional frequency offset y0 plus
    a linear frequency drift D (NIST SP 1065, frequency drift from phase data;
    common practice).  Returns (x0_s, y0, drift_per_s = D).  Non-finite records
    are ignored; ``t_ref_s`` defaults to the first finite epoch; fewer than
    three distinct epochs give NaN.
    """
    t, v = _finite_pairs(t_s, x_s, "x_s")
    if t.size == 0:
        return PhaseFit(np.nan, np.nan, np.nan)
    tref = float(t[0]) if t_ref_s is None else float(t_ref_s)
    return _phase_fit_with_residual(t, v, tref)[0]


# ---------------------------------------------------------------------------
# steps and epoch order
# ---------------------------------------------------------------------------
class StepFlags(NamedTuple):
    mask: np.ndarray    # bool, True on the record right after a step
    reason: str         # the caller's reason code, one of STEP_REASONS
    score: np.ndarray   # robust score of the difference ending at each record (NaN if none)


def detect_steps(t_s, values, threshold_sigma: float, group=None, reason: str = "time_step",
                 min_step: float = 0.0, min_pairs: int = 5) -> StepFlags:
    """Flag steps in a series of time offsets or fractional frequencies.

    For consecutive records i, i+1 of the same group with t_{i+1} > t_i and
    finite values, the first difference is detrended by the group's median
    rate,  d_i = (v_{i+1} - v_i) - med_g(dv/dt) (t_{i+1} - t_i)  (for even
    sampling simply dv_i - med_g(dv)), and scored against a robust scale,
        z_i = (d_i - med_g(d)) / (MAD_TO_SIGMA * med_g|d - med_g(d)|)
    (median absolute deviation scaled to a Gaussian sigma).  Record i+1 is
    flagged when |z_i| > threshold_sigma and |d_i - med_g(d)| > min_step.
    Pass phase x for ``reason="time_step"`` and frequency y for
    ``reason="frequency_step"``; the detector suits series whose first
    differences are roughly stationary (white phase or white frequency
    noise).  An isolated outlier shows as two flagged differences.

    Groups with fewer than ``min_pairs`` usable differences are never
    flagged.  Differences are never taken across a group boundary.
    """
    if reason not in STEP_REASONS:
        raise ValueError(f"reason must be one of {STEP_REASONS}, got {reason!r}")
    thr = float(threshold_sigma)
    if not (np.isfinite(thr) and thr > 0.0):
        raise ValueError(f"threshold_sigma must be positive, got {threshold_sigma!r}")
    t = _f64(t_s, "t_s")
    v = _f64(values, "values")
    if t.shape != v.shape:
        raise ValueError(f"t_s and values differ in shape: {t.shape} vs {v.shape}")
    n = t.size
    mask = np.zeros(n, dtype=bool)
    score = np.full(n, np.nan)
    if n < 2:
        return StepFlags(mask, reason, score)
    g = _groups(group, n)
    labels, inv = np.unique(g, return_inverse=True)
    pair_label = inv[1:]
    dt = np.diff(t)
    dv = np.diff(v)
    ok = _same_group_pairs(g) & (dt > 0.0) & np.isfinite(dv) & np.isfinite(dt)
    rate = np.where(ok, dv / np.where(ok, dt, 1.0), np.nan)
    med_rate, _ = _group_median(rate, pair_label, labels.size)
    d = np.where(ok, dv - med_rate[pair_label] * dt, np.nan)
    centre, counts = _group_median(d, pair_label, labels.size)
    dev = d - centre[pair_label]
    mad, _ = _group_median(np.abs(dev), pair_label, labels.size)
    sigma = MAD_TO_SIGMA * mad
    with np.errstate(divide="ignore", invalid="ignore"):
        z = dev / sigma[pair_label]
    z = np.where(dev == 0.0, 0.0, z)  # a zero deviation scores 0 even when sigma is 0
    usable = ok & (counts[pair_label] >= int(min_pairs))
    flagged = usable & (np.abs(z) > thr) & (np.abs(dev) > float(min_step))
    score[1:] = np.where(ok, z, np.nan)
    mask[1:] = flagged
    return StepFlags(mask, reason, score)


def non_monotonic(t_s, group=None) -> np.ndarray:
    """Records whose epoch is not strictly after its predecessor's in the same group.

    mask_{i+1} = (g_{i+1} == g_i) and not (t_{i+1} > t_i), for finite t_i;
    a non-finite epoch is always flagged (it is after nothing).  The first
    record of each group is never compared with the previous group.
    """
    t = _f64(t_s, "t_s")
    n = t.size
    mask = ~np.isfinite(t)
    if n < 2:
        return mask
    g = _groups(group, n)
    with np.errstate(invalid="ignore"):
        not_after = ~(t[1:] > t[:-1])
    mask[1:] |= _same_group_pairs(g) & np.isfinite(t[:-1]) & np.isfinite(t[1:]) & not_after
    return mask


# ---------------------------------------------------------------------------
# per-clock summary
# ---------------------------------------------------------------------------
def regular_grid(t_s, values, tau0_s=None, rtol: float = 1e-6, max_fill: float = 20.0):
    """Place a series on the regular grid t_first + k tau0, NaN where no record.

    tau0 defaults to the median positive spacing.  Returns
    ``(tau0_s, gridded_values)`` or ``(tau0_s, None)`` when the epochs are not
    on one grid within rtol * tau0, two records share a grid point, or the
    grid would be longer than max_fill times the number of records.
    """
    t = _f64(t_s, "t_s")
    v = _f64(values, "values")
    ok = np.isfinite(t)
    t, v = t[ok], v[ok]
    if t.size < 2:
        return (np.nan if tau0_s is None else float(tau0_s)), None
    if tau0_s is None:
        steps = np.diff(np.sort(t))
        steps = steps[steps > 0.0]
        if steps.size == 0:
            return np.nan, None
        tau0 = float(np.median(steps))
    else:
        tau0 = _tau0(tau0_s)
    t0 = float(t.min())
    k = np.round((t - t0) / tau0)
    if np.any(np.abs(t - t0 - k * tau0) > rtol * tau0):
        return tau0, None
    k = k.astype(np.int64)
    length = int(k.max()) + 1
    if length > max_fill * t.size or np.unique(k).size != k.size:
        return tau0, None
    grid = np.full(length, np.nan)
    grid[k] = v
    return tau0, grid


def summary(t_s, values, kind: str = "phase", tau0_s=None, m_list=(1, 10, 100),
            grid_rtol: float = 1e-6) -> dict:
    """Summary of one clock's series: mean fractional frequency offset, drift, Allan deviation.

    kind="phase": values are time offsets x (s); ``phase_fit`` (quadratic)
    with t_ref at mid-span gives the mean frequency y0 and drift D.
    kind="frequency": values are fractional frequencies y over tau0;
    ``frequency_drift_fit`` with t_ref at mid-span gives them.  For a linear
    frequency the value at mid-span is the time average over the span.
    Overlapping ADEV (``overlapping_adev`` / ``overlapping_adev_from_frequency``)
    at tau = m tau0 for the m whose estimate has at least one term, when the
    epochs lie on a regular grid (gaps allowed, see ``regular_grid``).
    Call once per clock (select its records first).
    """
    if kind not in ("phase", "frequency"):
        raise ValueError(f"kind must be 'phase' or 'frequency', got {kind!r}")
    t_all = _f64(t_s, "t_s")
    v_all = _f64(values, "values")
    if t_all.shape != v_all.shape:
        raise ValueError(f"t_s and values differ in shape: {t_all.shape} vs {v_all.shape}")
    t, v = _finite_pairs(t_all, v_all, "values")
    out = {"kind": kind, "n_records": int(t_all.size), "n_used": int(t.size)}
    span = float(t.max() - t.min()) if t.size else np.nan
    tref = float(0.5 * (t.max() + t.min())) if t.size else np.nan
    out.update(span_s=span, t_ref_s=tref)
    if kind == "phase":
        fit, res = (_phase_fit_with_residual(t, v, tref) if t.size else
                    (PhaseFit(np.nan, np.nan, np.nan), None))
        y_mean, drift = fit.y0, fit.drift_per_s
        rms = float(np.sqrt(np.mean(res * res))) if res is not None else np.nan
    else:
        fit = frequency_drift_fit(t, v, t_ref_s=tref) if t.size else DriftFit(np.nan, np.nan, np.nan)
        y_mean, drift, rms = fit.offset, fit.drift_per_s, fit.rms
    out.update(mean_fractional_frequency=y_mean, drift_per_s=drift,
               drift_per_day=drift * 86_400.0, fit_rms=rms)

    # ADEV needs a regular grid; records with a NaN value stay on it as gaps
    tau0, grid = regular_grid(t_all, v_all, tau0_s=tau0_s, rtol=grid_rtol)
    out["tau0_s"] = tau0
    out["evenly_sampled"] = grid is not None
    taus, adev, nterms = np.empty(0), np.empty(0), np.empty(0, dtype=np.int64)
    if grid is not None:
        est = overlapping_adev if kind == "phase" else overlapping_adev_from_frequency
        taus, adev, nterms = est(grid, tau0, m_list)
        keep = nterms > 0
        taus, adev, nterms = taus[keep], adev[keep], nterms[keep]
    out.update(adev_tau_s=taus.tolist(), adev=adev.tolist(), adev_n_terms=nterms.tolist())
    return out
