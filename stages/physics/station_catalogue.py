"""Station catalogue: ITRF coordinates of tracking stations (relcorr's own TOML format).

Format (version 1)::

    format = "relcorr-stations/1"

    [stations.CFL]
    name = "Corrie Fell"                          # free text
    position_m = [3985612.31, -81322.47, 4962901.08]   # ITRF X, Y, Z at the reference epoch
    velocity_m_per_yr = [-0.0141, 0.0163, 0.0105]      # ITRF velocity (plate motion)
    reference_epoch = 2020-01-01                  # TOML date: epoch of position_m
    antenna_offset_enu_m = [0.0, 0.0, 12.5]       # optional: marker -> antenna reference point,
                                                  # local east, north, up (WGS84 ellipsoid normal)

A station listed without ``position_m`` is known but has no coordinates yet
(records from it are quarantined as ``station_without_coordinates``).

Position at an epoch t (IERS Conventions 2010, TN36 ch. 4, linear model of
the regularised position): X(t) = X0 + V·(t − t0), t − t0 in Julian years of
365.25 days (common practice).  The up direction of the antenna offset is
the normal of the WGS84 ellipsoid at the station (erfa.gc2gd, NIMA TR8350.2).
"""
from __future__ import annotations

import datetime
import hashlib
from dataclasses import dataclass
from pathlib import Path

import erfa
import numpy as np

from stages.physics.catalogue_file import read_catalogue

FORMAT = "relcorr-stations/1"
DAYS_PER_JULIAN_YEAR = 365.25
MJD_OF_ORDINAL_ZERO = -678576  # MJD = date.toordinal() - 678576 (MJD 0 = 1858-11-17)


class CatalogueError(ValueError):
    """A malformed catalogue: the message names the file and the key."""


@dataclass(frozen=True)
class StationCatalogue:
    codes: np.ndarray            # (k,) object: station codes
    position_m: np.ndarray       # (k, 3) ITRF at reference epoch (+ antenna offset); NaN if none
    velocity_m_per_yr: np.ndarray  # (k, 3)
    epoch_mjd: np.ndarray        # (k,)
    has_coordinates: np.ndarray  # (k,) bool
    identity: dict


def _vec3(path, key, value) -> np.ndarray:
    if not (isinstance(value, list) and len(value) == 3 and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)):
        raise CatalogueError(f"{path}: {key}: found {value!r}, expected an array of three numbers")
    arr = np.array(value, dtype=float)
    if not np.isfinite(arr).all():
        raise CatalogueError(f"{path}: {key}: found {value!r}, expected finite numbers")
    return arr


def enu_to_itrs_m(position_m: np.ndarray, enu_m: np.ndarray) -> np.ndarray:
    """Rotate a local (east, north, up) offset at a station into ITRS axes.

    Geodetic latitude/longitude on WGS84 from erfa.gc2gd; the standard local
    frame: e = (−sin λ, cos λ, 0), n = (−sin φ cos λ, −sin φ sin λ, cos φ),
    u = (cos φ cos λ, cos φ sin λ, sin φ) (common practice).
    """
    lon, lat, _ = erfa.gc2gd(1, position_m)
    sl, cl, sp, cp = np.sin(lon), np.cos(lon), np.sin(lat), np.cos(lat)
    e = np.array([-sl, cl, 0.0])
    n = np.array([-sp * cl, -sp * sl, cp])
    u = np.array([cp * cl, cp * sl, sp])
    return enu_m[0] * e + enu_m[1] * n + enu_m[2] * u


def load_catalogue(path: str | Path) -> StationCatalogue:
    path = Path(path)
    raw, doc, stations = read_catalogue(path, FORMAT, "stations", "CODE", CatalogueError)
    unknown_top = set(doc) - {"format", "stations"}
    if unknown_top:
        raise CatalogueError(f"{path}: {sorted(unknown_top)[0]}: unknown key; expected format, stations")
    allowed = {"name", "position_m", "velocity_m_per_yr", "reference_epoch", "antenna_offset_enu_m"}
    codes, pos, vel, epoch, has = [], [], [], [], []
    for code in sorted(stations):  # loop over catalogue entries, not records
        entry = stations[code]
        key = f"stations.{code}"
        if not isinstance(entry, dict):
            raise CatalogueError(f"{path}: {key}: expected a table")
        extra = set(entry) - allowed
        if extra:
            raise CatalogueError(f"{path}: {key}.{sorted(extra)[0]}: unknown key; expected one of {', '.join(sorted(allowed))}")
        codes.append(code)
        if "position_m" not in entry:
            has.append(False)
            pos.append(np.full(3, np.nan))
            vel.append(np.zeros(3))
            epoch.append(np.nan)
            continue
        p = _vec3(path, f"{key}.position_m", entry["position_m"])
        r = float(np.linalg.norm(p))
        if not 6.3e6 < r < 6.4e6:
            raise CatalogueError(f"{path}: {key}.position_m: found a geocentric distance of {r:.1f} m, "
                                 "expected an ITRF position near the Earth's surface (6.3e6..6.4e6 m)")
        v = _vec3(path, f"{key}.velocity_m_per_yr", entry.get("velocity_m_per_yr", [0.0, 0.0, 0.0]))
        ep = entry.get("reference_epoch")
        if not isinstance(ep, datetime.date) or isinstance(ep, datetime.datetime):
            raise CatalogueError(f"{path}: {key}.reference_epoch: found {ep!r}, expected a TOML date such as 2020-01-01")
        if "antenna_offset_enu_m" in entry:
            p = p + enu_to_itrs_m(p, _vec3(path, f"{key}.antenna_offset_enu_m", entry["antenna_offset_enu_m"]))
        has.append(True)
        pos.append(p)
        vel.append(v)
        epoch.append(float(ep.toordinal() + MJD_OF_ORDINAL_ZERO))
    return StationCatalogue(
        codes=np.array(codes, dtype=object),
        position_m=np.array(pos),
        velocity_m_per_yr=np.array(vel),
        epoch_mjd=np.array(epoch),
        has_coordinates=np.array(has),
        identity={"file": path.name, "sha256": hashlib.sha256(raw).hexdigest(), "format": FORMAT},
    )


def station_itrs_m(cat: StationCatalogue, index: np.ndarray, mjd: np.ndarray) -> np.ndarray:
    """ITRF position (n, 3) of catalogue entries ``index`` at epochs ``mjd`` (linear plate motion)."""
    years = (np.asarray(mjd, dtype=float) - cat.epoch_mjd[index]) / DAYS_PER_JULIAN_YEAR
    return cat.position_m[index] + cat.velocity_m_per_yr[index] * years[:, None]
