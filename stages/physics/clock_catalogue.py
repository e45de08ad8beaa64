"""Clock catalogue: where each clock is (relcorr's own TOML format).

Format (version 1)::

    format = "relcorr-clocks/1"

    [clocks.MRT2-RB]                   # a clock on board a satellite
    kind = "orbiting"
    semi_major_axis_m = 26561750.0     # osculating two-body elements in the GCRS
    eccentricity = 0.012
    inclination_deg = 55.0
    raan_deg = 40.0                    # right ascension of the ascending node
    argument_of_perigee_deg = 10.0
    mean_anomaly_deg = 0.0             # at elements_epoch
    elements_epoch_tt = 2016-12-31T00:00:00   # TOML local date-time, read as TT

    [clocks.WREN-CS]                   # an orbiting clock whose orbit is a state table
    kind = "orbiting"
    states = "wren-orbit.parquet"      # relcorr state table (see stages.physics.spacecraft_ephemeris),
    states_target = "WREN"             # centre "earth"; path relative to this catalogue file

    [clocks.NORTHLAB-HM1]              # a clock in a ground laboratory
    kind = "ground"
    station = "CFL"                    # its position comes from the station catalogue
    height_above_geoid_m = 312.4       # orthometric height of the clock

A clock on the geoid keeps TT (IAU 2000 Resolution B1.9); a ground clock's
rate against TT is then g H / c^2 to first order in its height H above the
geoid (IERS Conventions 2010 ch. 10; about 1.09e-16 per metre).
"""
from __future__ import annotations

import datetime
import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from stages.physics.catalogue_file import name_index, read_catalogue

FORMAT = "relcorr-clocks/1"
MJD_OF_ORDINAL_ZERO = -678576

ORBIT_KEYS = ("semi_major_axis_m", "eccentricity", "inclination_deg", "raan_deg", "argument_of_perigee_deg",
              "mean_anomaly_deg")
GROUND_KEYS = ("station", "height_above_geoid_m")


class ClockCatalogueError(ValueError):
    """A malformed catalogue: the message names the file and the key."""


@dataclass(frozen=True)
class ClockCatalogue:
    codes: np.ndarray               # (k,) object
    orbiting: np.ndarray            # (k,) bool
    elements: np.ndarray            # (k, 6): a_m, e, i_rad, raan_rad, argp_rad, M0_rad (NaN for ground)
    epoch_tt_mjd: np.ndarray        # (k,) int64
    epoch_tt_sod_s: np.ndarray      # (k,) float
    station: np.ndarray             # (k,) object ('' for orbiting)
    states_file: np.ndarray         # (k,) object: state table path ('' for elements or ground)
    states_target: np.ndarray       # (k,) object
    height_above_geoid_m: np.ndarray  # (k,) (NaN for orbiting)
    identity: dict

    def index(self, names) -> np.ndarray:
        """Catalogue index of each name, -1 where unknown or null (an Arrow column, or a sequence of str)."""
        return name_index(self.codes, names)


def _number(path, key, value, lo=None, hi=None):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
        raise ClockCatalogueError(f"{path}: {key}: found {value!r}, expected a number")
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        raise ClockCatalogueError(f"{path}: {key}: found {value!r}, expected a number in [{lo}, {hi}]")
    return float(value)


def load_clock_catalogue(path: str | Path) -> ClockCatalogue:
    path = Path(path)
    raw, _, clocks = read_catalogue(path, FORMAT, "clocks", "NAME", ClockCatalogueError)
    codes, orbiting, elements, ep_mjd, ep_sod, station, height = [], [], [], [], [], [], []
    states_file, states_target = [], []
    for code in sorted(clocks):  # loop over catalogue entries, not records
        entry = clocks[code]
        key = f"clocks.{code}"
        if not isinstance(entry, dict):
            raise ClockCatalogueError(f"{path}: {key}: expected a table")
        kind = entry.get("kind")
        if kind == "orbiting" and "states" in entry:
            allowed = {"kind", "name", "states", "states_target"}
        elif kind == "orbiting":
            allowed = {"kind", "elements_epoch_tt", "name", *ORBIT_KEYS}
        elif kind == "ground":
            allowed = {"kind", "name", *GROUND_KEYS}
        else:
            raise ClockCatalogueError(f"{path}: {key}.kind: found {kind!r}, expected 'orbiting' or 'ground'")
        extra = sorted(set(entry) - allowed)
        if extra:
            raise ClockCatalogueError(f"{path}: {key}.{extra[0]}: unknown key; expected one of {', '.join(sorted(allowed))}")
        codes.append(code)
        if kind == "orbiting" and "states" in entry:
            target = entry.get("states_target")
            if not isinstance(entry["states"], str) or not entry["states"]:
                raise ClockCatalogueError(f"{path}: {key}.states: found {entry['states']!r}, expected a state-table file name")
            if not isinstance(target, str) or not target:
                raise ClockCatalogueError(f"{path}: {key}.states_target: found {target!r}, expected the target's name in the state table")
            states_path = Path(entry["states"])
            states_file.append(str(states_path if states_path.is_absolute() else path.resolve().parent / states_path))
            states_target.append(target)
            orbiting.append(True)
            elements.append([np.nan] * 6)
            ep_mjd.append(0)
            ep_sod.append(0.0)
            station.append("")
            height.append(np.nan)
            continue
        states_file.append("")
        states_target.append("")
        if kind == "orbiting":
            for k in ORBIT_KEYS:
                if k not in entry:
                    raise ClockCatalogueError(f"{path}: {key}.{k}: missing; expected a number")
            a = _number(path, f"{key}.semi_major_axis_m", entry["semi_major_axis_m"], 6.5e6, 1e9)
            e = _number(path, f"{key}.eccentricity", entry["eccentricity"], 0.0, 0.99)
            angles = [np.radians(_number(path, f"{key}.{k}", entry[k], -360.0, 360.0)) for k in ORBIT_KEYS[2:]]
            ep = entry.get("elements_epoch_tt")
            if not isinstance(ep, datetime.datetime) or ep.tzinfo is not None:
                raise ClockCatalogueError(f"{path}: {key}.elements_epoch_tt: found {ep!r}, "
                                          "expected a TOML local date-time such as 2016-12-31T00:00:00")
            orbiting.append(True)
            elements.append([a, e, *angles])
            ep_mjd.append(ep.date().toordinal() + MJD_OF_ORDINAL_ZERO)
            ep_sod.append(ep.hour * 3600.0 + ep.minute * 60.0 + ep.second + ep.microsecond * 1e-6)
            station.append("")
            height.append(np.nan)
        else:
            st = entry.get("station")
            if not isinstance(st, str) or not st:
                raise ClockCatalogueError(f"{path}: {key}.station: found {st!r}, expected a station code of the station catalogue")
            if "height_above_geoid_m" not in entry:
                raise ClockCatalogueError(f"{path}: {key}.height_above_geoid_m: missing; expected a number")
            orbiting.append(False)
            elements.append([np.nan] * 6)
            ep_mjd.append(0)
            ep_sod.append(0.0)
            station.append(st)
            height.append(_number(path, f"{key}.height_above_geoid_m", entry["height_above_geoid_m"], -500.0, 9000.0))
    return ClockCatalogue(
        codes=np.array(codes, dtype=object), orbiting=np.array(orbiting), elements=np.array(elements, dtype=float),
        epoch_tt_mjd=np.array(ep_mjd, dtype=np.int64), epoch_tt_sod_s=np.array(ep_sod),
        station=np.array(station, dtype=object), height_above_geoid_m=np.array(height),
        states_file=np.array(states_file, dtype=object), states_target=np.array(states_target, dtype=object),
        identity={"file": path.name, "sha256": hashlib.sha256(raw).hexdigest(), "format": FORMAT},
    )
