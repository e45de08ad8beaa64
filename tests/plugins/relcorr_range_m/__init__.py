"""A third-party stage used by the tests to prove plugin discovery.

It is installed only by putting this folder on sys.path: the
``relcorr_range_m-0.1.dist-info/entry_points.txt`` beside it registers it in
the ``relcorr.stages`` group exactly as a pip-installed package would.
"""
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Param, Reference, Stage, StageResult

C_M_PER_S = 299792458.0  # exact: 17th CGPM (1983), definition of the metre


class RangeInMetres(Stage):
    name = "range_in_metres"
    version = 1
    summary = "range observables expressed in metres (value x c for values in seconds)"
    record_kinds = ("tracking",)
    requires = (
        Column("value", pa.float64(), "s|m", "observed value"),
        Column("unit", pa.string(), "", "unit of value"),
        Column("tt_sod_s", pa.float64(), "s", "TT seconds of day (forces running after time_scales)"),
    )
    provides = (Column("range_m", pa.float64(), "m", "range observable in metres"),)
    params = (Param("scale", "float", 1.0, "multiplier (for tests)", minimum=0.5, maximum=2.0),)
    references = (Reference("17th CGPM (1983), Resolution 1: definition of the metre", "c = 299 792 458 m/s"),)

    def apply(self, table, params, context):
        value = table["value"].to_numpy()
        in_s = np.asarray(pc.equal(table["unit"], "s").to_numpy(zero_copy_only=False), dtype=bool)
        metres = np.where(in_s, value * C_M_PER_S, value) * params["scale"]
        return StageResult(columns={"range_m": metres}, touched=in_s)
