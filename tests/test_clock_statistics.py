"""Tests of stages.physics.clock_statistics (per-clock frequency, drift, Allan deviation, steps).

Every check names its outside source beside it.  Sources:

* IEEE Std 1139-2008 / 1139-2022, "Standard Definitions of Physical
  Quantities for Fundamental Frequency and Time Metrology": y = dx/dt,
  the Allan variance, the power-law noise types and their tau slopes;
* NIST Special Publication 1065 (W. J. Riley 2008, "Handbook of Frequency
  Stability Analysis"): the overlapping Allan variance from phase data,
  sigma^2(tau) = sum (x_{i+2m} - 2x_{i+m} + x_i)^2 / (2 tau^2 (N - 2m)), the
  table of power-law noise slopes (white PM: sigma_y ~ tau^-1, white FM:
  sigma_y ~ tau^-1/2), and the statement that the overlapping estimator has
  the same expectation as the non-overlapping one with better confidence;
* Allan 1966, Proc. IEEE 54, 221: the two-sample variance
  sigma^2(tau) = <(ybar_{k+1} - ybar_k)^2>/2;
* Barnes et al. 1971, IEEE Trans. Instrum. Meas. IM-20, 105: power-law
  noise model.

"derived" marks an expectation worked out in the comment beside it from the
definitions above; "from memory" marks a recalled textbook result.  The NIST
SP 1065 1000-point reference data set is not available offline and is not
used.  Simulated data use fixed seeds; statistical tolerances are 5 standard
deviations of the estimator, worked out in the comments (so a correct
estimator fails with probability < 1e-6 per check, while a wrong factor of
sqrt(2), a wrong tau or a wrong slope fails by many standard deviations).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from stages.physics import clock_statistics as cs


# ---------------------------------------------------------------------------
# independent helpers written out from the published definitions
# ---------------------------------------------------------------------------
def direct_oadev(x, tau0, m):
    """NIST SP 1065 overlapping Allan variance from phase, as a plain double sum."""
    n = len(x)
    total = 0.0
    count = 0
    for i in range(n - 2 * m):
        total += (x[i + 2 * m] - 2.0 * x[i + m] + x[i]) ** 2
        count += 1
    tau = m * tau0
    return math.sqrt(total / (2.0 * tau * tau * count))


def nonoverlap_rel_sd(n_terms):
    """Conservative relative standard deviation of an ADEV estimate with n_terms terms.

    derived: for white FM at the block level, d_k = ybar_{k+1} - ybar_k are
    Gaussian with var 2s^2 and lag-1 correlation -1/2, so var(d_k^2) = 8 s^4
    and cov(d_k^2, d_{k+1}^2) = 2 cov(d_k, d_{k+1})^2 = 2 s^4 (Isserlis, from
    memory); var(sum d^2) ~ n (8 + 2*2) s^4 = 12 n s^4, hence the AVAR has
    relative variance 12 n / (2n)^2 = 3/n (edf = 2n/3) and the ADEV relative
    sd ~ half of sqrt(3/n) = 0.87/sqrt(n).  For white PM (second differences
    of iid x, correlations -2/3 and 1/6) the same sum gives 0.99/sqrt(n).
    1/sqrt(n) bounds both; the overlapping estimator at the same tau has a
    smaller variance (NIST SP 1065), so this bound also covers it.
    """
    return 1.0 / math.sqrt(n_terms)


def assert_rel(actual, expected, rtol):
    """|actual/expected - 1| < rtol with no absolute floor (pytest.approx keeps abs=1e-12 even
    when rel is given, which would accept anything at the 1e-13 level of clock data)."""
    assert abs(actual / expected - 1.0) < rtol, (actual, expected, rtol)


def loglog_slope(taus, adev):
    return np.polyfit(np.log(taus), np.log(adev), 1)[0]


M_OCTAVES = [1, 2, 4, 8, 16, 32, 64, 128]
N_SIM = 2 ** 17


# ---------------------------------------------------------------------------
# phase <-> frequency
# ---------------------------------------------------------------------------
def test_fractional_frequency_from_phase_is_the_difference_quotient():
    rng = np.random.default_rng(11)
    t = np.cumsum(rng.uniform(1.0, 60.0, 50)) + 1.0e9  # uneven epochs, GPS-like seconds
    x = rng.normal(0.0, 1e-9, t.size) + 3e-11 * (t - t[0])
    y = cs.fractional_frequency_from_phase(t, x)
    # IEEE Std 1139 / NIST SP 1065: y_i = (x_{i+1} - x_i) / (t_{i+1} - t_i), elementwise
    expected = np.array([(x[i + 1] - x[i]) / (t[i + 1] - t[i]) for i in range(t.size - 1)])
    np.testing.assert_allclose(y, expected, rtol=1e-12, atol=0.0)
    # phase_from_frequency integrates y back (x_k = x_0 + sum y_i dt_i, NIST SP 1065)
    back = cs.phase_from_frequency(y, np.diff(t), x0_s=x[0])
    np.testing.assert_allclose(back, x, rtol=0.0, atol=1e-18)


def test_fractional_frequency_not_across_groups_or_backwards_epochs():
    t = np.array([0.0, 1.0, 2.0, 0.0, 1.0, 1.0, 2.0])
    x = np.array([0.0, 1.0, 2.0, 100.0, 101.0, 105.0, 103.0]) * 1e-9
    g = np.array([0, 0, 0, 1, 1, 1, 1])
    y = cs.fractional_frequency_from_phase(t, x, group=g)
    # definition (IEEE 1139): only pairs inside one clock's series with t_{i+1} > t_i
    assert np.isnan(y[2])          # group boundary 0 -> 1
    assert np.isnan(y[4])          # repeated epoch, dt = 0
    np.testing.assert_allclose(y[[0, 1, 3, 5]], np.array([1.0, 1.0, 1.0, -2.0]) * 1e-9, rtol=1e-12)


# ---------------------------------------------------------------------------
# Allan deviation: estimator definition
# ---------------------------------------------------------------------------
def test_overlapping_adev_matches_the_published_sum():
    rng = np.random.default_rng(3)
    x = np.cumsum(rng.normal(0.0, 1e-12, 41))
    m = [1, 2, 3, 5, 10, 20]
    taus, adev, n_terms = cs.overlapping_adev(x, 2.5, m)
    # NIST SP 1065 overlapping AVAR from phase, as a direct double sum; tau = m tau0, N - 2m terms
    np.testing.assert_allclose(adev, [direct_oadev(x, 2.5, k) for k in m], rtol=1e-12)
    np.testing.assert_array_equal(taus, 2.5 * np.array(m))
    np.testing.assert_array_equal(n_terms, 41 - 2 * np.array(m))
    # no term when 2m >= N (NIST SP 1065: i runs 1 .. N-2m)
    _, adev2, n2 = cs.overlapping_adev(x, 2.5, [21])
    assert np.isnan(adev2[0]) and n2[0] == 0


def test_overlapping_from_frequency_equals_phase_form():
    rng = np.random.default_rng(4)
    y = 1e-9 + rng.normal(0.0, 1e-13, 5000)  # a large offset: must not cost precision
    m = [1, 7, 50, 300]
    # NIST SP 1065: the frequency form of the overlapping AVAR is the phase form on x = tau0 cumsum(y)
    _, a_y, n_y = cs.overlapping_adev_from_frequency(y, 10.0, m)
    _, a_x, n_x = cs.overlapping_adev(cs.phase_from_frequency(y - 1e-9, 10.0), 10.0, m)
    np.testing.assert_allclose(a_y, a_x, rtol=1e-9)
    np.testing.assert_array_equal(n_y, n_x)
    np.testing.assert_array_equal(n_y, 5000 + 1 - 2 * np.array(m))  # M - 2m + 1 windows (NIST SP 1065)


def test_overlapping_equals_nonoverlapping_at_tau0():
    # at m = 1 every window is used by both estimators, so Allan 1966 and NIST SP 1065's
    # overlapping form are the same sum: sum (y_{i+1} - y_i)^2 / (2 (M - 1))
    rng = np.random.default_rng(5)
    y = rng.normal(0.0, 1e-13, 3000)
    _, a_o, _ = cs.overlapping_adev_from_frequency(y, 1.0, [1])
    _, a_n, _ = cs.nonoverlapping_adev_from_frequency(y, 1.0, [1])
    direct = math.sqrt(np.sum(np.diff(y) ** 2) / (2 * (y.size - 1)))  # Allan 1966, written out
    np.testing.assert_allclose(a_o[0], direct, rtol=1e-9)
    np.testing.assert_allclose(a_n[0], direct, rtol=1e-12)


# ---------------------------------------------------------------------------
# Allan deviation: power-law noise
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("seed", [101, 202])
def test_white_pm_slope_minus_one_and_level(seed):
    rng = np.random.default_rng(seed)
    sigma_x, tau0 = 1e-9, 1.0
    x = rng.normal(0.0, sigma_x, N_SIM)
    taus, adev, _ = cs.overlapping_adev(x, tau0, M_OCTAVES)
    # IEEE 1139 / NIST SP 1065 noise table: white PM gives sigma_y ~ tau^-1.  The fitted slope's
    # error is dominated by the largest m, where the 5-sigma relative error is 5/sqrt(1022) = 0.16
    # over a lever arm ln(128) = 4.9, i.e. < 0.04 on the slope.
    assert loglog_slope(taus, adev) == pytest.approx(-1.0, abs=0.05)
    # derived: for iid x of sd s, E[(x_{i+2m} - 2x_{i+m} + x_i)^2] = (1 + 4 + 1) s^2 = 6 s^2, so
    # sigma_y^2(tau) = 6 s^2 / (2 tau^2) and sigma_y(tau) = sqrt(3) s / tau for every m >= 1.
    expected = math.sqrt(3.0) * sigma_x / taus
    n_no = (N_SIM - 1) // np.array(M_OCTAVES) - 1  # terms of the non-overlapping estimator
    for k, m in enumerate(M_OCTAVES):
        assert abs(adev[k] / expected[k] - 1.0) < 5 * nonoverlap_rel_sd(n_no[k]), m


@pytest.mark.parametrize("seed", [303, 404])
def test_white_fm_slope_minus_half_and_level(seed):
    rng = np.random.default_rng(seed)
    sigma, tau0 = 2e-13, 30.0
    y = rng.normal(0.0, sigma, N_SIM)
    x = cs.phase_from_frequency(y, tau0)
    taus, adev, _ = cs.overlapping_adev(x, tau0, M_OCTAVES)
    # IEEE 1139 / NIST SP 1065 noise table: white FM gives sigma_y ~ tau^-1/2 (same tolerance
    # reasoning as the white-PM test)
    assert loglog_slope(taus, adev) == pytest.approx(-0.5, abs=0.05)
    # derived: block means of m iid values have variance s^2/m, so sigma_y(m tau0) = s / sqrt(m)
    # (Allan 1966 definition applied to independent block means)
    n_no = N_SIM // np.array(M_OCTAVES) - 1
    for k, m in enumerate(M_OCTAVES):
        assert abs(adev[k] * math.sqrt(m) / sigma - 1.0) < 5 * nonoverlap_rel_sd(n_no[k]), m
    # Allan 1966: iid y of sd s -> E[(y_{k+1} - y_k)^2]/2 = s^2, i.e. the non-overlapping ADEV at
    # tau0 estimates s.  Its relative sd is 0.87/sqrt(n) (nonoverlap_rel_sd): n = 131071 terms,
    # sd 0.24 %, 5 sd = 1.2 %.
    _, a_n, n_terms = cs.nonoverlapping_adev_from_frequency(y, tau0, [1])
    assert n_terms[0] == N_SIM - 1
    assert abs(a_n[0] / sigma - 1.0) < 5 * math.sqrt(3.0 / (4.0 * n_terms[0]))


@pytest.mark.parametrize("noise", ["white_pm", "white_fm"])
def test_overlapping_and_nonoverlapping_agree_in_expectation(noise):
    rng = np.random.default_rng(505 if noise == "white_pm" else 606)
    n, tau0 = 2 ** 16, 1.0
    if noise == "white_pm":
        x = rng.normal(0.0, 1e-9, n + 1)
        y = np.diff(x) / tau0                      # IEEE 1139: y_i = (x_{i+1} - x_i)/tau0
    else:
        y = rng.normal(0.0, 1e-13, n)
        x = cs.phase_from_frequency(y, tau0)
    m = [4, 16, 64]
    _, a_o, _ = cs.overlapping_adev(x, tau0, m)
    _, a_n, n_n = cs.nonoverlapping_adev_from_frequency(y, tau0, m)
    # NIST SP 1065: both estimate the same sigma_y(tau); the ratio's relative sd is at most
    # sqrt(2) x nonoverlap_rel_sd(n_n) (two estimates each bounded by it); 5 sd band
    ratio = a_o / a_n
    for k in range(len(m)):
        assert abs(ratio[k] - 1.0) < 5 * math.sqrt(2.0) * nonoverlap_rel_sd(n_n[k]), m[k]
    # ... and a wrong tau (m off by a factor of 2) would be detected: white PM differs by 2,
    # white FM by sqrt(2), far outside the band at m = 4 (0.07)
    assert 5 * math.sqrt(2.0) * nonoverlap_rel_sd(n_n[0]) < math.sqrt(2.0) - 1.0


# ---------------------------------------------------------------------------
# Allan deviation: linear frequency drift (deterministic)
# ---------------------------------------------------------------------------
def test_linear_frequency_drift_gives_d_tau_over_sqrt2():
    # derived from NIST SP 1065's overlapping AVAR: with y(t) = D t, x(t) = D t^2 / 2, and on the
    # grid t_i = i tau0, x_i = a i^2 with a = D tau0^2 / 2.  Then for every i
    #   x_{i+2m} - 2 x_{i+m} + x_i = a [(i+2m)^2 - 2(i+m)^2 + i^2] = 2 a m^2 = D (m tau0)^2 = D tau^2,
    # so sigma_y^2(tau) = (D tau^2)^2 / (2 tau^2) = D^2 tau^2 / 2 and sigma_y(tau) = D tau / sqrt(2)
    # exactly (NIST SP 1065: linear drift gives sigma_y ~ tau^+1).
    drift, tau0 = 1e-15, 10.0
    i = np.arange(2000, dtype=float)
    x = 0.5 * drift * tau0 ** 2 * i ** 2
    m = [1, 3, 10, 50, 400]
    taus, adev, _ = cs.overlapping_adev(x, tau0, m)
    np.testing.assert_allclose(adev, drift * taus / math.sqrt(2.0), rtol=1e-8)
    # Allan 1966 on the frequency: y_i averaged over [i tau0, (i+1) tau0] is D (i + 1/2) tau0, and
    # block means of m of them differ by D m tau0 = D tau -> sigma^2 = (D tau)^2 / 2, again exact.
    y = np.diff(x) / tau0
    _, a_n, _ = cs.nonoverlapping_adev_from_frequency(y, tau0, m)
    np.testing.assert_allclose(a_n, drift * taus / math.sqrt(2.0), rtol=1e-8)
    _, a_f, _ = cs.overlapping_adev_from_frequency(y, tau0, m)
    np.testing.assert_allclose(a_f, drift * taus / math.sqrt(2.0), rtol=1e-8)


# ---------------------------------------------------------------------------
# gaps
# ---------------------------------------------------------------------------
def test_gap_drops_exactly_the_terms_that_touch_it():
    rng = np.random.default_rng(7)
    x = np.cumsum(rng.normal(0.0, 1e-12, 200))
    gap = 100
    xg = x.copy()
    xg[gap] = np.nan
    for m in (1, 5, 20):
        _, a, n = cs.overlapping_adev(xg, 1.0, [m])
        # NIST SP 1065 sum over i with x_i, x_{i+m}, x_{i+2m} all present: the point at 100 is the
        # i, i+m or i+2m of three terms (i = 100, 100-m, 100-2m), each dropped
        keep = [i for i in range(200 - 2 * m) if gap not in (i, i + m, i + 2 * m)]
        assert n[0] == len(keep) == 200 - 2 * m - 3
        d = np.array([x[i + 2 * m] - 2 * x[i + m] + x[i] for i in keep])
        assert_rel(a[0], math.sqrt(np.sum(d ** 2) / (2 * m * m * len(keep))), 1e-12)
    # frequency data: a missing y breaks every window of 2m values holding it (2m of them)
    y = rng.normal(0.0, 1e-13, 300)
    y[150] = np.nan
    for m in (1, 4, 30):
        _, a, n = cs.overlapping_adev_from_frequency(y, 1.0, [m])
        assert n[0] == (300 - 2 * m + 1) - 2 * m  # NIST SP 1065: M - 2m + 1 windows in all
        assert np.isfinite(a[0])


# ---------------------------------------------------------------------------
# drift and phase fits
# ---------------------------------------------------------------------------
def test_frequency_drift_fit_exact_and_noisy():
    t = 1.2e9 + 60.0 * np.arange(1440)          # one day at 60 s, GPS-like seconds
    y0, drift = 3e-12, 2e-18                    # drift 1.7e-13 per day
    fit = cs.frequency_drift_fit(t, y0 + drift * (t - t[0]))
    # a straight line is fitted exactly by least squares (common practice)
    assert_rel(fit.offset, y0, 1e-9)
    assert_rel(fit.drift_per_s, drift, 1e-6)
    assert fit.rms < 1e-22

    rng = np.random.default_rng(8)
    sigma = 1e-13
    fit = cs.frequency_drift_fit(t, y0 + drift * (t - t[0]) + rng.normal(0.0, sigma, t.size))
    u = t - t.mean()
    se = sigma / math.sqrt(np.sum(u * u))       # OLS slope standard error (from memory)
    assert abs(fit.drift_per_s - drift) < 5 * se
    # residual rms estimates sigma; relative sd of a sample sd ~ 1/sqrt(2n) (from memory)
    assert abs(fit.rms / sigma - 1.0) < 5 / math.sqrt(2 * t.size)


def test_phase_fit_recovers_quadratic_and_agrees_with_frequency_fit():
    t = 1.2e9 + 300.0 * np.arange(2000)
    tref = t[0]
    x0, y0, drift = 4e-6, -2.5e-12, 3e-19
    # x(t) = x0 + y0 (t - tref) + D/2 (t - tref)^2: constant offset plus linear drift (NIST SP 1065)
    x = x0 + y0 * (t - tref) + 0.5 * drift * (t - tref) ** 2
    fit = cs.phase_fit(t, x)
    assert_rel(fit.x0_s, x0, 1e-9)
    assert_rel(fit.y0, y0, 1e-7)
    assert_rel(fit.drift_per_s, drift, 1e-6)
    # y = dx/dt = y0 + D (t - tref) (IEEE 1139); interval averages y_i sit at the interval midpoints
    y = cs.fractional_frequency_from_phase(t, x)
    mid = 0.5 * (t[1:] + t[:-1])
    f = cs.frequency_drift_fit(mid, y, t_ref_s=tref)
    assert_rel(f.drift_per_s, drift, 1e-4)
    assert_rel(f.offset, y0, 1e-5)


# ---------------------------------------------------------------------------
# steps, non-monotonic epochs, groups
# ---------------------------------------------------------------------------
# Threshold chosen for these tests: 6 robust sd.  For Gaussian differences the two-sided tail
# P(|z| > 6) = erfc(6/sqrt 2) = 2.0e-9 per difference (from memory), 2e-5 over 1e4 records.
# (At 5 sd the tail is 5.7e-7, 0.006 per 1e4; one 1e4-point realization used while writing these
# tests did hold a 5.3 sd pair of consecutive white-noise values, so 5 was judged too tight.)
THRESHOLD = 6.0


def test_time_step_flagged_at_the_right_record_only():
    rng = np.random.default_rng(21)
    n, k = 10_000, 6_543
    t = 1.0e9 + np.arange(n, dtype=float)
    # white PM of 0.5 ns plus a frequency offset 1e-9 and a drift: first differences have sd
    # 0.71 ns, so a 10 ns time step is 14 sd (missed at 6 sd only if the noise is below -8 sd);
    # false positives at 6 sd: 2e-5 expected over 1e4 (see THRESHOLD)
    x = 0.5e-9 * rng.normal(size=n) + 1e-9 * (t - t[0]) + 0.5e-15 * (t - t[0]) ** 2
    x[k:] += 10e-9
    flags = cs.detect_steps(t, x, THRESHOLD, reason="time_step")
    assert flags.reason == "time_step"
    np.testing.assert_array_equal(np.flatnonzero(flags.mask), [k])
    # the score of the step is its size over the sd of the differences (0.5 ns sqrt 2), +- noise
    assert flags.score[k] == pytest.approx(10e-9 / (0.5e-9 * math.sqrt(2.0)), abs=6.0)


def test_time_step_found_in_unevenly_sampled_phase_with_frequency_offset():
    rng = np.random.default_rng(25)
    n, k = 5_000, 1_234
    t = np.cumsum(rng.uniform(1.0, 60.0, n))
    # a 1e-9 frequency offset moves x by (1 .. 60) ns between records: a phase difference is y dt
    # (IEEE 1139), so it must be removed with the rate, not as a constant, before the 0.71 ns
    # white-PM scatter of the differences is measured; the 10 ns step is then 14 sd again
    x = 1e-9 * (t - t[0]) + 0.5e-9 * rng.normal(size=n)
    x[k:] += 10e-9
    np.testing.assert_array_equal(np.flatnonzero(cs.detect_steps(t, x, THRESHOLD).mask), [k])


def test_frequency_step_flagged_at_the_right_record_only():
    rng = np.random.default_rng(22)
    n, k = 10_000, 2_718
    t = 30.0 * np.arange(n, dtype=float)
    # white FM of 5e-14: first differences sd 7.1e-14, a 1e-12 step is 14 sd
    y = 5e-14 * rng.normal(size=n) + 2e-11
    y[k:] += 1e-12
    flags = cs.detect_steps(t, y, THRESHOLD, reason="frequency_step")
    assert flags.reason == "frequency_step"
    np.testing.assert_array_equal(np.flatnonzero(flags.mask), [k])


def test_false_positive_rate_on_pure_noise():
    rng = np.random.default_rng(23)
    t = np.arange(10_000, dtype=float)
    # 1e4 points at 6 sd: expected false positives 1e4 x erfc(6/sqrt 2) = 2e-5 (Gaussian tail,
    # from memory) for white FM (iid differences) and white PM (MA(1) differences, same marginal)
    y = rng.normal(size=t.size)
    x = rng.normal(size=t.size)
    assert not cs.detect_steps(t, y, THRESHOLD, reason="frequency_step").mask.any()
    assert not cs.detect_steps(t, x, THRESHOLD, reason="time_step").mask.any()

    # calibration of the robust sigma: at 3 sd the rate must be the Gaussian erfc(3/sqrt 2) =
    # 0.27 %.  On 1e5 differences that is 270 +- 16 (binomial, from memory); 5 sd band.  A MAD
    # not scaled to sigma (factor 1.48) would flag ~4 %, far outside.
    n = 100_000
    t = np.arange(n, dtype=float)
    expected = (n - 1) * math.erfc(3.0 / math.sqrt(2.0))
    sd = math.sqrt(expected)
    for series in (rng.normal(size=n), rng.normal(size=n)):
        count = int(cs.detect_steps(t, series, 3.0).mask.sum())
        assert abs(count - expected) < 5 * sd


def test_group_boundaries_never_differenced():
    rng = np.random.default_rng(24)
    n = 3_000
    t_a = np.arange(n, dtype=float)
    x_a = 0.5e-9 * rng.normal(size=n)
    x_b = 1e-3 + 0.5e-9 * rng.normal(size=n)     # 1 ms offset between the two clocks
    x = np.concatenate([x_a, x_b])
    g = np.repeat(np.array([7, 3]), n)
    # (a) clock B's epochs follow A's: the 1 ms jump at the boundary belongs to no clock's series
    t = np.concatenate([t_a, t_a + n])
    assert not cs.detect_steps(t, x, THRESHOLD, group=g).mask.any()
    # ... while without the group array the same boundary is a step at record n
    np.testing.assert_array_equal(np.flatnonzero(cs.detect_steps(t, x, THRESHOLD).mask), [n])
    # (b) clock B restarts earlier than A ends: not a non-monotonic epoch within a clock
    t_r = np.concatenate([t_a, t_a + 500.0])
    assert not cs.non_monotonic(t_r, group=g).any()
    np.testing.assert_array_equal(np.flatnonzero(cs.non_monotonic(t_r)), [n])
    assert not cs.detect_steps(t_r, x, THRESHOLD, group=g).mask.any()
    # fractional frequency is not formed across the boundary either (NaN there only)
    y = cs.fractional_frequency_from_phase(t, x, group=g)
    np.testing.assert_array_equal(np.flatnonzero(np.isnan(y)), [n - 1])
    # a step inside clock B is still found, with clock B's own noise scale
    x2 = x.copy()
    x2[n + 1000:] += 10e-9
    np.testing.assert_array_equal(np.flatnonzero(cs.detect_steps(t_r, x2, THRESHOLD, group=g).mask),
                                  [n + 1000])


def test_non_monotonic_epochs():
    t = np.array([0.0, 1.0, 2.0, 2.0, 1.5, 3.0, np.nan, 5.0, 6.0])
    # "not strictly after its predecessor": the repeat at 3, the step back at 4; the NaN epoch at 6
    # is after nothing; 5.0 follows a missing epoch and is not compared (definition of the mask)
    np.testing.assert_array_equal(np.flatnonzero(cs.non_monotonic(t)), [3, 4, 6])


def test_short_groups_and_quantised_series():
    # relcorr's documented convention (no outside source): a MAD of 0 (quantised or constant data)
    # makes every non-zero deviation infinite in sd units, so ``min_step`` sets an absolute floor,
    # and a group with fewer than ``min_pairs`` differences has no usable scale and is not flagged
    t = np.arange(12, dtype=float)
    x = np.zeros(12)
    x[9:] = 1e-12                                  # one 1 ps tick of a quantised counter
    g = np.array([0] * 8 + [1] * 4)                # group 1 holds 3 differences
    assert not cs.detect_steps(t, x, THRESHOLD, group=g).mask.any()            # 3 < min_pairs=5
    np.testing.assert_array_equal(
        np.flatnonzero(cs.detect_steps(t, x, THRESHOLD, group=g, min_pairs=3).mask), [9])
    assert not cs.detect_steps(t, x, THRESHOLD, group=g, min_pairs=3, min_step=2e-12).mask.any()


def test_detect_steps_rejects_unknown_reason():
    with pytest.raises(ValueError):
        cs.detect_steps(np.arange(10.0), np.zeros(10), 5.0, reason="spike")


# ---------------------------------------------------------------------------
# summary
# ---------------------------------------------------------------------------
def test_summary_of_phase_series():
    tau0 = 30.0
    t = 1.1e9 + tau0 * np.arange(150)
    y0, drift = 7e-12, 1e-17
    tt = t - t[0]
    x = 2e-7 + y0 * tt + 0.5 * drift * tt ** 2
    s = cs.summary(t, x, kind="phase")
    # mean frequency over the span of y(t) = y0 + D t is its value at mid-span (IEEE 1139 y = dx/dt)
    assert_rel(s["mean_fractional_frequency"], y0 + drift * 0.5 * tt[-1], 1e-7)
    assert_rel(s["drift_per_s"], drift, 1e-5)
    assert_rel(s["drift_per_day"], drift * 86_400.0, 1e-5)
    assert s["tau0_s"] == tau0 and s["evenly_sampled"]
    # tau = m tau0 for m = 1, 10 only: 100 would need N - 2m >= 1, i.e. N >= 201 (NIST SP 1065)
    assert s["adev_tau_s"] == [tau0, 10 * tau0]
    assert s["adev_n_terms"] == [148, 130]
    # pure drift: sigma_y(tau) = D tau / sqrt 2 (derived in test_linear_frequency_drift_...)
    np.testing.assert_allclose(s["adev"], drift * np.array([tau0, 10 * tau0]) / math.sqrt(2.0),
                               rtol=1e-5)


def test_summary_of_frequency_series_with_gap_and_uneven_epochs():
    rng = np.random.default_rng(31)
    t = np.arange(5000, dtype=float)
    y = 3e-13 + 1e-13 * rng.normal(size=t.size)
    keep = np.ones(t.size, dtype=bool)
    keep[2500] = False                            # one record missing: a gap on the grid
    s = cs.summary(t[keep], y[keep], kind="frequency")
    assert s["evenly_sampled"] and s["n_used"] == 4999
    assert s["adev_tau_s"] == [1.0, 10.0, 100.0]
    # M - 2m + 1 windows (NIST SP 1065) on the 5000-point grid, minus the 2m holding the gap
    assert s["adev_n_terms"] == [5001 - 2 * m - 2 * m for m in (1, 10, 100)]
    # white FM: sigma_y(tau0) = s (Allan 1966); relative sd ~ 0.87/sqrt(n) = 1.2 %, 5 sd
    assert abs(s["adev"][0] / 1e-13 - 1.0) < 5 * nonoverlap_rel_sd(4997)
    # mean offset: sd of the fitted value at mid-span is s / sqrt(n) (OLS, from memory)
    assert abs(s["mean_fractional_frequency"] - 3e-13) < 5 * 1e-13 / math.sqrt(4999)
    # jittered epochs are on no grid: no ADEV, fits still given
    tj = t + rng.uniform(-0.2, 0.2, t.size)
    s2 = cs.summary(tj, y, kind="frequency")
    assert not s2["evenly_sampled"] and s2["adev"] == []
    assert np.isfinite(s2["drift_per_s"])
