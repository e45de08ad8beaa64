"""UT1-UTC from the Earth-orientation table of astropy-iers-data, with a status per instant.

The bundled table is the IERS finals2000A series (IERS Rapid Service /
Prediction Centre, "finals2000A.all"): final (bulletin B) values, then
rapid values, then predictions about a year ahead.  relcorr never uses a
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
    configure_offline()
    import astropy_iers_data
    from astropy.utils import iers

    path = Path(iers.IERS_A_FILE)
    table = iers.IERS_A.open(str(path))
    ident = {
        "source": "astropy-iers-data",
        "version": astropy_iers_data.__version__,
        "file": path.name,
        "sha256": hashlib.sha256(path.read_bytes()).hexdigest(),
    }
    return EopTable(table, ident)


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
