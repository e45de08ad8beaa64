"""Raw record schemas (tracking, clock and orientation) and the columns ingest adds.

The names are relcorr's own; README.md, "Record schemas", documents them.
A raw file may carry extra columns: they are kept untouched.
"""
from __future__ import annotations

from dataclasses import dataclass

import pyarrow as pa

from stages.base import Column


@dataclass(frozen=True)
class RawColumn:
    name: str
    kind: str          # "id", "text", "time", "number"
    required: bool
    unit: str
    description: str


TRACKING = (
    RawColumn("record_id", "id", True, "", "unique identifier of the record (string or integer)"),
    RawColumn("station", "text", True, "", "receiving station (the station whose clock tagged the record); for link_* observables the receiving spacecraft"),
    RawColumn("target", "text", True, "", "spacecraft or solar-system body tracked"),
    RawColumn("observable", "text", True, "", "observable type, see TRACKING_OBSERVABLES"),
    RawColumn("time_tag", "time", True, "UTC", "reception time, UTC (Arrow timestamp or ISO 8601 string); for Doppler the end of the count"),
    RawColumn("value", "number", True, "see unit", "observed value"),
    RawColumn("unit", "text", True, "", "unit of value and uncertainty: s, m, Hz, or 1 (fractional frequency)"),
    RawColumn("uncertainty", "number", True, "see unit", "one-sigma uncertainty of value (>= 0)"),
    RawColumn("transmit_station", "text", False, "", "transmitting station of three-way records"),
    RawColumn("count_s", "number", False, "s", "Doppler: count interval ending at the time tag, station clock seconds (> 0)"),
    RawColumn("reference_frequency_hz", "number", False, "Hz", "Doppler: transmitted frequency (two-/three-way) or the spacecraft oscillator's nominal frequency (one-way); required when unit is Hz"),
    RawColumn("turnaround_ratio", "number", False, "", "Doppler two-/three-way: spacecraft transponder ratio M (null or absent: 1)"),
)

CLOCK = (
    RawColumn("record_id", "id", True, "", "unique identifier of the record (string or integer)"),
    RawColumn("remote_clock", "text", True, "", "the clock being characterised (e.g. on board a satellite)"),
    RawColumn("reference_clock", "text", True, "", "the ground reference clock it is compared with"),
    RawColumn("time_tag", "time", True, "UTC", "measurement epoch, UTC (Arrow timestamp or ISO 8601 string)"),
    RawColumn("observable", "text", True, "", "time_offset (remote - reference, s), fractional_frequency (remote - reference, dimensionless), or two_way_fractional_frequency (the same through a two-way link whose first-order Doppler cancels)"),
    RawColumn("value", "number", True, "s or 1", "observed value"),
    RawColumn("uncertainty", "number", True, "s or 1", "one-sigma uncertainty of value (>= 0)"),
    RawColumn("averaging_s", "number", False, "s", "averaging interval of fractional_frequency records (> 0)"),
)

ORIENTATION = (
    RawColumn("record_id", "id", True, "", "unique identifier of the record (string or integer)"),
    RawColumn("body", "text", True, "", "the orbiting body (gyroscope carrier, satellite) named in the orbit catalogue"),
    RawColumn("time_tag", "time", True, "UTC", "measurement epoch, UTC (Arrow timestamp or ISO 8601 string)"),
    RawColumn("observable", "text", True, "", "spin_axis (direction of a gyroscope's spin, GCRS), node_angle (right ascension of the ascending node, deg) or perigee_angle (argument of perigee, deg)"),
    RawColumn("uncertainty", "number", True, "deg", "one-sigma uncertainty (>= 0): of the angle, or the angular uncertainty of the spin direction, degrees"),
    RawColumn("dir_x", "number", False, "1", "spin_axis: direction, GCRS X component (a unit vector with dir_y, dir_z)"),
    RawColumn("dir_y", "number", False, "1", "spin_axis: direction, GCRS Y component"),
    RawColumn("dir_z", "number", False, "1", "spin_axis: direction, GCRS Z component"),
    RawColumn("ra_deg", "number", False, "deg", "spin_axis: right ascension of the direction (GCRS), used when dir_x/y/z are absent or null"),
    RawColumn("dec_deg", "number", False, "deg", "spin_axis: declination of the direction (GCRS), -90..90"),
    RawColumn("value", "number", False, "deg", "node_angle / perigee_angle: observed angle in degrees (required for them)"),
)

SCHEMAS = {"tracking": TRACKING, "clock": CLOCK, "orientation": ORIENTATION}

# observable -> allowed units
TRACKING_OBSERVABLES = {
    "range_one_way": ("s", "m"),
    "range_two_way": ("s", "m"),
    "range_three_way": ("s", "m"),
    # Doppler: value = f_received - M f_reference (Hz) or that over M f_reference (unit "1")
    "doppler_one_way": ("Hz", "1"),
    "doppler_two_way": ("Hz", "1"),
    "doppler_three_way": ("Hz", "1"),
    # links between two spacecraft: `station` names the receiving spacecraft, `target` the far one
    "link_range_one_way": ("s", "m"),
    "link_range_two_way": ("s", "m"),
}
#: observable types whose receiving end is a spacecraft, not a ground station
LINK_OBSERVABLES = ("link_range_one_way", "link_range_two_way")
CLOCK_OBSERVABLES = ("time_offset", "fractional_frequency", "two_way_fractional_frequency")
ORIENTATION_OBSERVABLES = ("spin_axis", "node_angle", "perigee_angle")

# the columns ingest adds to every record
INGEST_COLUMNS = (
    Column("utc_mjd", pa.int32(), "d", "UTC calendar day of the time tag, Modified Julian Date"),
    Column("utc_sod_ps", pa.int64(), "ps", "time of day of the time tag, UTC picoseconds since 00:00 (>= 86400e12 inside a leap second)"),
    Column("source_row", pa.int64(), "", "0-based row of the record in its raw input file"),
    Column("ledger", pa.string(), "", "steps that touched the record, as name@version joined by ';'"),
)

# reason codes of records quarantined by ingest
INGEST_REASONS = {
    "time_tag_missing": "time tag is null or empty",
    "time_tag_unparseable": "time tag is not ISO 8601 UTC as accepted (see README)",
    "time_tag_invalid_field": "a date or time field is out of range (e.g. 2021-02-29, 24:00:00, 12:59:60)",
    "time_tag_not_utc": "time tag carries a UTC offset other than zero",
    "time_tag_out_of_span": "time tag before 1972-01-01 or after the expiry of the leap-second table",
    "leap_second_invalid": "23:59:60 on a day that had no leap second",
    "record_id_missing": "record id is null or empty",
    "record_id_duplicate": "record id already used by an earlier record of the same input (first one kept)",
    "station_missing": "station (or transmit station of a three-way record) is null or empty",
    "target_missing": "target is null or empty",
    "clock_missing": "remote or reference clock is null or empty",
    "observable_unknown": "observable type is not one of the documented ones",
    "unit_invalid": "unit does not fit the observable",
    "value_not_finite": "value is null, NaN or infinite",
    "uncertainty_invalid": "uncertainty is null, NaN, infinite or negative",
    "averaging_invalid": "fractional-frequency (or two-way) record without a positive finite averaging interval",
    "count_interval_invalid": "Doppler record without a positive, finite count interval count_s",
    "reference_frequency_invalid": "Doppler record in Hz without a positive, finite reference_frequency_hz, or with a non-positive or non-finite turnaround_ratio",
    "body_missing": "orientation record whose body is null or empty",
    "direction_missing": "spin_axis record with neither all of dir_x, dir_y, dir_z nor both ra_deg and dec_deg",
    "direction_invalid": "spin_axis direction with a NaN or infinite component, the zero vector, or a declination outside -90..90 deg",
}
DOPPLER_OBSERVABLES = ("doppler_one_way", "doppler_two_way", "doppler_three_way")


def ingest_columns(record_kind: str) -> dict[str, pa.DataType | None]:
    """Columns every record has after ingest (None: type varies with the input)."""
    cols: dict[str, pa.DataType | None] = {}
    for c in SCHEMAS[record_kind]:
        if not c.required:
            continue
        cols[c.name] = {"text": pa.string(), "number": pa.float64(), "id": None, "time": None}[c.kind]
    for c in INGEST_COLUMNS:
        cols[c.name] = c.type
    return cols
