"""Stage ``sagnac``: the Sagnac correction of a time-transfer signal between a ground clock and a satellite clock.

For a comparison of an orbiting clock with a ground clock made with a
one-way signal whose propagation delay was computed in the Earth-fixed
frame as the straight distance over c, the true coordinate light time in
that rotating frame is longer by

    Delta t = omega (x1 y2 - x2 y1) / c^2 = 2 omega A_z / c^2        (Ashby 2003, sec. 2)

with r1 the transmitter at emission and r2 the receiver at reception, both
in the ITRS.  Sign convention (column ``sagnac_s``): positive when the
signal travels eastward.  ``direction`` says which way the signal went:
``downlink`` (satellite -> ground; the record's time tag is the reception
at the ground) or ``uplink`` (ground -> satellite; the tag is the reception
on board).  ``sagnac_offset_correction_s`` is what must be added to a
``time_offset`` record (remote - reference) formed with the Earth-fixed
straight-line delay: +Delta t for a downlink from the remote (orbiting)
clock, -Delta t for an uplink to it.  The ``clock_rate`` stage adds it to its
corrected value when this stage runs first.

The satellite's ITRS position comes from its orbit (clock catalogue) and the
GCRS -> ITRS rotation of ``earth_rotation`` (the transpose of ITRS -> GCRS),
at the emission or reception instant (the light time is iterated twice).
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stages.base import Column, Param, Reference, Stage, StageContext, StageResult
from stages.physics import clock_rates as cr
from stages.physics import constants as K
from stages.physics.clock_catalogue import ClockCatalogueError, load_clock_catalogue
from stages.physics.earth_rotation import itrs_to_gcrs
from stages.physics.station_catalogue import CatalogueError, load_catalogue, station_itrs_m
from stages.physics.file_cache import load_cached


def gcrs_to_itrs_m(x_gcrs_m, utc_mjd, utc_sod_s, tt_mjd, tt_sod_s) -> np.ndarray:
    """GCRS -> ITRS position: the transpose of the ITRS -> GCRS rotation of ``earth_rotation``
    (IERS TN36 eq. 5.1), whose columns are the images of the ITRS unit vectors."""
    n = len(x_gcrs_m)
    cols = [itrs_to_gcrs(np.tile(e, (n, 1)), utc_mjd, utc_sod_s, tt_mjd, tt_sod_s).pos_m for e in np.eye(3)]
    m = np.stack(cols, axis=2)  # (n, 3, 3): m[:, :, j] = image of e_j
    return np.einsum("nji,nj->ni", m, x_gcrs_m)


class Sagnac(Stage):
    name = "sagnac"
    version = 1
    summary = "Sagnac correction of ground-satellite time-transfer signals computed in the Earth-fixed frame"
    record_kinds = ("clock",)
    requires = (
        Column("remote_clock", pa.string(), "", "remote clock"),
        Column("reference_clock", pa.string(), "", "reference clock"),
        Column("utc_mjd", pa.int32(), "d", "UTC day of the time tag"),
        Column("utc_sod_ps", pa.int64(), "ps", "UTC picoseconds of day"),
        Column("tt_mjd", pa.int32(), "d", "TT day"),
        Column("tt_sod_s", pa.float64(), "s", "TT seconds of day"),
    )
    optional = (Column("observable", pa.string(), "", "time_offset records are the ones the correction touches"),)
    provides = (
        Column("sagnac_s", pa.float64(), "s",
               "Sagnac term omega (x1 y2 - x2 y1)/c^2 of the signal, ITRS; positive eastward (Ashby 2003 sec. 2)"),
        Column("sagnac_offset_correction_s", pa.float64(), "s",
               "to add to a time_offset record formed with the Earth-fixed straight-line delay (downlink +, uplink -)"),
        Column("link_distance_m", pa.float64(), "m", "Earth-fixed distance between emission and reception points"),
    )
    params = (
        Param("clocks", "str", "clocks.toml", "clock catalogue (relative to the config file)"),
        Param("stations", "str", "stations.toml", "station catalogue (relative to the config file)"),
        Param("direction", "str", "downlink", "signal direction: satellite -> ground or ground -> satellite",
              choices=("downlink", "uplink")),
    )
    references = (
        Reference("Ashby 2003, Living Rev. Relativity 6, 1, sec. 2", "Sagnac correction 2 omega A / c^2"),
        Reference("IERS Conventions (2010), IERS TN 36, ch. 5", "GCRS <-> ITRS"),
    )
    quarantine_reasons = {}

    def validate(self, params, context):
        problems = {}
        for key, loader, err in (("clocks", load_clock_catalogue, ClockCatalogueError), ("stations", load_catalogue, CatalogueError)):
            try:
                loader(context.path(params[key]))
            except err as exc:
                problems[key] = str(exc)
        return problems

    def model_identities(self, params, context):
        from stages.physics.earth_orientation import eop_identity

        return {"clock catalogue": load_clock_catalogue(context.path(params["clocks"])).identity,
                "station catalogue": load_catalogue(context.path(params["stations"])).identity,
                "earth orientation": eop_identity(context.span_mjd)}

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        n = table.num_rows
        clocks = load_cached(load_clock_catalogue, context.path(params["clocks"]))
        stations = load_cached(load_catalogue, context.path(params["stations"]))
        remote = clocks.index(table["remote_clock"])
        reference = clocks.index(table["reference_clock"])
        known = (remote >= 0) & (reference >= 0)
        r, f = np.where(known, remote, 0), np.where(known, reference, 0)
        # the orbiting end and the ground end of each comparison
        sat_is_remote = clocks.orbiting[r] & ~clocks.orbiting[f]
        sat_is_reference = clocks.orbiting[f] & ~clocks.orbiting[r]
        sat = np.where(sat_is_remote, r, f)
        gnd = np.where(sat_is_remote, f, r)
        st_index = {c: i for i, c in enumerate(stations.codes)}
        gst = np.array([st_index.get(c, -1) for c in clocks.station], dtype=np.int64)[gnd]  # per catalogue clock
        ok = known & (sat_is_remote | sat_is_reference) & (gst >= 0)
        ok &= np.where(gst >= 0, stations.has_coordinates[np.where(gst >= 0, gst, 0)], False)
        out = {c.name: np.full(n, np.nan) for c in self.provides}
        idx = np.flatnonzero(ok)
        if idx.size:
            utc_mjd = table["utc_mjd"].to_numpy().astype(np.int64)[idx]
            utc_s = table["utc_sod_ps"].to_numpy()[idx] / 1e12
            tt_mjd = table["tt_mjd"].to_numpy().astype(np.int64)[idx]
            tt_s = table["tt_sod_s"].to_numpy()[idx]
            ground = station_itrs_m(stations, gst[idx], utc_mjd.astype(float))
            el = clocks.elements[sat[idx]]
            ep_mjd, ep_sod = clocks.epoch_tt_mjd[sat[idx]], clocks.epoch_tt_sod_s[sat[idx]]
            t_since = (tt_mjd - ep_mjd) * 86400.0 + (tt_s - ep_sod)   # TT seconds since the elements' epoch
            # the ITRS -> GCRS matrix at the tag, once; at the emission instant (70-90 ms earlier for a
            # downlink) the Earth has turned by omega * delay about the pole: M(t - d) = M(t) R3(omega d)
            # up to polar motion x precession-nutation over that interval (< 1e-11 rad)
            m_t = np.stack([itrs_to_gcrs(np.tile(e, (idx.size, 1)), utc_mjd, utc_s, tt_mjd, tt_s).pos_m
                            for e in np.eye(3)], axis=2)
            delay = np.zeros(idx.size)
            for _ in range(2):  # light time: 70-90 ms, twice is exact to well under 1 ns
                shift = -delay if params["direction"] == "downlink" else np.zeros(idx.size)
                pos, _, _ = cr.kepler_state(*el.T, 0.0, t_since + shift)
                body = np.einsum("nji,nj->ni", m_t, pos)            # M(t)^T x: ITRS axes of the tag
                ang = cr.EARTH_ROTATION_RATE_RAD_PER_S * shift     # negative: earlier
                ca, sa = np.cos(ang), np.sin(ang)
                # the satellite in the ITRS axes of the emission instant: R3(omega * shift) applied
                sat_itrs = np.stack([ca * body[:, 0] + sa * body[:, 1], -sa * body[:, 0] + ca * body[:, 1], body[:, 2]], 1)
                dist = np.linalg.norm(sat_itrs - ground, axis=1)
                delay = dist / K.C_M_PER_S
            if params["direction"] == "downlink":
                dt = cr.sagnac_s(sat_itrs, ground)
                correction = np.where(sat_is_remote[idx], dt, -dt)
            else:
                dt = cr.sagnac_s(ground, sat_itrs)
                correction = np.where(sat_is_remote[idx], -dt, dt)
            out["sagnac_s"][idx] = dt
            out["sagnac_offset_correction_s"][idx] = correction
            out["link_distance_m"][idx] = dist
        is_offset = np.asarray(pc.fill_null(pc.equal(table["observable"], "time_offset"), False)
                               .to_numpy(zero_copy_only=False), dtype=bool) if "observable" in table.column_names else ok
        return StageResult(columns=out, touched=ok & is_offset)
