"""Keep astropy offline: leap seconds and Earth orientation from astropy-iers-data only.

Without ``auto_max_age = None`` astropy refuses UT1 and ITRS->GCRS about 30
days after the astropy-iers-data release (it compares with today's date, not
the data's), and with ``auto_download`` on it tries the network.  relcorr
never downloads: call ``configure_offline()`` before using astropy.time or
astropy.coordinates (the pipeline and the tests do).
"""
from __future__ import annotations

import functools


@functools.lru_cache(maxsize=None)
def configure_offline() -> None:
    from astropy.utils import data, iers

    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    iers.conf.iers_degraded_accuracy = "warn"
    data.conf.allow_internet = False
