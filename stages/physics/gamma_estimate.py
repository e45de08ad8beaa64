"""Weighted least-squares estimate of PPN gamma (and biases) from residuals.

Model, linearised about the gamma the residuals were computed with
(gamma_model)::

    r_i = (dC_i/dgamma) * dgamma + b_g(i) + e_i,      e_i ~ N(0, sigma_i^2)      (1)

r_i the residual (observed - computed) of record i in its own unit,
dC_i/dgamma the partial of the computed observable (``light_time`` eq. 3;
for Doppler differenced over the count), b_g one constant bias per group
g = (observable, unit) in that unit.  The normal equations
``N x = u`` with ``N = A^T W A``, ``u = A^T W r``, ``W = diag(1/sigma^2)``
are additive over records, so partitions are reduced separately
(:func:`normal_equations`) and combined by summing (:func:`combine`); the
solution (:func:`solve`) gives x = N^-1 u and the formal covariance N^-1
(e.g. Bevington & Robinson 2003, *Data Reduction and Error Analysis*,
ch. 7; Press et al. 2007, *Numerical Recipes* 3rd ed., sec. 15.4).  The
residuals being linear in (1+gamma) (``light_time`` eq. 1), one step is exact
except for the Sun's bending term (relative 4e-4 of the step at 1.6 solar
radii).  The a-posteriori factor sqrt(chi^2/dof) is reported beside the
formal sigma, not applied.
"""
from __future__ import annotations

from typing import Any, Sequence

import numpy as np

__all__ = ["normal_equations", "combine", "solve", "post_fit_residuals"]


def normal_equations(residual, partial, sigma, group_codes, groups: Sequence[str]) -> dict[str, Any]:
    """Normal equations of eq. (1) for one set of records (JSON-ready dict).

    ``residual``, ``partial``, ``sigma``: (n,) arrays in each record's unit;
    ``group_codes``: (n,) int index into ``groups`` (labels of the bias
    groups).  Records with a non-finite residual or partial, or a sigma that
    is not positive and finite, are left out (counted in ``records_skipped``).
    Unknowns: [dgamma, b_0, ..., b_{k-1}].
    """
    r = np.asarray(residual, dtype=float)
    a = np.asarray(partial, dtype=float)
    s = np.asarray(sigma, dtype=float)
    g = np.asarray(group_codes, dtype=np.int64)
    k = len(groups)
    use = np.isfinite(r) & np.isfinite(a) & np.isfinite(s) & (s > 0)
    w = np.where(use, 1.0 / np.where(use, s, 1.0) ** 2, 0.0)
    r0 = np.where(use, r, 0.0)
    a0 = np.where(use, a, 0.0)
    nmat = np.zeros((k + 1, k + 1))
    vec = np.zeros(k + 1)
    nmat[0, 0] = np.sum(w * a0 * a0)
    vec[0] = np.sum(w * a0 * r0)
    gw = np.bincount(g, weights=w, minlength=k)[:k]             # sums per group: a loop-free reduction
    nmat[1:, 1:] = np.diag(gw)
    cross = np.bincount(g, weights=w * a0, minlength=k)[:k]
    nmat[0, 1:] = cross
    nmat[1:, 0] = cross
    vec[1:] = np.bincount(g, weights=w * r0, minlength=k)[:k]
    counts = np.bincount(g[use], minlength=k)[:k]
    return {
        "unknowns": ["delta_gamma"] + [f"bias[{x}]" for x in groups],
        "groups": list(groups),
        "group_records": [int(c) for c in counts],
        "normal_matrix": nmat.tolist(),
        "normal_vector": vec.tolist(),
        "weighted_rss": float(np.sum(w * r0 * r0)),
        "records": int(use.sum()),
        "records_skipped": int((~use).sum()),
    }


def combine(parts: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """Sum normal equations of several parts (partitions), aligning bias groups by label."""
    groups: list[str] = []
    for p in parts:
        for x in p["groups"]:
            if x not in groups:
                groups.append(x)
    k = len(groups)
    nmat = np.zeros((k + 1, k + 1))
    vec = np.zeros(k + 1)
    counts = np.zeros(k, dtype=np.int64)
    rss, n, skipped = 0.0, 0, 0
    for p in parts:
        idx = np.array([0] + [1 + groups.index(x) for x in p["groups"]])
        nmat[np.ix_(idx, idx)] += np.asarray(p["normal_matrix"], dtype=float)
        vec[idx] += np.asarray(p["normal_vector"], dtype=float)
        counts[idx[1:] - 1] += np.asarray(p["group_records"], dtype=np.int64)
        rss += p["weighted_rss"]
        n += p["records"]
        skipped += p["records_skipped"]
    return {"unknowns": ["delta_gamma"] + [f"bias[{x}]" for x in groups], "groups": groups,
            "group_records": counts.tolist(), "normal_matrix": nmat.tolist(), "normal_vector": vec.tolist(),
            "weighted_rss": rss, "records": n, "records_skipped": skipped}


def solve(ne: dict[str, Any]) -> dict[str, Any]:
    """Solve combined normal equations.  Unknowns without data (empty groups, or no
    sensitivity to gamma) are left out; returns estimates, formal sigmas,
    the gamma-bias correlations and chi^2 (JSON-ready; None where undefined)."""
    nmat = np.asarray(ne["normal_matrix"], dtype=float)
    vec = np.asarray(ne["normal_vector"], dtype=float)
    keep = np.flatnonzero(np.diag(nmat) > 0)
    out: dict[str, Any] = {"records": ne["records"], "delta_gamma": None, "delta_gamma_sigma": None,
                           "biases": {}, "chi2": None, "dof": None, "sqrt_reduced_chi2": None}
    if keep.size == 0 or keep[0] != 0:
        out["note"] = "no record sensitive to gamma"
        return out
    sub = nmat[np.ix_(keep, keep)]
    try:
        cov = np.linalg.inv(sub)
    except np.linalg.LinAlgError:
        out["note"] = "normal matrix singular (gamma not separable from the biases)"
        return out
    x = cov @ vec[keep]
    chi2 = ne["weighted_rss"] - float(x @ vec[keep])      # r'Wr - x'u at the solution
    dof = ne["records"] - keep.size
    out["delta_gamma"] = float(x[0])
    out["delta_gamma_sigma"] = float(np.sqrt(cov[0, 0]))
    for j, col in enumerate(keep[1:], start=1):
        label = ne["groups"][col - 1]
        corr = cov[0, j] / np.sqrt(cov[0, 0] * cov[j, j])
        out["biases"][label] = {"value": float(x[j]), "sigma": float(np.sqrt(cov[j, j])),
                                "correlation_with_gamma": float(corr),
                                "records": int(ne["group_records"][col - 1])}
    out["chi2"] = float(max(chi2, 0.0))
    out["dof"] = int(dof)
    out["sqrt_reduced_chi2"] = float(np.sqrt(max(chi2, 0.0) / dof)) if dof > 0 else None
    return out


def post_fit_residuals(residual, partial, group_codes, groups: Sequence[str], solution: dict[str, Any]) -> np.ndarray:
    """r_i - dC_i/dgamma * dgamma - b_g(i) with the solved values (NaN where eq. (1) had no solution)."""
    r = np.asarray(residual, dtype=float)
    if solution.get("delta_gamma") is None:
        return np.full(r.shape, np.nan)
    bias = np.array([solution["biases"].get(g, {}).get("value", 0.0) for g in groups] + [0.0])
    g = np.asarray(group_codes, dtype=np.int64)
    return r - np.asarray(partial, dtype=float) * solution["delta_gamma"] - bias[np.where(g < 0, len(groups), g)]
