"""UT1-UTC from the Earth-orientation table of astropy-iers-data, with a status per instant.

The table is the IERS EOP 14 C04 series (``eopc04.1962-now``) where it
exists, then the IERS Rapid Service / Prediction Centre finals2000A series
(rapid values, then predictions about a year ahead), both bundled in
astropy-iers-data and merged as astropy's IERS_Auto does.  relcorr never uses a
predicted or out-of-table value silently: every instant gets a status code
that stages store per record.
"""
from __future__ import annotations

import functools
import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from stages.physics.offline import configure_offline

# per-record Earth-orientation status codes (relcorr's own)
EOP_NOT_USED = 0      # the result does not depend on Earth orientation
EOP_MEASURED = 1      # final or rapid (measured) values
EOP_PREDICTED = 2     # predicted values of the table
EOP_BEYOND_TABLE = 3  # outside the table: the nearest edge value was used
EOP_STATUS = {
    EOP_NOT_USED: "not used",
    EOP_MEASURED: "measured (final or rapid)",
    EOP_PREDICTED: "predicted",
    EOP_BEYOND_TABLE: "beyond the table (edge value held)",
}


@dataclass(frozen=True)
class EopTable:
    table: object          # astropy.utils.iers.IERS_A
    identity: dict


@functools.lru_cache(maxsize=1)
def load_eop_table() -> EopTable:
    """The Earth-orientation table: the IERS EOP 14 C04 series where it exists, the finals2000A
    rapid values and predictions after it (astropy's IERS_Auto merge, run offline).

    C04 is the IERS reference series for past epochs; the combined column of finals2000A alone
    differs from it by up to 0.48 ms in UT1 (e.g. MJD 58815, about 22 cm at the equator), so the
    merged table is used.  Its identity is the pair of files.
    """
    configure_offline()
    import astropy_iers_data
    from astropy.utils import iers

    table = iers.IERS_Auto.open()
    files = [Path(iers.IERS_B_FILE), Path(iers.IERS_A_FILE)]
    ident = {
        "source": "astropy-iers-data",
        "version": astropy_iers_data.__version__,
        "file": " + ".join(p.name for p in files),
        "sha256": hashlib.sha256(b"".join(hashlib.sha256(p.read_bytes()).digest() for p in files)).hexdigest(),
        "files_sha256": {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in files},
    }
    return EopTable(table, ident)


#: days of the table around a partition's records that its values may depend on: linear
#: interpolation uses the neighbouring day; t1 of a round trip lies up to a day before the tag
EOP_SPAN_MARGIN_DAYS = 2


def eop_identity(span_mjd: tuple[int, int] | None = None, eop: EopTable | None = None) -> dict:
    """Identity of the Earth-orientation values that records of UTC days ``span_mjd`` can use.

    Without a span: the table's files (version and sha256).  With one: the sha256 of the rows
    [first - 2, last + 2] (UT1 - UTC, polar motion, dX, dY and their measured/predicted flags,
    and where the span runs past the table, the edge rows it holds), so that an upgraded table
    changes the fingerprint of a partition only if the values its records use changed.
    """
    eop = eop or load_eop_table()
    if span_mjd is None:
        return eop.identity
    c = _columns(eop)
    lo = int(span_mjd[0]) - EOP_SPAN_MARGIN_DAYS - c.mjd0
    hi = int(span_mjd[1]) + EOP_SPAN_MARGIN_DAYS - c.mjd0 + 1
    rows = slice(min(max(lo, 0), c.n - 1), max(min(hi, c.n), 1))
    h = hashlib.sha256()
    h.update(np.array([c.mjd0 + rows.start, rows.stop - rows.start, lo < 0, hi > c.n], dtype=np.int64).tobytes())
    for arr in (c.ut1_utc_s, c.ut1_status, c.pm_x_rad, c.pm_y_rad, c.pm_status):
        h.update(np.ascontiguousarray(arr[rows]).tobytes())
    drows = slice(min(rows.start, c.n_dcip - 1), max(min(rows.stop, c.n_dcip), 1))
    for arr in (c.dx_rad, c.dy_rad, c.dcip_status):
        h.update(np.ascontiguousarray(arr[drows]).tobytes())
    return {"source": eop.identity["source"], "span_mjd": [int(span_mjd[0]), int(span_mjd[1])],
            "values_sha256": h.hexdigest()}


def ut1_minus_utc_s(utc_mjd: np.ndarray, utc_sod_s: np.ndarray, eop: EopTable | None = None):
    """UT1-UTC (s) interpolated in the table, and a status code per instant.

    Returns (ut1_minus_utc_s, status) with status one of EOP_MEASURED,
    EOP_PREDICTED, EOP_BEYOND_TABLE.
    """
    from astropy.utils import iers

    eop = eop or load_eop_table()
    jd1 = np.asarray(utc_mjd, dtype=float) + 2400000.5
    jd2 = np.asarray(utc_sod_s, dtype=float) / 86400.0
    dut, st = eop.table.ut1_utc(jd1, jd2, return_status=True)
    dut = np.asarray(getattr(dut, "value", dut), dtype=float)
    st = np.asarray(st)
    status = np.full(st.shape, EOP_MEASURED, dtype=np.uint8)
    status[st == iers.FROM_IERS_A_PREDICTION] = EOP_PREDICTED
    status[(st == iers.TIME_BEFORE_IERS_RANGE) | (st == iers.TIME_BEYOND_IERS_RANGE)] = EOP_BEYOND_TABLE
    return dut, status


# ---------------------------------------------------------------------------
# Vectorised table look-ups for the ITRS <-> GCRS rotation (earth_rotation.py)
# ---------------------------------------------------------------------------
# The functions below read the same finals2000A table as ``ut1_minus_utc_s``
# and interpolate it the same way (linear in UTC between the daily rows, the
# edge row held outside the table, the status taken from the upper bracketing
# row), but index the table arithmetically (one row per UTC day) instead of
# by search, so that they cost ~O(1) per instant and never convert through
# astropy Quantities.  Columns (IERS Rapid Service/Prediction Centre,
# finals2000A format; Bulletin B values where published, else Bulletin A):
#   PM_x, PM_y     polar motion x_p, y_p (arcsec)  -> W(t), IERS TN36 eq. 5.3
#   UT1_UTC        UT1 - UTC (s)                    -> ERA, IERS TN36 eq. 5.15
#   dX_2000A/dY    celestial pole offsets (mas)     -> Q(t), IERS TN36 sec. 5.5.4
_ARCSEC_TO_RAD = np.pi / (180.0 * 3600.0)  # 1" = pi / 648000 rad (definition)
_DAY_S = 86400.0


@dataclass(frozen=True, eq=False)
class _Columns:
    mjd0: int                  # first row's UTC MJD
    n: int                     # rows (consecutive days)
    ut1_utc_s: np.ndarray
    ut1_status: np.ndarray     # uint8 per row
    pm_x_rad: np.ndarray
    pm_y_rad: np.ndarray
    pm_status: np.ndarray
    n_dcip: int                # rows with finite dX, dY (leading block)
    dx_rad: np.ndarray
    dy_rad: np.ndarray
    dcip_status: np.ndarray


_COLUMN_CACHE: dict[int, tuple[object, _Columns]] = {}


def _flag_status(flags) -> np.ndarray:
    flags = np.asarray(flags).astype(str)
    status = np.full(flags.shape, EOP_MEASURED, dtype=np.uint8)
    status[flags == "P"] = EOP_PREDICTED
    return status


def _columns(eop: EopTable) -> _Columns:
    hit = _COLUMN_CACHE.get(id(eop.table))
    if hit is not None and hit[0] is eop.table:
        return hit[1]
    t = eop.table
    mjd = np.asarray(t["MJD"], dtype=float)
    if mjd.size < 2 or np.any(np.diff(mjd) != 1.0) or mjd[0] != np.floor(mjd[0]):
        raise ValueError("Earth-orientation table must hold one row per consecutive UTC day")
    dx = np.asarray(t["dX_2000A"], dtype=float)
    dy = np.asarray(t["dY_2000A"], dtype=float)
    finite = np.isfinite(dx) & np.isfinite(dy)
    n_dcip = int(np.argmin(finite)) if not finite.all() else finite.size
    if n_dcip < 2 or finite[n_dcip:].any():
        raise ValueError("celestial pole offsets must be finite on one leading block of rows")
    cols = _Columns(
        mjd0=int(mjd[0]),
        n=mjd.size,
        ut1_utc_s=np.asarray(t["UT1_UTC"], dtype=float),
        ut1_status=_flag_status(t["UT1Flag"]),
        pm_x_rad=np.asarray(t["PM_x"].to_value("arcsec"), dtype=float) * _ARCSEC_TO_RAD,
        pm_y_rad=np.asarray(t["PM_y"].to_value("arcsec"), dtype=float) * _ARCSEC_TO_RAD,
        pm_status=_flag_status(t["PolPMFlag"]),
        n_dcip=n_dcip,
        dx_rad=np.asarray(t["dX_2000A"].to_value("arcsec"), dtype=float)[:n_dcip] * _ARCSEC_TO_RAD,
        dy_rad=np.asarray(t["dY_2000A"].to_value("arcsec"), dtype=float)[:n_dcip] * _ARCSEC_TO_RAD,
        dcip_status=_flag_status(t["NutFlag"])[:n_dcip],
    )
    _COLUMN_CACHE.clear()
    _COLUMN_CACHE[id(t)] = (t, cols)
    return cols


def _locate(mjd0: int, n: int, utc_mjd, utc_sod_s):
    """Row bracket of each instant, astropy IERS convention.

    ``i`` = number of rows with MJD <= the instant (0 before the table, n
    after it); the instant lies between rows i0 = i1 - 1 and i1 = clip(i, 1,
    n - 1); ``frac`` = (instant - MJD[i0]) in days.  A UTC second of day
    >= 86400 (a leap second, 23:59:60) stays on its own day.
    """
    day = np.asarray(utc_mjd).astype(np.int64)
    frac = np.asarray(utc_sod_s, dtype=float) / _DAY_S
    day, frac = np.broadcast_arrays(day, frac)
    i = np.clip(day - (mjd0 - 1), 0, n)
    i1 = np.clip(i, 1, n - 1)
    i0 = i1 - 1
    return i, i0, i1, (day - (mjd0 + i0)).astype(float) + frac


def _interp(values, i, i0, i1, x, n):
    v0 = values[i0]
    out = v0 + x * (values[i1] - v0)
    out = np.where(i == 0, values[0], out)
    return np.where(i == n, values[n - 1], out)


def _status(rows, i, i1, n):
    st = rows[i1].copy()
    st[(i == 0) | (i == n)] = EOP_BEYOND_TABLE
    return st


def ut1_minus_utc_with_rate(utc_mjd, utc_sod_s, eop: EopTable | None = None):
    """UT1 - UTC (s), its rate d(UT1-UTC)/dUTC (s/s) and a status per instant.

    Same linear interpolation of the finals2000A UT1-UTC column as
    :func:`ut1_minus_utc_s` (the difference of two rows is cleared of an
    intervening leap second by removing its nearest whole second), with the
    same status codes, but evaluated by row arithmetic.  The rate is the
    slope of that interpolant (constant over each UTC day; zero outside the
    table, where the edge value is held).  It is -(excess length of day)/86400 s
    and enters the Earth rotation rate dERA/dTT = dERA/dUT1 * (1 + rate).

    A UTC second of day in [86400, 86401) (23:59:60) is interpolated on its
    own day, so UT1 = UTC + (UT1-UTC) stays continuous through a leap second.
    """
    cols = _columns(eop or load_eop_table())
    i, i0, i1, x = _locate(cols.mjd0, cols.n, utc_mjd, utc_sod_s)
    v0 = cols.ut1_utc_s[i0]
    dv = cols.ut1_utc_s[i1] - v0
    dv = dv - np.round(dv)
    inside = (i > 0) & (i < cols.n)
    dut = np.where(inside, v0 + x * dv, np.where(i == 0, cols.ut1_utc_s[0], cols.ut1_utc_s[-1]))
    rate = np.where(inside, dv / _DAY_S, 0.0)
    return dut, rate, _status(cols.ut1_status, i, i1, cols.n)


def polar_motion_rad(utc_mjd, utc_sod_s, eop: EopTable | None = None, *, with_rate: bool = False):
    """Polar motion x_p, y_p (rad) and a status per instant
    (with ``with_rate``: x_p, y_p, dx_p/dt, dy_p/dt (rad/s), status).

    Linear interpolation in UTC of the finals2000A PM_x, PM_y columns (the
    pole coordinates of IERS TN36 eq. 5.3, W(t) = R3(-s') R2(x_p) R1(y_p)),
    as astropy's ``IERS.pm_xy``; outside the table the edge row is held and
    the instant flagged EOP_BEYOND_TABLE (astropy instead falls back to a
    50-year mean pole).
    """
    cols = _columns(eop or load_eop_table())
    i, i0, i1, x = _locate(cols.mjd0, cols.n, utc_mjd, utc_sod_s)
    xp = _interp(cols.pm_x_rad, i, i0, i1, x, cols.n)
    yp = _interp(cols.pm_y_rad, i, i0, i1, x, cols.n)
    status = _status(cols.pm_status, i, i1, cols.n)
    if not with_rate:
        return xp, yp, status
    # slope of the linear interpolant (per UTC = SI second); 0 where held
    inside = (i > 0) & (i < cols.n)
    xp_rate = np.where(inside, (cols.pm_x_rad[i1] - cols.pm_x_rad[i0]) / _DAY_S, 0.0)
    yp_rate = np.where(inside, (cols.pm_y_rad[i1] - cols.pm_y_rad[i0]) / _DAY_S, 0.0)
    return xp, yp, xp_rate, yp_rate, status


def celestial_pole_offsets_rad(utc_mjd, utc_sod_s, eop: EopTable | None = None):
    """Celestial pole offsets dX, dY (rad) and a status per instant.

    Observed corrections to the IAU 2006/2000A CIP coordinates X, Y
    (IERS TN36 sec. 5.5.4: X = X_model + dX, Y = Y_model + dY), finals2000A
    columns dX_2000A, dY_2000A, interpolated linearly in UTC.  Their
    predictions end before those of UT1 and polar motion (the later rows are
    blank): beyond the last finite row its value is held and the instant is
    flagged EOP_BEYOND_TABLE.
    """
    cols = _columns(eop or load_eop_table())
    i, i0, i1, x = _locate(cols.mjd0, cols.n_dcip, utc_mjd, utc_sod_s)
    dx = _interp(cols.dx_rad, i, i0, i1, x, cols.n_dcip)
    dy = _interp(cols.dy_rad, i, i0, i1, x, cols.n_dcip)
    return dx, dy, _status(cols.dcip_status, i, i1, cols.n_dcip)


def celestial_pole_offsets_status(utc_mjd, utc_sod_s, eop: EopTable | None = None) -> np.ndarray:
    """Status codes of :func:`celestial_pole_offsets_rad` alone (no values)."""
    cols = _columns(eop or load_eop_table())
    i, _, i1, _ = _locate(cols.mjd0, cols.n_dcip, utc_mjd, utc_sod_s)
    return _status(cols.dcip_status, i, i1, cols.n_dcip)
