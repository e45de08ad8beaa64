"""Stage ``gamma_fit``: least-squares estimate of PPN gamma and per-observable biases from residuals.

Uses the residuals and gamma partials of the ``light_time`` (range:
``residual``, ``dcomputed_dgamma``) and ``doppler`` (``dop_residual``,
``dop_dcomputed_dgamma``) stages, weighted by each record's ``uncertainty``,
with one bias per (observable, unit) group (``stages.physics.gamma_estimate``
eq. 1).  The whole-partition pass forms the normal equations; the manifest
keeps them with the partition's estimate, and the run's estimate combines
the partitions' normal equations (``relcorr run`` prints it).  The estimate
is ``gamma = gamma_model + delta_gamma`` with gamma_model the value the
residual stages used.  Per record: the post-fit residual and whether the
record entered the fit.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics import gamma_estimate as ge

RANGE_COLUMNS = ("residual", "dcomputed_dgamma")
DOPPLER_COLUMNS = ("dop_residual", "dop_dcomputed_dgamma")


@dataclass
class FitState:
    groups: list[str]
    solution: dict[str, Any]
    summary: dict[str, Any] = field(default_factory=dict)


def _columns(table: pa.Table, data: str):
    """(residual, partial, sigma, group labels array) with the chosen kinds merged."""
    n = table.num_rows
    names = set(table.column_names)

    def col(name):
        if name not in names:
            return np.full(n, np.nan)
        return np.asarray(pc.cast(table[name], pa.float64()).to_numpy(zero_copy_only=False), dtype=float)

    r, a = np.full(n, np.nan), np.full(n, np.nan)
    if data in ("range", "both"):
        rr, ra = col(RANGE_COLUMNS[0]), col(RANGE_COLUMNS[1])
        use = np.isfinite(rr) & np.isfinite(ra)
        r, a = np.where(use, rr, r), np.where(use, ra, a)
    if data in ("doppler", "both"):
        dr, da = col(DOPPLER_COLUMNS[0]), col(DOPPLER_COLUMNS[1])
        use = np.isfinite(dr) & np.isfinite(da)
        r, a = np.where(use, dr, r), np.where(use, da, a)
    label = pc.binary_join_element_wise(pc.fill_null(table["observable"], ""), pc.fill_null(table["unit"], ""), "/")
    return r, a, col("uncertainty"), label


class GammaFit(Stage):
    name = "gamma_fit"
    version = 1
    summary = "weighted least-squares estimate of PPN gamma (and a bias per observable) from range and Doppler residuals"
    record_kinds = ("tracking",)
    requires = (
        Column("observable", pa.string(), "", "observable type"),
        Column("unit", pa.string(), "", "unit of value"),
        Column("uncertainty", pa.float64(), "s|m|Hz|1", "one-sigma uncertainty of value"),
    )
    optional = (
        Column("residual", pa.float64(), "s|m", "range residual (light_time)"),
        Column("dcomputed_dgamma", pa.float64(), "s|m", "range partial with respect to gamma (light_time)"),
        Column("dop_residual", pa.float64(), "Hz|1", "Doppler residual (doppler)"),
        Column("dop_dcomputed_dgamma", pa.float64(), "Hz|1", "Doppler partial with respect to gamma (doppler)"),
    )
    provides = (
        Column("gamma_fit_used", pa.bool_(), "", "the record entered the gamma estimate"),
        Column("gamma_fit_residual", pa.float64(), "s|m|Hz|1",
               "post-fit residual: residual - partial * delta_gamma - bias of the record's group, record's unit"),
    )
    params = (
        Param("data", "str", "both", "residuals used: range, doppler or both", choices=("range", "doppler", "both")),
    )
    references = (
        Reference("Bertotti, Iess & Tortora 2003, Nature 425, 374", "gamma from the solar Shapiro signature"),
        Reference("Bevington & Robinson 2003, Data Reduction and Error Analysis for the Physical Sciences, ch. 7",
                  "weighted linear least squares, formal covariance"),
    )
    partition_columns = ("observable", "unit", "uncertainty") + RANGE_COLUMNS + DOPPLER_COLUMNS

    def prepare(self, columns: pa.Table, params: Mapping[str, Any], context: StageContext) -> FitState:
        r, a, s, label = _columns(columns, params["data"])
        enc = pc.dictionary_encode(label).combine_chunks()
        groups = enc.dictionary.to_pylist()
        codes = np.asarray(enc.indices.to_numpy(zero_copy_only=False), dtype=np.int64)
        usable = np.isfinite(r) & np.isfinite(a) & np.isfinite(s) & (s > 0)
        present = np.bincount(codes[usable], minlength=len(groups)) > 0  # only groups with data get a bias
        used = [g for g, p in zip(groups, present) if p]
        remap = np.cumsum(present) - 1
        ne = ge.normal_equations(np.where(usable, r, np.nan), a, s, np.where(usable, remap[codes], 0), used)
        sol = ge.solve(ne)
        return FitState(used, sol, {"normal_equations": ne, "estimate": sol, "data": params["data"]})

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        state: FitState = context.state
        r, a, s, label = _columns(table, params["data"])
        codes = np.asarray(pc.fill_null(pc.index_in(label, value_set=pa.array(state.groups, pa.string())), -1)
                           .to_numpy(zero_copy_only=False), dtype=np.int64)
        used = (codes >= 0) & np.isfinite(r) & np.isfinite(a) & np.isfinite(s) & (s > 0)
        post = ge.post_fit_residuals(r, a, codes, state.groups, state.solution)
        post = np.where(used, post, np.nan)
        return StageResult(columns={"gamma_fit_used": used, "gamma_fit_residual": post}, touched=used)
