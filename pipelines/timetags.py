"""Normalisation of raw time tags to an exact (MJD, picoseconds-of-day) pair.

Time tags arrive in a raw Parquet column in one of two forms:

* an Arrow ``timestamp`` column of any unit (``s``, ``ms``, ``us``, ``ns``).
  A timestamp without a time zone is read as UTC; a tz-aware one is an
  absolute instant (Arrow always stores the UTC-based count, the zone is only
  display metadata), so both are handled identically;
* ISO 8601 / RFC 3339 strings in UTC (``string``, ``large_string`` or
  ``string_view``, optionally dictionary-encoded).

Both are normalised, without ever passing through a floating-point number of
days or seconds, to

``mjd``    int32, Modified Julian Date of the UTC calendar day
           (MJD 0 = 1858-11-17, i.e. MJD = JD - 2400000.5 at midnight);
``sod_ps`` int64, picoseconds elapsed since 00:00:00 UTC of that day.  It is
           normally below 86400e12 but may lie in [86400e12, 86401e12) when
           the tag is labelled ``23:59:60`` (a leap second).  Whether that day
           really ended with a leap second is *not* decided here: the caller
           checks ``leap_label`` rows against its leap-second table.

Each record also gets a ``status`` code (``OK`` or a reason why the tag
cannot be used); ``STATUS_REASON`` maps each code to a stable reason string
that callers put in quarantine records.  Values of ``mjd``/``sod_ps`` are 0
for every row whose status is not ``OK`` (MJD 0 is a real date: always
select rows by ``status``, never by the values).

Accepted string grammar (anchored, ASCII digits only, no surrounding blanks)::

    YYYY-MM-DD ( "T" | "t" | " " ) hh:mm:ss [ "." 1*12DIGIT ]
               [ "Z" | "z" | "+00:00" | "-00:00" ]

A missing zone designator means UTC.  The lower-case ``t``/``z`` are the
RFC 3339 section 5.6 allowances.  Status precedence, first match wins:

1. ``MISSING``        -- the value is null;
2. ``UNPARSEABLE``    -- the text does not follow the grammar, including a
   fraction of more than 12 digits (finer than a picosecond: refused rather
   than silently rounded);
3. ``NOT_UTC``        -- a syntactically valid ``+hh:mm``/``-hh:mm`` offset
   other than ``+00:00``/``-00:00`` (the fields are local time, which this
   module deliberately does not convert);
4. ``INVALID_FIELD``  -- year outside 1000..9999, month outside 1..12, day
   outside 1..days-in-month (proleptic Gregorian leap years), hour > 23,
   minute > 59, second > 59 except the exact label ``23:59:60``.

The whole module is vectorised: one anchored Arrow regex match validates
the text, then the fixed-position digits are read straight from the Arrow
offsets/data buffers with numpy, and the calendar is numpy integer
arithmetic.  There is no Python loop over records (``mjd_sod_to_iso``, a
display helper, is the one exception); ~1.5e6 strings/s on one core.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

__all__ = [
    "OK",
    "MISSING",
    "UNPARSEABLE",
    "INVALID_FIELD",
    "NOT_UTC",
    "STATUS_REASON",
    "MIN_YEAR",
    "MAX_YEAR",
    "MJD_MIN",
    "MJD_MAX",
    "PS_PER_SECOND",
    "PS_PER_DAY",
    "ParsedTags",
    "civil_to_mjd",
    "mjd_to_civil",
    "parse_iso_utc",
    "timestamps_to_utc",
    "normalise_time_tags",
    "mjd_sod_to_iso",
]

# --------------------------------------------------------------------------
# Status codes
# --------------------------------------------------------------------------
OK = 0
MISSING = 1
UNPARSEABLE = 2
INVALID_FIELD = 3
NOT_UTC = 4

#: code -> stable reason string (None for OK); used verbatim in quarantine files
STATUS_REASON: dict[int, str | None] = {
    OK: None,
    MISSING: "time_tag_missing",
    UNPARSEABLE: "time_tag_unparseable",
    INVALID_FIELD: "time_tag_invalid_field",
    NOT_UTC: "time_tag_not_utc",
}

MIN_YEAR = 1000
MAX_YEAR = 9999

PS_PER_SECOND = 10**12
PS_PER_DAY = 86_400 * PS_PER_SECOND

#: MJD of 1970-01-01, the epoch of Arrow/POSIX timestamps
_MJD_UNIX_EPOCH = 40_587
#: Julian Day Number (the day starting at the preceding noon) minus MJD of
#: the calendar day beginning at midnight: MJD 0 = 1858-11-17 has JDN 2400001
_JDN_MINUS_MJD = 2_400_001

_FRACTION_DIGITS_MAX = 12

# Full grammar, used as a single anchored validity test (RE2 syntax: "$" is
# end-of-text only, "[0-9]" is ASCII only).  A fraction of 13+ digits fails
# the match and is therefore UNPARSEABLE.  The offset alternative accepts any
# "+hh:mm"/"-hh:mm" so that non-UTC offsets can be told apart afterwards.
_ISO_PATTERN = (
    r"^[0-9]{4}-[0-9]{2}-[0-9]{2}[Tt ][0-9]{2}:[0-9]{2}:[0-9]{2}"
    r"(?:\.[0-9]{1,12})?"
    r"(?:[Zz]|[+-][0-9]{2}:[0-9]{2})?$"
)
# Byte positions of the fixed-width fields once the pattern has matched:
# YYYY-MM-DDThh:mm:ss
# 0123456789012345678
_FIELD_POS = {
    "year": (0, 4),
    "month": (5, 2),
    "day": (8, 2),
    "hour": (11, 2),
    "minute": (14, 2),
    "second": (17, 2),
}
_FIXED_LEN = 19  # length of "YYYY-MM-DDThh:mm:ss"


@dataclass(frozen=True)
class ParsedTags:
    """Normalised time tags, one entry per input row (all arrays equal length).

    ``mjd`` (int32) and ``sod_ps`` (int64) are 0 where ``status != OK``.
    ``leap_label`` (bool) is True only for OK rows labelled ``23:59:60``;
    those have ``sod_ps >= PS_PER_DAY`` and must be validated by the caller
    against a leap-second table.
    """

    mjd: np.ndarray
    sod_ps: np.ndarray
    status: np.ndarray
    leap_label: np.ndarray

    def __len__(self) -> int:
        return int(self.status.shape[0])

    @property
    def ok(self) -> np.ndarray:
        """Boolean mask of rows with status ``OK``."""
        return self.status == OK

    def reasons(self) -> list[str | None]:
        """Reason string per row (None for OK rows); for small outputs."""
        table = np.array([STATUS_REASON[k] for k in sorted(STATUS_REASON)], dtype=object)
        return table[self.status].tolist()


def _empty(n: int) -> ParsedTags:
    return ParsedTags(
        mjd=np.zeros(n, dtype=np.int32),
        sod_ps=np.zeros(n, dtype=np.int64),
        status=np.zeros(n, dtype=np.uint8),
        leap_label=np.zeros(n, dtype=bool),
    )


def _concat(parts: list[ParsedTags]) -> ParsedTags:
    if not parts:
        return _empty(0)
    if len(parts) == 1:
        return parts[0]
    return ParsedTags(
        mjd=np.concatenate([p.mjd for p in parts]),
        sod_ps=np.concatenate([p.sod_ps for p in parts]),
        status=np.concatenate([p.status for p in parts]),
        leap_label=np.concatenate([p.leap_label for p in parts]),
    )


def _take(parsed: ParsedTags, indices: np.ndarray) -> ParsedTags:
    return ParsedTags(
        mjd=parsed.mjd[indices],
        sod_ps=parsed.sod_ps[indices],
        status=parsed.status[indices],
        leap_label=parsed.leap_label[indices],
    )


# --------------------------------------------------------------------------
# Calendar arithmetic (integers only)
# --------------------------------------------------------------------------
def civil_to_mjd(year, month, day) -> np.ndarray:
    """MJD (int64) of proleptic Gregorian dates, vectorised.

    Uses the integer Julian Day Number formula of Fliegel & Van Flandern
    (1968, Comm. ACM 11, 657)::

        a   = (month - 14) / 12                      (Fortran: truncating)
        JDN = day - 32075 + 1461*(year + 4800 + a)/4
                         + 367*(month - 2 - 12*a)/12
                         - 3*((year + 4900 + a)/100)/4

    ``a`` is -1 for January/February and 0 otherwise; it is written out
    explicitly because numpy's ``//`` floors where Fortran truncates.  With
    that substitution every remaining dividend is positive for years >= -4800,
    so floor and truncation agree.  MJD = JDN - 2400001 (JDN 2400001 is the
    day 1858-11-17 = MJD 0).  Inputs are not range-checked here.
    """
    y = np.asarray(year, dtype=np.int64)
    m = np.asarray(month, dtype=np.int64)
    d = np.asarray(day, dtype=np.int64)
    a = -(m <= 2).astype(np.int64)
    jdn = (
        d
        - 32_075
        + 1_461 * (y + 4_800 + a) // 4
        + 367 * (m - 2 - 12 * a) // 12
        - 3 * ((y + 4_900 + a) // 100) // 4
    )
    return jdn - _JDN_MINUS_MJD


def mjd_to_civil(mjd) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Inverse of :func:`civil_to_mjd`: (year, month, day) int64 arrays.

    Fliegel & Van Flandern (1968, Comm. ACM 11, 657) inverse::

        L = JDN + 68569;  N = 4L/146097;  L = L - (146097N + 3)/4
        I = 4000(L + 1)/1461001;  L = L - 1461I/4 + 31;  J = 80L/2447
        day = L - 2447J/80;  L = J/11;  month = J + 2 - 12L
        year = 100(N - 49) + I + L

    All dividends are positive for JDN > 0 (i.e. any date after 4713 BC),
    so numpy's floor division equals the original truncating division.
    """
    jdn = np.asarray(mjd, dtype=np.int64) + _JDN_MINUS_MJD
    ell = jdn + 68_569
    n = 4 * ell // 146_097
    ell = ell - (146_097 * n + 3) // 4
    i = 4_000 * (ell + 1) // 1_461_001
    ell = ell - 1_461 * i // 4 + 31
    j = 80 * ell // 2_447
    day = ell - 2_447 * j // 80
    ell = j // 11
    month = j + 2 - 12 * ell
    year = 100 * (n - 49) + i + ell
    return year, month, day


#: MJD range accepted everywhere in this module (years 1000..9999)
MJD_MIN = int(civil_to_mjd(MIN_YEAR, 1, 1))
MJD_MAX = int(civil_to_mjd(MAX_YEAR, 12, 31))

# days per month, index 1..12 (index 0 unused)
_DAYS_IN_MONTH = np.array([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.int64)


def _days_in_month(year: np.ndarray, month: np.ndarray) -> np.ndarray:
    """Days in month (Gregorian rule); month must already be within 1..12."""
    leap = ((year % 4 == 0) & (year % 100 != 0)) | (year % 400 == 0)
    return _DAYS_IN_MONTH[month] + (leap & (month == 2))


# --------------------------------------------------------------------------
# ISO 8601 strings
# --------------------------------------------------------------------------
def _as_chunks(arr) -> list[pa.Array]:
    if isinstance(arr, pa.ChunkedArray):
        return list(arr.chunks)
    if isinstance(arr, pa.Array):
        return [arr]
    raise TypeError(
        f"time tags must be a pyarrow Array or ChunkedArray, got {type(arr).__name__}"
    )


def _is_string_type(t: pa.DataType) -> bool:
    return pa.types.is_string(t) or pa.types.is_large_string(t) or pa.types.is_string_view(t)


def _parse_iso_chunk(arr: pa.Array) -> ParsedTags:
    if pa.types.is_dictionary(arr.type):
        # Parse each distinct string once, then broadcast through the indices.
        parsed_dict = _parse_iso_chunk(arr.dictionary)
        idx = arr.indices
        idx_valid = np.asarray(pc.is_valid(idx).to_numpy(zero_copy_only=False), dtype=bool)
        idx_np = idx.fill_null(0).to_numpy(zero_copy_only=False).astype(np.int64)
        if len(arr.dictionary) == 0:
            out = _empty(len(arr))
        else:
            out = _take(parsed_dict, idx_np)
        status = out.status.copy()
        status[~idx_valid] = MISSING
        keep = status == OK
        return ParsedTags(
            mjd=np.where(keep, out.mjd, 0).astype(np.int32),
            sod_ps=np.where(keep, out.sod_ps, 0).astype(np.int64),
            status=status,
            leap_label=out.leap_label & keep,
        )

    if pa.types.is_string_view(arr.type):
        arr = arr.cast(pa.large_string())

    n = len(arr)
    res = _empty(n)
    if n == 0:
        return res
    status = res.status
    valid = np.asarray(pc.is_valid(arr).to_numpy(zero_copy_only=False), dtype=bool)
    status[~valid] = MISSING

    # 1. grammar: one vectorised regex match (nulls -> null -> False)
    matched = np.asarray(
        pc.match_substring_regex(arr, _ISO_PATTERN).fill_null(False).to_numpy(
            zero_copy_only=False
        ),
        dtype=bool,
    )
    status[valid & ~matched] = UNPARSEABLE
    rows = np.flatnonzero(matched)
    if rows.size == 0:
        return res

    # 2. the pattern guarantees fixed byte positions, so the fields are read
    #    straight from the Arrow offsets + data buffers with numpy gathers
    off_dtype = np.int64 if pa.types.is_large_string(arr.type) else np.int32
    bufs = arr.buffers()
    offsets = np.frombuffer(bufs[1], dtype=off_dtype)[arr.offset : arr.offset + n + 1]
    data = np.frombuffer(bufs[2], dtype=np.uint8)
    start = offsets[:-1][rows].astype(np.int64)
    length = offsets[1:][rows].astype(np.int64) - start

    # One gather copies, for every matched row, the 19 fixed bytes, the '.'
    # and 12 possible fraction digits (a sliding-window view of the data
    # buffer indexed by the row starts: no per-byte index matrix).  The buffer
    # is copied once with a '0' tail so that windows never run off its end;
    # bytes beyond a string's own end are masked out below.
    width = _FIXED_LEN + 1 + _FRACTION_DIGITS_MAX
    padded = np.full(data.size + width, ord("0"), dtype=np.uint8)
    padded[: data.size] = data
    win = np.lib.stride_tricks.sliding_window_view(padded, width)[start]
    del padded

    win -= ord("0")  # now digit values (other bytes wrap, never used as digits)

    def number(pos: int, ndig: int) -> np.ndarray:
        value = win[:, pos].astype(np.int32)
        for k in range(pos + 1, pos + ndig):  # loop over digit positions
            value *= 10
            value += win[:, k]
        return value

    year = number(*_FIELD_POS["year"])
    month = number(*_FIELD_POS["month"])
    day = number(*_FIELD_POS["day"])
    hour = number(*_FIELD_POS["hour"])
    minute = number(*_FIELD_POS["minute"])
    second = number(*_FIELD_POS["second"])

    # zone designator: "Z"/"z" (1 byte), "+hh:mm"/"-hh:mm" (6 bytes) or none.
    # After a match, a '+'/'-' six bytes from the end can only be an offset.
    end = start + length
    last = data[end - 1]
    zone_len = np.where((last == ord("Z")) | (last == ord("z")), 1, 0)
    sign = data[np.maximum(end - 6, 0)]
    has_offset = (length >= _FIXED_LEN + 6) & ((sign == ord("+")) | (sign == ord("-")))
    zone_len = np.where(has_offset, 6, zone_len)
    # UTC offsets are exactly "+00:00" / "-00:00"
    zero_offset = np.ones(rows.size, dtype=bool)
    for k in (5, 4, 2, 1):  # the hh and mm digit bytes of "+hh:mm"
        zero_offset &= data[np.maximum(end - k, 0)] == ord("0")
    utc = ~has_offset | zero_offset

    # fraction: digits between the '.' at byte 19 and the zone; right-padded
    # with zeros to 12 digits its integer value is the picosecond count
    n_frac = length - zone_len - (_FIXED_LEN + 1)  # -1 when there is no '.'
    frac = win[:, _FIXED_LEN + 1 :]
    frac[np.arange(_FRACTION_DIGITS_MAX) >= n_frac[:, None]] = 0  # right-pad with 0s
    half = _FRACTION_DIGITS_MAX // 2  # two 6-digit halves fit int32 exactly
    frac_ps = number(_FIXED_LEN + 1, half).astype(np.int64) * 10**half
    frac_ps += number(_FIXED_LEN + 1 + half, half)
    del win

    # 3. field ranges
    month_ok = (month >= 1) & (month <= 12)
    dim = _days_in_month(year, np.where(month_ok, month, 1))
    leap = (hour == 23) & (minute == 59) & (second == 60)
    fields_ok = (
        (year >= MIN_YEAR)
        & (year <= MAX_YEAR)
        & month_ok
        & (day >= 1)
        & (day <= dim)
        & (hour <= 23)
        & (minute <= 59)
        & ((second <= 59) | leap)
    )

    sub_status = np.full(rows.size, OK, dtype=np.uint8)
    sub_status[~fields_ok] = INVALID_FIELD
    sub_status[~utc] = NOT_UTC  # takes precedence over INVALID_FIELD
    good = sub_status == OK

    mjd = civil_to_mjd(year, np.where(month_ok, month, 1), day)
    sod = ((hour * 60 + minute) * 60 + second).astype(np.int64) * PS_PER_SECOND + frac_ps

    status[rows] = sub_status
    res.mjd[rows] = np.where(good, mjd, 0)
    res.sod_ps[rows] = np.where(good, sod, 0)
    res.leap_label[rows] = good & leap
    return res


def parse_iso_utc(arr) -> ParsedTags:
    """Parse ISO 8601 UTC strings (see module docstring for the grammar).

    ``arr`` is a ``pa.Array`` or ``pa.ChunkedArray`` of ``string``,
    ``large_string`` or ``string_view``, possibly dictionary-encoded.
    """
    chunks = _as_chunks(arr)
    for c in chunks:
        t = c.type.value_type if pa.types.is_dictionary(c.type) else c.type
        if not _is_string_type(t):
            raise TypeError(f"parse_iso_utc expects a string column, found {c.type}")
    return _concat([_parse_iso_chunk(c) for c in chunks])


# --------------------------------------------------------------------------
# Arrow timestamps
# --------------------------------------------------------------------------
_PS_PER_UNIT = {"s": 10**12, "ms": 10**9, "us": 10**6, "ns": 10**3}


def _timestamps_chunk(arr: pa.Array) -> ParsedTags:
    unit = arr.type.unit
    ps_per_unit = _PS_PER_UNIT[unit]
    units_per_day = PS_PER_DAY // ps_per_unit
    n = len(arr)
    res = _empty(n)
    if n == 0:
        return res
    valid = np.asarray(pc.is_valid(arr).to_numpy(zero_copy_only=False), dtype=bool)
    # The stored integer is the count of units since 1970-01-01T00:00:00 UTC,
    # whatever the tz metadata says.
    ticks = pc.cast(arr, pa.int64()).fill_null(0).to_numpy(zero_copy_only=False)
    days = ticks // units_per_day  # floor: correct before 1970 too
    rem = ticks - days * units_per_day  # 0 <= rem < units_per_day
    mjd = days + _MJD_UNIX_EPOCH
    in_range = (mjd >= MJD_MIN) & (mjd <= MJD_MAX)

    status = res.status
    status[valid & ~in_range] = INVALID_FIELD
    status[~valid] = MISSING
    good = status == OK
    res.mjd[:] = np.where(good, mjd, 0)
    res.sod_ps[:] = np.where(good, rem * ps_per_unit, 0)
    return res


def timestamps_to_utc(arr) -> ParsedTags:
    """Split Arrow timestamps (s/ms/us/ns, any tz) into exact (mjd, sod_ps).

    The split is an exact integer floor division of the epoch count, so
    instants before 1970 land on the correct (earlier) day with a
    non-negative ``sod_ps``.  Nulls give ``MISSING``; instants outside the
    years 1000..9999 give ``INVALID_FIELD`` (same domain as the string path).

    Note: Arrow/POSIX timestamps count every day as exactly 86400 s, so they
    cannot express a ``23:59:60`` leap second; ``leap_label`` is always False
    and ``sod_ps`` is always below 86400e12 here.  An instant inside a leap
    second is simply not representable in such a column.
    """
    chunks = _as_chunks(arr)
    for c in chunks:
        if not pa.types.is_timestamp(c.type):
            raise TypeError(f"timestamps_to_utc expects a timestamp column, found {c.type}")
        if c.type.unit not in _PS_PER_UNIT:  # pragma: no cover - Arrow has only 4 units
            raise TypeError(f"unsupported timestamp unit {c.type.unit!r}")
    return _concat([_timestamps_chunk(c) for c in chunks])


# --------------------------------------------------------------------------
# Dispatch
# --------------------------------------------------------------------------
_ACCEPTED = (
    "timestamp[s|ms|us|ns] (tz-naive = UTC, or tz-aware), "
    "or string/large_string/string_view (optionally dictionary-encoded) "
    "holding ISO 8601 UTC"
)


def normalise_time_tags(arr) -> ParsedTags:
    """Normalise a raw time-tag column, dispatching on its Arrow type.

    Raises ``TypeError`` naming the found type and the accepted ones for any
    other column type (the caller reports it as a file-level error).
    """
    _as_chunks(arr)  # rejects non-Arrow inputs with a clear message
    t = arr.type
    value_type = t.value_type if pa.types.is_dictionary(t) else t
    if pa.types.is_timestamp(t):
        return timestamps_to_utc(arr)
    if _is_string_type(value_type):
        return parse_iso_utc(arr)
    raise TypeError(f"unsupported time-tag column type {t}; accepted: {_ACCEPTED}")


# --------------------------------------------------------------------------
# Display helper
# --------------------------------------------------------------------------
def mjd_sod_to_iso(mjd, sod_ps, digits: int = 9) -> list[str]:
    """Format (mjd, sod_ps) pairs as ``YYYY-MM-DDThh:mm:ss[.f]Z`` strings.

    For messages and tests only (loops in Python).  The fraction is
    truncated, never rounded, to ``digits`` (0..12) decimals so that no carry
    can move a value into the next second.  ``sod_ps >= 86400e12`` prints as
    ``23:59:60...`` (a leap-second label).
    """
    if not 0 <= digits <= _FRACTION_DIGITS_MAX:
        raise ValueError("digits must be within 0..12")
    mjd_a = np.atleast_1d(np.asarray(mjd, dtype=np.int64))
    sod_a = np.atleast_1d(np.asarray(sod_ps, dtype=np.int64))
    mjd_a, sod_a = np.broadcast_arrays(mjd_a, sod_a)
    year, month, day = mjd_to_civil(mjd_a)
    out = []
    for y, mo, d, s in zip(year.tolist(), month.tolist(), day.tolist(), sod_a.tolist()):
        whole, frac = divmod(int(s), PS_PER_SECOND)
        if whole >= 86_400:
            hh, mm, ss = 23, 59, 60 + (whole - 86_400)
        else:
            hh, rest = divmod(whole, 3600)
            mm, ss = divmod(rest, 60)
        text = f"{y:04d}-{mo:02d}-{d:02d}T{hh:02d}:{mm:02d}:{ss:02d}"
        if digits:
            text += "." + f"{frac:012d}"[:digits]
        out.append(text + "Z")
    return out
