"""stages.physics.gamma_estimate against numpy's least-squares solver (reference library).

Weighted linear least squares: x = argmin |W^1/2 (A x - r)|^2, covariance (A^T W A)^-1
(Bevington & Robinson 2003, Data Reduction and Error Analysis, ch. 7); numpy.linalg.lstsq on the
row-scaled system A/sigma, r/sigma is an independent solution of the same problem.
"""
from __future__ import annotations

import numpy as np
import pytest

from stages.physics import gamma_estimate as ge


def _problem(seed=0, n=500):
    rng = np.random.default_rng(seed)
    groups = ["range_two_way/s", "doppler_two_way/Hz", "range_two_way/m"]
    codes = rng.integers(0, 3, n)
    partial = rng.normal(0, 1, n) * np.array([1e-4, 1e-2, 3e4])[codes]
    sigma = rng.uniform(0.5, 2.0, n) * np.array([1e-9, 1e-3, 0.3])[codes]
    bias = np.array([2e-9, -5e-4, 0.1])
    dgamma = 2e-5
    r = partial * dgamma + bias[codes] + rng.normal(0, 1, n) * sigma
    return r, partial, sigma, codes, groups


def _lstsq(r, partial, sigma, codes, k):
    a = np.zeros((r.size, k + 1))
    a[:, 0] = partial
    a[np.arange(r.size), 1 + codes] = 1.0
    aw, rw = a / sigma[:, None], r / sigma
    x, *_ = np.linalg.lstsq(aw, rw, rcond=None)
    cov = np.linalg.inv(aw.T @ aw)
    return x, cov, float(np.sum((aw @ x - rw) ** 2))


def test_matches_numpy_lstsq():
    r, a, s, g, groups = _problem()
    sol = ge.solve(ge.normal_equations(r, a, s, g, groups))
    x, cov, chi2 = _lstsq(r, a, s, g, len(groups))
    assert sol["delta_gamma"] == pytest.approx(x[0], rel=1e-9, abs=0)
    assert sol["delta_gamma_sigma"] == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-9, abs=0)
    for j, label in enumerate(groups, start=1):
        assert sol["biases"][label]["value"] == pytest.approx(x[j], rel=1e-7, abs=0)
        assert sol["biases"][label]["sigma"] == pytest.approx(np.sqrt(cov[j, j]), rel=1e-9, abs=0)
    assert sol["chi2"] == pytest.approx(chi2, rel=1e-6)
    assert sol["dof"] == r.size - 4


def test_partitions_combine_to_the_whole():
    r, a, s, g, groups = _problem(1, 900)
    whole = ge.solve(ge.normal_equations(r, a, s, g, groups))
    # three parts, each naming its groups in its own order (one part lacks a group entirely)
    parts = []
    for sl, order in ((slice(0, 300), [2, 0, 1]), (slice(300, 600), [1, 0, 2]), (slice(600, 900), [0, 1])):
        keep = np.isin(g[sl], order)
        remap = {old: new for new, old in enumerate(order)}
        codes = np.array([remap[c] for c in g[sl][keep]])
        parts.append(ge.normal_equations(r[sl][keep], a[sl][keep], s[sl][keep], codes, [groups[o] for o in order]))
    rest = ~np.isin(g[600:900], [0, 1])
    parts.append(ge.normal_equations(r[600:900][rest], a[600:900][rest], s[600:900][rest],
                                     np.zeros(rest.sum(), dtype=int), [groups[2]]))
    combined = ge.solve(ge.combine(parts))
    assert combined["delta_gamma"] == pytest.approx(whole["delta_gamma"], rel=1e-10, abs=0)
    assert combined["delta_gamma_sigma"] == pytest.approx(whole["delta_gamma_sigma"], rel=1e-12, abs=0)
    assert combined["records"] == whole["records"] == 900


def test_unusable_records_are_skipped_and_counted():
    r, a, s, g, groups = _problem(2, 100)
    r[0], a[1], s[2], s[3] = np.nan, np.inf, 0.0, -1.0
    ne = ge.normal_equations(r, a, s, g, groups)
    assert ne["records"] == 96 and ne["records_skipped"] == 4
    keep = np.ones(100, bool)
    keep[:4] = False
    x, _, _ = _lstsq(r[keep], a[keep], s[keep], g[keep], 3)
    assert ge.solve(ne)["delta_gamma"] == pytest.approx(x[0], rel=1e-9, abs=0)


def test_no_sensitivity_to_gamma_gives_no_estimate():
    r, a, s, g, groups = _problem(3, 50)
    sol = ge.solve(ge.normal_equations(r, np.zeros_like(a), s, g, groups))
    assert sol["delta_gamma"] is None and "gamma" in sol["note"]
    post = ge.post_fit_residuals(r, a, g, groups, sol)
    assert np.isnan(post).all()
