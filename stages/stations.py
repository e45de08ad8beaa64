"""Stage ``stations``: ITRF positions of the receiving and transmitting stations of each record.

Looks each record's station up in a station catalogue (TOML, see
``stages.physics.station_catalogue``) and adds its ITRF position at the
record's epoch (linear plate motion).  Put it before ``time_scales`` so that
TDB becomes topocentric.
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics.file_cache import load_cached
from stages.physics.station_catalogue import CatalogueError, StationCatalogue, load_catalogue, station_itrs_m


def catalogue(path) -> StationCatalogue:
    """The catalogue at ``path``, read once per process unless the file changes."""
    return load_cached(load_catalogue, path)

_XYZ = ("x", "y", "z")


def _lookup(column, codes: np.ndarray) -> np.ndarray:
    """Index of each record's code in the catalogue, −1 where absent or null (vectorised)."""
    arr = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    if pa.types.is_dictionary(arr.type):
        arr = arr.dictionary_decode()
    idx = pc.index_in(arr, value_set=pa.array(list(codes), pa.string()))
    return np.asarray(pc.fill_null(idx, -1).to_numpy(zero_copy_only=False), dtype=np.int64)


class Stations(Stage):
    name = "stations"
    version = 1
    summary = "ITRF positions of the receiving (and transmitting) station of each record, from a station catalogue"
    record_kinds = ("tracking",)
    requires = (
        Column("station", pa.string(), "", "receiving station"),
        Column("utc_mjd", pa.int32(), "d", "UTC day of the time tag (epoch of the plate motion)"),
    )
    optional = (Column("transmit_station", pa.string(), "", "transmitting station of three-way records"),)
    provides = tuple(
        Column(f"site_itrs_{a}_m", pa.float64(), "m", f"ITRF {a.upper()} of the receiving station at the record's epoch")
        for a in _XYZ
    ) + tuple(
        Column(f"tx_site_itrs_{a}_m", pa.float64(), "m",
               f"ITRF {a.upper()} of the transmitting station (two-way: the receiving one; one-way: null)")
        for a in _XYZ
    )
    params = (Param("catalogue", "str", "stations.toml", "station catalogue file (relative to the config file)"),)
    references = (
        Reference("IERS Conventions (2010), IERS TN 36, ch. 4", "linear model of ITRF station positions X(t) = X0 + V (t - t0)"),
        Reference("NIMA TR8350.2 (WGS84), via erfa.gc2gd", "ellipsoid normal for local antenna offsets"),
    )
    quarantine_reasons = {
        "station_unknown": "the receiving or transmitting station is not in the catalogue",
        "station_without_coordinates": "the station is in the catalogue without a position",
    }

    def validate(self, params: Mapping[str, Any], context: StageContext) -> dict[str, str]:
        try:
            load_catalogue(context.path(params["catalogue"]))
        except CatalogueError as exc:
            return {"catalogue": str(exc)}
        return {}

    def model_identities(self, params, context):
        return {"station catalogue": load_catalogue(context.path(params["catalogue"])).identity}

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        cat = catalogue(context.path(params["catalogue"]))
        n = table.num_rows
        mjd = table["utc_mjd"].to_numpy().astype(float)
        rx = _lookup(table["station"], cat.codes)
        obs = table["observable"] if "observable" in table.column_names else pa.array([""] * n)
        one_way = np.asarray(pc.fill_null(pc.starts_with(obs, "range_one_way"), False).to_numpy(zero_copy_only=False)) | \
            np.asarray(pc.fill_null(pc.starts_with(obs, "doppler_one_way"), False).to_numpy(zero_copy_only=False))
        three_way = np.asarray(pc.fill_null(pc.ends_with(obs, "three_way"), False).to_numpy(zero_copy_only=False), dtype=bool)
        # links between spacecraft have no ground station: left untouched, positions null
        link = np.asarray(pc.fill_null(pc.starts_with(obs, "link_"), False).to_numpy(zero_copy_only=False), dtype=bool)
        if "transmit_station" in table.column_names:
            tx = np.where(three_way, _lookup(table["transmit_station"], cat.codes), rx)
        else:
            tx = rx.copy()
        tx_used = ~one_way & ~link
        unknown = ~link & ((rx < 0) | (tx_used & (tx < 0)))
        rx_safe, tx_safe = np.where(rx < 0, 0, rx), np.where(tx < 0, 0, tx)
        no_coords = ~link & ~unknown & (~cat.has_coordinates[rx_safe] | (tx_used & ~cat.has_coordinates[tx_safe]))
        rx_xyz = station_itrs_m(cat, rx_safe, mjd)
        tx_xyz = station_itrs_m(cat, tx_safe, mjd)
        tx_xyz[~tx_used] = np.nan
        rx_xyz[link] = np.nan
        cols = {f"site_itrs_{a}_m": rx_xyz[:, k] for k, a in enumerate(_XYZ)}
        cols.update({f"tx_site_itrs_{a}_m": tx_xyz[:, k] for k, a in enumerate(_XYZ)})
        return StageResult(columns=cols, touched=~link,
                           quarantine={"station_unknown": unknown, "station_without_coordinates": no_coords})
