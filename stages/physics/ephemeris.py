"""Planetary ephemeris: barycentric states of the Sun, Moon and planets from DE421.

Data: the JPL Development Ephemeris DE421 (Folkner, Williams & Boggs 2009,
IPN Progress Report 42-178) as the SPK file ``de421.bsp`` shipped inside the
``skyfield-data`` package, read with ``jplephem.spk``.  Nothing is downloaded.

Frame and time: positions are relative to the solar-system barycentre (SSB),
axes of the ICRF (the DE421 frame), argument TDB (strictly the ephemeris'
own T_eph, which IAU 2006 Resolution B3 defines TDB to match).

Each DE421 segment is a Chebyshev fit of one body relative to another
(e.g. 0 -> 3: SSB -> Earth-Moon barycentre, 3 -> 399: EMB -> Earth).  A
body's barycentric state is the sum over its chain of segments,

    r_B(t) = sum_k r_(c_k -> t_k)(t),   v_B(t) = sum_k v_(c_k -> t_k)(t),

with SPK NAIF ids (NAIF "SPK Required Reading", segment centre/target).
jplephem returns km and km/day; here 1 km = 1000 m and 1 day = 86400 s.

Time arguments are two-part: an integer TDB MJD day and TDB seconds of day.
jplephem receives jd = MJD + 2400000.5 (exact in float64 for an integer MJD)
and jd2 = sod / 86400, so no float JD of 2.4e6 days is ever formed.

The GM values in :data:`GM_M3_PER_S2` are the DE421 ones (TDB-compatible),
each with its source beside it.
"""
from __future__ import annotations

import functools
import hashlib
import importlib.metadata
import re
from pathlib import Path

import numpy as np

from . import constants as K

__all__ = [
    "BODIES",
    "BODY_CHAINS",
    "DE421_AU_M",
    "DE421_EMRAT",
    "DE421_HEADER_GM_M3_PER_S2",
    "GM_M3_PER_S2",
    "PlanetaryEphemeris",
    "de421_path",
    "load_planetary_ephemeris",
]

# ---------------------------------------------------------------------------
# Body -> chain of SPK segments (centre, target), NAIF ids.  DE421 carries
# body centres for Mercury (199), Venus (299), Earth (399), Moon (301) and
# Mars (499); for Jupiter..Neptune only the system barycentres (5..8).
# ---------------------------------------------------------------------------
BODY_CHAINS: dict[str, tuple[tuple[int, int], ...]] = {
    "sun": ((0, 10),),
    "mercury": ((0, 1), (1, 199)),
    "venus": ((0, 2), (2, 299)),
    "emb": ((0, 3),),  # Earth-Moon barycentre
    "earth": ((0, 3), (3, 399)),
    "moon": ((0, 3), (3, 301)),
    "mars": ((0, 4), (4, 499)),
    "jupiter": ((0, 5),),  # system barycentre
    "saturn": ((0, 6),),  # system barycentre
    "uranus": ((0, 7),),  # system barycentre
    "neptune": ((0, 8),),  # system barycentre
}
BODIES: tuple[str, ...] = tuple(BODY_CHAINS)

# ---------------------------------------------------------------------------
# GM values (m^3/s^2), TDB-compatible (the DE421 ones).
#
# DE421 header constants (the "GROUP 1041" constants of the JPL ephemeris
# file, read from constants.npy of the PyPI package ``de421`` 2008.1, which
# carries the header of the same DE421 release; de421.bsp itself carries no
# constants).  In the header GMs are in AU^3/day^2; converted with the DE421
# AU and day = 86400 s:  GM [m^3/s^2] = GM [AU^3/d^2] * AU_m^3 / 86400^2.
# ---------------------------------------------------------------------------
DE421_AU_M = 149_597_870_699.6262  # DE421 header "AU" = 149597870.6996262 km
DE421_EMRAT = 81.3005690699153  # DE421 header "EMRAT" (Earth/Moon mass ratio; 81.30056907 rounded)
_DE421_GM_AU3_PER_D2 = {
    "GMS": 2.959122082855911e-4,  # Sun (= k^2, Gaussian constant squared)
    "GM1": 4.91254957186794e-11,  # Mercury
    "GM2": 7.243452332698441e-10,  # Venus
    "GMB": 8.997011408268049e-10,  # Earth + Moon
    "GM4": 9.54954869562239e-11,  # Mars system
    "GM5": 2.82534584085505e-7,  # Jupiter system
    "GM6": 8.459706073308477e-8,  # Saturn system
    "GM7": 1.29202482579265e-8,  # Uranus system
    "GM8": 1.52435910924974e-8,  # Neptune system
}
_AU3_PER_D2_TO_M3_PER_S2 = DE421_AU_M**3 / float(K.SECONDS_PER_DAY) ** 2
# the same header GMs in m^3/s^2 (keys as in the header)
DE421_HEADER_GM_M3_PER_S2: dict[str, float] = {
    k: v * _AU3_PER_D2_TO_M3_PER_S2 for k, v in _DE421_GM_AU3_PER_D2.items()
}


def _de421_gm(key: str) -> float:
    return DE421_HEADER_GM_M3_PER_S2[key]


_GM_EMB = _de421_gm("GMB")

GM_M3_PER_S2: dict[str, float] = {
    # Sun: DE421 GMS -> 1.3271244004e20; equals IERS TN36 Table 1.1 TDB-compatible
    # GM_Sun 1.32712440041e20 to 1e-11 (that table value comes from DE421).
    "sun": K.GM_SUN_TDB_M3_PER_S2,
    "mercury": _de421_gm("GM1"),  # DE421 header GM1 (2.203209e13)
    "venus": _de421_gm("GM2"),  # DE421 header GM2 (3.24858592e14)
    # Earth: IERS TN36 Table 1.1, TT-compatible (3.986004415e14).  DE421's own
    # Earth GM, GMB*EMRAT/(1+EMRAT) = 3.9860043623e14, is 1.3e-8 smaller;
    # TT- vs TDB-compatible scaling is of order L_G ~ 7e-10.  Both are far
    # below what the relativistic corrections need (a 1e-8 relative change of
    # an Earth term of at most ~10 ns).
    "earth": K.GM_EARTH_TT_M3_PER_S2,
    "moon": _GM_EMB / (1.0 + DE421_EMRAT),  # DE421 GMB / (1 + EMRAT) (4.9028000762e12)
    "emb": _GM_EMB,  # DE421 header GMB (4.0350323631e14)
    "mars": _de421_gm("GM4"),  # DE421 header GM4, Mars system (4.2828375214e13)
    "jupiter": _de421_gm("GM5"),  # DE421 header GM5, system (1.267127648e17)
    "saturn": _de421_gm("GM6"),  # DE421 header GM6, system (3.79405852e16)
    "uranus": _de421_gm("GM7"),  # DE421 header GM7, system (5.7945486e15)
    "neptune": _de421_gm("GM8"),  # DE421 header GM8, system (6.836535e15)
}

_KM_TO_M = 1000.0
_KM_PER_DAY_TO_M_PER_S = 1000.0 / float(K.SECONDS_PER_DAY)
_DAY_S = float(K.SECONDS_PER_DAY)
_J2000_MJD_DAY = 51544  # J2000.0 = MJD 51544.5 (K.MJD_J2000), i.e. day 51544 + 43200 s
_SKYFIELD_DATA = "skyfield-data"
_BLOCK = 8192  # records per jplephem call (speed only; see posvel_m)


def de421_path() -> Path:
    """Path of ``de421.bsp`` inside the installed ``skyfield_data`` package
    (its ``data`` folder; the package's own path helper is not used because it
    warns about an expired file of its own)."""
    import skyfield_data

    return Path(skyfield_data.__file__).parent / "data" / "de421.bsp"


def sha256_of_file(path: Path) -> str:
    """sha256 of a model file, read in 1 MiB blocks: the identity recorded in fingerprints and manifests."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


class PlanetaryEphemeris:
    """Barycentric states of solar-system bodies from a JPL SPK file.

    ``identity`` records where the data came from (for the manifest and the
    stage fingerprints); ``span_mjd`` is the (first, last) TDB instant covered
    by every segment used, as float MJD (display); :meth:`in_span` tests it
    exactly on two-part times.
    """

    def __init__(self, path: str | Path, *, source: str = "file", package_version: str | None = None):
        from jplephem.spk import SPK

        self.path = Path(path)
        self._source = source
        self._package_version = package_version
        self._kernel = SPK.open(str(self.path))
        pairs = {(s.center, s.target): s for s in self._kernel.segments}
        missing = sorted({p for chain in BODY_CHAINS.values() for p in chain} - set(pairs))
        if missing:
            raise ValueError(f"{self.path}: SPK file lacks segments (centre, target) {missing}")
        self._chains = {b: tuple(pairs[p] for p in chain) for b, chain in BODY_CHAINS.items()}
        used = {s for chain in self._chains.values() for s in chain}
        # seconds of TDB past J2000.0 (SPK segment descriptors, "ET" = TDB)
        self._start_s = max(s.start_second for s in used)
        self._end_s = min(s.end_second for s in used)
        self.span_mjd = (
            K.MJD_J2000 + self._start_s / _DAY_S,
            K.MJD_J2000 + self._end_s / _DAY_S,
        )
        names = {s.source.decode("ascii", "replace").strip() for s in used}
        m = re.match(r"DE-0*(\d+)", sorted(names)[0]) if len(names) == 1 else None
        self.name = f"DE{m.group(1)}" if m else ",".join(sorted(names))
        self.identity = {
            "source": source,
            "package_version": package_version,
            "file": self.path.name,
            "sha256": sha256_of_file(self.path),
            "name": self.name,
        }

    # pickling (luigi worker processes): reopen the file on the other side
    def __getstate__(self):
        return {"path": str(self.path), "source": self._source, "package_version": self._package_version}

    def __setstate__(self, state):
        self.__init__(state["path"], source=state["source"], package_version=state["package_version"])

    def close(self) -> None:
        self._kernel.close()

    def __repr__(self) -> str:
        return f"PlanetaryEphemeris({self.name}, {self.path.name}, MJD {self.span_mjd[0]:.1f}..{self.span_mjd[1]:.1f})"

    # -- time helpers ------------------------------------------------------
    @staticmethod
    def _flatten(tdb_mjd, tdb_sod_s) -> tuple[np.ndarray, np.ndarray]:
        mjd, sod = np.broadcast_arrays(np.asarray(tdb_mjd), np.asarray(tdb_sod_s, dtype=np.float64))
        return mjd.ravel(), sod.ravel()

    def _in_span_flat(self, mjd: np.ndarray, sod: np.ndarray) -> np.ndarray:
        # seconds past J2000.0 TDB; whole days formed first (exact), one rounding
        t_s = (mjd.astype(np.float64) - _J2000_MJD_DAY) * _DAY_S + (sod - 43_200.0)
        return (t_s >= self._start_s) & (t_s <= self._end_s)  # False for NaN

    def in_span(self, tdb_mjd, tdb_sod_s) -> np.ndarray:
        """Boolean mask: instant inside the span covered by all segments (ends included)."""
        mjd, sod = self._flatten(tdb_mjd, tdb_sod_s)
        return self._in_span_flat(mjd, sod)

    # -- states ------------------------------------------------------------
    def posvel_m(self, body: str, tdb_mjd, tdb_sod_s) -> tuple[np.ndarray, np.ndarray]:
        """Barycentric (SSB, ICRF axes) position (m) and velocity (m/s) of ``body``.

        ``body`` is one of :data:`BODIES`.  ``tdb_mjd`` (integer TDB MJD day)
        and ``tdb_sod_s`` (TDB seconds of day, any real value) broadcast
        together; results are shaped (n, 3) with n the broadcast size.
        Instants outside :meth:`in_span` (and non-finite ones) give NaN rows.

        Chain sum r_B = sum_k r_(c_k -> t_k) over the SPK segments of the body
        (module docstring), each segment evaluated by jplephem at the two-part
        Julian date (MJD + 2400000.5, sod / 86400); km -> m, km/day -> m/s.
        """
        try:
            chain = self._chains[body]
        except KeyError:
            raise ValueError(f"unknown body {body!r}; known: {', '.join(BODIES)}") from None
        mjd, sod = self._flatten(tdb_mjd, tdb_sod_s)
        ok = self._in_span_flat(mjd, sod)
        all_ok = bool(ok.all())
        jd1 = mjd.astype(np.float64) + K.MJD_JD_OFFSET
        jd2 = sod / _DAY_S
        if not all_ok:  # evaluate bad rows at a valid instant, blank them afterwards
            jd1 = np.where(ok, jd1, K.MJD_JD_OFFSET + self.span_mjd[0])
            jd2 = np.where(ok, jd2, 0.0)
        pos = np.empty((mjd.size, 3))
        vel = np.empty((mjd.size, 3))
        # Blocks of records (not a loop over records): jplephem's Chebyshev
        # evaluation makes ~50 temporaries per call; blocks that stay in cache
        # run ~3x faster than one call on 1e6 instants.  Results are
        # element-wise, hence identical whatever the block size.
        for lo in range(0, mjd.size, _BLOCK):
            sl = slice(lo, lo + _BLOCK)
            p_km, v_km_per_day = chain[0].compute_and_differentiate(jd1[sl], jd2[sl])
            for seg in chain[1:]:  # loop over segments of the chain
                p, v = seg.compute_and_differentiate(jd1[sl], jd2[sl])
                p_km = p_km + p
                v_km_per_day = v_km_per_day + v
            np.multiply(p_km.T, _KM_TO_M, out=pos[sl])
            np.multiply(v_km_per_day.T, _KM_PER_DAY_TO_M_PER_S, out=vel[sl])
        if not all_ok:
            pos[~ok] = np.nan
            vel[~ok] = np.nan
        return pos, vel


@functools.lru_cache(maxsize=1)
def load_planetary_ephemeris() -> PlanetaryEphemeris:
    """DE421 from the installed ``skyfield-data`` package (cached: opened once)."""
    return PlanetaryEphemeris(
        de421_path(),
        source=_SKYFIELD_DATA,
        package_version=importlib.metadata.version(_SKYFIELD_DATA),
    )
