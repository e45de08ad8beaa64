"""UTC leap-second table, read offline from the astropy-iers-data package.

The file is the IERS ``Leap_Second.dat`` shipped inside the
``astropy-iers-data`` wheel (path ``astropy.utils.iers.IERS_LEAP_SECOND_FILE``).
It is parsed here directly with the standard library; nothing is ever
downloaded.  Each data line reads ``MJD day month year TAI-UTC``: the value of
TAI - UTC (IERS Bulletin C) in force from 0h UTC of that MJD until the next
line's MJD.  A comment line ``File expires on DD Month YYYY`` gives the last
date for which the table is known to be complete.

Only the integer-second era of UTC (from 1972-01-01 = MJD 41317 on, ITU-R
Recommendation TF.460) is kept: before it UTC had fractional offsets and rate
changes, which relcorr does not support.

Conventions (ITU-R TF.460; IERS Bulletin C): a positive leap second is
inserted as ``23:59:60`` at the end of the UTC day *before* a line's MJD,
so that day has 86401 SI seconds; a negative one (never used so far) would
remove ``23:59:59`` and leave 86399 SI seconds.
"""

from __future__ import annotations

import datetime as _dt
import functools
import hashlib
import os
import re
from dataclasses import dataclass, field

import numpy as np

SPAN_START_MJD = 41317  # 1972-01-01, first day of integer-second UTC (ITU-R TF.460)

_MJD_EPOCH_ORDINAL = _dt.date(1858, 11, 17).toordinal()  # MJD 0 (definition of MJD)
_MONTHS = ("jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec")
_EXPIRES_RE = re.compile(r"^#\s*File expires on\s+(\d{1,2})\s+([A-Za-z]+)\s+(\d{4})")


def _mjd_from_date(year: int, month: int, day: int) -> int:
    """Gregorian calendar date -> MJD day number (exact, proleptic Gregorian)."""
    return _dt.date(year, month, day).toordinal() - _MJD_EPOCH_ORDINAL


@dataclass(frozen=True, eq=False)
class LeapTable:
    """TAI - UTC step table for 1972 onwards.

    Attributes
    ----------
    start_mjd : int64 array
        UTC MJD at whose 0h each value of TAI - UTC starts (strictly increasing,
        first entry 41317).
    tai_minus_utc_s : int64 array
        TAI - UTC in seconds from ``start_mjd[i]`` (IERS Bulletin C).
    expires_mjd : int
        The file's expiry date as an MJD; the table is complete for all UTC
        days ``<= expires_mjd``.
    identity : dict
        Provenance: ``source``, ``version`` (astropy_iers_data.__version__),
        ``file`` (base name), ``sha256`` (of the file bytes), ``expires_mjd``.
    """

    start_mjd: np.ndarray
    tai_minus_utc_s: np.ndarray
    expires_mjd: int
    identity: dict = field(default_factory=dict)


def parse_leap_second_file(path: str | os.PathLike, *, source: str, version: str) -> LeapTable:
    """Parse an IERS ``Leap_Second.dat`` file into a :class:`LeapTable`.

    Raises ``ValueError`` if the file lacks an expiry line, if a line's MJD
    disagrees with its calendar date, or if the 1972+ steps are not +/-1 s.
    """
    raw = open(path, "rb").read()
    text = raw.decode("ascii")
    expires = None
    mjds: list[int] = []
    values: list[int] = []
    for line in text.splitlines():
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            m = _EXPIRES_RE.match(stripped)
            if m and expires is None:
                day, month_name, year = m.groups()
                month = _MONTHS.index(month_name[:3].lower()) + 1
                expires = _mjd_from_date(int(year), month, int(day))
            continue
        parts = stripped.split()
        if len(parts) != 5:
            raise ValueError(f"unexpected leap-second line in {path}: {line!r}")
        mjd_f, day, month, year, dat = float(parts[0]), int(parts[1]), int(parts[2]), int(parts[3]), int(parts[4])
        mjd = int(mjd_f)
        if mjd != mjd_f or mjd != _mjd_from_date(year, month, day):
            raise ValueError(f"MJD {parts[0]} does not match date {year}-{month}-{day} in {path}")
        mjds.append(mjd)
        values.append(dat)
    if expires is None:
        raise ValueError(f"no 'File expires on' line in {path}")
    start = np.asarray(mjds, dtype=np.int64)
    dat = np.asarray(values, dtype=np.int64)
    keep = start >= SPAN_START_MJD
    start, dat = start[keep], dat[keep]
    if start.size == 0 or start[0] != SPAN_START_MJD:
        raise ValueError(f"leap-second table in {path} does not start at MJD {SPAN_START_MJD}")
    if np.any(np.diff(start) <= 0) or np.any(np.abs(np.diff(dat)) != 1):
        raise ValueError(f"leap-second table in {path} is not monotonic with 1 s steps")
    if expires < start[-1]:
        raise ValueError(f"leap-second file {path} expires before its last entry")
    start.setflags(write=False)
    dat.setflags(write=False)
    identity = {
        "source": source,
        "version": version,
        "file": os.path.basename(os.fspath(path)),
        "sha256": hashlib.sha256(raw).hexdigest(),
        "expires_mjd": int(expires),
    }
    return LeapTable(start_mjd=start, tai_minus_utc_s=dat, expires_mjd=int(expires), identity=identity)


@functools.lru_cache(maxsize=1)
def load_leap_table() -> LeapTable:
    """Load (once) the leap-second table bundled with astropy-iers-data.

    Only the package's own file is read; no IERS download is attempted.
    """
    import astropy_iers_data
    from astropy.utils.iers import IERS_LEAP_SECOND_FILE

    return parse_leap_second_file(
        IERS_LEAP_SECOND_FILE, source="astropy-iers-data", version=str(astropy_iers_data.__version__)
    )


def _check_span(table: LeapTable, utc_mjd: np.ndarray) -> None:
    if utc_mjd.size and (utc_mjd.min() < SPAN_START_MJD or utc_mjd.max() > table.expires_mjd):
        bad = utc_mjd[(utc_mjd < SPAN_START_MJD) | (utc_mjd > table.expires_mjd)]
        raise ValueError(
            f"UTC MJD {int(bad.flat[0])} outside the leap-second table's span "
            f"[{SPAN_START_MJD}, {table.expires_mjd}] ({table.identity.get('file')}, "
            f"version {table.identity.get('version')})"
        )


def _as_mjd(utc_mjd) -> np.ndarray:
    arr = np.asarray(utc_mjd)
    if arr.dtype.kind == "f":
        if np.any(arr != np.floor(arr)):
            raise ValueError("UTC MJD day numbers must be integers")
    elif arr.dtype.kind not in "iu":
        raise TypeError(f"UTC MJD must be an integer array, got dtype {arr.dtype}")
    return arr.astype(np.int64)


def _dat_unchecked(table: LeapTable, mjd: np.ndarray) -> np.ndarray:
    # index of the last start_mjd <= mjd (step function, right-continuous)
    idx = np.searchsorted(table.start_mjd, mjd, side="right") - 1
    return table.tai_minus_utc_s[np.clip(idx, 0, None)]


def tai_minus_utc_s(table: LeapTable, utc_mjd) -> np.ndarray:
    """TAI - UTC (integer seconds) in force during UTC day(s) ``utc_mjd``.

    Step function of IERS Bulletin C: ``dat[i]`` for
    ``start_mjd[i] <= mjd < start_mjd[i+1]``.  Valid for
    ``41317 <= utc_mjd <= table.expires_mjd``; raises ``ValueError`` outside.
    The value applies to the whole UTC day, including a ``23:59:60`` second.
    """
    mjd = _as_mjd(utc_mjd)
    _check_span(table, mjd)
    return _dat_unchecked(table, mjd)


def seconds_in_day(table: LeapTable, utc_mjd) -> np.ndarray:
    """SI seconds in UTC day ``utc_mjd``: ``86400 + dat(mjd+1) - dat(mjd)``.

    86401 on a day ending with a positive leap second, 86399 for a negative
    one (ITU-R TF.460).  Valid for ``41317 <= utc_mjd <= table.expires_mjd``
    (the IERS sets the expiry before the next day on which a leap second
    could still be announced, so ``mjd + 1`` is covered).
    """
    mjd = _as_mjd(utc_mjd)
    _check_span(table, mjd)
    return 86400 + _dat_unchecked(table, mjd + 1) - _dat_unchecked(table, mjd)


def leap_second_at_end_of_day(table: LeapTable, utc_mjd) -> np.ndarray:
    """True where UTC day ``utc_mjd`` ends with a positive leap second.

    I.e. TAI - UTC increases by 1 s at ``mjd + 1``: the day has 86401 SI
    seconds and ``23:59:60`` is a valid label.
    """
    return seconds_in_day(table, utc_mjd) == 86401
