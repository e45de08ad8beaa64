"""Which Earth-orientation values relcorr uses: IERS EOP 14 C04 where it exists, finals2000A after.

Reference: the C04 file itself (astropy-iers-data ``eopc04.1962-now``, read with astropy's IERS_B
reader) and the finals2000A file (IERS_A reader).  At MJD 58815 the two disagree by 0.48 ms in
UT1; the C04 value is the IERS reference for past epochs.
"""
from __future__ import annotations

import numpy as np
from astropy.utils import iers

from stages.physics.earth_orientation import (EOP_MEASURED, EOP_PREDICTED, load_eop_table, ut1_minus_utc_s)


def test_past_epochs_follow_c04_and_later_ones_finals():
    c04 = iers.IERS_B.open(iers.IERS_B_FILE)
    finals = iers.IERS_A.open(iers.IERS_A_FILE)
    mjd = np.array([58000, 58815, 59500])
    ours, status = ut1_minus_utc_s(mjd, np.zeros(3))
    ref = c04.ut1_utc(mjd + 2400000.5, 0.0).value
    assert np.abs(ours - ref).max() < 1e-9
    assert (status == EOP_MEASURED).all()
    assert abs(finals.ut1_utc(58815 + 2400000.5, 0.0).value - ref[1]) > 3e-4   # the reason for the choice
    # after the end of C04: the finals2000A values, predictions flagged
    last_c04 = int(c04["MJD"][-1].value)
    mjd = np.array([last_c04 + 5, last_c04 + 200])
    ours, status = ut1_minus_utc_s(mjd, np.zeros(2))
    assert np.abs(ours - finals.ut1_utc(mjd + 2400000.5, 0.0).value).max() < 1e-9
    assert status[1] == EOP_PREDICTED
    assert "eopc04" in load_eop_table().identity["file"]
