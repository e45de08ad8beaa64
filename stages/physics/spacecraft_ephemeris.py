"""Spacecraft state tables: tabulated states, cubic Hermite interpolation.

File format (relcorr's own; one Parquet file, one row per tabulated state):

    column          Arrow type             unit / meaning
    target          string                 spacecraft (or any object) name
    tdb_mjd         int32 (int64 accepted) TDB epoch, MJD day number
    tdb_sod_s       float64                TDB epoch, seconds of day, 0 <= sod < 86400
    x_m, y_m, z_m   float64                position relative to ``centre``, m
    vx_m_per_s, vy_m_per_s, vz_m_per_s
                    float64                velocity relative to ``centre``, m/s
    centre          string                 "ssb" (solar-system barycentre) or a body
                                           of the planetary ephemeris ("sun", "earth",
                                           "mars", ... see ``ephemeris.BODIES``)

Axes are those of the ICRF (BCRS axes), time argument TDB.  Rows may come
in any order (the table is sorted by target and epoch on load); every
target must have strictly increasing epochs (no duplicates), one
``centre`` for all its rows, finite values and no nulls.  Extra columns are
ignored.  Violations raise ``ValueError`` naming the file and the problem.

Interpolation (cubic Hermite; e.g. Burden & Faires, *Numerical Analysis*,
section 3.4, "Hermite interpolation"): for an instant t in the interval
[t0, t1] of two tabulated states (p0, v0), (p1, v1), with h = t1 - t0 and
s = (t - t0)/h,

    p(t) = p0 + H01(s) (p1 - p0) + h [H10(s) v0 + H11(s) v1]            (1)
    v(t) = [H01'(s) (p1 - p0)] / h + H10'(s) v0 + H11'(s) v1            (2)

    H01 = 3s^2 - 2s^3,  H10 = s^3 - 2s^2 + s,  H11 = s^3 - s^2
    H01' = 6s - 6s^2,   H10' = 3s^2 - 4s + 1,  H11' = 3s^2 - 2s

((1) is the usual form H00 p0 + H01 p1 + ... with H00 = 1 - H01, written as
a difference to keep float64 rounding small; (2) is d(1)/dt.)  The error is

    |x(t) - p(t)| <= h^4 / 384 * max |x''''|                            (3)

(remainder f''''(xi)/4! (t - t0)^2 (t - t1)^2, Burden & Faires Thm 3.9,
maximised at s = 1/2), and for the velocity, from the derivative of that
remainder with f'''' held constant, |x'(t) - v(t)| <= sqrt(3)/216 h^3 max |x''''|.

The barycentric state is then the interpolated state plus the centre body's
barycentric state from the planetary ephemeris at the same TDB instant.

Times: every difference t - t0 is formed as (day difference) * 86400 +
(sod difference), so tables spanning decades keep ~1e-11 s resolution.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from . import constants as K
from .ephemeris import BODIES, PlanetaryEphemeris, sha256_of_file

__all__ = [
    "CENTRES",
    "STATE_COLUMNS",
    "STATUS_OK",
    "STATUS_OUTSIDE_COVERAGE",
    "STATUS_IN_GAP",
    "STATUS_UNKNOWN_TARGET",
    "STATUS_TEXT",
    "StateTable",
    "load_state_table",
    "target_posvel_bcrs_m",
]

# per-instant status codes (relcorr's own)
STATUS_OK = 0
STATUS_OUTSIDE_COVERAGE = 1  # before the first / after the last epoch of the target,
#                              non-finite time, or centre/body outside the planetary span
STATUS_IN_GAP = 2  # between two tabulated epochs more than max_gap_s apart
STATUS_UNKNOWN_TARGET = 3  # neither in the state table nor a planetary-ephemeris body
STATUS_TEXT = {
    STATUS_OK: "ok",
    STATUS_OUTSIDE_COVERAGE: "outside coverage",
    STATUS_IN_GAP: "in a gap wider than max_gap_s",
    STATUS_UNKNOWN_TARGET: "unknown target",
}

CENTRES: tuple[str, ...] = ("ssb",) + BODIES
_FLOAT_COLUMNS = ("tdb_sod_s", "x_m", "y_m", "z_m", "vx_m_per_s", "vy_m_per_s", "vz_m_per_s")
STATE_COLUMNS: tuple[str, ...] = ("target", "tdb_mjd") + _FLOAT_COLUMNS + ("centre",)
_DAY_S = float(K.SECONDS_PER_DAY)


@dataclass(frozen=True)
class _Track:
    """One target's states, sorted by epoch."""

    centre: str
    mjd: np.ndarray  # int64 (n,)
    sod_s: np.ndarray  # float64 (n,)
    key_s: np.ndarray  # float64 (n,): seconds since the first epoch (bracketing only)
    h_s: np.ndarray  # float64 (n-1,): interval lengths, two-part differences
    pos_m: np.ndarray  # (n, 3)
    vel_m_per_s: np.ndarray  # (n, 3)


def _seconds_between(mjd_a, sod_a, mjd_b, sod_b) -> np.ndarray:
    """t_b - t_a in seconds as (day difference) * 86400 + (sod difference)."""
    return (np.asarray(mjd_b, dtype=np.int64) - np.asarray(mjd_a, dtype=np.int64)).astype(np.float64) * _DAY_S + (
        np.asarray(sod_b, dtype=np.float64) - np.asarray(sod_a, dtype=np.float64)
    )


def _string_column(table: pa.Table, name: str, label: str) -> tuple[np.ndarray, list[str]]:
    """(codes int64, dictionary list of str) for a string / dictionary<string> column."""
    col = table.column(name)
    t = col.type
    if pa.types.is_dictionary(t):
        t = t.value_type
    if not (pa.types.is_string(t) or pa.types.is_large_string(t)):
        raise ValueError(f"{label}: column {name!r} has type {col.type}, expected string")
    if col.null_count:
        raise ValueError(f"{label}: column {name!r} has {col.null_count} null value(s)")
    arr = col.combine_chunks()
    if pa.types.is_dictionary(arr.type):
        arr = arr.dictionary_decode()
    enc = pc.dictionary_encode(arr)
    return enc.indices.to_numpy(zero_copy_only=False).astype(np.int64), enc.dictionary.to_pylist()


class StateTable:
    """Tabulated states of one or more targets (see the module docstring).

    Build with :func:`load_state_table` (Parquet file) or
    :meth:`StateTable.from_arrow`.  ``identity`` names the data for the
    manifest; ``targets`` lists the target names.
    """

    def __init__(self, tracks: dict[str, _Track], identity: dict):
        self._tracks = tracks
        self.identity = identity

    @property
    def targets(self) -> tuple[str, ...]:
        return tuple(self._tracks)

    def __contains__(self, target: str) -> bool:
        return target in self._tracks

    def centre(self, target: str) -> str:
        return self._tracks[target].centre

    def nodes(self, target: str):
        """The tabulated states of ``target``, sorted: (tdb_mjd, tdb_sod_s, pos_m, vel_m_per_s), relative to its centre."""
        tr = self._tracks[target]
        return tr.mjd, tr.sod_s, tr.pos_m, tr.vel_m_per_s

    def coverage_mjd(self, target: str) -> tuple[float, float]:
        """First and last epoch of ``target`` as float TDB MJD (display only)."""
        tr = self._tracks[target]
        return (float(tr.mjd[0]) + tr.sod_s[0] / _DAY_S, float(tr.mjd[-1]) + tr.sod_s[-1] / _DAY_S)

    def crosses_gap(self, target: str, mjd_a, sod_a, mjd_b, sod_b, max_gap_s: float) -> np.ndarray:
        """True where the span [a, b] (TDB, a <= b) overlaps an interval between
        tabulated epochs longer than ``max_gap_s`` -- although both ends may lie
        outside it (a count interval longer than the gap).  Vectorised:
        cumulative count of wide intervals, differenced at the ends' indices.
        False for an unknown target (reported elsewhere)."""
        mjd_a, sod_a, mjd_b, sod_b = np.broadcast_arrays(np.asarray(mjd_a), np.asarray(sod_a, dtype=float),
                                                         np.asarray(mjd_b), np.asarray(sod_b, dtype=float))
        tr = self._tracks.get(target)
        if tr is None or tr.mjd.size < 2:
            return np.zeros(mjd_a.shape, dtype=bool)
        wide = np.concatenate([[0], np.cumsum(tr.h_s > float(max_gap_s))])  # wide intervals before node k
        ka = np.searchsorted(tr.key_s, _seconds_between(tr.mjd[0], tr.sod_s[0], mjd_a, sod_a), side="right") - 1
        kb = np.searchsorted(tr.key_s, _seconds_between(tr.mjd[0], tr.sod_s[0], mjd_b, sod_b), side="left")
        m = tr.mjd.size
        ka = np.clip(ka, 0, m - 1)
        kb = np.clip(kb, 0, m - 1)
        return (wide[kb] - wide[ka]) > 0

    # -- construction ------------------------------------------------------
    @classmethod
    def from_arrow(cls, table: pa.Table, label: str = "<table>", identity: dict | None = None) -> "StateTable":
        """Validate an Arrow table in the state-table format and index it."""
        missing = [c for c in STATE_COLUMNS if c not in table.column_names]
        if missing:
            raise ValueError(f"{label}: missing column(s) {missing}; a state table needs {list(STATE_COLUMNS)}")
        mjd_col = table.column("tdb_mjd")
        if not pa.types.is_integer(mjd_col.type):
            raise ValueError(f"{label}: column 'tdb_mjd' has type {mjd_col.type}, expected int32")
        for name in ("tdb_mjd",) + _FLOAT_COLUMNS:
            col = table.column(name)
            if name != "tdb_mjd" and col.type != pa.float64():
                raise ValueError(f"{label}: column {name!r} has type {col.type}, expected float64")
            if col.null_count:
                raise ValueError(f"{label}: column {name!r} has {col.null_count} null value(s)")
        target_code, target_names = _string_column(table, "target", label)
        centre_code, centre_names = _string_column(table, "centre", label)
        mjd = mjd_col.to_numpy().astype(np.int64)
        f = {name: table.column(name).to_numpy() for name in _FLOAT_COLUMNS}
        for name, arr in f.items():
            bad = ~np.isfinite(arr)
            if bad.any():
                raise ValueError(
                    f"{label}: column {name!r} has {int(bad.sum())} non-finite value(s), "
                    f"first at row {int(np.argmax(bad))}"
                )
        sod = f["tdb_sod_s"]
        bad = (sod < 0.0) | (sod >= _DAY_S)
        if bad.any():
            i = int(np.argmax(bad))
            raise ValueError(f"{label}: tdb_sod_s must lie in [0, 86400) s; row {i} has {sod[i]!r}")
        unknown = sorted(set(centre_names) - set(CENTRES))
        if unknown:
            raise ValueError(f"{label}: unknown centre(s) {unknown}; known: {', '.join(CENTRES)}")

        order = np.lexsort((sod, mjd, target_code))
        tc = target_code[order]
        mjd, sod = mjd[order], sod[order]
        pos = np.stack([f["x_m"], f["y_m"], f["z_m"]], axis=1)[order]
        vel = np.stack([f["vx_m_per_s"], f["vy_m_per_s"], f["vz_m_per_s"]], axis=1)[order]
        cc = centre_code[order]
        # duplicate epochs of one target: equal (mjd, sod) next to each other after the sort
        dup = (tc[1:] == tc[:-1]) & (mjd[1:] == mjd[:-1]) & (sod[1:] == sod[:-1])
        if dup.any():
            i = int(np.argmax(dup))
            raise ValueError(
                f"{label}: target {target_names[tc[i]]!r} has {int(dup.sum())} duplicate epoch(s), "
                f"first at TDB MJD {mjd[i]} + {sod[i]!r} s; epochs must be strictly increasing"
            )
        bounds = np.flatnonzero(np.diff(tc)) + 1
        starts = np.concatenate([[0], bounds]) if tc.size else np.zeros(0, dtype=np.int64)
        ends = np.concatenate([bounds, [tc.size]]) if tc.size else np.zeros(0, dtype=np.int64)
        tracks: dict[str, _Track] = {}
        for a, b in zip(starts, ends):  # loop over targets
            name = target_names[tc[a]]
            centres = np.unique(cc[a:b])
            if centres.size != 1:
                raise ValueError(
                    f"{label}: target {name!r} has several centres {[centre_names[c] for c in centres]}; "
                    "one centre per target is required"
                )
            m, s = mjd[a:b], sod[a:b]
            tracks[name] = _Track(
                centre=centre_names[centres[0]],
                mjd=m,
                sod_s=s,
                key_s=_seconds_between(m[0], s[0], m, s),
                h_s=_seconds_between(m[:-1], s[:-1], m[1:], s[1:]),
                pos_m=np.ascontiguousarray(pos[a:b]),
                vel_m_per_s=np.ascontiguousarray(vel[a:b]),
            )
        ident = dict(identity) if identity else {"file": label}
        ident.setdefault("rows", int(table.num_rows))
        return cls(tracks, ident)

    # -- interpolation -----------------------------------------------------
    def posvel_centre_m(self, target: str, tdb_mjd, tdb_sod_s, max_gap_s: float):
        """State of ``target`` relative to its ``centre``, by eqs. (1)-(2).

        Returns (pos (n,3) m, vel (n,3) m/s, status uint8); rows with a
        non-zero status are NaN.  Status 1: before the first or after the
        last epoch (or a non-finite time); 2: inside an interval longer than
        ``max_gap_s`` (an instant exactly on a tabulated epoch is always
        ok); 3: ``target`` not in the table.
        """
        pos, vel, status, _ = self._interpolate(target, tdb_mjd, tdb_sod_s, max_gap_s, True)
        return pos, vel, status

    def displacement_centre_m(self, target: str, mjd_a, sod_a, mjd_b, sod_b, max_gap_s: float):
        """p(b) - p(a) of ``target`` relative to its centre, without forming the two large positions:
        (p_kb - p_ka) + [p(b) - p_kb] - [p(a) - p_ka], the brackets from eq. (1) without its node term,
        p_k the tabulated positions.  Exact to the rounding of the displacement itself (a plain difference
        of two interpolated positions of ~1e11 m carries their ulp, 3e-5 m).  Returns (displacement (n,3),
        status: the worse of the two ends)."""
        off_a, _, st_a, k_a = self._interpolate(target, mjd_a, sod_a, max_gap_s, False)
        off_b, _, st_b, k_b = self._interpolate(target, mjd_b, sod_b, max_gap_s, False)
        status = np.maximum(st_a, st_b)
        tr = self._tracks.get(target)
        if tr is None:
            return np.full(off_a.shape, np.nan), status
        return (tr.pos_m[k_b] - tr.pos_m[k_a]) + (off_b - off_a), status

    def _interpolate(self, target: str, tdb_mjd, tdb_sod_s, max_gap_s: float, add_node: bool):
        """(pos or, without ``add_node``, pos minus the interval's first node; vel; status; node index)."""
        mjd, sod = np.broadcast_arrays(np.asarray(tdb_mjd), np.asarray(tdb_sod_s, dtype=np.float64))
        mjd = mjd.ravel().astype(np.int64)
        sod = sod.ravel()
        n = mjd.size
        pos = np.full((n, 3), np.nan)
        vel = np.full((n, 3), np.nan)
        gap = float(max_gap_s)
        if not (gap > 0.0 and np.isfinite(gap)):
            raise ValueError(f"max_gap_s must be positive and finite, got {max_gap_s!r}")
        tr = self._tracks.get(target)
        if tr is None:
            return pos, vel, np.full(n, STATUS_UNKNOWN_TARGET, dtype=np.uint8), np.zeros(n, dtype=np.int64)
        status = np.zeros(n, dtype=np.uint8)
        m = tr.mjd.size
        tq = _seconds_between(tr.mjd[0], tr.sod_s[0], mjd, sod)  # bracketing key
        k = np.searchsorted(tr.key_s, tq, side="right") - 1  # key[k] <= tq < key[k+1]
        at_last = (k == m - 1) & (tq == tr.key_s[-1])
        outside = (k < 0) | ((k == m - 1) & ~at_last)  # NaN tq sorts past the end
        status[outside] = STATUS_OUTSIDE_COVERAGE
        if m == 1:  # a single epoch covers only itself
            pos[at_last] = tr.pos_m[0] if add_node else 0.0
            vel[at_last] = tr.vel_m_per_s[0]
            return pos, vel, status, np.zeros(n, dtype=np.int64)
        k = np.clip(k, 0, m - 2)
        # exact offset from the interval start (two-part difference)
        dt = _seconds_between(tr.mjd[k], tr.sod_s[k], mjd, sod)
        h = tr.h_s[k]
        on_node = (dt == 0.0) | at_last
        status[~outside & (h > gap) & ~on_node] = STATUS_IN_GAP
        s = dt / h
        s[at_last] = 1.0  # exact end node (dt is measured from node m-2 there)
        ok = status == STATUS_OK
        k_all = k
        if ok.all():
            idx = None
        else:
            idx = np.flatnonzero(ok)
            k, s, h = k[idx], s[idx], h[idx]
        out_p = pos if idx is None else np.empty((idx.size, 3))
        out_v = vel if idx is None else np.empty((idx.size, 3))
        # Blocks of records (not a loop over records) keep the ~20 temporaries
        # in cache: ~1.5x faster than whole-array steps on 1e6 instants.
        for lo in range(0, k.size, _BLOCK):
            sl = slice(lo, lo + _BLOCK)
            _hermite_block(tr.pos_m, tr.vel_m_per_s, k[sl], s[sl], h[sl], out_p[sl], out_v[sl], add_node)
        if idx is not None:
            pos[idx] = out_p
            vel[idx] = out_v
        return pos, vel, status, k_all

    def posvel_bcrs_m(self, target: str, tdb_mjd, tdb_sod_s, planetary: PlanetaryEphemeris, max_gap_s: float):
        """Barycentric (BCRS, ICRF axes) position (m), velocity (m/s) and status.

        Interpolated state relative to the target's centre (eqs. (1)-(2) of
        the module docstring) plus the centre's barycentric state from
        ``planetary`` at the same TDB instant (nothing added for "ssb").
        Status as in :meth:`posvel_centre_m`; instants where the centre lies
        outside the planetary ephemeris span get status 1.  Non-zero status:
        NaN rows.
        """
        pos, vel, status = self.posvel_centre_m(target, tdb_mjd, tdb_sod_s, max_gap_s)
        tr = self._tracks.get(target)
        if tr is None or tr.centre == "ssb":
            return pos, vel, status
        ok = status == STATUS_OK
        mjd, sod = np.broadcast_arrays(np.asarray(tdb_mjd), np.asarray(tdb_sod_s, dtype=np.float64))
        mjd, sod = mjd.ravel(), sod.ravel()
        all_ok = bool(ok.all())
        pc_m, vc_m_per_s = planetary.posvel_m(tr.centre, mjd if all_ok else mjd[ok], sod if all_ok else sod[ok])
        if all_ok:
            pos += pc_m
            vel += vc_m_per_s
        else:
            pos[ok] += pc_m
            vel[ok] += vc_m_per_s
        lost = ok.copy()
        lost[ok] = ~np.isfinite(pc_m[:, 0])
        if lost.any():
            status[lost] = STATUS_OUTSIDE_COVERAGE
            pos[lost] = np.nan
            vel[lost] = np.nan
        return pos, vel, status


_BLOCK = 16384  # records per Hermite block (speed only; results do not depend on it)


def _hermite_block(pos_tab, vel_tab, k, s, h, out_p, out_v, add_node: bool = True) -> None:
    """Eqs. (1)-(2) of the module docstring for one block, into out_p / out_v.

    k: interval index (nodes k, k+1), s = (t - t_k)/h in [0, 1], h: interval (s).
    Without ``add_node``, out_p is the position relative to node k (eq. (1) without p0).
    """
    s2 = s * s
    s3 = s2 * s
    h01 = 3.0 * s2 - 2.0 * s3
    h10 = s3 - 2.0 * s2 + s
    h11 = s3 - s2
    d01 = 6.0 * (s - s2) / h
    d10 = 3.0 * s2 - 4.0 * s + 1.0
    d11 = 3.0 * s2 - 2.0 * s
    p0 = pos_tab[k]
    dp = pos_tab[k + 1]
    dp -= p0
    v0 = vel_tab[k]
    v1 = vel_tab[k + 1]
    # eq. (1): p0 + H01 dp + h (H10 v0 + H11 v1)
    np.multiply(v0, h10[:, None], out=out_p)
    out_p += v1 * h11[:, None]
    out_p *= h[:, None]
    out_p += dp * h01[:, None]
    if add_node:
        out_p += p0
    # eq. (2): (H01'/h) dp + H10' v0 + H11' v1
    np.multiply(dp, d01[:, None], out=out_v)
    v0 *= d10[:, None]
    out_v += v0
    v1 *= d11[:, None]
    out_v += v1


def load_state_table(path: str | Path) -> StateTable:
    """Read and validate a state table (Parquet, format in the module docstring).

    ``identity``: {"file": file name, "sha256": of the file bytes, "rows"}.
    Raises ValueError naming the file for an unreadable file or bad content.
    """
    path = Path(path)
    try:
        table = pq.read_table(path)
    except (OSError, pa.ArrowException) as exc:
        raise ValueError(f"{path}: cannot read as Parquet: {exc}") from None
    ident = {"file": path.name, "sha256": sha256_of_file(path), "rows": int(table.num_rows)}
    return StateTable.from_arrow(table, label=str(path), identity=ident)


def target_posvel_bcrs_m(
    name: str,
    tdb_mjd,
    tdb_sod_s,
    planetary: PlanetaryEphemeris,
    max_gap_s: float,
    states: StateTable | None = None,
):
    """Barycentric state of ``name``: a state-table target first, then a body
    of the planetary ephemeris, else status 3 (unknown target).

    Returns (pos (n,3) m, vel (n,3) m/s, status uint8) as
    :meth:`StateTable.posvel_bcrs_m`; for a planetary body status is 0 inside
    the ephemeris span and 1 outside (``max_gap_s`` is then unused).
    """
    if states is not None and name in states:
        return states.posvel_bcrs_m(name, tdb_mjd, tdb_sod_s, planetary, max_gap_s)
    if name in BODIES:
        pos, vel = planetary.posvel_m(name, tdb_mjd, tdb_sod_s)
        status = np.where(np.isfinite(pos[:, 0]), STATUS_OK, STATUS_OUTSIDE_COVERAGE).astype(np.uint8)
        return pos, vel, status
    n = np.broadcast(np.asarray(tdb_mjd), np.asarray(tdb_sod_s)).size
    return np.full((n, 3), np.nan), np.full((n, 3), np.nan), np.full(n, STATUS_UNKNOWN_TARGET, dtype=np.uint8)
