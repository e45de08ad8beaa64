"""Physical and conventional constants used by relcorr.

Every value names its source.  "TN36" is IERS Conventions (2010), IERS
Technical Note No. 36, G. Petit & B. Luzum (eds.), Table 1.1 ("IERS numerical
standards").  Only constants that are defined or adopted there (or are pure
calendar conventions) are kept here; nothing is recalled from memory.

Time-scale relations that use them (cited in ``time_scales.py``):

* IAU 1991 Resolution A4:      TT = TAI + 32.184 s
* IAU 2000 Resolution B1.9:    dTT/dTCG = 1 - L_G            (TN36 eq. 10.1)
* IAU 2006 Resolution B3:      TDB = TCB - L_B (JD_TCB - T0) 86400 s + TDB0
"""

from __future__ import annotations

# --- defining constants ----------------------------------------------------
C_M_PER_S = 299_792_458.0  # speed of light, m/s (TN36 Table 1.1, defining)
L_G = 6.969290134e-10  # 1 - dTT/dTCG (TN36 Table 1.1, defining; IAU 2000 B1.9)
L_B = 1.550519768e-8  # 1 - dTDB/dTCB (TN36 Table 1.1, defining; IAU 2006 B3)
TDB0_S = -6.55e-5  # TDB - TCB at T0, seconds (TN36 Table 1.1, defining; IAU 2006 B3)

# T0 = 1977-01-01T00:00:00 TAI = 1977-01-01T00:00:32.184 TT = JD(TT) 2443144.5003725
# (TN36 Table 1.1 / IAU 2000 B1.9).  Kept as an integer MJD day plus seconds of
# day so that differences "t - T0" can be formed without a float JD of 2.4e6 d.
T0_MJD_DAY = 43144  # MJD(TT) day number of T0 (JD 2443144.5 = MJD 43144.0)
T0_SOD_S = 32.184  # TT seconds of day of T0 (= 0.0003725 d * 86400 s/d)
T0_MJD_TT = 43144.0003725  # the same instant as a single float MJD(TT), for display

TT_MINUS_TAI_S = 32.184  # TT - TAI, seconds (IAU 1991 Resolution A4; TN36 ch. 10)
TT_MINUS_TAI_PS = 32_184_000_000_000  # the same, integer picoseconds (exact)

# --- natural measurable / adopted constants (TN36 Table 1.1) ---------------
L_C = 1.48082686741e-8  # mean 1 - dTCG/dTCB (TN36 Table 1.1)
GM_SUN_TCB_M3_PER_S2 = 1.32712442099e20  # heliocentric GM, TCB-compatible (TN36 Table 1.1)
GM_SUN_TDB_M3_PER_S2 = 1.32712440041e20  # heliocentric GM, TDB-compatible (TN36 Table 1.1)
GM_EARTH_TCG_M3_PER_S2 = 3.986004418e14  # geocentric GM, TCG-compatible (TN36 Table 1.1)
GM_EARTH_TT_M3_PER_S2 = 3.986004415e14  # geocentric GM, TT-compatible (TN36 Table 1.1)
EARTH_EQUATORIAL_RADIUS_M = 6_378_136.6  # a_E (TN36 Table 1.1)
EARTH_J2 = 1.0826359e-3  # dynamical form factor J2 (TN36 Table 1.1)

# --- calendar conventions (exact by definition) ----------------------------
SECONDS_PER_DAY = 86_400  # SI seconds in a day of a uniform time scale
PS_PER_S = 1_000_000_000_000  # picoseconds per second
PS_PER_DAY = SECONDS_PER_DAY * PS_PER_S  # 8.64e16, fits int64 (max 9.22e18)
MJD_JD_OFFSET = 2_400_000.5  # JD = MJD + 2400000.5 (definition of MJD)
MJD_J2000 = 51_544.5  # J2000.0 = JD 2451545.0 TT = MJD 51544.5
